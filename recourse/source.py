"""The input file of a population run: `glassbox.core.stream`'s block reader, with the kept
columns named by the option that asks for them (--by)."""

from __future__ import annotations

from pathlib import Path

from glassbox.core.additive import AdditiveModel
from glassbox.core.stream import (
    Source,
    dask_frame,
    dask_read_error,
    dask_session,
    read_blocks,
    read_error,
    renumbered,
)
from glassbox.core.stream import open_source as _open

__all__ = ["Source", "dask_frame", "dask_read_error", "dask_session", "open_source",
           "read_blocks", "read_error", "renumbered"]


def open_source(path: Path, model: AdditiveModel, keep: tuple[str, ...]) -> Source:
    """Check the header against the model and the --by columns before any planning."""
    return _open(path, model, keep, "columns to keep (--by)")
