"""The `glassbox compare` command: parse arguments, run the comparison, render.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

import contextlib
import json
from collections.abc import Callable, Iterator
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import (
    DEFAULT_BENCHMARK,
    DROP_HELP,
    JOBS_HELP,
    MAX_JOBS,
    MAX_REPEATS,
    MAX_SEED,
    OPTION_HELP,
    Benchmark,
    Family,
    Force,
    SchemaOption,
    SettingsHelp,
    TrainingData,
    app,
    choices,
    emit,
    example,
    friendly,
    stderr_console,
    stdout_console,
)
from glassbox.core.errors import OptionError

PAIRS_COMPARE_HELP = ("Pairwise terms: fit the N strongest pairs of features after the main "
                      "effects in each family that takes pairs (its pairs setting below; the "
                      "others are fitted without), and show the accuracy with 0, 1, 3, 10 "
                      "pairs up to N.")

BENCHMARK_BUDGET = 12  # glassbox.fitting.benchmark_search.DEFAULT_BUDGET (light to import here)

ALL_FAMILIES = list(Family)


class CompareFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


@app.command("compare", cls=SettingsHelp, epilog=example(
    "glassbox compare loans.csv --schema loans.toml --out compare.json"))
@friendly
def compare_command(
    ctx: typer.Context,
    data: TrainingData,
    schema: SchemaOption,
    family: Annotated[list[Family], typer.Option(
        "--family", metavar=choices(Family),
        help="A glass-box family to compare (repeatable).")] = ALL_FAMILIES,
    benchmark: Annotated[Benchmark, typer.Option(
        metavar=choices(Benchmark),
        help="The black box: boosted trees or a random forest.")] = DEFAULT_BENCHMARK,
    benchmark_budget: Annotated[int, typer.Option(
        metavar="N", help="trees: candidate settings tried in each training fold's search.",
        min=1)] = BENCHMARK_BUDGET,
    benchmark_scores: Annotated[Path | None, typer.Option(
        "--benchmark-scores", metavar="FILE",
        help="Your own black box instead: its out-of-fold scores (CSV or Parquet), one row "
             "per data row with the id column (the schema's id, else \"row\", the row "
             "number from 1) and score (with repeats: score_1, score_2, ...), a probability "
             "(regression: a prediction) from a fit on the other folds of --folds-out.")
    ] = None,
    folds_out: Annotated[Path | None, typer.Option(
        "--folds-out", metavar="FILE",
        help="Write the fold assignment here (.csv, .parquet or .json): each row's id and, "
             "per repeat, fold_1, fold_2, ... the fold (from 1) that holds it out.")
    ] = None,
    folds: Annotated[int, typer.Option(metavar="N", help="Cross-validation folds.", min=2)] = 5,
    repeats: Annotated[int, typer.Option(metavar="N", help="Repeats of the folds.", min=1,
                                         max=MAX_REPEATS)] = 1,
    seed: Annotated[int, typer.Option(metavar="N", help="Seed of the folds and the models.",
                                      min=0, max=MAX_SEED)] = 0,
    jobs: Annotated[int, typer.Option(metavar="N", help=JOBS_HELP, min=1, max=MAX_JOBS)] = 1,
    cutoff: Annotated[float, typer.Option(
        metavar="X", help="Probability cut-off for accuracy.")] = 0.5,
    max_features: Annotated[int | None, typer.Option(
        metavar="N", help="sparse: use at most this many features (sparse.max_features).",
        min=1)] = None,
    ensemble: Annotated[int | None, typer.Option(
        metavar="N", help="boosted: average this many seeds (boosted.ensemble).", min=1)
    ] = None,
    pairs: Annotated[int, typer.Option(metavar="N", help=PAIRS_COMPARE_HELP, min=0)] = 0,
    option: Annotated[list[str] | None, typer.Option(
        "--option", metavar="NAME=VALUE", help=OPTION_HELP)] = None,
    format: Annotated[CompareFormat | None, typer.Option(
        "--format", metavar=choices(CompareFormat),
        help="table (terminal), json or markdown; by the --out suffix when not "
                         "given, else the terminal.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write json (.json) or markdown (.md) here; the table is shown "
                             "too unless --format names the file's format.")] = None,
    drop_missing_target: Annotated[bool, typer.Option(
        "--drop-missing-target", help=DROP_HELP)] = False,
    force: Force = False,
) -> None:
    """Cross-validated accuracy cost of each glass-box family against a black box."""
    from glassbox.core import formats
    from glassbox.core.files import check_output
    from glassbox.fitting.choices import apply_pairs, family_options

    if seed + repeats - 1 > MAX_SEED:  # repeat r seeds its models with seed + r
        raise OptionError(f"--seed {seed} with --repeats {repeats} passes the largest seed, "
                          f"{MAX_SEED}: use a seed of at most {MAX_SEED - repeats + 1}")
    families = tuple(dict.fromkeys(f.value for f in family))
    options = family_options(option or [], families)
    for name, value, owner in (("max_features", max_features, "sparse"),
                               ("ensemble", ensemble, "boosted")):
        if value is not None:
            if owner not in families:
                raise OptionError(f"--{name.replace('_', '-')} is a {owner} setting, and "
                                  f"{owner} is not compared here (add --family {owner})")
            options[owner][name] = value
    apply_pairs(options, pairs, families, every=False)
    written = formats.output_format(out, None if format is None else format.value,
                                    ("json", "markdown"))
    check_output(out, "glassbox-comparison" if written == "json" else "markdown",
                 [data, schema, benchmark_scores], force=force)
    if folds_out is not None:
        from glassbox.core.files import check_not_an_input

        check_not_an_input(folds_out, [out], "--folds-out")
        folds_format = formats.table_format(folds_out, "--folds-out")
        check_output(folds_out, f"{folds_format}-folds", [data, schema, benchmark_scores],
                     force=force, option="--folds-out")
    # given on the command line (by its source's name: typer carries its own click)
    given = getattr(ctx.get_parameter_source("benchmark_budget"), "name", "") == "COMMANDLINE"
    if given and (benchmark.value != "trees" or benchmark_scores):
        raise OptionError(f"--benchmark-budget {benchmark_budget} sets the search of the trees "
                          "benchmark; "
                          + ("your scores are not searched" if benchmark_scores else
                             f"--benchmark {benchmark.value} has none"))
    if benchmark_scores is not None:
        if benchmark != DEFAULT_BENCHMARK:
            raise OptionError(f"--benchmark {benchmark.value} and --benchmark-scores "
                              f"{benchmark_scores}: give one black box, not both")
        if not benchmark_scores.is_file():
            raise OptionError(f"--benchmark-scores {benchmark_scores}: no such file")
        formats.suffix_format(benchmark_scores, ("csv", "parquet"), "--benchmark-scores",
                              override=False)
    from glassbox.core.schema import load_schema, read_table
    from glassbox.fitting import compare as comparing
    from glassbox.fitting.fit import rows_with_target

    settings = comparing.CompareSettings(
        families=families, benchmark=benchmark.value, benchmark_budget=benchmark_budget,
        folds=folds, repeats=repeats, seed=seed,
        jobs=jobs, cutoff=cutoff,
        family_options={name: chosen for name, chosen in options.items() if chosen},
        benchmark_scores=None if benchmark_scores is None else str(benchmark_scores),
        pair_steps=comparing.pair_steps_up_to(pairs))
    settings.check()
    frame = read_table(data)
    spec = load_schema(schema)
    if drop_missing_target:
        frame = rows_with_target(frame, spec, str(data))
    with fold_progress() as progress:
        result = comparing.compare(
            frame, spec, settings, source=str(data), progress=progress,
            folds_out=None if folds_out is None else
            (lambda table: write_folds(table, folds_out, folds_format)))
    if format is None:  # the terminal gets the table, and --out (if any) its own file
        from glassbox.publishing.render import comparison_view

        stdout_console().print(comparison_view(result))
        if out is None:
            return
    if written == "json":
        from glassbox.core.provenance import file_sha256

        document = result.to_dict()
        document["provenance"]["data_file_sha256"] = file_sha256(data)
        document["provenance"]["schema_file_sha256"] = file_sha256(schema)
        document["rerun"] = comparing.rerun_command(result.settings, data.name, schema.name)
        text = json.dumps(document, indent=1, ensure_ascii=False, allow_nan=False) + "\n"
    else:
        text = comparing.to_markdown(result)
    emit(text, out, "comparison")


def write_folds(table, path: Path, fmt: str) -> None:
    """The fold assignment to its file (before any fitting, so it is there to fit on)."""
    from glassbox.core.files import write_atomic
    from glassbox.core.formats import table_file

    write_atomic(path, table_file(table, fmt))


@contextlib.contextmanager
def fold_progress() -> Iterator[Callable[[int, int, str], None]]:
    """A progress bar over (model, fold) fits on standard error."""
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
    )

    columns = (TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
               TimeElapsedColumn())
    with Progress(*columns, console=stderr_console(), transient=True) as bar:
        task = bar.add_task("comparing", total=None)

        def update(done: int, total: int, label: str) -> None:
            text = "fitting every model on every fold" if done == 0 else f"finished {label}"
            bar.update(task, completed=done, total=total, description=text)

        yield update
