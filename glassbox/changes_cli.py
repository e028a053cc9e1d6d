"""The `glassbox changes` command: parse arguments, compare two model files, render.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import Force, app, emit, friendly, stdout_console
from glassbox.core import artifact
from glassbox.core.errors import OptionError
from glassbox.core.files import check_output


class ChangesFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


SUFFIX_FORMATS = {".json": ChangesFormat.json, ".md": ChangesFormat.markdown,
                  ".markdown": ChangesFormat.markdown}
FILE_KINDS = {ChangesFormat.json: "glassbox-changes", ChangesFormat.markdown: "markdown"}


def output_format(format: ChangesFormat | None, out: Path | None) -> ChangesFormat:
    """The format asked for, else the one --out's suffix names, else the terminal table."""
    if format is None:
        if out is None:
            return ChangesFormat.table
        if out.suffix.lower() not in SUFFIX_FORMATS:
            raise OptionError(f"--out {out}: give --format json or markdown (or name the "
                              "file .json or .md)")
        return SUFFIX_FORMATS[out.suffix.lower()]
    if format is ChangesFormat.table and out is not None:
        raise OptionError("--out needs --format json or markdown (the terminal table is not "
                          "a file)")
    return format


@app.command("changes")
@friendly
def changes_command(
    old_file: Annotated[Path, typer.Argument(metavar="OLD", help="The model file in use.")],
    new_file: Annotated[Path, typer.Argument(metavar="NEW", help="The model file proposed.")],
    data: Annotated[Path | None, typer.Argument(
        metavar="DATA", help="CSV or Parquet rows to score with both (their columns).")
    ] = None,
    cutoff: Annotated[float | None, typer.Option(
        metavar="VALUE", help="With DATA, the decision's cut-off: a probability for "
                              "classification (0.5 by default), a predicted value for "
                              "regression (required).")] = None,
    format: Annotated[ChangesFormat | None, typer.Option(
        "--format", help="table (terminal, the default), json or markdown; with --out, "
                         "from its suffix (.json, .md) unless given.")] = None,
    out: Annotated[Path | None, typer.Option(metavar="FILE",
                                             help="Write json or markdown here.")] = None,
    force: Force = False,
) -> None:
    """A change review of two versions of a model: terms, schema, importance, decisions.

    Example: glassbox changes OLD.json NEW.json DATA.csv --out changes.md
    """
    chosen = output_format(format, out)
    if cutoff is not None and data is None:
        raise OptionError("--cutoff applies to the rows of DATA: give a data file too")
    if chosen is not ChangesFormat.table:
        check_output(out, FILE_KINDS[chosen], [old_file, new_file, data], force=force)
    from glassbox.core.schema import read_table
    from glassbox.explaining.changes import model_changes
    from glassbox.publishing.changes_view import changes_json, changes_markdown, changes_view

    old, new = artifact.load(old_file), artifact.load(new_file)
    frame = None if data is None else read_table(data)
    review = model_changes(old, new, frame, cutoff=cutoff,
                           source=None if data is None else str(data),
                           names=(str(old_file), str(new_file)))
    if chosen is ChangesFormat.table:
        console = stdout_console()
        console.print(changes_view(review, max(console.width, 40)))
        return
    text = changes_json(review) if chosen is ChangesFormat.json else changes_markdown(review)
    emit(text, out, f"the change review ({chosen.value})")
