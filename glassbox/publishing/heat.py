"""Heat tables for a terminal: a pair's grid (rows the first axis, columns the second)
thinned to what reads at the console's width.

A grid of a knots pair can hold a hundred entries each way; printed whole at 80 columns it
runs to thousands of lines. So a terminal shows at most `MOST_ROWS` rows and, of the
columns, as many as fit the console's width in one table: the first and last entries of an
axis and its missing entry are always kept, the others evenly spread between by position.
A thinned grid numbers its rows (a "#" column) and its columns (a "#N" line under each
heading) from 1, as the files number a pair's entries, and its title says how many of each
it shows and how to get every cell. Files are never thinned; a grid that fits is shown
whole. The same choice of entries serves the report's heat tables (`spread`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from rich.console import Console, ConsoleOptions, RenderResult

from glassbox.publishing.narrow import FittedTable, _overhead, is_number_text

MOST_ROWS = 16  # as a one-feature table on the terminal (shapes.readable_rows)


def spread(count: int, most: int, missing: bool = False) -> list[int]:
    """Positions of at most `most` of an axis's `count` entries (the last one its missing
    entry when `missing`): every entry when there are no more; otherwise the first and
    last value entries and the missing entry, the rest evenly spread between by position.
    Never fewer than those three (two without a missing entry)."""
    if count <= most:
        return list(range(count))
    values = count - 1 if missing else count
    room = max(most - (1 if missing else 0), 2)
    chosen = sorted({int(p) for p in np.round(np.linspace(0, values - 1, room))})
    return chosen + ([count - 1] if missing else [])


def _fits(table: FittedTable, width: int) -> bool:
    """Whether a grid reads as one table at `width` with its row labels (and their
    numbers) on one line each: the value columns may go down to their narrowest (a
    heading wraps at spaces, numbers never fold)."""
    floors = table._floors()
    leading = 2 if table.headings[0][0] == "#" else 1
    labels = [max(len(line) for row in table.rows for line in (row[j].splitlines() or [""]))
              for j in range(leading)]
    labels = [max(label, floor) for label, floor in zip(labels, floors, strict=False)]
    needed = sum(labels) + sum(floors[leading:]) + _overhead(len(floors), table.header)
    return needed <= width


def thinned_words(rows: int, all_rows: int, columns: int, all_columns: int,
                  whole: str) -> str:
    """What a thinned grid's title adds: how many rows and columns of how many it shows,
    how they are numbered and how to get every cell (`whole`)."""
    return (f": {rows} of {all_rows} rows and {columns} of {all_columns} columns, # "
            f"numbering them as the files do ({whole})")


@dataclass
class HeatTable:
    """A grid of text cells (`cells[a][b]`, one style for the whole grid) with its axes'
    labels, shown whole when it fits and thinned otherwise (see the module's note).
    `extra`: other grids laid out as this one (training shares), each (title, cells),
    shown under it with the same rows and columns; `whole`: how to get every cell."""

    title: str
    corner: str
    row_labels: Sequence[str]
    column_labels: Sequence[str]
    cells: np.ndarray
    row_missing: bool = False
    column_missing: bool = False
    notes: Sequence[str] = ()
    whole: str = "--format csv gives every cell"
    extra: Sequence[tuple[str, np.ndarray]] = field(default_factory=tuple)
    most_rows: int = MOST_ROWS

    def _table(self, title: str, cells: np.ndarray, rows: list[int], columns: list[int],
               notes: Sequence[str] = ()) -> FittedTable:
        number_rows = len(rows) < len(self.row_labels)
        number_columns = len(columns) < len(self.column_labels)
        headings: list[tuple[str, str]] = [("#", "right")] if number_rows else []
        labels = [str(self.row_labels[a]) for a in rows]
        headings.append((self.corner.replace("_", " "),
                         "right" if is_number_text(labels) else "left"))
        for b in columns:
            column = [str(cells[a][b]) for a in rows]
            heading = self.column_labels[b] + (f"\n#{b + 1}" if number_columns else "")
            headings.append((heading, "right" if is_number_text(column) else "left"))
        body = [([str(a + 1)] if number_rows else []) + [str(self.row_labels[a])]
                + [str(cells[a][b]) for b in columns] for a in rows]
        return FittedTable(title, headings, body, notes=notes)

    def layout(self, width: int) -> list[FittedTable]:
        """The tables shown at `width`: the grid (thinned when it must be), then each of
        `extra` with the same rows and columns."""
        all_rows, all_columns = len(self.row_labels), len(self.column_labels)
        rows = spread(all_rows, self.most_rows, self.row_missing)
        least = 2 + int(self.column_missing)
        count = min(all_columns, max(least, width // 3))  # a column takes 3 at least
        while True:
            columns = spread(all_columns, count, self.column_missing)
            grids = [("", self.cells), *self.extra]
            tables = [self._table(title, cells, rows, columns) for title, cells in grids]
            if len(columns) <= least or all(_fits(t, width) for t in tables):
                break
            count = len(columns) - 1
        thinned = len(rows) < all_rows or len(columns) < all_columns
        words = thinned_words(len(rows), all_rows, len(columns), all_columns,
                              self.whole) if thinned else ""
        out = [self._table(self.title + words, self.cells, rows, columns, self.notes)]
        out += [self._table(title, cells, rows, columns) for title, cells in self.extra]
        return out

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        yield from self.layout(options.max_width)


REPORT_COLUMNS = 12  # columns of a heat table that read across the report's page


def report_grid(grid: pd.DataFrame, corner: str, row_missing: bool, column_missing: bool,
                most_rows: int = MOST_ROWS, most_columns: int = REPORT_COLUMNS
                ) -> tuple[pd.DataFrame, str]:
    """A grid (index the first axis's labels, columns the second's) as a report table: a
    first column `corner` of the row labels, then one column per entry shown. A grid of
    more than `most_rows` rows or `most_columns` columns is thinned as a terminal's is
    (`spread`), its rows numbered in a "#" column and its columns' headings ending in
    "#N", from 1 as the long-form file numbers the entries; the words say how many it shows
    (empty when the grid is whole)."""
    rows = spread(len(grid.index), most_rows, row_missing)
    columns = spread(len(grid.columns), most_columns, column_missing)
    shown = grid.iloc[rows, columns]
    thin_rows, thin_columns = len(rows) < len(grid.index), len(columns) < len(grid.columns)
    table = shown.reset_index(drop=True)
    table.columns = [f"{label} #{b + 1}" if thin_columns else str(label)
                     for label, b in zip(shown.columns, columns, strict=True)]
    table.insert(0, corner, [str(label) for label in shown.index])
    if thin_rows:
        table.insert(0, "#", [str(a + 1) for a in rows])
    if not (thin_rows or thin_columns):
        return table, ""
    return table, (f"{len(rows)} of {len(grid.index)} rows and {len(columns)} of "
                   f"{len(grid.columns)} columns (at most {most_rows} rows and "
                   f"{most_columns} columns here: the first, the last and the missing "
                   "entry of each axis, the others evenly spread between), # numbering "
                   "them as the long-form file does")
