"""Accuracy measures, computed with scikit-learn so they mean what they usually mean."""

from __future__ import annotations

import numpy as np
from sklearn import metrics


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
