"""Calibration of predicted probabilities: observed against predicted by decile, and the
calibration slope and intercept.

Definitions (Cox 1958, Biometrika 45; Van Calster et al. 2016, J Clin Epidemiol 74, the
"calibration hierarchy"), with L = logit(p) the log-odds of the predicted probability:

- calibration slope: b in the logistic regression logit P(y = 1) = a + b·L (1 when
  the predictions are neither too extreme nor too modest; below 1: too extreme);
- calibration intercept ("calibration in the large"): a in logit P(y = 1) = a + L, L
  an offset with its coefficient fixed at 1 (0 when the predictions are right on
  average; above 0: they are too low).

Both are fitted by Newton's method to a change below `TOLERANCE`; a fit that does not get
there, or predictions of exactly 0 or 1 (whose log-odds are infinite and are moved to
`EDGE` from the end), are named in the result's note.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.wording import plural

GROUPS = 10
EDGE = 1e-12
TOLERANCE = 1e-12
MAX_STEPS = 100
DEFINITION = (
    "observed against predicted in ten groups of the pooled out-of-fold predicted "
    "probabilities, cut at their 10%, 20%, ..., 90% quantiles (linear interpolation; each "
    "group holds the values above its lower edge up to and including its upper edge, the "
    "first also its lower edge; equal edges from tied predictions merge groups, and the "
    "table then has fewer rows); calibration slope: b in logit P(y=1) = a + b·logit(p) "
    "(Cox 1958), 1 is ideal, below 1 the predictions are too extreme; calibration "
    "intercept: a in logit P(y=1) = a + logit(p), logit(p) an offset (calibration in the "
    "large, Van Calster et al. 2016), 0 is ideal, above 0 the predictions are too low; "
    "both by maximum likelihood on the pooled out-of-fold predictions, with repeats each "
    "row counts once per repeat")


def decile_groups(probability: np.ndarray, groups: int = GROUPS) -> np.ndarray:
    """The group (0, 1, ...) of each prediction: quantile edges, right-closed groups, the
    lowest value in the first; tied edges merged (as pandas' qcut with duplicates
    dropped)."""
    probability = np.asarray(probability, dtype=float)
    edges = np.unique(np.quantile(probability, np.linspace(0.0, 1.0, groups + 1)))
    return np.searchsorted(edges[1:-1], probability, side="left")


def decile_table(target: np.ndarray, probability: np.ndarray,
                 groups: int = GROUPS) -> pd.DataFrame:
    """decile, rows, mean predicted, observed rate: one row per group."""
    target = np.asarray(target, dtype=float)
    probability = np.asarray(probability, dtype=float)
    group = decile_groups(probability, groups)
    frame = pd.DataFrame({"group": group, "predicted": probability, "observed": target})
    table = frame.groupby("group", sort=True).agg(rows=("observed", "size"),
                                                  mean_predicted=("predicted", "mean"),
                                                  observed_rate=("observed", "mean"))
    table.insert(0, "decile", np.arange(1, len(table) + 1))
    return table.reset_index(drop=True)


def _log_odds(probability: np.ndarray) -> tuple[np.ndarray, int]:
    clipped = np.clip(probability, EDGE, 1.0 - EDGE)
    moved = int(np.sum(clipped != probability))
    return np.log(clipped / (1.0 - clipped)), moved


def _newton(design: np.ndarray, target: np.ndarray, offset: np.ndarray
            ) -> tuple[np.ndarray, bool]:
    """Maximum likelihood logistic regression with an offset, by Newton's method."""
    coefs = np.zeros(design.shape[1])
    for _ in range(MAX_STEPS):
        linear = offset + design @ coefs
        fitted = 1.0 / (1.0 + np.exp(-linear))
        weight = fitted * (1.0 - fitted)
        gradient = design.T @ (target - fitted)
        information = design.T @ (design * weight[:, None])
        try:
            step = np.linalg.solve(information, gradient)
        except np.linalg.LinAlgError:
            return coefs, False
        coefs = coefs + step
        if np.max(np.abs(step)) < TOLERANCE:
            return coefs, True
    return coefs, False


def calibration_fit(target: np.ndarray, probability: np.ndarray) -> dict[str, Any]:
    """Calibration slope and intercept (see the module's definitions), the rows they are
    fitted on and a note naming anything that limits them (or None)."""
    target = np.asarray(target, dtype=float)
    logit, moved = _log_odds(np.asarray(probability, dtype=float))
    notes = []
    if moved:
        notes.append(f"{plural(moved, 'prediction')} of exactly 0 or 1 taken as {EDGE:g} from the "
                     "end (their log-odds are infinite)")
    if np.ptp(logit) == 0:
        slope, slope_ok = float("nan"), True
        notes.append("every prediction is the same, so there is no slope")
    else:
        both, slope_ok = _newton(np.column_stack([np.ones_like(logit), logit]), target,
                                 np.zeros_like(logit))
        slope = float(both[1])
    (intercept,), intercept_ok = _newton(np.ones((len(logit), 1)), target, logit)
    for ok, name in ((slope_ok, "slope"), (intercept_ok, "intercept")):
        if not ok:
            notes.append(f"the {name}'s fit did not settle in {MAX_STEPS} Newton steps")
    return {"slope": slope if slope_ok else float("nan"),
            "intercept": float(intercept) if intercept_ok else float("nan"),
            "rows": int(len(target)), "note": "; ".join(notes) or None}
