"""Sparse-linear family against published worked examples and statsmodels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from glassbox import artifact, fit_model
from glassbox.errors import OptionError
from glassbox.families import sparse
from glassbox.schema import Schema, prepare


def schema_of(target: str, positive, features: dict[str, str]) -> Schema:
    return Schema.from_dict({
        "target": {"column": target, "task": "classification", "positive": positive},
        "feature": {name: {"kind": kind} for name, kind in features.items()},
    })


def per_unit(model) -> tuple[float, dict[str, float]]:
    details = model.metadata["details"]
    return details["intercept_per_unit"], details["coefficients_per_unit"]


def statsmodels_logit(frame: pd.DataFrame, target: np.ndarray, columns: list[str]):
    design = sm.add_constant(frame[columns].astype(float))
    return sm.Logit(target, design).fit(disp=0, method="newton", tol=1e-12, maxiter=100)


def test_islr_default_table_4_3(islr_default):
    # James, Witten, Hastie & Tibshirani, An Introduction to Statistical Learning,
    # Table 4.3 (from memory): intercept -10.8690, balance 0.0057, income 0.0030 per
    # $1,000, student[Yes] -0.6468.
    schema = schema_of("default", "Yes",
                       {"balance": "number", "income": "number", "student": "flag"})
    model = fit_model(islr_default, schema, "sparse")
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
    model = fit_model(islr_default, schema, "sparse")
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
    model = fit_model(mroz, schema, "sparse")
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
    model = fit_model(hmda, schema, "sparse")
    intercept, coefs = per_unit(model)
    assert intercept == pytest.approx(-4.13, abs=5e-3)
    assert coefs["pirat"] == pytest.approx(5.37, abs=5e-3)
    assert coefs["afam"] == pytest.approx(1.27, abs=5e-3)


def test_tables_reproduce_sklearn_model_to_1e_9(mroz, tmp_path):
    # The model file's tables against scikit-learn's own fitted estimator, inside the
    # training range (exact by construction; reference: scikit-learn).
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    prepared = prepare(mroz, schema)
    estimator, design, chosen, _ = sparse.fit_estimator(
        prepared.features, prepared.target, schema, task="classification")
    model = artifact.load(artifact.save(fit_model(mroz, schema), tmp_path / "m.json"))
    rows = np.random.default_rng(0).uniform(size=(200, len(MROZ_COLUMNS)))
    low, high = mroz[MROZ_COLUMNS].min().to_numpy(), mroz[MROZ_COLUMNS].max().to_numpy()
    fresh = pd.DataFrame(low + rows * (high - low), columns=MROZ_COLUMNS)
    standard = (fresh.to_numpy() - design.centre) / design.scale
    np.testing.assert_allclose(model.score(fresh), estimator.decision_function(standard),
                               rtol=0, atol=1e-9)


def test_regression_matches_statsmodels_ols(mroz):
    # Least squares of hours on the same regressors; reference: statsmodels OLS.
    schema = Schema.from_dict({
        "target": {"column": "hours", "task": "regression"},
        "feature": {name: {"kind": "number"} for name in MROZ_COLUMNS},
    })
    model = fit_model(mroz, schema, "sparse")
    reference = sm.OLS(mroz["hours"].astype(float),
                       sm.add_constant(mroz[MROZ_COLUMNS].astype(float))).fit()
    intercept, coefs = per_unit(model)
    assert intercept == pytest.approx(reference.params["const"], rel=1e-8)
    for name in MROZ_COLUMNS:
        assert coefs[name] == pytest.approx(reference.params[name], rel=1e-8)
    np.testing.assert_allclose(model.predict(mroz), reference.fittedvalues, atol=1e-8)


@pytest.mark.parametrize("limit", [1, 2, 3])
def test_max_features_limits_the_model_and_follows_the_l1_path(mroz, limit):
    schema = schema_of("inlf", 1, {name: "number" for name in MROZ_COLUMNS})
    model = fit_model(mroz, schema, "sparse", max_features=limit)
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
        "target": {"column": "hours", "task": "regression"},
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
