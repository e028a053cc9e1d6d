"""Where a spline pair table's knots go: few, where the surface bends, within the promise.

A pair table is read bilinearly between its knots. Each number's axis is checked on a grid
of candidates in the feature's own units (`axis_candidates`: every whole number of an
integer with a short range; else every distinct training value, or 1,001 training quantiles
when there are more than `MANY_DISTINCT`; plus 1,001 even points over the range and 1,001
about even on the scale h(x) the surface was fitted on, where it bends most in x, such as
near zero for a distance on a power scale), and the surface is known exactly at every
candidate pair. Between candidates the table is not checked.

Bilinear reading is linear reading along the first axis, then along the second; the second
is a weighted mean with positive weights of rows at the first axis's knots, so at every
candidate the table strays at most e₁ + e₂ from the surface, where e₁ is the largest stray of
reading every row (one per candidate of the other axis) linearly between the first axis's
knots, and e₂ the same along the second axis, for the rows at the first axis's knots only.
Each axis's knots are found by a forward sweep (`sweep_knots`): from a knot, the farthest
candidate such that every row read linearly between the two strays at most the axis's share
of the tolerance at every candidate between them (a doubling then halving search; every gap
kept is one that was checked). So knots crowd where the surface bends along that axis at
some value of the other and thin out where it is straight, on the features' own scales.

The tolerance is `FIDELITY`, the promise the curves keep (0.001 on the link scale): the first
axis gets half, the second what the first left unused. A table that would pass `AXIS_KNOTS`
knots on an axis or `TABLE_ENTRIES` entries is placed again at a tolerance widened by its
overshoot (at least 10%; entries go about as 1 / tolerance) until it fits; the tolerance
used and the largest stray left over the candidate grid are recorded, and `glassbox fit`
shows a stray above the promise. An axis with at most `ALL_KNOTS` candidates keeps every
one (exact at every row), and one with at most `ALL_KNOTS / 2` distinct training values
keeps each of them as a knot.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from glassbox.fitting.families.spline_tables import CANDIDATES

FIDELITY = 1e-3  # a pair table scores within this of its surface (link scale): the promise
ALL_KNOTS = 64  # an axis with at most this many candidates keeps every one as a knot
AXIS_KNOTS = 400  # at most this many knots on a number's axis ...
TABLE_ENTRIES = 40_000  # ... and this many entries in a table (about 0.8 MB of JSON)
MANY_DISTINCT = 2000  # more distinct values than this: candidates at training quantiles
SCALE_GRID = 100_001  # the even grid on which h(x) is read to place points even in h


def axis_candidates(whole: bool, raw: np.ndarray, scale: Callable[[np.ndarray], np.ndarray]
                    ) -> np.ndarray:
    """Where a number's axis is checked (see the module), in the feature's own units;
    `scale` is the h(x) its surface was fitted on."""
    present = raw[~np.isnan(raw)]
    distinct = np.unique(present)
    low, high = float(distinct[0]), float(distinct[-1])
    if whole and high - low < CANDIDATES:
        return np.arange(low, high + 1)
    if len(distinct) > MANY_DISTINCT:
        distinct = np.quantile(present, np.linspace(0, 1, CANDIDATES), method="inverted_cdf")
    return np.unique(np.concatenate([distinct, np.linspace(low, high, CANDIDATES),
                                     even_on_scale(scale, low, high)]))


def even_on_scale(scale: Callable[[np.ndarray], np.ndarray], low: float, high: float
                  ) -> np.ndarray:
    """`CANDIDATES` values about evenly spaced in h(x) over [low, high] (h read on a fine
    even grid and inverted linearly): where the surface may bend most in x's own units."""
    fine = np.linspace(low, high, SCALE_GRID)
    seen = np.maximum.accumulate(np.asarray(scale(fine), dtype=float))
    if seen[-1] <= seen[0]:
        return np.array([low, high])
    return np.clip(np.interp(np.linspace(seen[0], seen[-1], CANDIDATES), seen, fine),
                   low, high)


def required_knots(candidates: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """The knots a number's axis always has (positions in `candidates`): every candidate
    when few, else its ends and, when few, every distinct training value."""
    if len(candidates) <= ALL_KNOTS:
        return np.arange(len(candidates))
    distinct = np.unique(raw[~np.isnan(raw)])
    ends = np.array([0, len(candidates) - 1])
    if len(distinct) <= ALL_KNOTS // 2:
        return np.union1d(ends, np.searchsorted(candidates, distinct))
    return ends


def gap_stray(lines: np.ndarray, at: np.ndarray, start: int, end: int) -> float:
    """The largest stray of every line (a column of `lines`, candidates down the rows) read
    linearly between candidates `start` and `end`, at the candidates between."""
    if end - start < 2:
        return 0.0
    share = ((at[start + 1:end] - at[start]) / (at[end] - at[start]))[:, None]
    read = lines[start] * (1.0 - share) + lines[end] * share
    return float(np.max(np.abs(read - lines[start + 1:end])))


def sweep_knots(lines: np.ndarray, at: np.ndarray, tolerance: float,
                required: np.ndarray) -> tuple[np.ndarray, float]:
    """Knots along one axis (see the module) and the largest stray they leave: `lines` is
    candidates x lines, `at` the candidates, `required` positions that are always knots."""
    knots, worst = [int(required[0])], 0.0
    for stop in (int(r) for r in required[1:]):
        start = knots[-1]
        while start < stop:
            good, reach = start + 1, 2
            bad = None
            while good < stop:  # double the gap while it holds
                end = min(start + reach, stop)
                if gap_stray(lines, at, start, end) <= tolerance:
                    good, reach = end, reach * 2
                else:
                    bad = end
                    break
            while bad is not None and bad - good > 1:  # then halve between good and bad
                middle = (good + bad) // 2
                if gap_stray(lines, at, start, middle) <= tolerance:
                    good = middle
                else:
                    bad = middle
            worst = max(worst, gap_stray(lines, at, start, good))
            knots.append(good)
            start = good
    return np.asarray(knots), worst


def interpolation(candidates: np.ndarray, chosen: np.ndarray) -> np.ndarray:
    """The matrix that reads every candidate linearly between the chosen ones."""
    knots = candidates[chosen]
    weights = np.zeros((len(candidates), len(chosen)))
    if len(chosen) == 1:
        weights[:, 0] = 1.0
        return weights
    low = np.clip(np.searchsorted(knots, candidates, side="right") - 1, 0, len(knots) - 2)
    share = np.clip((candidates - knots[low]) / (knots[low + 1] - knots[low]), 0.0, 1.0)
    rows = np.arange(len(candidates))
    weights[rows, low] = 1.0 - share
    weights[rows, low + 1] += share
    return weights


@dataclass(frozen=True)
class Placed:
    """A pair table's knots (positions in each axis's candidates) and what they leave."""

    chosen: tuple[np.ndarray, np.ndarray]
    stray: float  # the largest stray of the table from the surface over the candidate grid
    tolerance: float  # the tolerance the knots were placed for (FIDELITY unless widened)


def place_knots(truth: np.ndarray, candidates: Sequence[np.ndarray],
                required: Sequence[np.ndarray], open_axes: Sequence[bool]) -> Placed:
    """The knots of a pair table over `truth` (first candidates x second candidates): a
    closed axis (levels, two values) keeps every candidate; see the module."""
    tolerance = FIDELITY
    span = float(np.ptp(truth)) if truth.size else 0.0
    while True:
        chosen = [np.asarray(r) for r in required]
        left = tolerance
        for axis in (0, 1):
            if not open_axes[axis]:
                continue
            share = left / 2 if axis == 0 and open_axes[1] else left
            lines = truth if axis == 0 else np.ascontiguousarray(truth[chosen[0]].T)
            chosen[axis], used = sweep_knots(lines, candidates[axis], share, chosen[axis])
            left -= used
        most = max([len(c) for c, o in zip(chosen, open_axes, strict=True) if o] or [0])
        over = max(most / AXIS_KNOTS, len(chosen[0]) * len(chosen[1]) / TABLE_ENTRIES)
        if over <= 1.0 or tolerance > 2 * span:
            break
        # a table's entries go about as 1 / tolerance: widen by the overshoot, at least 10%
        tolerance *= max(1.1, over)
    reads = [interpolation(c, k) for c, k in zip(candidates, chosen, strict=True)]
    stray = float(np.max(np.abs(reads[0] @ truth[np.ix_(chosen[0], chosen[1])] @ reads[1].T
                                - truth)))
    return Placed((chosen[0], chosen[1]), stray, tolerance)
