"""Monitoring between periods: are the rows a model now scores, and its reasoning about them,
still what was approved?

Each current file is read in blocks (`glassbox.core.stream`, constant memory); every block is
counted by `glassbox.explaining.monitor_counts.count_block` (rows per bin, exact sums of
contributions and scores, per period) and the counts are summed. The engines only decide
where blocks are counted:

- "local": on this machine: block after block in this process, or with jobs > 1 in that
           many worker processes (each reads its own Parquet row groups; CSV blocks are
           read here and sent);
- "dask":  `dask.dataframe` partitions on a `dask.distributed` cluster (an existing one, by
           scheduler address, or one started for the run).

Whole-number counts and exact sums do not depend on the block size or the engine, so every
engine gives identical numbers. The tables are built by `glassbox.explaining.monitor_tables`.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import DataError, GlassboxError, OptionError
from glassbox.core.stream import (
    Source,
    dask_frame,
    dask_read_error,
    dask_session,
    open_source,
    read_blocks,
    read_row_group,
    renumbered,
    row_groups,
)
from glassbox.core.wording import plural
from glassbox.core.workers import become_worker, pool_running, sigint_held
from glassbox.explaining.baseline import Baseline, check_baseline, model_baseline
from glassbox.explaining.cards import PointsCard
from glassbox.explaining.monitor_counts import (
    EVERY,
    Counts,
    Plan,
    add_counts,
    count_block,
    ordered_periods,
)
from glassbox.explaining.monitor_tables import Monitoring, build_tables
from glassbox.explaining.points import model_checksum

ENGINES = ("local", "dask")
CHUNK_ROWS = 200_000
CONNECT_SECONDS = 5  # how long to try an existing dask scheduler before giving up

__all__ = ["CHUNK_ROWS", "ENGINES", "EVERY", "Counts", "Monitoring", "count_block", "monitor"]


def monitor(model: AdditiveModel, inputs: Sequence[str | Path], *, period: str | None = None,
            every: str | None = None, baseline: Baseline | None = None,
            card: PointsCard | None = None, engine: str = "local", jobs: int = 1,
            scheduler: str | None = None, chunk_rows: int = CHUNK_ROWS,
            progress: Callable[[int, int | None], None] | None = None) -> Monitoring:
    """Every period of the current files against the development baseline.

    Periods are the files (one each, labelled by file name, in the order given), or with
    `period` the values of that column of one file (numbers ordered numerically, else as
    text); with `every` (month, quarter, year) that column holds ISO dates, grouped.
    `baseline` overrides the model file's own. `progress(blocks_done, None)` is called
    after each block.
    """
    inputs = [Path(path) for path in inputs]
    _check_options(inputs, period, every, engine, jobs, scheduler, chunk_rows)
    baseline = baseline if baseline is not None else model_baseline(model)
    check_baseline(model, baseline, "the baseline")
    checksum = model_checksum(model) or ""
    if card is not None and card.model_checksum not in (None, checksum):
        raise OptionError("the points card was made from another model (its model checksum "
                          "differs from this model file's)")
    if card is not None and card.pairs:  # its totals would leave the pair grids out
        raise OptionError(
            f"monitoring in points does not read a card's points grids for pairs yet, and "
            f"this card has {plural(len(card.pairs), 'grid')} "
            f"({', '.join(p.name for p in card.pairs)}); monitor without --points: the "
            "log-odds tables cover the pairs")
    target = model.schema.target.column
    plans: list[tuple[Source, Plan]] = []
    labels = _file_labels(inputs)
    for path, label in zip(inputs, labels, strict=True):
        outcome = target in _header(path) and target not in model.features
        keep = tuple(dict.fromkeys(name for name in (period, target if outcome else None)
                                   if name is not None))
        source = open_source(path, model, keep, "the period column (--period)")
        plans.append((source, Plan(model, baseline, str(path), None if period else label,
                                   period, every, card, outcome)))
    outcome = any(plan.outcome for _, plan in plans)  # a file without: rows 0 there
    counted: dict[str, Counts] = {}
    run = _count_local if engine == "local" else _count_dask
    for source, plan in plans:
        found = run(source, plan, chunk_rows=chunk_rows, jobs=jobs, scheduler=scheduler,
                    progress=progress)
        if not found:
            raise DataError(f"data file {source.path} has a header but no data rows")
        if period is not None and len(found) == 1:
            only = next(iter(found))
            raise DataError(f"{source.path}: the period column '{period}' has one value only "
                            f"({only!r}); monitoring compares several periods: give a "
                            "column that changes, or one file per period without --period")
        counted = add_counts(counted, found)
    periods = labels if period is None else ordered_periods(list(counted))
    return build_tables(counted, periods, model, baseline, card=card, outcome=outcome,
                        model_checksum=checksum)


def _check_options(inputs: list[Path], period: str | None, every: str | None, engine: str,
                   jobs: int, scheduler: str | None, chunk_rows: int) -> None:
    if not inputs:
        raise OptionError("name at least one data file to monitor")
    if engine not in ENGINES:
        raise OptionError(f"unknown engine {engine!r}; known engines: {', '.join(ENGINES)}")
    for name, value in (("jobs", jobs), ("chunk rows", chunk_rows)):
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise OptionError(f"{name} must be a whole number of at least 1, not {value!r}")
    if scheduler is not None and engine != "dask":
        raise OptionError("a scheduler address needs the dask engine (--engine dask)")
    if period is not None and len(inputs) > 1:
        raise OptionError("--period splits one file into periods; with several files each "
                          "file is a period: give one or the other")
    if every is not None and period is None:
        raise OptionError("--every groups the dates of the period column: give --period too")
    if every is not None and every not in EVERY:
        raise OptionError(f"--every must be one of {', '.join(EVERY)}, not {every!r}")


def _file_labels(inputs: list[Path]) -> list[str]:
    """Each file's period label: its name without the extension, or the whole path where
    two files would share a name."""
    stems = [path.stem for path in inputs]
    labels = stems if len(set(stems)) == len(stems) else [str(path) for path in inputs]
    if len(set(labels)) != len(labels):
        twice = next(label for label in labels if labels.count(label) > 1)
        raise OptionError(f"the file {twice} is named twice; each file is one period")
    return labels


def _header(path: Path) -> list[str]:
    """A data file's column names (the reader checks the file itself)."""
    import pandas as pd

    from glassbox.core.encoding import CSV_CELLS, is_parquet

    try:
        if is_parquet(path):
            import pyarrow.parquet as pq

            return [str(name) for name in pq.read_schema(path).names]
        return [str(name) for name in pd.read_csv(path, nrows=0, **CSV_CELLS).columns]
    except Exception:  # noqa: BLE001 - unreadable: open_source names the problem
        return []


# ---------------------------------------------------------------- local engine


def _count_local(source: Source, plan: Plan, *, chunk_rows: int, jobs: int,
                 scheduler: str | None, progress) -> dict[str, Counts]:
    """Blocks read here and counted here (jobs=1), or counted by `jobs` worker processes:
    a Parquet file's row groups each read by a worker, a CSV file's blocks read here and
    sent. Results are taken in file order, so the first refused row in the file is the one
    named; at most 2 x jobs pieces are in flight."""
    counted: dict[str, Counts] = {}
    if jobs == 1:
        for done, block in enumerate(read_blocks(source, chunk_rows), start=1):
            counted = add_counts(counted, _counted(block, plan))
            if progress:
                progress(done, None)
        return counted
    window: deque = deque()
    taken = 0
    if source.parquet:  # each worker reads its own row groups: no block crosses processes
        work = ((_count_row_group, source, index, first, chunk_rows)
                for index, first in row_groups(source))
    else:
        work = ((_count_in_worker, block) for block in read_blocks(source, chunk_rows))

    def take() -> None:
        nonlocal counted, taken
        counted = add_counts(counted, _taken(window.popleft()))
        taken += 1
        if progress:
            progress(taken, None)

    with pool_running(jobs, _start_counting, (plan,)) as pool:
        for task, *arguments in work:
            with sigint_held():  # a submit may start a process
                window.append(pool.submit(task, *arguments))
            while len(window) >= 2 * jobs or (window and window[0].done()):
                take()
        while window:
            take()
    return counted


def _counted(block, plan: Plan) -> dict[str, Counts]:
    """One block's counts; a refused row is named by its row in the whole file."""
    try:
        return count_block(block, plan)
    except GlassboxError as exc:
        raise renumbered(exc, block["row"].to_numpy(dtype=np.int64)) from None


_PLAN: dict[str, Plan] = {}  # set once per worker process by `_start_counting`


def _start_counting(parent: int, plan: Plan) -> None:
    become_worker(parent)
    _PLAN["plan"] = plan


def _count_in_worker(block) -> dict[str, Counts] | _Failed:
    try:
        return _counted(block, _PLAN["plan"])
    except GlassboxError as exc:  # raised again in the main process, in file order
        return _Failed(exc)


def _count_row_group(source: Source, index: int, first_row: int,
                     chunk_rows: int) -> dict[str, Counts] | _Failed:
    counted: dict[str, Counts] = {}
    try:
        for block in read_row_group(source, index, first_row, chunk_rows):
            counted = add_counts(counted, _counted(block, _PLAN["plan"]))
    except GlassboxError as exc:  # raised again in the main process, in file order
        return _Failed(exc)
    return counted


def _taken(future) -> dict[str, Counts]:
    found = future.result()
    if isinstance(found, _Failed):
        raise found.error
    return found


# ---------------------------------------------------------------- dask engine


@dataclass(frozen=True)
class _Failed:
    """A partition whose rows were refused: the error, its rows counted in the partition."""

    error: GlassboxError


def _count_partition(partition, plan: Plan):
    try:
        return count_block(partition.reset_index(drop=True), plan)
    except GlassboxError as exc:
        return _Failed(exc)


def _count_dask(source: Source, plan: Plan, *, chunk_rows: int, jobs: int,
                scheduler: str | None, progress) -> dict[str, Counts]:
    from dask import delayed

    with dask_session(scheduler, jobs, CONNECT_SECONDS) as client:
        pieces = dask_frame(source, chunk_rows).to_delayed()
        counting = delayed(_count_partition)
        try:
            results = client.compute([counting(piece, plan) for piece in pieces], sync=True)
        except GlassboxError:
            raise
        except (ValueError, TypeError, OSError) as exc:
            raise dask_read_error(source.path, exc) from None
        counted: dict[str, Counts] = {}
        for index, found in enumerate(results):
            if isinstance(found, _Failed):  # the rows it names, counted in the file
                lengths = client.compute([delayed(len)(p) for p in pieces[:index + 1]],
                                         sync=True)
                start = int(sum(lengths[:-1]))
                numbers = np.arange(start, start + int(lengths[-1]), dtype=np.int64)
                raise renumbered(found.error, numbers) from None
            counted = add_counts(counted, found)
            if progress:
                progress(index + 1, len(results))
        return counted
