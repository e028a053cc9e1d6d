"""A data file read in blocks, for runs over whole populations (`recourse reach`, monitoring):
its header checked against the model before any work, fixed column types for id and kept
columns, each block with its rows' 0-based positions in the whole file (column `row`); never
the whole file in memory."""

from __future__ import annotations

import contextlib
import math
import re
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel
from glassbox.core.encoding import (
    CSV_CELLS,
    check_data_file,
    is_parquet,
    longer_rows_error,
    parser_problem,
)
from glassbox.core.errors import DataError, GlassboxError, OptionError
from glassbox.core.wording import noun, verb

SAMPLE_ROWS = 1000  # rows read up front: header check, column types, bytes per row


@dataclass(frozen=True)
class Source:
    """The input file as the engines read it: which columns, with which fixed types."""

    path: Path
    parquet: bool
    columns: tuple[str, ...]
    fixed_types: dict[str, str] = field(default_factory=dict)  # CSV only: id and keep columns
    bytes_per_row: float = 100.0
    template: pd.DataFrame = field(default_factory=pd.DataFrame)  # no rows, final types

    def csv_options(self) -> dict[str, Any]:
        return {**CSV_CELLS, "usecols": list(self.columns), "dtype": dict(self.fixed_types)}


def read_error(path: Path, exc: BaseException) -> DataError:
    if isinstance(exc, pd.errors.ParserError):  # in the words every reader uses
        return DataError(f"data file {path}: {parser_problem(str(exc))}")
    first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return DataError(f"data file {path} could not be read: {first}")


def open_source(path: Path, model: AdditiveModel, keep: tuple[str, ...],
                keep_words: str = "columns to keep (--by)") -> Source:
    """Check the header against the model and `keep` before any work; `keep_words` names
    the kept columns in an error (the option that asked for them)."""
    names = check_data_file(path)  # the checks of every reader: names twice, text, ...
    parquet = is_parquet(path)
    try:
        if parquet:
            import pyarrow.parquet as pq

            handle = pq.ParquetFile(path)
            header = list(handle.schema_arrow.names)
            rows = handle.metadata.num_rows
            sample = handle.schema_arrow.empty_table().to_pandas()
        else:
            with warnings.catch_warnings():
                warnings.simplefilter("error", pd.errors.ParserWarning)
                sample = pd.read_csv(path, nrows=SAMPLE_ROWS, **CSV_CELLS)
            header, rows = [str(c) for c in sample.columns], len(sample)
    except pd.errors.ParserWarning:  # rows longer than the header: never an index
        raise longer_rows_error(path, names) from None
    except pd.errors.EmptyDataError:
        raise DataError(f"data file {path} is empty") from None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError, OSError) as exc:
        raise read_error(path, exc) from None
    if rows == 0:
        raise DataError(f"data file {path} has a header but no data rows")
    shown = f"it has: {', '.join(header[:12])}{', ...' if len(header) > 12 else ''}"
    missing = [name for name in model.features if name not in header]
    if missing:
        raise DataError(f"{path}: missing {noun(len(missing), 'column')} "
                        f"{', '.join(map(repr, missing))} that the "
                        f"model needs ({shown})")
    unknown = [name for name in keep if name not in header]
    if unknown:
        raise OptionError(f"{keep_words} {', '.join(map(repr, unknown))} not in {path} "
                          f"({shown})")
    wanted = {*model.features, *keep, model.schema.id_column}
    if "row" in wanted and "row" in header:
        raise DataError(f"{path}: a column named 'row' clashes with the row numbers added "
                        "to every partition; rename it")
    columns = tuple(name for name in header if name in wanted)
    fixed = {} if parquet else {name: _fixed_type(sample[name]) for name in columns
                                if name not in model.features}
    template = sample[list(columns)].iloc[:0].astype(fixed) if fixed else \
        sample[list(columns)].iloc[:0]
    per_row = 100.0
    if not parquet:
        with open(path, "rb") as handle:
            text = b"".join(handle.readline() for _ in range(len(sample) + 1))
        per_row = max(len(text) / (len(sample) + 1), 1.0)
    return Source(path, parquet, columns, fixed, per_row,
                   template.assign(row=np.array([], dtype=np.int64)))


def _fixed_type(column: pd.Series) -> str:
    """One type for an id or kept column in every block (types guessed per block differ
    when a block happens to hold only whole numbers, or a gap)."""
    if pd.api.types.is_bool_dtype(column):
        return "boolean"
    if pd.api.types.is_integer_dtype(column):
        return "Int64"
    if pd.api.types.is_float_dtype(column):
        return "float64"
    return "str"


def read_blocks(source: Source, partition_rows: int) -> Iterator[pd.DataFrame]:
    """The file in blocks of `partition_rows` rows (Parquet: at most that many), each with
    its global `row` numbers; never the whole file in memory."""
    offset = 0
    try:
        if source.parquet:
            import pyarrow as pa
            import pyarrow.parquet as pq

            # pre_buffer off: with it, every column chunk read stays cached to the end
            # (10 million rows x 20 columns held 1.1 GB at the end; 65 MB without)
            batches = pq.ParquetFile(source.path, pre_buffer=False).iter_batches(
                batch_size=partition_rows, columns=list(source.columns))
            blocks: Iterator[pd.DataFrame] = (
                pa.Table.from_batches([batch]).to_pandas() for batch in batches)
        else:
            blocks = _csv_blocks(source, partition_rows)
        for block in blocks:
            block = block.reset_index(drop=True)
            block["row"] = np.arange(offset, offset + len(block), dtype=np.int64)
            offset += len(block)
            yield block
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError, OSError) as exc:
        raise read_error(source.path, exc) from None


def row_groups(source: Source) -> list[tuple[int, int]]:
    """A Parquet file's row groups as (index, first row): pieces a worker process can read
    on its own (`read_row_group`)."""
    import pyarrow.parquet as pq

    try:
        metadata = pq.ParquetFile(source.path).metadata
    except (ValueError, OSError) as exc:
        raise read_error(source.path, exc) from None
    sizes = [metadata.row_group(i).num_rows for i in range(metadata.num_row_groups)]
    starts = np.concatenate([[0], np.cumsum(sizes, dtype=np.int64)[:-1]]).tolist()
    return [(i, int(start)) for i, start in enumerate(starts)]


def read_row_group(source: Source, index: int, first_row: int,
                   partition_rows: int) -> Iterator[pd.DataFrame]:
    """One row group of a Parquet file in blocks of at most `partition_rows` rows, numbered
    as `read_blocks` numbers them."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    offset = first_row
    try:
        batches = pq.ParquetFile(source.path, pre_buffer=False).iter_batches(
            batch_size=partition_rows, row_groups=[index], columns=list(source.columns))
        for batch in batches:
            block = pa.Table.from_batches([batch]).to_pandas().reset_index(drop=True)
            block["row"] = np.arange(offset, offset + len(block), dtype=np.int64)
            offset += len(block)
            yield block
    except (ValueError, OSError) as exc:
        raise read_error(source.path, exc) from None


def _csv_blocks(source: Source, partition_rows: int) -> Iterator[pd.DataFrame]:
    """CSV blocks read with every column, so that a row longer than the header is refused
    wherever it is (pandas drops the extra fields without a word when columns are picked),
    then cut to the columns the run needs."""
    options = {key: value for key, value in source.csv_options().items() if key != "usecols"}
    reader = pd.read_csv(source.path, chunksize=partition_rows, **options)
    names = list(source.columns)
    while True:
        with warnings.catch_warnings():  # only around reading: never across a yield
            warnings.simplefilter("error", pd.errors.ParserWarning)
            try:
                block = next(reader)
            except StopIteration:
                return
            except pd.errors.ParserWarning:
                header = pd.read_csv(source.path, nrows=0, **CSV_CELLS).columns
                raise longer_rows_error(source.path, list(header)) from None
        yield block[names]


def dask_read_error(path: Path, exc: BaseException) -> DataError:
    """dask guesses column types from the file's start; name the columns that break it."""
    text = str(exc)
    if "Mismatched dtypes" not in text:
        return read_error(path, exc)
    names = [line.split("|")[1].strip() for line in text.splitlines()
             if line.startswith("|") and "Column" not in line]
    return DataError(f"{path}: {noun(len(names), 'column')} {', '.join(map(repr, names))} "
                     f"{verb(len(names), 'changes', 'change')} type further "
                     "into the file (text where the first rows hold numbers, say); clean "
                     "them, or use the local engine for an error naming the rows")


_ROW_NUMBERS = re.compile(r"\bdata rows? (\d+(?:, \d+)*)")


def renumbered(exc: GlassboxError, numbers: np.ndarray) -> GlassboxError:
    """The same error with the data rows it names (counted from 1 within a block) counted
    in the whole file instead; `numbers` holds the block's 0-based positions in the file."""
    def shift(match: re.Match) -> str:
        within = [int(n) for n in match.group(1).split(", ")]
        if not all(1 <= n <= len(numbers) for n in within):
            return match.group(0)
        head = match.group(0)[:match.start(1) - match.start(0)]
        return head + ", ".join(str(int(numbers[n - 1]) + 1) for n in within)

    return type(exc)(_ROW_NUMBERS.sub(shift, str(exc)))


@contextlib.contextmanager
def dask_session(scheduler: str | None, jobs: int, connect_seconds: float) -> Iterator[Any]:
    """A dask client for one run, closed (with the cluster it started) at the end; inside,
    plain pandas text columns as the local engine reads them."""
    import dask
    import distributed  # noqa: F401  its defaults must be in the config before the block

    # leaving the block restores the config as it was on entry: were distributed first
    # imported inside it, its defaults would go too, and a second cluster fail
    with dask.config.set({"dataframe.convert-string": False,
                          "distributed.comm.timeouts.connect": f"{connect_seconds}s"}):
        client, cluster = _dask_client(scheduler, jobs, connect_seconds)
        try:
            yield client
        finally:
            client.close()
            if cluster is not None:
                cluster.close()


def dask_frame(source: Source, partition_rows: int) -> Any:
    """The file as a dask dataframe of about `partition_rows` rows per partition."""
    import dask.dataframe as dd

    if source.parquet:  # row groups first; a file with fewer than it needs is split evenly
        import pyarrow.parquet as pq

        frame = dd.read_parquet(source.path, columns=list(source.columns),
                                split_row_groups=True)
        wanted = -(-pq.ParquetFile(source.path).metadata.num_rows // partition_rows)
        return frame.repartition(npartitions=wanted) if frame.npartitions < wanted else frame
    blocksize = max(int(math.ceil(source.bytes_per_row * partition_rows)), 1024)
    return dd.read_csv(source.path, blocksize=blocksize, assume_missing=True,
                       **source.csv_options())


def _dask_client(scheduler: str | None, jobs: int, connect_seconds: float):
    """A client of the given dask scheduler, or of a cluster on this machine started for
    the run (`jobs` single-threaded worker processes; its small web server on a free local
    port). Returns (client, cluster), cluster None for an existing scheduler."""
    import logging

    from distributed import Client, LocalCluster

    if scheduler is None:
        cluster = LocalCluster(n_workers=jobs, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address="127.0.0.1:0",
                               silence_logs=logging.CRITICAL)
        return Client(cluster), cluster
    try:
        return Client(scheduler, timeout=connect_seconds), None
    except (OSError, TimeoutError, ValueError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise OptionError(f"cannot reach the dask scheduler at {scheduler} within "
                          f"{connect_seconds} s ({first})") from None
