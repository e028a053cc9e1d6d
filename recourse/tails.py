"""A warning for a proposed value in a sparse, uncertain tail of the training data.

Percentile costs make a move through a thinly populated tail look nearly free (the last
percentile point may span most of the range), and there the model's table rests on few rows.
The rule, one for every numeric change of a plan (numbers and integers; flags and categories
are not tails), computed from the model's own table and training profile only:

- sparse: the proposed value lies outside the central 98% of training values (below the 1st
  or above the 99th training percentile, the range reasons and the "no plan" diagnosis use);
- uncertain: the term's band (upper minus lower) at the proposed value is more than WIDE
  times its median width over the 101 stored training percentiles (common practice, no
  source). A term with no band (the sparse family) is flagged on the sparse rule alone, and
  the warning says "no band". A model that keeps no profile of the feature gives no warning.

A curve's band is read between knots by straight lines, as the curve is (held level beyond
the end knots); a step table's band is its bin's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from glassbox.core.additive import AdditiveModel, CurveTerm, StepTerm, Term
from glassbox.explaining.reasons import CENTRAL, central_range

WIDE = 2.0  # a band this many times its median width over training is wide (no source)
TAIL_KINDS = ("number", "integer")
TAIL_WORDS = "cheapest plans with a change into a sparse, uncertain tail"  # summaries' line


@dataclass(frozen=True)
class TailWarning:
    """Why a proposed value is flagged: which tail, and the band there (None: no band)."""

    feature: str
    value: float
    side: str  # "below" | "above"
    edge: float  # the 1st (below) or 99th (above) training percentile
    width: float | None  # the band's width at the value; None: the term has no band
    typical: float | None  # the band's median width over the training percentiles

    def text(self) -> str:
        percentile = CENTRAL[0] if self.side == "below" else CENTRAL[1]
        where = (f"{self.feature} {self.value:.6g} is {self.side} the {_ordinal(percentile)} "
                 f"training percentile ({self.edge:.4g}): few training rows")
        if self.width is None:
            return f"{where}; no band, so how sure the table is there is unknown"
        times = (f"{self.width / self.typical:.3g} times" if self.typical > 0
                 else "wider than")
        return (f"{where}, and the band is {self.width:.3g} wide, {times} its median "
                f"({self.typical:.3g})")


def _ordinal(number: int) -> str:
    return f"{number}{'st' if number % 10 == 1 and number != 11 else 'th'}"


def band_width(term: Term, values: np.ndarray) -> np.ndarray | None:
    """The band's width (upper - lower) at each value, or None when the term has no band."""
    if term.lower is None or term.upper is None:
        return None
    width = np.subtract(term.upper, term.lower)
    values = np.asarray(values, dtype=float)
    if isinstance(term, CurveTerm):
        return np.interp(values, term.knots, width)
    if isinstance(term, StepTerm):
        return width[term.bin_of(values)]
    return None


def tail_warning(model: AdditiveModel, feature: str, value: float) -> TailWarning | None:
    """The warning for `value` proposed for `feature`, or None when the rule does not flag it."""
    if value is None or model.schema.feature(feature).kind not in TAIL_KINDS:
        return None
    return tail_warnings(model, feature, np.array([value], dtype=float))[0]


def tail_warnings(model: AdditiveModel, feature: str,
                  values: np.ndarray) -> list[TailWarning | None]:
    """`tail_warning` for many values proposed for one feature, read with arrays."""
    none: list[TailWarning | None] = [None] * len(values)
    if model.schema.feature(feature).kind not in TAIL_KINDS or not len(values):
        return none
    values = np.asarray(values, dtype=float)
    low, high = central_range(model, feature)
    if not (math.isfinite(low) and math.isfinite(high)):
        return none
    outside = np.flatnonzero((values < low) | (values > high))  # nan is neither
    if not len(outside):
        return none
    term = model.term(feature)
    percentiles = np.asarray(model.profile(feature).percentiles, dtype=float)
    widths = band_width(term, np.concatenate([values[outside], percentiles]))
    typical = None if widths is None else float(np.median(widths[len(outside):]))
    for k, at in enumerate(outside):
        value = float(values[at])
        side, edge = ("below", low) if value < low else ("above", high)
        if widths is None:
            none[at] = TailWarning(feature, value, side, edge, None, None)
        elif widths[k] > WIDE * typical:
            none[at] = TailWarning(feature, value, side, edge, float(widths[k]), typical)
    return none
