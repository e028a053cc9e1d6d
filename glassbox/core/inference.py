"""Schema inference: a starter schema from a data frame, to check and edit by hand."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.columns import set_aside
from glassbox.core.encoding import (
    _labels,
    _missing_mask,
    _source,
    choose_positive,
    columns_text,
    label_text,
    missing_mask,
)
from glassbox.core.errors import DataError, value_text
from glassbox.core.guesses import (
    FALSE_WORDS,
    TRUE_WORDS,
    Note,
    column_notes,
    guess_better,
    protected_hint,
)
from glassbox.core.schema import FeatureSpec, Schema, TargetSpec, check_reference_date

# ---------------------------------------------------------------- inference

FLAG_WORDS = TRUE_WORDS | FALSE_WORDS


def _looks_protected(name: str) -> bool:
    return protected_hint(name) is not None


def infer_kind(column: pd.Series) -> str:
    """The most likely kind of a raw column. Each distinct value is looked at once, and a
    column of numbers is read with array operations: the same answer as reading every
    value's text."""
    present = column[~_missing_mask(column)]
    if present.empty:
        return "number"
    if pd.api.types.is_bool_dtype(present.dtype):
        return "flag"
    if _real_numbers(present):
        distinct = pd.unique(present.to_numpy())
        # distinct numbers have distinct label texts (0.0 and -0.0 are one value here), so
        # only a column of two numbers can read as two flag words
        if len(distinct) == 2 and _flag_words(distinct):
            return "flag"
        numbers = distinct.astype(float)
        return "integer" if (numbers == np.round(numbers)).all() else "number"
    distinct = pd.unique(present.to_numpy(dtype=object))
    if _flag_words(distinct):
        return "flag"
    numbers = pd.to_numeric(pd.Series(distinct, dtype=object), errors="coerce")
    if numbers.notna().all():
        if (numbers == np.round(numbers)).all():
            return "integer"
        return "number"
    return "category"


def _real_numbers(present: pd.Series) -> bool:
    """A column of plain integers or floats (no text, no booleans)."""
    return isinstance(present.dtype, np.dtype) and present.dtype.kind in "iuf"


def _flag_words(distinct: Any) -> bool:
    """Whether the distinct values read as exactly two yes/no words, one of them true;
    stops at the first value that is no such word (an id column stops at once)."""
    words: set[str] = set()
    for value in distinct:
        word = label_text(value).lower()
        if word not in FLAG_WORDS:
            return False
        words.add(word)
    return len(words) == 2 and bool(words & TRUE_WORDS)


def infer_schema(
    frame: pd.DataFrame,
    target: str,
    *,
    positive: Any = None,
    id_column: str | None = None,
    task: str | None = None,
    source: str | None = None,
    dates_as_age: str | None = None,
) -> Schema:
    """A starter schema for a frame: kinds guessed, protected columns guessed by name,
    `better` from the words of the target and its positive label (None, written "?",
    when they do not say), and notes on missing counts and columns to check. Row numbers
    and ids are set aside; date columns are ignored, or with `dates_as_age` (YYYY-MM-DD)
    read as their age in days on that date."""
    where = _source(frame, source)
    if dates_as_age is not None:
        check_reference_date(dates_as_age, "the reference date for ages in days")
    if target not in frame.columns:
        raise DataError(f"{where}: no target column {value_text(target)} (it has: "
                        f"{columns_text(frame.columns)})")
    column = frame[target]
    present = column[~_missing_mask(column)]
    labels = _label_texts(present)
    distinct = sorted(set(labels))
    if task is None:
        values = pd.Series(pd.unique(present.to_numpy(dtype=object)), dtype=object)
        numeric = pd.to_numeric(values, errors="coerce").notna().all()
        task = "regression" if (numeric and len(distinct) > 2) else "classification"
    if task == "classification":
        if len(distinct) != 2:
            shown = ", ".join(map(value_text, distinct[:6]))
            raise DataError(f"{where}: target column '{target}' has {len(distinct)} labels "
                            f"({shown}{', ...' if len(distinct) > 6 else ''}); a classification "
                            "target needs exactly two")
        positive = label_text(positive) if positive is not None else choose_positive(
            distinct, labels)
        if positive not in distinct:
            raise DataError(f"{where}: positive label {value_text(positive)} not found in target "
                            f"'{target}' (labels: {', '.join(map(value_text, distinct))})")
        positive = _natural(positive, column)
    else:
        positive = None
    if id_column is None:
        id_column = _guess_id(frame, exclude=target)
    elif id_column not in frame.columns:
        raise DataError(f"{where}: no id column '{id_column}'")
    features = []
    for name in frame.columns:
        if name in (target, id_column):
            continue
        kind = infer_kind(frame[name])
        features.append(FeatureSpec(str(name), kind, protected=_looks_protected(str(name))))
    features, id_column, set_aside_notes = set_aside(frame, features, id_column, dates_as_age)
    if not features:
        raise DataError(f"{where}: no columns besides the target and id")
    better = guess_better(target, None if positive is None else label_text(positive), task)
    gaps = {spec.name: int(missing_mask(frame[spec.name], spec).sum()) for spec in features}
    notes = (Note(target, "better", better.why), *(Note(column, "column", text)
                                                   for column, text in set_aside_notes),
             *column_notes(features, gaps, len(frame)))
    return Schema(TargetSpec(target, task, positive, better.better), tuple(features), id_column,
                  source=str(where), notes=notes)


def _label_texts(present: pd.Series) -> pd.Series:
    """`label_text` of every value, once per distinct value; value by value where a column
    of Python objects holds booleans beside numbers (True and 1 count as one distinct
    value but read as "true" and "1")."""
    if present.dtype == object and any(
            isinstance(value, bool | np.bool_) or (isinstance(value, int | float | np.number)
                                                    and value in (0, 1))
            for value in pd.unique(present.to_numpy())):
        return present.map(label_text)
    return _labels(present)


def _natural(label: str, column: pd.Series) -> Any:
    """Write a numeric positive label as a number in TOML."""
    if pd.api.types.is_numeric_dtype(column.dtype):
        number = float(label)
        return int(number) if number == int(number) else number
    return label


def _guess_id(frame: pd.DataFrame, exclude: str) -> str | None:
    """A text column with a distinct value on every row whose name says id."""
    for name in frame.columns:
        if name == exclude:
            continue
        lowered = str(name).lower()
        if lowered == "id" or lowered.endswith("_id") or lowered.endswith("id") and "_" in lowered:
            column = frame[name]
            if column.notna().all() and column.is_unique:
                return str(name)
    return None
