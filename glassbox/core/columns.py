"""Columns that are not features, found by content as well as by name: row numbers,
identifiers unique on every row, dates; and categories with too many levels to fit as
they stand. Schema inference asks `set_aside` what to do with each column and writes
the reason beside it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import DataError, value_text

# A category with more levels than this is refused when fitting unless the schema pools
# its rare levels (or keeps them all with pool_below = 0): common practice, no source.
MANY_LEVELS = 50
OTHER_LEVEL = "(other)"  # the level a category's pooled rare levels are fitted and scored as
# Content alone (unique on every row, a running count) is taken as a sign of an id only
# from this many rows on: in a handful of rows any column may be unique (no source).
ID_MIN_ROWS = 20
# Names that row numbers go by when a frame's index was written out as a column.
ROW_NUMBER_NAMES = frozenset({"rownames", "row_names", "rowname", "row", "rownum",
                              "row_number", "index", "unnamed: 0", ""})
# Date layouts tried in turn; a text column is a date when one layout reads every value.
DATE_FORMATS = (
    "%Y-%m-%d", "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M:%S", "%Y-%m-%dT%H:%M:%SZ", "%Y/%m/%d",
    "%d/%m/%Y", "%m/%d/%Y", "%d.%m.%Y", "%d-%m-%Y", "%d %b %Y", "%d %B %Y", "%b %d, %Y",
    "%B %d, %Y", "%b %Y", "%B %Y", "%Y-%m",
)
DATETIME_LAYOUT = "%Y-%m-%d %H:%M:%S"  # how a datetime column is written to CSV
SUGGESTED_SHARE = 0.01  # the pool_below line proposed for a many-level category


@dataclass(frozen=True)
class ColumnRole:
    """What content says a column is: "row number", "id" or "date" (not features), or
    "many levels" and "unique number" (features, with a note)."""

    role: str
    note: str

    @property
    def id_like(self) -> bool:
        return self.role in ("row number", "id")


def _present(column: pd.Series) -> pd.Series:
    present = column[column.notna()]
    if present.dtype == object or pd.api.types.is_string_dtype(present.dtype):
        present = present[present.astype(str).str.strip() != ""]
    return present


def _text(present: pd.Series) -> bool:
    return present.dtype == object or pd.api.types.is_string_dtype(present.dtype)


def _distinct_numbers(present: pd.Series) -> pd.Series:
    """Each distinct present value as a number, NaN where it is not one (worked out once
    per distinct value: text columns of real files repeat their values many times)."""
    if pd.api.types.is_bool_dtype(present.dtype):
        return pd.Series([np.nan])
    if not _text(present):
        return pd.Series(pd.unique(present.to_numpy()), dtype=float)
    distinct = pd.Series(pd.unique(present.to_numpy(dtype=object)), dtype=object)
    return pd.to_numeric(distinct, errors="coerce")


def _whole_numbers(present: pd.Series, distinct: pd.Series) -> np.ndarray | None:
    """The values as whole numbers, or None when any is not one."""
    values = distinct.to_numpy(dtype=float)
    if (len(values) == 0 or not np.isfinite(values).all() or
            (values != np.round(values)).any()):
        return None
    return pd.to_numeric(present).to_numpy(dtype=float)


def date_format(column: pd.Series) -> str | None:
    """The layout every present value of a text column is a date in (or "datetime" for a
    datetime column); None when it is not a column of dates."""
    if pd.api.types.is_datetime64_any_dtype(column.dtype):
        return "datetime"
    present = _present(column)
    if present.empty or not _text(present):
        return None
    if _distinct_numbers(present).notna().all():
        return None  # numbers (a year, 20240131) stay numbers
    distinct = pd.Series(pd.unique(present.astype(str).str.strip()))
    if not distinct.str.contains(r"\d").all():
        return None
    head = distinct[:100]  # a layout that fails on the first values is not tried on all
    for layout in DATE_FORMATS:
        if (pd.to_datetime(head, format=layout, errors="coerce").notna().all() and
                pd.to_datetime(distinct, format=layout, errors="coerce").notna().all()):
            return layout
    return None


def column_role(name: str, column: pd.Series) -> ColumnRole | None:
    """What a column's content says it is, or None for an ordinary feature."""
    layout = date_format(column)
    present = _present(column)
    if layout is not None:
        first = str(present.iloc[0]) if len(present) else ""
        return ColumnRole("date", f"ignored: dates (first {value_text(first)}); a date as "
                                  "such is no feature (derive an age or a month if you need one)")
    rows = len(column)
    unique = len(present) == rows and present.is_unique
    distinct = _distinct_numbers(present)
    numbers = _whole_numbers(present, distinct)
    lowered = str(name).strip().lower()
    text = bool(distinct.isna().all())
    if unique and lowered in ROW_NUMBER_NAMES and (numbers is not None or text):
        what = "row numbers" if numbers is not None else "row names"
        return ColumnRole("row number", f"{what} (the column '{name}', unique on every row)")
    if unique and rows >= ID_MIN_ROWS:
        if numbers is not None:
            low, high = int(numbers.min()), int(numbers.max())
            if high - low == rows - 1:
                return ColumnRole("row number", f"a running count from {low} to {high}, one "
                                                "per row (row numbers?)")
            if _named_id(lowered) or bool(np.all(np.diff(numbers) > 0)):
                return ColumnRole("id", "whole numbers unique on every row and rising down "
                                        "the file (an id?)")
            return ColumnRole("unique number", "unique on every row: if this is an id, set "
                                               "ignore = true")
        if text:
            return ColumnRole("id", "text unique on every row (an id?)")
    if numbers is None and distinct.isna().any():
        levels = present.astype(str).str.strip().nunique()
        if levels > MANY_LEVELS:
            return ColumnRole("many levels", many_levels_note(levels))
    return None


def many_levels_note(levels: int) -> str:
    return (f"{levels:,} levels, more than {MANY_LEVELS}: fitting refuses it as it stands.\n"
            f"To pool levels under {SUGGESTED_SHARE:.0%} of the rows into \"{OTHER_LEVEL}\", "
            "uncomment:\n"
            f"pool_below = {SUGGESTED_SHARE}\n"
            "(or pool_below = 0 to keep every level, or ignore = true)")


def _named_id(lowered: str) -> bool:
    parts = [p for p in lowered.replace("-", "_").replace(" ", "_").split("_") if p]
    return lowered in ("id", "key", "code") or (bool(parts) and parts[-1] in (
        "id", "key", "number", "no", "ref", "reference"))


def set_aside(frame: pd.DataFrame, features: Sequence[Any], id_column: str | None,
              dates_as_age: str | None = None,
              ) -> tuple[tuple[Any, ...], str | None, tuple[tuple[str, str], ...]]:
    """Inferred features (FeatureSpecs) with row numbers, ids and dates taken out: the
    first id-like column becomes the schema's id when it has none (a real id before row
    numbers), every other one and every date is kept with ignore = true (or, with
    `dates_as_age`, a date becomes its age in days on that date). Returns the features,
    the id column and a note per column saying why."""
    roles = {spec.name: column_role(spec.name, frame[spec.name]) for spec in features}
    notes: list[tuple[str, str]] = []
    if id_column is None:
        candidates = [name for name, role in roles.items() if role is not None and role.id_like]
        candidates.sort(key=lambda name: roles[name].role == "row number")
        if candidates:
            id_column = candidates[0]
            notes.append((id_column, f"id: {roles[id_column].note}"))
    kept = []
    for spec in features:
        role = roles[spec.name]
        if spec.name == id_column:
            continue
        if role is not None and role.role == "date" and dates_as_age is not None:
            layout = date_format(frame[spec.name])
            spec = replace(spec, kind="integer", days_before=dates_as_age,
                           date_layout=DATETIME_LAYOUT if layout == "datetime" else layout)
            notes.append((spec.name, f"days from each date to {dates_as_age} (an age in days)"))
            kept.append(spec)
            continue
        if role is not None and (role.id_like or role.role == "date"):
            spec = replace(spec, ignore=True)
            notes.append((spec.name, role.note if role.role == "date" else
                          f"ignored: {role.note}"))
        elif role is not None:
            notes.append((spec.name, role.note))
        kept.append(spec)
    return tuple(kept), id_column, tuple(notes)


def ages_in_days(column: pd.Series, reference: str, layout: str | None, name: str,
                 where: str) -> pd.Series:
    """Each date's age in whole days on the reference date (negative after it), NaN where
    the column is blank; text not in the layout (ISO by default) is an error naming rows.
    A datetime column is read as it is."""
    from glassbox.core.schema import rows_text  # the schema module imports this one

    layout = layout or "%Y-%m-%d"
    if pd.api.types.is_datetime64_any_dtype(column.dtype):
        dates = column.dt.tz_convert(None) if column.dt.tz is not None else column
        bad = np.zeros(len(column), dtype=bool)
    else:
        text = column.astype(object).where(column.notna(), "").astype(str).str.strip()
        absent = (text == "").to_numpy()
        dates = pd.to_datetime(text.where(~absent), format=layout, errors="coerce")
        bad = dates.isna().to_numpy() & ~absent
    if bad.any():
        first = column[bad].iloc[0]
        raise DataError(f"{where}: column '{name}' should hold dates in the layout {layout} "
                        f"but has other text in {rows_text(bad)} (first: {value_text(first)})")
    days = (pd.Timestamp(reference) - dates).dt.days
    return pd.Series(days.to_numpy(dtype=float), index=column.index)
