"""Black-box benchmarks: fair, tuned, unconstrained opponents for the comparator.

`trees` is histogram gradient boosting with interactions allowed, tuned inside each
training fold by a seeded random search with early stopping (learning rate, tree size,
minimum leaf size, L2 penalty, feature subsampling; `benchmark_search`), within a
budget of candidate settings. `forest` is a random forest. Both see the same
typed features the glass-box families see (categories natively or one-hot).

Missing values are not imputed on either side: a missing number reaches both
benchmarks as NaN, which scikit-learn's trees split on natively (histogram
boosting always; random forests since scikit-learn 1.4, below the version this
project requires), and a missing category is its own level "(missing)", as the
glass-box families fit it.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor

from glassbox.core.schema import MISSING_LEVEL
from glassbox.fitting.benchmark_search import DEFAULT_BUDGET, search_settings, tuned_trees
from glassbox.fitting.choices import BENCHMARKS  # noqa: F401  (the names, light to import)

FOREST_SETTINGS = {"n_estimators": 300, "min_samples_leaf": 3}
MISSING_NUMBERS = ("passed as NaN, no imputation: each split learns which side missing values "
                   "go (scikit-learn's native missing-value support)")
MISSING_CATEGORIES = f"a level of its own, {MISSING_LEVEL!r}"


def benchmark_settings(kind: str, task: str, seed: int,
                       budget: int = DEFAULT_BUDGET) -> dict[str, Any]:
    """The benchmark's settings, recorded in the comparison's output."""
    if kind == "trees":
        estimator = ("HistGradientBoostingClassifier" if task == "classification"
                     else "HistGradientBoostingRegressor")
        return {"estimator": f"sklearn.ensemble.{estimator}", "tuned": True,
                **search_settings(budget), "interactions": "allowed",
                "categories": "native categorical support", "missing numbers": MISSING_NUMBERS,
                "missing categories": MISSING_CATEGORIES, "random_state": seed}
    estimator = "RandomForestClassifier" if task == "classification" else "RandomForestRegressor"
    return {"estimator": f"sklearn.ensemble.{estimator}", **FOREST_SETTINGS,
            "max_features": "sqrt" if task == "classification" else 1 / 3,
            "categories": "one-hot", "missing numbers": MISSING_NUMBERS,
            "missing categories": MISSING_CATEGORIES, "random_state": seed}


def _levels(column: pd.Series) -> tuple[pd.Series, list[str]]:
    """A category column with a missing value as the level MISSING_LEVEL, and its levels."""
    column = column.where(column.notna(), MISSING_LEVEL)
    return column, sorted(set(column))


def _codes(features: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Numbers as they are (NaN where missing) and categories as integer codes (sorted
    levels, "(missing)" among them); the mask of category columns."""
    columns, mask = [], []
    for name in features.columns:
        column = features[name]
        if column.dtype == object:
            column, levels = _levels(column)
            lookup = {level: code for code, level in enumerate(levels)}
            columns.append(column.map(lookup).to_numpy(dtype=float))
            mask.append(True)
        else:
            columns.append(column.to_numpy(dtype=float))
            mask.append(False)
    return np.column_stack(columns), np.array(mask)


def _one_hot(features: pd.DataFrame) -> np.ndarray:
    """Numbers as they are (NaN where missing) and one column per level of a category."""
    parts = []
    for name in features.columns:
        column = features[name]
        if column.dtype == object:
            column, levels = _levels(column)
            for level in levels:
                parts.append((column == level).to_numpy(dtype=float))
        else:
            parts.append(column.to_numpy(dtype=float))
    return np.column_stack(parts)


def headline_name(kind: str, budget: int = DEFAULT_BUDGET) -> str:
    """The benchmark as the headline names it, saying how it was tuned."""
    if kind == "trees":
        return (f"benchmark (trees, tuned in each training fold: {budget} candidate "
                f"setting{'s' if budget != 1 else ''})")
    return f"benchmark ({kind})"


def fit_benchmark(kind: str, task: str, features: pd.DataFrame, target: np.ndarray,
                  train: np.ndarray, test: np.ndarray, seed: int,
                  budget: int = DEFAULT_BUDGET) -> np.ndarray:
    """Fit on the training rows; return the test rows' probability (or prediction)."""
    return benchmark_fold(kind, task, features, target, train, test, seed, budget)[0]


def benchmark_fold(kind: str, task: str, features: pd.DataFrame, target: np.ndarray,
                   train: np.ndarray, test: np.ndarray, seed: int,
                   budget: int = DEFAULT_BUDGET) -> tuple[np.ndarray, dict[str, Any] | None]:
    """The test rows' probability (or prediction) from a fit on the training rows, and for
    the tuned trees the record of the fold's search (None for the forest)."""
    classify = task == "classification"
    record = None
    if kind == "trees":
        matrix, mask = _codes(features)
        model, record = tuned_trees(matrix, mask, target, train, classify, seed, budget)
        rows = matrix[test]
    else:
        matrix = _one_hot(features)
        if classify:
            model = RandomForestClassifier(max_features="sqrt", random_state=seed, n_jobs=1,
                                           **FOREST_SETTINGS)
        else:
            model = RandomForestRegressor(max_features=1 / 3, random_state=seed, n_jobs=1,
                                          **FOREST_SETTINGS)
        model.fit(matrix[train], target[train])
        rows = matrix[test]
    if classify:
        return model.predict_proba(rows)[:, 1], record
    return model.predict(rows), record
