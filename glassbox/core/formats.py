"""Tables as text: CSV, GitHub-style Markdown and JSON records, one writer each."""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import OptionError

SUFFIXES = {"csv": ".csv", "markdown": ".md", "json": ".json"}


def to_csv(table: pd.DataFrame, exact: bool = False) -> str:
    """CSV text: numbers to 10 significant digits for tables people read, or with `exact`
    as the shortest text that reads back as the same double (scores, which other systems
    take up and the exports are held to)."""
    return table.to_csv(index=False, lineterminator="\n",
                        float_format=None if exact else "%.10g")


def to_markdown(table: pd.DataFrame, digits: int = 4) -> str:
    """A GitHub-style Markdown table."""
    def cell(value: Any) -> str:
        if value is None or (isinstance(value, float) and np.isnan(value)):
            return ""
        if isinstance(value, float):
            return f"{value:.{digits}g}"
        return str(value).replace("|", "\\|")

    lines = ["| " + " | ".join(table.columns) + " |",
             "|" + "|".join("---" for _ in table.columns) + "|"]
    for row in table.itertuples(index=False):
        lines.append("| " + " | ".join(cell(v) for v in row) + " |")
    return "\n".join(lines) + "\n"


def to_json(table: pd.DataFrame) -> str:
    records = [{key: _json_value(value) for key, value in row.items()}
               for row in table.to_dict(orient="records")]
    return json.dumps(records, indent=1, ensure_ascii=False) + "\n"


def _json_value(value: Any) -> Any:
    if isinstance(value, float | np.floating):
        if np.isnan(value):
            return None
        if np.isinf(value):
            return "inf" if value > 0 else "-inf"
        return float(value)
    if isinstance(value, np.integer):
        return int(value)
    return value


def write(table: pd.DataFrame, fmt: str) -> str:
    """A table as text in one of the file formats."""
    writers = {"csv": to_csv, "markdown": to_markdown, "json": to_json}
    if fmt not in writers:
        raise OptionError(f"unknown format {fmt!r} (use one of: {', '.join(writers)})")
    return writers[fmt](table)
