"""The spline family's fit: penalties chosen inside the penalised IRLS iterations.

This is the "performance iteration" (Gu 1992; Wood 2004): at each step the
working model at the current coefficients is formed from the bins (one pass over
the rows), the penalties are searched on it (spline_penalty), and the fit at the
chosen penalties gives the next coefficients. Once the search returns the
penalties it returned the step before, the steps keep them fixed and are
pygam's own penalised IRLS update (the same basis, penalty, constraint and
weights) until no training score moves by more than `TIGHT`; then one more
search on that working model must return them again. The final fit is thus an
exact penalised fit at the recorded penalties, and the recorded search is the
one on its own working model. If the penalties never settle (they cycle, or
`max_iter` steps pass), the setting whose fit scored best is kept, fitted to
convergence at fixed penalties, and the details say so.

Regression (identity link, W = 1): the working model is the data itself, so one
pass and one search are the whole fit.

The coefficients' covariance and effective degrees of freedom are pygam's
definitions from the last step: A⁻¹ XᵀWX A⁻¹ (times the scale for regression)
and trace(A⁻¹ XᵀWX), with A = XᵀWX + penalty + constraint.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from glassbox.core.errors import OptionError
from glassbox.fitting.families.spline_bins import Binned
from glassbox.fitting.families.spline_penalty import (
    EPS,
    GAMMA,
    Problem,
    Search,
    Solution,
    Working,
    criterion_value,
    search_penalties,
    solve,
    working,
)

TIGHT = 1e-8  # converged when no training score (link scale) moves by more than this
CYCLES = 3  # a setting chosen again after others, this many times: the search cycles
FLOOR = 1e-6  # below this, steps that stop shrinking are at the solve's rounding
CONTRACTION = 0.5


@dataclass(frozen=True)
class Fitted:
    """The fit: coefficients, their covariance, what the search did."""

    coef: np.ndarray
    covariance: np.ndarray
    edof: float
    scale: float  # pygam's distribution scale squared (1 for classification)
    search: Search  # the search on the final working model
    positions: tuple[int | None, ...]  # the penalties kept (grid positions)
    value: float  # the criterion at the fit (classification: from the deviance)
    deviance: float  # training deviance at the bin points (regression: squared residuals)
    converged: bool
    steps: int  # IRLS steps (passes over the rows)
    searches: int
    unsettled: str | None  # why the penalties did not settle, if they did not
    scores: np.ndarray  # training scores at the bin points
    last_move: float  # the largest change of a training score in the last step


def deviance(scores: np.ndarray, target: np.ndarray, classify: bool) -> float:
    """Binomial deviance (probabilities clipped to [eps, 1 - eps]) or squared residuals."""
    if not classify:
        return float(np.sum((target - scores) ** 2))
    mu = np.clip(expit(scores), EPS, 1 - EPS)
    return float(-2 * np.sum(target * np.log(mu) + (1 - target) * np.log(1 - mu)))


def true_value(problem: Problem, dev: float, rows: int, edof: float, criterion: str
               ) -> float:
    """The criterion at a fit: for classification UBRE or AIC from its deviance."""
    if not problem.classify:
        return criterion_value(problem, dev, rows, edof, criterion)
    return dev + 2 * edof if criterion == "aic" else dev / rows + 2 * GAMMA * edof / rows


def start_coef(problem: Problem, target: np.ndarray) -> np.ndarray:
    """Every coefficient 0 but the intercept (the last), at the target's mean (logit)."""
    coef = np.zeros(problem.width)
    if problem.classify:
        mean = float(np.clip(target.mean(), 1e-6, 1 - 1e-6))
        coef[-1] = np.log(mean / (1 - mean))
    else:
        coef[-1] = float(target.mean())
    return coef


def fit_binned(problem: Problem, binned: Binned, target: np.ndarray, grid: Sequence[float],
               *, criterion: str, max_iter: int, per_term: bool) -> Fitted:
    """The performance iteration; see the module."""
    classify = problem.classify

    def penalties(positions: tuple[int | None, ...]) -> np.ndarray:
        return problem.penalty([0.0 if p is None else grid[p] for p in positions])

    def searched(work: Working) -> Search:
        return search_penalties(problem, work, grid, criterion=criterion, max_iter=max_iter,
                                per_term=per_term)

    def done(converged: bool) -> Fitted:
        return finish(problem, binned, target, work, found, solution, chosen, scores,
                      criterion, converged, steps, searches, unsettled, moves[-1])

    work = working(binned, target, start_coef(problem, target), classify)
    found = searched(work)
    chosen, solution, steps, searches, unsettled = found.positions, found.solution, 0, 1, None
    moves = [0.0]
    if not classify:
        scores = binned.scores(solution.coef)
        return done(True)
    fixed = False
    history: list[tuple[int | None, ...]] = [chosen]
    tried: dict[tuple[int | None, ...], float] = {}
    while True:
        steps += 1
        scores = binned.scores(solution.coef)
        moves.append(float(np.max(np.abs(scores - work.scores))))
        tried[chosen] = min(tried.get(chosen, np.inf), true_value(
            problem, deviance(scores, target, True), binned.rows, solution.edof, criterion))
        still = settled(moves)
        if still and not fixed and len(history) > 1 and history[-2] == chosen:
            return done(True)
        if steps >= max_iter or returns(history) >= CYCLES:
            break
        work = working(binned, target, solution.coef, True, scores)
        # once the search repeats itself, plain IRLS steps at those penalties; when they
        # converge, one more search confirms them
        fixed = len(history) > 1 and history[-2] == chosen and not still
        if fixed:
            solution = solve(problem, work, penalties(chosen), max_iter) or failed()
            continue
        found = searched(work)
        searches += 1
        chosen, solution = found.positions, found.solution
        history.append(chosen)
    # never settled: keep the setting that scored best, fitted at fixed penalties
    chosen = min(tried, key=lambda p: (tried[p], p))
    unsettled = (f"the penalties did not settle in {steps} step(s) "
                 f"({len(set(history))} setting(s) chosen in turn); kept the one whose fit "
                 "scored best")
    for _ in range(max_iter):
        work = working(binned, target, solution.coef, True, scores)
        solution = solve(problem, work, penalties(chosen), max_iter) or failed()
        steps += 1
        scores = binned.scores(solution.coef)
        moves.append(float(np.max(np.abs(scores - work.scores))))
        if settled(moves):
            return done(True)
    return done(False)


def settled(moves: Sequence[float]) -> bool:
    """Whether the last step converged: no score moved by more than `TIGHT`, or by less
    than `FLOOR` and no less than half the step before (the steps stopped shrinking: the
    rounding of the solve, which pygam's constraint penalty of 1e9 makes about 1e-7)."""
    return moves[-1] < TIGHT or (moves[-1] < FLOOR and len(moves) > 2
                                 and moves[-1] > CONTRACTION * moves[-2])


def returns(history: Sequence[tuple[int | None, ...]]) -> int:
    """How often the search went back to a setting it had left before."""
    return sum(1 for i in range(2, len(history))
               if history[i] != history[i - 1] and history[i] in history[:i - 1])


def failed() -> Solution:
    raise OptionError("the spline fit failed at the chosen penalties; try larger penalties")


def finish(problem: Problem, binned: Binned, target: np.ndarray, work: Working,
           found: Search, solution: Solution, positions: tuple[int | None, ...],
           scores: np.ndarray, criterion: str, converged: bool, steps: int, searches: int,
           unsettled: str | None, last_move: float) -> Fitted:
    """The fit's statistics from its last step (pygam's definitions; see the module)."""
    inverse = np.linalg.inv(solution.system)  # LU: the system may be too close to singular for
    # a Cholesky factorisation (see spline_penalty.Factored)
    sandwich = inverse @ work.gram @ inverse
    dev = deviance(scores, target, problem.classify)
    scale = 1.0 if problem.classify else dev / (binned.rows - solution.edof)
    return Fitted(solution.coef, (sandwich + sandwich.T) / 2 * scale, solution.edof, scale,
                  found, positions, true_value(problem, dev, binned.rows, solution.edof,
                                               criterion),
                  dev, converged, steps, searches, unsettled, scores, last_move)
