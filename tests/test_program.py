"""The recourse program: solved by listing combinations, or as an integer program.

Outside references: exact brute-force enumeration of every combination of candidates (numpy,
written here independently of the program's rows and of recourse.combinations), a second
solver (scipy.optimize.milp), and a closed form worked by hand for one linear feature on a
grid. Programs small enough are solved by listing (recourse.combinations); `integer_program`
turns that off, so that the solvers themselves are what a test checks.
"""

from __future__ import annotations

import contextlib
import math
import os
import subprocess
import sys
from dataclasses import replace
from pathlib import Path
from unittest import mock

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from recourse import combinations
from recourse.errors import PlanningError
from recourse.program import (
    BUFFER,
    SOLVERS,
    Program,
    Solution,
    _need,
    _tables,
    best_changes,
    best_reachable,
    solve,
    solve_with_scipy,
)
from recourse.relaxation import Relaxation

ROOT = Path(__file__).resolve().parent.parent
# Solvers accept a row that misses by their feasibility tolerance (scipy's HiGHS: 1e-6, fixed).
# A combination whose score lies this close to the buffered threshold is ambiguous to any
# floating-point solver, so the random programs keep every combination clear of it.
CLEAR = 1e-5
SCIPY_GAP = 1e-6  # scipy.optimize.milp's fixed absolute optimality gap (HiGHS's mip_abs_gap)


# ---------------------------------------------------------------- brute force (outside reference)

def grids(program: Program) -> dict[str, np.ndarray]:
    """Every combination of candidates at once: one axis per group (exact enumeration)."""
    shape = tuple(len(values) for values in program.contributions)
    score = np.full(shape, float(program.base))
    total = np.zeros(shape)
    largest = np.zeros(shape)
    changes = np.zeros(shape, dtype=int)
    changed_mask = np.zeros(shape, dtype=int)  # bit g set when group g changes
    for g, (values, costs, now) in enumerate(
            zip(program.contributions, program.costs, program.current, strict=True)):
        axis = [1] * len(shape)
        axis[g] = len(values)
        moved = (np.arange(len(values)) != now).astype(int)
        score = score + np.reshape(values, axis)
        total = total + np.reshape(costs, axis)
        largest = np.maximum(largest, np.reshape(costs, axis))
        changes = changes + np.reshape(moved, axis)
        changed_mask = changed_mask + np.reshape(moved << g, axis)
    return {"score": score, "total-cost": total, "largest-cost": largest,
            "fewest-changes": changes.astype(float), "changes": changes, "mask": changed_mask}


def allowed(program: Program, grid: dict[str, np.ndarray]) -> np.ndarray:
    """Combinations that keep max_changes and do not change every group of any forbidden set
    (ignores the score)."""
    ok = np.ones(grid["score"].shape, dtype=bool)
    if program.max_changes is not None:
        ok &= grid["changes"] <= program.max_changes
    for changed in program.forbidden:
        bits = sum(1 << g for g in changed)
        ok &= (grid["mask"] & bits) != bits
    return ok


def margin(program: Program, grid: dict[str, np.ndarray]) -> np.ndarray:
    sign = 1.0 if program.direction == "at-least" else -1.0
    return sign * (grid["score"] - program.threshold)


def brute_force(program: Program) -> tuple[float, float] | None:
    """(optimum, least total cost among the optima) by enumeration, or None when infeasible.

    The same BUFFER is applied to the threshold as the program's contract says.
    """
    grid = grids(program)
    feasible = allowed(program, grid) & (margin(program, grid) >= BUFFER)
    if not feasible.any():
        return None
    best = grid[program.objective][feasible].min()
    ties = feasible & (grid[program.objective] <= best + 1e-9)
    return float(best), float(grid["total-cost"][ties].min())


def clear_of_threshold(program: Program) -> bool:
    return bool(np.all(np.abs(margin(program, grids(program)) - BUFFER) > CLEAR))


# ---------------------------------------------------------------- random small programs

numbers = st.one_of(st.floats(-3, 3, allow_nan=False),
                    st.sampled_from([0.0, 0.5, 1.0, -1.0]))  # repeats make ties and dominance
# Costs are 0 or at least 1e-3: MILP solvers prove optimality to about 1e-7 of the objective,
# so plans whose costs differ by less are ties to them (TRIPPED below keeps two such cases).
prices = st.one_of(st.just(0.0), st.floats(1e-3, 10), st.sampled_from([1.0, 2.5]))


@st.composite
def groups(draw):
    size = draw(st.integers(1, 8))
    values = draw(st.lists(numbers, min_size=size, max_size=size))
    costs = draw(st.lists(prices, min_size=size, max_size=size))
    now = draw(st.integers(0, size - 1))
    costs[now] = 0.0
    return tuple(values), tuple(costs), now


@st.composite
def programs(draw, min_groups: int = 0, max_groups: int = 5,
             objectives: tuple[str, ...] = ("total-cost", "largest-cost", "fewest-changes")):
    tables = draw(st.lists(groups(), min_size=min_groups, max_size=max_groups))
    count = len(tables)
    subsets = st.frozensets(st.integers(0, count - 1), max_size=count) if count else \
        st.just(frozenset())
    base = draw(st.floats(-3, 3, allow_nan=False))
    direction = draw(st.sampled_from(["at-least", "at-most"]))
    # the threshold: from the current score (0) to the best any choice reaches (1) and beyond,
    # so that most programs need a real plan, some are met already and some are out of reach
    pick = max if direction == "at-least" else min
    now = base + sum(t[0][t[2]] for t in tables)
    best = base + sum(pick(t[0]) for t in tables)
    share = draw(st.floats(-0.1, 1.1))
    program = Program(
        base=base,
        contributions=tuple(t[0] for t in tables),
        costs=tuple(t[1] for t in tables),
        current=tuple(t[2] for t in tables),
        threshold=now + share * (best - now),
        direction=direction,
        objective=draw(st.sampled_from(objectives)),
        max_changes=draw(st.one_of(st.none(), st.integers(0, max(count, 1)))),
        forbidden=tuple(draw(st.lists(subsets, max_size=3))),
    )
    for _ in range(draw(st.integers(0, 2))):  # as the planner does: forbid the last best plan
        changed = best_changed_set(program)
        if changed is None:
            break
        narrower = replace(program, forbidden=(*program.forbidden, changed))
        if brute_force(narrower) is None:  # keep it plannable; random sets cover the rest
            break
        program = narrower
    assume(clear_of_threshold(program))
    return program


def best_changed_set(program: Program) -> frozenset[int] | None:
    """The groups a best plan changes, by enumeration (objective, then total cost)."""
    truth = brute_force(program)
    if truth is None:
        return None
    grid = grids(program)
    best = (allowed(program, grid) & (margin(program, grid) >= BUFFER)
            & (grid[program.objective] <= truth[0] + 1e-9)
            & (grid["total-cost"] <= truth[1] + 1e-9))
    mask = int(grid["mask"][best].flat[0])
    return frozenset(g for g in range(len(program.contributions)) if mask >> g & 1)


def assert_keeps_the_rules(program: Program, solution: Solution) -> None:
    """The choice: one candidate per group, score and objective recomputed, every rule kept."""
    assert len(solution.choice) == len(program.contributions)
    assert all(0 <= c < len(v) for c, v in zip(solution.choice, program.contributions,
                                                strict=True))
    score = program.base + sum(v[c] for v, c in zip(program.contributions, solution.choice,
                                                    strict=True))
    assert solution.score == pytest.approx(score, abs=1e-12)
    sign = 1.0 if program.direction == "at-least" else -1.0
    assert sign * (score - program.threshold) >= BUFFER  # passes the threshold by the buffer
    paid = [costs[c] for costs, c in zip(program.costs, solution.choice, strict=True)]
    changed = frozenset(g for g, (c, now) in enumerate(zip(solution.choice, program.current,
                                                           strict=True)) if c != now)
    objective = {"total-cost": sum(paid), "largest-cost": max(paid, default=0.0),
                 "fewest-changes": len(changed)}[program.objective]
    assert solution.objective == pytest.approx(objective, abs=1e-12)
    assert not any(forbidden <= changed for forbidden in program.forbidden)
    assert program.max_changes is None or len(changed) <= program.max_changes


def check_against_enumeration(program: Program, solver: str) -> Solution:
    solution = solve(program, solver)
    truth = brute_force(program)  # exact enumeration of every combination
    if truth is None:
        assert solution.status == "infeasible", solution
        assert solution.choice == () and math.isnan(solution.objective)
        return solution
    assert solution.status == "optimal", solution
    assert solution.objective == pytest.approx(truth[0], abs=1e-9)  # enumeration's optimum
    assert_keeps_the_rules(program, solution)
    if program.objective != "total-cost":
        # tie-break, against enumeration: least total cost among the primary optima
        paid = sum(c[i] for c, i in zip(program.costs, solution.choice, strict=True))
        assert paid == pytest.approx(truth[1], abs=1e-9)
    return solution


def integer_program():
    """Within this, every program goes to the integer program (no listing of combinations)."""
    return mock.patch.object(combinations, "COMBINATIONS", 0)


@pytest.fixture(params=["listing", "integer program"])
def method(request):
    """Run a test once with each way of solving."""
    with integer_program() if request.param == "integer program" else contextlib.nullcontext():
        yield request.param


# 200 random programs for each solver (CBC, a subprocess, takes ~10 s of the ~30 s here).
@settings(max_examples=200, deadline=None, derandomize=True)
@given(programs())
def test_highs_matches_enumeration_and_scipy(program):
    with integer_program():
        solution = check_against_enumeration(program, "highs")
        second = solve_with_scipy(program)  # second solver: scipy.optimize.milp
    assert second.status == solution.status
    if solution.status == "optimal":
        # scipy's milp stops at HiGHS's absolute gap of 1e-6, which it does not let us change
        assert second.objective == pytest.approx(solution.objective, abs=SCIPY_GAP)
        assert_keeps_the_rules(program, second)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(programs())
def test_cbc_matches_enumeration_and_scipy(program):
    with integer_program():
        solution = check_against_enumeration(program, "cbc")
        second = solve_with_scipy(program)  # second solver: scipy.optimize.milp
    assert second.status == solution.status
    if solution.status == "optimal":
        assert second.objective == pytest.approx(solution.objective, abs=SCIPY_GAP)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(programs(), st.sampled_from([1, 2, 3, combinations.CHUNK]))
def test_listing_matches_enumeration(program, chunk):
    # the listing (recourse.combinations) against brute force; tiny chunks make it list
    # every program piece by piece, and fix a group's pick when the rest is too long
    with mock.patch.object(combinations, "CHUNK", chunk):
        assert combinations.changed_sets(
            [np.arange(len(v)) for v in program.contributions], program.current,
            program.max_changes, program.forbidden) is not None  # small: it is listed
        check_against_enumeration(program, "highs")


@settings(max_examples=300, deadline=None, derandomize=True)
@given(st.lists(st.tuples(st.sampled_from([-1.0, 0.0, 0.5, 1.0, 2.0]),
                          st.sampled_from([0.0, 0.5, 1.0, 3.0])), max_size=12),
       st.sampled_from([math.inf, 0.0, 0.5, 1.0, 1.5]))
def test_best_changes_are_the_frontier_by_definition(pairs, need):
    # brute force from the definition, pair by pair: a change is kept when it gains more than
    # staying put, no other change costs no more and gains as much (of exact equals, the
    # first one listed after sorting by cost and gain), and no kept change that costs less
    # already gains `need`
    gains = np.array([g for g, _ in pairs])
    costs = np.array([c for _, c in pairs])
    kept = set(best_changes(gains, costs, need).tolist())
    rank = sorted(range(len(pairs)), key=lambda i: (costs[i], -gains[i], i))
    truth = set()
    for i in range(len(pairs)):
        beaten = gains[i] <= 0 or any(
            costs[j] <= costs[i] and gains[j] >= gains[i] and rank.index(j) < rank.index(i)
            for j in range(len(pairs)) if j != i)
        if not beaten:
            truth.add(i)
    cheaper_reach = [i for i in truth if gains[i] >= need]
    if cheaper_reach:
        stop = min(cheaper_reach, key=rank.index)
        truth = {i for i in truth if rank.index(i) <= rank.index(stop)}
    assert kept == truth


def long_program(seed: int, groups: int, length: int, objective: str,
                 max_changes: int | None) -> Program:
    """Constructed: each group a long ragged frontier (costs rising, gains rising in bumps,
    as percentile costs on a skewed feature make them), the threshold in reach of a few."""
    rng = np.random.default_rng(seed)
    contributions, costs = [], []
    for _ in range(groups):
        cost = np.r_[0.0, np.cumsum(rng.exponential(1.0, length - 1) * rng.choice(
            [0.1, 1.0, 5.0], length - 1))]
        gain = np.r_[0.0, np.cumsum(rng.exponential(1.0, length - 1) ** 2) / length]
        contributions.append(tuple(-gain))  # at-most: lower contributions help
        costs.append(tuple(cost))
    best = sum(-c[-1] for c in contributions)
    return Program(base=1.0, contributions=tuple(contributions), costs=tuple(costs),
                   current=(0,) * groups, threshold=1.0 + 0.4 * best, direction="at-most",
                   objective=objective, max_changes=max_changes)


def two_group_optimum(program: Program) -> tuple[float, float]:
    """Exact brute force for two groups: for each candidate of the first, the cheapest of
    the second that reaches (sorted by gain, suffix minimum of cost, binary search)."""
    (ga, gb), (ca, cb) = _tables(program)
    need = _need(program)
    order = np.argsort(gb)
    suffix = np.minimum.accumulate(cb[order][::-1])[::-1]
    at = np.searchsorted(gb[order], need - ga, side="left")
    ok = at < len(order)
    other = np.where(ok, suffix[np.minimum(at, len(order) - 1)], np.inf)
    total = np.where(ok, ca + other, np.inf)
    largest = np.where(ok, np.maximum(ca, other), np.inf)
    return float(total.min()), float(largest.min())


@pytest.mark.parametrize("objective", ["total-cost", "largest-cost"])
def test_long_frontiers_against_two_group_brute_force(method, objective):
    # two groups of 3,000 candidates: far too many combinations for the plain enumeration
    # above, exact by additivity; the listing and the integer program must both find it
    for seed in range(3):
        program = long_program(seed, 2, 3000, objective, None)
        total, largest = two_group_optimum(program)
        solution = solve(program)
        assert solution.status == "optimal"
        expected = total if objective == "total-cost" else largest
        assert solution.objective == pytest.approx(expected, abs=1e-9)
        assert_keeps_the_rules(program, solution)


def test_listing_gives_way_to_the_integer_program_past_its_limits():
    # constructed: 19 groups with a limit of 5 changes make 16,664 sets of changed groups,
    # past SETS, so the integer program solves it; a long group alone stays listed
    many = long_program(0, 19, 4, "total-cost", 5)
    kept = [np.arange(len(v)) for v in many.contributions]
    assert combinations.changed_sets(kept, many.current, 5, ()) is None
    assert solve(many).status == "optimal"
    three = long_program(1, 3, 400, "total-cost", None)
    kept = [np.arange(len(v)) for v in three.contributions]
    assert combinations.changed_sets(kept, three.current, None, ()) is not None
    with mock.patch.object(combinations, "COMBINATIONS", 399 * 399 - 1):
        assert combinations.changed_sets(kept, three.current, None, ()) is None
    # 10 groups, at most 3 changes: 176 sets, past SETS (64), listed only when the lists are
    # long (2,500 candidates, past LONG), where the integer program's bound is weak
    for length, listed in ((250, True), (150, False)):
        kept = [np.arange(length) for _ in range(10)]
        sets = combinations.changed_sets(kept, (0,) * 10, 3, ())
        assert (sets is not None) == listed
        assert sets is None or len(sets) == 176


@settings(max_examples=200, deadline=None, derandomize=True)
@given(programs())
def test_best_reachable_matches_enumeration(program):
    grid = grids(program)  # exact enumeration, forbidden sets ignored as documented
    ok = np.ones(grid["score"].shape, dtype=bool)
    if program.max_changes is not None:
        ok &= grid["changes"] <= program.max_changes
    sign = 1.0 if program.direction == "at-least" else -1.0
    best = sign * (sign * grid["score"][ok]).max()
    assert best_reachable(program) == pytest.approx(best, abs=1e-12)


# programs with no choice or no gap to close say nothing about a bound: they are skipped,
# which Hypothesis's health check counts as heavy filtering on some collection orders
@settings(max_examples=200, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.filter_too_much])
@given(programs())
def test_the_relaxation_bound_never_passes_the_optimum(program):
    # weak duality: every multiplier's Lagrangian value is at most the least total cost found
    # by enumeration; the program drops changes on the strength of these bounds
    cheapest = replace(program, objective="total-cost")
    truth = brute_force(cheapest)
    assume(truth is not None and _need(cheapest) > 0)
    gains, costs = _tables(cheapest)
    kept = [np.arange(len(g)) for g in gains]
    limit = len(kept) if program.max_changes is None else program.max_changes
    assume(limit >= 1)
    relaxation = Relaxation(gains, costs, kept, cheapest.current, _need(cheapest), limit)
    bound, multiplier, _ = relaxation.search()
    assert bound <= truth[0] + 1e-9
    for value in (0.0, 0.5 * multiplier, 2 * multiplier + 1):
        assert relaxation.at(value)[0] <= truth[0] + 1e-9
    # and the bound for each change is at most the least cost of any choice making it
    # (exact enumeration; forbidden sets only shrink the choices, so they are kept here)
    grid = grids(cheapest)
    feasible = allowed(cheapest, grid) & (margin(cheapest, grid) >= BUFFER)
    for value in (multiplier, 0.5 * multiplier, 2 * multiplier + 1):
        bounds = relaxation.bounds(value)
        for group, changes in enumerate(relaxation.changes):
            for column, candidate in enumerate(changes):
                index = [slice(None)] * len(kept)
                index[group] = candidate
                making = grid["total-cost"][tuple(index)][feasible[tuple(index)]]
                if making.size:
                    assert bounds[group, column] <= making.min() + 1e-9


# ---------------------------------------------------------------- closed form (worked by hand)

@settings(max_examples=40, deadline=None, derandomize=True)
@given(coefficient=st.floats(0.1, 5), step=st.sampled_from([0.01, 0.25, 1.0, 5.0]),
       gap=st.floats(0.01, 4), points=st.integers(1, 60),
       direction=st.sampled_from(["at-least", "at-most"]),
       objective=st.sampled_from(["total-cost", "largest-cost", "fewest-changes"]),
       solver=st.sampled_from(SOLVERS))
def test_one_linear_feature_on_a_grid(coefficient, step, gap, points, direction, objective,
                                      solver):
    # One feature, contribution = coefficient * (value - current), candidates current +- k*step
    # (up for at-least, down for at-most), cost |change|. By hand: the smallest change that
    # closes the gap is gap / coefficient rounded up to the step.
    steps_needed = gap / (coefficient * step)
    assume(abs(steps_needed - round(steps_needed)) > 1e-4)  # clear of the buffer
    current, sign = 10.0, 1.0 if direction == "at-least" else -1.0
    values = [current + sign * k * step for k in range(points + 1)]
    program = Program(
        base=-1.0,
        contributions=(tuple(coefficient * (v - current) for v in values),),
        costs=(tuple(abs(v - current) for v in values),),
        current=(0,), threshold=-1.0 + sign * gap, direction=direction, objective=objective)
    expected = math.ceil(gap / coefficient / step)  # closed form: steps on the grid
    solution = solve(program, solver)
    if expected > points:
        assert solution.status == "infeasible"
    else:
        assert solution.status == "optimal"
        assert values[solution.choice[0]] == pytest.approx(current + sign * expected * step)


# ---------------------------------------------------------------- hand-made cases and errors

def small(**changes) -> Program:
    program = Program(base=-1.0, contributions=((0.0, 0.6, 1.5), (0.0, 0.7)),
                      costs=((0.0, 1.0, 4.0), (0.0, 2.0)), current=(0, 0), threshold=0.0,
                      direction="at-least", objective="total-cost")
    return replace(program, **changes)


@pytest.mark.parametrize("solver", SOLVERS)
def test_forbidding_a_plan_gives_the_next_one(solver, method):
    # constructed: {0,1} costs 3 (score 0.3), {0} alone costs 4 (score 0.5), {1} misses
    first = solve(small(), solver)
    assert first.choice == (1, 1) and first.objective == pytest.approx(3.0)
    second = solve(small(forbidden=(frozenset({0, 1}),)), solver)
    assert second.choice == (2, 0) and second.objective == pytest.approx(4.0)
    assert solve(small(max_changes=1, forbidden=(frozenset({0}),)), solver).status == "infeasible"
    assert best_reachable(small(max_changes=1)) == pytest.approx(0.5)


@pytest.mark.parametrize("solver", SOLVERS)
@pytest.mark.parametrize("direction", ["at-least", "at-most"])
@pytest.mark.parametrize("objective", ["total-cost", "largest-cost", "fewest-changes"])
def test_the_buffer_keeps_plans_off_the_line(solver, direction, objective, method):
    # constructed: changing group 0 alone passes the threshold by only half the buffer, so
    # every objective must change both groups (the random programs stay clear of this line)
    sign = 1.0 if direction == "at-least" else -1.0
    program = small(contributions=((0.0, sign * (1.0 + BUFFER / 2)), (0.0, sign * 0.5)),
                    costs=((0.0, 1.0), (0.0, 2.0)), threshold=sign * 1.0 - 1.0,
                    direction=direction, objective=objective)
    assert solve(program, solver).choice == (1, 1)  # (scipy's fixed 1e-6 tolerance can't see it)
    alone = replace(program, contributions=((0.0, sign * (1.0 + BUFFER / 2)), (0.0, 0.0)))
    assert solve(alone, solver).status == "infeasible"


TRIPPED = [  # programs on which a solver once called a dearer plan optimal (CBC, CBC, HiGHS,
    # HiGHS keeping a change that costs 1e-9 and gains nothing), or crashed (CBC, the last)
    Program(base=0.0, contributions=((0.0, 0.0, 0.0, 1.0, -1.0, 0.0), (0.0, 0.0, 0.0, 1.0, 0.0),
                                     (0.0, 0.0, 1.0, 0.0), (-1.0, 0.0)),
            costs=((1.0, 1.0, 1.0, 0.0, 0.0, 1.0), (0.0, 0.0, 0.0, 1.0, 0.0),
                   (0.0, 0.0, 0.5, 0.0), (0.0, 0.0)),
            current=(3, 0, 0, 0), threshold=1.5, direction="at-least", objective="total-cost"),
    Program(base=0.0, contributions=((0.0,), (0.0, 0.0, 0.0, -2.0, 0.0, 0.0, 0.0), (0.0, 0.0),
                                     (0.0, 0.0), (0.0, 0.0, 0.0, 0.0, 2.0, -1.0)),
            costs=((0.0,), (0.0, 0.0, 0.0, 0.99999, 0.0, 0.0, 0.0), (0.0, 0.0), (0.0, 0.0),
                   (1.0, 1.0, 1.0, 1.0, 0.0, 1.0)),
            current=(0, 0, 0, 0, 4), threshold=0.75, direction="at-most", objective="total-cost"),
    Program(base=0.0, contributions=((0.0, 0.0), (0.0, 0.0, 0.0, 0.0, 0.5, 0.5, 0.0, 0.0),
                                     (0.0, 0.0, 0.0, 1.0), (-1.0, 0.0)),
            costs=((5e-324, 0.0), (0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0), (0.0, 0.0, 0.0, 1.0),
                   (0.0, 2.0)),
            current=(1, 4, 0, 0), threshold=-0.25, direction="at-least", objective="total-cost",
            forbidden=(frozenset([0, 1, 2, 3]), frozenset([3]), frozenset([1, 3]))),
    Program(base=0.0, contributions=((0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0),
                                     (0.0, 0.0, 0.0, 0.0, 0.0, -1.0, 0.0)),
            costs=((1.0, 1.0, 1e-09, 0.0, 1.0, 1.0, 0.0), (0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0)),
            current=(3, 0), threshold=-0.5, direction="at-most", objective="total-cost"),
    Program(base=0.0, contributions=((1.0, 0.0, 0.0, 0.0, 0.0, 0.0), (0.0, 0.0, 0.0, 0.0)),
            costs=((0.0,) * 6, (0.0,) * 4), current=(0, 0), threshold=0.75,
            direction="at-most", objective="total-cost",
            forbidden=(frozenset([0]), frozenset([0, 1]))),  # CBC crashed: no choice exists
]


@pytest.mark.parametrize("solver", SOLVERS)
@pytest.mark.parametrize("program", TRIPPED)
def test_programs_that_tripped_a_solver(program, solver, method):
    truth = brute_force(program)  # exact enumeration: 0.5, 0.99999, 1.0, 1.0 and no choice
    solution = solve(program, solver)
    if truth is None:
        assert solution.status == "infeasible"
    else:
        assert solution.objective == pytest.approx(truth[0], abs=1e-9)


def test_no_groups_is_judged_without_a_solver():
    for solver in SOLVERS:
        assert solve(small(contributions=(), costs=(), current=()), solver).status == "infeasible"
        met = solve(small(contributions=(), costs=(), current=(), threshold=-2.0), solver)
        assert met.status == "optimal" and met.choice == () and met.objective == 0.0
        on_the_line = small(contributions=(), costs=(), current=(), threshold=-1.0)
        assert solve(on_the_line, solver).status == "infeasible"  # the buffer applies here too


@pytest.mark.parametrize(("changes", "words"), [
    ({"costs": ((0.0, 1.0, 4.0),)}, "must match"),
    ({"current": (0, 2)}, "current index 2"),
    ({"costs": ((0.0, -1.0, 4.0), (0.0, 2.0))}, "negative"),
    ({"costs": ((1.0, 1.0, 4.0), (0.0, 2.0))}, "must cost 0"),
    ({"contributions": ((0.0, math.nan, 1.5), (0.0, 0.7))}, "finite"),
    ({"contributions": ((0.0, 0.6), (0.0, 0.7))}, "must match"),
    ({"objective": "cheapest"}, "unknown objective"),
    ({"direction": "above"}, "unknown direction"),
    ({"max_changes": -1}, "max_changes"),
    ({"forbidden": (frozenset({5}),)}, "forbidden set"),
    ({"names": ("only-one",)}, "names"),
])
def test_malformed_programs_are_programmer_errors(changes, words):
    for run in (lambda p: solve(p, "highs"), solve_with_scipy, best_reachable):
        with pytest.raises(ValueError, match=words) as caught:
            run(small(**changes))
        assert not isinstance(caught.value, PlanningError)


def test_unknown_solver_is_a_user_error():
    with pytest.raises(PlanningError, match="known solvers: highs, cbc"):
        solve(small(), "gurobi")


def test_solving_is_quiet_and_leaves_no_files(tmp_path):
    # a fresh process, so HiGHS's once-per-process banner would show; warnings made visible
    script = ("from tests.test_program import small\n"
              "from recourse import combinations\n"
              "from recourse.program import solve, solve_with_scipy\n"
              "combinations.COMBINATIONS = 0  # to the solvers, not the listing\n"
              "for solver in ('highs', 'cbc'):\n"
              "    assert solve(small(), solver).status == 'optimal'\n"
              "    assert solve(small(threshold=9.0), solver).status == 'infeasible'\n"
              "assert solve_with_scipy(small()).status == 'optimal'\n")
    env = {**os.environ, "TMPDIR": str(tmp_path), "PYTHONWARNINGS": "default"}
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, env=env,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout == "" and done.stderr == ""
    assert list(tmp_path.iterdir()) == []  # CBC's scratch files are gone
