"""Outcomes by group: shares with a favourable outcome and adverse-impact ratios.

The adverse-impact ratio of a group is its favourable share divided by the share of
the most favoured group. A ratio below four fifths (0.8) is the customary flag of the
four-fifths rule in the US Uniform Guidelines on Employee Selection Procedures (1978),
29 CFR 1607.4(D). It is a screen, not a legal finding: local law decides what an
outcome gap means. Groups come from protected columns, which are never model inputs.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from glassbox.errors import DataError
from glassbox.schema import label_text

FOUR_FIFTHS = 0.8
MISSING_GROUP = "(missing)"
GROUP_COLUMNS = ("group", "rows", "favourable_rows", "favourable_share", "mean_prediction",
                 "impact_ratio", "flagged")
TOLERANCE = 1e-12  # a ratio of exactly 4/5 is not below it, whatever the rounding


def impact_ratios(shares: pd.Series) -> pd.Series:
    """Each group's share divided by the largest share (NaN when every share is zero)."""
    shares = pd.Series(shares, dtype=float)
    if shares.isna().any():
        raise DataError("a group's favourable share is missing")
    top = float(shares.max()) if len(shares) else 0.0
    if top <= 0.0:
        return pd.Series(np.nan, index=shares.index, name="impact_ratio")
    return (shares / top).rename("impact_ratio")


def below_threshold(ratios: pd.Series, threshold: float = FOUR_FIFTHS) -> pd.Series:
    """Whether each ratio lies below the threshold (never for an undefined ratio)."""
    ratios = pd.Series(ratios, dtype=float)
    return (ratios < threshold - TOLERANCE) & ratios.notna()


def group_labels(column: pd.Series) -> pd.Series:
    """A protected column's values as group names: text, with blanks as '(missing)'."""
    blank = column.isna().to_numpy()
    if column.dtype == object or pd.api.types.is_string_dtype(column.dtype):
        blank = blank | (column.astype(str).str.strip() == "").to_numpy()
    names = [MISSING_GROUP if empty else label_text(value)
             for value, empty in zip(column.to_numpy(dtype=object), blank, strict=True)]
    return pd.Series(names, index=column.index, name=column.name, dtype=object)


def outcomes_by_group(
    groups: pd.Series,
    favourable: np.ndarray | pd.Series,
    predictions: np.ndarray | pd.Series | None = None,
    threshold: float = FOUR_FIFTHS,
) -> pd.DataFrame:
    """Per group: rows, favourable rows and share, mean prediction, impact ratio, and
    whether the ratio is flagged (below `threshold`).

    `groups` holds one group per row (see `group_labels`), `favourable` whether each
    row had the favourable outcome (for a model: on the good side of the cut-off; for
    recourse: a plan exists), `predictions` what to average per group (optional).
    Groups are listed by name.
    """
    labels = pd.Series(groups).reset_index(drop=True).astype(object)
    good = np.asarray(favourable, dtype=bool)
    if len(good) != len(labels):
        raise DataError(f"{len(labels)} group labels but {len(good)} outcomes")
    values = (np.full(len(labels), np.nan) if predictions is None
              else np.asarray(predictions, dtype=float))
    if len(values) != len(labels):
        raise DataError(f"{len(labels)} group labels but {len(values)} predictions")
    frame = pd.DataFrame({"group": labels.map(str), "good": good, "value": values})
    totals = frame.groupby("group", sort=True).agg(
        rows=("good", "size"), favourable_rows=("good", "sum"), mean_prediction=("value", "mean"))
    totals["rows"] = totals["rows"].astype(int)
    totals["favourable_rows"] = totals["favourable_rows"].astype(int)
    totals["favourable_share"] = totals["favourable_rows"] / totals["rows"]
    totals["impact_ratio"] = impact_ratios(totals["favourable_share"])
    totals["flagged"] = below_threshold(totals["impact_ratio"], threshold)
    return totals.reset_index().reindex(columns=list(GROUP_COLUMNS))
