"""The spline family's pairwise terms: tensor-product surfaces fitted after the main effects.

Which pairs. With `pairs` K > 0 the main effects are fitted as without pairs; then every
pair of features is ranked by `rank_pairs` (Lou, Caruana, Gehrke & Hooker 2013: the gain of
a four-quadrant model of what the main effects leave, at the main model's training scores)
and the top K are fitted. Every kind of feature can be in a pair.

Second stage. The pairs are fitted with the main effects held fixed, as an offset (the
main model's training scores), as Lou et al. fit their pairs on the residual of the fixed
additive model. The mains keep their fit, penalties and bands exactly; a joint refit would
share each tensor's unpenalised marginal directions (its straight lines along each axis)
with the main splines, identified only by pygam's tiny conditioning ridge, which blows up
the mains' bands. `purify` (fit.finished) then moves each surface's marginals into the two
main terms exactly, so nothing of the surface is lost.

Surface. Each pair is pygam's tensor-product term `te` of two marginals: a number's
penalised cubic B-spline of `PAIR_SPLINES` basis functions (fewer where its main term has
fewer) on the same scale h(x) as its main term; a category's, or a two-valued number's,
factor term (one-hot: one curve of the other feature per level). The penalty is pygam's
(P₁ ⊗ I + I ⊗ P₂) with one multiplier per pair, chosen from `penalties` by `criterion` as
the mains' are (spline_penalty, spline_iterate: the performance iteration, on the pair
stage's own working model). A monotone feature's marginal is constrained along its axis
(pygam's soft constraint on every coefficient chain along that axis), so the surface is
monotone in that feature at every value of the other; with the main term monotone too, the
total effect keeps the declared direction (`purify` preserves the total).

Bins. A pair's rows are binned in cells: the cells of the two features' bins (spline_bins'
`bin_column`, the same `bins` as the mains: exact when a feature has at most `bins`
distinct values), each cell at its two bin points. The normal equations come from the cells
(a sparse count of rows per pair of cells for two pairs). A binned pair's largest change at
the rows (surface at the row's own values against at its cell's point) is recorded, beside
its cells and the distinct pairs of values in its rows (`value_pairs`).

Tables. A number's axis is `knots` (bilinear between), a category's `levels`, a two-valued
number's `knots` at its two values. A number's knots are placed where the surface bends
(spline_pair_knots) so that the table scores within `FIDELITY` (0.001 on the link scale, the
promise the curves keep) of the surface over a fine grid of candidates; a table that would
need more than its knot budget is placed at a wider tolerance, and the largest stray left is
`details["pairs"]["table_error"]` (the tolerance used: `table_tolerance`).
A number with missing training values has a missing entry: the surface at the stand-in its
main term uses (its median), the value its missing rows were fitted at. What the soft
constraint leaves of wrong-way steps along a monotone axis is removed from the table and
recorded (`monotone_repair`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sparse
from pygam.terms import FactorTerm, Intercept, SplineTerm, TensorTerm, TermList

from glassbox.core.pairs import Axis, PairTerm, pair_name, table_tuple
from glassbox.core.schema import Schema
from glassbox.fitting.families.spline_bins import bin_column, extent_matrix
from glassbox.fitting.families.spline_iterate import Fitted, fit_binned
from glassbox.fitting.families.spline_pair_knots import (
    FIDELITY,
    Placed,
    place_knots,
    required_knots,
)
from glassbox.fitting.families.spline_pair_knots import axis_candidates as candidates_of
from glassbox.fitting.families.spline_penalty import build_problem
from glassbox.fitting.pair_ranking import PairRank, rank_pairs

PAIR_SPLINES = 8  # basis functions per number's axis of a tensor term (at most)
RANKING_KEPT = 20  # the first this many pairs of the ranking are recorded


@dataclass(frozen=True)
class Marginal:
    """One feature's axis of the pair stage: the column pygam sees, and how to read it."""

    feature: str
    plan: Any  # the feature's TermPlan (spline.py)
    column: np.ndarray  # h(x) with missing rows at the stand-in, or codes 0, 1, ...
    coded: bool  # a factor marginal (category or two-valued number)
    values: tuple[float, ...] = ()  # a two-valued number: the value of each code

    def term(self, index: int) -> Any:
        if self.coded:
            return FactorTerm(index)
        return SplineTerm(index, n_splines=min(PAIR_SPLINES, self.plan.basis))

    def to_column(self, raw: np.ndarray) -> np.ndarray:
        """What pygam sees for values in the feature's own units (a number's axis)."""
        return self.plan.scale(raw) if not self.coded else raw


def marginal(plan: Any, column: np.ndarray) -> Marginal:
    """The feature's marginal from its plan and its column of the main model's matrix."""
    if plan.kind == "levels":
        return Marginal(plan.feature, plan, column, True)
    if plan.kind == "linear":
        values = tuple(float(v) for v in np.unique(column))
        return Marginal(plan.feature, plan, (column == values[1]).astype(float), True,
                        values)
    return Marginal(plan.feature, plan, column, False)


@dataclass(frozen=True)
class Cells:
    """The pair stage's rows as cells (see the module): per pair, each row's cell and the
    tensor basis at every cell's point; the intercept last; the main model's scores as an
    offset. Answers what spline_iterate asks of `Binned`."""

    offset: np.ndarray
    cells: tuple[np.ndarray, ...]  # per pair: each row's cell
    bases: tuple[np.ndarray, ...]  # per pair: cells x coefficients
    positions: tuple[np.ndarray, ...]  # each term's coefficient positions (intercept last)
    width: int

    @property
    def rows(self) -> int:
        return len(self.offset)

    def scores(self, coef: np.ndarray) -> np.ndarray:
        scores = self.offset + coef[self.positions[-1]][0]
        for cells, basis, positions in zip(self.cells, self.bases, self.positions,
                                           strict=False):
            scores = scores + (basis @ coef[positions])[cells]
        return scores

    def normal_equations(self, weight: np.ndarray, weighted: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
        gram = np.zeros((self.width, self.width))
        moment = np.zeros(self.width)
        last = self.positions[-1]
        for j, (cells, basis, positions) in enumerate(zip(self.cells, self.bases,
                                                          self.positions, strict=False)):
            size = len(basis)
            weights = np.bincount(cells, weight, minlength=size)
            gram[np.ix_(positions, positions)] = basis.T @ (weights[:, None] * basis)
            moment[positions] = basis.T @ np.bincount(cells, weighted, minlength=size)
            gram[np.ix_(positions, last)] = (basis.T @ weights)[:, None]
            for k in range(j + 1, len(self.bases)):
                counts = sparse.csr_array((weight, (cells, self.cells[k])),
                                          shape=(size, len(self.bases[k])))
                gram[np.ix_(positions, self.positions[k])] = basis.T @ (counts @ self.bases[k])
        gram[np.ix_(last, last)] = float(np.sum(weight))
        moment[last] = float(np.sum(weighted))
        upper = np.triu(gram, 1)
        return np.triu(gram) + upper.T, moment


@dataclass(frozen=True)
class Surface:
    """One fitted pair: its two marginals, pygam's compiled tensor term, coefficients."""

    first: Marginal
    second: Marginal
    term: Any  # the compiled TensorTerm
    coef: np.ndarray  # n_first x n_second (pygam's order: the first axis slower)

    def basis(self, which: int, column: np.ndarray) -> np.ndarray:
        """The marginal's basis at values of the column pygam sees."""
        part = self.term._terms[which]  # noqa: SLF001 - pygam keeps its marginals there
        grid = np.zeros((len(column), int(part.feature) + 1))
        grid[:, part.feature] = column
        return np.asarray(part.build_columns(grid).toarray(), dtype=float)

    def grid(self, first: np.ndarray, second: np.ndarray) -> np.ndarray:
        """The surface on a grid of the columns pygam sees: first x second."""
        return self.basis(0, first) @ self.coef @ self.basis(1, second).T

    def at(self, first: np.ndarray, second: np.ndarray) -> np.ndarray:
        """The surface at each row's pair of values (columns pygam sees)."""
        return np.einsum("ri,ij,rj->r", self.basis(0, first), self.coef,
                         self.basis(1, second))


@dataclass(frozen=True)
class PairFit:
    """The pair stage: tables (uncentred), the stage's own intercept, what it did."""

    pairs: tuple[PairTerm, ...]
    intercept: float
    details: dict[str, Any]
    surfaces: tuple[Surface, ...]


def choose(features: pd.DataFrame, schema: Schema, target: np.ndarray, scores: np.ndarray,
           classify: bool, count: int) -> tuple[tuple[PairRank, ...], list[tuple[str, str]]]:
    """The ranking of every pair of the features at the main model's scores, and the top
    `count` pairs (fewer where there are fewer)."""
    if features.shape[1] < 2:
        return (), []
    ranks = rank_pairs(features, schema, target, scores, "logit" if classify else "identity",
                       among=list(features.columns))
    return ranks, [(r.feature_a, r.feature_b) for r in ranks[:count]]


def fit_pairs(features: pd.DataFrame, target: np.ndarray, schema: Schema,
              plans: Sequence[Any], matrix: np.ndarray, offset: np.ndarray, *, count: int,
              grid: Sequence[float], criterion: str, max_iter: int, per_term: bool,
              bins: int, classify: bool) -> PairFit:
    """Rank the pairs at the main model's training scores `offset` (link scale), fit the top
    `count` as tensor surfaces with the mains as an offset, and tabulate them (see the
    module). `plans` and `matrix` are the main model's (spline.plan_terms)."""
    ranks, chosen = choose(features, schema, target, offset, classify, count)
    record: dict[str, Any] = {
        "requested": count, "ranked": len(ranks),
        "ranking": [r.to_dict() for r in ranks[:RANKING_KEPT]],
        "ranking_note": (f"the first {min(RANKING_KEPT, len(ranks))} of {len(ranks)} pairs "
                         "ranked (Lou et al. 2013 four-quadrant gain at the main model's "
                         "training scores)"),
        "chosen": [pair_name(a, b) for a, b in chosen],
        "stage": ("second stage: tensor-product surfaces fitted with the main effects held "
                  "fixed as an offset; the mains keep their fit, and each surface's "
                  "marginals are then moved into them"),
    }
    if not chosen:
        record["note"] = "no pair: fewer than two features"
        return PairFit((), 0.0, {"pairs": record}, ())
    index = {plan.feature: i for i, plan in enumerate(plans) if plan.kind != "indicator"}
    names = list(dict.fromkeys(name for pair in chosen for name in pair))
    margins = {name: marginal(plans[index[name]], matrix[:, index[name]]) for name in names}
    columns = [margins[name].column for name in names]
    at = {name: i for i, name in enumerate(names)}
    tensors = [TensorTerm(margins[a].term(at[a]), margins[b].term(at[b])) for a, b in chosen]
    terms = TermList(*tensors, Intercept())
    terms.compile(extent_matrix(columns, ["levels" if margins[n].coded else "spline"
                                          for n in names]))
    axis_bins = {}
    for name in names:
        plan, column = margins[name].plan, margins[name].column
        if margins[name].coded:
            axis_bins[name] = (np.arange(int(column.max()) + 1, dtype=float),
                               column.astype(np.int64), True)
            continue
        absent = None if plan.indicator is None else matrix[:, plan.indicator] == 1.0
        points, rows, exact = bin_column(column, absent, plan.distinct, bins)
        axis_bins[name] = (points, rows.astype(np.int64), exact)
    cells, bases, binning = [], [], {}
    for k, (a, b) in enumerate(chosen):
        (pa, ra, ea), (pb, rb, eb) = axis_bins[a], axis_bins[b]
        keys, inverse = np.unique(ra * len(pb) + rb, return_inverse=True)
        grid_points = np.zeros((len(keys), len(names)))
        grid_points[:, at[a]] = pa[keys // len(pb)]
        grid_points[:, at[b]] = pb[keys % len(pb)]
        cells.append(inverse.astype(np.int64).ravel())
        bases.append(np.asarray(tensors[k].build_columns(grid_points).toarray(), dtype=float))
        binning[pair_name(a, b)] = {"cells": int(len(keys)), "exact": bool(ea and eb),
                                    "value_pairs": int(len(features[[a, b]].drop_duplicates()))}
    positions = tuple(np.asarray(terms.get_coef_indices(i)) for i in range(len(chosen) + 1))
    data = Cells(np.asarray(offset, dtype=float), tuple(cells), tuple(bases), positions,
                 int(terms.n_coefs))
    problem = build_problem(terms, [True] * len(chosen) + [False], [], classify)
    problem = replace(problem, monotone=chains(chosen, margins, tensors, positions))
    fitted = fit_binned(problem, data, target, grid, criterion=criterion, max_iter=max_iter,
                        per_term=per_term, begin=np.zeros(data.width))
    surfaces = tuple(Surface(margins[a], margins[b], tensors[k],
                             fitted.coef[positions[k]].reshape(
                                 tensors[k]._terms[0].n_coefs,  # noqa: SLF001
                                 tensors[k]._terms[1].n_coefs))  # noqa: SLF001
                     for k, (a, b) in enumerate(chosen))
    tables, placed, repairs = [], {}, {}
    for surface in surfaces:
        table, placed[pair_name(surface.first.feature, surface.second.feature)], repair = (
            tabulate(surface, features))
        tables.append(table)
        if repair is not None:
            repairs[table.name] = repair
    for k, surface in enumerate(surfaces):
        name = tables[k].name
        if not binning[name]["exact"]:
            own = surface.at(surface.first.column, surface.second.column)
            binning[name]["largest_change"] = float(np.max(np.abs(
                own - (bases[k] @ fitted.coef[positions[k]])[cells[k]])))
    record |= stage_record(fitted, grid, chosen, margins, tables, placed, repairs, binning)
    return PairFit(tuple(tables), float(fitted.coef[positions[-1]][0]), {"pairs": record},
                   surfaces)


def chains(chosen: Sequence[tuple[str, str]], margins: dict[str, Marginal],
           tensors: Sequence[Any], positions: Sequence[np.ndarray]
           ) -> tuple[tuple[np.ndarray, bool], ...]:
    """pygam's monotone constraint along each monotone axis: one chain of coefficients per
    entry of the other axis (the coefficients are first-axis-major)."""
    out: list[tuple[np.ndarray, bool]] = []
    for k, (a, b) in enumerate(chosen):
        shape = (tensors[k]._terms[0].n_coefs, tensors[k]._terms[1].n_coefs)  # noqa: SLF001
        block = np.asarray(positions[k]).reshape(shape)
        for which, name in enumerate((a, b)):
            constraint = margins[name].plan.constraint
            if margins[name].coded or not constraint:
                continue
            lines = block.T if which == 0 else block
            out += [(line, constraint == "monotonic_inc") for line in lines]
    return tuple(out)


def axis_candidates(margin: Marginal, raw: np.ndarray) -> np.ndarray:
    """Where a number's axis is checked (spline_pair_knots), in the feature's own units."""
    return candidates_of(margin.plan.whole, raw, margin.plan.scale)


def tabulate(surface: Surface, features: pd.DataFrame
             ) -> tuple[PairTerm, Placed, float | None]:
    """The pair's table (see the module), where its knots went with the largest stray they
    leave, and the monotone repair (None: no monotone axis)."""
    margins = (surface.first, surface.second)
    candidates, required, columns = [], [], []
    for margin in margins:
        if margin.coded:
            codes = np.arange(len(margin.plan.levels) if margin.plan.kind == "levels"
                              else 2, dtype=float)
            candidates.append(codes)
            required.append(np.arange(len(codes)))
            columns.append(codes)
            continue
        raw = features[margin.feature].to_numpy(dtype=float)
        found = axis_candidates(margin, raw)
        candidates.append(found)
        required.append(required_knots(found, raw))
        columns.append(margin.to_column(found))
    truth = surface.grid(columns[0], columns[1])
    placed = place_knots(truth, candidates, required, [not m.coded for m in margins])
    chosen = placed.chosen
    values = truth[np.ix_(chosen[0], chosen[1])]
    axes, extra = [], []
    for i, margin in enumerate(margins):
        plan = margin.plan
        if plan.kind == "levels":
            axes.append(Axis(margin.feature, "levels", tuple(plan.levels)))
            extra.append(None)
            continue
        points = (margin.values if margin.coded else
                  tuple(float(v) for v in candidates[i][chosen[i]]))
        missing = plan.indicator is not None
        axes.append(Axis(margin.feature, "knots", points, missing))
        if not missing:
            extra.append(None)
        elif margin.coded:
            extra.append(np.array([float(margin.values.index(plan.stand_in))]))
        else:
            extra.append(margin.to_column(np.array([plan.stand_in])))
    # the missing entries: the surface at the stand-in, against the other axis's entries
    read = [columns[i][chosen[i]] for i in (0, 1)]
    if extra[0] is not None:
        values = np.vstack([values, surface.grid(extra[0], read[1])])
    if extra[1] is not None:
        below = read[0] if extra[0] is None else np.r_[read[0], extra[0]]
        values = np.hstack([values, surface.grid(below, extra[1])])
    repair = None
    for i, margin in enumerate(margins):
        if margin.coded or not margin.plan.constraint:
            continue
        running = np.maximum if margin.plan.constraint == "monotonic_inc" else np.minimum
        own = slice(0, axes[i].values_size)
        part = values[own, :] if i == 0 else values[:, own]
        repaired = running.accumulate(part, axis=i)
        repair = max(repair or 0.0, float(np.max(np.abs(repaired - part))))
        if i == 0:
            values[own, :] = repaired
        else:
            values[:, own] = repaired
    return PairTerm(axes[0], axes[1], table_tuple(values)), placed, repair


def stage_record(fitted: Fitted, grid: Sequence[float], chosen: Sequence[tuple[str, str]],
                 margins: dict[str, Marginal], tables: Sequence[PairTerm],
                 placed: dict[str, Placed], repairs: dict[str, float],
                 binning: dict[str, Any]) -> dict[str, Any]:
    """What the pair stage did, for `details["pairs"]`."""

    def words(name: str) -> str:
        margin = margins[name]
        if margin.coded:
            return f"{name}: factor (one curve of the other feature per value)"
        said = f"{name}: spline, {min(PAIR_SPLINES, margin.plan.basis)} basis functions"
        if margin.plan.constraint:
            said += ", constrained " + ("increasing" if margin.plan.constraint ==
                                        "monotonic_inc" else "decreasing")
        return said

    return {
        "terms": {pair_name(a, b): f"tensor product; {words(a)}; {words(b)}"
                  for a, b in chosen},
        "penalties": {pair_name(a, b): grid[p] for (a, b), p
                      in zip(chosen, fitted.positions, strict=False)},
        "criterion": fitted.search.statistic,
        "criterion_value": fitted.value,
        "effective_degrees_of_freedom": fitted.edof,
        "converged": fitted.converged,
        "iterations": fitted.steps,
        "penalties_settled": fitted.unsettled is None,
        "table_error": {name: p.stray for name, p in placed.items()},
        "table_promise": FIDELITY,
        "table_tolerance": {name: p.tolerance for name, p in placed.items()},
        "table_knots": {t.name: [t.first.size, t.second.size] for t in tables},
        "monotone_repair": repairs,
        "bins": binning,
    }
