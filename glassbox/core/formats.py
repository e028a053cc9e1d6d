"""Tables as text: CSV, GitHub-style Markdown and JSON records, one writer each; a table
as a file by its suffix (CSV, Parquet or JSON records)."""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import OptionError

SUFFIXES = {"csv": ".csv", "markdown": ".md", "json": ".json"}
BLOCK_ROWS = 100_000  # rows of CSV text made at a time (the text of a block is held once)


def to_csv(table: pd.DataFrame, exact: bool = False) -> str:
    """CSV text: numbers to 10 significant digits for tables people read, or with `exact`
    as the shortest text that reads back as the same double (scores, which other systems
    take up and the exports are held to)."""
    if exact:
        return b"".join(exact_csv(table)).decode("utf-8")
    return table.to_csv(index=False, lineterminator="\n", float_format="%.10g")


def exact_csv(table: pd.DataFrame, block_rows: int = BLOCK_ROWS) -> Iterator[bytes]:
    """`to_csv(table, exact=True)` as UTF-8 bytes, a block of rows at a time: the same
    bytes as pandas' writer gives (each double as Python's repr, the shortest text that
    reads back as it; missing values empty; text quoted by Python's csv module), made
    whole columns at a time. A table with a column of another type, or of one column,
    is written by pandas itself."""
    names = list(table.columns)
    if len(names) < 2 or not all(isinstance(name, str) for name in names) or not all(
            _column_writer(table[name]) for name in names):
        yield table.to_csv(index=False, lineterminator="\n").encode("utf-8")
        return
    header = io.StringIO()
    csv.writer(header, lineterminator="\n").writerow(names)
    yield header.getvalue().encode("utf-8")
    for start in range(0, len(table), block_rows):
        block = table.iloc[start:start + block_rows]
        yield _joined_lines([_column_writer(block[name])(block[name]) for name in names])


def _column_writer(column: pd.Series) -> Any:
    """The function giving a column's CSV cells as an Arrow string array, or None for a
    type left to pandas."""
    dtype = column.dtype
    if isinstance(dtype, np.dtype):
        if dtype == np.float64:
            return _float_cells
        if dtype.kind in "iu":
            return _integer_cells
        if dtype.kind == "b":
            return _flag_cells
        if dtype.kind != "O" or pd.api.types.infer_dtype(column, skipna=True) not in (
                "string", "empty"):
            return None
    elif not pd.api.types.is_string_dtype(dtype):
        return None
    return _text_cells


def _float_cells(column: pd.Series) -> Any:
    """Each double as repr gives it (NaN empty), worked out once per distinct value (its
    bits, so 0.0 and -0.0 stay apart): Arrow's shortest digits where it lays them out as
    repr does (a point, no exponent, at least 1e-4 in size), repr itself elsewhere."""
    import pyarrow as pa
    import pyarrow.compute as pc

    values = np.ascontiguousarray(column.to_numpy())
    codes, first = pd.factorize(values.view(np.int64))
    distinct = first.view(np.float64)
    texts = pc.cast(pa.array(distinct), pa.string())
    with np.errstate(invalid="ignore"):
        plain = np.abs(distinct) >= 1e-4  # False for NaN
    same = (plain & pc.match_substring(texts, ".").to_numpy(zero_copy_only=False)
            & ~pc.match_substring(texts, "e").to_numpy(zero_copy_only=False))
    redo = ~same
    if redo.any():
        again = [("" if value != value else repr(value)) for value in distinct[redo].tolist()]
        texts = pc.replace_with_mask(texts, pa.array(redo), pa.array(again, pa.string()))
    return texts.take(pa.array(codes))


def _integer_cells(column: pd.Series) -> Any:
    import pyarrow as pa
    import pyarrow.compute as pc

    return pc.cast(pa.array(column.to_numpy()), pa.string())


def _flag_cells(column: pd.Series) -> Any:
    import pyarrow as pa

    return pa.array(np.where(column.to_numpy(), "True", "False"), pa.string())


def _text_cells(column: pd.Series) -> Any:
    """Each distinct text as Python's csv module writes it (quoted where it must be),
    missing values empty."""
    import pyarrow as pa

    codes, distinct = pd.factorize(column)
    cells = []
    for value in distinct:
        cell = io.StringIO()
        csv.writer(cell, lineterminator="\n").writerow([value])
        cells.append(cell.getvalue()[:-1] if value != "" else "")  # a lone "" is quoted
    lookup = pa.array([*cells, ""], pa.string())
    return lookup.take(pa.array(np.where(codes < 0, len(cells), codes)))


def _joined_lines(columns: list[Any]) -> bytes:
    """Rows of cells joined by commas, each ended by a newline, as one run of bytes."""
    import pyarrow as pa
    import pyarrow.compute as pc

    comma, newline, none = (pa.scalar(text, pa.large_string()) for text in (",", "\n", ""))
    parts: list[Any] = []
    for column in columns:  # large strings: 64-bit offsets, any size of block
        parts += [column.cast(pa.large_string()), comma]
    parts[-1] = newline
    lines = pc.binary_join_element_wise(*parts, none)
    offsets = np.frombuffer(lines.buffers()[1], dtype=np.int64)[
        lines.offset:lines.offset + len(lines) + 1]
    start, end = int(offsets[0]), int(offsets[-1])
    return lines.buffers()[2].slice(start, end - start).to_pybytes()


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


def to_parquet(table: pd.DataFrame) -> bytes:
    """A table as a Parquet file's bytes: its columns and types as they are (no index)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    buffer = pa.BufferOutputStream()
    pq.write_table(pa.Table.from_pandas(table, preserve_index=False), buffer)
    return buffer.getvalue().to_pybytes()


# every file format a command writes, by the suffix of --out: one rule for every command
# (`output_format`); each command names the formats it writes
FORMAT_SUFFIXES = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet", ".json": "json",
                   ".md": "markdown", ".markdown": "markdown", ".html": "html",
                   ".toml": "toml", ".sql": "sql", ".pmml": "pmml"}
FORMAT_NAMES = {"csv": "CSV", "parquet": "Parquet", "json": "JSON", "markdown": "Markdown",
                "html": "HTML", "toml": "TOML", "sql": "SQL", "pmml": "PMML"}
TERMINAL = "table"  # the --format that means the terminal, not a file


def suffix_format(path: str | Path, accepted: tuple[str, ...], option: str = "--out",
                  override: bool = True) -> str:
    """The format of `path` by its suffix, one of `accepted`; any other suffix is refused
    before any work, naming the suffixes accepted (and --format, where it may override)."""
    suffix = Path(path).suffix.lower()
    found = FORMAT_SUFFIXES.get(suffix)
    if found in accepted:
        return found
    endings = [ending for ending, fmt in FORMAT_SUFFIXES.items() if fmt in accepted]
    names = ", ".join(dict.fromkeys(FORMAT_NAMES[FORMAT_SUFFIXES[e]] for e in endings))
    said = f"the suffix {suffix}" if suffix else "a name with no suffix"
    hint = " or give --format" if override else ""
    raise OptionError(f"{option} {path}: name a file ending in {', '.join(endings)} "
                      f"({names}){hint}; {said} says no format")


def output_format(out: str | Path | None, chosen: str | None, accepted: tuple[str, ...],
                  terminal: str | None = TERMINAL) -> str:
    """The one rule of every command's output: --format when given (it overrides the
    suffix), else the suffix of --out, else what standard output gets (`terminal`).

    `--format table` is the terminal's and takes no --out; a format standard output cannot
    take (Parquet, or none at all when `terminal` is None) needs --out."""
    if chosen is not None:
        if chosen == TERMINAL and out is not None:
            raise OptionError(f"--format table is the terminal's, not a file's: leave it out "
                              f"and --out {out} takes its format from its suffix")
        if chosen not in (*accepted, terminal):
            raise OptionError(f"--format {chosen}: this command writes "
                              f"{', '.join(accepted)}")
    if out is None:
        found = chosen or terminal
        if found is None:
            raise OptionError(f"say what to write: --out FILE (ending in "
                              f"{', '.join(e for e, f in FORMAT_SUFFIXES.items() if f in accepted)}"
                              f") or --format {'|'.join(accepted)}")
        if found == "parquet":
            raise OptionError("Parquet is not text: write it to a file with --out FILE.parquet")
        return found
    return chosen if chosen is not None else suffix_format(out, accepted)


def table_format(path: str | Path, option: str = "--out") -> str:
    """The file format a table goes to, by the suffix of its path (CSV, Parquet or JSON
    records); any other suffix is refused, naming the ones there are."""
    return suffix_format(path, ("csv", "parquet", "json"), option, override=False)


def table_file(table: pd.DataFrame, fmt: str) -> Iterator[bytes]:
    """A table as the bytes of a file in `fmt` (see `table_format`), in parts: CSV with
    every double exact, Parquet, or JSON records."""
    if fmt == "parquet":
        return iter([to_parquet(table)])
    if fmt == "json":
        return iter([to_json(table).encode("utf-8")])
    return exact_csv(table)
