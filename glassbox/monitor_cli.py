"""The `glassbox monitor` command: parse arguments, call the monitoring engine, render.

Registered on the `glassbox` app from the end of cli.py; no logic here.
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Callable, Iterator
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import (
    JOBS_HELP,
    MAX_JOBS,
    Command,
    Force,
    ModelArgument,
    app,
    choices,
    example,
    friendly,
    progress_note,
    stderr_console,
    stdout_console,
)
from glassbox.reasons_cli import ReasonsFormat

MonitorFormat = ReasonsFormat  # the same choices: table (terminal), json, csv
# the choices the engine takes (glassbox.explaining.monitor checks them again)
Every = StrEnum("Every", {name: name for name in ("month", "quarter", "year")})
MonitorEngine = StrEnum("MonitorEngine", {name: name for name in ("local", "dask")})
LOCAL = MonitorEngine("local")


@app.command("monitor", cls=Command, epilog=example(
    "glassbox monitor loans.json q2.csv q3.csv --page monitoring.html"))
@friendly
def monitor_command(
    model_file: ModelArgument,
    data: Annotated[list[Path], typer.Argument(
        metavar="DATA", help="CSV or Parquet files, one period each in the order given "
                                "(or one file with --period).")],
    period: Annotated[str | None, typer.Option(
        metavar="COLUMN", help="One file: its periods are this column's values.")] = None,
    every: Annotated[Every | None, typer.Option(metavar=choices(Every),
        help="With --period on a column of ISO dates: group the dates by month, quarter "
             "or year.")] = None,
    baseline: Annotated[Path | None, typer.Option(
        metavar="DATA", help="The development sample as a data file, instead of the "
                             "baseline stored in the model file.")] = None,
    card_file: Annotated[Path | None, typer.Option(
        "--points", metavar="CARD",
        help="A points card of the model (glassbox points --format json): changes are "
             "also given in points.")] = None,
    format: Annotated[MonitorFormat | None, typer.Option(
        "--format", metavar=choices(MonitorFormat),
        help="table (terminal), json (every table) or csv (the features, and a model's "
                         "pairs marked by the kind column, with their period's summary); by "
                         "the --out suffix when not given, else the terminal.")] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write json (.json) or csv (.csv) here.")] = None,
    page: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Also write a self-contained HTML page with pictures (a .html "
                             "file).")] = None,
    engine: Annotated[MonitorEngine, typer.Option(metavar=choices(MonitorEngine),
        help="local: this machine (with --jobs, in worker processes); dask: a "
             "dask.distributed cluster. Every engine gives the same numbers.")] = LOCAL,
    jobs: Annotated[int, typer.Option(metavar="N", help=JOBS_HELP, min=1, max=MAX_JOBS)] = 1,
    scheduler: Annotated[str | None, typer.Option(
        metavar="ADDRESS",
        help="dask: the address of an existing scheduler (else one starts for the run).")
    ] = None,
    chunk_rows: Annotated[int, typer.Option(
        metavar="N", help="Rows read at a time (memory stays about constant).", min=1)
    ] = 200_000,
    force: Force = False,
) -> None:
    """Later periods against the development sample: stability, drift and outcomes.

    Score and feature stability (PSI), what moved the mean score, attribution drift,
    missing values and new levels, and outcomes when the files have them.
    """
    from glassbox.core import artifact, formats
    from glassbox.core.files import check_output, table_kind, write_atomic

    chosen = formats.output_format(out, None if format is None else format.value,
                                   ("json", "csv"))
    inputs = [model_file, *data, baseline, card_file]
    written = "glassbox-monitoring" if chosen == "json" else table_kind(chosen, "monitoring")
    check_output(out, written, inputs, force=force)
    check_output(page, "html", [*inputs, out], force=force, option="--page")
    if page is not None:
        formats.suffix_format(page, ("html",), option="--page", override=False)
    from glassbox.explaining import points
    from glassbox.explaining.baseline import baseline_from_file, model_baseline
    from glassbox.explaining.monitor import monitor
    from glassbox.publishing import monitor_files, monitor_page, monitor_view

    model = artifact.load(model_file)
    card = None if card_file is None else points.load(card_file)
    development = (model_baseline(model, f"model file {model_file}") if baseline is None
                   else baseline_from_file(model, baseline))
    with block_progress(chunk_rows) as progress:
        result = monitor(model, list(data), period=period,
                         every=None if every is None else every.value, baseline=development,
                         card=card, engine=engine.value, jobs=jobs, scheduler=scheduler,
                         chunk_rows=chunk_rows, progress=progress)
    if page is not None:
        with progress_note("drawing the monitoring page"):
            document = monitor_page.build_page(result, model_name=f"Model file {model_file.name}",
                                               link=model.link,
                                               inputs=[str(path) for path in data])
            monitor_page.write_page(document, page)
        stderr_console().print(f"wrote the monitoring page to {page}", highlight=False)
    if chosen == "table":
        console = stdout_console()
        console.print(monitor_view.monitoring_view(result, max(console.width, 40)))
        return
    if chosen == "json":
        context = {"model_file": model_file.name, "data_files": [path.name for path in data],
                   "period_column": period, "every": None if every is None else every.value,
                   "baseline_file": None if baseline is None else baseline.name,
                   "points_card": None if card_file is None else card_file.name}
        text = monitor_files.to_json(result, context)
    else:
        text = monitor_files.to_monitoring_csv(result)
    if out is None:
        sys.stdout.write(text)
        return
    write_atomic(out, text)
    stderr_console().print(f"wrote the monitoring {chosen} to {out}", highlight=False)


@contextlib.contextmanager
def block_progress(chunk_rows: int) -> Iterator[Callable[[int, int | None], None] | None]:
    """Blocks counted so far, on standard error (nothing when it is not a terminal)."""
    console = stderr_console()
    if not console.is_terminal:
        yield None
        return
    from rich.progress import Progress, TextColumn, TimeElapsedColumn

    from glassbox.core.wording import plural

    with Progress(TextColumn("{task.description}"), TimeElapsedColumn(), console=console,
                  transient=True) as bar:
        task = bar.add_task("reading the first block", total=None)

        def update(done: int, total: int | None = None) -> None:
            bar.update(task, description=f"counted {plural(done, 'block')} of up to "
                                         f"{chunk_rows:,} rows")

        yield update
