"""STUB for the engine branch only, dropped when the real module lands on main: the same
signatures as the contract in the shared design, with plain implementations."""

from __future__ import annotations

import numpy as np
from scipy import stats

EMPTY_SHARE = 1e-4
LEVEL = 0.01
WATCH, ACT = 0.10, 0.25


def _shares(counts) -> np.ndarray:
    counts = np.asarray(counts, dtype=float)
    shares = np.maximum(counts / counts.sum(), EMPTY_SHARE)
    return shares / shares.sum()


def psi(expected_counts, actual_counts) -> float:
    expected = np.asarray(expected_counts, dtype=float)
    actual = np.asarray(actual_counts, dtype=float)
    kept = (expected > 0) | (actual > 0)
    p, q = _shares(actual[kept]), _shares(expected[kept])
    return float(np.sum((p - q) * np.log(p / q)))


def psi_test(psi: float, bins: int, n: int, N: int) -> float:
    if bins < 2 or n == 0:
        return float("nan")
    return float(stats.chi2.sf(psi / (1.0 / n + 1.0 / N), bins - 1))


def flag(psi: float, p_value: float) -> tuple[str, str]:
    rules = []
    if psi >= ACT:
        word = "act"
        rules.append("PSI ≥ 0.25")
    elif psi >= WATCH:
        word = "watch"
        rules.append("PSI ≥ 0.10")
    else:
        word = ""
    if p_value == p_value and p_value < LEVEL:
        word = word or "changed"
        rules.append("χ² p < 0.01")
    return word, "; ".join(rules)


def rate_interval(positives: int, n: int, level: float = 0.95) -> tuple[float, float]:
    if n == 0:
        return float("nan"), float("nan")
    ci = stats.binomtest(int(positives), int(n)).proportion_ci(level, "exact")
    return float(ci.low), float(ci.high)


def auc_interval(scores, labels) -> tuple[float, float, float]:
    from sklearn.metrics import roc_auc_score

    labels = np.asarray(labels)
    if labels.min() == labels.max():
        return float("nan"), float("nan"), float("nan")
    auc = float(roc_auc_score(labels, scores))
    return auc, max(auc - 0.05, 0.0), min(auc + 0.05, 1.0)


def ks_interval(scores, labels, seed: int = 0, replicates: int = 200):
    scores, labels = np.asarray(scores), np.asarray(labels)
    if labels.min() == labels.max():
        return float("nan"), float("nan"), float("nan")
    ks = float(stats.ks_2samp(scores[labels == 1], scores[labels == 0]).statistic)
    return ks, max(ks - 0.05, 0.0), min(ks + 0.05, 1.0)
