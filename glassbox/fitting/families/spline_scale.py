"""The scale a spline term is fitted on: where its knots fall and what its penalty favours.

pygam spaces a spline's knots evenly between the smallest and largest value it
sees, and its penalty pulls the curve toward a straight line in those values. On
a skewed feature (money amounts) evenly spaced knots leave the long tail with a
handful of rows between knots, and a straight line there runs on far past the
data: the tail of the curve is set by a few rows, or by none. So pygam is given
h(x), a monotone increasing map of the feature, and the table is the composite
s(h(x)) tabulated in x. An increasing map keeps a monotone declaration's direction.

- "power" (the default): the Box–Cox transform whose power is the maximum-
  likelihood choice (as `scipy.stats.boxcox_normmax` finds it), i.e. the power under which the
  training values look most like a normal sample: about 0 (the logarithm) for a
  log-normal money amount, about 1 (the values themselves) for a symmetric feature.
  A feature with zero or negative values is first shifted so that its smallest
  value becomes the gap between its two smallest distinct values. Knots are evenly
  spaced on that scale and the curve leans toward a straight line in it, e.g. in
  the logarithm of a money amount.
- "rank": the piecewise cubic (PCHIP: increasing, continuous slope) through the
  training quantiles at k/K (K knot intervals), each sent to k/K, so the knots sit
  at those quantiles and every interval holds about the same number of rows; the
  curve leans toward a straight line in the rank, so it flattens in the tails.
- "raw": the values themselves, pygam's own even knots.

A term with two values, or whose power scale would not keep its distinct values
apart in floating point, is fitted raw; the family records that as a fallback.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import optimize
from scipy.interpolate import PchipInterpolator

from glassbox.fitting.families.spline_kernel import box_cox_variance

SCALES = ("power", "rank", "raw")


@dataclass(frozen=True)
class Scale:
    """h(x) for one feature, defined on its training range (tables never leave it)."""

    kind: str = "raw"
    low: float = 0.0  # the training range: values outside are clamped to it
    high: float = 0.0
    power: float = 1.0  # "power": h = (((x + shift) / centre) ** power - 1) / power
    shift: float = 0.0
    centre: float = 1.0
    points: tuple[float, ...] = ()  # "rank": h passes through (points[i], ranks[i])
    ranks: tuple[float, ...] = ()

    def __call__(self, values: np.ndarray) -> np.ndarray:
        values = np.asarray(values, dtype=float)
        if self.kind == "raw":
            return values
        inside = np.clip(values, self.low, self.high)
        if self.kind == "rank":
            return PchipInterpolator(self.points, self.ranks)(inside)
        ratio = np.log((inside + self.shift) / self.centre)
        return ratio if self.power == 0.0 else np.expm1(self.power * ratio) / self.power

    def record(self) -> dict[str, Any]:
        """The scale as the model file states it: enough to recompute h."""
        if self.kind == "power":
            return {"scale": "power", "power": self.power, "shift": self.shift,
                    "centre": self.centre}
        if self.kind == "rank":
            return {"scale": "rank", "points": list(self.points), "ranks": list(self.ranks)}
        return {"scale": "raw"}

    def words(self) -> str:
        if self.kind == "power":
            return f"knots even on a Box-Cox power scale (power {self.power:.2f})"
        if self.kind == "rank":
            return "knots at training quantiles"
        return "evenly spaced knots"


def rank_scale(values: np.ndarray, intervals: int) -> Scale:
    """The map sending the training quantiles at k/K to k/K (tied ones: their mean k/K)."""
    shares = np.linspace(0.0, 1.0, intervals + 1)
    points, inverse = np.unique(np.quantile(values, shares), return_inverse=True)
    ranks = np.bincount(inverse, weights=shares) / np.bincount(inverse)
    return Scale("rank", float(points[0]), float(points[-1]),
                 points=tuple(float(v) for v in points), ranks=tuple(float(v) for v in ranks))


def box_cox_power(values: np.ndarray, counts: np.ndarray | None = None) -> float:
    """The power maximising the Box–Cox profile log-likelihood of positive `values`,
    (power - 1) sum(log y) - n/2 log(variance of the transformed y), by Brent's method
    from the bracket (-2, 2) as `scipy.stats.boxcox_normmax` does, computed over the
    distinct values with their counts (the same likelihood, a fraction of the work;
    `counts` given: `values` are the distinct values, sorted)."""
    distinct, counts = (np.unique(values, return_counts=True) if counts is None
                        else (values, counts))
    logs = np.log(distinct)
    weights = counts.astype(float)
    rows = weights.sum()
    centre = float(weights @ logs / rows)  # on y / exp(centre) the powers stay finite
    shifted = logs - centre
    total_log = float(weights @ logs)

    def negative(power: float) -> float:
        variance = box_cox_variance(shifted, weights, power)
        # the variance of the raw transform is exp(2 power centre) times this one
        return -((power - 1) * total_log - rows / 2 * (np.log(variance) + 2 * power * centre))

    return float(optimize.brent(negative, brack=(-2.0, 2.0)))


def power_scale(distinct: np.ndarray, counts: np.ndarray) -> Scale:
    """The Box–Cox scale with the maximum-likelihood power (see the module), from the
    feature's distinct values (sorted) and their counts."""
    low, high = float(distinct[0]), float(distinct[-1])
    shift = 0.0 if low > 0 else float(distinct[1] - distinct[0]) - low
    shifted = distinct + shift
    # the median of the rows: the mean of the two middle ones when their number is even
    rows = int(counts.sum())
    ends = np.cumsum(counts)
    middle = shifted[np.searchsorted(ends, [(rows - 1) // 2 + 1, rows // 2 + 1])]
    return Scale("power", low, high, power=box_cox_power(shifted, counts), shift=shift,
                 centre=float(middle.mean()))


def fit_scale(values: np.ndarray, kind: str, intervals: int) -> tuple[Scale, str | None]:
    """The scale of `kind` for a feature's training values, and why it fell back to raw."""
    if kind == "raw":
        return Scale(), None
    distinct, counts = np.unique(values, return_counts=True)
    if len(distinct) < 3:
        return Scale(), None  # two values: any increasing map gives the same fit
    scale = rank_scale(values, intervals) if kind == "rank" else power_scale(distinct, counts)
    mapped = scale(distinct)
    if not (np.all(np.isfinite(mapped)) and np.all(np.diff(mapped) > 0)):
        return Scale(), (f"its {kind} scale (power {scale.power:.3g}) does not keep its "
                         "values apart in floating point: fitted on the values themselves")
    return scale, None
