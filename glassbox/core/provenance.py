"""Where a result came from: library versions and fingerprints of data and files."""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import platform
from importlib import metadata
from pathlib import Path

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


def frame_fingerprint(frame: pd.DataFrame) -> str:
    """SHA-256 of a frame's content written as CSV (column names, values, row order)."""
    text = frame.to_csv(index=False, lineterminator="\n", float_format="%.17g")
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


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
