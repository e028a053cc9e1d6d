"""Training cells: an exact, compact summary of the training rows under a numeric term.

The sorted training values of a numeric feature are cut into consecutive runs
(cells). Each cell keeps its lowest and highest training value, its number of
rows and the SUM of the term's contributions over those rows, so the mean
contribution of any union of neighbouring cells is exact, whatever the term does
inside a cell, and so are the shares of training rows (what monitoring needs).

- Under a curve, a cell grows while the curve moves by at most `resolution`
  (log-odds) between its lowest and highest value, counting every point in
  between, not only the training values; a single training value is one cell
  however steep the curve.
- Under steps, a cell is the training rows of one step (resolution 0).

Training rows with no value are not in any cell: the summary keeps their number
(`missing_rows`) and the sum of their contributions (`missing_sum`, the term's
missing-value entry times that number), so every training row is counted once.
Summaries written before missing values were learned have neither (no such rows).

`fit_model` stores one `TermCells` per numeric term of a classification model,
after the terms are centred. Points cards merge cells into bins; a bin edge can
be any number between one cell's highest value and the next cell's lowest (all
split the training rows the same way).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from glassbox.core.errors import DataError, ModelFileError
from glassbox.core.exact import ExactSum, grouped_sums

if TYPE_CHECKING:
    from glassbox.core.additive import CurveTerm, StepTerm

# Half the default points-card tolerance (a twentieth of the points that double the
# odds, ln 2 / 20 on the log-odds scale whatever the scaling): half a point at PDO 20.
RESOLUTION = math.log(2.0) / 40.0


@dataclass(frozen=True)
class TermCells:
    """Consecutive runs of one feature's sorted training values: each run's lowest and
    highest value, its rows, and the sum of the term's contributions over its rows."""

    feature: str
    resolution: float
    lower: tuple[float, ...]
    upper: tuple[float, ...]
    rows: tuple[int, ...]
    sums: tuple[float, ...]
    missing_rows: int = 0
    missing_sum: float = 0.0

    def __post_init__(self) -> None:
        where = f"cells of '{self.feature}'"
        count = len(self.rows)
        if count == 0 or not len(self.lower) == len(self.upper) == len(self.sums) == count:
            raise ModelFileError(f"{where}: needs as many lower and upper values and sums as "
                                 "row counts (at least one cell)")
        if any(not isinstance(n, int) or isinstance(n, bool) or n < 1 for n in self.rows):
            raise ModelFileError(f"{where}: row counts must be whole numbers of at least 1")
        lower, upper = np.asarray(self.lower, float), np.asarray(self.upper, float)
        numbers = np.concatenate([lower, upper, np.asarray(self.sums, float),
                                  [self.resolution]])
        if not np.all(np.isfinite(numbers)) or self.resolution < 0:
            raise ModelFileError(f"{where}: values, sums and resolution must be finite "
                                 "(resolution at least 0)")
        if np.any(lower > upper) or np.any(upper[:-1] >= lower[1:]):
            raise ModelFileError(f"{where}: cells must be in increasing order and not overlap")
        missing = self.missing_rows
        if not isinstance(missing, int) or isinstance(missing, bool) or missing < 0:
            raise ModelFileError(f"{where}: the count of rows with no value must be a whole "
                                 "number of at least 0")
        if not math.isfinite(self.missing_sum) or (missing == 0 and self.missing_sum != 0):
            raise ModelFileError(f"{where}: the sum over rows with no value must be a finite "
                                 "number (0 when there are none)")

    @property
    def total_rows(self) -> int:
        """Every training row: those in the cells and those with no value."""
        return int(sum(self.rows)) + self.missing_rows

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {"feature": self.feature, "resolution": self.resolution,
                                "lower": list(self.lower), "upper": list(self.upper),
                                "rows": list(self.rows), "sums": list(self.sums)}
        if self.missing_rows:  # written only when there are such rows: older content stays
            data.update(missing_rows=self.missing_rows, missing_sum=self.missing_sum)
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> TermCells:
        try:
            return cls(str(data["feature"]), float(data["resolution"]),
                       tuple(float(v) for v in data["lower"]),
                       tuple(float(v) for v in data["upper"]),
                       tuple(data["rows"]), tuple(float(v) for v in data["sums"]),
                       data.get("missing_rows", 0), float(data.get("missing_sum", 0.0)))
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"cells of {data.get('feature')!r} are incomplete: "
                                 f"{exc}") from None


def term_extremes(term: CurveTerm | StepTerm, lows: Sequence[float] | np.ndarray,
                  highs: Sequence[float] | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The lowest and highest value a curve or steps term takes anywhere on each closed
    interval [low, high] (the ends, and every knot or step in between)."""
    lows = np.asarray(lows, dtype=float)
    highs = np.asarray(highs, dtype=float)
    values = np.asarray(term.values, dtype=float)
    if hasattr(term, "knots"):
        at_low, at_high = term.evaluate(lows), term.evaluate(highs)
        smallest, largest = np.minimum(at_low, at_high), np.maximum(at_low, at_high)
        knots = np.asarray(term.knots, dtype=float)
        first = np.searchsorted(knots, lows, side="right")  # knots strictly inside
        last = np.searchsorted(knots, highs, side="left")
    else:
        first = term.bin_of(lows)
        last = term.bin_of(highs) + 1  # every step from the low end's to the high end's
        smallest, largest = values[first].copy(), values[first].copy()
    for index in np.flatnonzero(last > first):
        inside = values[first[index]:last[index]]
        smallest[index] = min(smallest[index], inside.min())
        largest[index] = max(largest[index], inside.max())
    return smallest, largest


def _cells_from_runs(feature: str, resolution: float, distinct: np.ndarray,
                     counts: np.ndarray, contributions: np.ndarray,
                     starts: Sequence[int], missing: tuple[int, float]) -> TermCells:
    """Cells from runs of distinct values beginning at `starts`; sums exact (fsum over
    rows); `missing` is the count and contribution sum of rows with no value."""
    bounds = [*starts, len(distinct)]
    # each cell's exact sum rounded once, as math.fsum over its rows rounds it
    cell_of = np.repeat(np.arange(len(starts)), np.diff(bounds))
    positive, negative = grouped_sums(contributions, counts, cell_of, len(starts))
    sums = tuple((p + ExactSum(-n.units)).value() for p, n in
                 zip(positive, negative, strict=True))
    return TermCells(
        feature, float(resolution),
        tuple(float(distinct[a]) for a in bounds[:-1]),
        tuple(float(distinct[b - 1]) for b in bounds[1:]),
        tuple(int(counts[a:b].sum()) for a, b in zip(bounds[:-1], bounds[1:], strict=True)),
        sums, *missing)


def summarise_term(term: CurveTerm | StepTerm, column: np.ndarray,
                   resolution: float = RESOLUTION,
                   runs: tuple[np.ndarray, np.ndarray] | None = None) -> TermCells:
    """The cells of one numeric term over its training column (already centred term);
    rows with no value (NaN) are counted apart, each worth the term's missing entry.
    `runs` may give the column's distinct present values and counts, already found."""
    column = np.asarray(column, dtype=float)
    absent = np.isnan(column)
    count = int(absent.sum())
    # every such row adds the same value; fsum makes the sum exact like the cells' sums
    missing = (count, math.fsum(term.evaluate(column[absent])) if count else 0.0)
    distinct, counts = runs or np.unique(column[~absent], return_counts=True)
    if len(distinct) == 0:
        raise DataError(f"column '{term.feature}' has no values at all")
    contributions = term.evaluate(distinct)
    if not hasattr(term, "knots"):  # steps: one cell per step that holds training rows
        steps = term.bin_of(distinct)
        starts = [0, *(np.flatnonzero(np.diff(steps) != 0) + 1)]
        return _cells_from_runs(term.feature, 0.0, distinct, counts, contributions, starts,
                                missing)
    between_low, between_high = term_extremes(term, distinct[:-1], distinct[1:])
    starts = _run_starts(contributions, between_low, between_high, resolution)
    return _cells_from_runs(term.feature, resolution, distinct, counts, contributions, starts,
                            missing)


def _run_starts(contributions: np.ndarray, between_low: np.ndarray,
                between_high: np.ndarray, resolution: float) -> list[int]:
    """Where each cell begins: a cell runs from its first distinct value while the lowest
    and highest value the term takes from there (its start, and every stretch between
    neighbouring values) stay within `resolution`; the first value that would widen it
    further begins the next. Found a window of values at a time with running minima and
    maxima (the same comparisons and subtraction as one value at a time, so the same
    cells), the window doubling while a cell runs on."""
    starts, start, count = [0], 0, len(contributions)
    window = 8
    while start < count - 1:
        end = min(start + window, count - 1)
        low = np.minimum.accumulate(np.minimum(between_low[start:end], contributions[start]))
        high = np.maximum.accumulate(np.maximum(between_high[start:end], contributions[start]))
        wide = np.flatnonzero(high - low > resolution)
        if len(wide):
            start += int(wide[0]) + 1
            starts.append(start)
            window = max(8, 2 * (int(wide[0]) + 1))  # the next cell is likely as long
        elif end == count - 1:
            break
        else:
            window *= 2
    return starts
