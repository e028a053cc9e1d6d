"""`glassbox changes` as a user meets it: the terminal table at 80 columns, the JSON and
Markdown files, the refusal to write over another kind of file, and one-line errors. The
two versions are fitted on the demo loans (sparse, then boosted); the figures themselves
are checked against outside evaluations in tests/test_changes.py."""

from __future__ import annotations

import json
from dataclasses import replace

import pytest

from glassbox import fit_model
from glassbox.core import artifact

from .conftest import DEMO, one_line_error


@pytest.fixture(scope="module")
def versions(tmp_path_factory):
    from glassbox.core.schema import load_schema, read_table

    folder = tmp_path_factory.mktemp("changes")
    frame = read_table(DEMO / "loans.csv")
    schema = load_schema(DEMO / "loans.schema.toml")
    old = fit_model(frame, schema, "sparse", max_features=4)
    new = fit_model(frame, schema, "boosted", max_iter=30, early_stopping=False)
    paths = folder / "loans_v1.json", folder / "loans_v2.json"
    artifact.save(old, paths[0])
    artifact.save(new, paths[1])
    return paths


def run(*args, width: int = 80):
    from typer.testing import CliRunner

    from glassbox.cli import app

    return CliRunner().invoke(app, [str(a) for a in args], env={"COLUMNS": str(width)})


def test_terminal_review_fits_80_columns(versions):
    result = run("changes", *versions, DEMO / "loans.csv", "--cutoff", "0.2")
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert max(len(line) for line in lines) <= 80
    for title in ("Structure", "Family and fitting settings", "Largest change of each",
                  "Importance", "Decisions at the cut-off (probability 0.2)",
                  "Score shift, new − old"):
        assert any(line.startswith(title) for line in lines), title
    assert "family" in result.output and "boosted" in result.output


def test_json_and_markdown_files(versions, tmp_path):
    out = tmp_path / "review.json"
    result = run("changes", *versions, DEMO / "loans.csv", "--out", out)
    assert result.exit_code == 0, result.output
    document = json.loads(out.read_text())
    assert document["format"] == "glassbox-changes" and document["task"] == "classification"
    assert document["data"]["rows"] == 5000 and document["data"]["cutoff"] == 0.5
    old, new = (artifact.load(path) for path in versions)
    assert [t["feature"] for t in document["terms"]] == [
        f for f in old.features if f in new.features]
    assert document["prominent"] == [] and document["schema"] == []
    again = tmp_path / "again.json"
    run("changes", *versions, DEMO / "loans.csv", "--format", "json", "--out", again)
    assert again.read_bytes() == out.read_bytes()  # deterministic
    markdown = tmp_path / "review.md"
    assert run("changes", *versions, "--out", markdown).exit_code == 0
    text = markdown.read_text()
    assert text.startswith("# Changes from ") and "## Importance" in text
    assert "| feature | tables | largest change | at | missing value |" in text
    printed = run("changes", *versions, "--format", "markdown")
    assert printed.exit_code == 0 and printed.output == text


def test_existing_files_of_another_kind_need_force(versions, tmp_path):
    taken = tmp_path / "scores.json"
    taken.write_text(versions[0].read_text())  # a model file, not a review
    one_line_error(run("changes", *versions, "--out", taken), "a glassbox model file",
                   "--force")
    assert run("changes", *versions, "--out", taken, "--force").exit_code == 0
    assert json.loads(taken.read_text())["format"] == "glassbox-changes"
    one_line_error(run("changes", *versions, "--out", versions[1]), "input")


def test_one_line_errors(versions, tmp_path):
    broken = tmp_path / "broken.json"
    broken.write_text("{not json")
    one_line_error(run("changes", broken, versions[1]), "broken.json")
    one_line_error(run("changes", *versions, "--cutoff", "0.3"), "--cutoff", "DATA")
    one_line_error(run("changes", *versions, "--out", tmp_path / "x.txt"), "--format")
    one_line_error(run("changes", *versions, "--format", "table", "--out",
                       tmp_path / "x.md"), "--format table is the terminal's")
    assert not (tmp_path / "x.md").exists()
    partial = tmp_path / "partial.csv"
    import pandas as pd

    pd.read_csv(DEMO / "loans.csv").drop(columns=["late_payments_24m"]).to_csv(
        partial, index=False)
    one_line_error(run("changes", *versions, partial), "late_payments_24m",
                   "needed by")
    # constructed: the same tables read as a regression model
    regression = tmp_path / "regression.json"
    artifact.save(replace(artifact.load(versions[1]), link="identity"), regression)
    one_line_error(run("changes", versions[0], regression), "different scales")
    one_line_error(run("changes", regression, regression, DEMO / "loans.csv"),
                   "needs --cutoff")
