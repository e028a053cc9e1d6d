"""Planning a whole population: one partition, the local and dask engines, faults, resume.

The workload is the invented demo data (demo_data/loans.csv); the truth checked is the
planner's own per-row result (`recourse.batch.plan_many`), whatever engine runs it.
"""

from __future__ import annotations

import os
import pickle
import signal
import time

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core.errors import DataError, OptionError
from recourse import batch, scale
from recourse.batch import OUTCOME_COLUMNS, outcome_frame, plan_many
from recourse.errors import MutabilityError
from recourse.mutability import load_mutability
from recourse.scale import ScaleRun, plan_at_scale, plan_partition

from .conftest import DEMO

ROWS = 1200  # about 160 declined rows: enough partitions to split, quick to plan
KEEP = ("owner_age_band", "sector")  # a protected column kept for grouping only


@pytest.fixture(scope="module")
def model(loans, loans_schema):
    return fit_model(loans, loans_schema, "sparse")


@pytest.fixture(scope="module")
def rules(model):
    return load_mutability(DEMO / "loans.mutability.toml", model)


@pytest.fixture(scope="module")
def data_file(tmp_path_factory, loans):
    path = tmp_path_factory.mktemp("scale") / "loans.csv"
    loans.head(ROWS).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def reference(model, rules, data_file) -> ScaleRun:
    """The local engine in this process, one partition per 400 rows."""
    return plan_at_scale(model, rules, data_file, keep=KEEP, partition_rows=400)


@pytest.fixture(scope="module")
def cluster():
    """A real dask.distributed cluster of two single-threaded worker processes."""
    distributed = pytest.importorskip("distributed")
    import logging

    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                  silence_logs=logging.CRITICAL) as running:
        yield running


def numbered(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.assign(row=np.arange(len(frame), dtype=np.int64))


# ---------------------------------------------------------------- one partition


def test_partition_equals_the_batch_planner(model, rules, loans, monkeypatch):
    frame = loans.head(300).copy()
    # the row most likely to default gets an amount below the declared lower bound (5): the
    # bound limits the proposed value only, so the row is planned (a plan or none, never an
    # error); the second most likely row meets a rule error, injected (constructed), and
    # the run goes on past it
    order = np.argsort(-model.score(frame))
    worst, misfit = frame.index[int(order[0])], frame.index[int(order[1])]
    frame.loc[worst, "amount_requested"] = 2
    refused = frame.loc[misfit, "application_id"]
    planned = batch.plan_encoded

    def plan_or_refuse(*args, **kwargs):
        if kwargs.get("row_id") == refused:
            raise MutabilityError("[feature.amount_requested] a rule error for this row")
        return planned(*args, **kwargs)

    monkeypatch.setattr(batch, "plan_encoded", plan_or_refuse)
    declined = np.flatnonzero(model.probability(frame) > 0.3)  # goal: at most 0.3
    expected = outcome_frame(plan_many(model, frame, rules, n_plans=1), model)
    table = plan_partition(numbered(frame), model, rules, keep=["owner_age_band"])
    assert list(table.columns) == ["row", *OUTCOME_COLUMNS, "owner_age_band"]
    assert table["row"].tolist() == declined.tolist()
    status = dict(zip(table["id"], table["status"], strict=True))
    assert status[frame.loc[worst, "application_id"]] in ("plans", "none")
    assert status[refused] == "error"
    assert "plans" in set(table["status"])
    pd.testing.assert_frame_equal(table[list(OUTCOME_COLUMNS)], expected, check_dtype=False)
    np.testing.assert_array_equal(table["id"], frame["application_id"].to_numpy()[declined])
    np.testing.assert_array_equal(table["owner_age_band"],
                                  frame["owner_age_band"].to_numpy()[declined])


def test_partition_rows_keep_their_global_numbers_and_ids(model, rules, loans):
    frame = loans.iloc[500:700].drop(columns=["application_id"])
    table = plan_partition(frame.assign(row=np.arange(500, 700)), model, rules)
    assert table["row"].between(500, 699).all()
    assert (table["id"] == table["row"] + 1).all()  # no id column: the data row, from 1


def test_empty_partition_has_the_columns_and_types(model, rules, loans):
    full = plan_partition(numbered(loans.head(200)), model, rules, keep=KEEP)
    empty = plan_partition(numbered(loans.head(200)).iloc[:0], model, rules, keep=KEEP)
    assert len(empty) == 0 and len(full) > 0
    pd.testing.assert_series_equal(empty.dtypes, full.dtypes)


def test_partition_function_is_picklable_and_deterministic(model, rules, loans):
    frame = numbered(loans.head(200))
    function, *arguments = pickle.loads(pickle.dumps((plan_partition, frame, model, rules)))
    pd.testing.assert_frame_equal(function(*arguments), plan_partition(frame, model, rules))


# ---------------------------------------------------------------- local engine


def test_local_engine_matches_the_batch_planner(reference, model, rules, loans):
    expected = outcome_frame(plan_many(model, loans.head(ROWS), rules, n_plans=1), model)
    assert reference.partitions == 3 and reference.missing == ()
    assert list(reference.outcomes.columns) == ["row", *OUTCOME_COLUMNS, *KEEP]
    pd.testing.assert_frame_equal(reference.outcomes[list(OUTCOME_COLUMNS)], expected,
                                  check_dtype=False)
    assert reference.outcomes["row"].is_monotonic_increasing


def test_jobs_and_partition_sizes_do_not_change_results(reference, model, rules, data_file):
    two_jobs = plan_at_scale(model, rules, data_file, keep=KEEP, jobs=2, partition_rows=250)
    assert two_jobs.partitions == 5
    pd.testing.assert_frame_equal(two_jobs.outcomes, reference.outcomes)
    one_block = plan_at_scale(model, rules, data_file, keep=KEEP, partition_rows=5000)
    assert one_block.partitions == 1
    pd.testing.assert_frame_equal(one_block.outcomes, reference.outcomes)


def test_resume_plans_only_the_missing_partition(reference, model, rules, data_file,
                                                 tmp_path, monkeypatch):
    out = tmp_path / "run"
    first = plan_at_scale(model, rules, data_file, keep=KEEP, partition_rows=400, out=out)
    assert sorted(p.name for p in out.glob("part-*")) == [
        "part-00000.parquet", "part-00001.parquet", "part-00002.parquet"]
    pd.testing.assert_frame_equal(first.outcomes, reference.outcomes)
    (out / "part-00001.parquet").unlink()
    blocks = []
    original = scale.plan_partition

    def counting(partition, *args, **kwargs):
        if len(partition):
            blocks.append((int(partition["row"].min()), int(partition["row"].max())))
        return original(partition, *args, **kwargs)

    monkeypatch.setattr(scale, "plan_partition", counting)
    again = plan_at_scale(model, rules, data_file, keep=KEEP, partition_rows=400, out=out,
                          resume=True)
    assert blocks == [(400, 799)] and again.planned == (1,)
    pd.testing.assert_frame_equal(again.outcomes, reference.outcomes)
    with pytest.raises(OptionError, match="already holds a run"):
        plan_at_scale(model, rules, data_file, keep=KEEP, partition_rows=400, out=out)


def test_a_killed_local_worker_loses_no_row(reference, model, rules, data_file, tmp_path):
    psutil = pytest.importorskip("psutil")
    me = psutil.Process()
    before = {child.pid for child in me.children()}
    killed = []

    def kill_one_worker(done, _total):
        if killed:
            return
        workers = [child for child in me.children() if child.pid not in before
                   and "spawn_main" in " ".join(child.cmdline())]
        os.kill(workers[0].pid, signal.SIGKILL)
        killed.append(workers[0].pid)

    out = tmp_path / "run"
    broken = plan_at_scale(model, rules, data_file, keep=KEEP, jobs=2, partition_rows=100,
                           out=out, progress=kill_one_worker)
    assert killed and broken.partitions == 12 and broken.missing
    assert len(broken.outcomes) < len(reference.outcomes)
    assert set(broken.missing).isdisjoint(int(p.stem[5:]) for p in out.glob("part-*"))
    finished = plan_at_scale(model, rules, data_file, keep=KEEP, jobs=2, partition_rows=100,
                             out=out, resume=True)
    assert finished.missing == () and finished.planned == broken.missing
    pd.testing.assert_frame_equal(finished.outcomes, reference.outcomes)


# ---------------------------------------------------------------- dask engine


def test_dask_cluster_gives_the_local_plans(reference, model, rules, data_file, cluster):
    run = plan_at_scale(model, rules, data_file, engine="dask", keep=KEEP, partition_rows=300,
                        scheduler=cluster.scheduler_address)
    assert run.missing == () and run.partitions >= 3
    pd.testing.assert_frame_equal(run.outcomes, reference.outcomes)


def test_dask_on_parquet_and_its_own_cluster(reference, model, rules, loans, tmp_path):
    pytest.importorskip("distributed")
    path = tmp_path / "loans.parquet"
    loans.head(ROWS).to_parquet(path, index=False, row_group_size=300)
    local = plan_at_scale(model, rules, path, keep=KEEP, partition_rows=500)
    pd.testing.assert_frame_equal(local.outcomes, reference.outcomes)
    run = plan_at_scale(model, rules, path, engine="dask", jobs=2, keep=KEEP)
    assert run.partitions == 4 and run.missing == ()
    pd.testing.assert_frame_equal(run.outcomes, reference.outcomes)


def test_a_killed_dask_worker_loses_no_row(reference, model, rules, data_file, cluster,
                                           tmp_path):
    from distributed import Client

    with Client(cluster.scheduler_address) as client:
        pids = list(client.run(os.getpid).values())
    killed = []

    def kill_one_worker(done, _total):
        if done >= 1 and not killed:
            os.kill(pids[0], signal.SIGKILL)
            killed.append(pids[0])

    out = tmp_path / "run"
    run = plan_at_scale(model, rules, data_file, engine="dask", keep=KEEP, partition_rows=100,
                        scheduler=cluster.scheduler_address, out=out, progress=kill_one_worker)
    assert killed
    if run.missing:  # the scheduler gave up on a partition: resume finishes the run
        run = plan_at_scale(model, rules, data_file, engine="dask", keep=KEEP,
                            partition_rows=100, scheduler=cluster.scheduler_address, out=out,
                            resume=True)
    assert run.missing == ()
    assert run.outcomes["row"].is_unique
    pd.testing.assert_frame_equal(run.outcomes, reference.outcomes)


# ---------------------------------------------------------------- bad input


def test_unreachable_scheduler_is_a_quick_clear_error(model, rules, data_file):
    pytest.importorskip("distributed")
    start = time.monotonic()
    with pytest.raises(OptionError, match="cannot reach the dask scheduler at tcp://127.0.0.1:1"):
        plan_at_scale(model, rules, data_file, engine="dask", scheduler="tcp://127.0.0.1:1")
    assert time.monotonic() - start < 10


def test_bad_requests_fail_before_any_planning(model, rules, data_file, loans, tmp_path,
                                               monkeypatch):
    def never(*_args, **_kwargs):
        raise AssertionError("planning started despite bad input")

    monkeypatch.setattr(scale, "plan_typed_rows", never)
    short = tmp_path / "short.csv"
    loans.head(50).drop(columns=["credit_utilisation"]).to_csv(short, index=False)
    with pytest.raises(DataError, match="missing column.*'credit_utilisation'"):
        plan_at_scale(model, rules, short)
    with pytest.raises(OptionError, match="column.*to keep .--by. 'region'"):
        plan_at_scale(model, rules, data_file, keep=["region"])
    with pytest.raises(OptionError, match="unknown engine 'spark'"):
        plan_at_scale(model, rules, data_file, engine="spark")
    with pytest.raises(OptionError, match="jobs must be"):
        plan_at_scale(model, rules, data_file, jobs=0)
    with pytest.raises(DataError, match="does not exist"):
        plan_at_scale(model, rules, tmp_path / "nowhere.csv")


def test_resume_refuses_another_input(model, rules, data_file, loans, tmp_path):
    out = tmp_path / "run"
    plan_at_scale(model, rules, data_file, partition_rows=600, out=out)
    other = tmp_path / "other.csv"
    loans.iloc[ROWS:ROWS + 600].to_csv(other, index=False)
    with pytest.raises(OptionError, match="another input file"):
        plan_at_scale(model, rules, other, partition_rows=600, out=out, resume=True)
    with pytest.raises(OptionError, match="another partition size"):
        plan_at_scale(model, rules, data_file, partition_rows=300, out=out, resume=True)
