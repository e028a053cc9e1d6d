"""Candidate tables for a whole batch of rows at once, with array operations.

The per-row reader (`recourse.candidates.feature_candidates`) settles one feature of one row;
here every row of a batch is settled together, feature by feature, by the same rules and the
same floating-point operations in the same order, so each row's table holds exactly the
candidates the per-row reader keeps (tests/test_batch_plans.py holds the two together on real
data). What is read with arrays:

- a curve with a step grid: each side's grid points from the nearest to the first at or
  past the table's outermost knot (or the bound), listed point by point, the points that
  gain more than every nearer one kept, up to the first that closes the row's gap;
- a curve with no step: its knots within the interval and the interval's finite ends;
- categories: the levels each current level may move to, read once per distinct level;
- a missing value: the values that may be stated, read once per feature;
- a value present under a rule kept only for its supply cost: staying put.

Anything else (a step table, a grid side longer than `LISTED_STEPS`, a value outside a
declared bound, a value too far out to place steps around, a bracket the arithmetic cannot
settle) is read cell by cell by the per-row reader itself; where that reader refuses a row,
the row is marked for the per-row planner, which reports it exactly as before. Then each
row keeps what `recourse.program.best_changes` keeps: no cheaper change gains as much, none
past the cheapest that closes the gap.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm
from recourse.candidates import (
    FARTHEST_STEPS,
    LISTED_STEPS,
    NEED_SLACK,
    _interval,
    feature_candidates,
    plannable_unit,
)
from recourse.errors import MutabilityError, OutsideError
from recourse.grid import LARGEST_STEP_COUNT, _first_past, rounded
from recourse.mutability import FeatureRule, Mutability, unit_spread


@dataclass(frozen=True)
class BatchTables:
    """Per row and changeable feature (group), its kept changes, the current value excluded.

    Arrays are [rows, groups, width], padded past `sizes`; a category's value is its level's
    position in the term's levels. `slow` marks rows the per-row planner must take.
    """

    names: tuple[str, ...]
    values: np.ndarray
    contributions: np.ndarray
    costs: np.ndarray
    sizes: np.ndarray
    here: np.ndarray  # [rows, groups]: the current value's contribution
    slow: np.ndarray


@dataclass
class _Cells:
    """One feature's listed changes for every row: [rows, width] arrays and a valid mask."""

    values: np.ndarray
    contributions: np.ndarray
    costs: np.ndarray
    valid: np.ndarray

    @classmethod
    def empty(cls, rows: int, width: int = 0) -> _Cells:
        return cls(np.full((rows, width), np.nan), np.zeros((rows, width)),
                   np.full((rows, width), np.inf), np.zeros((rows, width), bool))

    def widened(self, width: int) -> _Cells:
        """These cells, or a copy at least `width` wide (the new columns empty)."""
        if width <= self.values.shape[1]:
            return self
        out = _Cells.empty(len(self.valid), width)
        for name in ("values", "contributions", "costs", "valid"):
            old = getattr(self, name)
            getattr(out, name)[:, :old.shape[1]] = old
        return out


def batch_tables(model: AdditiveModel, encoded: pd.DataFrame, mutability: Mutability,
                 need: np.ndarray) -> BatchTables:
    """The kept candidates of every row of `encoded` (typed by `AdditiveModel.encode`) whose
    gap (link scale, BUFFER included) is `need`."""
    rows = len(encoded)
    direction = mutability.goal.direction
    toward = 1.0 if direction == "at-least" else -1.0
    reach = np.where(np.isfinite(need), need + NEED_SLACK * (1.0 + np.abs(need)), np.inf)
    slow = np.zeros(rows, bool)
    names, tables, heres = [], [], []
    for feature in model.features:
        rule = mutability.rules.get(feature)
        if rule is None:
            continue
        column = encoded[feature].to_numpy()
        term = model.term(feature)
        here = term.evaluate(column)
        cells, hard = _feature_cells(model, feature, rule, column, toward, reach)
        for row in np.flatnonzero(hard & ~slow):  # the per-row reader, cell by cell
            try:
                one = feature_candidates(model, feature, column[row], rule, direction,
                                         float(need[row]))
            except (MutabilityError, OutsideError):
                slow[row] = True
                continue
            cells = _put(cells, row, term, one.values[1:], one.contributions[1:],
                         one.costs[1:])
        names.append(feature)
        tables.append(_kept(cells, here, toward, reach))
        heres.append(here)
    width = max((t.values.shape[1] for t in tables), default=0)
    shape = (rows, len(tables), width)
    values, contributions = np.full(shape, np.nan), np.zeros(shape)
    costs, sizes = np.full(shape, np.inf), np.zeros(shape[:2], np.int64)
    for g, table in enumerate(tables):
        w = table.values.shape[1]
        values[:, g, :w], contributions[:, g, :w] = table.values, table.contributions
        costs[:, g, :w] = table.costs
        sizes[:, g] = table.valid.sum(axis=1)
    here = np.stack(heres, axis=1) if heres else np.zeros((rows, 0))
    return BatchTables(tuple(names), values, contributions, costs, sizes, here, slow)


def _put(cells: _Cells, row: int, term, values: np.ndarray, contributions: np.ndarray,
         costs: np.ndarray) -> _Cells:
    """Cells with one row's changes replaced (widened when they do not fit)."""
    if isinstance(term, LevelsTerm):
        values = pd.Index(term.levels).get_indexer(np.asarray(values, dtype=object))
    n = len(values)
    cells = cells.widened(n)
    cells.values[row], cells.contributions[row] = np.nan, 0.0
    cells.costs[row], cells.valid[row] = np.inf, False
    cells.values[row, :n], cells.contributions[row, :n] = values, contributions
    cells.costs[row, :n], cells.valid[row, :n] = costs, True
    return cells


def _kept(cells: _Cells, here: np.ndarray, toward: float, reach: np.ndarray) -> _Cells:
    """Per row, the changes `recourse.program.best_changes` keeps, in the listed order:
    those that gain more than staying put and every cheaper change (of equal costs, the one
    that gains most, then the first listed), up to the first that gains `reach`."""
    rows, width = cells.valid.shape
    if width == 0:
        return cells
    gains = toward * (cells.contributions - here[:, None])
    costs = np.where(cells.valid, cells.costs, np.inf)
    order = np.argsort(costs, axis=1, kind="stable")
    ordered = np.take_along_axis(costs, order, axis=1)
    tied = np.any((ordered[:, 1:] == ordered[:, :-1]) & np.isfinite(ordered[:, 1:]), axis=1)
    if tied.any():  # equal costs: the one that gains most first (then the first listed)
        order[tied] = np.lexsort((np.where(cells.valid[tied], -gains[tied], np.inf),
                                  costs[tied]), axis=-1)
    taken = np.take_along_axis(np.where(cells.valid, gains, -np.inf), order, axis=1)
    best_before = np.maximum.accumulate(np.concatenate([np.zeros((rows, 1)), taken[:, :-1]],
                                                       axis=1), axis=1)
    keep = taken > best_before
    reaching = keep & (taken >= reach[:, None])
    first = np.where(reaching.any(axis=1), reaching.argmax(axis=1), width)
    keep &= np.arange(width)[None, :] <= first[:, None]
    mask = np.zeros_like(keep)
    np.put_along_axis(mask, order, keep, axis=1)
    return _compact(cells, mask)


def _compact(cells: _Cells, mask: np.ndarray) -> _Cells:
    """The cells where `mask` holds, moved to the left of each row in their order."""
    counts = mask.sum(axis=1)
    width = int(counts.max(initial=0))
    out = _Cells.empty(len(mask), width)
    if width == 0:
        return out
    rows, columns = np.nonzero(mask)  # row by row, in order
    at = (np.cumsum(mask, axis=1) - 1)[rows, columns]
    for name in ("values", "contributions", "costs"):
        getattr(out, name)[rows, at] = getattr(cells, name)[rows, columns]
    out.valid[rows, at] = True
    return out


def _feature_cells(model: AdditiveModel, feature: str, rule: FeatureRule, column: np.ndarray,
                   toward: float, reach: np.ndarray) -> tuple[_Cells, np.ndarray]:
    """One feature's listed changes for the rows read with arrays, and which rows are hard
    (read cell by cell)."""
    rows = len(column)
    term = model.term(feature)
    if isinstance(term, LevelsTerm):
        return _level_cells(model, feature, rule, column, toward)
    absent = np.isnan(np.asarray(column, dtype=float))
    cells, hard = _Cells.empty(rows), np.zeros(rows, bool)
    if absent.any():
        cells = _once(model, feature, rule, math.nan, absent, toward, cells)
    if rule.change == "fixed":  # a value present stays (the rule is kept for supply_cost)
        return cells, hard
    present = np.flatnonzero(~absent)
    if not isinstance(term, CurveTerm) or not len(present):
        hard[present] = True
        return cells, hard
    kind = model.schema.feature(feature).kind
    step = rule.step if rule.step is not None else (1.0 if kind != "number" else None)
    now = np.asarray(column, dtype=float)[present]
    unit = plannable_unit(model, feature, step)
    if not np.abs(np.asarray(term.knots)).max() <= FARTHEST_STEPS * unit:
        hard[present] = True  # the per-row reader refuses every row: let it say so
        return cells, hard
    lower, upper, odd = _intervals(now, rule, kind, unit)
    if step is None:
        listed = _knot_cells(term, now, lower, upper)
    else:
        listed, long = _grid_cells(term, now, lower, upper, step, toward, reach[present])
        odd |= long
    listed.costs = _row_costs(model, feature, now, listed, rule)
    odd |= ~np.all(np.isfinite(listed.costs) | ~listed.valid, axis=1)
    hard[present[odd]] = True
    keep = present[~odd]
    width = listed.values.shape[1]
    cells = cells.widened(width)
    for name in ("values", "contributions", "costs", "valid"):
        getattr(cells, name)[keep, :width] = getattr(listed, name)[~odd]
    return cells, hard


def _once(model: AdditiveModel, feature: str, rule: FeatureRule, current, where: np.ndarray,
          toward: float, cells: _Cells) -> _Cells:
    """Rows `where` whose changes do not depend on the row: read once (no gap cut, which
    `_kept` applies per row), copied to each."""
    direction = "at-least" if toward > 0 else "at-most"
    one = feature_candidates(model, feature, current, rule, direction)
    for row in np.flatnonzero(where):
        cells = _put(cells, row, model.term(feature), one.values[1:], one.contributions[1:],
                     one.costs[1:])
    return cells


def _level_cells(model: AdditiveModel, feature: str, rule: FeatureRule, column: np.ndarray,
                 toward: float) -> tuple[_Cells, np.ndarray]:
    """Categories: each distinct current level read once (its moves and their one cost)."""
    cells = _Cells.empty(len(column))
    absent = pd.isna(column)
    levels = pd.Series(np.where(absent, None, column), dtype=object)
    for level, group in levels.groupby(levels.astype(str).where(~absent, "\0"), sort=True):
        rows = np.zeros(len(column), bool)
        rows[group.index] = True
        current = None if absent[group.index[0]] else str(level)
        cells = _once(model, feature, rule, current, rows, toward, cells)
    return cells, np.zeros(len(column), bool)


def _intervals(now: np.ndarray, rule: FeatureRule, kind: str,
               unit: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`recourse.candidates._interval` for every row, and the rows to read cell by cell: a
    value outside a declared bound, or too far out to place steps around."""
    outside = (now < (-math.inf if rule.lower is None else rule.lower)) | (
        now > (math.inf if rule.upper is None else rule.upper))
    lower, upper = _interval(now, rule, kind)
    return lower, upper, outside | ~(np.abs(now) <= FARTHEST_STEPS * unit)


def _knot_cells(term: CurveTerm, now: np.ndarray, lower: np.ndarray,
                upper: np.ndarray) -> _Cells:
    """No grid: the knots within each row's interval and its finite ends, ascending."""
    knots = np.asarray(term.knots, dtype=float)
    points = np.concatenate([np.broadcast_to(knots, (len(now), len(knots))),
                             lower[:, None], upper[:, None]], axis=1)
    within = (points >= lower[:, None]) & (points <= upper[:, None]) & np.isfinite(points)
    values = np.sort(np.where(within, points, np.inf), axis=1)
    valid = np.isfinite(values)
    valid[:, 1:] &= values[:, 1:] != values[:, :-1]
    valid &= values != now[:, None]
    return _with_contributions(term, _compact(
        _Cells(np.where(valid, values, np.nan), np.zeros(values.shape),
               np.full(values.shape, np.inf), valid), valid))


def _with_contributions(term: CurveTerm, cells: _Cells) -> _Cells:
    cells.contributions = np.where(cells.valid, np.interp(
        np.where(cells.valid, cells.values, 0.0), term.knots, term.values), 0.0)
    return cells


def _grid_cells(term: CurveTerm, now: np.ndarray, lower: np.ndarray, upper: np.ndarray,
                step: float, toward: float, reach: np.ndarray) -> tuple[_Cells, np.ndarray]:
    """`recourse.candidates._grid_values` for every row: per side, the points from one step
    out to the first at or past the outermost knot (before the bound), each kept when it
    gains more than every nearer point and staying put, up to the first that gains `reach`;
    and the rows whose side is too long to list (read cell by cell)."""
    knots = np.asarray(term.knots, dtype=float)
    table = np.asarray(term.values, dtype=float)
    here = np.interp(now, knots, table)
    long = np.zeros(len(now), bool)
    sides = []
    for side, bound in ((-1, lower), (1, upper)):
        open_ = side * (bound - now) > 0
        outer = np.full(len(now), knots[-1] if side > 0 else knots[0])
        past_knot = _first_past(now, step, side, outer, True)
        past_bound = _first_past(now, step, side, bound, False)
        last = np.maximum(past_knot, 1)
        last = np.where(past_bound <= LARGEST_STEP_COUNT, np.minimum(last, past_bound - 1), last)
        long |= open_ & ((last > LARGEST_STEP_COUNT) | (last - 1 >= LISTED_STEPS))
        count = np.where(open_ & ~long & (last >= 1), last, 0)
        width = int(count.max(initial=0))
        if width == 0:
            sides.append((np.zeros((len(now), 0)), np.zeros((len(now), 0), bool)))
            continue
        steps = np.arange(1, width + 1, dtype=float)[None, :]
        live = steps <= count[:, None]
        points = rounded(now[:, None] + side * steps * step)
        gains = toward * (np.interp(points, knots, table) - here[:, None])
        gains = np.where(live, gains, -np.inf)
        reaching = live & (gains >= reach[:, None])
        stop = np.where(reaching.any(axis=1), reaching.argmax(axis=1) + 1, count)
        live &= np.arange(width)[None, :] < stop[:, None]
        before = np.maximum.accumulate(np.concatenate(
            [np.zeros((len(now), 1)), np.where(live, gains, -np.inf)[:, :-1]], axis=1), axis=1)
        keep = live & (gains > before)
        sides.append((points[:, ::-1], keep[:, ::-1]) if side < 0 else (points, keep))
    # below `now` (nearest last) then above it (nearest first): already ascending
    values = np.concatenate([sides[0][0], sides[1][0]], axis=1)
    valid = np.concatenate([sides[0][1], sides[1][1]], axis=1)
    valid &= values != now[:, None]
    cells = _compact(_Cells(values, np.zeros(values.shape), np.full(values.shape, np.inf),
                            valid), valid)
    repeated = np.zeros(cells.valid.shape, bool)  # a step so fine that rounding merges points
    repeated[:, 1:] = cells.valid[:, 1:] & (cells.values[:, 1:] == cells.values[:, :-1])
    if repeated.any():
        cells = _compact(cells, cells.valid & ~repeated)
    return _with_contributions(term, cells), long


def _row_costs(model: AdditiveModel, feature: str, now: np.ndarray, cells: _Cells,
               rule: FeatureRule) -> np.ndarray:
    """`recourse.candidates._costs` for every row, the same operations (padding costs inf;
    a cost the rules cannot give, say "spread" with no spread, is nan: read cell by cell)."""
    values = np.where(cells.valid, cells.values, now[:, None])
    distance = np.abs(values - now[:, None])
    if not isinstance(rule.cost, str):
        costs = float(rule.cost) * distance
    elif rule.cost == "percentile":
        ranks = model.profile(feature).percentile_of(
            np.concatenate([now[:, None], values], axis=1))
        costs = np.abs(ranks[:, 1:] - ranks[:, :1])
    elif rule.cost == "spread" and (spread := unit_spread(model.profile(feature))) is not None:
        costs = distance / spread
    else:
        costs = np.full(values.shape, np.nan)
    return np.where(cells.valid, costs, np.inf)


def stated(tables: BatchTables, model: AdditiveModel, row: int, group: int,
           pick: int) -> float | str:
    """The value a change proposes, as the per-row planner states it."""
    term = model.term(tables.names[group])
    value = tables.values[row, group, pick]
    return term.levels[int(value)] if isinstance(term, LevelsTerm) else float(value)


def tables_sizes(tables: BatchTables) -> Sequence[int]:
    """How many changes each group keeps, summed over the rows (for summaries)."""
    return tables.sizes.sum(axis=0).tolist()
