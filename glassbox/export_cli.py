"""The `glassbox export` command: a model or a points card as SQL or PMML 4.4.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import Command, Force, app, choices, emit, example, friendly
from glassbox.core.errors import OptionError


class ExportFormat(StrEnum):
    sql = "sql"
    pmml = "pmml"


@app.command("export", cls=Command, epilog=example(
    "glassbox export loans.json --table loans --out score.sql"))
@friendly
def export_command(
    model_file: Annotated[Path | None, typer.Argument(
        metavar="MODEL", help="Model file (JSON); leave out when exporting --points.",
        show_default=False)] = None,
    format: Annotated[ExportFormat | None, typer.Option(
        "--format", metavar=choices(ExportFormat),
        help="sql: one SELECT that scores the rows of a table; pmml: a PMML 4.4 "
                         "document (the open standard for exchanging models); by the --out "
                         "suffix (.sql, .pmml) when not given.")] = None,
    sql: Annotated[bool, typer.Option("--sql", hidden=True, help="--format sql.")] = False,
    pmml: Annotated[bool, typer.Option("--pmml", hidden=True, help="--format pmml.")] = False,
    card_file: Annotated[Path | None, typer.Option(
        "--points", metavar="CARD",
        help="Export this points card (glassbox points --format json) instead of a model.")
    ] = None,
    table: Annotated[str, typer.Option(
        metavar="NAME",
        help="SQL: the table to score: NAME or SCHEMA.NAME (split at dots; each part is "
             "quoted, so write it as stored, capitals and spaces included).")
    ] = "applications",
    id_column: Annotated[str | None, typer.Option(
        "--id", metavar="COLUMN",
        help="SQL: the column that names each row (default: the schema's id column).")
    ] = None,
    contributions: Annotated[bool, typer.Option(
        "--contributions",
        help="SQL: also each feature's contribution (points, for a card).")] = False,
    reasons: Annotated[int, typer.Option(
        metavar="N", min=0,
        help="SQL: also the N features that hold each row furthest below its best.")] = 0,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write here (.sql or .pmml), not to standard output.")] = None,
    force: Force = False,
) -> None:
    """A model or a points card to run where the data lives: one SQL query, or PMML 4.4."""
    from glassbox.core import formats
    from glassbox.core.files import check_output

    shorthand = [name for name, given in (("sql", sql), ("pmml", pmml)) if given]
    if len(shorthand) > 1 or (shorthand and format is not None):
        raise OptionError("export writes one format: give one of --format, --sql, --pmml")
    chosen = formats.output_format(
        out, shorthand[0] if shorthand else None if format is None else format.value,
        ("sql", "pmml"), terminal=None)
    sql, pmml = chosen == "sql", chosen == "pmml"
    if (model_file is None) == (card_file is None):
        raise OptionError("export takes a MODEL file or --points CARD (exactly one)")
    if pmml and (contributions or reasons or id_column is not None):
        raise OptionError("--contributions, --reasons and --id apply to --sql only")
    check_output(out, "sql" if sql else "pmml", [model_file, card_file], force=force)
    from glassbox.core import artifact
    from glassbox.explaining import points

    if sql:
        from glassbox.publishing import sql_export

        if card_file is not None:
            text = sql_export.card_sql(points.load(card_file), table=table, id_column=id_column,
                                       contributions=contributions, reasons=reasons)
        else:
            text = sql_export.model_sql(artifact.load(model_file), table=table,
                                        id_column=id_column, contributions=contributions,
                                        reasons=reasons)
    else:
        from glassbox.publishing import pmml_export

        text = (pmml_export.card_pmml(points.load(card_file)) if card_file is not None
                else pmml_export.model_pmml(artifact.load(model_file)))
    emit(text, out, f"the {'SQL' if sql else 'PMML'} export")
