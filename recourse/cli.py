"""The `recourse` command: parse arguments, call the planner, render. No logic here."""

from __future__ import annotations

import json
import re
import sys
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from glassbox.cli import Force, friendly, stderr_console, stdout_console
from glassbox.core import artifact
from glassbox.core.files import check_output, check_output_folder, write_atomic
from glassbox.core.formats import to_csv
from glassbox.core.provenance import file_sha256
from glassbox.core.schema import read_table
from glassbox.explaining.groups import MIN_GROUP
from glassbox.guard import run_guarded
from recourse import audit
from recourse.batch import MOST_JOBS, plan_many, plans_frame
from recourse.errors import PlanningError
from recourse.manifest import MANIFEST
from recourse.mutability import load_mutability, template
from recourse.planner import MOST_PLANS, find_plans, plan_records
from recourse.program import DEFAULT_SOLVER, SOLVERS
from recourse.rows import pick_row
from recourse.scale import ENGINES, plan_at_scale
from recourse.views import audit_view, declined_view, result_view

app = typer.Typer(
    help="Plan the cheapest realistic changes that would flip a glass-box model's outcome.",
    no_args_is_help=True, add_completion=False, pretty_exceptions_enable=False,
)
Solver = StrEnum("Solver", {name: name for name in SOLVERS})
SOLVER_CHOICE = Solver(DEFAULT_SOLVER)
SOLVER_HELP = ("exact: the search built for this program (the default); highs or cbc: the "
               "same program as an integer program, one row at a time.")
# what --plans-out holds: the parts and the manifest (which the planner itself checks)
PLANS_FOLDER_FILES = re.compile(rf"part-.*\.parquet|{re.escape(MANIFEST)}")


class PlanFormat(StrEnum):
    table = "table"
    json = "json"


@app.callback()
def _main() -> None:
    """Plan the cheapest realistic changes that would flip a glass-box model's outcome."""


@app.command("template")
@friendly
def template_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
) -> None:
    """Write a starting mutability file (every feature fixed) to standard output."""
    sys.stdout.write(template(artifact.load(model_file)))


@app.command("plan")
@friendly
def plan_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    mutability: Annotated[Path, typer.Option(help="Mutability file (TOML).")],
    row: Annotated[Path | None, typer.Option(help="One row as a JSON object.")] = None,
    data: Annotated[Path | None, typer.Option(help="CSV or Parquet file of rows.")] = None,
    id_value: Annotated[str | None, typer.Option("--id", help="The row with this id.")] = None,
    index: Annotated[int | None, typer.Option(
        help="The N-th data row, counting from 1.", min=1)] = None,
    declined: Annotated[bool, typer.Option(
        help="Plan for every row of --data that misses the goal.")] = False,
    plans: Annotated[int, typer.Option(help="Distinct plans per row.", min=1,
                                       max=MOST_PLANS)] = 3,
    solver: Annotated[Solver, typer.Option(help=SOLVER_HELP)] = SOLVER_CHOICE,
    format: Annotated[PlanFormat, typer.Option(
        "--format", help="table (terminal) or json.")] = PlanFormat.table,
    out: Annotated[Path | None, typer.Option(
        help="Batch: write one CSV row per plan here.")] = None,
    jobs: Annotated[int, typer.Option(help="Batch: rows planned in parallel.", min=1,
                                      max=MOST_JOBS)] = 1,
    force: Force = False,
) -> None:
    """Plans for one row (--row, --id or --index) or for all declined rows (--declined)."""
    if out is not None and not declined:
        raise PlanningError("--out is for --declined (one CSV row per plan); for one row, "
                            "use --format json and redirect standard output")
    check_output(out, "csv-plans", [model_file, mutability, row, data], force=force)
    model = artifact.load(model_file)
    rules = load_mutability(mutability, model)
    if declined:
        frame = read_table(data) if data is not None else None
        results = plan_many(model, frame, rules, n_plans=plans, solver=solver.value,
                            jobs=jobs, progress=True, source=str(data))
        table = plans_frame(results, model)
        if out is not None:
            write_atomic(out, to_csv(table))
            stderr_console().print(f"wrote {len(table)} plan row(s) to {out}")
        else:
            sys.stdout.write(to_csv(table))
        stderr_console().print(declined_view(results))
        return
    raw, row_id = pick_row(model, row=row, data=data, id_value=id_value, index=index)
    result = find_plans(model, raw, rules, n_plans=plans, solver=solver.value, row_id=row_id)
    if format is PlanFormat.json:
        sys.stdout.write(json.dumps(plan_records(result), indent=1, ensure_ascii=False) + "\n")
        return
    stdout_console().print(result_view(model, result))


class AuditFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


Engine = StrEnum("Engine", {name: name for name in ENGINES})


@app.command("audit")
@friendly
def audit_command(
    model_file: Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")],
    mutability: Annotated[Path, typer.Option(help="Mutability file (TOML).")],
    data: Annotated[Path, typer.Option(help="CSV or Parquet file of rows.")],
    by: Annotated[list[str] | None, typer.Option(
        help="Group the audit by this column (repeatable): a protected column, a region...")
    ] = None,
    jobs: Annotated[int, typer.Option(help="Workers (processes) planning at once.",
                                      min=1, max=MOST_JOBS)] = 1,
    engine: Annotated[Engine, typer.Option(
        help="local: a process pool here; dask: a dask.distributed cluster.")] = Engine.local,
    scheduler: Annotated[str | None, typer.Option(
        help="dask: the address of an existing scheduler (else one starts for the run).")
    ] = None,
    plans_out: Annotated[Path | None, typer.Option(
        metavar="DIR", help="Keep every row's outcome as Parquet parts here (for --resume).")
    ] = None,
    resume: Annotated[bool, typer.Option(
        help="With --plans-out: plan only the partitions not yet written.")] = False,
    partition_rows: Annotated[int, typer.Option(help="Rows per partition.", min=1)] = 10_000,
    solver: Annotated[Solver, typer.Option(help=SOLVER_HELP)] = SOLVER_CHOICE,
    format: Annotated[AuditFormat, typer.Option(
        "--format", help="table (terminal), json or markdown.")] = AuditFormat.table,
    out: Annotated[Path | None, typer.Option(help="Write json or markdown here.")] = None,
    min_group: Annotated[int, typer.Option(
        metavar="N", help="Groups with fewer declined rows are shown but not flagged.",
        min=1)] = MIN_GROUP,
    force: Force = False,
) -> None:
    """Across every declined row: who can reach the goal, at what cost, and by group."""
    if resume and plans_out is None:
        raise PlanningError("--resume needs --plans-out DIR (where the finished parts are)")
    if format is AuditFormat.table and out is not None:
        raise PlanningError("--out needs --format json or markdown")
    inputs = [model_file, mutability, data]
    check_output(out, "recourse-audit" if format is AuditFormat.json else "markdown", inputs,
                 force=force)
    check_output_folder(plans_out, inputs, option="--plans-out", also=PLANS_FOLDER_FILES)
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
    if run.missing:
        raise PlanningError(f"{len(run.missing)} of {run.partitions} partition(s) did not "
                            f"finish (numbers {', '.join(map(str, run.missing[:10]))}); rerun "
                            "with --resume to plan only those")
    goal = rules.goal
    what = (f"a probability of {model.schema.target.column} = {model.schema.target.positive}"
            if model.link == "logit" else f"a predicted {model.schema.target.column}")
    context = {"model_file": str(model_file), "model_file_sha256": file_sha256(model_file),
               "data_file": str(data), "data_file_sha256": file_sha256(data),
               "mutability_file": str(mutability),
               "goal": f"{what} {goal.direction.replace('-', ' ')} {goal.target:g}",
               "goal_direction": goal.direction, "goal_target": goal.target,
               "margin": goal.margin, "engine": engine.value, "partitions": run.partitions}
    if resume:
        context["resume"] = {"parts_kept": run.partitions - len(run.planned),
                             "parts_replanned": run.replanned, "files_ignored": run.ignored}
    result = audit.audit(run.outcomes, by=groups, context=context, min_group=min_group)
    if format is AuditFormat.table:
        stdout_console().print(audit_view(result))
        return
    text = audit.to_json(result) if format is AuditFormat.json else audit.to_markdown(result)
    if out is None:
        sys.stdout.write(text)
        return
    write_atomic(out, text)
    stderr_console().print(f"wrote the audit of {result.declined:,} declined rows to {out}")


def main() -> None:
    """Console entry point: every ending is one line and an exit status (glassbox.guard)."""
    sys.exit(run_guarded(app))
