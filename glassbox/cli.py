"""The `glassbox` command: parse arguments, call the library, render. No logic here.

Each command imports what it needs when it runs, so `glassbox --help` and `--version` load
no pandas, numpy or fitting library (`tests/test_startup.py`). The help is click's plain
text: typer's rich help alone costs about 0.2 s of start-up.
"""

from __future__ import annotations

import sys
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer

from glassbox import __version__
from glassbox.cli_support import (  # noqa: F401  (re-exported: recourse.cli and tests use them)
    DROP_HELP,
    JOBS_HELP,
    MAX_HELP_WIDTH,
    MAX_JOBS,
    MAX_REPEATS,
    MAX_SEED,
    MAX_TOP,
    Command,
    Force,
    Group,
    ModelArgument,
    SchemaOption,
    TrainingData,
    choices,
    console_run,
    emit,
    example,
    friendly,
    loading,
    parse_options,
    progress_note,
    stderr_console,
    stdout_console,
    version_option,
)
from glassbox.core.errors import OptionError
from glassbox.fitting.choices import BENCHMARKS, FAMILIES
from glassbox.guard import run_guarded


class WorkOrder(Group):
    """`glassbox --help` lists the commands in the order of the work."""

    order = ("schema", "fit", "compare", "score", "shapes", "reasons", "points", "report",
             "monitor", "changes", "export")


app = typer.Typer(
    help="Fit glass-box additive models, read their tables, and score with them.",
    no_args_is_help=True, add_completion=False, pretty_exceptions_enable=False,
    rich_markup_mode=None, cls=WorkOrder, context_settings={"max_content_width": MAX_HELP_WIDTH},
)

# the choices come from a light list beside the families, so a new family or benchmark
# appears here by itself without `--help` importing any of them
Family = StrEnum("Family", {name: name for name in FAMILIES})
Benchmark = StrEnum("Benchmark", {name: name for name in BENCHMARKS})
DEFAULT_FAMILY = Family("sparse")
DEFAULT_BENCHMARK = Benchmark("trees")
OPTION_HELP = ("A family setting (repeatable): NAME=VALUE for every family that takes it, "
               "FAMILY.NAME=VALUE for one; the settings and their defaults are listed below.")
FORMAT_RULE = "by the --out suffix when not given, else the terminal"
PAIRS_HELP = ("Pairwise terms: fit the N strongest pairs of features after the main effects, "
              "for a family that takes pairs (its pairs setting below); 0 fits none.")


class TableFormat(StrEnum):
    table = "table"
    csv = "csv"
    markdown = "markdown"
    json = "json"


class ScoreFormat(StrEnum):
    csv = "csv"
    json = "json"
    parquet = "parquet"


class SettingsHelp(Command):
    """A command whose help ends with every family's settings, read only when the help is
    shown (`glassbox.fitting.choices.settings_lines`), then its example line."""

    @property  # type: ignore[override]
    def epilog(self) -> str:
        from glassbox.fitting.choices import settings_lines

        return "\n\n".join(["Family settings and their defaults (--option):",
                            *settings_lines(), self._example])

    @epilog.setter
    def epilog(self, value: str | None) -> None:
        self._example = value or ""


@app.callback(epilog=example("glassbox fit loans.csv --schema loans.toml --out loans.json"))
def _main(
    version: Annotated[bool, version_option("glassbox", __version__)] = False,
) -> None:
    """Fit glass-box additive models, read their tables, and score with them."""


@app.command("schema", cls=Command, epilog=example(
    "glassbox schema loans.csv --target defaulted --out loans.toml"))
@friendly
def schema_command(
    data: Annotated[Path, typer.Argument(metavar="DATA", help="CSV or Parquet file.")],
    target: Annotated[str, typer.Option(metavar="COLUMN", help="The column to predict.")],
    positive: Annotated[str | None, typer.Option(
        metavar="VALUE", help="Positive label of the target.")] = None,
    id_column: Annotated[str | None, typer.Option(
        "--id", metavar="COLUMN", help="Row id column.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write the schema here (a .toml file), not to standard output.")
    ] = None,
    dates_as_age: Annotated[str | None, typer.Option(
        metavar="YYYY-MM-DD",
        help="Read date columns as their age in days on this date, not ignore them.")] = None,
    force: Force = False,
) -> None:
    """Infer a starter schema (TOML) from a data file, for you to check and edit.

    Standard error gets one line per thing to check: missing values per column, the
    `better` written and why, guessed-protected columns and columns to look at."""
    from glassbox.core import formats, guesses
    from glassbox.core.files import check_output
    from glassbox.core.inference import infer_schema
    from glassbox.core.schema import read_table

    check_output(out, "schema", [data], force=force)
    if out is not None:
        formats.suffix_format(out, ("toml",), override=False)
    frame = read_table(data)
    schema = infer_schema(frame, target, positive=positive, id_column=id_column,
                          dates_as_age=dates_as_age)
    emit(schema.to_toml(), out, "schema")
    from glassbox.publishing.render import notes_view

    stderr_console().print(notes_view(guesses.summary(schema.notes)))


@app.command("fit", cls=SettingsHelp, epilog=example(
    "glassbox fit loans.csv --schema loans.toml --out loans.json"))
@friendly
def fit_command(
    data: TrainingData,
    schema: SchemaOption,
    out: Annotated[Path, typer.Option(
        metavar="FILE", help="Where to write the model file (a .json file).")],
    family: Annotated[Family, typer.Option(
        metavar=choices(FAMILIES), help="Fitting family.")] = DEFAULT_FAMILY,
    max_features: Annotated[int | None, typer.Option(
        metavar="N", help="sparse: use at most this many features (sparse.max_features).",
        min=1)] = None,
    ensemble: Annotated[int | None, typer.Option(
        metavar="N", help="boosted: average this many seeds; the spread is the band "
                          "(boosted.ensemble).", min=1)] = None,
    pairs: Annotated[int, typer.Option(metavar="N", help=PAIRS_HELP, min=0)] = 0,
    option: Annotated[list[str] | None, typer.Option(
        "--option", metavar="NAME=VALUE", help=OPTION_HELP)] = None,
    drop_missing_target: Annotated[bool, typer.Option(
        "--drop-missing-target", help=DROP_HELP)] = False,
    force: Force = False,
) -> None:
    """Fit a glass-box model and write it as a JSON model file."""
    from glassbox.core import artifact, formats
    from glassbox.core.files import check_output
    from glassbox.core.schema import load_schema, read_table
    from glassbox.fitting import fit
    from glassbox.fitting.choices import apply_pairs, family_options
    from glassbox.publishing.render import fit_view

    check_output(out, "glassbox-model", [data, schema], force=force)
    formats.suffix_format(out, ("json",), override=False)
    options = family_options(option or [], (family.value,))[family.value]
    if max_features is not None:
        options["max_features"] = max_features
    if ensemble is not None:
        options["ensemble"] = ensemble
    apply_pairs({family.value: options}, pairs, (family.value,), every=True)
    frame = read_table(data)
    spec = load_schema(schema)
    if drop_missing_target:
        frame = fit.rows_with_target(frame, spec, str(data))
    with progress_note(f"fitting the {family.value} family on {len(frame):,} rows"):
        model = fit.fit_model(frame, spec, family.value, source=str(data), **options)
    artifact.save(model, out)
    stderr_console().print(fit_view(model, fit.training_fit(model, frame, str(data)),
                                    str(out)))


@app.command("score", cls=Command, epilog=example(
    "glassbox score loans.json applications.csv --out scores.csv"))
@friendly
def score_command(
    model_file: Annotated[Path | None, typer.Argument(
        metavar="MODEL", help="Model file (JSON); leave out when scoring with --points.",
        show_default=False)] = None,
    data: Annotated[Path | None, typer.Argument(
        metavar="DATA", help="CSV or Parquet file to score.", show_default=False)] = None,
    card_file: Annotated[Path | None, typer.Option(
        "--points", metavar="CARD",
        help="Score whole points with this points card (from glassbox points --out "
             "card.json) instead of a model.")] = None,
    format: Annotated[ScoreFormat | None, typer.Option(
        "--format", metavar=choices(ScoreFormat),
        help=f"csv, json (records) or parquet; {FORMAT_RULE} (CSV).")
    ] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write here (.csv, .parquet, .pq or .json), not to standard "
                             "output.")] = None,
    contributions: Annotated[bool, typer.Option(
        help="Include each feature's contribution.")] = True,
    force: Force = False,
) -> None:
    """Score rows with a model file, or with a points card (--points).

    Each row gets its score (link scale), its probability or prediction, the features it
    has no value for (when the model learned missing values) and each feature's
    contribution; with --points, its total points and each feature's points."""
    with loading():
        from glassbox.core import formats
        from glassbox.core.files import check_output
        from glassbox.core.schema import read_table

    model_file, data = _score_inputs(model_file, data, card_file)
    written = formats.output_format(out, None if format is None else format.value,
                                    ("csv", "parquet", "json"), terminal="csv")
    check_output(out, f"{written}-scores", [model_file, data, card_file], force=force)
    if card_file is not None:
        from glassbox.explaining import points

        card = points.load(card_file)
        table = points.score_points(card, read_table(data), str(data))
    else:
        with loading():
            from glassbox.core import artifact
            from glassbox.core.scores import score_table

        model = artifact.load(model_file)
        table = score_table(model, read_table(data), str(data), contributions=contributions)
    from glassbox.core.wording import plural

    emit(formats.table_file(table, written), out, plural(len(table), "scored row"))


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


@app.command("points", cls=Command, epilog=example(
    "glassbox points loans.json --data loans.csv --out card.json"))
@friendly
def points_command(
    model_file: Annotated[Path, typer.Argument(
        metavar="MODEL", help="Model file (JSON) of a classification model.")],
    base_score: Annotated[float, typer.Option(metavar="X", help="Points at the base odds.")
                          ] = 600.0,
    base_odds: Annotated[float, typer.Option(
        metavar="X", help="Odds of the good outcome (good:bad) that score the base score.")
    ] = 50.0,
    pdo: Annotated[float, typer.Option(metavar="X", help="Points to double the odds.")] = 20.0,
    tolerance: Annotated[float | None, typer.Option(
        metavar="X",
        help="Most a curve may move within one bin, in points (when not given: PDO / 20).")
    ] = None,
    cutoff: Annotated[float, typer.Option(
        metavar="X", help="Probability whose points the card states; decisions on either "
                          "side are compared with --data.")] = 0.5,
    data: Annotated[Path | None, typer.Option(
        metavar="DATA",
        help="Also measure how closely the card tracks the exact score on these rows.")
    ] = None,
    format: Annotated[TableFormat | None, typer.Option(
        "--format", metavar=choices(TableFormat),
        help="table (terminal), csv or markdown (the rows), json (the card file "
                         f"score --points reads); {FORMAT_RULE}.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write the card (.json) or its rows (.csv, .md) here.")] = None,
    pair: Annotated[list[str] | None, typer.Option(
        "--pair", metavar="NAME",
        help="Only this pair's points grid, named as the card names it, e.g. 'Income & "
             "Seniority' (repeatable); a rows file (.csv, .md) then holds its cells alone.")
    ] = None,
    force: Force = False,
) -> None:
    """Turn a classification model into a points card: whole points per bin or level."""
    from glassbox.core import artifact, formats
    from glassbox.core.files import check_output, table_kind
    from glassbox.core.schema import read_table
    from glassbox.explaining import points
    from glassbox.publishing.render import key_values, pair_grids_view, points_view

    written = formats.output_format(out, None if format is None else format.value,
                                    ("json", "csv", "markdown"))
    points.check_pair_output(pair, written)
    kind = "glassbox-points" if written == "json" else table_kind(written, "card")
    check_output(out, kind, [model_file, data], force=force)
    model = artifact.load(model_file)
    card = points.points_card(model, points.Scaling(base_score, base_odds, pdo), tolerance,
                              cutoff)
    if data is not None:
        card = points.with_fidelity(card, model, read_table(data), str(data))
    fidelity = None if card.fidelity is None else card.fidelity.summary()
    if pair and written == "table":
        stdout_console().print(pair_grids_view(points.pair_grids(card, pair)))
        return
    if written == "table":
        stdout_console().print(points_view(points.card_summary(card), points.card_table(card),
                                           fidelity, card.pairs))
        return
    if written == "json":
        text = points.dumps(card)
    else:
        text = formats.write(points.pair_rows(card, pair) if pair else
                             points.card_table(card), written)
    emit(text, out, "points card" if written == "json" else "points card rows")
    stderr_console().print(key_values(points.card_summary(card), title="Points card"))
    if fidelity is not None:
        stderr_console().print(key_values(fidelity, title="Card against the exact score"))


@app.command("shapes", cls=Command, epilog=example(
    "glassbox shapes loans.json --format csv --out tables --plot plots"))
@friendly
def shapes_command(
    model_file: ModelArgument,
    feature: Annotated[list[str] | None, typer.Option(
        metavar="NAME", help="Only this feature (repeatable).")] = None,
    pair: Annotated[list[str] | None, typer.Option(
        "--pair", metavar="NAME",
        help="Only this pairwise table, named as the summary names it, e.g. 'Income & "
             "Seniority' (repeatable; with no --feature and no --pair, every feature and "
             "pair).")] = None,
    format: Annotated[TableFormat | None, typer.Option(
        "--format", metavar=choices(TableFormat),
        help="table (terminal), csv, markdown or json; for a file, by the --out "
                         "suffix when not given; a folder needs it.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="A file (.csv, .md, .json) for all rows, or a folder (a name "
                             "with no suffix) for a summary and one file per feature and "
                             "pair. A file holds the features' rows, or with --pair alone "
                             "the pairs' cells (one line per cell).")
    ] = None,
    plot: Annotated[Path | None, typer.Option(
        metavar="DIR", help="Also write one PNG per feature and an importance overview.")
    ] = None,
    at: Annotated[str | None, typer.Option(
        "--at", metavar="VALUE",
        help="Mark the row this value of the one --feature falls in, and say what the "
             "term adds there; the row is never thinned away (the terminal table; missing "
             "or an empty value: the missing-value row).")] = None,
    force: Force = False,
) -> None:
    """Per-feature tables (and pictures) of what the model does, from the model file."""
    from glassbox.core import artifact, formats
    from glassbox.core.files import check_output, check_output_folder, table_kind
    from glassbox.explaining import shapes

    chosen = None if format is None else format.value
    as_folder = out is not None and (out.is_dir() or not out.suffix)
    if as_folder and chosen in (None, "table"):
        raise OptionError(f"--out {out} is a folder: give --format csv, markdown or json "
                          "for its files (or name a file ending in .csv, .md or .json)")
    written = chosen if as_folder else formats.output_format(out, chosen,
                                                             ("csv", "markdown", "json"))
    if at is not None:
        _check_at(at, feature or [], written)
    model = artifact.load(model_file)
    names = [] if pair and not feature else shapes.chosen_features(model, feature)
    pair_names = shapes.shown_pairs(model, feature, pair)
    marks = [] if at is None else [shapes.row_at(model, names[0], at)]
    if as_folder:
        table_files = [(name, table_kind(written, "shapes"))
                       for name in shapes.folder_names(names, written, pair_names)]
        check_output_folder(out, [model_file], table_files, force=force)
    else:
        check_output(out, table_kind(written, "shapes"), [model_file], force=force)
    if plot is not None:
        from glassbox.publishing import plots

        pictures = [(name, "png") for name in plots.picture_names(names, pair_names)]
        check_output_folder(plot, [model_file], pictures, force=force, option="--plot")
        with progress_note("drawing the shape functions"):
            paths = plots.write_plots(model, plot, names, pair_names)
        from glassbox.core.wording import plural

        stderr_console().print(f"wrote {plural(len(paths), 'picture')} to {plot}/")
    if written == "table":
        if plot is not None and not feature and not pair:
            return  # the pictures were asked for; name features to see tables too
        from glassbox.publishing.render import shapes_view

        tables = {name: shapes.term_table(model, name) for name in names}
        scale = "log-odds" if model.link == "logit" else "prediction"
        stdout_console().print(shapes_view(shapes.summary(model), tables, scale,
                                           marks=marks, model=model, pairs=pair_names))
        return
    if as_folder:
        paths = shapes.write_folder(model, out, written, feature, pair)
        from glassbox.core.wording import plural

        stderr_console().print(f"wrote {plural(len(paths), written + ' file')} to {out}/")
        return
    if pair and not feature:
        from glassbox.explaining.pair_shapes import all_pair_tables

        emit(formats.write(all_pair_tables(model, pair), written), out, "pair tables")
        return
    if pair_names:  # a file holds one kind of table: say where the pairs' cells are
        stderr_console().print(f"note: the file holds the features' rows; the pairs' cells "
                               f"({', '.join(pair_names)}) are written with --pair alone, or "
                               "in a folder")
    emit(formats.write(shapes.all_tables(model, names), written), out, "shape tables")


def _check_at(value: str, features: list[str], written: str) -> None:
    """--at marks a row of one feature's terminal table: one --feature, no file format."""
    if len(dict.fromkeys(features)) != 1:
        got = ("no --feature" if not features else
               f"{len(features)}: {', '.join(dict.fromkeys(features))}")
        raise OptionError(f"--at {value!r} marks a row of one feature's table: give exactly "
                          f"one --feature (got {got})")
    if written != "table":
        raise OptionError(f"--at {value!r} marks a row of the terminal table; a {written} "
                          "file holds every row already (leave out --at, or --format/--out)")


@app.command("report", cls=Command, epilog=example(
    "glassbox report loans.json --data loans.csv --out report"))
@friendly
def report_command(
    model_file: ModelArgument,
    data: Annotated[Path, typer.Option(
        metavar="DATA", help="CSV or Parquet file with the rows to report on.")],
    out: Annotated[Path, typer.Option(
        metavar="DIR", help="Folder for report.html, report.md and its pictures.")],
    comparison: Annotated[Path | None, typer.Option(
        metavar="FILE",
        help="A `glassbox compare --out FILE.json` file made on the model's training data.")
    ] = None,
    cutoff: Annotated[float | None, typer.Option(
        metavar="X", help="The cut-off: a probability (0.5 when not given) or, for "
                          "regression, a predicted value (required).")] = None,
    recourse: Annotated[Path | None, typer.Option(
        metavar="FILE",
        help="A `recourse reach --out FILE.json` file made with this model file.")] = None,
    min_group: Annotated[int, typer.Option(
        metavar="N", help="Groups with fewer rows are shown but not flagged.", min=1)] = 30,
    band: Annotated[list[str] | None, typer.Option(
        "--band", metavar="COLUMN=X",
        help="A band edge for a numeric protected column, e.g. --band Age=25 --band Age=35 "
             "(repeatable; a column named as an age gets customary bands).")] = None,
    force: Force = False,
) -> None:
    """A self-contained audit report (HTML and Markdown) of a model on a data file."""
    from glassbox.core import artifact
    from glassbox.core.files import check_output_folder
    from glassbox.core.schema import read_table
    from glassbox.explaining import groups
    from glassbox.publishing import report

    edges = groups.parse_bands(band or [])
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
    from glassbox.core.wording import plural

    stderr_console().print(f"wrote {paths[0]}, {paths[1].name} and "
                           f"{plural(len(paths) - 2, 'picture')}")


def main() -> None:
    """Console entry point: every ending is one line and an exit status (glassbox.guard)."""
    with console_run():
        status = run_guarded(app)
    sys.exit(status)


def _register(*modules: str) -> Any:
    """Import the modules that add commands to `app` (they import this one)."""
    import importlib

    return [importlib.import_module(f"glassbox.{name}") for name in modules]


_register("compare_cli", "reasons_cli", "monitor_cli", "changes_cli", "export_cli")
