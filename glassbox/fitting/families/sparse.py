"""Sparse-linear family: an L1 path picks at most k features, then a refit of them.

Classification uses logistic regression, regression the lasso and least
squares. Numeric features are standardised, so a penalty treats them alike; a
category enters as 0/1 indicators of its non-reference levels (the most frequent
level is the reference), only centred, so a penalty acts on each level's shift.
Levels seen in fewer than `min_level_rows` training rows (default 30, common
practice) share one indicator, or join the reference level when together they are
still that rare; the levels table lists each of them with the shared value, and the
details name them. A numeric feature with gaps in training enters as its value (a gap
set to the median of the present values) plus a 0/1 missing indicator: the two are one
feature on the path (it enters when either leaves zero, and counts once) and in the
refit, and the term's missing entry is the line at the median plus the indicator's
shift. The refit minimises log loss (or squared error) plus `ridge`/2 times the sum of
squared coefficients (default 1.0: scikit-learn's C = 1; squared error adds `ridge`
times the sum); `ridge = 0` is plain maximum likelihood (least squares), and the
details say if that refit did not converge. A declared `monotone` direction bounds the
feature's slope to its side of zero (not its missing indicator), on the path and in the
refit (see `signed`); a feature it holds at zero stays in the model as a flat term,
and the model's details name it. Each numeric feature compiles to a two-knot curve at
its training minimum and maximum (exact inside the range), each category to a levels
table.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LinearRegression, LogisticRegression, Ridge, lasso_path
from sklearn.svm import l1_min_c

from glassbox.core.additive import CurveTerm, LevelsTerm, Term
from glassbox.core.errors import OptionError
from glassbox.core.schema import MISSING_LEVEL, Schema
from glassbox.fitting.families.base import FamilyFit
from glassbox.fitting.families.signed import (
    breaks_signs,
    least_squares_l1_path,
    logistic_l1_path,
    signed_refit,
)

NAME = "sparse"
DEFAULTS = {"max_features": None, "ridge": 1.0, "min_level_rows": 30, "path_points": 40}
ENTERED = 1e-10  # a coefficient above this size on the path has entered the model
PATH_SPAN = 4.0  # the L1 path runs over four decades of the penalty above its smallest value
DIRECTION_SIGNS = {"increasing": 1, "decreasing": -1}
POOLED = "(rare levels)"  # the design column of a category's pooled rare levels


@dataclass(frozen=True)
class Design:
    """The design matrix and how its columns map back to features.

    A numeric value column is standardised (centred, divided by its standard deviation);
    a 0/1 indicator (a category level, a pool of rare levels, a missing value) is only
    centred, so a penalty acts on the shift in the link it makes. `level_of` is None for
    a value column, MISSING_LEVEL for a numeric feature's missing indicator, POOLED for
    a category's pool of rare levels, and the level otherwise.
    """

    matrix: np.ndarray
    feature_of: tuple[str, ...]
    level_of: tuple[str | None, ...]
    centre: np.ndarray
    scale: np.ndarray
    references: dict[str, str]
    levels: dict[str, tuple[str, ...]]
    signs: np.ndarray  # per column: +1 increasing, -1 decreasing, 0 no declared direction
    stand_ins: dict[str, float] = field(default_factory=dict)  # median put in for a gap
    pooled: dict[str, tuple[str, ...]] = field(default_factory=dict)  # rare levels per feature

    def columns_of(self, features: set[str]) -> np.ndarray:
        return np.array([f in features for f in self.feature_of])


def build_design(features: pd.DataFrame, schema: Schema, *,
                 min_level_rows: int = DEFAULTS["min_level_rows"]) -> Design:
    """Standardised numeric columns (a gap: the median of the present values, plus a
    missing indicator) and reference-coded category indicators (rare levels pooled)."""
    blocks, feature_of, level_of, signs, scaled = [], [], [], [], []
    references: dict[str, str] = {}
    levels: dict[str, tuple[str, ...]] = {}
    stand_ins: dict[str, float] = {}
    pooled: dict[str, tuple[str, ...]] = {}

    def add(values: np.ndarray, name: str, level: str | None, sign: int = 0) -> None:
        blocks.append(values)
        feature_of.append(name)
        level_of.append(level)
        signs.append(sign)
        scaled.append(level is None)

    for name in features.columns:
        column = features[name]
        if schema.feature(name).kind == "category":
            column = column.where(column.notna(), MISSING_LEVEL).astype(str)
            counts = column.value_counts()
            ordered = sorted(counts.index, key=lambda level: (-counts[level], str(level)))
            references[name] = str(ordered[0])
            levels[name] = tuple(sorted(str(level) for level in ordered))
            rare = sorted(level for level in ordered[1:] if counts[level] < min_level_rows)
            if rare:
                pooled[name] = tuple(rare)
            for level in sorted(set(ordered[1:]) - set(rare)):
                add((column == level).to_numpy(dtype=float), name, str(level))
            if sum(counts[level] for level in rare) >= min_level_rows:
                add(column.isin(rare).to_numpy(dtype=float), name, POOLED)
        else:
            values = column.to_numpy(dtype=float)
            gaps = np.isnan(values)
            present = values[~gaps]
            if present.size and np.ptp(present) > 0:
                stand_in = float(np.median(present))
                add(np.where(gaps, stand_in, values), name, None,
                    DIRECTION_SIGNS.get(schema.feature(name).monotone, 0))
                if gaps.any():
                    stand_ins[name] = stand_in
            if gaps.any():
                add(gaps.astype(float), name, MISSING_LEVEL)
            # a column with one present value and no gaps carries no information
    if not blocks:
        raise OptionError("no feature varies in the training data; nothing to fit")
    matrix, centre, scale = standardised(blocks, np.array(scaled))
    blocks.clear()
    return Design(matrix, tuple(feature_of), tuple(level_of), centre, scale,
                  references, levels, np.array(signs, dtype=float), stand_ins, pooled)


ROWS_AT_ONCE = 4096  # rows per block of the matrix written at once (fits in the cache)


def standardised(blocks: list[np.ndarray], scaled: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The columns side by side (as np.column_stack lays them out), centred, and divided by
    their standard deviation where `scaled` (a constant column by 1); the centres and scales.

    The numbers are those of raw.mean(axis=0), raw.std(axis=0) and (raw - centre) / scale on
    the stacked matrix: a row-major matrix is reduced over its rows one row after another,
    which is what a cumulative sum does down one column (numpy sums a single column
    pairwise, which rounds differently); the matrix is then written a block of rows at a
    time instead of a column at a time, which touches each row of it once. (A matrix of
    one column is contiguous down it, and numpy sums it pairwise: so is it here.)"""
    rows = len(blocks[0])
    work = np.empty(rows)  # one buffer for every column's sums: no fresh pages per column

    def total(values: np.ndarray) -> float:
        # a matrix of one column is one run of numbers, which numpy sums pairwise
        return np.cumsum(values, out=work)[-1] if len(blocks) > 1 else np.add.reduce(values)

    centre = np.array([total(values) for values in blocks]) / rows
    sums = []
    for values, middle in zip(blocks, centre, strict=True):
        np.subtract(values, middle, out=work)
        np.square(work, out=work)
        sums.append(total(work))
    spread = np.sqrt(np.array(sums) / rows)
    scale = np.where(scaled, spread, 1.0)
    scale[scale == 0] = 1.0
    matrix = np.empty((rows, len(blocks)))
    for start in range(0, rows, ROWS_AT_ONCE):
        part = matrix[start:start + ROWS_AT_ONCE]
        for at, values in enumerate(blocks):
            part[:, at] = values[start:start + ROWS_AT_ONCE]
        part -= centre
        part /= scale
    return matrix, centre, scale


def entry_order(design: Design, target: np.ndarray, task: str, points: int) -> list[str]:
    """Features in the order they enter along the L1 path (earliest first)."""
    return order_along(l1_path(design, target, task, points), design)


def l1_path(design: Design, target: np.ndarray, task: str, points: int) -> np.ndarray:
    """The L1 path's coefficients, one column per penalty, strongest penalty first."""
    matrix = design.matrix
    if task == "classification":
        smallest = l1_min_c(matrix, target, loss="log", fit_intercept=True)
        penalties = smallest * np.logspace(0, PATH_SPAN, points)
        model = LogisticRegression(l1_ratio=1.0, solver="liblinear", intercept_scaling=100.0,
                                   tol=1e-6, max_iter=2000, random_state=0)
        path = []
        # with no declared direction the path is only read for the order features enter
        # in, so it stops once every feature has entered: the later penalties, weaker,
        # add no feature to the order (with directions the whole path is checked for signs)
        unsigned, waiting = not design.signs.any(), set(design.feature_of)
        for c_value in penalties:
            model.set_params(C=float(c_value))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ConvergenceWarning)
                model.fit(matrix, target)
            path.append(model.coef_.ravel().copy())
            waiting -= {design.feature_of[c] for c in np.flatnonzero(np.abs(path[-1]) > ENTERED)}
            if unsigned and not waiting:
                break
        coefs = np.array(path).T
        if breaks_signs(coefs, design.signs):
            coefs = logistic_l1_path(matrix, target, design.signs, penalties)
    else:
        # alphas come largest first, so the path runs from the empty model outwards
        _, coefs, _ = lasso_path(matrix, target - target.mean(), alphas=points * 2)
        if breaks_signs(coefs, design.signs):
            coefs = least_squares_l1_path(matrix, target - target.mean(), design.signs,
                                          points * 2)
    return coefs


def order_along(coefs: np.ndarray, design: Design) -> list[str]:
    """Features in the order their first coefficient leaves zero along the path (at one
    penalty, the larger coefficient first); those that never do follow in schema order."""
    order: list[str] = []
    strength: dict[str, float] = {}
    for step in range(coefs.shape[1]):
        active = np.abs(coefs[:, step]) > ENTERED
        newcomers = {}
        for column in np.flatnonzero(active):
            feature = design.feature_of[column]
            if feature not in order:
                newcomers[feature] = max(newcomers.get(feature, 0.0),
                                         abs(coefs[column, step]))
        for feature in sorted(newcomers, key=lambda f: (-newcomers[f], f)):
            order.append(feature)
            strength[feature] = newcomers[feature]
    # features that never entered follow in schema order
    order += [f for f in dict.fromkeys(design.feature_of) if f not in order]
    return order


def left_along(coefs: np.ndarray, design: Design) -> dict[str, tuple[str, ...]]:
    """For each feature that enters the path: the features that had entered before it
    but are back at zero at the penalty where it enters (the path's sets not nested)."""
    feature_of = np.array(design.feature_of)
    entered: set[str] = set()
    left: dict[str, tuple[str, ...]] = {}
    for step in range(coefs.shape[1]):
        active = set(feature_of[np.abs(coefs[:, step]) > ENTERED])
        gone = tuple(sorted(entered - active))
        for feature in sorted(active - entered):
            left[feature] = gone
        entered |= active
    return left


@dataclass(frozen=True)
class SparseFit:
    """The refitted scikit-learn model and what it was fitted on."""

    estimator: Any  # LogisticRegression, LinearRegression or Ridge; None if every column is held
    design: Design
    chosen: list[str]
    order: list[str]
    columns: np.ndarray  # the design columns the estimator was fitted on
    intercept: float
    coefs: np.ndarray  # per column of the chosen features; held at zero where a sign binds
    held: tuple[str, ...]  # chosen features their declared direction holds flat
    unsettled: bool = False  # the refit stopped before converging (reported in the details)


def fit_estimator(
    features: pd.DataFrame, target: np.ndarray, schema: Schema, *, task: str,
    max_features: int | None = None, ridge: float = DEFAULTS["ridge"],
    min_level_rows: int = DEFAULTS["min_level_rows"], path_points: int = 40,
) -> SparseFit:
    """Select features along the path, refit under the declared signs, and return the
    scikit-learn model itself; `fit` compiles this into tables and tests compare the two."""
    if max_features is not None and (not isinstance(max_features, int | np.integer)
                                     or max_features < 1):
        raise OptionError(f"max_features must be a whole number of at least 1, "
                          f"not {max_features!r}")
    if isinstance(ridge, bool) or not isinstance(ridge, int | float | np.number) or not (
            0 <= ridge < np.inf):
        raise OptionError(f"ridge must be zero or positive, not {ridge!r}")
    if (isinstance(min_level_rows, bool) or not isinstance(min_level_rows, int | np.integer)
            or min_level_rows < 0):
        raise OptionError(f"min_level_rows must be a whole number of at least 0, "
                          f"not {min_level_rows!r}")
    design = build_design(features, schema, min_level_rows=min_level_rows)
    groups = list(dict.fromkeys(design.feature_of))
    if max_features is not None and max_features < len(groups):
        order = entry_order(design, target, task, path_points)
        chosen = order[:max_features]
    else:
        order = groups
        chosen = groups
    return refit(design, target, task, chosen, order, ridge)


def refit(design: Design, target: np.ndarray, task: str, chosen: list[str], order: list[str],
          ridge: float) -> SparseFit:
    """The refit of the chosen features' columns of a design under their declared signs."""
    mask = design.columns_of(set(chosen))

    def make() -> LogisticRegression | LinearRegression | Ridge:
        if task == "classification":
            c_value = np.inf if ridge == 0 else 1.0 / ridge
            return LogisticRegression(C=c_value, solver="newton-cholesky", tol=1e-10,
                                      max_iter=500)
        return LinearRegression() if ridge == 0 else Ridge(alpha=ridge)

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        columns = design.matrix if mask.all() else design.matrix[:, mask]  # no copy if all
        estimator, free, intercept, coefs = signed_refit(columns, target,
                                                         design.signs[mask], task, ridge, make)
    unsettled = any(issubclass(w.category, ConvergenceWarning) for w in caught)
    selected = np.flatnonzero(mask)
    held = tuple(dict.fromkeys(design.feature_of[c] for c in selected[~free]))
    return SparseFit(estimator, design, chosen, order, selected[free], intercept, coefs, held,
                     unsettled)


def fit(
    features: pd.DataFrame, target: np.ndarray, schema: Schema, *, task: str,
    max_features: int | None = None, ridge: float = DEFAULTS["ridge"],
    min_level_rows: int = DEFAULTS["min_level_rows"], path_points: int = 40,
) -> FamilyFit:
    """Fit the sparse-linear family and compile it into term tables."""
    fitted = fit_estimator(
        features, target, schema, task=task, max_features=max_features, ridge=ridge,
        min_level_rows=min_level_rows, path_points=path_points,
    )
    parameters = {"max_features": max_features, "ridge": ridge,
                  "min_level_rows": min_level_rows, "path_points": path_points}
    return compiled(fitted, features, schema, parameters)


def compiled(fitted: SparseFit, features: pd.DataFrame, schema: Schema,
             parameters: dict[str, Any]) -> FamilyFit:
    """A refit as term tables, with the details a model file records."""
    min_level_rows = parameters["min_level_rows"]
    design, chosen, order = fitted.design, fitted.chosen, fitted.order
    selected = np.flatnonzero(design.columns_of(set(chosen)))
    # each chosen column's coefficient per unit of its raw column, and its value at the
    # column's centre (what the column adds to every row before its own shift)
    per_unit = {c: float(b / design.scale[c]) for c, b in zip(selected, fitted.coefs,
                                                                strict=True)}
    offset = {c: -per_unit[c] * design.centre[c] for c in selected}
    terms: list[Term] = []
    for feature in chosen:
        columns = {design.level_of[c]: c for c in selected if design.feature_of[c] == feature}
        base = sum(offset[c] for c in columns.values())
        if schema.feature(feature).kind == "category":
            pool = per_unit.get(columns.get(POOLED, -1), 0.0)
            levels = design.levels[feature]
            rare = set(design.pooled.get(feature, ()))
            values = [base + (pool if level in rare else per_unit.get(columns.get(level, -1),
                                                                        0.0))
                      for level in levels]
            terms.append(LevelsTerm(feature, levels, tuple(values)))
            continue
        present = features[feature].to_numpy(dtype=float)
        present = present[~np.isnan(present)]
        knots = tuple(sorted({float(present.min()), float(present.max())}))
        slope = per_unit.get(columns.get(None, -1), 0.0)
        missing = None
        if MISSING_LEVEL in columns:  # the curve at the median stand-in, plus the shift
            missing = base + slope * design.stand_ins.get(feature, knots[0]) + per_unit[
                columns[MISSING_LEVEL]]
        terms.append(CurveTerm(feature, knots, tuple(base + slope * k for k in knots),
                               missing=missing))
    intercept = fitted.intercept
    raw_coefficients = {
        (f if lvl is None else f"{f}[{lvl}]"): per_unit[c]
        for c, (f, lvl) in enumerate(zip(design.feature_of, design.level_of, strict=True))
        if c in per_unit
    }
    details = {
        "chosen_features": chosen,
        "entry_order": order,
        "references": {f: design.references[f] for f in chosen if f in design.references},
        "held_flat_by_declared_direction": list(fitted.held),
        "intercept_per_unit": intercept + float(sum(offset.values())),
        "coefficients_per_unit": raw_coefficients,
        "missing_stand_ins": {f: design.stand_ins[f] for f in chosen if f in design.stand_ins},
        "pooled_levels": pooled_note(design, chosen, min_level_rows),
    }
    if fitted.unsettled:
        details["refit_not_converged"] = (
            "the refit stopped at its iteration limit before converging; with ridge = 0 this "
            "usually means a level or feature separates the classes and its coefficient has "
            "no finite maximum-likelihood value; use a ridge above 0")
    return FamilyFit(intercept, tuple(terms), parameters, details)


def pooled_note(design: Design, chosen: list[str], min_level_rows: int) -> dict[str, str]:
    """Per chosen category with rare levels, which levels were pooled and where they went."""
    notes = {}
    for feature in chosen:
        rare = design.pooled.get(feature)
        if not rare:
            continue
        shared = any(f == feature and level == POOLED
                     for f, level in zip(design.feature_of, design.level_of, strict=True))
        into = ("one shared level" if shared
                else f"the reference level {design.references[feature]!r}")
        notes[feature] = (f"{', '.join(rare)} (under {min_level_rows} rows each) scored as "
                          f"{into}")
    return notes
