"""Reading data files and turning raw frames into typed, validated ones.

Every problem with the data is reported naming the file, the column and the first rows.
Missing values follow each feature's rule (see `glassbox.schema`). The schema module
re-exports these names; import them from there.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from glassbox.columns import OTHER_LEVEL, ages_in_days
from glassbox.errors import DataError
from glassbox.guesses import FALSE_WORDS, TRUE_WORDS

if TYPE_CHECKING:
    from glassbox.schema import FeatureSpec, Schema

SHOWN_ROWS = 5
# The only text a CSV file may use for a missing value; anything else is data (a sentinel
# such as -1 or 999 is declared per feature with `missing_codes`).
BLANKS = ("", "NA", "NaN", "nan", "null", "NULL")
MISSING_LEVEL = "(missing)"  # how a missing category is shown; never a level of its own


# ---------------------------------------------------------------- reading data


def read_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV or Parquet file, with one clear error for anything unreadable."""
    path = Path(path)
    if not path.is_file():
        raise DataError(f"data file {path} does not exist")
    suffix = path.suffix.lower()
    try:
        if suffix in (".parquet", ".pq"):
            frame = pd.read_parquet(path)
        else:
            frame = pd.read_csv(path, skipinitialspace=True, keep_default_na=False,
                                na_values=list(BLANKS))
    except pd.errors.EmptyDataError:
        raise DataError(f"data file {path} is empty") from None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError, OSError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise DataError(f"data file {path} could not be read: {first}") from None
    except ImportError:
        raise DataError(f"reading Parquet file {path} needs pyarrow "
                        "(pip install pyarrow)") from None
    if frame.shape[0] == 0:
        raise DataError(f"data file {path} has a header but no data rows")
    frame.attrs["source"] = str(path)
    return frame


def _source(frame: pd.DataFrame, source: str | None) -> str:
    return source or frame.attrs.get("source") or "the data"


def rows_text(mask: np.ndarray) -> str:
    """'data rows 3, 8, 12 (and 40 more)', numbering data rows from 1."""
    rows = np.flatnonzero(mask) + 1
    shown = ", ".join(str(r) for r in rows[:SHOWN_ROWS])
    more = f" (and {len(rows) - SHOWN_ROWS} more)" if len(rows) > SHOWN_ROWS else ""
    word = "data row" if len(rows) == 1 else "data rows"
    return f"{word} {shown}{more}"


def label_text(value: Any) -> str:
    """A label as text, so 1, 1.0 and '1' compare equal."""
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if isinstance(value, int | float | np.integer | np.floating):
        number = float(value)
        if math.isfinite(number) and number == int(number):
            return str(int(number))
        return repr(number)
    return str(value).strip()


# ---------------------------------------------------------------- encoding


@dataclass(frozen=True)
class Prepared:
    """A frame after validation: typed feature columns, the target, the ids."""

    features: pd.DataFrame
    target: np.ndarray | None
    ids: pd.Series | None
    protected: pd.DataFrame


def prepare(
    frame: pd.DataFrame,
    schema: Schema,
    *,
    require_target: bool = True,
    source: str | None = None,
    features: Iterable[str] | None = None,
) -> Prepared:
    """Validate a raw frame against the schema and encode it.

    Numbers, integers and flags become float columns (flags 0/1), categories
    become text. `features` limits which feature columns are needed (a model
    needs only its own); protected columns are kept aside when present.
    """
    where = _source(frame, source)
    wanted = [f for f in schema.used_features if features is None or f.name in set(features)]
    needed = [f.name for f in wanted]
    if require_target:
        needed.append(schema.target.column)
    missing = [name for name in needed if name not in frame.columns]
    if missing:
        raise DataError(f"{where}: missing column(s) {', '.join(repr(m) for m in missing)} "
                        f"(it has: {', '.join(map(str, frame.columns[:12]))}"
                        f"{', ...' if len(frame.columns) > 12 else ''})")
    if frame.shape[0] == 0:
        raise DataError(f"{where}: no rows")
    encoded = {spec.name: encode_column(frame[spec.name], spec, where) for spec in wanted}
    feature_frame = pd.DataFrame(encoded, index=frame.index)
    target = encode_target(frame[schema.target.column], schema, where) if require_target else None
    ids = frame[schema.id_column] if schema.id_column and schema.id_column in frame else None
    protected_names = [f.name for f in schema.protected_features if f.name in frame.columns]
    protected = frame[protected_names].copy()
    return Prepared(feature_frame, target, ids, protected)


def encode_column(column: pd.Series, spec: FeatureSpec, where: str) -> pd.Series:
    """One raw column to its typed form, or a DataError naming the rows at fault.

    Missing values (blanks and the feature's `missing_codes`) follow the feature's rule:
    "fill" puts the fill value in, "refuse" is an error, "learn" keeps them missing (NaN
    in a numeric column, None in a category) for the model's own missing-value entry.
    """
    if spec.days_before is not None:  # dates, read as their age in days
        column = ages_in_days(column, spec.days_before, spec.date_layout, spec.name, where)
        spec = replace(spec, days_before=None, date_layout=None)
    values = column
    missing = missing_mask(values, spec)
    if missing.any():
        if spec.missing == "refuse":
            raise DataError(f"{where}: column '{spec.name}' has {int(missing.sum())} missing "
                            f"value(s) in {rows_text(missing)} and the schema refuses them "
                            f"(missing = \"refuse\"); set missing = \"learn\" or a fill "
                            "value, or clean the data")
        if spec.missing == "fill":
            values = values.astype(object).where(~missing, spec.fill)
            missing = np.zeros(len(values), dtype=bool)
        else:  # typed with a harmless stand-in, then marked missing (row numbers stay true)
            stand_in = "0" if spec.numeric else MISSING_LEVEL
            plain = replace(spec, missing="fill", fill=stand_in, missing_codes=())
            typed = encode_column(values.astype(object).where(~missing, stand_in), plain,
                                  where)
            return typed.where(~missing, np.nan if spec.numeric else None)
    if spec.kind == "category":
        labels = pool_levels(_labels(values), spec.pooled)
        return pd.Series(labels.to_numpy(dtype=object), index=column.index, dtype=object)
    if spec.kind == "flag":
        return _encode_flag(values, spec, where)
    numbers = pd.to_numeric(values, errors="coerce")
    bad = numbers.isna().to_numpy()
    if bad.any():
        first = values[bad].iloc[0]
        raise DataError(f"{where}: column '{spec.name}' should hold numbers but has text in "
                        f"{rows_text(bad)} (first: {str(first)!r})")
    numbers = numbers.astype(float)
    if not np.isfinite(numbers.to_numpy()).all():
        infinite = ~np.isfinite(numbers.to_numpy())
        raise DataError(f"{where}: column '{spec.name}' has infinite values in "
                        f"{rows_text(infinite)}")
    if spec.kind == "integer":
        fractional = (numbers != np.round(numbers)).to_numpy()
        if fractional.any():
            raise DataError(f"{where}: column '{spec.name}' is declared integer but has "
                            f"fractions in {rows_text(fractional)} "
                            f"(first: {numbers[fractional].iloc[0]!r})")
    return numbers


def pool_levels(labels: pd.Series, pooled: Iterable[str]) -> pd.Series:
    """Category labels with the pooled levels replaced by OTHER_LEVEL (fitting and scoring
    alike)."""
    pooled = list(pooled)
    return labels.where(~labels.isin(pooled), OTHER_LEVEL) if pooled else labels


def _missing_mask(values: pd.Series) -> np.ndarray:
    mask = values.isna().to_numpy()
    if values.dtype == object or pd.api.types.is_string_dtype(values.dtype):
        text = values.astype(str).str.strip()
        mask = mask | (text == "").to_numpy()
    return mask


def missing_mask(values: pd.Series, spec: FeatureSpec) -> np.ndarray:
    """Where a raw column is missing: blank, NaN or None, or one of the feature's codes."""
    mask = _missing_mask(values)
    if spec.missing_codes:
        if spec.kind in ("number", "integer"):
            numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
            mask = mask | np.isin(numbers, np.asarray(spec.missing_codes, dtype=float))
        else:
            codes = {label_text(code) for code in spec.missing_codes}
            mask = mask | _labels(values).isin(codes).to_numpy()
    return mask


def _labels(values: pd.Series) -> pd.Series:
    """`label_text` of every value, computed once per distinct value."""
    distinct = pd.unique(values.to_numpy(dtype=object))
    lookup = {value: label_text(value) for value in distinct}
    return pd.Series(values.to_numpy(dtype=object), index=values.index).map(lookup)


def _encode_flag(values: pd.Series, spec: FeatureSpec, where: str) -> pd.Series:
    words = _labels(values).str.lower()
    truthy = words.isin(TRUE_WORDS).to_numpy()
    falsy = words.isin(FALSE_WORDS).to_numpy()
    bad = ~(truthy | falsy)
    if bad.any():
        first = values[bad].iloc[0]
        raise DataError(f"{where}: column '{spec.name}' is a flag (yes/no, true/false, 1/0) "
                        f"but has other values in {rows_text(bad)} (first: {str(first)!r})")
    return pd.Series(truthy.astype(float), index=values.index)


def encode_target(column: pd.Series, schema: Schema, where: str) -> np.ndarray:
    """The target as floats: 0/1 for classification, the values for regression."""
    name = schema.target.column
    missing = _missing_mask(column)
    if missing.any():
        raise DataError(f"{where}: target column '{name}' has {int(missing.sum())} missing "
                        f"value(s) in {rows_text(missing)}; fill them, or drop those rows "
                        "(--drop-missing-target on fit and compare)")
    if schema.target.task == "regression":
        from glassbox.schema import FeatureSpec  # that module imports this one

        spec = FeatureSpec(name, "number")
        return encode_column(column, spec, where).to_numpy(dtype=float)
    labels = _labels(column)
    distinct = sorted(set(labels))
    if len(distinct) > 2:
        shown = ", ".join(repr(v) for v in distinct[:6])
        raise DataError(f"{where}: target column '{name}' has {len(distinct)} labels ({shown}"
                        f"{', ...' if len(distinct) > 6 else ''}); a classification target "
                        "needs exactly two")
    positive = schema.target.positive
    if positive is None:
        positive = choose_positive(distinct, labels)
    positive_text = label_text(positive)
    if positive_text not in distinct:
        raise DataError(f"{where}: the positive label {positive!r} of target '{name}' never "
                        f"occurs (labels found: {', '.join(repr(v) for v in distinct)})")
    return (labels == positive_text).to_numpy(dtype=float)


def choose_positive(distinct: list[str], labels: pd.Series) -> str:
    """The positive label when none is declared: 1, yes or true, else the rarer label."""
    for word in ("1", "yes", "true", "y", "t"):
        for label in distinct:
            if label.lower() == word:
                return label
    counts = labels.value_counts()
    return str(sorted(distinct, key=lambda v: (counts.get(v, 0), v))[0])
