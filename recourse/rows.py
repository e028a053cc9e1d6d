"""Picking the row to plan for: from a JSON file, or from a data file by id or position."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pandas as pd

from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import value_text
from glassbox.core.files import read_json
from glassbox.core.rows import row_position
from glassbox.core.schema import read_table
from recourse.errors import PlanningError


def pick_row(model: AdditiveModel, *, row: Path | None = None, data: Path | None = None,
             id_value: str | None = None, index: int | None = None) -> tuple[pd.Series, Any]:
    """One raw row and its id: `row` (a JSON object), or `data` with `id_value` or `index`
    (the N-th data row, counting from 1). The model's features of the row are checked here,
    so a problem names the row file (or the data file and row)."""
    ways = [row is not None, data is not None and id_value is not None,
            data is not None and index is not None]
    if sum(ways) != 1 or (row is not None and data is not None):
        raise PlanningError("name one row: --row ROW.json, or --data FILE with --id VALUE "
                            "or --index N")
    if row is not None:
        values = read_row_file(row)
        series = pd.Series(values, dtype=object)
        model.encode(pd.DataFrame([series]), source=f"row file {row}")
        return series, values.get(model.schema.id_column) if model.schema.id_column else None
    frame = read_table(data)
    position = row_position(frame, model.schema, id_value=id_value, index=index,
                            source=str(data))
    series = frame.iloc[position]
    model.encode(frame.iloc[[position]], source=f"{data} (its data row {position + 1})")
    id_column = model.schema.id_column
    return series, series[id_column] if id_column and id_column in frame else position + 1


def read_row_file(path: Path) -> dict[str, Any]:
    """A row file's JSON object: one plain value (text, number, true/false or null) per
    feature, each key once. NaN reads as missing, as pandas writes it."""
    read_json(path, "row file", PlanningError)  # missing, unreadable or not JSON

    def pairs(items: list[tuple[str, Any]]) -> dict[str, Any]:
        seen: dict[str, Any] = {}
        for key, value in items:
            if key in seen:
                raise PlanningError(f"row file {path} gives {value_text(key)} twice; which "
                                    "value holds cannot be known")
            seen[key] = value
        return seen

    values = json.loads(Path(path).read_text(encoding="utf-8"), object_pairs_hook=pairs)
    if not isinstance(values, dict):
        raise PlanningError(f"row file {path} must hold one JSON object of feature values")
    for key, value in values.items():
        if isinstance(value, dict | list):
            raise PlanningError(f"row file {path}: feature {value_text(key)} has a "
                                f"{'list' if isinstance(value, list) else 'JSON object'} as "
                                "its value; give one value (text, a number, true/false, or "
                                "null for missing)")
    return values
