"""Reading data files and turning raw frames into typed, validated ones.

Every problem with the data is reported naming the file, the column and the first rows.
Missing values follow each feature's rule (see `glassbox.core.schema`). The schema module
re-exports these names; import them from there.
"""

from __future__ import annotations

import codecs
import math
import re
import warnings
from collections.abc import Iterable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from glassbox.core.columns import OTHER_LEVEL, ages_in_days
from glassbox.core.errors import DataError, value_text
from glassbox.core.guesses import FALSE_WORDS, TRUE_WORDS
from glassbox.core.wording import noun, plural

if TYPE_CHECKING:
    from glassbox.core.schema import FeatureSpec, Schema

SHOWN_ROWS = 5
# The only text a CSV file may use for a missing value; anything else is data (a sentinel
# such as -1 or 999 is declared per feature with `missing_codes`).
BLANKS = ("", "NA", "NaN", "nan", "null", "NULL")
MISSING_LEVEL = "(missing)"  # how a missing category is shown; never a level of its own


# ---------------------------------------------------------------- reading data


def read_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV (UTF-8) or Parquet file, with one clear error for anything unreadable.

    A column name used twice is refused (which copy holds the data cannot be known), and
    so is a CSV file with NUL bytes, text that is not UTF-8, or rows with more fields
    than the header. A row with fewer fields reads the missing ones as blanks."""
    path = Path(path)
    try:
        names = check_data_file(path)
        if is_parquet(path):
            frame = _read_parquet(path)
        else:
            frame = _read_csv(path, names)
    except OSError as exc:
        raise DataError(f"data file {path} could not be read: "
                        f"{exc.strerror or type(exc).__name__}") from None
    if frame.shape[0] == 0:
        raise DataError(f"data file {path} has a header but no data rows")
    frame.attrs["source"] = str(path)
    return frame


def is_parquet(path: Path) -> bool:
    return path.suffix.lower() in (".parquet", ".pq")


# how every reader of CSV data files reads cells: only BLANKS are missing values
CSV_TEXT: dict[str, Any] = {"skipinitialspace": True, "encoding": "utf-8"}
CSV_CELLS: dict[str, Any] = {**CSV_TEXT,
                             "keep_default_na": False, "na_values": list(BLANKS),
                             "index_col": False}


def check_data_file(path: Path) -> list[str]:
    """The column names of a CSV or Parquet data file, after the checks every reader makes
    (a folder, a missing or special file, text that is not UTF-8 or has NUL bytes, a name
    used twice, a Parquet column of lists), without reading the rows into memory."""
    if path.is_dir():
        raise DataError(f"{path} is a folder, not a data file (name a CSV or Parquet file)")
    if not path.exists():
        raise DataError(f"data file {path} does not exist")
    if not path.is_file():
        raise DataError(f"{path} is not a regular file, so not a CSV or Parquet data file")
    if is_parquet(path):
        return _parquet_names(path)
    _check_text(path)
    header = _parse_csv(path, header=None, nrows=1, dtype=str, na_filter=False)
    names = [str(name) for name in header.iloc[0].tolist()]
    check_names(names, f"data file {path}")
    return names


def longer_rows_error(path: Path, names: list[str]) -> DataError:
    return DataError(f"data file {path}: its data rows have more fields than the header has "
                     f"names ({len(names)}); name every column, or remove the extra commas at "
                     "the ends of the rows")


def _read_csv(path: Path, names: list[str]) -> pd.DataFrame:
    with warnings.catch_warnings():
        warnings.simplefilter("error", pd.errors.ParserWarning)
        try:
            return _parse_csv(path, **CSV_CELLS)
        except pd.errors.ParserWarning:  # rows longer than the header: never an index
            raise longer_rows_error(path, names) from None


def _read_parquet(path: Path) -> pd.DataFrame:
    import pyarrow as pa

    try:
        return pd.read_parquet(path)
    except (pa.ArrowException, ValueError) as exc:
        lines = str(exc).strip().splitlines()
        raise DataError(f"data file {path} could not be read as Parquet: "
                        f"{lines[0] if lines else type(exc).__name__}") from None


def _parse_csv(path: Path, **options: Any) -> pd.DataFrame:
    """pandas' CSV parser, its complaints turned into one-line errors naming the file."""
    try:
        return pd.read_csv(path, **{**CSV_TEXT, **options})
    except pd.errors.EmptyDataError:
        raise DataError(f"data file {path} is empty") from None
    except (pd.errors.ParserError, ValueError) as exc:
        raise DataError(f"data file {path}: {parser_problem(str(exc))}") from None


def parser_problem(message: str) -> str:
    """The CSV parser's complaint in the words of this tool, with the file's line."""
    fields = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if fields:
        expected, line, saw = fields.groups()
        return (f"line {line} has {saw} fields where the header has {expected} (a comma "
                "inside a value that is not in quotes?)")
    quote = re.search(r"EOF inside string starting at row (\d+)", message)
    if quote:
        return (f"a quoted value opened on line {int(quote.group(1)) + 1} is never closed "
                "(an unbalanced \" quote)")
    lines = message.strip().splitlines()
    return "could not be read: " + (lines[0] if lines else "unknown parser error")


TEXT_CHUNK = 1 << 20  # bytes read at a time when checking a CSV file's text
NEWLINE = b"\n"


def _check_text(path: Path) -> None:
    """Refuse a CSV file with NUL bytes or text that is not UTF-8, naming the line."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    line = 1
    with path.open("rb") as handle:
        chunk = handle.read(TEXT_CHUNK)
        if chunk.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
            raise DataError(f"data file {path} is UTF-16 text; save it as UTF-8 (in a "
                            "spreadsheet: CSV UTF-8)")
        while chunk:
            nul = chunk.find(b"\x00")
            if nul >= 0:
                raise DataError(f"data file {path} has a NUL byte on line "
                                f"{line + chunk.count(NEWLINE, 0, nul)} (a binary file, or "
                                "damaged?)")
            pending = len(decoder.getstate()[0])
            try:
                decoder.decode(chunk)
            except UnicodeDecodeError as exc:
                at = max(exc.start - pending, 0)
                raise DataError(f"data file {path} is not UTF-8 text: byte "
                                f"0x{exc.object[exc.start]:02x} on line "
                                f"{line + chunk.count(NEWLINE, 0, at)}; save it as UTF-8 (in a "
                                "spreadsheet: CSV UTF-8)") from None
            line += chunk.count(NEWLINE)
            chunk = handle.read(TEXT_CHUNK)
    try:
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        raise DataError(f"data file {path} is not UTF-8 text: it ends inside a character "
                        "(cut short?)") from None


def _parquet_names(path: Path) -> list[str]:
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise DataError(f"reading Parquet file {path} needs pyarrow "
                        "(pip install pyarrow)") from None
    try:
        schema = pq.read_schema(path)
        check_names(list(schema.names), f"data file {path}")
        for field in schema:
            if pa.types.is_nested(field.type):
                raise DataError(f"data file {path}: column {value_text(field.name)} holds "
                                "lists or records; a data file holds one value per cell")
        return [str(name) for name in schema.names]
    except (pa.ArrowException, ValueError) as exc:
        if isinstance(exc, DataError):
            raise
        lines = str(exc).strip().splitlines()
        raise DataError(f"data file {path} could not be read as Parquet: "
                        f"{lines[0] if lines else type(exc).__name__}") from None


def check_names(names: list[str], where: str) -> None:
    """Refuse a column name used twice (a blank name is read as "Unnamed: N", never
    twice)."""
    seen: dict[str, int] = {}
    for position, name in enumerate(names, start=1):
        if not name.strip():
            continue
        if name in seen:
            raise DataError(f"{where} has the column {value_text(name)} twice (columns "
                            f"{seen[name]} and {position}); rename or remove one: which "
                            "copy holds the data cannot be known")
        seen[name] = position


def columns_text(columns: Iterable[Any], shown: int = 12) -> str:
    """The first `shown` column names of a frame, for a message."""
    names = list(columns)
    return ", ".join(value_text(str(name)) for name in names[:shown]) + (
        ", ..." if len(names) > shown else "")


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
        raise DataError(f"{where}: missing {noun(len(missing), 'column')} "
                        f"{', '.join(map(value_text, missing))} "
                        f"(it has: {columns_text(frame.columns)})")
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
    if _plain_numbers(values, spec):
        return _encode_numbers(values, spec, where)
    missing = missing_mask(values, spec)
    if missing.any():
        if spec.missing == "refuse":
            raise DataError(f"{where}: column '{spec.name}' has "
                            f"{plural(int(missing.sum()), 'missing value')} in "
                            f"{rows_text(missing)} and the schema refuses them "
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
                        f"{rows_text(bad)} (first: {value_text(first)})")
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
                            f"(first: {value_text(numbers[fractional].iloc[0])})")
    return numbers


def _plain_numbers(values: pd.Series, spec: FeatureSpec) -> bool:
    """A number or integer feature already read as numbers, whose only missing values are
    the reader's gaps (no codes) and are kept: typed without going through text."""
    return (spec.kind in ("number", "integer") and not spec.missing_codes
            and pd.api.types.is_numeric_dtype(values.dtype)
            and not pd.api.types.is_bool_dtype(values.dtype)
            and (spec.missing == "learn" or not values.isna().any()))


def _encode_numbers(values: pd.Series, spec: FeatureSpec, where: str) -> pd.Series:
    """`encode_column` of a plain numeric column: the same floats and the same errors,
    vectorised (gaps stay NaN)."""
    numbers = values.astype(float)
    array = numbers.to_numpy()
    present = ~np.isnan(array)
    infinite = present & ~np.isfinite(array)
    if infinite.any():
        raise DataError(f"{where}: column '{spec.name}' has infinite values in "
                        f"{rows_text(infinite)}")
    if spec.kind == "integer":
        fractional = present & (array != np.round(array))
        if fractional.any():
            raise DataError(f"{where}: column '{spec.name}' is declared integer but has "
                            f"fractions in {rows_text(fractional)} "
                            f"(first: {value_text(numbers[fractional].iloc[0])})")
    return numbers


def pool_levels(labels: pd.Series, pooled: Iterable[str]) -> pd.Series:
    """Category labels with the pooled levels replaced by OTHER_LEVEL (fitting and scoring
    alike)."""
    pooled = list(pooled)
    return labels.where(~labels.isin(pooled), OTHER_LEVEL) if pooled else labels


def _missing_mask(values: pd.Series) -> np.ndarray:
    mask = values.isna().to_numpy()
    if values.dtype == object or pd.api.types.is_string_dtype(values.dtype):
        codes, distinct = pd.factorize(values)  # each distinct value looked at once
        blank = np.array([str(value).strip() == "" for value in distinct], dtype=bool)
        if blank.any():
            mask = mask | ((codes >= 0) & blank[np.maximum(codes, 0)])
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
    codes, distinct = pd.factorize(values)
    lookup = np.array([label_text(value) for value in distinct] + [None], dtype=object)
    labels = lookup[codes]  # code -1 (no value) picks the None at the end: redone below
    absent = codes < 0
    if absent.any():
        labels[absent] = [label_text(value) for value in
                          np.asarray(values.to_numpy(dtype=object))[absent]]
    return pd.Series(labels, index=values.index, dtype=object)


def _encode_flag(values: pd.Series, spec: FeatureSpec, where: str) -> pd.Series:
    words = _labels(values).str.lower()
    truthy = words.isin(TRUE_WORDS).to_numpy()
    falsy = words.isin(FALSE_WORDS).to_numpy()
    bad = ~(truthy | falsy)
    if bad.any():
        first = values[bad].iloc[0]
        raise DataError(f"{where}: column '{spec.name}' is a flag (yes/no, true/false, 1/0) "
                        f"but has other values in {rows_text(bad)} (first: {value_text(first)})")
    return pd.Series(truthy.astype(float), index=values.index)


def encode_target(column: pd.Series, schema: Schema, where: str) -> np.ndarray:
    """The target as floats: 0/1 for classification, the values for regression."""
    name = schema.target.column
    missing = _missing_mask(column)
    if missing.any():
        raise DataError(f"{where}: target column '{name}' has "
                        f"{plural(int(missing.sum()), 'missing value')} in {rows_text(missing)}; "
                        "fill them, or drop those rows "
                        "(--drop-missing-target on fit and compare)")
    if schema.target.task == "regression":
        from glassbox.core.schema import FeatureSpec  # that module imports this one

        spec = FeatureSpec(name, "number")
        return encode_column(column, spec, where).to_numpy(dtype=float)
    labels = _labels(column)
    distinct = sorted(set(labels))
    if len(distinct) > 2:
        shown = ", ".join(map(value_text, distinct[:6]))
        raise DataError(f"{where}: target column '{name}' has {len(distinct)} labels ({shown}"
                        f"{', ...' if len(distinct) > 6 else ''}); a classification target "
                        "needs exactly two")
    positive = schema.target.positive
    if positive is None:
        positive = choose_positive(distinct, labels)
    positive_text = label_text(positive)
    if positive_text not in distinct:
        raise DataError(f"{where}: the positive label {value_text(positive)} of target "
                        f"'{name}' never occurs (labels found: "
                        f"{', '.join(map(value_text, distinct))})")
    return (labels == positive_text).to_numpy(dtype=float)


def choose_positive(distinct: list[str], labels: pd.Series) -> str:
    """The positive label when none is declared: 1, yes or true, else the rarer label."""
    for word in ("1", "yes", "true", "y", "t"):
        for label in distinct:
            if label.lower() == word:
                return label
    counts = labels.value_counts()
    return str(sorted(distinct, key=lambda v: (counts.get(v, 0), v))[0])
