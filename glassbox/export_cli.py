"""The `glassbox export` command: a model or a points card as SQL or PMML 4.4.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import Force, app, emit, friendly
from glassbox.core.errors import OptionError
from glassbox.core.files import check_output


@app.command("export")
@friendly
def export_command(
    model_file: Annotated[Path | None, typer.Argument(
        metavar="MODEL", help="Model file (JSON); leave out when exporting --points.",
        show_default=False)] = None,
    sql: Annotated[bool, typer.Option(
        "--sql", help="One SELECT that scores the rows of a table.")] = False,
    pmml: Annotated[bool, typer.Option(
        "--pmml", help="A PMML 4.4 document (the open standard for exchanging models).")
    ] = False,
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
        metavar="K", min=0,
        help="SQL: also the K features that hold each row furthest below its best.")] = 0,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write here, not to standard output.")] = None,
    force: Force = False,
) -> None:
    """A model or a points card to run where the data lives: one SQL query, or PMML 4.4.

    Example: glassbox export model.json --sql --table loans --out score.sql
    """
    if sql == pmml:
        raise OptionError("export needs exactly one of --sql and --pmml")
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
