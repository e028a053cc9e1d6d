"""Where a result came from: library versions and fingerprints of data and files."""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import platform
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from glassbox.core.errors import OptionError

TRACKED = ("glassbox", "numpy", "pandas", "scikit-learn", "scipy", "pygam", "pulp")


def library_versions() -> dict[str, str]:
    """Versions of Python and of the installed libraries that shape results."""
    versions = {"python": platform.python_version()}
    for name in TRACKED:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue
    return versions


COLUMNS_METHOD = "sha256-columns:"  # each column's name, type and value bytes, hashed
CSV_METHOD = "sha256:"  # the frame written as CSV text and hashed (files before issue 17)
FINGERPRINT_METHODS = {COLUMNS_METHOD: "column bytes", CSV_METHOD: "CSV text"}


def frame_fingerprint(frame: pd.DataFrame) -> str:
    """SHA-256 of a frame's content: its shape, then column by column in order the name,
    the type and the values' bytes, so a change of any value, name, column order or row
    order changes it. Numbers are hashed as their 8-byte floats (integers and flags as
    floats too, so 1 and 1.0 agree; -0.0 and 0.0 differ, as their CSV text did; every NaN
    is one NaN); a column of text values as codes into its distinct values, other columns
    as text with missing values marked apart (None, NaN and pd.NA alike). Prefixed
    COLUMNS_METHOD."""
    digest = hashlib.sha256()
    digest.update(f"{len(frame)} rows, {frame.shape[1]} columns\n".encode())
    for position, name in enumerate(frame.columns):
        kind, data = _column_bytes(frame.iloc[:, position])
        label = str(name).encode("utf-8", "surrogatepass")
        digest.update(f"{len(label)}:".encode() + label + f" {kind}\n".encode())
        digest.update(data)
    return COLUMNS_METHOD + digest.hexdigest()


def csv_text_fingerprint(frame: pd.DataFrame) -> str:
    """The older method (prefix CSV_METHOD): the frame written as CSV text and hashed; kept
    to recognise files made with it."""
    text = frame.to_csv(index=False, lineterminator="\n", float_format="%.17g")
    return CSV_METHOD + hashlib.sha256(text.encode("utf-8")).hexdigest()


def _column_bytes(column: pd.Series) -> tuple[str, bytes]:
    """A column's kind and its values as bytes: numbers (flags and pandas' nullable
    types too, pd.NA as NaN) as little-endian 8-byte floats with one NaN; whole numbers
    beyond 2**53, which floats cannot hold exactly, as 8-byte integers; anything else as
    text (`_text_bytes`)."""
    dtype = column.dtype
    numeric = (pd.api.types.is_bool_dtype(dtype) or pd.api.types.is_numeric_dtype(dtype))
    if not numeric or isinstance(dtype, pd.CategoricalDtype):
        values = column.to_numpy(dtype=object)
        if pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
            return "levels", _levels_bytes(values)
        return "text", _text_bytes(column)
    if pd.api.types.is_integer_dtype(dtype) and column.notna().all():
        whole = column.to_numpy(dtype="<i8")
        if np.abs(whole).max(initial=0) > 2**53:
            return "integer", whole.tobytes()
    values = column.to_numpy(dtype="<f8", na_value=np.nan, copy=True)
    values[np.isnan(values)] = np.nan
    return "number", values.tobytes()


def _text_bytes(column: pd.Series) -> bytes:
    """A text column unambiguously as bytes: a missing mark per row, each present value's
    length in characters, then the values' UTF-8 text one after another."""
    values = column.to_numpy(dtype=object)
    absent = pd.isna(values)
    texts = [v if type(v) is str else _other_text(v) for v in values[~absent]]
    lengths = np.zeros(len(values), dtype="<i8")
    lengths[~absent] = [len(t) for t in texts]
    return (absent.astype(np.uint8).tobytes() + lengths.tobytes()
            + "".join(texts).encode("utf-8", "surrogatepass"))


def _levels_bytes(values: np.ndarray) -> bytes:
    """A column of text values (and gaps) as bytes, one pass over the rows: each row's
    code (-1 for a gap, else the position of its value among the distinct values in order
    of first appearance), then each distinct value's length in characters and its UTF-8
    text. The same information as `_text_bytes`, without a Python step per row."""
    codes, distinct = pd.factorize(values, use_na_sentinel=True)
    texts = [str(v) for v in distinct]
    lengths = np.array([len(t) for t in texts], dtype="<i8")
    return (codes.astype("<i8").tobytes() + f"{len(texts)}:".encode() + lengths.tobytes()
            + "".join(texts).encode("utf-8", "surrogatepass"))


def _other_text(value: object) -> str:
    """A value that is not text in a text column: its type named, so 1 and "1" differ."""
    if isinstance(value, float | np.floating):
        return f"float:{float(value)!r}"
    return f"{type(value).__name__}:{value}"


def fingerprint_method(fingerprint: str | None) -> str | None:
    """How a recorded fingerprint was made (FINGERPRINT_METHODS' words), from its prefix."""
    if not fingerprint:
        return None
    for prefix in sorted(FINGERPRINT_METHODS, key=len, reverse=True):
        if fingerprint.startswith(prefix):
            return FINGERPRINT_METHODS[prefix]
    return "unknown"


def short_fingerprint(fingerprint: str | None, digits: int = 12) -> str:
    """A fingerprint's method prefix and its first `digits` hex digits, for a message."""
    text = str(fingerprint)
    prefix = next((p for p in sorted(FINGERPRINT_METHODS, key=len, reverse=True)
                   if text.startswith(p)), "")
    return text[:len(prefix) + digits] + ("..." if len(text) > len(prefix) + digits else "")


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return "sha256:" + digest.hexdigest()


def fit_day() -> str:
    """Today's date in UTC (ISO 8601, YYYY-MM-DD), the day a model is fitted; when the
    SOURCE_DATE_EPOCH environment variable is set (seconds since 1970-01-01 UTC, the
    reproducible-builds convention), that moment's day instead, so outputs can be
    byte-identical on any day."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch is None:
        return dt.datetime.now(dt.UTC).date().isoformat()
    try:
        moment = dt.datetime.fromtimestamp(int(epoch), dt.UTC)
    except (ValueError, OverflowError, OSError):
        raise OptionError("the environment variable SOURCE_DATE_EPOCH must be a whole number "
                          f"of seconds since 1970-01-01 UTC, not {epoch!r}") from None
    return moment.date().isoformat()
