"""Bins for a points card: a curve cut where it moves, each bin worth its exact mean.

The cells of a curve (runs of training values, see `glassbox.core.cells`) are swept
left to right. A bin takes the next cell, with the gap before it, while the curve
moves by at most the tolerance over everything the bin covers (every point, not
only training values): flat stretches become one wide bin, steep ones (tails)
many narrow bins. When the next cell does not fit, the bin stretches into the gap
as far as the tolerance allows, the next bin starts as far back as it can, and
bins without training rows cover what neither reaches, so every value, seen in
training or not, lies in a bin over which the curve moves at most the tolerance.

A bin's value is the mean contribution over its training rows: the sum of its
cells' sums over the sum of their rows, exact. A bin without training rows is
worth the middle of the lowest and highest value of the curve over it.

An edge between two cells can be any number from one cell's highest value up to
(not including) the next cell's lowest: all split the training rows alike. The
edge taken is a number with the fewest significant digits in the allowed range.
Whole features (integers, flags) take whole values only: a bin (a, b] covers
a + 1, ..., b, and edges are whole numbers.

Models fitted before cells existed give approximate cells: one per distinct value
where the profile counts them (exact), else one per 1% slice between the stored
percentiles, worth the curve's average over the slice (approximate).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from glassbox.core.additive import CurveTerm, FeatureProfile, StepTerm
from glassbox.core.cells import TermCells, term_extremes
from glassbox.core.errors import OptionError


@dataclass(frozen=True)
class CellArrays:
    """Cells as arrays: each cell's lowest and highest value, rows (a share when the cells
    come from percentiles) and the sum of contributions over them."""

    lower: np.ndarray
    upper: np.ndarray
    rows: np.ndarray
    sums: np.ndarray
    exact: bool
    resolution: float | None = None  # the largest spread a stored cell may have

    @classmethod
    def of(cls, cells: TermCells) -> CellArrays:
        return cls(np.asarray(cells.lower, float), np.asarray(cells.upper, float),
                   np.asarray(cells.rows, float), np.asarray(cells.sums, float), True,
                   cells.resolution)


@dataclass(frozen=True)
class Bins:
    """Right-closed bins over `edges`; per bin its training rows, the mean contribution
    over them, and the spread of the term over their span (log-odds)."""

    edges: tuple[float, ...]
    means: tuple[float, ...]
    rows: tuple[float, ...]
    spreads: tuple[float, ...]
    exact: bool


def profile_cells(term: CurveTerm, profile: FeatureProfile) -> CellArrays:
    """Cells from a profile, for models without stored cells: one per counted value
    (exact), else one per 1% slice between percentiles (approximate)."""
    if profile.value_counts:
        values = np.array([v for v, _ in profile.value_counts], dtype=float)
        rows = np.array([c for _, c in profile.value_counts], dtype=float)
        return CellArrays(values, values, rows, rows * term.evaluate(values), True)
    if not profile.percentiles:
        raise OptionError(f"the model keeps no training percentiles for '{term.feature}', "
                          "so its curve cannot be cut into bins")
    grid = np.asarray(profile.percentiles, dtype=float)
    distinct = np.unique(grid)
    # the share of rows at or below each distinct percentile value (in percent)
    share = np.searchsorted(grid, distinct, side="right") - 1.0
    lower = np.concatenate([distinct[:1], distinct[:-1]])
    rows = np.diff(share, prepend=0.0)
    keep = rows > 0
    lower, upper, rows = lower[keep], distinct[keep], rows[keep]
    return CellArrays(lower, upper, rows, rows * _average(term, lower, upper), False)


def _average(term: CurveTerm, lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """The curve's average over each interval (its value where the interval is a point)."""
    knots = np.asarray(term.knots, dtype=float)
    out = term.evaluate(lower)
    for index in np.flatnonzero(upper > lower):
        low, high = lower[index], upper[index]
        inside = knots[(knots > low) & (knots < high)]
        where = np.concatenate([[low], inside, [high]])
        heights = term.evaluate(where)
        area = np.sum(np.diff(where) * (heights[1:] + heights[:-1]) / 2)
        out[index] = area / (high - low)
    return out


def cut_curve(term: CurveTerm, cells: CellArrays, tolerance: float,
              whole: bool = False) -> Bins:
    """Bins for a curve, swept left to right: a bin takes the next cell, and the gap
    before it, while the curve moves by at most `tolerance` over everything it covers;
    when the next cell does not fit, the bin stretches into the gap as far as it can,
    the next bin starts as far back as it can, and bins without training rows cover
    what neither reaches. `whole` features (integers, flags) take whole values only."""
    if not tolerance > 0 or not math.isfinite(tolerance):
        raise OptionError(f"the tolerance must be a positive number, not {tolerance!r}")
    step = 1.0 if whole else 0.0
    cell_low, cell_high = term_extremes(term, cells.lower, cells.upper)
    gap_low, gap_high = term_extremes(term, cells.upper[:-1] + step, cells.lower[1:] - step)
    knots = np.asarray(term.knots, dtype=float)
    edges: list[float] = []
    bottom, top = cells.lower[0], cells.upper[-1]
    low, high = cell_low[0], cell_high[0]
    if knots[0] < bottom:  # the curve goes on below the training values
        start = _reach(term, low, high, bottom - step, knots[0], tolerance, whole)
        if start is not None and start > knots[0]:  # further than the first bin reaches
            first = _roundest_in(start - step, start - step + (bottom - start) / 2.0, whole,
                                 "low")
            floor = math.ceil(knots[0]) if whole else knots[0]
            edges += [*_fill(term, floor, first, tolerance, whole), first]
        low, high = _grown(term, (low, high), edges[-1] + step if edges else knots[0], bottom)
    for index in range(1, len(cells.rows)):
        upper, lower = cells.upper[index - 1], cells.lower[index]
        new_low, new_high = min(low, cell_low[index]), max(high, cell_high[index])
        if lower > upper + step:  # values can fall between the two cells
            new_low = min(new_low, gap_low[index - 1])
            new_high = max(new_high, gap_high[index - 1])
        if new_high - new_low <= tolerance:
            low, high = new_low, new_high
            continue
        cell = (cell_low[index], cell_high[index])
        found = _between(term, upper, lower, (low, high), cell, tolerance, whole)
        edges += found
        low, high = _grown(term, cell, found[-1] + step, lower)
    if knots[-1] > top:  # the curve goes on above the training values
        stop = _reach(term, low, high, top + step, knots[-1], tolerance, whole)
        if stop is not None and stop < knots[-1]:
            last = _roundest_in(top, stop, whole, "high")
            ceiling = math.floor(knots[-1]) if whole else knots[-1]
            edges += [last, *_fill(term, last + step, ceiling, tolerance, whole)]
    return _bins(term, cells, sorted(set(edges)), whole)


def _grown(term: CurveTerm, values: tuple[float, float], start: float,
           stop: float) -> tuple[float, float]:
    """A bin's lowest and highest value once it also covers [start, stop]."""
    if start >= stop:
        return values
    low, high = term_extremes(term, [start], [stop])
    return min(values[0], float(low[0])), max(values[1], float(high[0]))


def _between(term: CurveTerm, upper: float, lower: float, left: tuple[float, float],
             right: tuple[float, float], tolerance: float, whole: bool) -> list[float]:
    """Edges between two groups, the left one ending at training value `upper`, the
    right one starting at `lower`: one edge where each side reaches the other, else
    each side stretched as far as it goes and bins without training rows between."""
    step = 1.0 if whole else 0.0
    if lower <= upper + step:  # nothing can lie between (neighbouring whole values, or
        return [upper]         # percentile slices that touch)
    reach_right = _reach(term, *left, upper + step, lower - step, tolerance, whole)
    reach_left = _reach(term, *right, lower - step, upper + step, tolerance, whole)
    last = upper if reach_right is None else reach_right  # the left group's furthest value
    first = lower if reach_left is None else reach_left   # the right group's
    if first <= last + step:  # one edge serves both: x ≤ edge left, x > edge right
        return [_roundest_in(max(upper, first - step), min(last, lower - step), whole,
                             "middle", open_high=not whole and last >= lower)]
    low_edge = _roundest_in(upper, last, whole, "high")
    high_edge = _roundest_in(first - step, first - step + (lower - first) / 2.0, whole, "low")
    return [low_edge, *_fill(term, low_edge + step, high_edge, tolerance, whole), high_edge]


def _fill(term: CurveTerm, start: float, stop: float, tolerance: float,
          whole: bool) -> list[float]:
    """Inner edges of bins covering [start, stop], where no training values lie: left
    to right, each bin as wide as the tolerance allows (its edge rounded within the
    bin's second half)."""
    step = 1.0 if whole else 0.0
    edges: list[float] = []
    while start < stop:
        here = float(term.evaluate(np.array([start]))[0])
        reach = _reach(term, here, here, start, stop, tolerance, whole)
        if reach is None or reach >= stop:
            break
        edge = _roundest_in(start + (reach - start) / 2.0, reach, whole, "high")
        if edge < start or (not whole and edge <= start):
            break  # no room to move on (a curve steeper than floating point resolves)
        edges.append(edge)
        start = edge + step
    return edges


def _reach(term: CurveTerm, low: float, high: float, start: float, stop: float,
           tolerance: float, whole: bool) -> float | None:
    """How far from `start` towards `stop` (either way) the term stays within
    `tolerance` together with the values [low, high] already in the bin: the last such
    point (a whole value for whole features), or None if not even `start` fits."""
    knots = np.asarray(term.knots, dtype=float)
    ahead = stop >= start
    inside = (knots[(knots > start) & (knots < stop)] if ahead else
              knots[(knots < start) & (knots > stop)][::-1])
    where = np.concatenate([[start], inside, [stop]])
    values = term.evaluate(where)
    low, high = min(low, values[0]), max(high, values[0])
    if high - low > tolerance:
        return None
    reached = float(stop)
    for index in range(1, len(where)):
        value = values[index]
        if max(high, value) - min(low, value) > tolerance:
            target = low + tolerance if value > high else high - tolerance
            share = (target - values[index - 1]) / (value - values[index - 1])
            reached = float(where[index - 1] + share * (where[index] - where[index - 1]))
            break
        low, high = min(low, value), max(high, value)
    if whole:
        reached = float(math.floor(reached) if ahead else math.ceil(reached))
    return reached


def _roundest_in(low: float, high: float, whole: bool, pick: str,
                 open_high: bool = False) -> float:
    """An edge in [low, high] (or [low, high) when `open_high`) with the fewest
    significant digits: the highest, the lowest or the one nearest the middle."""
    if whole:
        low, high = float(math.ceil(low)), float(math.floor(high))
    candidates = roundest_numbers(low, high, open_high)
    if pick == "high":
        return candidates[-1]
    if pick == "low":
        return candidates[0]
    middle = (low + high) / 2.0
    return min(candidates, key=lambda number: abs(number - middle))


def roundest_numbers(low: float, high: float, open_high: bool = False) -> list[float]:
    """The numbers in [low, high] (or [low, high)) with the fewest significant digits,
    in increasing order; just `low` when there is no room."""
    def inside(number: float) -> bool:
        return low <= number < high if open_high else low <= number <= high

    if not (high > low or (high == low and not open_high)):
        return [float(low)]
    if inside(0.0):
        return [0.0]
    top = math.floor(math.log10(max(abs(low), abs(high)))) + 1
    for exponent in range(top, top - 40, -1):
        scale = 10.0 ** exponent
        found = [number for k in range(math.floor(low / scale), math.ceil(high / scale) + 1)
                 if inside(number := float(f"{k}e{exponent}"))]
        if found:
            return found
    return [float(low)]


def _bins(term: CurveTerm, cells: CellArrays, edges: list[float], whole: bool) -> Bins:
    """Each bin's training rows, value (the exact mean over its training rows; halfway
    between the term's lowest and highest over the bin where it holds none) and spread."""
    bins = np.searchsorted(np.asarray(edges, dtype=float), cells.upper, side="left")
    count = len(edges) + 1
    rows = np.bincount(bins, weights=cells.rows, minlength=count)
    bounds = np.searchsorted(bins, np.arange(count + 1), side="left")  # cells are in order
    sums = [math.fsum(cells.sums[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    lowest, highest = bin_extremes(term, tuple(edges), whole)
    values = [sums[b] / rows[b] if rows[b] > 0 else (lowest[b] + highest[b]) / 2.0
              for b in range(count)]
    return Bins(tuple(float(e) for e in edges), tuple(float(v) for v in values),
                tuple(float(r) for r in rows), tuple(float(v) for v in highest - lowest),
                cells.exact)


def bin_extremes(term: CurveTerm | StepTerm, edges: tuple[float, ...],
                 whole: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """The lowest and highest value of the term over each right-closed bin (every value
    the bin covers, seen in training or not; beyond its ends the term is flat). Whole
    features take whole values only, so a bin (a, b] covers [a + 1, b]."""
    bounds = np.asarray([-math.inf, *edges, math.inf], dtype=float)
    starts = bounds[:-1] + 1.0 if whole else np.nextafter(bounds[:-1], math.inf)
    return term_extremes(term, starts, bounds[1:])
