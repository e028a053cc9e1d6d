"""The spline family's penalty search: a smoothing penalty per term, chosen on a grid.

Both stages apply pygam's penalised IRLS update to pygam's own basis, penalty
and constraint matrices through the normal equations, at a fraction of the cost
of a pygam fit, and score each fit by `criterion`: "risk" is pygam's estimate of
prediction risk (UBRE for classification, GCV for regression, both counting
effective degrees of freedom 1.4 times as pygam does), "aic" the AIC.

1. Shared: every penalised term at the same grid value, largest first and
   warm-started; the best is the starting point.
2. Per term (unless `per_term` is false): coordinate-wise over the terms, each
   term's penalty walks along the grid, one grid step at a time, for as long as
   a step lowers the criterion (by more than `IMPROVEMENT` of its value, below
   which two fits differ by no more than the update's own tolerance); sweeps
   over all terms repeat until one moves nothing. Every value compared is an
   exact fit at that setting, so the last sweep shows that no single term's
   neighbouring grid value scores better (a coordinate-wise optimum on the grid;
   the full grid over all terms is never searched, and the search says so).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from pygam import LinearGAM, LogisticGAM
from pygam.terms import TermList
from scipy.special import expit

from glassbox.core.errors import OptionError

GAMMA = 1.4  # pygam's weight on effective degrees of freedom in UBRE and GCV
EPS = np.finfo(float).eps
# The search stops when no training score (link scale) moves by more than this; pygam's soft
# monotone constraint can make the update cycle at about this size when the penalty is small.
SEARCH_TOL = 1e-4
IMPROVEMENT = 1e-6  # a move must lower the criterion by this share of its value


@dataclass(frozen=True)
class Problem:
    """pygam's basis and per-term unit penalties, and where its constraints apply."""

    basis: np.ndarray  # rows x coefficients
    blocks: tuple[tuple[np.ndarray, np.ndarray] | None, ...]  # per term: positions, penalty
    monotone: tuple[tuple[np.ndarray, bool], ...]  # (coefficient positions, increasing)
    constraint_lam: float
    constraint_l2: float
    classify: bool

    def penalty(self, penalties: Sequence[float]) -> np.ndarray:
        """The penalty matrix with term i at penalties[i], plus pygam's conditioning ridge."""
        width = self.basis.shape[1]
        matrix = np.sqrt(EPS) * np.eye(width)
        for block, penalty in zip(self.blocks, penalties, strict=True):
            if block is not None:
                positions, unit = block
                matrix[np.ix_(positions, positions)] += penalty * unit
        return matrix


def build_problem(terms: TermList, matrix: np.ndarray, penalised: Sequence[bool],
                  monotone: Sequence[tuple[int, bool]], classify: bool) -> Problem:
    """The problem for pygam terms (the model's terms, then its intercept) on `matrix`;
    `monotone` lists (term index, increasing) for the constrained terms."""
    terms.compile(matrix)
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
        terms.build_columns(matrix).toarray(), tuple(blocks),
        tuple((np.asarray(terms.get_coef_indices(i)), up) for i, up in monotone),
        float(getattr(reference, "_constraint_lam", 1e9)),
        float(getattr(reference, "_constraint_l2", 1e-3)), classify)


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


def normal_equations(problem: Problem, target: np.ndarray, coef: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray]:
    """The weighted cross-products of pygam's update at `coef`: Bᵀ W B and Bᵀ W z."""
    basis = problem.basis
    if not problem.classify:
        return basis.T @ basis, basis.T @ target
    score = basis @ coef  # weight x working response = weight x score + residual
    mu = expit(score)
    keep = np.sqrt(mu * (1 - mu)) >= np.sqrt(EPS)  # pygam drops negligible weights
    weight = np.where(keep, mu * (1 - mu), 0.0)
    scaled = basis * np.sqrt(weight)[:, None]
    gram = scaled.T @ scaled  # numpy computes a product with its own transpose at half cost
    return gram, basis.T @ (weight * score + np.where(keep, target - mu, 0.0))


def pirls(problem: Problem, target: np.ndarray, penalty: np.ndarray, start: np.ndarray,
          max_iter: int, first: tuple[np.ndarray, np.ndarray] | None = None,
          ) -> tuple[np.ndarray, float, bool]:
    """pygam's penalised IRLS update via the normal equations: coefficients, edof, converged.
    `first` is `normal_equations` at `start`, when the caller has it already."""
    basis = problem.basis
    coef = start
    for step in range(max_iter):
        gram, moment = first if step == 0 and first is not None else normal_equations(
            problem, target, coef)
        system = gram + penalty + constraint_matrix(problem, coef)
        try:
            update = np.linalg.solve(system, moment)
        except np.linalg.LinAlgError:
            update = np.full(len(coef), np.nan)
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


@dataclass(frozen=True)
class Search:
    """The penalty search: the shared stage's values, each term's choice, its coefficients."""

    statistic: str
    shared_values: tuple[float | None, ...]  # criterion with every term at grid[i]
    shared: int  # the grid position the shared stage chose
    positions: tuple[int | None, ...]  # per term: the chosen grid position (None: no penalty)
    value: float  # criterion at the chosen penalties
    coefficients: np.ndarray
    sweeps: int  # per-term sweeps, the last of which moved nothing (0: shared only)
    fits: int  # fits the search made
    unconverged: int  # of which the update still moved at max_iter


class Scorer:
    """Fits at a setting of grid positions, warm-started; remembers every setting scored."""

    def __init__(self, problem: Problem, target: np.ndarray, grid: Sequence[float],
                 criterion: str, max_iter: int) -> None:
        self.problem, self.target, self.grid = problem, target, grid
        self.criterion, self.max_iter = criterion, max_iter
        self.seen: dict[tuple[int | None, ...], tuple[float, np.ndarray] | None] = {}
        self.unconverged = 0
        # the update's first step from a start is the same for every setting tried from it
        self.start: np.ndarray | None = None
        self.first: tuple[np.ndarray, np.ndarray] | None = None

    def __call__(self, positions: tuple[int | None, ...], start: np.ndarray
                 ) -> tuple[float, np.ndarray] | None:
        """(criterion, coefficients) at the setting, or None where the update failed."""
        if positions not in self.seen:
            penalties = [0.0 if p is None else self.grid[p] for p in positions]
            if start is not self.start:
                self.start = start
                self.first = normal_equations(self.problem, self.target, start)
            coef, edof, done = pirls(self.problem, self.target, self.problem.penalty(penalties),
                                     start, self.max_iter, self.first)
            self.unconverged += not done
            self.seen[positions] = None if not np.isfinite(edof) else (
                criterion_value(self.problem, self.target, coef, edof, self.criterion), coef)
        return self.seen[positions]


def search_penalties(problem: Problem, target: np.ndarray, grid: Sequence[float], *,
                     criterion: str, max_iter: int, per_term: bool) -> Search:
    """The shared stage, then (if `per_term`) the coordinate-wise stage; see the module."""
    classify = problem.classify
    start = np.zeros(problem.basis.shape[1])
    mean = float(np.clip(target.mean(), 1e-6, 1 - 1e-6)) if classify else float(target.mean())
    start[-1] = np.log(mean / (1 - mean)) if classify else mean
    score = Scorer(problem, target, grid, criterion, max_iter)
    penalised = [block is not None for block in problem.blocks]

    def setting(position: int) -> tuple[int | None, ...]:
        return tuple(position if flag else None for flag in penalised)

    coef = start
    for position in sorted(range(len(grid)), key=lambda i: -grid[i]):
        result = score(setting(position), coef)
        coef = start if result is None else result[1]
    shared_values = tuple(None if score.seen[setting(i)] is None else score.seen[setting(i)][0]
                          for i in range(len(grid)))
    scored = [i for i, value in enumerate(shared_values) if value is not None]
    if not scored:
        raise OptionError("the spline fit failed at every penalty in 'penalties'; "
                          "try larger penalties")
    shared = min(scored, key=lambda i: (shared_values[i], i))
    best = setting(shared)
    value, coef = score.seen[best]
    sweeps = 0
    while per_term and len(grid) > 1:
        sweeps += 1
        moved = False
        for term in (i for i, flag in enumerate(penalised) if flag):
            for step in (1, -1):
                walked = False
                while 0 <= best[term] + step < len(grid):
                    trial = best[:term] + (best[term] + step,) + best[term + 1:]
                    result = score(trial, coef)
                    if result is None or result[0] >= value - IMPROVEMENT * abs(value):
                        break
                    best, (value, coef), walked = trial, result, True
                if walked:  # the way back was worse when the walk began
                    moved = True
                    break
        if not moved:
            break
    statistic = "AIC" if criterion == "aic" else ("UBRE" if classify else "GCV")
    return Search(statistic, shared_values, shared, best, value, coef, sweeps,
                  len(score.seen), score.unconverged)
