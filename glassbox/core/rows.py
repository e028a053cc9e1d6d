"""Finding one row of a data file: by its id (the schema's id column) or its position."""

from __future__ import annotations

import pandas as pd

from glassbox.core.errors import OptionError, value_text
from glassbox.core.schema import Schema, label_text


def row_position(frame: pd.DataFrame, schema: Schema, *, id_value: str | None = None,
                 index: int | None = None, source: str = "the data") -> int:
    """The position (from 0) of the row with `id_value`, or of the `index`-th row (from 1)."""
    if (id_value is None) == (index is None):
        raise OptionError("name one row: --id VALUE or --index N")
    if index is not None:
        if index < 1:
            raise OptionError(f"--index counts rows from 1, not {index}")
        if index > len(frame):
            raise OptionError(f"{source} has {len(frame)} data rows; --index {index} is beyond")
        return index - 1
    id_column = schema.id_column
    if not id_column:
        raise OptionError("the model's schema names no id column; use --index N")
    if id_column not in frame:
        raise OptionError(f"{source} has no id column '{id_column}'")
    matches = (frame[id_column].map(label_text) == label_text(id_value)).to_numpy().nonzero()[0]
    if len(matches) == 0:
        raise OptionError(f"{source}: no row with {id_column} = {value_text(id_value)}")
    if len(matches) > 1:
        raise OptionError(f"{source}: {len(matches)} rows have {id_column} = "
                          f"{value_text(id_value)}")
    return int(matches[0])
