"""The spline family's term tables, read from its coefficients and pygam's basis.

A term's value at a point is its basis row there times its coefficients; a curve's
basis is pygam's cubic B-spline basis, evaluated with scipy's B-splines on pygam's own
knot vector (the same functions: a test holds them to pygam's `build_columns`), so a
table can be checked against the fit at a million points quickly. Other terms use
pygam's `build_columns` itself.

Tables. An integer feature with a short range is tabulated at every whole number in
it; another curve at every distinct training value and an even grid when they fit in
`knots`, else at training quantiles and even points, refined where the table strays
more than `FIDELITY` from the fitted curve (the largest stray left is reported). The
pointwise 95% band is for the term centred on the training rows: its variance is
(b(x) - b̄)ᵀ Σ (b(x) - b̄), with b the basis row of the term (and of its missing-value
indicator), b̄ its mean over the training rows (from the bin counts) and Σ the
coefficients' covariance; the uncentred term's level is confounded with the
intercept, so its own band would be wide everywhere and hide where the shape itself
is uncertain.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from pygam.terms import TermList
from scipy import stats
from scipy.interpolate import BSpline

from glassbox.core.additive import CurveTerm, LevelsTerm, Term
from glassbox.fitting.families.spline_bins import Binned, term_basis

CANDIDATES = 1001  # even points over a feature's range that a curve table is checked at
START_SHARE = 8  # curve knots start as budget/8 even points and budget/8 quantiles
FIDELITY = 1e-4  # largest gap (link scale) between a curve table and the fit worth a knot
BAND = 0.95


def pygam_knots(term: Any) -> tuple[np.ndarray, float, float]:
    """pygam's knot vector for a compiled spline term, on its [0, 1] scale, and the map
    from the term's values to that scale (offset, width): as pygam's b_spline_basis."""
    low, high = np.sort(np.asarray(term.edge_knots_, dtype=float))[[0, -1]]
    width = high - low if high != low else 1.0
    order = term.spline_order
    boundary = np.linspace(0, 1, 1 + term.n_splines - order)
    extra = np.arange(1, order + 1) * (boundary[1] - boundary[0])
    knots = np.r_[-extra[::-1], boundary, 1 + extra]
    knots[-1] += 1e-9  # pygam keeps its last knot inclusive this way
    return knots, float(low), float(width)


def spline_basis(term: Any, points: np.ndarray) -> np.ndarray:
    """pygam's basis of a compiled spline term at points inside its training range."""
    knots, low, width = pygam_knots(term)
    unit = np.clip((np.asarray(points, dtype=float) - low) / width, 0.0, 1.0)
    return BSpline.design_matrix(unit, knots, term.spline_order).toarray()


@dataclass(frozen=True)
class Curves:
    """The fitted terms: pygam's compiled terms, coefficients, covariance, bins."""

    terms: TermList
    coef: np.ndarray
    covariance: np.ndarray
    binned: Binned
    known_scale: bool  # classification: the band's quantile is the normal one
    edof: float

    def basis(self, index: int, points: np.ndarray) -> np.ndarray:
        term = self.terms[index]
        if term.isintercept or type(term).__name__ != "SplineTerm":
            return term_basis(self.terms, index, points, len(self.binned.terms) - 1)
        return spline_basis(term, points)

    def values(self, index: int, points: np.ndarray) -> np.ndarray:
        """Term `index` at `points` (the scale it was fitted on), uncentred."""
        coef = self.coef[self.binned.positions[index]]
        term = self.terms[index]
        if type(term).__name__ != "SplineTerm":
            return self.basis(index, points) @ coef
        knots, low, width = pygam_knots(term)
        unit = np.clip((np.asarray(points, dtype=float) - low) / width, 0.0, 1.0)
        return BSpline(knots, coef, term.spline_order, extrapolate=False)(unit)

    def contribution(self, parts: Sequence[tuple[int, np.ndarray]], band: bool = True
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The sum of terms at points, one (term, points) pair each, with a 95% band
        (see the module)."""
        values = np.sum([self.values(i, points) for i, points in parts], axis=0)
        if not band:
            return values, values, values
        basis = np.hstack([self.basis(i, points) for i, points in parts])
        mean_row = np.concatenate([self.binned.mean_row(i) for i, _ in parts])
        positions = np.concatenate([self.binned.positions[i] for i, _ in parts])
        covariance = self.covariance[np.ix_(positions, positions)]
        offset = basis - mean_row
        variance = np.maximum(np.einsum("ij,jk,ik->i", offset, covariance, offset), 0.0)
        if self.known_scale:
            quantile = stats.norm.ppf(0.5 + BAND / 2)
        else:
            quantile = stats.t.ppf(0.5 + BAND / 2, df=self.binned.rows - self.edof)
        half = quantile * np.sqrt(variance)
        return values, values - half, values + half


def curve_knots(exact: Callable[[np.ndarray], np.ndarray], column: np.ndarray,
                budget: int, whole: bool) -> tuple[np.ndarray, float]:
    """Knots for a curve table and the largest gap between table and fit they leave.

    Candidates are every whole number in range (integer features with a short
    range), else every distinct training value and an even grid over the range.
    If the candidates fit the budget they are all knots; otherwise the start is
    every distinct value (when there are at most half a budget of them) or even
    points and training quantiles, refined by adding, in every gap that strays
    more than `FIDELITY` from the fit, the candidate where it strays most.
    """
    distinct = np.unique(column)
    low, high = float(distinct[0]), float(distinct[-1])
    if whole and high - low < CANDIDATES:
        candidates = np.arange(low, high + 1)
    else:
        candidates = np.unique(np.concatenate([distinct, np.linspace(low, high, CANDIDATES)]))
    if len(candidates) <= budget:
        return candidates, 0.0
    truth = exact(candidates)
    if len(distinct) <= budget // 2:
        chosen = np.searchsorted(candidates, distinct)
    else:
        start = max(2, budget // START_SHARE)
        chosen = np.unique(np.concatenate([
            np.linspace(0, len(candidates) - 1, start).round().astype(int),
            np.searchsorted(candidates, np.quantile(column, np.linspace(0, 1, start),
                                                    method="inverted_cdf")),
        ]))
    while True:
        error = np.abs(np.interp(candidates, candidates[chosen], truth[chosen]) - truth)
        room = budget - len(chosen)
        if error.max() <= FIDELITY or room <= 0:
            return candidates[chosen], float(error.max())
        gap = np.searchsorted(chosen, np.arange(len(candidates)))  # the gap each one lies in
        order = np.lexsort((-error, gap))  # by gap, worst first within a gap
        first = order[np.r_[True, np.diff(gap[order]) != 0]]
        worst = first[error[first] > FIDELITY]
        worst = worst[np.argsort(-error[worst], kind="stable")][:room]
        chosen = np.unique(np.concatenate([chosen, worst]))


def floats(values: np.ndarray) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


def compile_terms(curves: Curves, plans: Sequence[Any], features: pd.DataFrame, knots: int
                  ) -> tuple[list[Term], dict[str, float], dict[str, float]]:
    """One table per plan (curves tabulated in the feature's own units, from `features`);
    each curve's largest departure from the fit over its candidate points; each
    monotone repair."""
    terms: list[Term] = []
    errors: dict[str, float] = {}
    repairs: dict[str, float] = {}
    for index, plan in enumerate(plans):
        if plan.kind == "indicator":
            continue  # part of its feature's term
        if plan.kind == "levels":
            codes = np.arange(len(plan.levels), dtype=float)
            values, lower, upper = curves.contribution([(index, codes)])
            counts = curves.binned.terms[index].counts
            unseen = float(np.dot(counts, values) / counts.sum())
            terms.append(LevelsTerm(plan.feature, plan.levels, floats(values), unseen,
                                    floats(lower), floats(upper)))
            continue

        def exact(points: np.ndarray, index: int = index, plan: Any = plan) -> np.ndarray:
            return curves.values(index, plan.scale(points))
        raw = features[plan.feature].to_numpy(dtype=float)
        points, errors[plan.feature] = curve_knots(exact, raw[~np.isnan(raw)], knots,
                                                   plan.whole)
        parts = [(index, plan.scale(points))]
        if plan.indicator is not None:
            parts.append((plan.indicator, np.zeros(len(points))))
        values, lower, upper = curves.contribution(parts)
        if plan.constraint:
            # remove what the soft constraint leaves of wrong-way steps (about 1e-9)
            running = np.maximum if plan.constraint == "monotonic_inc" else np.minimum
            repaired = running.accumulate(values)
            repairs[plan.feature] = float(np.max(np.abs(repaired - values)))
            lower, upper = np.minimum(lower, repaired), np.maximum(upper, repaired)
            values = repaired
        gap = {}
        if plan.indicator is not None:
            value, low, high = curves.contribution([
                (index, plan.scale(np.array([plan.stand_in]))),
                (plan.indicator, np.ones(1))])
            gap = {"missing": float(value[0]), "missing_band": (float(low[0]), float(high[0]))}
        terms.append(CurveTerm(plan.feature, floats(points), floats(values), floats(lower),
                               floats(upper), **gap))
    return terms, errors, repairs


def binning_error(curves: Curves, plans: Sequence[Any], columns: Sequence[np.ndarray],
                  target: np.ndarray, scores: np.ndarray, classify: bool
                  ) -> dict[str, Any]:
    """What cutting into bins changed: per binned feature, the largest difference over its
    training rows between the fitted term at the row's own value and at its bin's point
    (link scale), and the training loss (log loss; regression: mean squared error) with
    every row at its bin points (as fitted) and at its own values."""
    binned = curves.binned
    shift = np.zeros(binned.rows)
    features: dict[str, Any] = {}
    for index, plan in enumerate(plans):
        bins = binned.terms[index]
        if bins.exact:
            continue
        at_points = curves.values(index, bins.points)[binned.index[:, index]]
        present = binned.index[:, index] < len(bins.points) - (plan.indicator is not None)
        change = np.where(present, curves.values(index, columns[index]) - at_points, 0.0)
        shift += change
        features[plan.feature] = {"distinct": bins.distinct,
                                  "bins": int(len(bins.points) - (plan.indicator is not None)),
                                  "largest_change": float(np.max(np.abs(change)))}
    if not features:
        return {"exact": True, "features": {}}
    return {"exact": False, "features": features, "loss": "log loss" if classify else
            "mean squared error", "loss_at_bin_points": loss(scores, target, classify),
            "loss_at_values": loss(scores + shift, target, classify)}


def loss(scores: np.ndarray, target: np.ndarray, classify: bool) -> float:
    if not classify:
        return float(np.mean((target - scores) ** 2))
    return float(np.mean(np.logaddexp(0.0, scores) - target * scores))
