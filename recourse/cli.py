"""The `recourse` command: parse arguments, call the planner, render. No logic here.

Only typer and the shared command-line helpers load with this module, so `recourse --help`
and `recourse --version` start at once; each command imports what it needs when it runs
(planning one row loads neither dask nor pulp nor numba: `tests/test_recourse_cli.py`).
The help is click's plain text, as glassbox's is (typer's rich help costs start-up time).
"""

from __future__ import annotations

import functools
import sys
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer

from glassbox import __version__
from glassbox.cli_support import (
    MAX_HELP_WIDTH,
    Command,
    Force,
    Group,
    ModelArgument,
    choices,
    console_run,
    example,
    friendly,
    loading,
    stderr_console,
    stdout_console,
    version_option,
)
from recourse.choices import (
    DEFAULT_SOLVER,
    ENGINES,
    JOBS_HELP,
    MIN_GROUP,
    MOST_JOBS,
    MOST_PLANS,
    SOLVERS,
)


class WorkOrder(Group):
    """`recourse --help` lists the commands in the order of the work."""

    order = ("template", "plan", "reach")


app = typer.Typer(
    help="Plan the cheapest realistic changes that would flip a glass-box model's outcome.",
    no_args_is_help=True, add_completion=False, pretty_exceptions_enable=False,
    rich_markup_mode=None, cls=WorkOrder, context_settings={"max_content_width": MAX_HELP_WIDTH},
)
Solver = StrEnum("Solver", {name: name for name in SOLVERS})
Engine = StrEnum("Engine", {name: name for name in ENGINES})
SOLVER_CHOICE = Solver(DEFAULT_SOLVER)
SOLVER_HELP = ("exact: the search built for this program; highs or cbc: the same program as "
               "an integer program, one row at a time.")
MUTABILITY_HELP = "Mutability file (TOML): what may change, which way, at what cost."
OLD_NAME_NOTE = ("note: `recourse audit` is now `recourse reach`; the old name works in this "
                 "release only")


class PlanFormat(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"
    parquet = "parquet"


class ReachFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


SOLVER_CHOICES = choices(SOLVERS)


# each example fits on one line of 80 columns
PLAN_EXAMPLE = example("recourse plan loans.json --mutability rules.toml --row row.json")


@app.callback(epilog=PLAN_EXAMPLE)
def _main(
    version: Annotated[bool, version_option("recourse", __version__)] = False,
) -> None:
    """Plan the cheapest realistic changes that would flip a glass-box model's outcome."""


# each command's line in `recourse --help` fits whole at 60 columns (click cuts longer ones)
@app.command("template", cls=Command, short_help="A starting mutability file to edit.",
             epilog=example("recourse template loans.json --out rules.toml"))
@friendly
def template_command(
    model_file: ModelArgument,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write the mutability file here (a .toml file), not to "
                             "standard output; an existing file needs --force.")] = None,
    force: Force = False,
) -> None:
    """Write a starting mutability file (every feature fixed) to edit by hand."""
    from glassbox.core import artifact
    from glassbox.core.files import check_not_an_input, check_output, write_atomic
    from glassbox.core.formats import suffix_format
    from recourse.mutability import template

    if out is not None:
        check_not_an_input(out, [model_file])
        suffix_format(out, ("toml",), override=False)
        # a mutability file is edited by hand: any file there is the user's (--force)
        check_output(out, "mutability-template", [model_file], force=force)
    text = template(artifact.load(model_file))
    if out is None:
        sys.stdout.write(text)
        return
    write_atomic(out, text)
    stderr_console().print(f"wrote a starting mutability file to {out}; edit it before "
                           "planning", markup=False)


@app.command("plan", cls=Command, short_help="Plans for one row or every declined row.",
             epilog=PLAN_EXAMPLE)
@friendly
def plan_command(
    model_file: ModelArgument,
    mutability: Annotated[Path, typer.Option(metavar="FILE", help=MUTABILITY_HELP)],
    row: Annotated[Path | None, typer.Option(
        metavar="FILE", help="One row as a JSON object of feature values.")] = None,
    data: Annotated[Path | None, typer.Option(
        metavar="DATA", help="CSV or Parquet file of rows.")] = None,
    id_value: Annotated[str | None, typer.Option(
        "--id", metavar="ID", help="Plan for the row of --data with this id.")] = None,
    index: Annotated[int | None, typer.Option(
        metavar="N", help="Plan for the N-th row of --data, counting from 1.", min=1)] = None,
    declined: Annotated[bool, typer.Option(
        "--declined", help="Plan for every row of --data that misses the goal.")] = False,
    plans: Annotated[int, typer.Option(
        metavar="N", help="Distinct plans per row.", min=1, max=MOST_PLANS)] = 3,
    solver: Annotated[Solver, typer.Option(metavar=SOLVER_CHOICES, help=SOLVER_HELP)
                      ] = SOLVER_CHOICE,
    format: Annotated[PlanFormat | None, typer.Option(
        "--format", metavar=choices(PlanFormat),
        help="One row: table (the terminal) or json. --declined: csv or json (csv when not "
             "given). With --out it overrides the suffix.",
        show_default=False)] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write the plans here, the format by the suffix: one row's as "
                             ".json; --declined's as .csv, .parquet, .pq or .json (one row "
                             "per plan).")] = None,
    jobs: Annotated[int, typer.Option(
        metavar="N", help=f"{JOBS_HELP} For --declined.", min=1, max=MOST_JOBS)] = 1,
    force: Force = False,
) -> None:
    """Plans for one row (--row, --id or --index) or for all declined rows (--declined)."""
    with loading():
        from glassbox.core.files import check_not_an_input, check_output
        from glassbox.core.formats import output_format

    check_not_an_input(out, [model_file, mutability, row, data])
    chosen = None if format is None else format.value
    written = (output_format(out, chosen, ("csv", "json", "parquet"), terminal="csv")
               if declined else output_format(out, chosen, ("json",)))
    kinds = {"csv": "csv-plans", "json": "json" if declined else "recourse-plans",
             "parquet": "parquet"}
    check_output(out, kinds.get(written, written), [model_file, mutability, row, data],
                 force=force)
    if declined:
        _plan_declined(model_file, mutability, data, plans, solver.value, jobs, written, out)
    else:
        _plan_one(model_file, mutability, row, data, id_value, index, plans, solver.value,
                  written, out)


def _plan_one(model_file: Path, mutability: Path, row: Path | None, data: Path | None,
              id_value: str | None, index: int | None, plans: int, solver: str,
              written: str, out: Path | None) -> None:
    with loading():
        from glassbox.core import artifact
        from recourse.mutability import load_mutability
        from recourse.planner import find_plans, plan_json
        from recourse.rows import pick_row

    model = artifact.load(model_file)
    rules = load_mutability(mutability, model)
    raw, row_id = pick_row(model, row=row, data=data, id_value=id_value, index=index)
    result = find_plans(model, raw, rules, n_plans=plans, solver=solver, row_id=row_id)
    if written == "json":
        _write(plan_json(result), out, f"the plans for row {row_id}")
        return
    with loading():
        from recourse.views import result_view

    stdout_console().print(result_view(model, result))


def _plan_declined(model_file: Path, mutability: Path, data: Path | None, plans: int,
                   solver: str, jobs: int, written: str, out: Path | None) -> None:
    from glassbox.core import artifact
    from glassbox.core.files import write_atomic
    from glassbox.core.formats import table_file
    from glassbox.core.schema import read_table
    from recourse.batch import plan_many, plans_frame
    from recourse.mutability import load_mutability
    from recourse.views import declined_view

    model = artifact.load(model_file)
    rules = load_mutability(mutability, model)
    frame = read_table(data) if data is not None else None
    results = plan_many(model, frame, rules, n_plans=plans, solver=solver, jobs=jobs,
                        progress=True, source=str(data))
    table = plans_frame(results, model)
    content = b"".join(table_file(table, written))
    if out is not None:
        write_atomic(out, content)
        rows = "1 plan row" if len(table) == 1 else f"{len(table):,} plan rows"
        stderr_console().print(f"wrote {rows} to {out}", markup=False)
    else:
        sys.stdout.write(content.decode("utf-8"))
    stderr_console().print(declined_view(results))


def _write(text: str, out: Path | None, what: str) -> None:
    """Text to `out` (saying so on standard error), else to standard output."""
    if out is None:
        sys.stdout.write(text)
        return
    from glassbox.core.files import write_atomic

    write_atomic(out, text)
    stderr_console().print(f"wrote {what} to {out}", markup=False, highlight=False)


def reach_command(
    model_file: ModelArgument,
    mutability: Annotated[Path, typer.Option(metavar="FILE", help=MUTABILITY_HELP)],
    data: Annotated[Path, typer.Option(metavar="DATA", help="CSV or Parquet file of rows.")],
    by: Annotated[list[str] | None, typer.Option(
        metavar="COLUMN", help="Group by this column: a protected column, a region...; "
                               "repeat it for more (--by a --by b).")] = None,
    jobs: Annotated[int, typer.Option(
        metavar="N", help=JOBS_HELP, min=1, max=MOST_JOBS)] = 1,
    engine: Annotated[Engine, typer.Option(
        metavar=choices(Engine),
        help="local: processes on this machine; dask: a dask.distributed cluster (with "
             "--jobs workers, or --scheduler's).")] = Engine.local,
    scheduler: Annotated[str | None, typer.Option(
        metavar="ADDRESS", help="dask: the address of an existing scheduler (else one "
                                "starts for the run).")] = None,
    plans_out: Annotated[Path | None, typer.Option(
        metavar="DIR", help="Keep every row's outcome as Parquet parts here (for "
                            "--resume); their row numbers count from 1.")] = None,
    resume: Annotated[bool, typer.Option(
        "--resume", help="With --plans-out: plan only the partitions not yet written.")
    ] = False,
    partition_rows: Annotated[int, typer.Option(
        metavar="N", help="Rows per partition.", min=1)] = 10_000,
    solver: Annotated[Solver, typer.Option(metavar=SOLVER_CHOICES, help=SOLVER_HELP)
                      ] = SOLVER_CHOICE,
    format: Annotated[ReachFormat | None, typer.Option(
        "--format", metavar=choices(ReachFormat),
        help="table (the terminal, when not given), json or markdown; with --out it "
             "overrides the suffix.", show_default=False)] = None,
    out: Annotated[Path | None, typer.Option(
        metavar="FILE", help="Write the summary here, the format by the suffix: .json or "
                             ".md.")] = None,
    min_group: Annotated[int, typer.Option(
        metavar="N", help="Groups with fewer declined rows are shown but not flagged.",
        min=1)] = MIN_GROUP,
    force: Force = False,
) -> None:
    """Across every declined row: who can reach the goal, at what cost, and by group."""
    from glassbox.core.files import check_not_an_input, check_output, check_output_folder
    from glassbox.core.formats import output_format
    from recourse.errors import PlanningError

    check_not_an_input(out, [model_file, mutability, data])
    written = output_format(out, None if format is None else format.value,
                            ("json", "markdown"))
    if resume and plans_out is None:
        raise PlanningError("--resume needs --plans-out DIR (where the finished parts are)")
    inputs = [model_file, mutability, data]
    check_output(out, "recourse-reach" if written == "json" else written, inputs, force=force)
    from recourse.manifest import PARTS_FOLDER_FILES

    check_output_folder(plans_out, inputs, option="--plans-out", also=PARTS_FOLDER_FILES)
    from glassbox.core import artifact
    from recourse import reach
    from recourse.mutability import load_mutability
    from recourse.scale import plan_at_scale

    model = artifact.load(model_file)
    rules = load_mutability(mutability, model)
    groups = list(by or [])
    try:
        run = plan_at_scale(model, rules, data, engine=engine.value, jobs=jobs,
                            scheduler=scheduler, out=plans_out, resume=resume, keep=groups,
                            n_plans=1, solver=solver.value, partition_rows=partition_rows,
                            progress=True, say=lambda line: stderr_console().print(
                                line, markup=False, highlight=False, soft_wrap=True))
    except KeyboardInterrupt:  # the last line of defence prints these words, status 130
        raise KeyboardInterrupt("interrupted; rerun with --resume" if plans_out is not None
                                else "interrupted") from None
    run.check_complete()
    context = reach.run_context(model, rules, model_file=model_file, data=data,
                          mutability_file=mutability, engine=engine.value, run=run,
                          resume=resume)
    result = reach.reach(run.outcomes, by=groups, context=context, min_group=min_group)
    if written == "table":
        from recourse.views import reach_view

        stdout_console().print(reach_view(result))
        return
    text = reach.to_json(result) if written == "json" else reach.to_markdown(result)
    _write(text, out, f"the reach summary of {result.declined:,} declined rows")


app.command("reach", cls=Command, short_help="Who reaches the goal, at what cost, by group.",
            epilog=example(
    "recourse reach loans.json --mutability rules.toml --data loans.csv"))(
    friendly(reach_command))


def _old_name(command: Any) -> Any:
    """`recourse audit`, the old name of `recourse reach`: the same command, with one line
    on standard error naming the new one (kept for one release)."""
    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        sys.stderr.write(OLD_NAME_NOTE + "\n")
        return command(*args, **kwargs)
    return wrapper


app.command("audit", cls=Command, hidden=True)(friendly(_old_name(reach_command)))


def main() -> None:
    """Console entry point: every ending is one line and an exit status (glassbox.guard)."""
    from glassbox.guard import run_guarded

    with console_run():
        status = run_guarded(app)
    sys.exit(status)
