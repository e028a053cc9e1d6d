"""The `glassbox` command: parse arguments, call the library, render. No logic here."""

from __future__ import annotations

import functools
import sys
import warnings
from collections.abc import Callable
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer
from rich.console import Console

from glassbox import __version__, artifact, shapes
from glassbox.additive import score_table
from glassbox.artifact import write_atomic
from glassbox.errors import GlassboxError
from glassbox.fitting import fit_model, training_fit
from glassbox.render import error_text, fit_view, shapes_view, warning_text
from glassbox.schema import infer_schema, load_schema, read_table

app = typer.Typer(
    help="Fit glass-box additive models, read their tables, and score with them.",
    no_args_is_help=True, add_completion=False, pretty_exceptions_enable=False,
)
EXIT_USER_ERROR = 2


class Family(StrEnum):
    sparse = "sparse"


class TableFormat(StrEnum):
    table = "table"
    csv = "csv"
    markdown = "markdown"
    json = "json"


def _stdout() -> Console:
    return Console(highlight=False)


def _stderr() -> Console:
    return Console(stderr=True, highlight=False)


def friendly(command: Callable[..., Any]) -> Callable[..., Any]:
    """Turn the project's errors into one line and exit status 2; show warnings briefly."""
    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                result = command(*args, **kwargs)
            except GlassboxError as exc:
                _show_warnings(caught)
                _stderr().print(error_text(str(exc)), soft_wrap=True)
                raise typer.Exit(EXIT_USER_ERROR) from None
        _show_warnings(caught)
        return result
    return wrapper


def _show_warnings(caught: list[warnings.WarningMessage]) -> None:
    seen = set()
    for item in caught:
        if not issubclass(item.category, UserWarning) or str(item.message) in seen:
            continue
        seen.add(str(item.message))
        _stderr().print(warning_text(str(item.message)), soft_wrap=True)


def _emit(text: str, out: Path | None, what: str) -> None:
    """Text to a file (atomically) or to standard output."""
    if out is None:
        sys.stdout.write(text)
        return
    write_atomic(out, text)
    _stderr().print(f"wrote {what} to {out}")


def _version(value: bool) -> None:
    if value:
        print(f"glassbox {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True,
                                          help="Print the version and exit.")] = False,
) -> None:
    """Fit glass-box additive models, read their tables, and score with them."""


@app.command("schema")
@friendly
def schema_command(
    data: Annotated[Path, typer.Argument(help="CSV or Parquet file.")],
    target: Annotated[str, typer.Option(help="The column to predict.")],
    positive: Annotated[str | None, typer.Option(help="Positive label of the target.")] = None,
    id_column: Annotated[str | None, typer.Option("--id", help="Row id column.")] = None,
    out: Annotated[Path | None, typer.Option(help="Write the TOML here, not stdout.")] = None,
) -> None:
    """Infer a starter schema (TOML) from a data file, for you to check and edit."""
    frame = read_table(data)
    schema = infer_schema(frame, target, positive=positive, id_column=id_column)
    _emit(schema.to_toml(), out, "schema")


@app.command("fit")
@friendly
def fit_command(
    data: Annotated[Path, typer.Argument(help="CSV or Parquet file with the target.")],
    schema: Annotated[Path, typer.Option(help="Schema TOML file.")],
    out: Annotated[Path, typer.Option(help="Where to write the model file (JSON).")],
    family: Annotated[Family, typer.Option(help="Fitting family.")] = Family.sparse,
    max_features: Annotated[int | None, typer.Option(
        help="Sparse family: use at most this many features.", min=1)] = None,
) -> None:
    """Fit a glass-box model and write it as a JSON model file."""
    frame = read_table(data)
    spec = load_schema(schema)
    options = {} if max_features is None else {"max_features": max_features}
    model = fit_model(frame, spec, family.value, source=str(data), **options)
    artifact.save(model, out)
    _stderr().print(fit_view(model, training_fit(model, frame, str(data)), str(out)))


@app.command("score")
@friendly
def score_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    data: Annotated[Path, typer.Argument(help="CSV or Parquet file to score.")],
    out: Annotated[Path | None, typer.Option(help="Write the CSV here, not stdout.")] = None,
    contributions: Annotated[bool, typer.Option(
        help="Include each feature's contribution.")] = True,
) -> None:
    """Score rows: score (link scale), probability or prediction, contributions (CSV)."""
    model = artifact.load(model_file)
    frame = read_table(data)
    table = score_table(model, frame, str(data), contributions=contributions)
    _emit(shapes.to_csv(table), out, f"{len(table)} scored rows")


@app.command("shapes")
@friendly
def shapes_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    feature: Annotated[str | None, typer.Option(help="Only this feature.")] = None,
    format: Annotated[TableFormat, typer.Option(
        "--format", help="table (terminal), csv, markdown or json.")] = TableFormat.table,
    out: Annotated[Path | None, typer.Option(help="Write the file here, not stdout.")] = None,
) -> None:
    """Per-feature tables of what the model does, from the model file alone."""
    model = artifact.load(model_file)
    if format is TableFormat.table:
        names = [feature] if feature else list(shapes.summary(model)["feature"])
        tables = {name: shapes.term_table(model, name) for name in names}
        summary = shapes.summary(model)
        if feature:
            summary = summary[summary["feature"] == feature]
        _stdout().print(shapes_view(summary, tables))
        return
    _emit(shapes.write(shapes.all_tables(model, feature), format.value), out, "shape tables")


def main() -> None:
    """Console entry point."""
    app()
