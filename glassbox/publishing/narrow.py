"""Terminal layout shared by every view: numbers in one style per column, and tables that
fit the terminal's width with nothing cut.

A column's numbers are written one way (the same decimals, percent or not, no negative
zero), chosen from the whole column, so `0.9045` never stands beside `100.0%` and
`0.0006196` never beside `1`. A table too wide for the terminal wraps its text columns at
spaces (never inside a word), and when even that is too wide it becomes two or more
tables, each repeating the first column; numbers never fold. Titles are paragraphs that
wrap. Widths are decided at render time from the console's width, so the same view
reads at 80 columns and at 200.
"""

from __future__ import annotations

import functools
import math
import re
import textwrap
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np
import pandas as pd
from rich import box
from rich.console import Console, ConsoleOptions, RenderResult
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

SIGNIFICANT = 4  # digits the largest number of a column keeps
MOST_DECIMALS = 6
NEGATIVE_ZERO = re.compile(r"-(0[.,]?0*)(%?)$")
COUNT_WORDS = ("rows", "count", "declined", "planned", "with_plan", "distinct", "points")
SHARE_WORDS = ("share",)


def finite(value: Any) -> bool:
    if value is None or isinstance(value, str | bool | np.bool_):
        return False
    try:
        return math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def _no_negative_zero(text: str) -> str:
    return NEGATIVE_ZERO.sub(r"\1\2", text)


def decimals_for(values: Iterable[float], significant: int = SIGNIFICANT) -> int:
    """Decimals that give the largest magnitude `significant` digits (at most six)."""
    largest = max((abs(v) for v in values), default=0.0)
    if largest == 0:
        return 0
    return max(0, min(MOST_DECIMALS, significant - 1 - math.floor(math.log10(largest))))


def number_texts(values: Sequence[Any], style: str = "number", signed: bool = False,
                 significant: int = SIGNIFICANT) -> list[str]:
    """A column of numbers as text in one style; blanks for gaps, text passed through.

    style "count": whole numbers with thousands separators; "share": percent with the
    same decimals (one, or more when a share under 1% would read as 0.0%); "number":
    the same decimals for every value, from the largest magnitude; "number" columns whose
    largest magnitude is below 1e-4 are written in scientific notation with the same
    digits. No value reads as a negative zero."""
    numbers = [float(v) for v in values if finite(v)]
    sign = "+" if signed else ""
    if style == "count" and all(float(v).is_integer() for v in numbers):
        form = f"{sign},.0f"
    elif style == "share":
        nonzero = [abs(100 * v) for v in numbers if v != 0]
        small = min(nonzero, default=100.0)
        places = 1 if small >= 1 else min(3, 1 - math.floor(math.log10(small)))
        return [_no_negative_zero(format(100 * float(v), f"{sign}.{places}f")) + "%"
                if finite(v) else _other(v) for v in values]
    else:
        largest = max((abs(v) for v in numbers), default=0.0)
        if 0 < largest < 1e-4:
            form = f"{sign}.{significant - 1}e"
        elif numbers and all(v.is_integer() for v in numbers):
            form = f"{sign},.0f" if largest >= 10_000 else f"{sign}.0f"
        else:
            form = f"{sign}.{decimals_for(numbers, significant)}f"
    return [_no_negative_zero(format(float(v), form)) if finite(v) else _other(v)
            for v in values]


def _other(value: Any) -> str:
    """A non-number cell: text as is, a gap blank, infinities as ∞."""
    if value is None:
        return ""
    if isinstance(value, float | np.floating):
        if math.isnan(value):
            return ""
        return "∞" if value > 0 else "-∞"
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):
        pass
    return str(value)


def column_style(name: str, column: pd.Series) -> str:
    """The style a column's numbers are written in, from its name and values."""
    lowered = name.lower()
    if any(word in lowered for word in SHARE_WORDS):
        return "share"
    present = [v for v in column if finite(v)]
    if present and all(float(v).is_integer() for v in present) and (
            pd.api.types.is_integer_dtype(column.dtype)
            or any(word in lowered for word in COUNT_WORDS)):
        return "count"
    return "number"


def frame_texts(frame: pd.DataFrame, columns: Sequence[str] | None = None,
                styles: dict[str, str] | None = None) -> pd.DataFrame:
    """The chosen columns of a frame as text cells, each column's numbers in one style."""
    columns = list(columns or frame.columns)
    styles = dict(styles or {})
    out = {}
    for name in columns:
        column = frame[name]
        numeric = pd.api.types.is_numeric_dtype(column.dtype) and not \
            pd.api.types.is_bool_dtype(column.dtype)
        if numeric or any(finite(v) for v in column):
            style = styles.get(name) or column_style(name, column)
            out[name] = number_texts(list(column), style)
        else:
            out[name] = [_other(v) for v in column]
    return pd.DataFrame(out, index=frame.index, columns=columns)


def is_number_text(column: Sequence[str]) -> bool:
    """Whether a column of text cells holds numbers (blanks aside): right-align those."""
    present = [c for c in column if c]
    return bool(present) and all(_NUMBER.match(c) for c in present)


_NUMBER = re.compile(r"^[+-]?(\d{1,3}(,\d{3})+|\d+)(\.\d+)?(e[+-]\d+)?%?$|^[+-]?∞$")


# ---------------------------------------------------------------- layout


@functools.lru_cache(maxsize=64)
def _overhead(columns: int, boxed: bool) -> int:
    """Characters a table spends outside its cells (edges, separators, padding)."""
    table = _bare_table(boxed, header=True)
    for _ in range(columns):
        table.add_column("x", width=1)
    table.add_row(*["x"] * columns)
    console = Console(width=1000, record=True, file=_Null())
    console.print(table)
    lines = console.export_text().splitlines()
    return max(len(line.rstrip()) for line in lines) + (1 if boxed else 0) - columns


class _Null:
    def write(self, text: str) -> int:
        return len(text)

    def flush(self) -> None:
        pass


def _bare_table(boxed: bool, header: bool) -> Table:
    return Table(box=box.SIMPLE_HEAD if boxed else None, show_header=header,
                 header_style="bold", pad_edge=False, expand=False)


def _longest(texts: Iterable[str], words: bool = False) -> int:
    split = str.split if words else str.splitlines
    return max((len(part) for text in texts for part in split(text)), default=0)


class FittedTable:
    """A table of text cells laid out for the console's width, nothing cut.

    `headings` are (text, "left" | "right") pairs; right-aligned columns hold numbers and
    never fold. Text columns wrap at spaces down to their longest word (those named in
    `whole` stay on one line, like numbers); when the table
    is still too wide it is shown as several tables side by side in reading order, each
    repeating the first column (a stacked table), and a column too wide even alone with
    the first folds. `notes` are sentences read under the table."""

    def __init__(self, title: str | None, headings: Sequence[tuple[str, str]],
                 rows: Sequence[Sequence[str]], header: bool = True,
                 title_style: str = "bold", notes: Sequence[str] = (),
                 mixed: Sequence[str] = (), whole: Sequence[str] = ()) -> None:
        self.title = title
        self.headings = [(str(h), j) for h, j in headings]
        self.rows = [[str(c) for c in row] for row in rows]
        self.header = header
        self.title_style = title_style
        self.notes = list(notes)
        self.mixed = set(mixed)  # headings of columns whose rows are different quantities
        self.whole = set(whole)  # headings of text columns kept on one line, like numbers

    @classmethod
    def of_frame(cls, texts: pd.DataFrame, title: str | None = None,
                 headings: dict[str, str] | None = None, **kwargs: Any) -> FittedTable:
        """A table from a frame of text cells (`frame_texts`); numbers right-aligned."""
        headings = headings or {}
        pairs = [(headings.get(name, str(name).replace("_", " ")),
                  "right" if is_number_text(list(texts[name])) else "left")
                 for name in texts.columns]
        return cls(title, pairs, texts.itertuples(index=False), **kwargs)

    def groups(self, width: int) -> list[list[int]]:
        """Which columns each stacked table shows (the first column in every one)."""
        count = len(self.headings)
        floors = self._floors()
        room = width - _overhead(count, self.header)
        if sum(floors) <= room or count <= 2:
            return [list(range(count))]
        groups: list[list[int]] = [[0]]
        for j in range(1, count):
            trial = [*groups[-1], j]
            needed = sum(floors[k] for k in trial) + _overhead(len(trial), self.header)
            if needed > width and len(groups[-1]) > 1:
                groups.append([0, j])
            else:
                groups[-1] = trial
        return groups

    def _floors(self, width: int | None = None) -> list[int]:
        """The narrowest each column may get: numbers whole; text down to its longest word,
        except a word longer than a fair share of the width (a file path, a long id),
        which folds rather than squeeze the other columns' words apart."""
        count = len(self.headings)
        share = None if width is None else max(
            20, (width - _overhead(count, self.header)) // max(count, 1))
        floors = []
        for j, (heading, justify) in enumerate(self.headings):
            cells = [row[j] for row in self.rows]
            if justify == "right" or heading in self.whole:
                floors.append(max(_longest(cells), _longest([heading], words=True)))
            else:
                longest = max(_longest(cells, words=True), _longest([heading], words=True), 1)
                floors.append(longest if share is None else min(longest, share))
        return floors

    def _table(self, columns: list[int], width: int) -> Table:
        natural = [max(_longest([row[j] for row in self.rows]),
                       _longest([self.headings[j][0]]) if self.header else 0, 1)
                   for j in columns]
        floors = [self._floors(width)[j] for j in columns]
        widths = list(natural)
        room = width - _overhead(len(columns), self.header)
        # shrink, a column at a time, the one whose narrowing adds the fewest lines to the
        # table (a heading that wraps before every row's text does), the widest of those
        # first; never below a column's longest word
        lines = functools.lru_cache(maxsize=None)(self._line_counts)
        while sum(widths) > room:
            shrinkable = [k for k in range(len(columns)) if widths[k] > floors[k]]
            if not shrinkable:
                break

            def height(k: int) -> int:
                trial = [lines(columns[m], widths[m] - (m == k)) for m in range(len(columns))]
                return sum(max(row) for row in zip(*trial, strict=True))

            chosen = min(shrinkable, key=lambda k: (height(k), -widths[k], k))
            widths[chosen] -= 1
        # still too wide (a very long word): fold the widest text column
        while sum(widths) > room:
            text = [k for k in range(len(columns))
                    if self.headings[columns[k]][1] != "right" and widths[k] > 4]
            if not text:
                break
            widest = max(text, key=lambda k: widths[k])
            widths[widest] -= 1
        table = _bare_table(True, self.header) if self.header else _bare_table(False, False)
        for k, j in enumerate(columns):
            heading, justify = self.headings[j]
            style = "bold" if not self.header and j == 0 else None
            table.add_column(heading, justify=justify, width=widths[k],  # type: ignore[arg-type]
                             overflow="fold", style=style)
        for row in self.rows:
            table.add_row(*(row[j] for j in columns))
        return table

    def _line_counts(self, column: int, width: int) -> tuple[int, ...]:
        """Lines each row (the heading first) takes in `column` at `width`, wrapped at
        spaces as rich wraps them (numbers never wrap)."""
        heading, justify = self.headings[column]

        def wrapped(cell: str) -> int:
            return sum(max(1, len(textwrap.wrap(line, width, break_on_hyphens=False)))
                       for line in (cell.splitlines() or [""]))

        cells = [row[column] for row in self.rows]
        if justify == "right" or heading in self.whole:  # only the heading can wrap
            counts = [max(1, len(cell.splitlines())) for cell in cells]
        else:
            counts = [wrapped(cell) for cell in cells]
        return (wrapped(heading) if self.header else 1, *counts)

    def parts(self, width: int) -> list[Any]:
        groups = self.groups(width)
        out: list[Any] = []
        for number, columns in enumerate(groups, start=1):
            if self.title:
                title = self.title if len(groups) == 1 else (
                    f"{self.title} (part {number} of {len(groups)})")
                out.append(Text(title, style=self.title_style))
            out.append(self._table(columns, width))
        out += [Text(note) for note in self.notes]
        return out

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        yield from self.parts(options.max_width)


def key_value_table(pairs: dict[str, str], title: str | None = None) -> FittedTable:
    """Labelled values, one to a line: the label bold, the value wrapping beside it."""
    return FittedTable(title, [("", "left"), ("", "left")],
                       [(key, value) for key, value in pairs.items()], header=False)


def bullet(text: str, mark: str = "-", indent: int = 2) -> Padding:
    """A bulleted sentence whose wrapped lines stay under the text, not under the mark."""
    grid = Table.grid(padding=(0, 1))
    grid.add_column(no_wrap=True)
    grid.add_column(overflow="fold")
    grid.add_row(mark, Text(text))
    return Padding(grid, (0, 0, 0, indent))


class Hanging:
    """A paragraph whose first line starts at the margin and whose folded lines start
    `indent` columns in, broken at spaces to the console's width (a word longer than a
    line folds). Plain text: no markup is read."""

    def __init__(self, text: str, indent: int = 4) -> None:
        self.text = text
        self.indent = indent

    def lines(self, width: int) -> list[str]:
        import textwrap

        return textwrap.wrap(self.text, max(width, self.indent + 10),
                             subsequent_indent=" " * self.indent, break_on_hyphens=False,
                             drop_whitespace=True) or [""]

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        for line in self.lines(options.max_width):
            yield Text(line, no_wrap=True)  # already fits: textwrap folds a long word


def indented(content: Any, indent: int = 4) -> Padding:
    """A paragraph (or any renderable) whose every line starts `indent` columns in."""
    return Padding(Text(content) if isinstance(content, str) else content, (0, 0, 0, indent))
