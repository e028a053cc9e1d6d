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

A numeric protected column (an age) is compared in bands, never value by value: bands
the user gives, or for a column named as an age the customary bands `AGE_BANDS`. A
numeric column with more than `MAX_VALUE_GROUPS` values and no bands is refused.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
import pandas as pd

from glassbox.core.errors import DataError, OptionError
from glassbox.core.guesses import words
from glassbox.core.schema import is_number, label_text, rows_text

FOUR_FIFTHS = 0.8
MIN_GROUP = 30  # rows; below it a group is shown, not flagged (common practice, no source)
MISSING_GROUP = "(missing)"
GROUP_COLUMNS = ("group", "rows", "favourable_rows", "favourable_share", "mean_prediction",
                 "impact_ratio", "small", "flagged")
TOLERANCE = 1e-12  # a ratio of exactly 4/5 is not below it, whatever the rounding
# Age bands: under 25, 25-34, 35-44, 45-54, 55-64, 65 and over; ten-year bands as age
# tables in official statistics usually have them (common practice, no source).
AGE_BANDS = (25.0, 35.0, 45.0, 55.0, 65.0)
OLDEST = 130.0  # an "age" beyond it (a year of birth, say) needs bands of its own
MAX_VALUE_GROUPS = 10  # distinct numbers a protected column may have without bands


def looks_like_age(name: str) -> bool:
    """Whether a column's name says it is an age ("Age", "owner_age", "AgeYears")."""
    return "age" in words(name)


def band_edges(column: pd.Series, edges: Sequence[float] | None = None,
               levels: bool = False) -> tuple[float, ...] | None:
    """The edges a protected column is banded by (None: it is compared value by value).

    Given `edges` are checked and used; a column declared a category or flag (`levels`)
    is compared level by level; else a numeric column named as an age gets `AGE_BANDS`,
    and another numeric column with more than `MAX_VALUE_GROUPS` distinct values is
    refused, so no group comparison is ever made value by value over many numbers."""
    name = str(column.name)
    if edges is not None:
        edges = tuple(edges)
        if not edges or not all(is_number(e) for e in edges) or any(
                b <= a for a, b in zip(edges, edges[1:], strict=False)):
            raise OptionError(f"bands for '{name}' must be increasing numbers, not {edges!r}")
        _numbers(column)
        return tuple(float(e) for e in edges)
    numbers = None if levels else _numbers(column, required=False)
    if numbers is None:
        return None
    present = numbers[~np.isnan(numbers)]
    if looks_like_age(name):
        outside = (numbers < 0) | (numbers > OLDEST)
        if outside.any():
            raise DataError(f"protected column '{name}' looks like an age but has values "
                            f"outside 0-{OLDEST:g} in {rows_text(outside)}; give its band "
                            f"edges ({_how_to_band(name)})")
        return AGE_BANDS
    distinct = len(np.unique(present))
    if distinct > MAX_VALUE_GROUPS:
        raise DataError(f"protected column '{name}' holds {distinct} different numbers; "
                        "groups are compared in bands, not value by value: give its band "
                        f"edges ({_how_to_band(name)})")
    return None


def _how_to_band(name: str) -> str:
    return (f"glassbox report --band {name}=X, once per edge, e.g. --band {name}=30 "
            f"--band {name}=50; or band the column in the data")


def _numbers(column: pd.Series, required: bool = True) -> np.ndarray | None:
    """A column's values as floats (NaN where blank), or None (or an error when
    `required`) if any present value is not a number."""
    blank = _blank(column)
    numbers = pd.to_numeric(column.where(~blank), errors="coerce").to_numpy(dtype=float)
    text = np.isnan(numbers) & ~blank
    if pd.api.types.is_bool_dtype(column.dtype) or text.any():
        if required:
            raise DataError(f"column '{column.name}' is banded but holds values that are not "
                            f"numbers in {rows_text(text)}")
        return None
    return numbers


def band_names(edges: Sequence[float], whole: bool) -> list[str]:
    """Names of the bands cut at `edges`, lowest first: "under 25", "25-34", ...,
    "65 and over" for whole numbers; "25 to under 35" where values may fall between."""
    def shown(edge: float) -> str:
        return f"{edge:g}"
    middle = [f"{shown(a)}-{shown(b - 1)}" if whole else f"{shown(a)} to under {shown(b)}"
              for a, b in zip(edges, edges[1:], strict=False)]
    return [f"under {shown(edges[0])}", *middle, f"{shown(edges[-1])} and over"]


def parse_bands(texts: Iterable[str]) -> dict[str, tuple[float, ...]]:
    """`--band COLUMN=X` options, one edge each (e.g. `Age=30`, `Age=50`), as a mapping of
    each column to its edges in the order given."""
    found: dict[str, tuple[float, ...]] = {}
    for text in texts:
        name, sep, rest = str(text).partition("=")
        try:
            edge = float(rest)
        except ValueError:
            edge = None
        if not sep or not name.strip() or edge is None:
            raise OptionError(f"--band {text!r}: write COLUMN=X, once per edge, e.g. "
                              "--band Age=25 --band Age=35")
        found[name.strip()] = (*found.get(name.strip(), ()), edge)
    return found


def band_note(name: str, edges: Sequence[float], given: bool) -> str:
    """The sentence that says how a numeric protected column was grouped."""
    source = ("the bands given" if given else
              "customary age bands (common practice, no source; set others with --band)")
    return (f"{name} is a number, so it is compared in bands, never value by value: "
            f"{source}, cut at {', '.join(f'{e:g}' for e in edges)}.")


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


def _blank(column: pd.Series) -> np.ndarray:
    blank = column.isna().to_numpy()
    if column.dtype == object or pd.api.types.is_string_dtype(column.dtype):
        blank = blank | (column.astype(str).str.strip() == "").to_numpy()
    return blank


def group_labels(column: pd.Series, edges: Sequence[float] | None = None,
                 levels: bool = False) -> pd.Series:
    """A protected column's values as group names: text, with blanks as '(missing)'; a
    numeric column banded as `band_edges` decides (an ordered category, lowest band
    first and '(missing)' last)."""
    blank = _blank(column)
    edges = band_edges(column, edges, levels)
    if edges is None:
        names = [MISSING_GROUP if empty else label_text(value)
                 for value, empty in zip(column.to_numpy(dtype=object), blank, strict=True)]
        return pd.Series(names, index=column.index, name=column.name, dtype=object)
    numbers = _numbers(column)
    present = numbers[~np.isnan(numbers)]
    whole = bool(np.all(present == np.round(present))) and all(e == round(e) for e in edges)
    order = [*band_names(edges, whole), MISSING_GROUP]
    at = np.searchsorted(np.asarray(edges), numbers, side="right")  # band index; NaN: last
    names = np.where(np.isnan(numbers), MISSING_GROUP, np.asarray(order, dtype=object)[
        np.minimum(at, len(edges))])
    return pd.Series(pd.Categorical(names, categories=order, ordered=True),
                     index=column.index, name=column.name)


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
    labels = pd.Series(groups).reset_index(drop=True)
    order = (list(labels.cat.categories) if isinstance(labels.dtype, pd.CategoricalDtype)
             else None)  # bands keep their order; other groups are listed by name
    labels = labels.astype(object)
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
    if order is not None:
        totals = totals.reindex([str(name) for name in order if str(name) in totals.index])
    totals["rows"] = totals["rows"].astype(int)
    totals["favourable_rows"] = totals["favourable_rows"].astype(int)
    return compare_groups(totals.reset_index(), threshold, min_rows).reindex(
        columns=list(GROUP_COLUMNS))
