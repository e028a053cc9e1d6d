"""Intervals of a metric over resampled folds: the corrected resampled t interval of
Nadeau & Bengio (2003, Machine Learning 52), kept within the range the metric can take.

The variance of a mean over J resampled folds is (1/J + n_test/n_train) * s², not s²/J,
because the training sets overlap. An interval that would pass a bounded metric's range
(ROC AUC below 0 or above 1) is clipped to it, and says so; when every fold gives the same
value the interval has width 0, and says that too.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from scipy import stats

from glassbox.core.errors import DataError

# The range each metric can take, and a cost in it (a difference of two such values):
# an interval is clipped to it (`interval`), so no interval leaves what the metric can be.
INF = math.inf
METRIC_RANGES = {"auc": (0.0, 1.0), "accuracy": (0.0, 1.0), "brier": (0.0, 1.0),
                 "ks": (0.0, 1.0), "gini": (-1.0, 1.0),
                 "log_loss": (0.0, INF), "rmse": (0.0, INF), "mae": (0.0, INF),
                 "r2": (-INF, 1.0)}
COST_RANGES = {"auc": (-1.0, 1.0), "accuracy": (-1.0, 1.0), "brier": (-1.0, 1.0),
               "ks": (-1.0, 1.0), "gini": (-2.0, 2.0)}
CLIPPED = "clipped to the metric's range"
NO_VARIANCE = "every fold gave the same value (no variance): the interval has width 0"
NOT_FINITE_T = "its t statistic is not finite, written as null"
INTERVAL_METHOD = ("95%, corrected resampled t (Nadeau & Bengio 2003); an interval that would "
                   "pass the range of a bounded metric (ROC AUC, KS, accuracy and Brier in [0, "
                   "1], a cost in them in [-1, 1]; Gini in [-1, 1], a cost in it in [-2, 2]; "
                   "log loss, RMSE and MAE at least 0; R² at most "
                   "1) is clipped to it; when every fold gives the same value the interval has "
                   "width 0; either case is named in the row's interval_note")


def interval(values: Sequence[float], test_share: float, level: float = 0.95,
             bounds: tuple[float, float] = (-INF, INF)) -> dict:
    """Mean with the corrected resampled t interval (Nadeau & Bengio 2003).

    `test_share` is n_test / n_train of one fold. With J values the variance of
    the mean is (1/J + test_share) * s²; the interval uses t with J - 1 degrees
    of freedom. The t statistic and two-sided p-value test a mean of zero. The ends
    are clipped to `bounds` (the range the metric can take). `note` says when the
    interval was clipped, or has width 0 because every value is the same.
    """
    values = np.asarray(values, dtype=float)
    count = len(values)
    mean = float(values.mean())
    if count < 2:
        return {"mean": mean, "lower": float("nan"), "upper": float("nan"),
                "t": float("nan"), "p_value": float("nan"), "note": None}
    variance = float(values.var(ddof=1))
    error = np.sqrt((1.0 / count + test_share) * variance)
    quantile = stats.t.ppf(0.5 + level / 2, count - 1)
    t_value = mean / error if error > 0 else (0.0 if mean == 0 else np.copysign(np.inf, mean))
    p_value = float(2 * stats.t.sf(abs(t_value), count - 1)) if np.isfinite(t_value) else (
        1.0 if t_value == 0 else 0.0)
    lower, upper = float(mean - quantile * error), float(mean + quantile * error)
    notes = []
    if error == 0:
        notes.append(NO_VARIANCE if np.isfinite(t_value) else f"{NO_VARIANCE}; {NOT_FINITE_T}")
    if lower < bounds[0] or upper > bounds[1]:
        lower, upper = max(lower, bounds[0]), min(upper, bounds[1])
        notes.append(f"{CLIPPED}: {_bounds_text(bounds)}")
    return {"mean": mean, "lower": lower, "upper": upper, "t": float(t_value),
            "p_value": p_value, "note": "; ".join(notes) or None}


def _bounds_text(bounds: tuple[float, float]) -> str:
    if bounds[1] == INF:
        return f"at least {bounds[0]:g}"
    if bounds[0] == -INF:
        return f"at most {bounds[1]:g}"
    return f"in [{bounds[0]:g}, {bounds[1]:g}]"


def read_within_ranges(rows: list[dict], ranges: dict[str, tuple[float, float]], key: str,
                       where: str, table: str) -> list[dict]:
    """Rows of a comparison file, checked against the range of their metric: a `key` value
    outside it is refused (naming table[i].key); interval ends beyond it (files written
    before intervals were clipped) are clipped, and the row's interval_note says so."""
    checked = []
    for index, row in enumerate(rows):
        bounds = ranges.get(row["metric"], (-INF, INF))
        value = row.get(key)
        if value is not None and not bounds[0] <= value <= bounds[1]:
            raise DataError(f"{where}: {table}[{index}].{key} must lie {_bounds_text(bounds)}"
                            f" for {row['metric']}, not {value:g}")
        row = dict(row)
        ends = [row.get("lower"), row.get("upper")]
        if any(end is not None and not bounds[0] <= end <= bounds[1] for end in ends):
            row["lower"], row["upper"] = (None if end is None else
                                          min(max(end, bounds[0]), bounds[1]) for end in ends)
            note = f"{CLIPPED}: {_bounds_text(bounds)} (when read)"
            row["interval_note"] = "; ".join(filter(None, [row.get("interval_note"), note]))
        checked.append(row)
    return checked
