"""Penalised-spline family: a pygam additive model compiled into term tables.

Terms. Each numeric feature gets a penalised cubic B-spline (`s`), each category
a factor term (`f`, levels coded 0, 1, ... in sorted order) and each flag or
other two-valued feature an unpenalised linear term (`l`). A monotone
declaration becomes pygam's `monotonic_inc` / `monotonic_dec` constraint on the
score (log-odds of the positive class). Classification uses `LogisticGAM`,
regression `LinearGAM`.

Penalty. One multiplier, shared by every spline and factor term, is chosen from
the `penalties` grid by `criterion`: "risk" is pygam's estimate of prediction
risk (UBRE for classification, GCV for regression, both counting effective
degrees of freedom 1.4 times as pygam does), "aic" the AIC. The search applies
pygam's penalised IRLS update to pygam's own basis, penalty and constraint
matrices through the normal equations, at a fraction of the cost of a pygam fit;
pygam then fits once, at the chosen penalty, started from the search's solution.
The grid, the criterion values and the choice are kept in `details`.

Tables. Values and the pointwise 95% band are pygam's partial dependence at each
knot. An integer feature with a short range is tabulated at every whole number
in it; another curve at every distinct training value and an even grid when they
fit in `knots`, else at training quantiles and even points, refined where the
table strays more than 1e-4 from pygam (the largest stray left is
`details["table_error"]`). What the soft constraint leaves of wrong-way steps
(about 1e-9) is removed so monotone tables are exactly monotone
(`details["monotone_repair"]`). A level never seen in training scores the
training-weighted mean of the level values: 0, the average, once `fit_model`
has centred the term.

Errors and fallbacks. A feature with a single distinct value is a `DataError`.
A numeric feature with fewer distinct values than `splines` gets one basis
function per value (at least four); a monotone two-valued feature gets a
constrained spline of four, as pygam's linear term takes no constraint; both are
recorded in `details["fallbacks"]`. A bad option is an `OptionError` naming it.
A pygam fit that did not converge leaves `details["converged"]` false. A
monotone category is refused by the schema itself.
"""

from __future__ import annotations

import contextlib
import io
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from pygam import LinearGAM, LogisticGAM
from pygam.terms import FactorTerm, Intercept, LinearTerm, SplineTerm, TermList
from scipy import stats
from scipy.special import expit
from threadpoolctl import threadpool_limits

from glassbox.additive import CurveTerm, LevelsTerm, Term
from glassbox.errors import DataError, OptionError
from glassbox.families.base import FamilyFit
from glassbox.schema import Schema

NAME = "spline"
DEFAULTS: dict[str, Any] = {
    "splines": 20,
    "penalties": (0.01, 0.1, 1.0, 10.0, 100.0, 1000.0, 10000.0),
    "criterion": "risk",
    "max_iter": 100,
    "knots": 400,
}
CRITERIA = ("risk", "aic")
MIN_SPLINES = 4  # a cubic B-spline basis needs more functions than its order (3)
KNOT_RANGE = (10, 1000)
CANDIDATES = 1001  # even points over a feature's range that a curve table is checked at
START_SHARE = 8  # curve knots start as budget/8 even points and budget/8 quantiles
FIDELITY = 1e-4  # largest gap (link scale) between a curve table and pygam worth a knot
GAMMA = 1.4  # pygam's weight on effective degrees of freedom in UBRE and GCV
BAND = 0.95
EPS = np.finfo(float).eps
# The search stops when no training score (link scale) moves by more than this; pygam's soft
# monotone constraint can make the update cycle at about this size when the penalty is small.
SEARCH_TOL = 1e-4
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


def check_options(splines: Any, penalties: Any, criterion: Any, max_iter: Any,
                  knots: Any) -> tuple[float, ...]:
    """Validate the options; return the penalty grid sorted and without repeats."""
    for name, value, low, high in (("splines", splines, MIN_SPLINES, None),
                                   ("max_iter", max_iter, 1, None),
                                   ("knots", knots, *KNOT_RANGE)):
        whole = isinstance(value, int | np.integer) and not isinstance(value, bool)
        if not whole or value < low or (high is not None and value > high):
            span = f"at least {low}" if high is None else f"from {low} to {high}"
            raise OptionError(f"{name} must be a whole number {span}, not {value!r}")
    if criterion not in CRITERIA:
        raise OptionError(f"criterion must be one of {', '.join(CRITERIA)}, not {criterion!r}")
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


def plan_terms(features: pd.DataFrame, schema: Schema, splines: int
               ) -> tuple[list[TermPlan], np.ndarray, dict[str, str]]:
    """One plan per feature, the numeric matrix pygam fits on, and any fallbacks."""
    plans, columns, fallbacks = [], [], {}
    for name in features.columns:
        spec = schema.feature(name)
        column = features[name]
        distinct = column.nunique()
        if distinct < 2:
            raise DataError(f"feature '{name}' has a single value ({column.iloc[0]!r}) in the "
                            "training data; it cannot shape a score, so ignore it in the schema")
        if spec.kind == "category":
            levels = tuple(sorted(str(v) for v in column.unique()))
            codes = pd.Categorical(column, categories=levels).codes
            plans.append(TermPlan(name, "levels", levels=levels))
            columns.append(codes.astype(float))
            continue
        columns.append(column.to_numpy(dtype=float))
        constraint = CONSTRAINTS.get(spec.monotone or "")
        if distinct == 2 and constraint is None:
            plans.append(TermPlan(name, "linear"))
        elif distinct == 2:
            plans.append(TermPlan(name, "spline", MIN_SPLINES, constraint))
            fallbacks[name] = (f"two values and a monotone declaration: a constrained spline "
                               f"of {MIN_SPLINES} basis functions (pygam's linear term takes "
                               "no constraint)")
        else:
            basis = min(splines, max(MIN_SPLINES, distinct))
            plans.append(TermPlan(name, "spline", basis, constraint,
                                  whole=spec.kind == "integer"))
            if basis < splines:
                fallbacks[name] = (f"{distinct} distinct values: {basis} basis functions "
                                   f"instead of {splines}")
    return plans, np.column_stack(columns), fallbacks


def term_list(plans: Sequence[TermPlan], penalty: float) -> TermList:
    """The pygam terms for the plans, every smooth and factor term at `penalty`."""
    terms = []
    for index, plan in enumerate(plans):
        if plan.kind == "levels":
            terms.append(FactorTerm(index, lam=penalty))
        elif plan.kind == "linear":
            terms.append(LinearTerm(index, penalties=None))
        else:
            terms.append(SplineTerm(index, n_splines=plan.basis, lam=penalty,
                                    constraints=plan.constraint))
    return TermList(*terms)


def make_gam(task: str, plans: Sequence[TermPlan], penalty: float,
             max_iter: int) -> LinearGAM | LogisticGAM:
    model = LogisticGAM if task == "classification" else LinearGAM
    return model(term_list(plans, penalty), max_iter=max_iter)


@dataclass(frozen=True)
class Search:
    """The penalty search: criterion value per penalty, the choice, its coefficients."""

    statistic: str
    values: tuple[float | None, ...]
    chosen: int
    coefficients: np.ndarray
    unconverged: tuple[float, ...]  # penalties where the update still moved at max_iter


@dataclass(frozen=True)
class Problem:
    """pygam's basis and unit penalty for the plans, and where its constraints apply."""

    basis: np.ndarray  # rows x coefficients
    unit_penalty: np.ndarray
    monotone: tuple[tuple[np.ndarray, bool], ...]  # (coefficient positions, increasing)
    constraint_lam: float
    constraint_l2: float
    classify: bool


def constraint_matrix(problem: Problem, coef: np.ndarray) -> np.ndarray:
    """pygam's monotone constraint in quadratic form: a large penalty on wrong-way steps."""
    width = len(coef)
    matrix = np.zeros((width, width))
    for positions, increasing in problem.monotone:
        steps = np.diff(coef[positions])
        wrong = np.flatnonzero(steps < 0 if increasing else steps > 0)
        if wrong.size == 0:
            continue
        difference = np.zeros((wrong.size, len(positions)))
        difference[np.arange(wrong.size), wrong] = -1.0
        difference[np.arange(wrong.size), wrong + 1] = 1.0
        block = problem.constraint_lam * difference.T @ difference
        block += problem.constraint_l2 * np.eye(len(positions))
        matrix[np.ix_(positions, positions)] += block
    return matrix


def pirls(problem: Problem, target: np.ndarray, penalty: float, start: np.ndarray,
          max_iter: int) -> tuple[np.ndarray, float, bool]:
    """pygam's penalised IRLS update via the normal equations: coefficients, edof, converged."""
    basis, width = problem.basis, problem.basis.shape[1]
    fixed = penalty * problem.unit_penalty + np.sqrt(EPS) * np.eye(width)
    coef = start
    gram = basis.T @ basis
    moment = basis.T @ target
    for _ in range(max_iter):
        score = basis @ coef
        if problem.classify:  # weight x working response = weight x score + residual
            mu = expit(score)
            keep = np.sqrt(mu * (1 - mu)) >= np.sqrt(EPS)  # pygam drops negligible weights
            weight = np.where(keep, mu * (1 - mu), 0.0)
            scaled = basis * np.sqrt(weight)[:, None]
            gram = scaled.T @ scaled  # numpy computes a product with its own transpose at half cost
            moment = basis.T @ (weight * score + np.where(keep, target - mu, 0.0))
        system = gram + fixed + constraint_matrix(problem, coef)
        try:
            update = np.linalg.solve(system, moment)
        except np.linalg.LinAlgError:
            update = np.full(width, np.nan)
        if not np.all(np.isfinite(update)):
            return coef, np.nan, False
        # the coefficients may drift along directions the scores cannot see (an
        # intercept shared between terms), so convergence is judged on the scores
        change = float(np.max(np.abs(basis @ (update - coef))))
        coef = update
        if change < SEARCH_TOL:
            return coef, float(np.trace(np.linalg.solve(system, gram))), True
    return coef, float(np.trace(np.linalg.solve(system, gram))), False


def criterion_value(problem: Problem, target: np.ndarray, coef: np.ndarray, edof: float,
                    criterion: str) -> float:
    """UBRE / GCV (pygam's, without its constant offset) or AIC at the coefficients."""
    score = problem.basis @ coef
    rows = len(target)
    if problem.classify:
        mu = np.clip(expit(score), EPS, 1 - EPS)
        deviance = float(-2 * np.sum(target * np.log(mu) + (1 - target) * np.log(1 - mu)))
        if criterion == "aic":
            return deviance + 2 * edof
        return deviance / rows + 2 * GAMMA * edof / rows
    deviance = float(np.sum((target - score) ** 2))
    if criterion == "aic":
        variance = deviance / (rows - edof)
        return float(rows * np.log(2 * np.pi * variance) + deviance / variance + 2 * edof + 2)
    return rows * deviance / (rows - GAMMA * edof) ** 2


def search_penalty(matrix: np.ndarray, target: np.ndarray, plans: Sequence[TermPlan],
                   grid: Sequence[float], *, task: str, criterion: str,
                   max_iter: int) -> Search:
    """Each penalty of the grid, largest first and warm-started; the best by `criterion`."""
    terms = TermList(*term_list(plans, 1.0), Intercept())
    terms.compile(matrix)
    classify = task == "classification"
    reference = LogisticGAM() if classify else LinearGAM()
    monotone = tuple((np.asarray(terms.get_coef_indices(i)), plan.constraint == "monotonic_inc")
                     for i, plan in enumerate(plans) if plan.constraint)
    problem = Problem(terms.build_columns(matrix).toarray(), terms.build_penalties().toarray(),
                      monotone, float(getattr(reference, "_constraint_lam", 1e9)),
                      float(getattr(reference, "_constraint_l2", 1e-3)), classify)
    start = np.zeros(problem.basis.shape[1])
    mean = float(np.clip(target.mean(), 1e-6, 1 - 1e-6)) if classify else float(target.mean())
    start[-1] = np.log(mean / (1 - mean)) if classify else mean
    values: list[float | None] = [None] * len(grid)
    solutions: dict[int, np.ndarray] = {}
    unconverged = []
    coef = start
    for position in sorted(range(len(grid)), key=lambda i: -grid[i]):
        coef, edof, done = pirls(problem, target, grid[position], coef, max_iter)
        if not done:
            unconverged.append(grid[position])
        if not np.isfinite(edof):
            coef = start
            continue
        values[position] = criterion_value(problem, target, coef, edof, criterion)
        solutions[position] = coef.copy()
    scored = [i for i, value in enumerate(values) if value is not None]
    if not scored:
        raise OptionError("the spline fit failed at every penalty in 'penalties'; "
                          "try larger penalties")
    chosen = min(scored, key=lambda i: (values[i], i))
    statistic = "AIC" if criterion == "aic" else ("UBRE" if classify else "GCV")
    return Search(statistic, tuple(values), chosen, solutions[chosen],
                  tuple(sorted(unconverged)))


def fit_quietly(gam: LinearGAM | LogisticGAM, matrix: np.ndarray, target: np.ndarray,
                start: np.ndarray | None = None) -> bool:
    """Fit without pygam's printing or warnings; return whether it converged."""
    if start is not None:
        gam.set_params(coef_=start, force=True)
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            gam.fit(matrix, target)
        except (ValueError, np.linalg.LinAlgError) as exc:
            raise OptionError(f"pygam could not fit the spline model: "
                              f"{str(exc).splitlines()[0]}; try larger penalties") from None
    return "did not converge" not in printed.getvalue()


def curve_knots(exact: Callable[[np.ndarray], np.ndarray], column: np.ndarray,
                budget: int, whole: bool) -> tuple[np.ndarray, float]:
    """Knots for a curve table and the largest gap between table and pygam they leave.

    Candidates are every whole number in range (integer features with a short
    range), else every distinct training value and an even grid over the range.
    If the candidates fit the budget they are all knots; otherwise the start is
    every distinct value (when there are at most half a budget of them) or even
    points and training quantiles, refined by adding, in every gap that strays
    more than `FIDELITY` from pygam, the candidate where it strays most.
    """
    low, high = float(column.min()), float(column.max())
    distinct = np.unique(column)
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


def tabulate(gam: LinearGAM | LogisticGAM, index: int, points: np.ndarray, width: int,
             band: bool = True, training: np.ndarray | None = None,
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """pygam's partial dependence of term `index` at `points`, with a 95% band.

    The band is for the term as the model file holds it, centred on the training
    rows: its variance is (b(x) - b̄)ᵀ Σ (b(x) - b̄), with b the term's basis row,
    b̄ its mean over the training rows and Σ pygam's covariance of the term's
    coefficients. pygam's own band is for the uncentred term, whose level is
    confounded with the intercept, so it is wide everywhere and would hide where
    the shape itself is uncertain.
    """
    grid = np.zeros((len(points), width))
    grid[:, index] = points
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        values = gam.partial_dependence(index, X=grid)
        if not band:
            return values, values, values
        basis = gam._modelmat(grid, term=index).toarray()
        mean_row = np.asarray(gam._modelmat(training, term=index).mean(axis=0)).ravel()
    indices = gam.terms.get_coef_indices(index)
    covariance = gam.statistics_["cov"][np.ix_(indices, indices)]
    offset = basis - mean_row
    variance = np.maximum(np.einsum("ij,jk,ik->i", offset, covariance, offset), 0.0)
    if gam.distribution._known_scale:
        quantile = stats.norm.ppf(0.5 + BAND / 2)
    else:
        freedom = gam.statistics_["n_samples"] - gam.statistics_["edof"]
        quantile = stats.t.ppf(0.5 + BAND / 2, df=freedom)
    half = quantile * np.sqrt(variance)
    return values, values - half, values + half


def floats(values: np.ndarray) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


def compile_terms(gam: LinearGAM | LogisticGAM, plans: Sequence[TermPlan],
                  matrix: np.ndarray, knots: int
                  ) -> tuple[list[Term], dict[str, float], dict[str, float]]:
    """One table per plan, read from the fitted pygam model; each curve's largest
    departure from pygam over its candidate points; each monotone repair."""
    terms: list[Term] = []
    errors: dict[str, float] = {}
    repairs: dict[str, float] = {}
    width = matrix.shape[1]
    for index, plan in enumerate(plans):
        column = matrix[:, index]
        if plan.kind == "levels":
            codes = np.arange(len(plan.levels), dtype=float)
            values, lower, upper = tabulate(gam, index, codes, width, training=matrix)
            counts = np.bincount(column.astype(int), minlength=len(plan.levels))
            unseen = float(np.dot(counts, values) / counts.sum())
            terms.append(LevelsTerm(plan.feature, plan.levels, floats(values), unseen,
                                    floats(lower), floats(upper)))
            continue
        def exact(points: np.ndarray, index: int = index) -> np.ndarray:
            return tabulate(gam, index, points, width, band=False)[0]
        points, errors[plan.feature] = curve_knots(exact, column, knots, plan.whole)
        values, lower, upper = tabulate(gam, index, points, width, training=matrix)
        if plan.constraint:
            # remove what the soft constraint leaves of wrong-way steps (about 1e-9)
            running = np.maximum if plan.constraint == "monotonic_inc" else np.minimum
            repaired = running.accumulate(values)
            repairs[plan.feature] = float(np.max(np.abs(repaired - values)))
            lower, upper = np.minimum(lower, repaired), np.maximum(upper, repaired)
            values = repaired
        terms.append(CurveTerm(plan.feature, floats(points), floats(values), floats(lower),
                               floats(upper)))
    return terms, errors, repairs


def describe(plan: TermPlan) -> str:
    """A term in words, e.g. 'spline, 20 basis functions, decreasing'."""
    if plan.kind != "spline":
        return plan.kind
    direction = {value: key for key, value in CONSTRAINTS.items()}.get(plan.constraint or "")
    return f"spline, {plan.basis} basis functions" + (f", {direction}" if direction else "")


def fit(
    features: pd.DataFrame, target: np.ndarray, schema: Schema, *, task: str,
    splines: int = 20, penalties: Sequence[float] = DEFAULTS["penalties"],
    criterion: str = "risk", max_iter: int = 100, knots: int = 400,
) -> FamilyFit:
    """Fit the penalised-spline family and compile it into term tables."""
    grid = check_options(splines, penalties, criterion, max_iter, knots)
    target = np.asarray(target, dtype=float)
    plans, matrix, fallbacks = plan_terms(features, schema, splines)
    # one BLAS thread: these matrices are small, and a fixed summation order keeps the
    # tables byte-identical from run to run
    with threadpool_limits(limits=1, user_api="blas"):
        search = search_penalty(matrix, target, plans, grid, task=task, criterion=criterion,
                                max_iter=max_iter)
        penalty = grid[search.chosen]
        gam = make_gam(task, plans, penalty, max_iter)
        converged = fit_quietly(gam, matrix, target, start=search.coefficients)
        (intercept_index,) = [i for i, term in enumerate(gam.terms) if term.isintercept]
        intercept = float(gam.coef_[gam.terms.get_coef_indices(intercept_index)][0])
        terms, table_errors, repairs = compile_terms(gam, plans, matrix, knots)
    details: dict[str, Any] = {
        "model": type(gam).__name__,
        "terms": {plan.feature: describe(plan) for plan in plans},
        "penalty_grid": list(grid),
        "criterion": search.statistic,
        "criterion_values": list(search.values),
        "penalty": penalty,
        "penalty_at_grid_edge": len(grid) > 1 and search.chosen in (0, len(grid) - 1),
        "effective_degrees_of_freedom": float(gam.statistics_["edof"]),
        "converged": converged,
        "search_unconverged": list(search.unconverged),
        "fallbacks": fallbacks,
        "table_error": table_errors,
        "monotone_repair": repairs,
    }
    parameters = {"splines": splines, "penalties": list(grid), "criterion": criterion,
                  "max_iter": max_iter, "knots": knots}
    return FamilyFit(intercept, tuple(terms), parameters, details)
