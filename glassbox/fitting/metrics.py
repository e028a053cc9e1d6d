"""Accuracy measures, computed with scikit-learn so they mean what they usually mean."""

from __future__ import annotations

import numpy as np
from sklearn import metrics

CLASSIFICATION_METRICS = ("auc", "gini", "ks", "log_loss", "brier", "accuracy")
REGRESSION_METRICS = ("rmse", "mae", "r2")
HIGHER_IS_BETTER = {"auc": True, "gini": True, "ks": True, "accuracy": True, "r2": True,
                    "log_loss": False, "brier": False, "rmse": False, "mae": False}
METRIC_NAMES = {"auc": "ROC AUC", "gini": "Gini", "ks": "KS", "log_loss": "log loss",
                "brier": "Brier", "accuracy": "accuracy", "rmse": "RMSE", "mae": "MAE",
                "r2": "R²"}
METRIC_DEFINITIONS = ("Gini = 2 × ROC AUC − 1 (the accuracy ratio); KS: the largest distance "
                      "between the distribution functions of the predicted probabilities of "
                      "the positives and of the negatives (two-sample Kolmogorov-Smirnov); "
                      "both per fold on its test rows, like every metric")


def classification_metrics(target: np.ndarray, probability: np.ndarray,
                           cutoff: float = 0.5) -> dict[str, float]:
    """ROC AUC, log loss, Brier score and accuracy at a probability cut-off."""
    target = np.asarray(target, dtype=float)
    probability = np.clip(np.asarray(probability, dtype=float), 0.0, 1.0)
    both = len(np.unique(target)) == 2
    return {
        "auc": float(metrics.roc_auc_score(target, probability)) if both else float("nan"),
        "log_loss": float(metrics.log_loss(target, probability, labels=[0.0, 1.0])),
        "brier": float(metrics.brier_score_loss(target, probability)),
        "accuracy": float(metrics.accuracy_score(target, probability >= cutoff)),
    }


def regression_metrics(target: np.ndarray, prediction: np.ndarray) -> dict[str, float]:
    """Root mean squared error, mean absolute error and R²."""
    target = np.asarray(target, dtype=float)
    prediction = np.asarray(prediction, dtype=float)
    return {
        "rmse": float(np.sqrt(metrics.mean_squared_error(target, prediction))),
        "mae": float(metrics.mean_absolute_error(target, prediction)),
        "r2": float(metrics.r2_score(target, prediction)),
    }


def ks_statistic(target: np.ndarray, score: np.ndarray) -> float:
    """Kolmogorov-Smirnov statistic: the largest distance between the empirical
    distribution functions of the scores of the positives and of the negatives."""
    target = np.asarray(target, dtype=float) == 1.0
    score = np.asarray(score, dtype=float)
    positives, negatives = np.sort(score[target]), np.sort(score[~target])
    if not len(positives) or not len(negatives):
        return float("nan")
    points = np.unique(score)  # the distribution functions only jump at observed scores
    below_positive = np.searchsorted(positives, points, side="right") / len(positives)
    below_negative = np.searchsorted(negatives, points, side="right") / len(negatives)
    return float(np.max(np.abs(below_positive - below_negative)))


def separation_metrics(target: np.ndarray, probability: np.ndarray) -> dict[str, float]:
    """Gini (2 × ROC AUC − 1, the accuracy ratio) and the KS statistic."""
    target = np.asarray(target, dtype=float)
    probability = np.asarray(probability, dtype=float)
    both = len(np.unique(target)) == 2
    auc = float(metrics.roc_auc_score(target, probability)) if both else float("nan")
    return {"gini": 2.0 * auc - 1.0, "ks": ks_statistic(target, probability)}
