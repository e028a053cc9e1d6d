"""Sums of floats that do not depend on the order or the grouping of the values.

Monitoring adds up contributions block by block, on one machine or on a dask cluster; a
float sum rounds after every addition, so blocks of another size would give other last
digits. An `ExactSum` keeps the exact total instead (every finite double is a whole
multiple of 2**-1074, so the total is one big integer in those units) and rounds once,
when it is read: the same numbers give the same bits whatever the blocks.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

SCALE = 1130  # the total is kept in units of 2**-SCALE: below any double's last bit
_HALF = 26  # mantissas are split into two halves of at most 27 bits before summing
_LIMIT = 1 << 26  # values per pass: the halves' float sums stay exact below 2**53
_FRACTION = (1 << 52) - 1
_SIGN = 2048  # places 0..2047 hold positive values by exponent, 2048.. negative ones


class ExactSum:
    """The exact sum of some finite floats; `value()` rounds it once to the nearest float."""

    __slots__ = ("units",)

    def __init__(self, units: int = 0) -> None:
        self.units = int(units)  # the total in units of 2**-SCALE

    @classmethod
    def of(cls, values: Iterable[float] | np.ndarray) -> ExactSum:
        """The exact sum of an array of finite floats (NaN and infinity refused)."""
        positive, negative = cls.split(values)
        return cls(positive.units - negative.units)

    @classmethod
    def split(cls, values: Iterable[float] | np.ndarray) -> tuple[ExactSum, ExactSum]:
        """The exact sums of the positive values and of the negative values' sizes, in one
        pass: their difference is the sum, their total the sum of sizes."""
        values = np.ascontiguousarray(values, dtype=float).ravel()
        if not np.isfinite(values).all():
            raise ValueError("an exact sum takes finite numbers only")
        positive = negative = 0
        for start in range(0, len(values), _LIMIT):
            more, less = _units(values[start:start + _LIMIT])
            positive, negative = positive + more, negative + less
        return cls(positive), cls(negative)

    def __add__(self, other: ExactSum) -> ExactSum:
        return ExactSum(self.units + other.units)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, ExactSum) and other.units == self.units

    def __hash__(self) -> int:
        return hash(self.units)

    def __repr__(self) -> str:
        return f"ExactSum({self.value()!r})"

    def value(self) -> float:
        """The total, correctly rounded (Python divides integers with one rounding); an
        infinity when it is beyond the finite floats."""
        return _divided(self.units, 1 << SCALE)

    def mean(self, count: int) -> float:
        """The total over `count`, rounded once (NaN for no rows)."""
        return _divided(self.units, count << SCALE) if count else float("nan")

    def to_json(self) -> str:
        return str(self.units)

    @classmethod
    def from_json(cls, text: str) -> ExactSum:
        return cls(int(text))


def _divided(units: int, by: int) -> float:
    try:
        return units / by
    except OverflowError:
        return float("inf") if units > 0 else float("-inf")


def _units(values: np.ndarray) -> tuple[int, int]:
    """The positive values' and the negative values' sizes' sums, in units of 2**-SCALE.

    A double is sign, 11 exponent bits and 52 fraction bits: its size is the whole number
    `mantissa` (the fraction with its leading 1, none below the normal range) times
    2**(max(exponent, 1) - 1075). Mantissas are summed by sign and exponent in two halves
    whose float sums are exact, then put together as Python integers."""
    if len(values) == 0:
        return 0, 0
    bits = values.view(np.int64)
    exponent = (bits >> 52) & 0x7FF
    mantissa = (bits & _FRACTION) | ((exponent > 0).astype(np.int64) << 52)
    place = np.maximum(exponent, 1) + (bits < 0) * _SIGN
    high = np.bincount(place, weights=(mantissa >> _HALF).astype(float), minlength=2 * _SIGN)
    low = np.bincount(place, weights=(mantissa & ((1 << _HALF) - 1)).astype(float),
                      minlength=2 * _SIGN)
    sums = [0, 0]
    for at in np.flatnonzero((high != 0) | (low != 0)).tolist():
        whole = (int(high[at]) << _HALF) + int(low[at])
        sums[at >= _SIGN] += whole << (at % _SIGN - 1075 + SCALE)
    return sums[0], sums[1]


def weighted_sums(values: np.ndarray, weights: np.ndarray) -> tuple[ExactSum, ExactSum]:
    """`ExactSum.split` of each value repeated its weight's number of times, without the
    rows: every finite double is a whole number (its 53-bit mantissa) times a power of two,
    so the exact total is whole-number arithmetic."""
    values = np.asarray(values, dtype=float)
    positive, negative = grouped_sums(values, weights, np.zeros(len(values), dtype=np.int64), 1)
    return positive[0], negative[0]


def grouped_sums(values: np.ndarray, weights: np.ndarray, groups: np.ndarray,
                 count: int) -> tuple[list[ExactSum], list[ExactSum]]:
    """Per group 0..count-1, `weighted_sums` of its values: the exact sums of the positive
    values and of the negative values' sizes, each value repeated its weight's number of
    times. Whole weights up to _LIMIT in all are summed as `_units` sums rows (a half
    mantissa times a weight stays below 2**53, and so does every partial sum); more, one
    value at a time in Python integers. Either way exact, so the same sums."""
    values = np.ascontiguousarray(values, dtype=float)
    weights = np.asarray(weights, dtype=np.int64)
    groups = np.asarray(groups, dtype=np.int64)
    if not np.isfinite(values).all():
        raise ValueError("an exact sum takes finite numbers only")
    sums = [[0, 0] for _ in range(count)]
    if int(weights.sum()) > _LIMIT or (weights < 0).any():
        fractions, exponents = np.frexp(values)
        mantissas = np.ldexp(fractions, 53).astype(np.int64)  # exact: 53 bits
        for index in np.flatnonzero(weights):
            units = (int(mantissas[index]) * int(weights[index])) << int(
                exponents[index] - 53 + SCALE)
            sums[groups[index]][units < 0] += abs(units)
    elif len(values):
        bits = values.view(np.int64)
        exponent = (bits >> 52) & 0x7FF
        mantissa = (bits & _FRACTION) | ((exponent > 0).astype(np.int64) << 52)
        place = groups * (2 * _SIGN) + np.maximum(exponent, 1) + (bits < 0) * _SIGN
        size = count * 2 * _SIGN
        high = np.bincount(place, weights=((mantissa >> _HALF) * weights).astype(float),
                           minlength=size)
        low = np.bincount(place, weights=((mantissa & ((1 << _HALF) - 1)) * weights
                                          ).astype(float), minlength=size)
        for at in np.flatnonzero((high != 0) | (low != 0)).tolist():
            group, at = divmod(at, 2 * _SIGN)
            whole = (int(high[group * 2 * _SIGN + at]) << _HALF) + int(
                low[group * 2 * _SIGN + at])
            sums[group][at >= _SIGN] += whole << (at % _SIGN - 1075 + SCALE)
    return ([ExactSum(p) for p, _ in sums], [ExactSum(n) for _, n in sums])


def exact_variance(total: ExactSum, squares: ExactSum, count: int, ddof: int = 0) -> float:
    """The variance of `count` values from the exact sums of the values and of their
    squares, in whole numbers until one final rounding (no cancellation however large the
    mean); ddof=1 for the sample variance. NaN when count <= ddof. Callers square each
    value in floats (one rounding each), so values that are all the same give a variance
    within about 1e-16 of their mean square, not exactly 0."""
    if count <= ddof:
        return float("nan")
    numerator = count * squares.units * (1 << SCALE) - total.units * total.units
    return max(_divided(numerator, (1 << (2 * SCALE)) * count * (count - ddof)), 0.0)


def exact_mean(values: Iterable[float] | np.ndarray) -> float:
    """The mean of finite floats with one rounding (NaN for none)."""
    values = np.asarray(values, dtype=float).ravel()
    return ExactSum.of(values).mean(len(values))
