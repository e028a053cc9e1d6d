"""Tests for recourse.candidates against brute force, numpy/scipy and the model's own scoring.

Models are fitted on the invented demo loans (tests/conftest.py): the spline family gives
curve terms, the boosted family step terms; both give a levels term for `sector`. What
is checked is not the data but the candidate lists: brute-force enumeration of the step
grid, numpy.interp / an independent bin count for the tables, numpy (cross-checked with
scipy.stats.percentileofscore) for the training CDF, and re-scoring the changed row.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import iqr, median_abs_deviation, percentileofscore

import glassbox
from glassbox.additive import FeatureProfile
from recourse.candidates import (
    Candidate,
    feature_candidates,
    row_candidates,
)
from recourse.errors import MutabilityError
from recourse.mutability import FeatureRule, Mutability, mutability_from_dict, unit_spread

NUMERIC = ("annual_revenue", "years_trading", "debt_to_revenue", "credit_utilisation",
           "late_payments_24m", "amount_requested", "premises_owned")
ROWS = (0, 3, 17, 250, 1234, 4999)


@pytest.fixture(scope="module")
def spline(loans, loans_schema):
    return glassbox.fit_model(loans, loans_schema, "spline")


@pytest.fixture(scope="module")
def boosted(loans, loans_schema):
    return glassbox.fit_model(loans, loans_schema, "boosted")


@pytest.fixture(scope="module")
def training(spline, loans):
    return spline.encode(loans)


def _raw(feature: str, value) -> object:
    """A candidate value written as the CSV writes it (flags as yes/no)."""
    if feature == "premises_owned":
        return "yes" if value == 1 else "no"
    return value


def _bin(edges, value: float) -> int:
    """Bin index by counting edges strictly below (value i covers edges[i-1] < x <= edges[i])."""
    return int(sum(edge < value for edge in edges))


def _grid(current, step, lower, upper, largest=None, change="either"):
    """Brute force: every point current + k*step inside the limits (rounded to 12 decimals,
    as the grid is defined, so float noise such as 0.1 + 0.2 does not straddle an edge)."""
    low, high = lower, upper
    if largest is not None:
        low, high = max(low, current - largest), min(high, current + largest)
    ks = range(math.floor((low - current) / step) - 1, math.ceil((high - current) / step) + 2)
    points = [round(current + k * step, 12) for k in ks]
    points = [p for p in points if low - 1e-9 <= p <= high + 1e-9]
    if change == "increase":
        points = [p for p in points if p > current]
    if change == "decrease":
        points = [p for p in points if p < current]
    return points


# ---------------------------------------------------------------- contributions


@pytest.mark.parametrize("family", ["spline", "boosted"])
def test_contributions_equal_the_model_rescoring_the_changed_row(family, request, loans):
    model = request.getfixturevalue(family)
    rule_data = {name: {"change": "either", "cost": 2.5} for name in NUMERIC}
    rule_data["credit_utilisation"].update(step=0.05, lower=0.0, upper=1.0)
    rule_data["sector"] = {"change": "either"}
    mutability = mutability_from_dict({"feature": rule_data}, model)
    for index in ROWS:
        row = loans.iloc[index]
        found = row_candidates(model, row, mutability)
        assert set(found) == set(model.features)
        base = float(model.score(pd.DataFrame([row]))[0])
        for feature, candidates in found.items():
            changed = pd.DataFrame([row] * len(candidates)).reset_index(drop=True)
            changed[feature] = [_raw(feature, c.value) for c in candidates]
            expected = model.contributions(changed)[feature].to_numpy()
            got = np.array([c.contribution for c in candidates])
            assert np.array_equal(got, expected), (family, index, feature)
            shift = model.score(changed) - base
            assert np.allclose(shift, got - got[0], atol=1e-12)
            if feature != "sector":  # unit cost: 2.5 per unit moved (the rule's definition)
                values = np.array([c.value for c in candidates], dtype=float)
                costs = np.array([c.cost for c in candidates])
                assert np.allclose(costs, 2.5 * np.abs(values - values[0]))


def test_tables_read_like_numpy_interp_and_an_independent_bin_count(spline, boosted, training):
    rule = FeatureRule("debt_to_revenue", "either", 0.0, 3.0, 0.05)
    current = float(training["debt_to_revenue"].iloc[3])
    curve = spline.term("debt_to_revenue")
    for c in feature_candidates(spline, "debt_to_revenue", current, rule):
        # numpy.interp on the curve's (knots, values), clamped at the ends.
        assert c.contribution == pytest.approx(np.interp(c.value, curve.knots, curve.values))
    steps = boosted.term("debt_to_revenue")
    for c in feature_candidates(boosted, "debt_to_revenue", current, rule):
        assert c.contribution == steps.values[_bin(steps.edges, c.value)]


# ---------------------------------------------------------------- costs


def _mid_rank(column: np.ndarray, value: float) -> float:
    """Percent of the column below `value`, counting ties as half: the mean percentile rank."""
    return 50.0 * (np.mean(column < value) + np.mean(column <= value))


def test_numpy_mid_rank_agrees_with_scipy(training):
    column = training["late_payments_24m"].to_numpy()
    for value in (0.0, 1.0, 2.5, 12.0, 13.0):
        # scipy.stats.percentileofscore(kind="mean") is the reference definition.
        assert _mid_rank(column, value) == pytest.approx(percentileofscore(column, value,
                                                                          kind="mean"))


@pytest.mark.parametrize("feature", NUMERIC)
def test_percentile_cost_is_the_move_along_the_training_cdf(spline, training, feature):
    column = training[feature].to_numpy()
    profile = spline.profile(feature)
    rule = FeatureRule(feature, "either", float(column.min()) - 1, float(column.max()) + 1)
    for index in ROWS:
        current = float(column[index])
        candidates = feature_candidates(spline, feature, current, rule)
        for c in candidates:
            truth = abs(_mid_rank(column, float(c.value)) - _mid_rank(column, current))
            # Approximate: the profile keeps only 101 percentiles, and between two stored
            # points the CDF is known to within one percentile step, so 1 point per end.
            assert c.cost == pytest.approx(truth, abs=2.0), (feature, current, c.value)
    values = np.unique(np.concatenate([column, np.linspace(column.min() - 1,
                                                           column.max() + 1, 500)]))
    ranks = profile.percentile_of(values)
    truth = np.array([_mid_rank(column, v) for v in values])
    assert np.max(np.abs(ranks - truth)) <= 1.0 + 1.0 / len(column)


def test_spread_cost_counts_standard_deviations_estimated_from_the_mad(spline, training):
    # scipy.stats.median_abs_deviation(scale="normal") is MAD / 0.67449: the normal-consistent
    # estimate of the standard deviation, the unit of cost "spread".
    column = training["credit_utilisation"].to_numpy()
    unit = median_abs_deviation(column, scale="normal")
    rule = FeatureRule("credit_utilisation", "either", 0.0, 1.0, 0.1, cost="spread")
    current = float(column[3])
    for c in feature_candidates(spline, "credit_utilisation", current, rule):
        assert c.cost == pytest.approx(abs(c.value - current) / unit)


def test_spread_falls_back_on_the_same_scale_when_the_deviation_is_zero(spline, training):
    # late_payments_24m: most rows are 0, so the MAD is 0 (numpy says so); the spread
    # falls back to scipy.stats.iqr(scale="normal"), IQR / 1.349, the same scale.
    column = training["late_payments_24m"].to_numpy()
    assert np.median(np.abs(column - np.median(column))) == 0
    unit = iqr(column, scale="normal")
    assert unit > 0
    assert unit_spread(spline.profile("late_payments_24m")) == pytest.approx(unit)
    rule = FeatureRule("late_payments_24m", "either", 0.0, 12.0, cost="spread")
    for c in feature_candidates(spline, "late_payments_24m", 2.0, rule):
        assert c.cost == pytest.approx(abs(c.value - 2.0) / unit)
    # Constructed profiles: with both at 0, the standard deviation from exact value counts
    # (numpy.std of the rows they stand for); with no counts, no spread at all.
    rows = np.array([0.0] * 90 + [1.0] * 10)
    flag = FeatureProfile("x", "flag", percentiles=tuple(np.percentile(rows, range(101))),
                          spread=0.0, value_counts=((0.0, 90), (1.0, 10)))
    assert unit_spread(flag) == pytest.approx(np.std(rows))
    flat_middle = FeatureProfile("x", "number", percentiles=(0.0,) + (5.0,) * 99 + (8.0,),
                                 spread=0.0)
    assert unit_spread(flat_middle) is None


# ---------------------------------------------------------------- step terms


STEP_CASES = [
    ("credit_utilisation", FeatureRule("credit_utilisation", "either", 0.0, 1.0, 0.01)),
    ("credit_utilisation", FeatureRule("credit_utilisation", "decrease", 0.05, 1.0, 0.03, 0.4)),
    ("annual_revenue", FeatureRule("annual_revenue", "either", 40.0, 5000.0, 10.0, 800.0)),
    ("debt_to_revenue", FeatureRule("debt_to_revenue", "increase", 0.0, 2.0, 0.07)),
    ("years_trading", FeatureRule("years_trading", "either", 0.0, 40.0)),
    ("late_payments_24m", FeatureRule("late_payments_24m", "decrease", 0.0, 12.0)),
    ("premises_owned", FeatureRule("premises_owned", "either", cost=1.0)),
]


@pytest.mark.parametrize(("feature", "rule"), STEP_CASES, ids=[r.change + ":" + f
                                                                 for f, r in STEP_CASES])
def test_step_term_candidates_are_the_cheapest_grid_point_of_each_reachable_bin(
        boosted, training, feature, rule):
    term = boosted.term(feature)
    rule = replace(rule, cost=1.0)  # cost = distance, so "cheapest" is plain to brute force
    step = rule.step or 1.0  # integers and flags: a grid of whole steps
    low = -math.inf if rule.lower is None else rule.lower
    high = math.inf if rule.upper is None else rule.upper
    if feature == "premises_owned":
        low, high = 0.0, 1.0
    for index in ROWS:
        current = float(training[feature].iloc[index])
        here = _bin(term.edges, current)
        best: dict[int, float] = {}
        for point in _grid(current, step, low, high, rule.largest_change, rule.change):
            b = _bin(term.edges, point)
            if b != here and (b not in best or abs(point - current) < abs(best[b] - current)):
                best[b] = point
        candidates = feature_candidates(boosted, feature, current, rule)
        assert candidates[0] == Candidate(current, term.values[here], 0.0, True)
        got = {_bin(term.edges, c.value): c.value for c in candidates[1:]}
        assert len(got) == len(candidates) - 1  # one value per bin
        assert set(got) == set(best), (index, current)
        for b, value in best.items():
            assert got[b] == pytest.approx(value, abs=1e-9)


def test_step_term_without_a_grid_sits_on_the_bin_edge(boosted, training):
    term = boosted.term("amount_requested")
    rule = FeatureRule("amount_requested", "either", 5.0, 500.0)
    for index in ROWS:
        current = float(training["amount_requested"].iloc[index])
        here = _bin(term.edges, current)
        edges = [-math.inf, *term.edges, math.inf]
        # Brute force over bins: reachable when the bin (a, b] meets [5, 500]; the closest
        # point to the current value is b below it and (just above) a above it.
        reachable = {i for i in range(len(term.values)) if i != here
                     and edges[i] < 500.0 and edges[i + 1] >= 5.0}
        candidates = feature_candidates(boosted, "amount_requested", current, rule)
        got = {_bin(term.edges, c.value): c.value for c in candidates[1:]}
        assert set(got) == reachable
        for b, value in got.items():
            nearest = edges[b + 1] if b < here else edges[b]
            assert value == pytest.approx(nearest, rel=1e-12, abs=1e-12)


# ---------------------------------------------------------------- curve terms


def test_curve_with_a_grid_takes_the_whole_grid_within_bounds(spline, training):
    rule = FeatureRule("credit_utilisation", "either", 0.0, 1.0, 0.01)
    for index in ROWS:
        current = float(training["credit_utilisation"].iloc[index])
        candidates = feature_candidates(spline, "credit_utilisation", current, rule)
        expected = sorted(set(_grid(current, 0.01, 0.0, 1.0)) - {current})
        assert [c.value for c in candidates[1:]] == pytest.approx(expected, abs=1e-12)


def test_curve_cap_keeps_the_extremes_and_the_nearest(spline, training):
    rule = FeatureRule("amount_requested", "either", 5.0, 500.0, 1.0)
    current = float(training["amount_requested"].iloc[17])
    every = [p for p in _grid(current, 1.0, 5.0, 500.0) if p != current]
    candidates = feature_candidates(spline, "amount_requested", current, rule, cap=25)
    assert len(candidates) == 25
    kept = [c.value for c in candidates[1:]]
    assert min(every) in kept and max(every) in kept
    middle = [abs(v - current) for v in kept if v not in (min(every), max(every))]
    dropped = [abs(v - current) for v in every if v not in kept]
    assert max(middle) <= min(dropped)


def test_curve_without_a_grid_takes_the_knots_and_the_bounds(spline, training):
    term = spline.term("debt_to_revenue")
    rule = FeatureRule("debt_to_revenue", "decrease", 0.05, 2.5, largest_change=0.4)
    for index in ROWS:
        current = float(training["debt_to_revenue"].iloc[index])
        low = max(0.05, current - 0.4)
        expected = sorted({k for k in term.knots if low <= k < current} | {low} - {current})
        candidates = feature_candidates(spline, "debt_to_revenue", current, rule)
        assert [c.value for c in candidates[1:]] == pytest.approx(expected)


def test_unbounded_curve_grid_stops_at_the_last_knot(spline):
    # Past the last knot the table is flat (clamped), so the grid stops at the first point
    # on or past it: here whole years from 12 up to 40, the last knot.
    assert spline.term("years_trading").knots[-1] == 40.0
    rule = FeatureRule("years_trading", "increase")
    values = [c.value for c in feature_candidates(spline, "years_trading", 12.0, rule)]
    assert values == [12.0, *range(13, 41)]


# ---------------------------------------------------------------- levels


def test_levels_follow_the_moves_and_cost_per_move(spline):
    term = spline.term("sector")
    rule = FeatureRule("sector", "either", cost=1.5,
                       moves={"retail": ("hospitality", "transport"), "*": ("construction",)})
    candidates = feature_candidates(spline, "sector", "retail", rule)
    assert candidates[0] == Candidate("retail", term.values[term.levels.index("retail")],
                                      0.0, True)
    assert {c.value for c in candidates[1:]} == {"hospitality", "transport", "construction"}
    assert all(c.cost == 1.5 for c in candidates[1:])
    for c in candidates:
        assert c.contribution == term.values[term.levels.index(c.value)]
    other = feature_candidates(spline, "sector", "agriculture", rule)
    assert [c.value for c in other] == ["agriculture", "construction"]
    anywhere = feature_candidates(spline, "sector", "retail", FeatureRule("sector", "either",
                                                                          cost=1.0))
    assert sorted(c.value for c in anywhere) == sorted(term.levels)


# ---------------------------------------------------------------- the row


def test_a_bound_that_excludes_the_current_value_is_an_error(spline, loans):
    rule = FeatureRule("credit_utilisation", "decrease", lower=0.5)
    with pytest.raises(MutabilityError) as caught:
        feature_candidates(spline, "credit_utilisation", 0.183, rule)
    assert str(caught.value) == ("[feature.credit_utilisation] lower bound 0.5 excludes the "
                                 "current value 0.183")
    mutability = Mutability(mutability_from_dict({}, spline).goal,
                            {"years_trading": FeatureRule("years_trading", "either", upper=5)},
                            source="plan.toml")
    row = loans.iloc[3]  # 12 years trading in the demo CSV
    with pytest.raises(MutabilityError, match=r"^plan\.toml: \[feature\.years_trading\] upper "
                                              r"bound 5 excludes the current value 12$"):
        row_candidates(spline, row, mutability)


def test_row_candidates_encode_the_raw_row(spline, loans):
    fewer = replace(spline, terms=tuple(t for t in spline.terms if t.feature != "amount_requested"))
    mutability = mutability_from_dict({"feature": {
        "premises_owned": {"change": "increase"},
        "amount_requested": {"change": "decrease"},  # declared, but the model has no term
        "sector": {"change": "either", "moves": {"*": ["retail"]}},
        "years_trading": {"change": "fixed"},
    }}, fewer)
    row = loans.iloc[3]
    assert (row["premises_owned"], row["sector"]) == ("yes", "retail")
    found = row_candidates(fewer, row, mutability)
    assert list(found) == ["sector", "premises_owned"]
    assert [c.value for c in found["premises_owned"]] == [1.0]  # "yes" is 1; cannot increase
    assert [c.value for c in found["sector"]] == ["retail"]


# ---------------------------------------------------------------- property


@st.composite
def rules(draw):
    family = draw(st.sampled_from(["spline", "boosted"]))
    feature = draw(st.sampled_from(NUMERIC))
    index = draw(st.integers(0, 4999))
    change = draw(st.sampled_from(["increase", "decrease", "either"]))
    width = draw(st.floats(0.01, 2.0))
    lower = draw(st.none() | st.floats(0.0, 1.0).map(lambda f: -f * width))
    upper = draw(st.none() | st.floats(0.0, 1.0).map(lambda f: f * width))
    step = draw(st.none() | st.floats(0.002, 0.5))
    largest = draw(st.none() | st.floats(0.01, 1.0))
    cost = draw(st.sampled_from(["percentile", "spread", 0.7]))
    cap = draw(st.integers(3, 400))
    return family, feature, index, change, lower, upper, step, largest, cost, cap


@settings(max_examples=200, deadline=None)
@given(rules())
def test_every_candidate_keeps_the_rule(spline, boosted, training, drawn):
    family, feature, index, change, lower, upper, step, largest, cost, cap = drawn
    model = spline if family == "spline" else boosted
    column = training[feature]
    current = float(column.iloc[index])
    scale = float(column.max() - column.min())  # the draws are fractions of the range
    whole = feature in ("years_trading", "late_payments_24m", "premises_owned")
    if step is not None:
        step = float(max(1, round(step * 10))) if whole else step * scale
    rule = FeatureRule(feature, change,
                       None if lower is None else current + lower * scale,
                       None if upper is None else current + upper * scale,
                       step, None if largest is None else largest * scale, cost)
    candidates = feature_candidates(model, feature, current, rule, cap=cap)
    first = candidates[0]
    assert (first.value, first.cost, first.current) == (current, 0.0, True)
    assert len(candidates) <= max(cap, len(model.term(feature).values) + 1)
    values = [c.value for c in candidates]
    assert len(set(values)) == len(values)
    grid = step if step is not None else (1.0 if whole else None)
    for c in candidates[1:]:
        assert not c.current and c.cost >= 0
        assert c.value > current if change == "increase" else True
        assert c.value < current if change == "decrease" else True
        assert rule.lower is None or c.value >= rule.lower
        assert rule.upper is None or c.value <= rule.upper
        if rule.largest_change is not None:
            assert abs(c.value - current) <= rule.largest_change * (1 + 1e-9) + 1e-9
        if grid is not None:
            k = (c.value - current) / grid
            assert abs(k - round(k)) < 1e-6
        if whole:
            assert c.value == round(c.value)
        if feature == "premises_owned":
            assert c.value in (0.0, 1.0)
