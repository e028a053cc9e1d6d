"""The logistic function, 1 / (1 + exp(-score)): log-odds to probability, without loading
scipy to score a few rows.

scipy.special.expit computes, for float64, `1 / (1 + exp(-x))` with the C library's `exp`.
numpy's own `exp` is not that function: where numpy runs its AVX-512 kernel it differs from
the C library's in the last bit for about one value in twenty, and the probability then by
up to a few units in the last place. So `1 / (1 + np.exp(-x))` would change printed
probabilities. Here, up to `SMALL` values go through `math.exp`, which is the C library's
`exp` (scipy's C++ source is not shipped in the wheel; its behaviour was checked instead:
10^7 values, ±800, the overflow edge, zeros, infinities and nan, all bit for bit equal), so
every bit is scipy's; more values go to
scipy.special.expit itself, whose import (0.15-0.4 s) is then small beside the work. Both
routes give the same bits, so the answer never depends on how many rows are scored
(tests/test_logistic.py holds them equal on a grid of values and on real scores).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

SMALL = 20_000  # values scored one by one (about 3 ms); beyond, scipy's expit


def _one(value: float) -> float:
    try:
        return 1.0 / (1.0 + math.exp(-value))
    except OverflowError:  # exp(-value) past the largest float: scipy's inf gives 0.0
        return 0.0


def logistic(score: Any) -> Any:
    """1 / (1 + exp(-score)) in float64, element by element, bit for bit as
    scipy.special.expit; a 0-d input gives a numpy scalar, as expit does."""
    values = np.asarray(score, dtype=np.float64)
    if values.size > SMALL:
        from scipy.special import expit

        return expit(values)
    out = np.array([_one(value) for value in values.ravel().tolist()],
                   dtype=np.float64).reshape(values.shape)
    return out[()] if out.ndim == 0 else out
