"""Plans for a whole population, partition by partition, on this machine or a dask cluster.

The unit of work is `plan_partition`: a pure function from a block of raw rows
(with their 0-based position in the whole file in a column `row`) to one
outcome row per declined row. Engines only decide where partitions run:

- "local": a process pool on this machine (one process per job; jobs=1 plans in-process);
- "dask":  `dask.dataframe` partitions on a `dask.distributed` cluster, an existing one
           (a scheduler address) or one started for the run.

With an output folder every finished partition is written at once as its own
Parquet file, listed in a manifest with its checksum (`recourse.manifest`), so a
run that loses a worker can be finished with `resume`: only the partitions
without a part that passes every check are planned again. Before the outcomes
are returned, their row numbers are checked to be exactly the file's declined
rows, each once. Results do not depend on the engine, the number of jobs or the
partition size. Planning processes ignore SIGINT (the main process handles it)
and end when the main process dies.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, CancelledError, Future, wait
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from glassbox.core import artifact
from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import DataError, GlassboxError, OptionError
from glassbox.core.provenance import file_sha256
from glassbox.core.wording import noun, plural
from glassbox.core.workers import become_worker, pool_running, sigint_held
from recourse.batch import (
    OUTCOME_COLUMNS,
    outcome_frame,
    plan_typed_rows,
    progress_bar,
    typed_declined,
)
from recourse.choices import ENGINES
from recourse.errors import PlanningError
from recourse.manifest import MANIFEST_KIND, PartsFolder, mutability_checksum
from recourse.mutability import Mutability
from recourse.program import DEFAULT_SOLVER, SOLVERS
from recourse.source import (
    Source,
    dask_frame,
    dask_read_error,
    dask_session,
    open_source,
    read_blocks,
    renumbered,
)

CONNECT_SECONDS = 5  # how long to try an existing dask scheduler before giving up
TEXT_COLUMNS = ("status", "changes", "main_change", "binding_rule", "message", "handed_off")
NUMBER_COLUMNS = ("score", "outcome", "total_cost", "largest_cost", "new_outcome",
                  "best_outcome")


@dataclass(frozen=True)
class ScaleRun:
    """The outcomes of a population run, sorted by `row`, and which partitions are missing."""

    outcomes: pd.DataFrame
    partitions: int
    missing: tuple[int, ...] = ()  # partitions that did not finish: rerun with resume
    planned: tuple[int, ...] = ()  # partitions planned by this call (the others were on disk)
    notes: tuple[str, ...] = ()  # resume: parts planned again (a failed check), files ignored
    replanned: int = 0  # resume: parts found that failed a check
    ignored: int = 0  # resume: files in the folder that the manifest does not list

    @property
    def complete(self) -> bool:
        return not self.missing

    def check_complete(self) -> None:
        """Refuse to summarise a run with partitions that did not finish."""
        if self.missing:
            raise PlanningError(f"{len(self.missing)} of {plural(self.partitions, 'partition')} "
                                f"did "
                                f"not finish (numbers {', '.join(map(str, self.missing[:10]))}"
                                "); rerun with --resume to plan only those")


# ---------------------------------------------------------------- one partition


def plan_partition(partition: pd.DataFrame, model: AdditiveModel, mutability: Mutability, *,
                   n_plans: int = 1, solver: str = DEFAULT_SOLVER, keep: Sequence[str] = (),
                   source: str | None = None) -> pd.DataFrame:
    """One outcome row per declined row of `partition`: `row`, the outcome columns of
    `recourse.batch.outcome_frame`, then the `keep` columns copied from the input.

    Pure and deterministic; the same rows give the same frame in any process. `source`
    names the input file in error messages.
    """
    keep = _checked_keep(keep)
    if "row" not in partition.columns:
        raise DataError("a partition needs a column 'row': each row's 0-based position in "
                        "the whole input")
    absent = [name for name in keep if name not in partition.columns]
    if absent:
        raise OptionError(f"{noun(len(absent), 'column')} to keep (--by) "
                          f"{', '.join(map(repr, absent))} "
                          "not in the data")
    if len(partition):
        positions, encoded, parts, ids = _declined(partition, model, mutability, source)
        results = plan_typed_rows(model, encoded, parts, ids, mutability, n_plans, solver)
    else:
        positions, results = np.array([], dtype=np.int64), []
    return _typed_outcomes(outcome_frame(results, model), partition, positions, model, keep)


def _declined(partition: pd.DataFrame, model: AdditiveModel, mutability: Mutability,
              source: str | None) -> tuple[np.ndarray, pd.DataFrame, pd.DataFrame, list]:
    """`recourse.batch.typed_declined` on a block; the data rows its errors name are
    counted in the whole file (from 1, header not counted), not within the block."""
    numbers = partition["row"].to_numpy(dtype=np.int64)
    try:
        return typed_declined(model, partition, mutability, source, numbers=numbers)
    except GlassboxError as exc:
        raise renumbered(exc, numbers) from None


def _checked_keep(keep: Sequence[str]) -> tuple[str, ...]:
    keep = tuple(dict.fromkeys(keep))
    clashing = [name for name in keep if name in ("row", *OUTCOME_COLUMNS)]
    if clashing:
        raise OptionError(f"keep {noun(len(clashing), 'column')} "
                          f"{', '.join(map(repr, clashing))} would clash with "
                          "an outcome column of the same name")
    return keep


def _typed_outcomes(table: pd.DataFrame, partition: pd.DataFrame, positions: np.ndarray,
                    model: AdditiveModel, keep: tuple[str, ...]) -> pd.DataFrame:
    """Fixed column types, so partitions (empty ones too) concatenate and compare exactly."""
    table = table.reset_index(drop=True)
    table.insert(0, "row", partition["row"].to_numpy(dtype=np.int64)[positions])
    id_column = model.schema.id_column
    id_type = partition[id_column].dtype if id_column in partition else np.dtype("int64")
    table["id"] = table["id"].astype(id_type)
    for name in TEXT_COLUMNS:
        table[name] = table[name].astype(str)
    for name in NUMBER_COLUMNS:
        table[name] = table[name].astype("float64")
    for name in ("plans", "tail_warnings"):
        table[name] = table[name].astype("int64")
    for name in keep:
        table[name] = partition[name].iloc[positions].reset_index(drop=True)
    return table


# ---------------------------------------------------------------- the outcomes


@dataclass
class _Results:
    """Finished partitions: kept in memory, or written to the folder as each finishes."""

    folder: PartsFolder | None
    say: Callable[[str], None] | None = None
    tables: dict[int, pd.DataFrame] = field(default_factory=dict)
    planned: list[int] = field(default_factory=list)

    def done(self, index: int, first_row: int, rows: int) -> bool:
        """Whether partition `index` (`rows` input rows from `first_row`) is on disk."""
        return self.folder is not None and self.folder.keeps(index, first_row, rows,
                                                             self.say)

    def record(self, index: int, table: pd.DataFrame, first_row: int, rows: int) -> None:
        if self.folder is not None:
            self.folder.write(index, table, first_row, rows)
        else:
            self.tables[index] = table
        self.planned.append(index)

    def outcomes(self, template: pd.DataFrame) -> pd.DataFrame:
        if self.folder is not None:
            tables = [self.folder.read(i) for i in sorted(self.folder.records)]
        else:
            tables = [self.tables[i] for i in sorted(self.tables)]
        tables = [table for table in tables if len(table)] or [template]
        frame = pd.concat(tables, ignore_index=True)
        return frame.sort_values("row", kind="stable").reset_index(drop=True)


def _span(block: pd.DataFrame) -> tuple[int, int]:
    """A block's first global row position and its length."""
    return (int(block["row"].iloc[0]) if len(block) else 0), len(block)


def _check_exactly_once(outcomes: pd.DataFrame, source: Source, task: _Task,
                        partition_rows: int) -> None:
    """The outcome rows must be the file's declined rows, each exactly once: counted again
    here from the file, independently of the parts."""
    expected = [block["row"].to_numpy(dtype=np.int64)[
                    _declined(block, task.model, task.mutability, task.source)[0]]
                for block in read_blocks(source, partition_rows)]
    declined = np.concatenate(expected) if expected else np.array([], dtype=np.int64)
    found = outcomes["row"].to_numpy(dtype=np.int64)
    values, counts = np.unique(found, return_counts=True)
    problems = [(f"{words} {_row_list(rows)}") for words, rows in (
        ("counted more than once:", values[counts > 1]),
        ("declined but missing:", np.setdiff1d(declined, values)),
        ("not declined, yet present:", np.setdiff1d(values, declined))) if len(rows)]
    if problems:
        raise DataError(f"the planned outcomes of {source.path} do not count every declined "
                        f"row exactly once ({'; '.join(problems)}); plan into an empty "
                        "folder")


def _row_list(positions: np.ndarray, shown: int = 10) -> str:
    """'data rows 3, 8, 12 (and 40 more)' from 0-based positions."""
    more = f" (and {len(positions) - shown} more)" if len(positions) > shown else ""
    return "data rows " + ", ".join(str(int(p) + 1) for p in positions[:shown]) + more


# ---------------------------------------------------------------- the whole population


def plan_at_scale(model: AdditiveModel, mutability: Mutability, data: Path, *,
                  engine: str = "local", jobs: int = 1, scheduler: str | None = None,
                  out: Path | None = None, resume: bool = False, keep: Sequence[str] = (),
                  n_plans: int = 1, solver: str = DEFAULT_SOLVER, partition_rows: int = 10_000,
                  progress: Callable[[int, int | None], None] | bool | None = None,
                  say: Callable[[str], None] | None = None) -> ScaleRun:
    """Plan for every declined row of the file `data` (CSV or Parquet), partition by
    partition, on `engine`; with `out`, each finished partition is saved as it finishes.

    `progress` is True (a bar on standard error) or a callable(done, total) counting the
    partitions planned by this call (total None while unknown). `say` receives one line
    per part that resume plans again (it failed a check) and per file it ignores.
    """
    if engine not in ENGINES:
        raise OptionError(f"unknown engine {engine!r}; known engines: {', '.join(ENGINES)}")
    for name, value in (("jobs", jobs), ("partition rows", partition_rows)):
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise OptionError(f"{name} must be a whole number of at least 1, not {value!r}")
    if isinstance(n_plans, bool) or not isinstance(n_plans, int) or n_plans < 1:
        raise PlanningError(f"--plans must be at least 1, not {n_plans!r}")
    if solver not in SOLVERS:
        raise PlanningError(f"unknown solver {solver!r}; known solvers: {', '.join(SOLVERS)}")
    if scheduler is not None and engine != "dask":
        raise OptionError("a scheduler address needs the dask engine")
    keep = _checked_keep(keep)
    data = Path(data)
    source = open_source(data, model, keep)
    task = _Task(model, mutability, n_plans, solver, keep, str(data))
    template = _typed_template(source, task)
    folder = None
    if out is not None:
        settings = {"kind": MANIFEST_KIND, "input": str(data),
                    "input_sha256": file_sha256(data),
                    "model_checksum": artifact.checksum(artifact.model_to_dict(model)),
                    "mutability_checksum": mutability_checksum(mutability),
                    "partition_rows": partition_rows, "engine": engine, "plans": n_plans,
                    "solver": solver, "keep": list(keep)}
        folder = PartsFolder.open(Path(out), resume, settings, list(template.columns), say)
    results = _Results(folder, say)
    report = progress_bar(None, "planning partitions") if progress is True else \
        (progress or None)
    try:
        run = _run_local if engine == "local" else _run_dask
        count, missing = run(source, task, results, report, jobs=jobs, scheduler=scheduler,
                             partition_rows=partition_rows)
    finally:
        if progress is True and report is not None:
            report(-1, None)
    outcomes = results.outcomes(template)
    if not missing:
        _check_exactly_once(outcomes, source, task, partition_rows)
    return ScaleRun(outcomes, count, tuple(sorted(missing)), tuple(sorted(results.planned)),
                    *((tuple(folder.notes), folder.replanned, folder.ignored)
                      if folder is not None else ()))


@dataclass(frozen=True)
class _Task:
    """Everything a partition needs besides its rows."""

    model: AdditiveModel
    mutability: Mutability
    n_plans: int
    solver: str
    keep: tuple[str, ...]
    source: str

    def __call__(self, partition: pd.DataFrame) -> pd.DataFrame:
        return plan_partition(partition, self.model, self.mutability, n_plans=self.n_plans,
                              solver=self.solver, keep=self.keep, source=self.source)


def _typed_template(source: Source, task: _Task) -> pd.DataFrame:
    """The outcome frame of no rows, with the types every partition's frame has."""
    return task(source.template)


# ---------------------------------------------------------------- local engine

_WORKER: dict[str, _Task] = {}  # set once per pool process by `_start_worker`


def _start_worker(parent: int, model_text: str, mutability: Mutability, n_plans: int,
                  solver: str, keep: tuple[str, ...], source: str) -> None:
    """Pool initializer: the model arrives once per process, as its JSON text. The process
    leaves SIGINT to its parent and ends when the parent `parent` dies."""
    become_worker(parent)
    model = artifact.loads(model_text, "<model sent to a planning process>")
    _WORKER["task"] = _Task(model, mutability, n_plans, solver, keep, source)


def _plan_in_worker(partition: pd.DataFrame) -> pd.DataFrame:
    return _WORKER["task"](partition)


def _run_local(source: Source, task: _Task, results: _Results, report, *, jobs: int,
               scheduler: str | None, partition_rows: int) -> tuple[int, set[int]]:
    blocks = enumerate(read_blocks(source, partition_rows))
    count, finished = 0, 0
    if jobs == 1:
        for index, block in blocks:
            count = index + 1
            if results.done(index, *_span(block)):
                continue
            results.record(index, task(block), *_span(block))
            finished += 1
            if report:
                report(finished, None)
        return count, set()
    from concurrent.futures.process import BrokenProcessPool

    missing: set[int] = set()
    pending: dict[Future, tuple[int, int, int]] = {}  # index, first row, rows
    broken = False
    with pool_running(jobs, _start_worker,
                      (artifact.dumps(task.model), task.mutability, task.n_plans, task.solver,
                       task.keep, task.source)) as pool:
        exhausted = False
        while pending or not exhausted:
            while not exhausted and not broken and len(pending) < 2 * jobs:
                step = next(blocks, None)
                if step is None:
                    exhausted = True
                    break
                index, block = step
                count = index + 1
                if results.done(index, *_span(block)):
                    continue
                try:
                    with sigint_held():  # a submit may start a process
                        future = pool.submit(_plan_in_worker, block)
                    pending[future] = (index, *_span(block))
                except BrokenProcessPool:
                    broken = True
                    missing.add(index)
            if broken and not exhausted:  # count the partitions that will not be planned
                for index, block in blocks:
                    count = index + 1
                    if not results.done(index, *_span(block)):
                        missing.add(index)
                exhausted = True
            if not pending:
                continue
            ready, _ = wait(pending, return_when=FIRST_COMPLETED)
            for future in sorted(ready, key=pending.__getitem__):
                index, first_row, rows = pending.pop(future)
                try:
                    table = future.result()
                except (BrokenProcessPool, CancelledError):
                    broken = True  # a planning process died: its partitions stay missing
                    missing.add(index)
                    continue
                results.record(index, table, first_row, rows)
                finished += 1
                if report:
                    report(finished, None)
    return count, missing


# ---------------------------------------------------------------- dask engine


def _number_rows(block: pd.DataFrame, offsets: Sequence[int],
                 partition_info: dict | None = None) -> pd.DataFrame:
    """Global row numbers: the partition's offset (from all partition lengths) plus position."""
    start = offsets[partition_info["number"]] if partition_info else 0
    block = block.reset_index(drop=True)
    block["row"] = np.arange(start, start + len(block), dtype=np.int64)
    return block


def _run_dask(source: Source, task: _Task, results: _Results, report, *, jobs: int,
              scheduler: str | None, partition_rows: int) -> tuple[int, set[int]]:
    from distributed import as_completed

    with dask_session(scheduler, jobs, CONNECT_SECONDS) as client:
        frame = dask_frame(source, partition_rows)
        try:
            lengths = client.compute(frame.map_partitions(len)).result()
        except GlassboxError:
            raise
        except (ValueError, TypeError, OSError) as exc:
            raise dask_read_error(source.path, exc) from None
        counts = np.asarray(lengths, dtype=np.int64).tolist()
        ends = np.cumsum(np.asarray(counts, dtype=np.int64))
        offsets = [0, *ends[:-1].tolist()]
        numbered = frame.map_partitions(_number_rows, offsets,
                                        meta=source.template.iloc[:0])
        meta = _typed_template(source, task)
        planned = numbered.map_partitions(
            plan_partition, task.model, task.mutability, n_plans=task.n_plans,
            solver=task.solver, keep=task.keep, source=task.source, meta=meta,
            enforce_metadata=False)
        pieces = planned.to_delayed()
        todo = [i for i in range(len(pieces))
                if not results.done(i, offsets[i], counts[i])]
        futures = client.compute([pieces[i] for i in todo])
        index_of = {future.key: i for future, i in zip(futures, todo, strict=True)}
        missing: set[int] = set()
        finished = 0
        if report:
            report(0, len(todo))
        for future in as_completed(futures):
            index = index_of[future.key]
            try:
                table = future.result()
            except GlassboxError:
                client.cancel(futures)
                raise
            except Exception as exc:  # a lost worker or connection, or a bug
                if not _lost(exc):
                    client.cancel(futures)
                    raise
                missing.add(index)
                continue
            results.record(index, table, offsets[index], counts[index])
            future.release()  # the worker may drop its copy now
            finished += 1
            if report:
                report(finished, len(todo))
        return len(pieces), missing


def _lost(exc: BaseException) -> bool:
    """Whether a task failed because its worker or the scheduler went away (rerunnable)."""
    from distributed.comm.core import CommClosedError
    from distributed.scheduler import KilledWorker

    return isinstance(exc, KilledWorker | CommClosedError | CancelledError | OSError |
                      TimeoutError)
