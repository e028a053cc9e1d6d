"""Picking the row to plan for: from a JSON file, or from a data file by id or position."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pandas as pd

from glassbox.additive import AdditiveModel
from glassbox.schema import label_text, read_table
from recourse.errors import PlanningError


def pick_row(model: AdditiveModel, *, row: Path | None = None, data: Path | None = None,
             id_value: str | None = None, index: int | None = None) -> tuple[pd.Series, Any]:
    """One raw row and its id: `row` (a JSON object), or `data` with `id_value` or `index`
    (the N-th data row, counting from 1)."""
    ways = [row is not None, data is not None and id_value is not None,
            data is not None and index is not None]
    if sum(ways) != 1 or (row is not None and data is not None):
        raise PlanningError("name one row: --row ROW.json, or --data FILE with --id VALUE "
                            "or --index N")
    if row is not None:
        if not row.is_file():
            raise PlanningError(f"row file {row} does not exist")
        try:
            values = json.loads(row.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise PlanningError(f"row file {row} is not valid JSON: {exc}") from None
        if not isinstance(values, dict):
            raise PlanningError(f"row file {row} must hold one JSON object of feature values")
        series = pd.Series(values, dtype=object)
        return series, values.get(model.schema.id_column) if model.schema.id_column else None
    frame = read_table(data)
    if index is not None:
        if index > len(frame):
            raise PlanningError(f"{data} has {len(frame)} data rows; --index {index} is beyond")
        series = frame.iloc[index - 1]
        id_column = model.schema.id_column
        return series, series[id_column] if id_column in frame else index
    id_column = model.schema.id_column
    if not id_column:
        raise PlanningError("the model's schema names no id column; use --index N")
    if id_column not in frame:
        raise PlanningError(f"{data} has no id column '{id_column}'")
    matches = frame[frame[id_column].map(label_text) == label_text(id_value)]
    if matches.empty:
        raise PlanningError(f"{data}: no row with {id_column} = {id_value!r}")
    if len(matches) > 1:
        raise PlanningError(f"{data}: {len(matches)} rows have {id_column} = {id_value!r}")
    return matches.iloc[0], matches.iloc[0][id_column]
