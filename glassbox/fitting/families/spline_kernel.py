"""The spline family's passes over the training rows, compiled with numba (cache=True).

Every row is a tuple of bin numbers, one per term (spline_bins): `index[row, term]`.
A term's bins have flat numbers `offsets[term] + bin`, and each flat bin has the
window of its basis row that can be non-zero: `window[cell, :widths[term]]`,
starting at coefficient `starts[cell]` of the whole coefficient vector. The passes
run on one thread in row order, so a sum is the same bits from run to run.
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
def cross_sums(index: np.ndarray, weight: np.ndarray, term: int, bins: int, width: int,
               offsets: np.ndarray, starts: np.ndarray, window: np.ndarray,
               widths: np.ndarray) -> np.ndarray:
    """For each bin a of `term`: the weighted sum, over the rows in a, of every later term's
    basis row (columns of earlier terms and of `term` itself stay zero)."""
    rows, terms = index.shape
    sums = np.zeros((bins, width))
    for row in range(rows):
        w = weight[row]
        if w == 0.0:
            continue
        a = index[row, term]
        for later in range(term + 1, terms):
            cell = offsets[later] + index[row, later]
            start = starts[cell]
            for q in range(widths[later]):
                sums[a, start + q] += w * window[cell, q]
    return sums
