"""The `glassbox` command: parse arguments, call the library, render. No logic here."""

from __future__ import annotations

import contextlib
import functools
import json
import sys
import warnings
from collections.abc import Callable, Iterable, Iterator
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer
from rich.console import Console
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    TextColumn,
    TimeElapsedColumn,
)

from glassbox import __version__
from glassbox.core import artifact, formats, guesses
from glassbox.core.additive import score_table
from glassbox.core.errors import GlassboxError, OptionError
from glassbox.core.files import check_output, check_output_folder, table_kind, write_atomic
from glassbox.core.inference import infer_schema
from glassbox.core.provenance import file_sha256
from glassbox.core.rows import row_position
from glassbox.core.schema import load_schema, read_table
from glassbox.explaining import points, reasons, shapes
from glassbox.explaining.groups import MIN_GROUP
from glassbox.fitting.benchmarks import BENCHMARKS
from glassbox.fitting.compare import (
    CompareSettings,
    compare,
    rerun_command,
)
from glassbox.fitting.compare import to_markdown as compare_markdown
from glassbox.fitting.families import FAMILIES
from glassbox.fitting.fit import fit_model, rows_with_target, training_fit
from glassbox.guard import EXIT_USER_ERROR, Interrupted, run_guarded, show_error
from glassbox.publishing import plots
from glassbox.publishing.render import (
    comparison_view,
    fit_view,
    frame_table,
    key_values,
    points_view,
    reasons_view,
    shapes_view,
    warning_text,
)

app = typer.Typer(
    help="Fit glass-box additive models, read their tables, and score with them.",
    no_args_is_help=True, add_completion=False, pretty_exceptions_enable=False,
)
# bounds of numeric options: a value past them is refused before any work (issue 13)
MAX_SEED = 2**32 - 1  # numpy's and scikit-learn's largest seed
MAX_REPEATS = 1000  # repeats of the folds; each is a full cross-validation
MAX_JOBS = 256  # processes side by side; more than the fits to run would only wait
MAX_TOP = 1000  # reasons per row; a model has one reason at most per feature
DROP_HELP = "Drop rows with no target value (counted on screen) instead of refusing the file."
Force = Annotated[bool, typer.Option(
    "--force", help="Overwrite an existing output file of another kind (a CSV, a model "
                    "file...). An input is never overwritten.")]


# the choices come from the library, so a new family or benchmark appears here by itself
Family = StrEnum("Family", {name: name for name in FAMILIES})
Benchmark = StrEnum("Benchmark", {name: name for name in BENCHMARKS})
DEFAULT_FAMILY = Family("sparse")
DEFAULT_BENCHMARK = Benchmark("trees")


class TableFormat(StrEnum):
    table = "table"
    csv = "csv"
    markdown = "markdown"
    json = "json"


def stdout_console() -> Console:
    return Console(highlight=False)


def stderr_console() -> Console:
    return Console(stderr=True, highlight=False)


def friendly(command: Callable[..., Any]) -> Callable[..., Any]:
    """Turn the project's errors into one line and exit status 2; show warnings briefly.

    Anything else goes on to the last line of defence (`glassbox.guard.run_guarded`)."""
    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                result = command(*args, **kwargs)
            except GlassboxError as exc:
                _show_warnings(caught)
                show_error(str(exc))
                raise typer.Exit(EXIT_USER_ERROR) from None
            except KeyboardInterrupt as exc:
                _show_warnings(caught)
                raise Interrupted(*exc.args) from None
            except BaseException:
                _show_warnings(caught)
                raise
        _show_warnings(caught)
        return result
    return wrapper


def _show_warnings(caught: list[warnings.WarningMessage]) -> None:
    seen = set()
    for item in caught:
        if not issubclass(item.category, UserWarning) or str(item.message) in seen:
            continue
        seen.add(str(item.message))
        stderr_console().print(warning_text(str(item.message)), soft_wrap=True)


def emit(text: str | Iterable[bytes], out: Path | None, what: str) -> None:
    """Text (or UTF-8 text in parts) to a file (atomically) or to standard output."""
    if out is None:
        sys.stdout.writelines([text] if isinstance(text, str) else (p.decode() for p in text))
        return
    write_atomic(out, text)
    stderr_console().print(f"wrote {what} to {out}", highlight=False)


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
    dates_as_age: Annotated[str | None, typer.Option(
        metavar="YYYY-MM-DD",
        help="Read date columns as their age in days on this date, not ignore them.")] = None,
    force: Force = False,
) -> None:
    """Infer a starter schema (TOML) from a data file, for you to check and edit.

    Standard error gets one line per thing to check: missing values per column, the
    `better` written and why, guessed-protected columns and columns to look at."""
    check_output(out, "schema", [data], force=force)
    frame = read_table(data)
    schema = infer_schema(frame, target, positive=positive, id_column=id_column,
                          dates_as_age=dates_as_age)
    emit(schema.to_toml(), out, "schema")
    for line in guesses.summary(schema.notes):
        stderr_console().print(line, soft_wrap=True, markup=False, highlight=False)


@app.command("fit")
@friendly
def fit_command(
    data: Annotated[Path, typer.Argument(help="CSV or Parquet file with the target.")],
    schema: Annotated[Path, typer.Option(help="Schema TOML file.")],
    out: Annotated[Path, typer.Option(help="Where to write the model file (JSON).")],
    family: Annotated[Family, typer.Option(help="Fitting family.")] = DEFAULT_FAMILY,
    max_features: Annotated[int | None, typer.Option(
        help="sparse: use at most this many features.", min=1)] = None,
    ensemble: Annotated[int | None, typer.Option(
        help="boosted: average this many seeds; the spread is the band.", min=1)] = None,
    option: Annotated[list[str] | None, typer.Option(
        "--option", metavar="NAME=VALUE",
        help="Any family setting, e.g. --option splines=12 (repeatable).")] = None,
    drop_missing_target: Annotated[bool, typer.Option(help=DROP_HELP)] = False,
    force: Force = False,
) -> None:
    """Fit a glass-box model and write it as a JSON model file."""
    check_output(out, "glassbox-model", [data, schema], force=force)
    options = parse_options(option or [])
    if max_features is not None:
        options["max_features"] = max_features
    if ensemble is not None:
        options["ensemble"] = ensemble
    frame = read_table(data)
    spec = load_schema(schema)
    if drop_missing_target:
        frame = rows_with_target(frame, spec, str(data))
    with progress_note(f"fitting the {family.value} family on {len(frame):,} rows"):
        model = fit_model(frame, spec, family.value, source=str(data), **options)
    artifact.save(model, out)
    stderr_console().print(fit_view(model, training_fit(model, frame, str(data)), str(out)))


@app.command("score")
@friendly
def score_command(
    model_file: Annotated[Path | None, typer.Argument(
        metavar="MODEL", help="Model file (JSON); leave out when scoring with --points.",
        show_default=False)] = None,
    data: Annotated[Path | None, typer.Argument(
        metavar="DATA", help="CSV or Parquet file to score.", show_default=False)] = None,
    card_file: Annotated[Path | None, typer.Option(
        "--points", metavar="CARD",
        help="Score whole points with this points card (from glassbox points --format json) "
             "instead of a model.")] = None,
    out: Annotated[Path | None, typer.Option(help="Write here (.csv, .parquet or .json "
                                                  "records), not stdout (CSV).")] = None,
    contributions: Annotated[bool, typer.Option(
        help="Include each feature's contribution.")] = True,
    force: Force = False,
) -> None:
    """Score rows: score (link scale), probability or prediction, the features a row has
    no value for (when the model learned missing values), contributions; or, with --points,
    total points and each feature's points. CSV, Parquet or JSON by the --out suffix."""
    model_file, data = _score_inputs(model_file, data, card_file)
    written = "csv" if out is None else formats.table_format(out)  # before any work
    check_output(out, f"{written}-scores", [model_file, data, card_file], force=force)
    if card_file is not None:
        card = points.load(card_file)
        table = points.score_points(card, read_table(data), str(data))
    else:
        model = artifact.load(model_file)
        frame = read_table(data)
        table = score_table(model, frame, str(data), contributions=contributions)
    emit(formats.table_file(table, written), out, f"{len(table)} scored rows")


def _score_inputs(first: Path | None, second: Path | None,
                  card_file: Path | None) -> tuple[Path | None, Path]:
    """`score MODEL DATA` or `score --points CARD DATA`: exactly one of MODEL and CARD."""
    given = [path for path in (first, second) if path is not None]
    if card_file is None and len(given) == 2:
        return given[0], given[1]
    if card_file is not None and len(given) == 1:
        return None, given[0]
    if card_file is not None and len(given) == 2:
        raise OptionError(f"score takes a MODEL or --points {card_file}, not both "
                          f"(got the model {given[0]})")
    if card_file is not None:
        raise OptionError("score --points CARD needs a DATA file to score")
    raise OptionError("score needs a MODEL and a DATA file, or --points CARD and a DATA file")


@app.command("points")
@friendly
def points_command(
    model_file: Annotated[Path, typer.Argument(
        metavar="MODEL", help="Model file (JSON) of a classification model.")],
    base_score: Annotated[float, typer.Option(help="Points at the base odds.")] = 600.0,
    base_odds: Annotated[float, typer.Option(
        help="Odds of the good outcome (good:bad) that score the base score.")] = 50.0,
    pdo: Annotated[float, typer.Option(help="Points to double the odds.")] = 20.0,
    tolerance: Annotated[float | None, typer.Option(
        metavar="POINTS",
        help="Most a curve may move within one bin, in points [default: PDO / 20].")] = None,
    cutoff: Annotated[float, typer.Option(
        help="Probability whose points the card states; decisions on either side are "
             "compared with --data.")] = points.DEFAULT_CUTOFF,
    data: Annotated[Path | None, typer.Option(
        help="Also measure how closely the card tracks the exact score on these rows.")
    ] = None,
    format: Annotated[TableFormat, typer.Option(
        "--format", help="table (terminal), csv or markdown (the rows), json (the card file "
                         "score --points reads).")] = TableFormat.table,
    out: Annotated[Path | None, typer.Option(help="Write the card or its rows here.")] = None,
    force: Force = False,
) -> None:
    """Turn a classification model into a points card: whole points per bin or level."""
    if format is TableFormat.table and out is not None:
        raise OptionError("--out needs a file format: add --format json, csv or markdown")
    written = "glassbox-points" if format is TableFormat.json else table_kind(format.value,
                                                                                "card")
    check_output(out, written, [model_file, data], force=force)
    model = artifact.load(model_file)
    card = points.points_card(model, points.Scaling(base_score, base_odds, pdo), tolerance,
                              cutoff)
    if data is not None:
        card = points.with_fidelity(card, model, read_table(data), str(data))
    fidelity = None if card.fidelity is None else card.fidelity.summary()
    if format is TableFormat.table:
        stdout_console().print(points_view(points.card_summary(card), points.card_table(card),
                                           fidelity))
        return
    if format is TableFormat.json:
        text = points.dumps(card)
    else:
        text = formats.write(points.card_table(card), format.value)
    emit(text, out, "points card" if format is TableFormat.json else "points card rows")
    stderr_console().print(key_values(points.card_summary(card), title="Points card"))
    if fidelity is not None:
        stderr_console().print(key_values(fidelity, title="Card against the exact score"))


@app.command("shapes")
@friendly
def shapes_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    feature: Annotated[list[str] | None, typer.Option(
        help="Only this feature (repeatable).")] = None,
    format: Annotated[TableFormat, typer.Option(
        "--format", help="table (terminal), csv, markdown or json.")] = TableFormat.table,
    out: Annotated[Path | None, typer.Option(
        help="A file for all rows, or a folder for a summary and one file per feature.")
    ] = None,
    plot: Annotated[Path | None, typer.Option(
        metavar="DIR", help="Also write one PNG per feature and an importance overview.")
    ] = None,
    force: Force = False,
) -> None:
    """Per-feature tables (and pictures) of what the model does, from the model file."""
    if format is TableFormat.table and out is not None:
        raise OptionError("--out needs a file format: add --format csv, markdown or json")
    model = artifact.load(model_file)
    names = shapes.chosen_features(model, feature)
    as_folder = out is not None and (out.is_dir() or not out.suffix)
    if as_folder:
        written = table_kind(format.value, "shapes")
        table_files = [(name, written) for name in shapes.folder_names(names, format.value)]
        check_output_folder(out, [model_file], table_files, force=force)
    else:
        check_output(out, table_kind(format.value, "shapes"), [model_file], force=force)
    pictures = [(name, "png") for name in plots.picture_names(names)]
    check_output_folder(plot, [model_file], pictures, force=force, option="--plot")
    if plot is not None:
        with progress_note("drawing the shape functions"):
            paths = plots.write_plots(model, plot, names)
        stderr_console().print(f"wrote {len(paths)} picture(s) to {plot}/")
    if format is TableFormat.table:
        if plot is not None and not feature:
            return  # the pictures were asked for; name features to see tables too
        tables = {name: shapes.term_table(model, name) for name in names}
        scale = "log-odds" if model.link == "logit" else "prediction"
        stdout_console().print(shapes_view(shapes.summary(model), tables, scale))
        return
    if as_folder:
        paths = shapes.write_folder(model, out, format.value, names)
        stderr_console().print(f"wrote {len(paths)} {format.value} file(s) to {out}/")
        return
    emit(formats.write(shapes.all_tables(model, names), format.value), out, "shape tables")


class CompareFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


@app.command("compare")
@friendly
def compare_command(
    data: Annotated[Path, typer.Argument(help="CSV or Parquet file with the target.")],
    schema: Annotated[Path, typer.Option(help="Schema TOML file.")],
    families: Annotated[str, typer.Option(
        help="Comma-separated glass-box families.")] = "sparse,spline,boosted",
    benchmark: Annotated[Benchmark, typer.Option(
        help="The black box: boosted trees or a random forest.")] = DEFAULT_BENCHMARK,
    folds: Annotated[int, typer.Option(help="Cross-validation folds.", min=2)] = 5,
    repeats: Annotated[int, typer.Option(help="Repeats of the folds.", min=1,
                                         max=MAX_REPEATS)] = 1,
    seed: Annotated[int, typer.Option(help="Seed of the folds and the models.", min=0,
                                      max=MAX_SEED)] = 0,
    jobs: Annotated[int, typer.Option(help="Folds fitted in parallel.", min=1,
                                      max=MAX_JOBS)] = 1,
    cutoff: Annotated[float, typer.Option(
        help="Probability cut-off for accuracy.")] = 0.5,
    format: Annotated[CompareFormat, typer.Option(
        "--format", help="table (terminal), json or markdown.")] = CompareFormat.table,
    out: Annotated[Path | None, typer.Option(
        help="Write json or markdown here (with the table: by the .json or .md suffix).")
    ] = None,
    drop_missing_target: Annotated[bool, typer.Option(help=DROP_HELP)] = False,
    force: Force = False,
) -> None:
    """Cross-validated accuracy cost of each glass-box family against a black box."""
    if seed + repeats - 1 > MAX_SEED:  # repeat r seeds its models with seed + r
        raise OptionError(f"--seed {seed} with --repeats {repeats} passes the largest seed, "
                          f"{MAX_SEED}: use a seed of at most {MAX_SEED - repeats + 1}")
    settings = CompareSettings(
        families=tuple(f.strip() for f in families.split(",") if f.strip()),
        benchmark=benchmark.value, folds=folds, repeats=repeats, seed=seed, jobs=jobs,
        cutoff=cutoff)
    settings.check()
    by_suffix = {".json": CompareFormat.json, ".md": CompareFormat.markdown}
    if format is CompareFormat.table and out is not None and out.suffix.lower() not in by_suffix:
        raise OptionError(f"--out {out}: name a .json or .md file, or give --format")
    written = by_suffix[out.suffix.lower()] if format is CompareFormat.table and out else format
    check_output(out, "glassbox-comparison" if written is CompareFormat.json else "markdown",
                 [data, schema], force=force)
    frame = read_table(data)
    spec = load_schema(schema)
    if drop_missing_target:
        frame = rows_with_target(frame, spec, str(data))
    with fold_progress() as progress:
        result = compare(frame, spec, settings, source=str(data), progress=progress)
    if format is CompareFormat.table:
        stdout_console().print(comparison_view(result))
        if out is None:
            return
        # with the table shown, --out keeps a file too, in the format its suffix names
        format = by_suffix[out.suffix.lower()]
    if format is CompareFormat.json:
        document = result.to_dict()
        document["provenance"]["data_file_sha256"] = file_sha256(data)
        document["provenance"]["schema_file_sha256"] = file_sha256(schema)
        document["rerun"] = rerun_command(result.settings, data.name, schema.name)
        text = json.dumps(document, indent=1, ensure_ascii=False, allow_nan=False) + "\n"
    else:
        text = compare_markdown(result)
    emit(text, out, "comparison")


class ReasonsFormat(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


@app.command("reasons")
@friendly
def reasons_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    data: Annotated[Path, typer.Argument(help="CSV or Parquet file with the rows.")],
    id_value: Annotated[str | None, typer.Option("--id", help="The row with this id.")] = None,
    index: Annotated[int | None, typer.Option(help="The N-th data row, from 1.")] = None,
    every: Annotated[bool, typer.Option("--all", help="Every row, and a summary.")] = False,
    top: Annotated[int, typer.Option(help="Reasons per row.", min=1, max=MAX_TOP)] = 4,
    cutoff: Annotated[float | None, typer.Option(
        help="Cut-off for the --all summary: a probability (default 0.5) or, for "
             "regression, a predicted value.")] = None,
    format: Annotated[ReasonsFormat, typer.Option(
        "--format", help="table (terminal), json or csv.")] = ReasonsFormat.table,
    out: Annotated[Path | None, typer.Option(help="Write json or csv here.")] = None,
    force: Force = False,
) -> None:
    """Why a row scores as it does: the features furthest below their best, in words."""
    if sum([id_value is not None, index is not None, every]) != 1:
        raise OptionError("name the rows: --id VALUE, --index N or --all")
    if format is ReasonsFormat.table and out is not None:
        raise OptionError("--out needs --format json or csv")
    check_output(out, table_kind(format.value, "reasons"), [model_file, data], force=force)
    model = artifact.load(model_file)
    frame = read_table(data)
    if every:
        table = reasons.reasons_table(model, frame, top, str(data))
        summary = reasons.principal_of(model, table, cutoff)
        if format is ReasonsFormat.table:
            stdout_console().print(frame_table(summary, title="Principal reasons among rows on the "
                                                       "unfavourable side of the cut-off"))
            stderr_console().print("per-row reasons: add --format csv or json (and --out FILE)")
            return
        text = formats.to_csv(table) if format is ReasonsFormat.csv else json.dumps(
            {"rows": json.loads(formats.to_json(table)),
             "principal_reasons": json.loads(formats.to_json(summary))},
            indent=1, ensure_ascii=False) + "\n"
        emit(text, out, f"reasons for {len(table)} rows")
        stderr_console().print(frame_table(summary, title="Principal reasons among rows on the "
                                                   "unfavourable side of the cut-off"))
        return
    position = row_position(frame, model.schema, id_value=id_value, index=index,
                            source=str(data))
    one = frame.iloc[[position]]
    table, found_rows = reasons.explain(model, one, top, str(data))
    found = found_rows[0]
    if format is ReasonsFormat.table:
        row = {k: v for k, v in table.iloc[0].items() if not str(k).startswith(
            ("reason_", "feature_", "gap_"))}
        scale = "log-odds" if model.link == "logit" else "prediction"
        stdout_console().print(reasons_view(row, found, scale))
        return
    if format is ReasonsFormat.csv:
        emit(formats.to_csv(table), out, "reasons")
        return
    record = {k: v for k, v in json.loads(formats.to_json(table))[0].items()
              if not k.startswith(("reason_", "feature_", "gap_"))}
    record["reasons"] = [{"feature": r.feature, "value": _plain_value(r.value), "gap": r.gap,
                          "text": r.text} for r in found]
    emit(json.dumps(record, indent=1, ensure_ascii=False) + "\n", out, "reasons")


def _plain_value(value: Any) -> Any:
    """A value for JSON: numpy scalars as Python ones, a missing value as null."""
    if reasons.is_missing(value):
        return None
    return value.item() if hasattr(value, "item") else value


@app.command("report")
@friendly
def report_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    data: Annotated[Path, typer.Option(help="CSV or Parquet file with the rows to report on.")],
    out: Annotated[Path, typer.Option(
        metavar="DIR", help="Folder for report.html, report.md and its pictures.")],
    comparison: Annotated[Path | None, typer.Option(
        help="A `glassbox compare --format json` file made on the model's training data.")
    ] = None,
    cutoff: Annotated[float | None, typer.Option(
        help="The cut-off: a probability (default 0.5) or, for regression, a predicted "
             "value (required).")] = None,
    recourse: Annotated[Path | None, typer.Option(
        metavar="AUDIT.json",
        help="A `recourse audit --format json` file made with this model file.")] = None,
    min_group: Annotated[int, typer.Option(
        metavar="N", help="Groups with fewer rows are shown but not flagged.", min=1)] = MIN_GROUP,
    bands: Annotated[list[str] | None, typer.Option(
        "--bands", metavar="COLUMN=EDGE,...",
        help="Band edges for a numeric protected column, e.g. Age=25,35,45,55,65 "
             "(repeatable; a column named as an age gets these customary bands).")] = None,
    force: Force = False,
) -> None:
    """A self-contained audit report (HTML and Markdown) of a model on a data file."""
    from glassbox.explaining import groups
    from glassbox.publishing import report

    edges = groups.parse_bands(bands or [])
    inputs = [model_file, data, comparison, recourse]
    check_output_folder(out, inputs, report.output_files(), force=force)
    model = artifact.load(model_file)
    frame = read_table(data)
    with progress_note("drawing the report"):
        document = report.build_report(model, frame, model_file=model_file,
                                       comparison_file=comparison, cutoff=cutoff,
                                       source=str(data), recourse_file=recourse,
                                       min_group=min_group, bands=edges)
        check_output_folder(out, inputs, report.output_files(document), force=force)
        paths = report.write_report(document, out)
    stderr_console().print(f"wrote {paths[0]}, {paths[1].name} and {len(paths) - 2} picture(s)")


@contextlib.contextmanager
def fold_progress() -> Iterator[Callable[[int, int, str], None]]:
    """A progress bar over (model, fold) fits on standard error."""
    columns = (TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
               TimeElapsedColumn())
    with Progress(*columns, console=stderr_console(), transient=True) as bar:
        task = bar.add_task("comparing", total=None)

        def update(done: int, total: int, label: str) -> None:
            text = "fitting every model on every fold" if done == 0 else f"finished {label}"
            bar.update(task, completed=done, total=total, description=text)

        yield update


def parse_options(pairs: list[str]) -> dict[str, Any]:
    """NAME=VALUE pairs; values read as JSON when they parse (numbers, lists, true)."""
    options: dict[str, Any] = {}
    for pair in pairs:
        name, equals, text = pair.partition("=")
        if not equals or not name.strip():
            raise OptionError(f"--option takes NAME=VALUE, not {pair!r}")
        try:
            value = json.loads(text)
        except json.JSONDecodeError:
            value = text
        options[name.strip().replace("-", "_")] = value
    return options


@contextlib.contextmanager
def progress_note(message: str) -> Iterator[None]:
    """A spinner on standard error while a long step runs (nothing when not a terminal)."""
    console = stderr_console()
    if not console.is_terminal:
        yield
        return
    with console.status(message):
        yield


def main() -> None:
    """Console entry point: every ending is one line and an exit status (glassbox.guard)."""
    sys.exit(run_guarded(app))


from glassbox import changes_cli as _changes_cli  # noqa: E402,F401  registers `glassbox changes`
from glassbox import export_cli as _export_cli  # noqa: E402,F401  registers `glassbox export`
from glassbox import monitor_cli as _monitor_cli  # noqa: E402,F401  registers `glassbox monitor`
