"""The glassbox command end to end, as a user types it; errors are one line and exit 2."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import __version__
from glassbox.cli import app

from .conftest import DEMO

runner = CliRunner()


def run(*args: str):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("cli") / "loans.json"
    result = run("fit", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                 "--max-features", "5", "--out", path)
    assert result.exit_code == 0, result.output
    return path


def test_version():
    result = run("--version")
    assert result.exit_code == 0 and result.output.strip() == f"glassbox {__version__}"


def test_schema_to_stdout_and_file(tmp_path):
    result = run("schema", DEMO / "loans.csv", "--target", "defaulted")
    assert result.exit_code == 0
    assert 'column = "defaulted"' in result.stdout and "[feature.sector]" in result.stdout
    out = tmp_path / "s.toml"
    assert run("schema", DEMO / "loans.csv", "--target", "defaulted", "--out", out).exit_code == 0
    assert out.read_text() == result.stdout


def test_fit_prints_what_it_did(model_file):
    result = run("fit", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                 "--max-features", "5", "--out", model_file.with_name("again.json"))
    assert "features used" in result.output and "owner_age_band" in result.output
    assert model_file.with_name("again.json").read_bytes() == model_file.read_bytes()


def test_score_writes_csv_with_ids_and_contributions(model_file, tmp_path):
    out = tmp_path / "scores.csv"
    result = run("score", model_file, DEMO / "loans.csv", "--out", out)
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out)
    assert list(table.columns[:3]) == ["application_id", "score", "probability"]
    assert len(table) == 5000
    # reference: the model file read with json and numpy alone (np.interp over a curve's
    # knots, a lookup for levels), and the logistic function for the probability
    content = json.loads(model_file.read_text(encoding="utf-8"))["model"]
    data = pd.read_csv(DEMO / "loans.csv")
    expected = np.full(len(data), float(content["intercept"]))
    for term in content["terms"]:
        column = data[term["feature"]]
        if term["kind"] == "curve":
            values = column.replace({"yes": 1.0, "no": 0.0}).to_numpy(dtype=float)
            part = np.interp(values, term["knots"], term["values"])
        else:
            lookup = dict(zip(term["levels"], term["values"], strict=True))
            part = column.map(lookup).fillna(term["unseen"]).to_numpy(dtype=float)
        np.testing.assert_array_equal(table[f"contribution:{term['feature']}"], part)  # exact
        expected += part
    np.testing.assert_allclose(table["score"], expected, rtol=0, atol=1e-12)
    np.testing.assert_allclose(table["probability"], 1 / (1 + np.exp(-expected)), rtol=0,
                               atol=1e-15)
    stdout = run("score", model_file, DEMO / "loans.csv", "--no-contributions")
    assert stdout.stdout.splitlines()[0] == "application_id,score,probability"


@pytest.mark.parametrize("fmt", ["csv", "markdown", "json"])
def test_shapes_formats(model_file, fmt, tmp_path):
    out = tmp_path / f"shapes.{fmt}"
    assert run("shapes", model_file, "--format", fmt, "--out", out).exit_code == 0
    text = out.read_text()
    if fmt == "json":
        rows = json.loads(text)
        assert {row["feature"] for row in rows} <= set(pd.read_csv(DEMO / "loans.csv").columns)
    elif fmt == "markdown":
        assert text.startswith("| feature | row |")
    else:
        assert text.startswith("feature,row,")


def test_shapes_table_in_terminal(model_file):
    result = run("shapes", model_file)
    assert result.exit_code == 0
    assert "Features by importance" in result.stdout
    one = run("shapes", model_file, "--feature", "late_payments_24m")
    assert "late_payments_24m (curve)" in one.stdout and "annual_revenue (" not in one.stdout


def one_line_error(result, *fragments: str) -> None:
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    text = " ".join(lines)
    assert text.startswith("error: "), result.output
    assert "Traceback" not in result.output
    for fragment in fragments:
        assert fragment in text, text


def test_errors_are_one_clear_line(tmp_path, model_file):
    one_line_error(run("fit", tmp_path / "none.csv", "--schema", DEMO / "loans.schema.toml",
                       "--out", tmp_path / "m.json"), "none.csv", "does not exist")
    bad = tmp_path / "bad.csv"
    bad.write_text(open(DEMO / "loans.csv").read().replace(",279.8,", ",lots,", 1))
    one_line_error(run("fit", bad, "--schema", DEMO / "loans.schema.toml", "--out",
                       tmp_path / "m.json"), "bad.csv", "annual_revenue", "data row 1")
    one_line_error(run("schema", DEMO / "loans.csv", "--target", "nope"), "nope")
    broken = tmp_path / "broken.json"
    broken.write_text(model_file.read_text()[:100])
    one_line_error(run("shapes", broken), "broken.json", "truncated")
    one_line_error(run("shapes", model_file, "--feature", "owner_age_band"),
                   "no term for 'owner_age_band'")
    one_line_error(run("score", model_file, DEMO / "listings.csv"), "listings.csv", "missing")
    assert not (tmp_path / "m.json").exists()


def test_unseen_level_is_a_warning_not_an_error(tmp_path):
    full = tmp_path / "full.json"
    assert run("fit", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
               "--out", full).exit_code == 0
    frame = pd.read_csv(DEMO / "loans.csv").head(5)
    frame.loc[0, "sector"] = "space tourism"
    path = tmp_path / "new.csv"
    frame.to_csv(path, index=False)
    result = run("score", full, path)
    assert result.exit_code == 0
    assert "warning:" in result.output and "'space tourism'" in result.output
    assert "1 row with a level never seen" in result.output


def test_shapes_folder_output_and_plots(model_file, tmp_path):
    result = run("shapes", model_file, "--format", "markdown", "--out", tmp_path / "tables",
                 "--plot", tmp_path / "pictures")
    assert result.exit_code == 0, result.output
    written = sorted(p.name for p in (tmp_path / "tables").iterdir())
    assert "summary.md" in written and "late_payments_24m.md" in written
    assert (tmp_path / "pictures" / "importance.png").is_file()
    one_line_error(run("shapes", model_file, "--out", tmp_path / "x"), "is a folder: give --format")
    assert not (tmp_path / "x").exists()


def test_family_options_are_checked(tmp_path):
    one_line_error(run("fit", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                       "--out", tmp_path / "m.json", "--option", "depth=3"),
                   "no option depth")
    one_line_error(run("fit", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                       "--out", tmp_path / "m.json", "--option", "nonsense"), "NAME=VALUE")


def test_compare_prints_headline_and_writes_json(tmp_path):
    small = tmp_path / "small.csv"
    pd.read_csv(DEMO / "loans.csv").head(1200).to_csv(small, index=False)
    out = tmp_path / "cmp.json"
    result = run("compare", small, "--schema", DEMO / "loans.schema.toml", "--family",
                 "sparse", "--family", "boosted", "--folds", "3", "--out", out)
    assert result.exit_code == 0, result.output
    assert result.stdout.lstrip().startswith("Best of 2 glass-box models:")
    assert "Cost against the benchmark" in result.stdout
    assert "positive means the glass-box model does worse" in result.stdout
    document = json.loads(out.read_text())
    assert document["settings"]["folds"] == 3
    assert document["provenance"]["data_file_sha256"].startswith("sha256:")
    assert document["provenance"]["schema_file_sha256"].startswith("sha256:")
    assert document["schema"]["target"]["better"] == "lower"
    assert document["rerun"] == ("glassbox compare small.csv --schema loans.schema.toml "
                                 "--family sparse --family boosted --benchmark trees "
                                 "--benchmark-budget 12 --folds 3 --repeats 1 --seed 0 "
                                 "--cutoff 0.5")
    # the benchmark's search in each fold: the settings it chose and the budget it used
    tuning = document["settings"]["benchmark_tuning"]
    assert [(row["repeat"], row["fold"]) for row in tuning] == [(0, 0), (0, 1), (0, 2)]
    assert all(row["budget"] == row["candidates_tried"] == 12 for row in tuning)
    assert all(row["chosen"]["rounds"] >= 1 for row in tuning)
    assert "tuned in each training fold: 12 candidate settings" in document["headline"]
    markdown = run("compare", small, "--schema", DEMO / "loans.schema.toml", "--family",
                   "sparse", "--folds", "3", "--format", "markdown",
                   "--benchmark-budget", "2")  # the layout is checked, not the benchmark
    assert markdown.stdout.startswith("# Accuracy cost of the glass-box models")


def test_compare_errors(tmp_path):
    tiny = tmp_path / "tiny.csv"
    pd.read_csv(DEMO / "loans.csv").head(3).to_csv(tiny, index=False)
    one_line_error(run("compare", tiny, "--schema", DEMO / "loans.schema.toml"),
                   "use --folds")
    unknown = run("compare", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                  "--family", "sparse", "--family", "forest")  # a usage error, found by click
    assert unknown.exit_code == 2 and "'forest' is not one of" in unknown.output
    one_line_error(run("compare", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                       "--family", "sparse", "--out", tmp_path / "x.txt"),
                   "ending in .json, .md, .markdown", "the suffix .txt says no format")
