"""What a validator checks beside the accuracy cost: the no-skill model and the flag of a
model that does not beat it, calibration of the pooled out-of-fold predictions, and which
feature joins the sparse family at each size of its curve.

`glassbox.fitting.compare` calls these from `summarise`; they take and return plain data.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from glassbox.fitting.calibration import calibration_fit, decile_table
from glassbox.fitting.compare_folds import PREDICTIONS, fold_scores

NO_SKILL = "no skill"
NO_SKILL_WORDS = {
    "classification": "predicts every test row the share of positives in its fold's "
                      "training rows (the base rate)",
    "regression": "predicts every test row the mean target of its fold's training rows",
}
FLAG_RULE = ("a model is flagged on a metric when its mean over the folds does not beat the "
             "no-skill model's mean on the same folds (higher is better for ROC AUC, Gini, "
             "KS, accuracy and R², lower for log loss, Brier, RMSE and MAE). The no-skill "
             "model predicts every test row the share of positives (regression: the mean) "
             "of its fold's training rows: its ROC AUC is 0.5, its Gini and KS 0, and its "
             "accuracy at the cut-off that of always answering the class the base rate "
             "falls on (at 0.5: the training rows' majority class)")
STEP_RULE = ("each size adds the next feature in the order features first leave zero along "
             "the fold's L1 path (penalty falling; the path is followed until every feature "
             "has entered), so the curve's feature sets are nested; \"left\" names features "
             "that had entered the path earlier but were back at zero where this one "
             "entered, i.e. where the path's own sets are not nested")


def no_skill_records(target: np.ndarray, folds, task: str, cutoff: float) -> list[dict]:
    """Per fold: the metrics of predicting the training rows' mean for every test row."""
    records = []
    for repeat, fold, train, test in folds:
        mean = float(np.mean(target[train]))
        records.append({"repeat": repeat, "fold": fold, "train_rows": len(train),
                        "test_rows": len(test), "model": NO_SKILL,
                        **fold_scores(task, target[test], np.full(len(test), mean), cutoff)})
    return records


def base_rate(target: np.ndarray, task: str) -> dict[str, Any]:
    """The share of positives (regression: the mean target) over every row compared."""
    key = "share_of_positives" if task == "classification" else "mean"
    return {key: float(np.mean(target)), "rows": int(len(target)),
            "no_skill_model": NO_SKILL_WORDS[task]}


def flag_table(models: pd.DataFrame, metrics: Sequence[str],
               higher_is_better: dict[str, bool]) -> pd.DataFrame:
    """model, metric, mean, no_skill, beats: every model but the no-skill one against it
    (a mean that is not a number does not beat it)."""
    means = models.set_index(["model", "metric"])["mean"]
    rows = []
    for name in dict.fromkeys(models["model"]):
        if name == NO_SKILL:
            continue
        for metric in metrics:
            mine, theirs = means.get((name, metric)), means.get((NO_SKILL, metric))
            if mine is None or theirs is None:
                continue
            beats = bool(mine > theirs) if higher_is_better[metric] else bool(mine < theirs)
            rows.append({"model": name, "metric": metric, "mean": mine, "no_skill": theirs,
                         "beats": beats})
    return pd.DataFrame(rows, columns=["model", "metric", "mean", "no_skill", "beats"])


def pop_predictions(records: list[dict]) -> tuple[list[dict], dict[tuple, np.ndarray]]:
    """The records without their predictions, and the predictions by (model, repeat, fold)."""
    kept, predictions = [], {}
    for record in records:
        record = dict(record)
        values = record.pop(PREDICTIONS, None)
        if values is not None:
            predictions[(record["model"], record["repeat"], record["fold"])] = values
        kept.append(record)
    return kept, predictions


def calibration_tables(predictions: dict[tuple, np.ndarray], folds, target: np.ndarray,
                       order: Sequence[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per model, from its pooled out-of-fold predictions: the decile table (model,
    decile, rows, mean_predicted, observed_rate) and the fit (model, slope, intercept,
    rows, note)."""
    tests = {(repeat, fold): test for repeat, fold, _, test in folds}
    deciles, fits = [], []
    for name in order:
        keys = sorted(k for k in predictions if k[0] == name)
        if not keys:
            continue
        probability = np.concatenate([predictions[k] for k in keys])
        truth = np.concatenate([target[tests[k[1:]]] for k in keys]).astype(float)
        deciles.append(decile_table(truth, probability).assign(model=name))
        fits.append({"model": name, **calibration_fit(truth, probability)})
    columns = ["model", "decile", "rows", "mean_predicted", "observed_rate"]
    table = (pd.concat(deciles, ignore_index=True)[columns] if deciles
             else pd.DataFrame(columns=columns))
    return table, pd.DataFrame(fits, columns=["model", "slope", "intercept", "rows", "note"])


def sparsity_steps(curve_rows: pd.DataFrame) -> pd.DataFrame:
    """repeat, fold, max_features, joined, on_path, left: one row per fold and size."""
    columns = ["repeat", "fold", "max_features", "joined", "on_path", "left"]
    if curve_rows.empty or "joined" not in curve_rows:
        return pd.DataFrame(columns=columns)
    steps = curve_rows[columns].copy()
    steps["max_features"] = steps["max_features"].astype(int)
    steps["left"] = [list(v) for v in steps["left"]]
    return steps.sort_values(["max_features", "repeat", "fold"],
                             kind="mergesort").reset_index(drop=True)


def _counted(names: Sequence[str], folds: int) -> str:
    counts = Counter(names)
    ranked = sorted(counts, key=lambda n: (-counts[n], n))
    if len(ranked) == 1 and counts[ranked[0]] == folds:
        return ranked[0]
    return ", ".join(f"{n} {counts[n]}/{folds}" for n in ranked)


def step_words(steps: pd.DataFrame, size: int) -> tuple[str, str]:
    """(joined, left) for people at one size: a name when every fold agrees, else each
    name with the share of folds; a feature that never entered the path is marked."""
    rows = steps[steps["max_features"] == size]
    folds = len(rows)
    if not folds:
        return "", ""
    joined = _counted([j if on else f"{j} (never on the path)"
                       for j, on in zip(rows["joined"], rows["on_path"], strict=True)], folds)
    left_names = [name for names in rows["left"] for name in names]
    left = ", ".join(f"{n} {c}/{folds}" for n, c in
                     sorted(Counter(left_names).items(), key=lambda x: (-x[1], x[0])))
    return joined, left or "none"
