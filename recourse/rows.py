"""Picking the row to plan for: from a JSON file, or from a data file by id or position."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd

from glassbox.additive import AdditiveModel
from glassbox.files import read_json
from glassbox.rows import row_position
from glassbox.schema import read_table
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
        values = read_json(row, "row file", PlanningError)
        if not isinstance(values, dict):
            raise PlanningError(f"row file {row} must hold one JSON object of feature values")
        series = pd.Series(values, dtype=object)
        return series, values.get(model.schema.id_column) if model.schema.id_column else None
    frame = read_table(data)
    position = row_position(frame, model.schema, id_value=id_value, index=index,
                            source=str(data))
    series = frame.iloc[position]
    id_column = model.schema.id_column
    return series, series[id_column] if id_column and id_column in frame else position + 1
