"""Sign-constrained linear fits: the sparse family's way of honouring declared directions.

A feature declared `monotone = "increasing"` must have a coefficient of zero or more,
one declared "decreasing" zero or less (on a standardised column the sign is the same
as per unit). Only a feature's value column carries the sign: its missing indicator and
category indicators are free (sign 0), so a held slope leaves the learned shift for a
missing value in place. Both fits below solve the constrained problem itself:

- the L1 path: where the ordinary path breaks a declared sign, the whole path is
  solved again with the signs as bounds (each free coefficient split into a positive
  and a negative part, so the L1 penalty is linear): L-BFGS-B for the logistic loss,
  scikit-learn's coordinate descent with `positive=True` for least squares;
- the refit: scikit-learn's unpenalised (or ridge) fit when it keeps every declared
  sign, which is then also the constrained optimum (the problem is convex); otherwise
  the coefficients a bounded solve puts at zero are held there, the rest refitted by
  scikit-learn, and the optimality conditions of the constrained problem checked
  (every held coefficient's gradient points out of the allowed side).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy.optimize import lsq_linear, minimize
from scipy.special import expit
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import lasso_path

from glassbox.core.errors import OptionError

ZERO = 1e-10  # a coefficient this small is zero (as the ordinary path reads it)


def breaks_signs(coefs: np.ndarray, signs: np.ndarray) -> bool:
    """Whether any coefficient (rows: columns of the design) lies on its forbidden side."""
    coefs = np.asarray(coefs, dtype=float).reshape(len(signs), -1)
    return bool(np.any(signs[:, None] * coefs < -ZERO))


def _split(matrix: np.ndarray, signs: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Columns whose coefficients are all >= 0: a signed column once, a free one twice (+, -)."""
    owner, direction = [], []
    for column, sign in enumerate(signs):
        for way in ((1.0, -1.0) if sign == 0 else (float(sign),)):
            owner.append(column)
            direction.append(way)
    owner_array, direction_array = np.array(owner), np.array(direction)
    return matrix[:, owner_array] * direction_array, owner_array, direction_array


def _merge(parts: np.ndarray, owner: np.ndarray, direction: np.ndarray, count: int
           ) -> np.ndarray:
    coefs = np.zeros((count,) + parts.shape[1:])
    np.add.at(coefs, owner, direction.reshape((-1,) + (1,) * (parts.ndim - 1)) * parts)
    return coefs


def logistic_l1_path(matrix: np.ndarray, target: np.ndarray, signs: np.ndarray,
                     penalties: np.ndarray) -> np.ndarray:
    """Coefficients (columns x penalties) minimising C * log loss + |w|_1 under the signs,
    the intercept unpenalised; warm-started from one penalty to the next."""
    split, owner, direction = _split(matrix, signs)
    width = split.shape[1]
    start = np.zeros(width + 1)
    bounds = [(None, None)] + [(0.0, None)] * width
    parts = []
    for c_value in penalties:
        def objective(point: np.ndarray, c_value: float = float(c_value)):
            linear = point[0] + split @ point[1:]
            residual = expit(linear) - target
            value = c_value * np.sum(np.logaddexp(0.0, linear) - target * linear)
            gradient = np.empty_like(point)
            gradient[0] = c_value * residual.sum()
            gradient[1:] = c_value * (split.T @ residual) + 1.0
            return value + point[1:].sum(), gradient

        found = minimize(objective, start, jac=True, method="L-BFGS-B", bounds=bounds,
                         options={"ftol": 1e-13, "gtol": 1e-9, "maxiter": 10_000})
        start = _newton_polish(split, target, float(c_value), found.x)
        parts.append(start[1:])
    return _merge(np.array(parts).T, owner, direction, len(signs))


def _newton_polish(split: np.ndarray, target: np.ndarray, c_value: float,
                   point: np.ndarray) -> np.ndarray:
    """Newton steps on the coefficients L-BFGS-B left above zero (where the objective is
    smooth), to the precision of the optimality conditions; the L-BFGS-B point is kept
    if a step would cross zero or the system is singular."""
    active = np.r_[True, point[1:] > 0]
    columns = np.column_stack([np.ones(len(target)), split[:, active[1:]]])
    polished = point.copy()
    for _ in range(25):
        linear = columns @ polished[active]
        probability = expit(linear)
        gradient = c_value * columns.T @ (probability - target) + np.r_[0.0, np.ones(
            columns.shape[1] - 1)]
        if np.max(np.abs(gradient)) < 1e-10:
            return polished
        weights = c_value * probability * (1.0 - probability)
        try:
            step = np.linalg.solve((columns * weights[:, None]).T @ columns, gradient)
        except np.linalg.LinAlgError:
            return point
        polished[active] -= step
        if np.any(polished[1:][active[1:]] <= 0):
            return point
    return point


def least_squares_l1_path(matrix: np.ndarray, centred: np.ndarray, signs: np.ndarray,
                          alphas: int) -> np.ndarray:
    """The lasso path (columns x penalties, largest penalty first) under the signs."""
    split, owner, direction = _split(matrix, signs)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        _, parts, _ = lasso_path(split, centred, alphas=alphas, positive=True)
    return _merge(parts, owner, direction, len(signs))


# ---------------------------------------------------------------- the refit


def _gradient(matrix: np.ndarray, target: np.ndarray, task: str, ridge: float,
              intercept: float, coefs: np.ndarray) -> np.ndarray:
    """Gradient in the coefficients of the refit's objective: log loss + ridge/2 |w|²
    (scikit-learn's LogisticRegression with C = 1/ridge), or squared error + ridge |w|²."""
    linear = intercept + matrix @ coefs
    if task == "classification":
        return matrix.T @ (expit(linear) - target) + ridge * coefs
    return -2.0 * matrix.T @ (target - linear) + 2.0 * ridge * coefs


def _bounded_zeros(matrix: np.ndarray, target: np.ndarray, task: str, ridge: float,
                   signs: np.ndarray) -> np.ndarray:
    """Which signed coefficients a bounded solve puts at zero (a first guess of the held set)."""
    lower = np.where(signs > 0, 0.0, -np.inf)
    upper = np.where(signs < 0, 0.0, np.inf)
    if task == "classification":
        def objective(point: np.ndarray):
            linear = point[0] + matrix @ point[1:]
            residual = expit(linear) - target
            value = np.sum(np.logaddexp(0.0, linear) - target * linear)
            value += 0.5 * ridge * point[1:] @ point[1:]
            return value, np.r_[residual.sum(), matrix.T @ residual + ridge * point[1:]]

        bounds = [(None, None)] + [(None if np.isinf(lo) else lo, None if np.isinf(hi) else hi)
                                   for lo, hi in zip(lower, upper, strict=True)]
        found = minimize(objective, np.zeros(matrix.shape[1] + 1), jac=True,
                         method="L-BFGS-B", bounds=bounds,
                         options={"ftol": 1e-13, "gtol": 1e-9, "maxiter": 10_000})
        coefs = found.x[1:]
    else:
        centred = target - target.mean()
        design = matrix - matrix.mean(axis=0)
        if ridge > 0:
            design = np.vstack([design, np.sqrt(ridge) * np.eye(matrix.shape[1])])
            centred = np.r_[centred, np.zeros(matrix.shape[1])]
        coefs = lsq_linear(design, centred, bounds=(lower, upper), method="bvls").x
    return (signs != 0) & (np.abs(coefs) <= ZERO)


def _intercept_only(target: np.ndarray, task: str) -> float:
    mean = float(np.mean(target))
    return float(np.log(mean / (1.0 - mean))) if task == "classification" else mean


def signed_refit(matrix: np.ndarray, target: np.ndarray, signs: np.ndarray, task: str,
                 ridge: float, make: Callable[[], Any]
                 ) -> tuple[Any, np.ndarray, float, np.ndarray]:
    """The refit under the signs: (scikit-learn model or None, the columns it was fitted on,
    intercept, every column's coefficient with held ones at zero).

    `make()` returns a fresh unfitted scikit-learn model of the refit.
    """
    count = matrix.shape[1]
    held = np.zeros(count, dtype=bool)
    tolerance = 1e-7 * len(target)
    for round_number in range(2 * count + 2):
        free = ~held
        estimator = None
        intercept, coefs = _intercept_only(target, task), np.zeros(count)
        if free.any():
            estimator = make().fit(matrix if free.all() else matrix[:, free], target)
            intercept = float(np.ravel(estimator.intercept_)[0])
            coefs[free] = np.ravel(estimator.coef_)
        wrong = free & (signs * coefs < -ZERO)
        if round_number == 0 and not wrong.any():
            return estimator, free, intercept, coefs
        if round_number == 0:
            held = _bounded_zeros(matrix, target, task, ridge, signs)
            continue
        gradient = _gradient(matrix, target, task, ridge, intercept, coefs)
        release = held & (signs * gradient < -tolerance)
        if not wrong.any() and not release.any():
            return estimator, free, intercept, coefs
        held = (held | wrong) & ~release
    raise OptionError("the declared monotone directions could not be met exactly by the "
                      "sparse family's refit; fit without them or with the spline family")
