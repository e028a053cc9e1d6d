"""The spline family's passes over the training rows, compiled with numba (cache=True).

Every row is a tuple of bin numbers, one per term (spline_bins): `index[row, term]`.
A term's bins have flat numbers `offsets[term] + bin`. The passes run on one thread
in a fixed order, so a sum is the same bits from run to run.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True)
def row_scores(index: np.ndarray, offsets: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Each row's score: the sum of its bins' values (a term's value at each of its bins)."""
    rows, terms = index.shape
    scores = np.empty(rows)
    for row in range(rows):
        total = 0.0
        for term in range(terms):
            total += values[offsets[term] + index[row, term]]
        scores[row] = total
    return scores


@njit(cache=True)
def bin_sums(index: np.ndarray, offsets: np.ndarray, size: int, weight: np.ndarray,
             weighted: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per flat bin: the sum of `weight` and of `weighted` over the rows in it."""
    rows, terms = index.shape
    weights = np.zeros(size)
    totals = np.zeros(size)
    for row in range(rows):
        w, v = weight[row], weighted[row]
        for term in range(terms):
            cell = offsets[term] + index[row, term]
            weights[cell] += w
            totals[cell] += v
    return weights, totals


@njit(cache=True)
def pair_counts(later: np.ndarray, bounds: np.ndarray, weight: np.ndarray,
                columns: np.ndarray, width: int) -> np.ndarray:
    """For each bin a of a term and each bin b of every later term: the weight of the rows
    in both. `later` and `weight` hold the later terms' bins and the weights of the rows
    sorted by their bin of the term, bin a's rows at `bounds[a]:bounds[a + 1]`;
    `columns[k]` is later term k's first column of the counts."""
    bins = bounds.shape[0] - 1
    counts = np.zeros((bins, width))
    for a in range(bins):
        for position in range(bounds[a], bounds[a + 1]):
            w = weight[position]
            if w == 0.0:
                continue
            for k in range(later.shape[1]):
                counts[a, columns[k] + later[position, k]] += w
    return counts


@njit(cache=True)
def box_cox_variance(shifted: np.ndarray, weights: np.ndarray, power: float) -> float:
    """The weighted variance (divisor: the total weight) of the Box-Cox transform of
    exp(shifted) at `power`: two passes, each in the order of the values."""
    size = shifted.shape[0]
    mapped = np.empty(size)
    total = 0.0
    rows = 0.0
    for i in range(size):
        value = shifted[i] if power == 0.0 else np.expm1(power * shifted[i]) / power
        mapped[i] = value
        total += weights[i] * value
        rows += weights[i]
    mean = total / rows
    spread = 0.0
    for i in range(size):
        spread += weights[i] * (mapped[i] - mean) ** 2
    return spread / rows
