"""Plans for a batch of typed rows at once: tables with arrays, one solver call, one re-score.

The per-row planner (`recourse.planner.plan_encoded`) builds Python objects for every
candidate and solves one program at a time. Here a whole batch goes through four steps:

1. `recourse.batch_tables`: every row's kept candidates, as arrays;
2. `recourse.kernel.solve_rows`: one compiled call solves every row's chain of plans
   (each later plan may not hold every change of an earlier one), exactly;
3. one re-score of every plan through `AdditiveModel.score_encoded`: a plan that misses the
   goal, or scores other than the program said, is a bug and raises;
4. Plan and Change objects for the plans found.

Rows this path does not take go to the per-row planner, which answers them exactly as it
always has: rows the tables cannot read with arrays or the rules do not fit (`slow`), and
rows with no plan (the per-row planner says how close the rules allow and which rules
bind). A plan that states a missing value is built by the per-row planner's own builder
from the kernel's choice (it lists the values that would do and asks for the least of
them the goal needs). The tests hold the two paths to the same optimal costs row by row
on real data.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, LevelsTerm
from recourse.batch_tables import BatchTables, batch_tables, stated
from recourse.candidates import FeatureCandidates
from recourse.mutability import Mutability
from recourse.planner import Change, Plan, PlanResult, _plans, plan_encoded, total_scores
from recourse.program import BUFFER, NOISE, Solution
from recourse.tails import tail_warnings

OBJECTIVE_CODES = {"total-cost": 0, "largest-cost": 1, "fewest-changes": 2}
MOST_CHAINED = 64  # plans per row the compiled solver chains (cuts held as 63-bit masks)
BLOCK = 1024  # rows tabled and solved together (arrays [rows, features, candidates]) ...
CELLS = 4_000_000  # ... fewer when a block's tables held more cells than this (wide grids)


def batch_covers(mutability: Mutability, n_plans: int) -> bool:
    """Whether the batch path takes these rules (else the per-row planner does)."""
    return not (mutability.links or mutability.level_bounds) and n_plans <= MOST_CHAINED


def plan_batch(model: AdditiveModel, encoded: pd.DataFrame, parts: pd.DataFrame, ids: Sequence,
               mutability: Mutability, n_plans: int,
               one_row: Callable[[int], PlanResult] | None = None) -> list[PlanResult]:
    """Up to `n_plans` plans for each typed row, in order; the same results as
    `recourse.planner.plan_encoded` with the exact solver, row by row. `one_row(i)` plans
    row i the per-row way (default: `plan_encoded`). Rows go BLOCK at a time, fewer after a
    block whose tables held more than CELLS cells, so wide grids do not fill the memory."""
    if one_row is None:
        def one_row(i: int) -> PlanResult:
            return plan_encoded(model, encoded.iloc[[i]], mutability, n_plans=n_plans,
                                solver="exact", row_id=ids[i], parts=parts.iloc[i])
    goal = mutability.goal
    score = total_scores(model, parts.to_numpy(dtype=float))
    outcome = model.inverse_link(score)
    sign = 1.0 if goal.direction == "at-least" else -1.0
    missed = goal.missed(score, model.link)
    need = sign * (goal.threshold(model.link) - score) + BUFFER
    results: list[PlanResult | None] = [None] * len(encoded)
    for row in np.flatnonzero(~missed):
        results[row] = PlanResult("already", float(score[row]), float(outcome[row]),
                                  goal.target, goal.direction, row_id=ids[row])
    declined, start, size = np.flatnonzero(missed), 0, BLOCK
    while start < len(declined):
        todo = declined[start:start + size]
        start += len(todo)
        found, cells = _block(model, encoded.iloc[todo], mutability, n_plans, need[todo],
                              score[todo], sign)
        if cells > CELLS:
            size = max(16, int(len(todo) * CELLS / cells))
        for k, plans in found.items():
            row = todo[k]
            results[row] = PlanResult("plans", float(score[row]), float(outcome[row]),
                                      goal.target, goal.direction, plans=plans,
                                      row_id=ids[row])
    return [one_row(i) if result is None else result for i, result in enumerate(results)]


def _block(model: AdditiveModel, encoded: pd.DataFrame, mutability: Mutability, n_plans: int,
           need: np.ndarray, score: np.ndarray, sign: float
           ) -> tuple[dict[int, tuple[Plan, ...]], int]:
    """The plans of the block's rows this path settles (by position in the block), and how
    many cells its tables held."""
    goal = mutability.goal
    threshold = goal.threshold(model.link)
    tables = batch_tables(model, encoded, mutability, need)
    fast = ~tables.slow
    choice, found = _solve(tables, need, goal, n_plans, fast)
    stating = fast & (found > 0) & _states_value(tables, encoded, choice, found)
    planned = fast & (found > 0) & ~stating
    plans = _built(model, encoded, tables, choice, found, planned, score, threshold, sign)
    for k in np.flatnonzero(stating):  # the per-row planner's plan builder, this solution
        plans[int(k)] = _stated_plans(model, encoded.iloc[[k]], tables, int(k),
                                      choice[k, :found[k]], score[k], threshold, mutability)
    return plans, tables.values.size


def _stated_plans(model: AdditiveModel, row: pd.DataFrame, tables: BatchTables, k: int,
                  choice: np.ndarray, score: float, threshold: float,
                  mutability: Mutability) -> tuple[Plan, ...]:
    """Plans that state a value the row lacks, built as the per-row planner builds them
    (the values that would do, the least of them the goal needs) from the kernel's choice."""
    candidates = {}
    for g, name in enumerate(tables.names):
        n = tables.sizes[k, g]
        now = row[name].iloc[0]
        values = [now, *(stated(tables, model, k, g, j) for j in range(n))]
        kind = object if isinstance(model.term(name), LevelsTerm) else float
        candidates[name] = FeatureCandidates(
            np.array(values, dtype=kind),
            np.r_[tables.here[k, g], tables.contributions[k, g, :n]],
            np.r_[0.0, tables.costs[k, g, :n]], n)
    solutions = []
    for picks in choice:
        moved = [(g, int(j)) for g, j in enumerate(picks) if j >= 0]
        predicted = score + sum(tables.contributions[k, g, j] - tables.here[k, g]
                                for g, j in moved)
        solutions.append(Solution("optimal", tuple(int(j) + 1 for j in picks), math.nan,
                                  float(predicted)))
    return _plans(model, row, tables.names, candidates, solutions, threshold, mutability)


def _solve(tables: BatchTables, need: np.ndarray, goal, n_plans: int,
           fast: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every fast row's chain of plans from the compiled solver: the picked change per group
    (-1: stays) as positions in `tables`, and how many plans each row has."""
    from recourse.kernel import solve_rows

    rows, groups, width = tables.values.shape
    toward = 1.0 if goal.direction == "at-least" else -1.0
    live = np.arange(width)[None, None, :] < tables.sizes[:, :, None]
    gains = np.where(live, toward * (tables.contributions - tables.here[:, :, None]), 0.0)
    costs = np.where(live, tables.costs, 0.0)
    # as every solver sees them; a change that then gains nothing the kernel never takes
    gains[np.abs(gains) < NOISE], costs[costs < NOISE] = 0.0, 0.0
    sizes = tables.sizes
    limit = groups if goal.max_changes is None else min(goal.max_changes, groups)
    choice = np.full((rows, n_plans, groups), -1, np.int64)
    found = np.zeros(rows, np.int64)
    take = np.flatnonzero(fast)
    if len(take) and groups:
        picked, counts = solve_rows(
            np.ascontiguousarray(gains[take]), np.ascontiguousarray(costs[take]),
            np.ascontiguousarray(sizes[take]), np.ascontiguousarray(need[take]),
            np.full(len(take), limit, np.int64), OBJECTIVE_CODES[goal.objective], n_plans)
        choice[take], found[take] = picked, counts
    return choice, found


def _states_value(tables: BatchTables, encoded: pd.DataFrame, choice: np.ndarray,
                  found: np.ndarray) -> np.ndarray:
    """Rows whose plans state a value the row lacks (the per-row planner settles those)."""
    out = np.zeros(len(found), bool)
    for g, name in enumerate(tables.names):
        blank = encoded[name].isna().to_numpy()
        if blank.any():
            out |= blank & (choice[:, :, g] >= 0).any(axis=1)
    return out


def _built(model: AdditiveModel, encoded: pd.DataFrame, tables: BatchTables, choice: np.ndarray,
           found: np.ndarray, planned: np.ndarray, score: np.ndarray, threshold: float,
           sign: float) -> dict[int, tuple[Plan, ...]]:
    """Every planned row's plans, each re-scored through the model."""
    rows = np.repeat(np.flatnonzero(planned), found[planned])
    number = np.concatenate([np.arange(n) for n in found[planned]]) if len(rows) else rows
    picks = choice[rows, number]  # [plans, groups]
    changed = encoded.iloc[rows].reset_index(drop=True)
    predicted = score[rows].copy()
    proposed, costs = {}, np.zeros(picks.shape)
    for g, name in enumerate(tables.names):
        where = np.flatnonzero(picks[:, g] >= 0)
        if not len(where):
            continue
        at = (rows[where], g, picks[where, g])
        values = tables.values[at]
        term = model.term(name)
        if isinstance(term, LevelsTerm):
            values = np.asarray(term.levels, dtype=object)[values.astype(np.int64)]
            column = changed[name].to_numpy(dtype=object).copy()
        else:
            column = changed[name].to_numpy(dtype=float).copy()
        column[where] = values
        changed[name] = column
        predicted[where] += tables.contributions[at] - tables.here[rows[where], g]
        costs[where, g] = tables.costs[at]
        proposed[g] = (where, values)
    rescored = model.score_encoded(changed)
    wrong = (sign * (rescored - threshold) < 0) | ~(np.abs(rescored - predicted) <= 1e-9)
    if wrong.any():
        k = int(np.flatnonzero(wrong)[0])
        raise RuntimeError(f"planner bug: a plan re-scores to {rescored[k]!r}, the program "
                           f"said {predicted[k]!r}; threshold {threshold!r}")
    outcome = model.inverse_link(rescored)
    changes: list[list[Change]] = [[] for _ in range(len(rows))]
    for g, (where, values) in sorted(proposed.items()):
        name = tables.names[g]
        numeric = not isinstance(model.term(name), LevelsTerm)
        current = encoded[name].to_numpy()[rows[where]]
        tails = tail_warnings(model, name, values) if numeric else [None] * len(where)
        for k, plan in enumerate(where):
            now, new = _plain(current[k]), _plain(values[k])
            changes[plan].append(Change(name, now, new, new - now if numeric else None,
                                        float(costs[plan, g]), tail=tails[k]))
    out: dict[int, list[Plan]] = {}
    for k, row in enumerate(rows):
        paid = [c.cost for c in changes[k]]
        out.setdefault(int(row), []).append(Plan(
            tuple(changes[k]), float(rescored[k]), float(outcome[k]), float(sum(paid)),
            float(max(paid, default=0.0))))
    return {row: tuple(plans) for row, plans in out.items()}


def _plain(value: Any) -> Any:
    """A numpy value as the per-row planner holds it (a float or a str)."""
    return value if isinstance(value, str) else float(value)
