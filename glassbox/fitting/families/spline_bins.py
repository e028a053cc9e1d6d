"""The spline family's training rows as bins, and the normal equations formed from them.

Each term's rows are cut into bins on the scale pygam sees (a spline's h(x), a
category's codes, a flag's two values): a numeric feature with at most `bins`
distinct values gets one bin per value, so its fit is exact; otherwise its range on
h is cut into `bins` bins of even width (pygam's knots are evenly spaced on h, so
every knot interval is cut alike), empty ones dropped, and a bin's point is the
mean of h over its training rows. Rows with no value (at the feature's stand-in)
are a bin of their own at the stand-in. Each term's basis is pygam's own
(`build_columns`) evaluated at its bin points only.

The penalised IRLS update needs XᵀWX and XᵀWz for the rows × coefficients basis X;
neither is built from X. A diagonal block is Bⱼᵀ diag(c) Bⱼ with c the weight in
each bin of term j; the block of terms j < k is Bⱼᵀ Hⱼₖ, where row a of Hⱼₖ is the
weighted sum of term k's basis rows over the training rows in bin a of term j, i.e.
Cⱼₖ Bₖ with Cⱼₖ[a, b] the weight of the rows in bin a of j and bin b of k
(spline_kernel.pair_counts: for each term j one pass over the rows, sorted by their
bin of j, counting every later term's bins at once). XᵀWz and the scores
are per-term sums and look-ups (O(rows × terms)).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from pygam.terms import TermList

from glassbox.fitting.families.spline_kernel import bin_sums, pair_counts, row_scores


@dataclass(frozen=True)
class TermBins:
    """One term's bins: the points pygam's basis is evaluated at, and that basis."""

    points: np.ndarray  # on the scale pygam sees
    basis: np.ndarray  # bins x the term's coefficients
    counts: np.ndarray  # training rows per bin
    exact: bool  # every bin holds rows of one value only
    distinct: int  # distinct training values (rows with no value not counted)


@dataclass(frozen=True)
class Binned:
    """Every term's bins (the intercept last, one bin) and each row's bin per term."""

    index: np.ndarray  # rows x terms, int32, C order
    terms: tuple[TermBins, ...]
    positions: tuple[np.ndarray, ...]  # each term's coefficient positions
    width: int  # coefficients in all
    offsets: np.ndarray  # a term's first flat bin
    # per term but the intercept: the rows sorted by its bin, where each bin starts in that
    # order, and the later terms' bins of the rows in that order (see pair_counts)
    orders: tuple[np.ndarray, ...]
    bounds: tuple[np.ndarray, ...]
    later: tuple[np.ndarray, ...]

    @property
    def rows(self) -> int:
        return self.index.shape[0]

    def scores(self, coef: np.ndarray) -> np.ndarray:
        """Each training row's score (link scale) at the bin points, for coefficients `coef`."""
        values = np.concatenate([term.basis @ coef[positions] for term, positions
                                 in zip(self.terms, self.positions, strict=True)])
        return row_scores(self.index, self.offsets, values)

    def mean_row(self, term: int) -> np.ndarray:
        """The term's basis row averaged over the training rows."""
        bins = self.terms[term]
        return bins.counts @ bins.basis / self.rows

    def normal_equations(self, weight: np.ndarray, weighted: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
        """XᵀWX and Xᵀ(weighted) for row weights `weight` and a per-row vector `weighted`
        (W times a working residual, say), from the bins (see the module)."""
        weights, totals = bin_sums(self.index, self.offsets, int(self.offsets[-1]) + 1,
                                   weight, weighted)
        gram = np.zeros((self.width, self.width))
        cross = np.zeros((self.width, self.width))
        moment = np.zeros(self.width)
        last = len(self.terms) - 1
        for term, (bins, positions) in enumerate(zip(self.terms, self.positions, strict=True)):
            cells = slice(int(self.offsets[term]), int(self.offsets[term]) + len(bins.points))
            block = np.ix_(positions, positions)
            gram[block] = bins.basis.T @ (weights[cells, None] * bins.basis)
            moment[positions] = bins.basis.T @ totals[cells]
            if term < last:
                first = int(self.offsets[term + 1])
                counts = pair_counts(self.later[term], self.bounds[term],
                                     weight[self.orders[term]], self.offsets[term + 1:-1] - first,
                                     int(self.offsets[-1]) - first)
                left = bins.basis.T @ counts
                for later in range(term + 1, len(self.terms)):
                    cells = slice(int(self.offsets[later]) - first,
                                  int(self.offsets[later + 1]) - first)
                    cross[np.ix_(positions, self.positions[later])] = (
                        left[:, cells] @ self.terms[later].basis)
        return gram + cross + cross.T, moment


def bin_column(column: np.ndarray, absent: np.ndarray | None, distinct: int, bins: int
               ) -> tuple[np.ndarray, np.ndarray, bool]:
    """A column's bin points and each row's bin (see the module); whether it is exact."""
    present = column if absent is None else column[~absent]
    if distinct <= bins:
        inside, points = pd.factorize(present, sort=True)  # hashed: faster than a sort
        points = np.asarray(points, dtype=float)
        exact = True
    else:
        low, high = float(present.min()), float(present.max())
        raw = np.minimum(((present - low) * (bins / (high - low))).astype(np.int64), bins - 1)
        counts = np.bincount(raw, minlength=bins)
        sums = np.bincount(raw, weights=present, minlength=bins)
        kept = counts > 0
        points = sums[kept] / counts[kept]
        # a mean of values inside a bin stays inside the range, even after rounding
        points = np.clip(points, low, high)
        inside = (np.cumsum(kept) - 1)[raw]
        exact = False
    index = np.empty(len(column), dtype=np.int32)
    if absent is None:
        index[:] = inside
        return points, index, exact
    index[~absent] = inside
    index[absent] = len(points)
    return np.append(points, column[absent][0]), index, exact


def extent_matrix(columns: Sequence[np.ndarray], kinds: Sequence[str]) -> np.ndarray:
    """A small matrix pygam compiles the terms from as it would from the whole matrix:
    each column's smallest and largest value, and every code of a category."""
    levels = [int(column.max()) + 1 for column, kind in zip(columns, kinds, strict=True)
              if kind == "levels"]
    height = max([2, *levels])
    matrix = np.empty((height, len(columns)))
    for j, (column, kind) in enumerate(zip(columns, kinds, strict=True)):
        if kind == "levels":
            matrix[:, j] = np.minimum(np.arange(height), column.max())
        else:
            matrix[:, j] = column.max()
            matrix[0, j] = column.min()
    return matrix


def term_basis(terms: TermList, term: int, points: np.ndarray, width: int) -> np.ndarray:
    """pygam's basis of term `term` at `points` (its feature's column)."""
    grid = np.zeros((len(points), width))
    if not terms[term].isintercept:
        grid[:, terms[term].feature] = points
    return np.asarray(terms[term].build_columns(grid).toarray(), dtype=float)


def bin_terms(terms: TermList, columns: Sequence[np.ndarray], kinds: Sequence[str],
              absent: Sequence[np.ndarray | None], distinct: Sequence[int], bins: int
              ) -> Binned:
    """The bins of every term of `terms` (compiled; the intercept last) for the columns
    pygam sees; `absent` marks a spline's rows with no value (None: it has none)."""
    index = np.zeros((len(columns[0]), len(columns) + 1), dtype=np.int32)
    every: list[TermBins] = []
    for j, column in enumerate(columns):
        if kinds[j] == "levels":
            points = np.arange(int(column.max()) + 1, dtype=float)
            index[:, j] = column.astype(np.int32)
            exact = True
        else:
            points, index[:, j], exact = bin_column(column, absent[j], distinct[j], bins)
        counts = np.bincount(index[:, j], minlength=len(points)).astype(float)
        every.append(TermBins(points, term_basis(terms, j, points, len(columns)), counts,
                              exact, distinct[j]))
    every.append(TermBins(np.ones(1), np.ones((1, 1)), np.array([float(len(columns[0]))]),
                          True, 1))
    positions = tuple(np.asarray(terms.get_coef_indices(i)) for i in range(len(every)))
    sizes = [len(bins.points) for bins in every]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    narrow = index.astype(np.int16) if max(sizes) <= np.iinfo(np.int16).max else index
    orders, bounds, later = [], [], []
    for j in range(len(columns)):
        order = np.argsort(narrow[:, j], kind="stable").astype(np.int32)  # radix for 16 bits
        orders.append(order)
        bounds.append(np.concatenate([[0], np.cumsum(every[j].counts)]).astype(np.int64))
        later.append(np.ascontiguousarray(np.take(narrow, order, axis=0)[:, j + 1:]))
    return Binned(np.ascontiguousarray(index), tuple(every), positions,
                  int(sum(len(p) for p in positions)), offsets, tuple(orders), tuple(bounds),
                  tuple(later))
