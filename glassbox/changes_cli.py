"""The `glassbox changes` command: parse arguments, compare two model files, render.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import Command, Force, app, choices, emit, example, friendly, stdout_console
from glassbox.core.errors import OptionError


class ChangesFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


FILE_KINDS = {"json": "glassbox-changes", "markdown": "markdown"}


@app.command("changes", cls=Command, epilog=example(
    "glassbox changes old.json new.json loans.csv --out changes.md"))
@friendly
def changes_command(
    old_file: Annotated[Path, typer.Argument(metavar="OLD", help="The model file in use.")],
    new_file: Annotated[Path, typer.Argument(metavar="NEW", help="The model file proposed.")],
    data: Annotated[Path | None, typer.Argument(
        metavar="DATA", help="CSV or Parquet rows to score with both (their columns).")
    ] = None,
    cutoff: Annotated[float | None, typer.Option(
        metavar="X", help="With DATA, the decision's cut-off: a probability for "
                              "classification (0.5 by default), a predicted value for "
                              "regression (required).")] = None,
    format: Annotated[ChangesFormat | None, typer.Option(
        "--format", metavar=choices(ChangesFormat),
        help="table (terminal), json or markdown; by the --out suffix when not "
                         "given, else the terminal.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write json (.json) or markdown (.md) here.")] = None,
    force: Force = False,
) -> None:
    """A change review of two versions of a model: terms, schema, importance, decisions."""
    from glassbox.core import artifact, formats
    from glassbox.core.files import check_output

    chosen = formats.output_format(out, None if format is None else format.value,
                                   ("json", "markdown"))
    if cutoff is not None and data is None:
        raise OptionError("--cutoff applies to the rows of DATA: give a data file too")
    if chosen != "table":
        check_output(out, FILE_KINDS[chosen], [old_file, new_file, data], force=force)
    from glassbox.core.schema import read_table
    from glassbox.explaining.changes import model_changes
    from glassbox.publishing.changes_view import changes_json, changes_markdown, changes_view

    old, new = artifact.load(old_file), artifact.load(new_file)
    frame = None if data is None else read_table(data)
    review = model_changes(old, new, frame, cutoff=cutoff,
                           source=None if data is None else str(data),
                           names=(str(old_file), str(new_file)))
    if chosen == "table":
        console = stdout_console()
        console.print(changes_view(review, max(console.width, 40)))
        return
    text = changes_json(review) if chosen == "json" else changes_markdown(review)
    emit(text, out, f"the change review ({chosen})")
