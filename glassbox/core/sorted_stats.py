"""Statistics of a column read from its values once sorted, each equal to the bit to what
numpy computes on the unsorted values (which partitions them again for every call)."""

from __future__ import annotations

import numpy as np


def sorted_percentiles(values: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """np.percentile(values, grid) (its default linear method) of sorted values, read
    from them where numpy would first partition them: numpy's own steps and arithmetic
    (the position (n - 1) * q, its floor and the next, the weight between them, and the
    two-sided interpolation), so the same numbers."""
    count = len(values)
    virtual = (count - 1) * np.true_divide(grid, 100)
    previous = np.floor(virtual)
    following = previous + 1
    above, below = virtual >= count - 1, virtual < 0
    previous[above], following[above] = -1, -1
    previous[below], following[below] = 0, 0
    previous, following = previous.astype(np.intp), following.astype(np.intp)
    weight = virtual - previous
    low, high = values[previous], values[following]
    step = high - low
    result = np.add(low, step * weight)
    np.subtract(high, step * (1 - weight), out=result, where=weight >= 0.5)
    return result


def sorted_median(values: np.ndarray) -> float:
    """np.median of sorted values, from its middle one or two (numpy averages the same)."""
    return float(np.median(values[(len(values) - 1) // 2:len(values) // 2 + 1]))


def deviation_median(values: np.ndarray, median: float) -> float:
    """np.median(np.abs(values - median)) of sorted values without a pass over them: the
    distances below the median, read from it downwards, and those above, read upwards, are
    two sorted runs (a float difference rounds alike either way round), so the middle
    one or two of their merge are found by bisection."""
    split = int(np.searchsorted(values, median, side="left"))
    below, above = split, len(values) - split

    def distance(rank: int) -> float:  # the rank-th smallest distance, from 0
        low, high = max(0, rank + 1 - above), min(rank + 1, below)
        while low < high:  # how many of the rank + 1 smallest lie below the median
            taken = (low + high) // 2
            if rank - taken >= 0 and taken < below and \
                    values[split + rank - taken] - median > median - values[split - 1 - taken]:
                low = taken + 1
            else:
                high = taken
        taken = low
        candidates = ([median - values[split - taken]] if taken else []) + (
            [values[split + rank - taken] - median] if rank + 1 - taken else [])
        return max(candidates)

    count = len(values)
    middle = [distance((count - 1) // 2)] + ([distance(count // 2)] if count % 2 == 0 else [])
    return float(np.median(np.array(middle, dtype=float)))
