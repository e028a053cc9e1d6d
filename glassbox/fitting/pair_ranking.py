"""Rank candidate pairs of features for pairwise terms, after an additive model is fitted.

The ranking is the fast one of Lou, Caruana, Gehrke & Hooker (2013), "Accurate intelligible
models with pairwise interactions" (KDD): with the additive model's scores held fixed, each
pair of features is scored by how much the best small two-feature model of what is left
improves the fit. That small model has one cut on each feature, so four quadrants, each
with its own constant added to the score.

What "improves the fit" means here: the second-order (Newton) reduction of the loss at the
current scores. With g = y - p and h = p (1 - p) for classification (logit link), and
g = y - score and h = 1 for regression (identity link), a quadrant q with sums G_q and H_q
moves by G_q / H_q and the loss falls by G_q^2 / (2 H_q) to second order; the gain reported
is sum_q G_q^2 / H_q - G^2 / H (twice that reduction, less the one-constant model's), so
for regression it is exactly the fall in the residual sum of squares from the best
four-quadrant fit over the best constant fit.

How each feature is cut (deterministic, from the rows given):

- numbers (and integers and flags): one bin per distinct value when there are at most
  `bins` of them; otherwise cut at the training quantiles i / `bins` (values of the data,
  duplicates dropped), so a bin may hold more than its share where one value is common.
  A cut between bins is "value <= threshold", the threshold being a value of the data.
- categories: one bin per level, and a missing value a bin of its own. With at most
  EVERY_SPLIT_BINS bins every split of the bins in two is tried, so the search is exact.
  With more, the bins are ordered by their ratio G / H over all rows (to RATIO_DIGITS
  significant digits of the largest; ties by level, then missing) and only the cuts
  between consecutive bins of that order are tried: the paper's shortcut, which for one
  cut on one feature finds the best split (Fisher 1958; Breiman et al. 1984, CART) but
  for the four-quadrant model may miss a better one. Each result says which search it
  had (`PairRank.every_split`, "search" in `to_dict`).
- numbers with missing values: the missing bin joins whichever side of the cut serves the
  pair better (both are tried), or stands alone against every value.

A feature whose rows fall in one bin only (constant, no missing value) cannot be cut and
takes part in no pair. No row is sampled or left out.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from itertools import combinations
from numbers import Integral
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import DataError, OptionError
from glassbox.core.schema import Schema

LINKS = ("logit", "identity")
DEFAULT_BINS = 32
# a category with at most this many bins (levels, and missing) has every split of its bins
# tried (2 ** (bins - 1) - 1 of them); with more, the splits of its levels ordered by ratio
EVERY_SPLIT_BINS = 10
RATIO_DIGITS = 12
EVERY_SPLIT = "every split of each feature's bins"
ORDERED_SPLITS = (f"a category with more than {EVERY_SPLIT_BINS} bins split only between "
                  "its levels ordered by gradient / hessian ratio")


@dataclass(frozen=True)
class Cut:
    """One feature's cut in a pair: the rows on the first side of it.

    Numbers: values at most `threshold` (None: no value, the first side holds only the
    missing values). Categories: the levels in `levels` (the others are on the second
    side). `missing_first` says which side a missing value is on, and is None when the
    rows had no missing value of the feature.
    """

    numeric: bool
    threshold: float | None = None
    levels: tuple[str, ...] = ()
    missing_first: bool | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {}
        if self.numeric:
            out["at_most"] = self.threshold
        else:
            out["levels"] = list(self.levels)
        if self.missing_first is not None:
            out["missing"] = "first side" if self.missing_first else "second side"
        return out

    def first_side(self, values: pd.Series) -> np.ndarray:
        """Which of these values (typed as `prepare` types them) fall on the first side."""
        missing = values.isna().to_numpy()
        if self.numeric:
            numbers = values.to_numpy(dtype=float, na_value=np.nan)
            inside = (np.zeros(len(values), dtype=bool) if self.threshold is None
                      else numbers <= self.threshold)
        else:
            inside = values.isin(self.levels).to_numpy()
        return np.where(missing, bool(self.missing_first), inside)


@dataclass(frozen=True)
class PairRank:
    """One pair of features, its gain (see the module docstring) and the best cuts.

    `every_split` is False when a category of the pair had more than EVERY_SPLIT_BINS
    bins, so that its cuts were only those of its levels ordered by ratio.
    """

    feature_a: str
    feature_b: str
    gain: float
    cut_a: Cut
    cut_b: Cut
    every_split: bool = True

    def to_dict(self) -> dict[str, Any]:
        return {"features": [self.feature_a, self.feature_b], "gain": self.gain,
                "cuts": {self.feature_a: self.cut_a.to_dict(),
                         self.feature_b: self.cut_b.to_dict()},
                "search": EVERY_SPLIT if self.every_split else ORDERED_SPLITS}


@dataclass(frozen=True)
class _Binned:
    """A feature's bin of every row and the first sides its cuts may have.

    `sides` is a 0/1 matrix, one row per cut and one column per bin: 1 where the bin is
    on the first side of that cut.
    """

    name: str
    codes: np.ndarray  # int64 bin per row
    sides: np.ndarray  # cuts x bins
    thresholds: np.ndarray | None  # numbers: the largest value of each value bin
    levels: tuple[str, ...]  # categories: the level of each non-missing bin
    missing_bin: int | None  # the bin of missing values, if any
    every_split: bool

    @property
    def count(self) -> int:
        return self.sides.shape[1]

    def cut(self, index: int) -> Cut:
        """The cut of row `index` of `sides`."""
        first = np.flatnonzero(self.sides[index]).tolist()
        missing_first = None if self.missing_bin is None else self.missing_bin in first
        values = [b for b in first if b != self.missing_bin]
        if self.thresholds is not None:
            threshold = float(self.thresholds[max(values)]) if values else None
            return Cut(numeric=True, threshold=threshold, missing_first=missing_first)
        return Cut(numeric=False, levels=tuple(sorted(self.levels[b] for b in values)),
                   missing_first=missing_first)


def rank_pairs(features: pd.DataFrame, schema: Schema, target: np.ndarray,
               scores: np.ndarray, link: str, *, bins: int = DEFAULT_BINS,
               among: Sequence[str] | None = None) -> tuple[PairRank, ...]:
    """Every pair of the schema's used features (or of `among`), best first.

    `features` is the frame `glassbox.core.schema.prepare` types; `target` is 0/1 for
    classification or the values for regression; `scores` the additive model's scores on
    those rows on the link scale (`link` "logit" or "identity"). Sorted by gain, highest
    first, ties in the schema's feature order.
    """
    if link not in LINKS:
        raise OptionError(f"link {link!r} is not one of {', '.join(LINKS)}")
    if isinstance(bins, bool) or not isinstance(bins, Integral) or bins < 2:
        raise OptionError(f"bins must be a whole number of at least 2 (got {bins!r})")
    names = _chosen(features, schema, among)
    gradient, hessian = _derivatives(target, scores, link, len(features))
    binned = [_bin_feature(features[name], schema.feature(name).kind, gradient, hessian,
                           int(bins)) for name in names]
    binned = [b for b in binned if b.count >= 2]
    g_all, h_all = float(gradient.sum()), float(hessian.sum())
    base = g_all * g_all / h_all if h_all > 0 else 0.0
    ranks = []
    for index_a, index_b in combinations(range(len(binned)), 2):
        ranks.append((index_a, index_b,
                      _best_pair(binned[index_a], binned[index_b], gradient, hessian, base)))
    ranks.sort(key=lambda item: (-item[2].gain, item[0], item[1]))
    return tuple(rank for _, _, rank in ranks)


def _chosen(features: pd.DataFrame, schema: Schema, among: Sequence[str] | None) -> list[str]:
    used = [spec.name for spec in schema.used_features]
    if among is not None:
        if isinstance(among, str):
            raise OptionError("among must be a list of feature names, not one string")
        unknown = [name for name in among if name not in used]
        if unknown:
            raise OptionError(f"among: {', '.join(map(repr, unknown))} "
                              f"{'is' if len(unknown) == 1 else 'are'} not a used feature "
                              f"of the schema (used: {', '.join(used)})")
        wanted = set(among)
        used = [name for name in used if name in wanted]
    absent = [name for name in used if name not in features.columns]
    if absent:
        raise DataError(f"the features frame has no column {', '.join(map(repr, absent))}")
    return used


def _derivatives(target: np.ndarray, scores: np.ndarray, link: str,
                 rows: int) -> tuple[np.ndarray, np.ndarray]:
    """The loss's gradient (as y - prediction) and hessian at the scores, per row."""
    target = np.asarray(target, dtype=float)
    scores = np.asarray(scores, dtype=float)
    if target.shape != (rows,) or scores.shape != (rows,):
        raise DataError(f"target and scores must each have one value per row ({rows} rows; "
                        f"got {target.shape} and {scores.shape})")
    if not (np.isfinite(target).all() and np.isfinite(scores).all()):
        raise DataError("target and scores must be finite numbers on every row")
    if link == "identity":
        return target - scores, np.ones(rows)
    probability = 1.0 / (1.0 + np.exp(-scores))
    return target - probability, probability * (1.0 - probability)


def _bin_feature(values: pd.Series, kind: str, gradient: np.ndarray, hessian: np.ndarray,
                 bins: int) -> _Binned:
    missing = values.isna().to_numpy()
    name = str(values.name)
    if kind == "category":
        text = values.to_numpy(dtype=object)
        levels, inverse = np.unique(text[~missing].astype(str), return_inverse=True)
        codes = np.full(len(values), len(levels), dtype=np.int64)
        codes[~missing] = inverse
        count = len(levels) + int(missing.any())
        missing_bin = len(levels) if missing.any() else None
        if count <= EVERY_SPLIT_BINS:
            return _Binned(name, codes, _every_split(count), None, tuple(levels.tolist()),
                           missing_bin, True)
        g = np.bincount(codes, weights=gradient, minlength=count)
        h = np.bincount(codes, weights=hessian, minlength=count)
        order = np.lexsort((np.arange(count), _ratio_key(g, h)))  # ties by level, missing last
        sides = np.zeros((count - 1, count))
        for cut in range(count - 1):
            sides[cut, order[: cut + 1]] = 1.0
        return _Binned(name, codes, sides, None, tuple(levels.tolist()), missing_bin, False)
    numbers = values.to_numpy(dtype=float, na_value=np.nan)
    present = numbers[~missing]
    distinct = np.unique(present)
    if len(distinct) <= bins:
        thresholds = distinct
    else:
        quantiles = np.quantile(present, np.arange(1, bins) / bins, method="inverted_cdf")
        thresholds = np.unique(np.append(quantiles, distinct[-1]))
    value_bins = len(thresholds)
    codes = np.full(len(values), value_bins, dtype=np.int64)
    codes[~missing] = np.searchsorted(thresholds, present, side="left")
    below = np.tril(np.ones((value_bins - 1, value_bins)))  # cut i: value bins 0..i
    if not missing.any():
        return _Binned(name, codes, below, thresholds, (), None, True)
    sides = np.zeros((2 * (value_bins - 1) + 1, value_bins + 1))
    sides[0, value_bins] = 1.0  # the missing values alone
    sides[1::2, :value_bins] = below  # missing on the second side
    sides[2::2, :value_bins] = below  # missing on the first side
    sides[2::2, value_bins] = 1.0
    return _Binned(name, codes, sides, thresholds, (), value_bins, True)


def _ratio_key(g: np.ndarray, h: np.ndarray) -> np.ndarray:
    """G / H per bin, to RATIO_DIGITS significant digits of the largest: levels whose ratios
    are equal (say, the same rate in as many rows) then tie by level, whatever the order
    the sums were added in."""
    ratio = np.divide(g, h, out=np.zeros(len(g)), where=h > 0)
    largest = float(np.abs(ratio).max())
    if largest == 0.0:
        return ratio
    step = 10.0 ** (np.floor(np.log10(largest)) - RATIO_DIGITS + 1)
    return np.round(ratio / step) * step


def _every_split(count: int) -> np.ndarray:
    """Every split of `count` bins in two, once each: the first sides are the non-empty
    subsets of all bins but the last (in the order of their bit patterns)."""
    patterns = np.arange(1, 2 ** (count - 1))
    sides = np.zeros((len(patterns), count))
    sides[:, : count - 1] = (patterns[:, None] >> np.arange(count - 1)) & 1
    return sides


def _best_pair(a: _Binned, b: _Binned, gradient: np.ndarray, hessian: np.ndarray,
               base: float) -> PairRank:
    """The best four-quadrant model of the pair, from its 2-D histograms of g and h."""
    cells = a.codes * b.count + b.codes
    size = a.count * b.count
    gain = -base
    quadrants = []
    for weights in (gradient, hessian):
        grid = np.bincount(cells, weights=weights, minlength=size).reshape(a.count, b.count)
        first_first = a.sides @ grid @ b.sides.T  # cuts of a x cuts of b
        first_any = (a.sides @ grid.sum(axis=1))[:, None]
        any_first = (grid.sum(axis=0) @ b.sides.T)[None, :]
        first_second = first_any - first_first
        second_first = any_first - first_first
        second_second = grid.sum() - first_first - first_second - second_first
        quadrants.append((first_first, first_second, second_first, second_second))
    for g, h in zip(*quadrants, strict=True):
        gain = gain + np.divide(g * g, h, out=np.zeros_like(g), where=h > 0)
    best = int(np.argmax(gain))  # the first best, so ties keep the earliest cuts
    i, j = np.unravel_index(best, gain.shape)
    return PairRank(a.name, b.name, max(float(gain.flat[best]), 0.0), a.cut(int(i)),
                    b.cut(int(j)), a.every_split and b.every_split)
