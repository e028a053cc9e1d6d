"""The tuned boosted-trees benchmark: a seeded random search inside one training fold.

What a practitioner would do before calling a black box "the benchmark": only the
training rows of the fold (never its test rows) choose. Each candidate setting of learning
rate, tree size, minimum leaf size, L2 penalty and feature subsampling is scored by its
validation loss (log loss, or squared error for regression) with early stopping:

- a fold with at least SMALL_FOLD training rows is split once into inner training rows
  and inner validation rows (INNER_SHARE of them, stratified for classification);
- a smaller fold is scored by INNER_FOLDS-fold cross-validation inside it (stratified for
  classification): one split of a few hundred rows would leave some 60 validation rows,
  and choosing on those is mostly noise. Each inner fold's validation loss curve is
  followed until its early stop (and held at its last value after it); the candidate's
  loss is the lowest point of the curves' mean, its rounds where that point lies.

The candidate with the lowest loss wins and is refitted on all the fold's training rows
for its rounds (refitting on all rows for the rounds found is common practice, no
source). The first candidate is always the fixed setting the untuned benchmark used, so
the search can only lower the validation loss.

Every candidate is drawn without replacement from a finite grid by a seeded generator,
so the same seed gives the same candidates, the same choice and the same bytes. The
budget is a number of candidates, not seconds: a time budget would make the answer
depend on the machine's speed.
"""

from __future__ import annotations

import itertools
from typing import Any

import numpy as np
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.model_selection import KFold, StratifiedKFold, train_test_split

from glassbox.core.errors import OptionError

GRID: dict[str, tuple] = {
    "learning_rate": (0.02, 0.03, 0.05, 0.08, 0.12, 0.2),
    "max_leaf_nodes": (2, 3, 4, 8, 16, 32, 64),
    "min_samples_leaf": (3, 5, 10, 20, 40, 80),
    "l2_regularization": (0.0, 0.1, 1.0, 10.0),
    "max_features": (0.5, 0.75, 1.0),
}
FIRST = {"learning_rate": 0.05, "max_leaf_nodes": 16, "min_samples_leaf": 20,
         "l2_regularization": 1.0, "max_features": 1.0}  # the untuned benchmark's setting
FIXED = {"max_iter": 2000, "early_stopping": True, "n_iter_no_change": 30, "scoring": "loss"}
DEFAULT_BUDGET = 12
MAX_BUDGET = int(np.prod([len(values) for values in GRID.values()]))
INNER_SHARE = 0.2  # of the fold's training rows, held out to choose among the candidates
SMALL_FOLD = 2000  # fewer training rows than this: candidates scored by inner folds
INNER_FOLDS = 5
REFIT_RULE = ("the winner is refitted on all the fold's training rows, without early "
              "stopping, for the number of rounds at which its inner validation loss was "
              "lowest")


def check_budget(budget: int) -> None:
    if not 1 <= budget <= MAX_BUDGET:
        raise OptionError(f"--benchmark-budget must lie between 1 and {MAX_BUDGET} (every "
                          f"setting of the search grid), not {budget}")


def candidates(budget: int, seed: int) -> list[dict[str, Any]]:
    """`budget` distinct settings: the untuned benchmark's first, then draws without
    replacement from the grid by a generator seeded with `seed`."""
    check_budget(budget)
    names = list(GRID)
    grid = [dict(zip(names, values, strict=True))
            for values in itertools.product(*GRID.values())]
    first = grid.index(FIRST)
    others = [i for i in range(len(grid)) if i != first]
    drawn = np.random.default_rng(seed).choice(len(others), size=budget - 1, replace=False)
    return [grid[first], *(grid[others[int(i)]] for i in drawn)]


def _validation_loss(model) -> tuple[float, int]:
    """The lowest validation loss along early stopping and the rounds where it was reached
    (`validation_score_` holds minus the loss, before the first round at index 0)."""
    scores = np.asarray(model.validation_score_, dtype=float)
    best = int(np.argmax(scores))
    return float(-scores[best]), max(best, 1)


def _split_score(kind_of, setting, matrix, categorical, target, inner, check, seed):
    """(loss, rounds) of one candidate fitted on `inner`, stopped early on `check`."""
    model = kind_of(categorical_features=categorical, random_state=seed, **FIXED, **setting)
    model.fit(matrix[inner], target[inner], X_val=matrix[check], y_val=target[check])
    return _validation_loss(model)


def _folds_score(kind_of, setting, matrix, categorical, target, splits, seed):
    """(loss, rounds) of one candidate over the inner folds: the lowest point of the mean
    of the folds' validation loss curves (each held at its last value after its early
    stop), and the rounds where it lies."""
    curves = []
    for inner, check in splits:
        model = kind_of(categorical_features=categorical, random_state=seed, **FIXED,
                        **setting)
        model.fit(matrix[inner], target[inner], X_val=matrix[check], y_val=target[check])
        curves.append(-np.asarray(model.validation_score_, dtype=float))
    longest = max(len(curve) for curve in curves)
    mean = np.mean([np.pad(curve, (0, longest - len(curve)), mode="edge")
                    for curve in curves], axis=0)
    best = int(np.argmin(mean))
    return float(mean[best]), max(best, 1)


def tuned_trees(matrix: np.ndarray, categorical: np.ndarray, target: np.ndarray,
                train: np.ndarray, classify: bool, seed: int, budget: int):
    """(the refitted winner, a record of the search) on the fold's training rows `train`."""
    kind_of = HistGradientBoostingClassifier if classify else HistGradientBoostingRegressor
    if len(train) >= SMALL_FOLD:
        inner, check = train_test_split(train, test_size=INNER_SHARE, random_state=seed,
                                        stratify=target[train] if classify else None)
        inner, check = np.sort(inner), np.sort(check)
        layout = {"inner_training_rows": len(inner), "inner_validation_rows": len(check)}

        def score(setting):
            return _split_score(kind_of, setting, matrix, categorical, target, inner, check,
                                seed)
    else:
        splitter = (StratifiedKFold if classify else KFold)(INNER_FOLDS, shuffle=True,
                                                            random_state=seed)
        splits = [(train[a], train[b]) for a, b in splitter.split(train, target[train])]
        layout = {"inner_folds": INNER_FOLDS}

        def score(setting):
            return _folds_score(kind_of, setting, matrix, categorical, target, splits, seed)
    tried = []
    best = None
    for number, setting in enumerate(candidates(budget, seed)):
        loss, rounds = score(setting)
        tried.append({"candidate": number + 1, **setting, "rounds": rounds,
                      "validation_loss": loss})
        if best is None or loss < best[0]:
            best = (loss, rounds, setting, number + 1)
    loss, rounds, setting, number = best
    final = kind_of(categorical_features=categorical, random_state=seed, max_iter=rounds,
                    early_stopping=False, **setting)
    final.fit(matrix[train], target[train])
    record = {"budget": budget, "candidates_tried": len(tried), **layout,
              "chosen": {**setting, "rounds": rounds}, "chosen_candidate": number,
              "validation_loss": loss,
              "loss": "log loss" if classify else "squared error (half, as scikit-learn "
                                                  "reports it)",
              "tried": tried}
    return final, record


def search_settings(budget: int) -> dict[str, Any]:
    """How the search runs, for the comparison's recorded settings."""
    return {"search": "random search without replacement over the grid, nested in each "
                      "training fold (never its test rows)",
            "budget": budget, "budget_unit": "candidate settings per fold",
            "grid": {name: list(values) for name, values in GRID.items()},
            "first_candidate": FIRST, **FIXED,
            "inner_validation_share": INNER_SHARE,
            "inner_split": "stratified by the target for classification, random for "
                           "regression, seeded",
            "small_fold_rows": SMALL_FOLD, "small_fold_inner_folds": INNER_FOLDS,
            "small_fold_rule": f"a training fold of fewer than {SMALL_FOLD} rows scores "
                               f"each candidate by {INNER_FOLDS}-fold cross-validation "
                               "inside it (the lowest point of the mean validation loss "
                               "curve, each fold's curve held at its last value after its "
                               "early stop) instead of one split",
            "selection": "the lowest validation loss",
            "refit": REFIT_RULE}
