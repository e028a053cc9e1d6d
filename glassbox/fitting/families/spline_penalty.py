"""The spline family's penalty search on a working model: a smoothing penalty per term.

Penalties are chosen inside the penalised IRLS iterations ("performance
iteration", Gu 1992; Wood 2004; see spline_iterate): at each step the working model
(working response z and weights W at the current coefficients) is fixed, and every
candidate setting is the exact penalised weighted least-squares fit of z on pygam's
basis, penalty and constraint matrices, solved through the normal equations from
the bins (spline_bins) and scored by `criterion` on that working model: "risk" is
pygam's estimate of prediction risk (UBRE for classification, GCV for regression,
both counting effective degrees of freedom 1.4 times as pygam does), "aic" the AIC.
For regression (identity link, W = 1) the working model is the data, so this is
the search on the fit itself. For classification the working UBRE is
‖√W (z - Xβ)‖²/n + 2·1.4·edof/n and the working AIC ‖√W (z - Xβ)‖² + 2·edof (the
deviance's quadratic approximation at the current coefficients; pygam's constant
offsets left out).

1. Shared: every penalised term at the same grid value; the best is the start.
2. Per term (unless `per_term` is false): coordinate-wise over the terms, each
   term's penalty walks along the grid, one grid step at a time, for as long as
   a step lowers the criterion (by more than `IMPROVEMENT` of its value); sweeps
   over all terms repeat until one moves nothing. Every value compared is an
   exact fit of the working model at that setting, so the last sweep shows that
   no single term's neighbouring grid value scores better (a coordinate-wise
   optimum on the grid; the full grid over all terms is never searched).

A monotone declaration is pygam's soft constraint: a large penalty on the
coefficient steps that go the wrong way at the current coefficients, re-applied
until the set of such steps no longer changes (then the fit repeats itself exactly).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from pygam import LinearGAM, LogisticGAM
from pygam.terms import TermList
from scipy import linalg
from scipy.special import expit

from glassbox.core.errors import OptionError
from glassbox.fitting.families.spline_bins import Binned

GAMMA = 1.4  # pygam's weight on effective degrees of freedom in UBRE and GCV
EPS = np.finfo(float).eps
IMPROVEMENT = 1e-6  # a move must lower the criterion by this share of its value


@dataclass(frozen=True)
class Problem:
    """pygam's per-term unit penalties, and where its constraints apply."""

    width: int  # coefficients
    blocks: tuple[tuple[np.ndarray, np.ndarray] | None, ...]  # per term: positions, penalty
    monotone: tuple[tuple[np.ndarray, bool], ...]  # (coefficient positions, increasing)
    constraint_lam: float
    constraint_l2: float
    classify: bool

    def penalty(self, penalties: Sequence[float]) -> np.ndarray:
        """The penalty matrix with term i at penalties[i], plus pygam's conditioning ridge."""
        matrix = np.sqrt(EPS) * np.eye(self.width)
        for block, penalty in zip(self.blocks, penalties, strict=True):
            if block is not None:
                positions, unit = block
                matrix[np.ix_(positions, positions)] += penalty * unit
        return matrix


def build_problem(terms: TermList, penalised: Sequence[bool],
                  monotone: Sequence[tuple[int, bool]], classify: bool) -> Problem:
    """The problem for compiled pygam terms (the model's terms, then its intercept);
    `monotone` lists (term index, increasing) for the constrained terms."""
    reference = LogisticGAM() if classify else LinearGAM()
    blocks = []
    for index, flag in enumerate(penalised):
        if not flag:
            blocks.append(None)
            continue
        term = terms[index]
        saved = term.lam
        term.lam = [1.0] * len(saved)
        unit = np.asarray(term.build_penalties().toarray())
        term.lam = saved
        blocks.append((np.asarray(terms.get_coef_indices(index)), unit))
    return Problem(
        int(terms.n_coefs), tuple(blocks),
        tuple((np.asarray(terms.get_coef_indices(i)), up) for i, up in monotone),
        float(getattr(reference, "_constraint_lam", 1e9)),
        float(getattr(reference, "_constraint_l2", 1e-3)), classify)


def wrong_way(problem: Problem, coef: np.ndarray) -> tuple[tuple[int, ...], ...]:
    """Per constrained term, the coefficient steps that go against its direction."""
    return tuple(tuple(np.flatnonzero(np.diff(coef[positions]) < 0 if increasing
                                      else np.diff(coef[positions]) > 0))
                 for positions, increasing in problem.monotone)


def constraint_matrix(problem: Problem, coef: np.ndarray) -> np.ndarray:
    """pygam's monotone constraint in quadratic form: a large penalty on wrong-way steps."""
    width = len(coef)
    matrix = np.zeros((width, width))
    for (positions, _), wrong in zip(problem.monotone, wrong_way(problem, coef), strict=True):
        if not wrong:
            continue
        wrong = np.asarray(wrong)
        difference = np.zeros((wrong.size, len(positions)))
        difference[np.arange(wrong.size), wrong] = -1.0
        difference[np.arange(wrong.size), wrong + 1] = 1.0
        block = problem.constraint_lam * difference.T @ difference
        block += problem.constraint_l2 * np.eye(len(positions))
        matrix[np.ix_(positions, positions)] += block
    return matrix


@dataclass(frozen=True)
class Working:
    """The working model at coefficients `base`: XᵀWX, Xᵀ W r (r = z - X base, the working
    residual) and rᵀ W r, from the bins; the rows' scores at `base`."""

    base: np.ndarray
    gram: np.ndarray
    moment: np.ndarray
    residual: float
    scores: np.ndarray
    rows: int


def weights_at(scores: np.ndarray, target: np.ndarray, classify: bool
               ) -> tuple[np.ndarray, np.ndarray, float]:
    """IRLS weights, weight times working residual, and the weighted squared residual.
    Classification: W = μ(1 - μ) and W r = y - μ, rows whose √W is below √eps dropped
    as pygam drops them; regression: W = 1, r = y - score."""
    if not classify:
        residual = target - scores
        return np.ones(len(target)), residual, float(residual @ residual)
    mu = expit(scores)
    variance = mu * (1 - mu)
    keep = np.sqrt(variance) >= np.sqrt(EPS)
    weight = np.where(keep, variance, 0.0)
    weighted = np.where(keep, target - mu, 0.0)
    return weight, weighted, float(np.sum(weighted ** 2 / np.where(keep, variance, 1.0)))


def working(binned: Binned, target: np.ndarray, coef: np.ndarray, classify: bool,
            scores: np.ndarray | None = None) -> Working:
    """The working model at `coef` (one pass over the rows; `scores`, if known, at coef)."""
    scores = binned.scores(coef) if scores is None else scores
    weight, weighted, residual = weights_at(scores, target, classify)
    gram, moment = binned.normal_equations(weight, weighted)
    return Working(coef, gram, moment, residual, scores, binned.rows)


@dataclass(frozen=True)
class Solution:
    """The penalised fit of a working model at one setting."""

    coef: np.ndarray
    edof: float
    rss: float  # weighted squared working residual at coef
    system: np.ndarray  # XᵀWX + penalty + constraint, as last solved
    settled: bool  # the constraint's wrong-way steps stopped changing


def solve(problem: Problem, work: Working, penalty: np.ndarray, max_iter: int
          ) -> Solution | None:
    """The working model's penalised fit (None where the system cannot be solved)."""
    coef = work.base
    rhs = work.gram @ work.base + work.moment
    used = wrong_way(problem, coef)
    for _ in range(max_iter):
        system = work.gram + penalty + (constraint_matrix(problem, coef) if problem.monotone
                                        else 0.0)
        factored = factor(system)
        if factored is None:
            return None
        coef = factored.solve(rhs)
        if not np.all(np.isfinite(coef)):
            return None
        now = wrong_way(problem, coef)
        if now == used:
            break
        used = now
    step = coef - work.base
    rss = work.residual - 2 * step @ work.moment + step @ work.gram @ step
    return Solution(coef, factored.trace_ratio(work.gram), float(rss), system, now == used)


@dataclass(frozen=True)
class Factored:
    """A system factored: Cholesky where rounding leaves it positive definite, else LU
    with partial pivoting (the penalties leave the constant of every smooth to pygam's
    tiny ridge, so with many rows the Cholesky factorisation can fail by rounding)."""

    cholesky: tuple[np.ndarray, bool] | None
    lu: tuple[np.ndarray, np.ndarray] | None

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        if self.cholesky is not None:
            return linalg.cho_solve(self.cholesky, rhs, check_finite=False)
        return linalg.lu_solve(self.lu, rhs, check_finite=False)

    def trace_ratio(self, gram: np.ndarray) -> float:
        """trace(A⁻¹ G) for G symmetric: the sum of A⁻¹ ∘ Gᵀ (Cholesky: A⁻¹ from LAPACK's
        potri, its upper triangle mirrored)."""
        if self.cholesky is None:
            inverse = self.solve(np.eye(len(gram)))
            return float(np.sum(inverse * gram.T))
        upper, info = linalg.lapack.dpotri(*self.cholesky)
        if info != 0:
            return float("nan")
        inside = np.tril(upper) if self.cholesky[1] else np.triu(upper)
        diagonal = np.diagonal(inside)
        return float(2 * np.sum(inside * gram) - diagonal @ np.diagonal(gram))


def factor(system: np.ndarray) -> Factored | None:
    """The system factored (None: singular or not finite)."""
    try:
        return Factored(linalg.cho_factor(system, check_finite=False), None)
    except linalg.LinAlgError:
        pass
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", linalg.LinAlgWarning)
            return Factored(None, linalg.lu_factor(system, check_finite=True))
    except (linalg.LinAlgError, linalg.LinAlgWarning, ValueError):
        return None


def criterion_value(problem: Problem, rss: float, rows: int, edof: float, criterion: str
                    ) -> float:
    """UBRE / GCV (pygam's, without its constant offset) or AIC, from the (working)
    residual sum of squares; see the module."""
    if problem.classify:
        if criterion == "aic":
            return rss + 2 * edof
        return rss / rows + 2 * GAMMA * edof / rows
    if criterion == "aic":
        variance = rss / (rows - edof)
        return float(rows * np.log(2 * np.pi * variance) + rss / variance + 2 * edof + 2)
    return rows * rss / (rows - GAMMA * edof) ** 2


@dataclass(frozen=True)
class Search:
    """The penalty search on one working model: the shared stage's values, each term's
    choice and the fit there."""

    statistic: str
    shared_values: tuple[float | None, ...]  # criterion with every term at grid[i]
    shared_edof: tuple[float | None, ...]  # effective degrees of freedom there
    shared: int  # the grid position the shared stage chose
    positions: tuple[int | None, ...]  # per term: the chosen grid position (None: no penalty)
    value: float  # criterion at the chosen penalties
    solution: Solution
    sweeps: int  # per-term sweeps, the last of which moved nothing (0: shared only)
    fits: int  # settings fitted
    unsettled: int  # of which the constraint's wrong-way steps still changed at max_iter


class Scorer:
    """Fits of one working model at settings of grid positions; remembers every one."""

    def __init__(self, problem: Problem, work: Working, grid: Sequence[float],
                 criterion: str, max_iter: int) -> None:
        self.problem, self.work, self.grid = problem, work, grid
        self.criterion, self.max_iter = criterion, max_iter
        self.seen: dict[tuple[int | None, ...], tuple[float, Solution] | None] = {}
        self.unsettled = 0

    def __call__(self, positions: tuple[int | None, ...]) -> tuple[float, Solution] | None:
        """(criterion, solution) at the setting, or None where the fit failed."""
        if positions not in self.seen:
            penalties = [0.0 if p is None else self.grid[p] for p in positions]
            found = solve(self.problem, self.work, self.problem.penalty(penalties),
                          self.max_iter)
            self.unsettled += found is not None and not found.settled
            self.seen[positions] = None if found is None or not np.isfinite(found.rss) else (
                criterion_value(self.problem, found.rss, self.work.rows, found.edof,
                                self.criterion), found)
        return self.seen[positions]


def search_penalties(problem: Problem, work: Working, grid: Sequence[float], *,
                     criterion: str, max_iter: int, per_term: bool) -> Search:
    """The shared stage, then (if `per_term`) the coordinate-wise stage; see the module."""
    score = Scorer(problem, work, grid, criterion, max_iter)
    penalised = [block is not None for block in problem.blocks]

    def setting(position: int) -> tuple[int | None, ...]:
        return tuple(position if flag else None for flag in penalised)

    shared_fits = [score(setting(i)) for i in range(len(grid))]
    shared_values = tuple(None if fit is None else fit[0] for fit in shared_fits)
    shared_edof = tuple(None if fit is None else fit[1].edof for fit in shared_fits)
    scored = [i for i, value in enumerate(shared_values) if value is not None]
    if not scored:
        raise OptionError("the spline fit failed at every penalty in 'penalties'; "
                          "try larger penalties")
    shared = min(scored, key=lambda i: (shared_values[i], i))
    best = setting(shared)
    value, found = score.seen[best]
    sweeps = 0
    while per_term and len(grid) > 1:
        sweeps += 1
        moved = False
        for term in (i for i, flag in enumerate(penalised) if flag):
            for step in (1, -1):
                walked = False
                while 0 <= best[term] + step < len(grid):
                    trial = best[:term] + (best[term] + step,) + best[term + 1:]
                    result = score(trial)
                    if result is None or result[0] >= value - IMPROVEMENT * abs(value):
                        break
                    best, (value, found), walked = trial, result, True
                if walked:  # the way back was worse when the walk began
                    moved = True
                    break
        if not moved:
            break
    statistic = "AIC" if criterion == "aic" else ("UBRE" if problem.classify else "GCV")
    return Search(statistic, shared_values, shared_edof, shared, best, value, found, sweeps,
                  len(score.seen), score.unsettled)
