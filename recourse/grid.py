"""Grid points whole steps from a value, placed exactly.

A step grid anchored on a row's value holds value + k × step for whole k, rounded to DECIMALS
to drop float noise (0.1 + 0.2 -> 0.3) where rounding can drop noise. The functions here find,
for a target, the first k whose point lies past it, by a quotient and a bracket of seven
steps, else by bisection: arithmetic, never counting steps. `recourse.candidates` and
`recourse.supply` read one row with them, `recourse.batch_tables` a batch.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from recourse.errors import MutabilityError

DECIMALS = 12  # grid values are rounded to drop float noise (0.1 + 0.2 -> 0.3)
MOST_VALUES = 1_000_000  # a feature with more undominated values than this is refused
LARGEST_STEP_COUNT = 2**52  # beyond this many steps, grid points are no longer distinct floats
WHOLE = 2.0**52  # floats this large are whole numbers
# Above this, a float's spacing exceeds 10**-DECIMALS: rounding to DECIMALS drops no noise,
# and np.round's multiply-and-divide would move the value (1e15 + 0.5 became 1e15 + 0.625)
# or overflow to infinity (past about 1e296).
ROUNDED_BELOW = 2.0**53 / 10**DECIMALS


def rounded(values: Any) -> np.ndarray:
    """Values rounded to DECIMALS (grid noise such as 0.1 + 0.2 dropped) where that can drop
    noise, below ROUNDED_BELOW; larger values are left exactly as they are."""
    values = np.asarray(values, dtype=float)
    small = np.abs(values) < ROUNDED_BELOW
    return np.where(small, np.round(np.where(small, values, 0.0), DECIMALS), values)


def _points(now: float | np.ndarray, step: float, side: int, steps: np.ndarray) -> np.ndarray:
    """Grid points `steps` whole steps from `now` on one side (+1 up, -1 down), rounded."""
    return rounded(now + side * np.asarray(steps, dtype=float) * step)


def _first_past(now: float, step: float, side: int, targets: np.ndarray,
                inclusive: bool | np.ndarray) -> np.ndarray:
    """For each target, the least k >= 1 whose grid point lies past it on `side` (or on it,
    where `inclusive`); LARGEST_STEP_COUNT + 1 when none up to LARGEST_STEP_COUNT does.
    `now` is one value, or one per target (a batch of rows, one target each).

    The quotient gives k to within a step or two: the seven steps around it are tried at
    once; where that bracket fails (a huge quotient, say) the whole range is bisected.
    """
    targets = np.atleast_1d(np.asarray(targets, dtype=float))
    inclusive = np.broadcast_to(inclusive, targets.shape)
    nows = np.broadcast_to(np.asarray(now, dtype=float), targets.shape)

    def passes(k: np.ndarray, rows: slice | np.ndarray = slice(None)) -> np.ndarray:
        there = targets[rows].reshape(-1, *([1] * (k.ndim - 1)))
        gap = side * (_points(nows[rows].reshape(there.shape), step, side, k) - there)
        return np.where(inclusive[rows].reshape(there.shape), gap >= 0, gap > 0)

    with np.errstate(invalid="ignore", over="ignore"):
        quotient = side * (targets - nows) / step
    far = ~(quotient < LARGEST_STEP_COUNT)  # an infinite bound, say (nan too)
    # a target behind `now` (a quotient below 0, -inf too) is passed from the first step
    ahead = np.where(far, 0.0, np.maximum(quotient, 0.0))
    low = np.maximum(np.floor(ahead).astype(np.int64) - 3, 0)
    tried = low[:, None] + np.arange(7)
    ok = passes(tried)
    found = tried[np.arange(len(low)), ok.argmax(axis=1)]
    settled = (low == 0) | ~ok[:, 0]  # the bracket starts below the answer...
    found = np.where(far, LARGEST_STEP_COUNT + 1, found)
    wide = np.flatnonzero(~far & ~(settled & ok[:, -1]))  # ...and ends on or past it
    if len(wide):
        found[wide] = _bisect(lambda k: passes(k, wide), np.zeros(len(wide), np.int64),
                              np.full(len(wide), LARGEST_STEP_COUNT + 1))
    return np.maximum(found, 1)


def _bisect(passes: Callable[[np.ndarray], np.ndarray], low: np.ndarray,
            high: np.ndarray) -> np.ndarray:
    """Least k in (low, high] with passes(k), each `passes` monotone and true at `high`
    (or `high` is a sentinel); at most 64 halvings, one vectorised call each."""
    low, high = low.copy(), high.copy()
    for _ in range(64):
        open_ = high - low > 1
        if not open_.any():
            break
        middle = np.where(open_, (low + high) // 2, high)
        ok = passes(middle)
        high = np.where(open_ & ok, middle, high)
        low = np.where(open_ & ~ok, middle, low)
    return high


def _nearest_allowed(feature: str, now: float, step: float, side: int, lower: float,
                     upper: float) -> int:
    """The least k >= 1 whose grid point on `side` lies within [lower, upper] as far as its
    near end goes: 1 when `now` is within it, else the first point on or past the bound."""
    near = lower if side > 0 else upper
    if not side * (near - now) > 0:
        return 1
    first = int(_first_past(now, step, side, np.array([near]), True)[0])
    if first > LARGEST_STEP_COUNT:
        raise MutabilityError(f"[feature.{feature}] step {step:g} is too fine for the bound "
                              f"{near:g}: more than {LARGEST_STEP_COUNT:,} steps away")
    return first


def _distinct(values: np.ndarray) -> np.ndarray:
    """Sorted, without repeats (np.unique hashes first, which was most of the time here)."""
    values = np.sort(values)
    return values[np.concatenate([[True], values[1:] != values[:-1]])] if len(values) else values


def grid_run(feature: str, now: float, step: float, side: int, lower: float, upper: float,
             last_of: Callable[[int], int], count: int, found: list[np.ndarray],
             why: str) -> int:
    """Append to `found` the allowed step-grid points on one side of `now`, from the nearest
    allowed to `last_of(first)` (in steps); return the running count, refusing a grid
    longer than MOST_VALUES with `why` (why every point is weighed) in the message."""
    first = _nearest_allowed(feature, now, step, side, lower, upper)
    last = last_of(first)
    count += max(0, last - first + 1)
    if count > MOST_VALUES:
        raise MutabilityError(f"[feature.{feature}] {why}: more than {MOST_VALUES:,} on its "
                              "step grid; use a coarser step or tighter bounds")
    if last >= first:
        found.append(_points(now, step, side, np.arange(first, last + 1)))
    return count
