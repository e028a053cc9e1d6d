"""Outcomes by group: shares with a favourable outcome and adverse-impact ratios.

The adverse-impact ratio of a group is its favourable share divided by the share of
the most favoured group. A ratio below four fifths (0.8) is the customary flag of the
four-fifths rule in the US Uniform Guidelines on Employee Selection Procedures (1978),
29 CFR 1607.4(D). It is a screen, not a legal finding: local law decides what an
outcome gap means. Groups come from protected columns, which are never model inputs.

The same paragraph warns that differences based on small numbers may mean nothing, so a
group with fewer rows than a minimum (`MIN_GROUP`, 30 unless the user sets another) is
shown but never flagged, and never serves as the most favoured group that the others
are measured against.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from glassbox.errors import DataError, OptionError
from glassbox.schema import label_text

FOUR_FIFTHS = 0.8
MIN_GROUP = 30  # rows; below it a group is shown, not flagged (common practice, no source)
MISSING_GROUP = "(missing)"
GROUP_COLUMNS = ("group", "rows", "favourable_rows", "favourable_share", "mean_prediction",
                 "impact_ratio", "small", "flagged")
TOLERANCE = 1e-12  # a ratio of exactly 4/5 is not below it, whatever the rounding


def impact_ratios(shares: pd.Series, eligible: pd.Series | None = None) -> pd.Series:
    """Each group's share divided by the largest share among the `eligible` groups (all
    by default); NaN when no group is eligible or every eligible share is zero."""
    shares = pd.Series(shares, dtype=float)
    if shares.isna().any():
        raise DataError("a group's favourable share is missing")
    pool = shares if eligible is None else shares[np.asarray(eligible, dtype=bool)]
    top = float(pool.max()) if len(pool) else 0.0
    if top <= 0.0:
        return pd.Series(np.nan, index=shares.index, name="impact_ratio")
    return (shares / top).rename("impact_ratio")


def size_note(min_rows: int) -> str:
    """The sentence every group table carries about its minimum group size."""
    return (f"A group of fewer than {min_rows} rows is shown but not flagged, nor taken as the "
            "most favoured group: the same paragraph of the Guidelines warns that differences "
            "based on small numbers may mean nothing.")


def flag_words(flagged: pd.Series, small: pd.Series) -> list[str]:
    """A group table's flag column as words: yes, no, or "too few" (rows) for a small group
    (its caption and note say how few)."""
    return ["too few" if tiny else ("yes" if flag else "no")
            for flag, tiny in zip(flagged, small, strict=True)]


def flag_caption(names: pd.Series, flagged: pd.Series, small: pd.Series,
                 min_rows: int) -> str:
    """A group table's caption: the flagged groups, then the small ones left unjudged."""
    names = [str(name) for name in names]
    below = [n for n, flag in zip(names, flagged, strict=True) if flag]
    tiny = [n for n, flag in zip(names, small, strict=True) if flag]
    text = (f"flagged below {FOUR_FIFTHS:g}: {', '.join(below)}" if below
            else f"no group below {FOUR_FIFTHS:g}")
    if tiny:
        text += f"; not judged, under {min_rows} rows: {', '.join(tiny)}"
    return text


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


def compare_groups(counts: pd.DataFrame, threshold: float = FOUR_FIFTHS,
                   min_rows: int = MIN_GROUP) -> pd.DataFrame:
    """From per-group `rows` and `favourable_rows`: the favourable share, the impact ratio
    against the best share among groups of at least `min_rows` rows, whether the group is
    `small` (fewer rows), and whether it is `flagged` (not small, ratio below `threshold`)."""
    if isinstance(min_rows, bool) or not isinstance(min_rows, int | np.integer) or min_rows < 1:
        raise OptionError(f"the minimum group size must be a whole number of at least 1, "
                          f"not {min_rows!r}")
    table = counts.copy()
    rows = table["rows"].to_numpy(dtype=float)
    table["favourable_share"] = table["favourable_rows"].to_numpy(dtype=float) / rows
    table["small"] = rows < min_rows
    table["impact_ratio"] = impact_ratios(table["favourable_share"], ~table["small"])
    table["flagged"] = below_threshold(table["impact_ratio"], threshold) & ~table["small"]
    return table


def outcomes_by_group(
    groups: pd.Series,
    favourable: np.ndarray | pd.Series,
    predictions: np.ndarray | pd.Series | None = None,
    threshold: float = FOUR_FIFTHS,
    min_rows: int = MIN_GROUP,
) -> pd.DataFrame:
    """Per group: rows, favourable rows and share, mean prediction, impact ratio, whether
    the group is small (under `min_rows` rows) and whether its ratio is flagged (below
    `threshold`; small groups never are), as `compare_groups` says.

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
    return compare_groups(totals.reset_index(), threshold, min_rows).reindex(
        columns=list(GROUP_COLUMNS))
