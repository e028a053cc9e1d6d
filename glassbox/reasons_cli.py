"""The `glassbox reasons` command: parse arguments, find the reasons, render.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

import json
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer

from glassbox.cli import (
    MAX_TOP,
    Command,
    Force,
    ModelArgument,
    app,
    choices,
    emit,
    example,
    friendly,
    stderr_console,
    stdout_console,
)
from glassbox.core.errors import OptionError

PRINCIPAL_TITLE = "Principal reasons among rows on the unfavourable side of the cut-off"


class ReasonsFormat(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


@app.command("reasons", cls=Command, epilog=example(
    "glassbox reasons loans.json loans.csv --id L001096"))
@friendly
def reasons_command(
    model_file: ModelArgument,
    data: Annotated[Path, typer.Argument(
        metavar="DATA", help="CSV or Parquet file with the rows.")],
    id_value: Annotated[str | None, typer.Option(
        "--id", metavar="ID", help="The row with this id.")] = None,
    index: Annotated[int | None, typer.Option(
        metavar="N", help="The N-th data row, counting from 1.", min=1)] = None,
    every: Annotated[bool, typer.Option("--all", help="Every row, and a summary.")] = False,
    top: Annotated[int, typer.Option(metavar="N", help="Reasons per row.", min=1,
                                     max=MAX_TOP)] = 4,
    cutoff: Annotated[float | None, typer.Option(
        metavar="X", help="Cut-off for the --all summary: a probability (0.5 when not "
                          "given) or, for regression, a predicted value.")] = None,
    format: Annotated[ReasonsFormat | None, typer.Option(
        "--format", metavar=choices(ReasonsFormat),
        help="table (terminal), json or csv; by the --out suffix when not given, "
                         "else the terminal.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write json (.json) or csv (.csv) here.")] = None,
    force: Force = False,
) -> None:
    """Why a row scores as it does: the features furthest below their best, in words."""
    from glassbox.core import artifact, formats
    from glassbox.core.files import check_output, table_kind
    from glassbox.core.rows import row_position
    from glassbox.core.schema import read_table
    from glassbox.explaining import reasons
    from glassbox.publishing.render import frame_table, reasons_view

    if sum([id_value is not None, index is not None, every]) != 1:
        raise OptionError("name the rows: --id ID, --index N or --all")
    written = formats.output_format(out, None if format is None else format.value,
                                    ("json", "csv"))
    check_output(out, table_kind(written, "reasons"), [model_file, data], force=force)
    model = artifact.load(model_file)
    frame = read_table(data)
    if every:
        table = reasons.reasons_table(model, frame, top, str(data))
        summary = reasons.principal_of(model, table, cutoff)
        if written == "table":
            stdout_console().print(frame_table(summary, title=PRINCIPAL_TITLE))
            stderr_console().print("per-row reasons: add --out FILE.csv or --format json")
            return
        text = formats.to_csv(table) if written == "csv" else json.dumps(
            {"rows": json.loads(formats.to_json(table)),
             "principal_reasons": json.loads(formats.to_json(summary))},
            indent=1, ensure_ascii=False) + "\n"
        emit(text, out, f"reasons for {len(table):,} row{'' if len(table) == 1 else 's'}")
        stderr_console().print(frame_table(summary, title=PRINCIPAL_TITLE))
        return
    position = row_position(frame, model.schema, id_value=id_value, index=index,
                            source=str(data))
    one = frame.iloc[[position]]
    table, found_rows = reasons.explain(model, one, top, str(data))
    found = found_rows[0]
    if written == "table":
        row = {k: v for k, v in table.iloc[0].items() if not str(k).startswith(
            ("reason_", "feature_", "gap_"))}
        scale = "log-odds" if model.link == "logit" else "prediction"
        stdout_console().print(reasons_view(row, found, scale))
        return
    if written == "csv":
        emit(formats.to_csv(table), out, "reasons")
        return
    record = {k: v for k, v in json.loads(formats.to_json(table))[0].items()
              if not k.startswith(("reason_", "feature_", "gap_"))}
    record["reasons"] = [{"feature": r.feature, "value": _plain_value(r.value), "gap": r.gap,
                          "text": r.text} for r in found]
    emit(json.dumps(record, indent=1, ensure_ascii=False) + "\n", out, "reasons")


def _plain_value(value: Any) -> Any:
    """A value for JSON: numpy scalars as Python ones, a missing value as null, a pair's
    two values as a list."""
    from glassbox.explaining import reasons

    if isinstance(value, tuple):
        return [_plain_value(v) for v in value]
    if reasons.is_missing(value):
        return None
    return value.item() if hasattr(value, "item") else value
