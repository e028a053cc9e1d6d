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

The iteration starts from the fit with every penalised term at the grid's
largest value (converged at those fixed penalties), not from the intercept
alone: a first working model at a constant score is a poor approximation, and on
real data (ISLR Default) the search there chose small penalties whose full step
overshot into near-separation, where the iteration then settled at a worse fixed
point. Every classification step is halved while it raises the penalised
deviance at its penalties (P-IRLS step halving), and the halvings are counted.
At the end the kept fit's true criterion (from its deviance) is compared with the
converged fits at the start's setting and at the final search's best shared
value; the lowest is kept and every value compared is recorded. The claim is
therefore: the kept fit scores no worse than those converged fits (not: than
every setting of the grid).

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
from glassbox.core.wording import plural
from glassbox.fitting.families.spline_bins import Binned
from glassbox.fitting.families.spline_penalty import (
    EPS,
    GAMMA,
    Problem,
    Search,
    Solution,
    Working,
    constraint_matrix,
    criterion_value,
    search_penalties,
    solve,
    working,
)

TIGHT = 1e-8  # converged when no training score (link scale) moves by more than this
CYCLES = 3  # a setting chosen again after others, this many times: the search cycles
FLOOR = 1e-6  # below this, steps that stop shrinking are at the solve's rounding
CONTRACTION = 0.5
HALVINGS = 30  # at most this many halvings of one step
RISE = 1e-12  # a step may raise the penalised deviance by this share (rounding) unhalved


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
    halvings: int  # step halvings in all (see advance)
    halved_steps: int  # steps that were halved
    # the settings whose converged fits were compared at the end: (positions, true
    # criterion, converged); the first is the iteration's own (empty for regression)
    compared: tuple[tuple[tuple[int | None, ...], float, bool], ...]


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
               *, criterion: str, max_iter: int, per_term: bool,
               begin: np.ndarray | None = None) -> Fitted:
    """The performance iteration; see the module. `begin`: the first coefficients (by
    default every one 0 but the intercept, at the target's mean)."""
    classify = problem.classify
    trace = Trace(steps=0, searches=1, moves=[0.0])

    def searched(work: Working) -> Search:
        return search_penalties(problem, work, grid, criterion=criterion, max_iter=max_iter,
                                per_term=per_term)

    def at(positions: tuple[int | None, ...], step: Step) -> Candidate:
        return converge(problem, binned, target, grid, positions, step, trace, criterion,
                        max_iter)

    coef = start_coef(problem, target) if begin is None else np.asarray(begin, dtype=float)
    if not classify:
        work = working(binned, target, coef, classify)
        found = searched(work)
        step = Step(found.solution.coef, binned.scores(found.solution.coef), 0)
        return finish(problem, binned, target, found, Candidate(
            found.positions, work, found.solution, step, True, 0.0), criterion, trace, ())
    # the start: every penalised term at the grid's largest value, fitted to convergence
    top = tuple(None if block is None else len(grid) - 1 for block in problem.blocks)
    start = at(top, Step(coef, binned.scores(coef), 0))
    work = working(binned, target, start.step.coef, True, start.step.scores)
    found = searched(work)
    chosen, solution, fixed = found.positions, found.solution, False
    history: list[tuple[int | None, ...]] = [chosen]
    tried: dict[tuple[int | None, ...], float] = {}
    while True:
        step = advance(problem, binned, target, work, solution, penalty_at(problem, grid, chosen),
                       trace)
        tried[chosen] = min(tried.get(chosen, np.inf), true_value(
            problem, deviance(step.scores, target, True), binned.rows, solution.edof,
            criterion))
        still = settled(trace.moves) and step.halvings == 0
        if still and not fixed and len(history) > 1 and history[-2] == chosen:
            kept = Candidate(chosen, work, solution, step, True, true_value(
                problem, deviance(step.scores, target, True), binned.rows, solution.edof,
                criterion))
            break
        if trace.steps >= max_iter or returns(history) >= CYCLES:
            # never settled: keep the setting that scored best, fitted at fixed penalties
            chosen = min(tried, key=lambda p: (tried[p], p))
            trace.unsettled = (f"the penalties did not settle in {plural(trace.steps, 'step')} "
                               f"({plural(len(set(history)), 'setting')} chosen in turn); kept "
                               f"the one "
                               "whose fit scored best")
            kept = at(chosen, step)
            break
        work = working(binned, target, step.coef, True, step.scores)
        # once the search repeats itself, plain IRLS steps at those penalties; when they
        # converge, one more search confirms them
        fixed = len(history) > 1 and history[-2] == chosen and not still
        if fixed:
            solution = solve(problem, work, penalty_at(problem, grid, chosen), max_iter
                             ) or failed()
            continue
        found = searched(work)
        trace.searches += 1
        chosen, solution = found.positions, found.solution
        history.append(chosen)
    # the check: the kept fit against the converged fits at the start's setting and at the
    # final search's best shared value; the lowest true criterion is kept
    shared = tuple(None if block is None else found.shared for block in problem.blocks)
    others = [start] + ([at(shared, kept.step)] if shared not in (kept.positions, top) else [])
    compared = [kept] + [other for other in others if other.positions != kept.positions]
    best = min(compared, key=lambda c: (not c.converged, c.value))
    return finish(problem, binned, target, found, best, criterion, trace, tuple(compared))


@dataclass(frozen=True)
class Candidate:
    """A setting's fit: its last working model and step, and the true criterion there."""

    positions: tuple[int | None, ...]
    work: Working
    solution: Solution
    step: Step
    converged: bool
    value: float


def converge(problem: Problem, binned: Binned, target: np.ndarray, grid: Sequence[float],
             positions: tuple[int | None, ...], step: Step, trace: Trace, criterion: str,
             max_iter: int) -> Candidate:
    """Penalised IRLS at fixed penalties from `step` until no score moves (see `settled`)."""
    penalty = penalty_at(problem, grid, positions)
    converged = False
    for _ in range(max_iter):
        work = working(binned, target, step.coef, True, step.scores)
        solution = solve(problem, work, penalty, max_iter) or failed()
        step = advance(problem, binned, target, work, solution, penalty, trace)
        if settled(trace.moves) and step.halvings == 0:
            converged = True
            break
    return Candidate(positions, work, solution, step, converged, true_value(
        problem, deviance(step.scores, target, True), binned.rows, solution.edof, criterion))


@dataclass
class Trace:
    """What the iteration did so far: passes over the rows, searches, score moves, halvings."""

    steps: int
    searches: int
    moves: list[float]
    halvings: int = 0
    halved_steps: int = 0
    unsettled: str | None = None
    converged: bool = True


@dataclass(frozen=True)
class Step:
    """Where a step landed: coefficients, the training scores there, how often it was halved."""

    coef: np.ndarray
    scores: np.ndarray
    halvings: int


def penalty_at(problem: Problem, grid: Sequence[float], positions: tuple[int | None, ...]
               ) -> np.ndarray:
    """The penalty matrix at grid positions (None: no penalty)."""
    return problem.penalty([0.0 if p is None else grid[p] for p in positions])


def penalised_deviance(problem: Problem, coef: np.ndarray, scores: np.ndarray,
                       target: np.ndarray, penalty: np.ndarray) -> float:
    """The deviance plus the penalty and pygam's soft monotone constraint at `coef`."""
    constraint = constraint_matrix(problem, coef) if problem.monotone else 0.0
    return deviance(scores, target, True) + float(coef @ ((penalty + constraint) @ coef))


def advance(problem: Problem, binned: Binned, target: np.ndarray, work: Working,
            solution: Solution, penalty: np.ndarray, trace: Trace) -> Step:
    """The step from the working model's coefficients to the solution, halved while it
    raises the penalised deviance at the solution's penalties (P-IRLS step halving: a full
    step from a poor working model can overshoot, and the steps after it diverge). A step
    that moves no score by more than `FLOOR` is never halved: its change of the penalised
    deviance is at the rounding of the solve."""
    before = penalised_deviance(problem, work.base, work.scores, target, penalty)
    coef, scores = solution.coef, binned.scores(solution.coef)
    halvings = 0
    small = float(np.max(np.abs(scores - work.scores))) <= FLOOR
    while not small and halvings < HALVINGS:
        after = penalised_deviance(problem, coef, scores, target, penalty)
        if np.isfinite(after) and after <= before + RISE * abs(before):
            break
        coef, scores = (coef + work.base) / 2, (scores + work.scores) / 2
        halvings += 1
    trace.steps += 1
    trace.halvings += halvings
    trace.halved_steps += halvings > 0
    trace.moves.append(float(np.max(np.abs(scores - work.scores))))
    return Step(coef, scores, halvings)


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


def finish(problem: Problem, binned: Binned, target: np.ndarray, found: Search,
           kept: Candidate, criterion: str, trace: Trace, compared: tuple[Candidate, ...]
           ) -> Fitted:
    """The fit's statistics from its last step (pygam's definitions; see the module)."""
    solution, step = kept.solution, kept.step
    inverse = np.linalg.inv(solution.system)  # LU: the system may be too close to singular for
    # a Cholesky factorisation (see spline_penalty.Factored)
    sandwich = inverse @ kept.work.gram @ inverse
    dev = deviance(step.scores, target, problem.classify)
    scale = 1.0 if problem.classify else dev / (binned.rows - solution.edof)
    return Fitted(step.coef, (sandwich + sandwich.T) / 2 * scale, solution.edof, scale,
                  found, kept.positions, true_value(problem, dev, binned.rows, solution.edof,
                                                    criterion),
                  dev, kept.converged and trace.converged, trace.steps, trace.searches,
                  trace.unsettled, step.scores, trace.moves[-1], trace.halvings,
                  trace.halved_steps,
                  tuple((c.positions, c.value, c.converged) for c in compared))
