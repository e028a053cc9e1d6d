"""Penalised-spline family: an additive model on pygam's terms compiled into term tables.

Terms. Each numeric feature gets a penalised cubic B-spline (`s`), each category
a factor term (`f`, levels coded 0, 1, ... in sorted order) and each flag or
other two-valued feature an unpenalised linear term (`l`). A monotone
declaration becomes pygam's `monotonic_inc` / `monotonic_dec` constraint on the
score (log-odds of the positive class). Classification is pygam's `LogisticGAM`
model, regression its `LinearGAM`, fitted here (pygam never sees the rows): the
rows are cut into bins per term (`bins`, spline_bins: exact when a feature has at
most `bins` distinct values; otherwise even bins on h, each at the mean of its
rows) and the penalised IRLS update is solved through normal equations formed
from bin counts (spline_iterate). What binning changed is in `details["bins"]`.

Scale. A spline is fitted on h(x), a monotone increasing map of the feature
chosen by `spline_scale` (spline_scale: "power", the Box-Cox power most like a
normal sample, by default; "rank", knots at training quantiles; "raw", pygam's
even knots), and tabulated in x. Each term's map is in `details["scales"]` and
its description in `details["terms"]`.

Penalty. Each spline and factor term gets its own multiplier from the
`penalties` grid, chosen by `criterion` ("risk": UBRE for classification, GCV
for regression; "aic") in a coordinate-wise search from the best shared value
(spline_penalty); `penalty_scope="shared"` keeps one multiplier for all. For
classification the search runs on the working model of each IRLS step (the
performance iteration, spline_iterate), and the recorded shared-stage values
(`criterion_values`, `criterion_edof`) are those of the final fit's working model;
`criterion_value` is the criterion of the fit itself. The grid, each term's
penalty and what the search did are kept in `details`.

Tables (spline_tables). Values and the pointwise 95% band are the fitted terms
at each knot. An integer feature with a short range is tabulated at every whole
number in it; another curve at every distinct training value and an even grid
when they fit in `knots`, else at training quantiles and even points, refined
where the table strays more than 1e-4 from the fitted curve (the largest stray
left is `details["table_error"]`). What the soft constraint leaves of wrong-way steps
(about 1e-9) is removed so monotone tables are exactly monotone
(`details["monotone_repair"]`). A level never seen in training scores the
training-weighted mean of the level values: 0, the average, once `fit_model`
has centred the term.

Missing values. A numeric feature whose training column has missing values gets a
0/1 indicator term (pygam `l`, unpenalised) beside its spline or linear term, fitted
jointly; the smooth sees the feature's median training value (the lower middle one,
a value it takes) in the missing rows. The indicator is unpenalised so the stand-in
does not matter: whatever value the smooth is evaluated at, the indicator moves the
missing rows' contribution freely, so the fit of the smooth and of every row is the
same for any stand-in inside the range (a penalty on the indicator would pull missing
rows toward the smooth at an arbitrary point). It is one coefficient, so it needs no
penalty for stability unless the missing rows are nearly all of one class. The
term's `missing` entry is what a missing row gets: the smooth at the stand-in plus the
indicator's coefficient; its band is that sum's, from the same covariance and
centring as the curve's (the curve's band now also carries the indicator's share of
the centring). A monotone declaration constrains the spline only. Each indicator's
rows, stand-in and coefficient are in `details["missing_indicators"]`, with a note
("unidentified") where the data cannot pin the entry down: missing rows all of one
class, or missing on exactly the rows of another feature (see `unidentified`); the
fit summary lists those features. A missing
category arrives as the level "(missing)" (see `fit_model`) and is fitted as a level.

Pairs. With `pairs` K > 0 the K best-ranked pairs of features are then fitted as
tensor-product terms, the mains held fixed (spline_pairs; `details["pairs"]`); with 0, the
default, nothing of that stage runs and the model is as without the option.

Errors and fallbacks. A feature with a single distinct value is a `DataError`.
A numeric feature with fewer distinct values than `splines` gets one basis
function per value (at least four); a monotone two-valued feature gets a
constrained spline of four, as pygam's linear term takes no constraint; both are
recorded in `details["fallbacks"]`. A bad option is an `OptionError` naming it.
A fit that did not converge leaves `details["converged"]` false. A
monotone category is refused by the schema itself.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from pygam.terms import FactorTerm, Intercept, LinearTerm, SplineTerm, TermList
from threadpoolctl import threadpool_limits

from glassbox.core.errors import DataError, OptionError, value_text
from glassbox.core.schema import Schema
from glassbox.core.wording import plural, verb
from glassbox.fitting.families.base import FamilyFit
from glassbox.fitting.families.spline_bins import bin_terms, extent_matrix
from glassbox.fitting.families.spline_iterate import Fitted, fit_binned
from glassbox.fitting.families.spline_pairs import fit_pairs
from glassbox.fitting.families.spline_penalty import build_problem
from glassbox.fitting.families.spline_scale import SCALES, Scale, fit_scale
from glassbox.fitting.families.spline_tables import Curves, binning_error, compile_terms

NAME = "spline"
DEFAULTS: dict[str, Any] = {
    "splines": 20,
    "penalties": (0.01, 0.1, 1.0, 10.0, 100.0, 1000.0, 10000.0),
    "criterion": "risk",
    "max_iter": 100,
    "knots": 400,
    "spline_scale": "power",
    "penalty_scope": "term",
    "bins": 1024,
    "pairs": 0,
}
CRITERIA = ("risk", "aic")
SCOPES = ("term", "shared")
SPLINE_ORDER = 3  # pygam's cubic B-splines: `basis - 3` knot intervals
MIN_SPLINES = SPLINE_ORDER + 1  # a B-spline basis needs more functions than its order
KNOT_RANGE = (10, 1000)
MIN_BINS = 2
CONSTRAINTS = {"increasing": "monotonic_inc", "decreasing": "monotonic_dec"}


@dataclass(frozen=True)
class TermPlan:
    """How one feature enters the pygam model."""

    feature: str
    kind: str  # "spline", "linear" or "levels"
    basis: int = 0
    constraint: str | None = None
    levels: tuple[str, ...] = ()
    whole: bool = False  # an integer feature: its tables need only whole numbers
    scale: Scale = Scale()  # pygam fits a spline on scale(x)
    # a numeric feature with missing training values: the term index of its indicator
    # ("indicator" plan), the value its missing rows stand at (a training value, in the
    # feature's own units) and how many rows had no value
    indicator: int | None = None
    stand_in: float = 0.0
    missing_rows: int = 0
    distinct: int = 2  # distinct training values (a missing value not counted)


def check_options(splines: Any, penalties: Any, criterion: Any, max_iter: Any,
                  knots: Any, spline_scale: Any = "power", penalty_scope: Any = "term",
                  bins: Any = 1024) -> tuple[float, ...]:
    """Validate the options; return the penalty grid sorted and without repeats."""
    for name, value, low, high in (("splines", splines, MIN_SPLINES, None),
                                   ("max_iter", max_iter, 1, None),
                                   ("bins", bins, MIN_BINS, None),
                                   ("knots", knots, *KNOT_RANGE)):
        whole = isinstance(value, int | np.integer) and not isinstance(value, bool)
        if not whole or value < low or (high is not None and value > high):
            span = f"at least {low}" if high is None else f"from {low} to {high}"
            raise OptionError(f"{name} must be a whole number {span}, not {value!r}")
    if criterion not in CRITERIA:
        raise OptionError(f"criterion must be one of {', '.join(CRITERIA)}, not {criterion!r}")
    for name, value, allowed in (("spline_scale", spline_scale, SCALES),
                                 ("penalty_scope", penalty_scope, SCOPES)):
        if value not in allowed:
            raise OptionError(f"{name} must be one of {', '.join(allowed)}, not {value!r}")
    grid = (penalties,) if isinstance(penalties, int | float) else penalties
    try:
        values = np.asarray(grid, dtype=float).ravel()
    except (TypeError, ValueError):
        values = np.array([np.nan])
    if isinstance(penalties, str | bytes | bool) or values.size == 0 or not np.all(
            np.isfinite(values)) or np.any(values <= 0):
        raise OptionError(f"penalties must be a non-empty list of positive numbers, "
                          f"not {penalties!r}")
    return tuple(float(v) for v in np.unique(values))


def plan_terms(features: pd.DataFrame, schema: Schema, splines: int,
               spline_scale: str = "power",
               ) -> tuple[list[TermPlan], np.ndarray, dict[str, str]]:
    """One plan per feature, then one "indicator" plan per numeric feature with missing
    values; the numeric matrix pygam fits on (each spline's column on its `spline_scale`,
    see spline_scale; a missing value at its stand-in, beside a 0/1 indicator column); and
    any fallbacks."""
    plans, columns, fallbacks = [], [], {}
    indicators: list[np.ndarray] = []
    for name in features.columns:
        spec = schema.feature(name)
        column = features[name]
        distinct = column.nunique()
        if distinct < 2:
            only = value_text(column.dropna().iloc[0])
            raise DataError(f"feature '{name}' has a single value ({only}) "
                            "in the training data; it cannot shape a score, so ignore it in the "
                            "schema")
        if spec.kind == "category":
            levels = tuple(sorted(str(v) for v in column.unique()))
            codes = pd.Categorical(column, categories=levels).codes
            plans.append(TermPlan(name, "levels", levels=levels, distinct=len(levels)))
            columns.append(codes.astype(float))
            continue
        values = column.to_numpy(dtype=float)
        absent = np.isnan(values)
        present = values[~absent]
        gap: dict[str, Any] = {}
        if absent.any():
            gap = {"indicator": len(features.columns) + len(indicators),
                   "stand_in": float(np.quantile(present, 0.5, method="inverted_cdf")),
                   "missing_rows": int(absent.sum())}
            indicators.append(absent.astype(float))
        constraint = CONSTRAINTS.get(spec.monotone or "")
        if distinct == 2 and constraint is None:
            plans.append(TermPlan(name, "linear", distinct=distinct, **gap))
            columns.append(np.where(absent, gap.get("stand_in", 0.0), values))
            continue
        if distinct == 2:
            basis = MIN_SPLINES
            fallbacks[name] = (f"two values and a monotone declaration: a constrained spline "
                               f"of {MIN_SPLINES} basis functions (pygam's linear term takes "
                               "no constraint)")
        else:
            basis = min(splines, max(MIN_SPLINES, distinct))
            if basis < splines:
                fallbacks[name] = (f"{distinct} distinct values: {basis} basis functions "
                                   f"instead of {splines}")
        # a few values, most of them small counts, can be squeezed together by a power
        # scale; evenly spaced knots keep each value apart
        few = distinct < splines and spline_scale != "raw"
        scale, fallback = fit_scale(present, "raw" if few else spline_scale,
                                    basis - SPLINE_ORDER)
        if few:
            fallback = "fitted on the values themselves (evenly spaced knots)"
        if fallback:
            fallbacks[name] = "; ".join(filter(None, (fallbacks.get(name), fallback)))
        plan = TermPlan(name, "spline", basis, constraint, whole=spec.kind == "integer",
                        scale=scale, distinct=distinct, **gap)
        plans.append(plan)
        columns.append(scale(np.where(absent, plan.stand_in, values)))
    owners = [plan.feature for plan in plans if plan.indicator is not None]
    plans += [TermPlan(name, "indicator") for name in owners]
    return plans, np.column_stack(columns + indicators), fallbacks


def term_list(plans: Sequence[TermPlan], penalty: float | Sequence[float]) -> TermList:
    """The pygam terms for the plans, smooth and factor term i at `penalty[i]` (or every
    one at `penalty`); a linear term and a missing-value indicator have no penalty."""
    each = [penalty] * len(plans) if isinstance(penalty, int | float) else list(penalty)
    terms = []
    for index, (plan, lam) in enumerate(zip(plans, each, strict=True)):
        if plan.kind == "levels":
            terms.append(FactorTerm(index, lam=lam))
        elif plan.kind in ("linear", "indicator"):
            terms.append(LinearTerm(index, penalties=None))
        else:
            terms.append(SplineTerm(index, n_splines=plan.basis, lam=lam,
                                    constraints=plan.constraint))
    return TermList(*terms)


def unidentified(plans: Sequence[TermPlan], matrix: np.ndarray, target: np.ndarray | None
                 ) -> dict[str, str]:
    """Missing-value entries the data cannot pin down, in words, by feature: missing rows
    all of one class (the unpenalised indicator has no finite estimate, so its entry is
    where the fit stopped), or missing on exactly the rows another feature is (only the
    sum of the two entries is fitted; pygam's conditioning ridge splits it)."""
    notes: dict[str, str] = {}
    owners = [plan for plan in plans if plan.indicator is not None]
    for plan in owners:
        rows = matrix[:, plan.indicator] == 1.0
        said = []
        if target is not None and np.ptp(target[rows]) == 0:
            said.append(f"its {plural(plan.missing_rows, 'missing row')} "
                        f"{verb(plan.missing_rows, 'is', 'are all')} "
                        f"{'positive' if target[rows][0] == 1 else 'negative'}: no finite "
                        "estimate, the entry is where the fit stopped")
        twins = [other.feature for other in owners if other is not plan
                 and np.array_equal(rows, matrix[:, other.indicator] == 1.0)]
        if twins:
            said.append(f"missing on exactly the rows {', '.join(twins)} is: only the sum of "
                        "their entries is fitted, split between them by pygam's "
                        "conditioning ridge")
        if said:
            notes[plan.feature] = "; ".join(said)
    return notes


def describe(plan: TermPlan) -> str:
    """A term in words, e.g. 'spline, 20 basis functions, knots at training quantiles,
    decreasing'."""
    gap = ("" if plan.indicator is None else
           f"; {plural(plan.missing_rows, 'missing value')}: an unpenalised indicator, those rows "
           f"fitted at {plan.stand_in:g}")
    if plan.kind != "spline":
        return plan.kind + gap
    direction = {value: key for key, value in CONSTRAINTS.items()}.get(plan.constraint or "")
    return (f"spline, {plan.basis} basis functions, {plan.scale.words()}"
            + (f", {direction}" if direction else "") + gap)


def search_note(fitted: Fitted, grid: Sequence[float], classify: bool) -> str:
    """What the penalty search did, in words, for the model file."""
    found = fitted.search
    where = ("on the working model (z, W) of the final penalised IRLS step, chosen afresh "
             f"at each step ({plural(fitted.searches, 'search', 'searches')} in "
             f"{plural(fitted.steps, 'step')}): "
             if classify else "")
    if found.sweeps == 0:
        said = "shared: every smooth and factor term at the grid value that scored best"
    else:
        said = (f"per term: from the best shared value, each term's penalty moved along the "
                f"grid while a step lowered the criterion; {plural(found.sweeps, 'sweep')} over "
                f"the "
                "terms, the last moving nothing, so no single term's neighbouring grid value "
                f"scores better (a coordinate-wise optimum; the full grid of {len(grid)} "
                "values per term over all terms together is not searched)")
    unsettled = f"; {fitted.unsettled}" if fitted.unsettled else ""
    return where + said + unsettled + check_note(fitted, grid)


def check_note(fitted: Fitted, grid: Sequence[float]) -> str:
    """The end check in words: which converged fits were compared, which was kept."""
    if not fitted.compared:
        return ""

    def words(positions: tuple[int | None, ...]) -> str:
        values = sorted({grid[p] for p in positions if p is not None})
        return ("every term at " + str(values[0]) if len(values) == 1
                else "the iteration's setting")

    listed = "; ".join(f"{words(p)}: {value:.6g}" + ("" if ok else " (not converged)")
                       for p, value, ok in fitted.compared)
    kept = ("the iteration's own" if fitted.positions == fitted.compared[0][0]
            else words(fitted.positions) + ", not the iteration's own (the recorded search "
            "is the one on the iteration's final working model)")
    halved = (f"; {plural(fitted.halved_steps, 'step')} halved "
              f"({plural(fitted.halvings, 'halving')}) "
              "because they raised the penalised deviance" if fitted.halvings else "")
    return (f"; then the true criterion of converged fits compared ({listed}); kept {kept}"
            + halved)


def fit(
    features: pd.DataFrame, target: np.ndarray, schema: Schema, *, task: str,
    splines: int = 20, penalties: Sequence[float] = DEFAULTS["penalties"],
    criterion: str = "risk", max_iter: int = 100, knots: int = 400,
    spline_scale: str = "power", penalty_scope: str = "term", bins: int = 1024,
    pairs: int = 0,
) -> FamilyFit:
    """Fit the penalised-spline family and compile it into term tables; with `pairs` K > 0,
    then the K best-ranked pairs as tensor-product tables (spline_pairs)."""
    grid = check_options(splines, penalties, criterion, max_iter, knots, spline_scale,
                         penalty_scope, bins)
    if isinstance(pairs, bool) or not isinstance(pairs, int | np.integer) or pairs < 0:
        raise OptionError(f"pairs must be a whole number, 0 or more, not {pairs!r}")
    target = np.asarray(target, dtype=float)
    classify = task == "classification"
    plans, matrix, fallbacks = plan_terms(features, schema, splines, spline_scale)
    notes = unidentified(plans, matrix, target if classify else None)
    columns = [matrix[:, index] for index in range(len(plans))]
    kinds = [plan.kind for plan in plans]
    # one BLAS thread: these matrices are small, and a fixed summation order keeps the
    # tables byte-identical from run to run
    with threadpool_limits(limits=1, user_api="blas"):
        terms = TermList(*term_list(plans, 1.0), Intercept())
        terms.compile(extent_matrix(columns, kinds))
        absent = [matrix[:, plan.indicator] == 1.0 if plan.indicator is not None else None
                  for plan in plans]
        binned = bin_terms(terms, columns, kinds, absent, [plan.distinct for plan in plans],
                           bins)
        monotone = [(i, plan.constraint == "monotonic_inc") for i, plan in enumerate(plans)
                    if plan.constraint]
        penalised = [plan.kind in ("spline", "levels") for plan in plans]
        problem = build_problem(terms, penalised + [False], monotone, classify)
        fitted = fit_binned(problem, binned, target, grid, criterion=criterion,
                            max_iter=max_iter, per_term=penalty_scope == "term")
        curves = Curves(terms, fitted.coef, fitted.covariance, binned, classify, fitted.edof)
        tables, table_errors, repairs = compile_terms(curves, plans, features, knots)
        binning = binning_error(curves, plans, columns, target, fitted.scores, classify)
    intercept = float(fitted.coef[binned.positions[-1]][0])
    found = fitted.search
    penalised_terms = [(plan.feature, p) for plan, p in zip(plans, fitted.positions,
                                                            strict=False) if p is not None]
    details: dict[str, Any] = {
        "model": "LogisticGAM" if classify else "LinearGAM",
        "terms": {plan.feature: describe(plan) for plan in plans if plan.kind != "indicator"},
        "missing_indicators": {
            plan.feature: {"rows": plan.missing_rows, "stand_in": plan.stand_in,
                           "effect": float(fitted.coef[binned.positions[plan.indicator]][0])}
            | ({"unidentified": notes[plan.feature]} if plan.feature in notes else {})
            for plan in plans if plan.indicator is not None},
        "scales": {plan.feature: plan.scale.record() for plan in plans
                   if plan.kind == "spline"},
        "bins": binning,
        "penalty_grid": list(grid),
        "criterion": found.statistic,
        "criterion_values": list(found.shared_values),
        "criterion_edof": list(found.shared_edof),
        "shared_penalty": grid[found.shared],
        "penalty_search": search_note(fitted, grid, classify),
        "penalties": {name: grid[p] for name, p in penalised_terms},
        "criterion_value": fitted.value,
        "penalty_at_grid_edge": sorted(name for name, p in penalised_terms
                                       if len(grid) > 1 and p in (0, len(grid) - 1)),
        "effective_degrees_of_freedom": fitted.edof,
        "converged": fitted.converged,
        "iterations": fitted.steps,
        "last_change": fitted.last_move,
        "penalties_settled": fitted.unsettled is None,
        "penalty_check": [{"penalties": {plan.feature: grid[p] for plan, p in
                                         zip(plans, positions, strict=False) if p is not None},
                           "criterion_value": value, "converged": ok,
                           "kept": positions == fitted.positions}
                          for positions, value, ok in fitted.compared],
        "step_halvings": fitted.halvings,
        "search_fits": found.fits,
        "search_unconverged": found.unsettled,
        "fallbacks": fallbacks,
        "table_error": table_errors,
        "monotone_repair": repairs,
    }
    parameters = {"splines": splines, "penalties": list(grid), "criterion": criterion,
                  "max_iter": max_iter, "knots": knots, "spline_scale": spline_scale,
                  "penalty_scope": penalty_scope, "bins": bins}
    if not pairs:
        return FamilyFit(intercept, tuple(tables), parameters, details)
    with threadpool_limits(limits=1, user_api="blas"):
        stage = fit_pairs(features, target, schema, plans, matrix, fitted.scores, count=pairs,
                          grid=grid, criterion=criterion, max_iter=max_iter,
                          per_term=penalty_scope == "term", bins=bins, classify=classify)
    parameters["pairs"] = pairs
    return FamilyFit(intercept + stage.intercept, tuple(tables), parameters,
                     details | stage.details, stage.pairs)
