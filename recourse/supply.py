"""Which stated values would do: for a plan that states a missing value, every value the
rules allow that reaches the goal together with the plan's other changes.

Supplying costs the same whatever value is stated; the planner weighs the value the model
scores best, then proposes the least favourable value that still reaches the goal
(`least_first`), and the person states their own. These are the values that would serve as
well, read exactly off the term's table: a curve's straight lines meet the needed
contribution at points computed in floating point; a step table's bins are taken whole.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm
from recourse.candidates import supply_rules, supply_values
from recourse.errors import MutabilityError
from recourse.grid import LARGEST_STEP_COUNT, WHOLE, rounded
from recourse.mutability import ANY_LEVEL, FeatureRule


@dataclass(frozen=True)
class Stretch:
    """The values from `low` to `high` (either may be infinite); `low` itself is left out
    when `low_open` (a step table's bin starts just past its lower edge)."""

    low: float
    high: float
    low_open: bool = False


def accepted(model: AdditiveModel, rule: FeatureRule, floor: float,
             direction: str) -> tuple[Stretch, ...] | tuple[str, ...]:
    """The values (levels, or stretches of numbers) the rule lets be stated whose
    contribution is `floor` or better ("at-least": higher is better)."""
    term = model.term(rule.feature)
    toward = 1.0 if direction == "at-least" else -1.0
    if isinstance(term, LevelsTerm):
        allowed = set(term.levels) if rule.moves is None else set(rule.moves.get(ANY_LEVEL, ()))
        return tuple(level for level, value in zip(term.levels, term.values, strict=True)
                     if level in allowed and toward * (value - floor) >= 0)
    lower, upper, step = supply_rules(model, rule)
    if isinstance(term, CurveTerm):
        found = _curve(np.asarray(term.knots, float), np.asarray(term.values, float), floor,
                       toward, lower, upper)
    else:
        found = _bins(np.asarray(term.edges, float), np.asarray(term.values, float), floor,
                      toward, lower, upper)
    return found if step is None else _on_grid(found, step, rule.feature)


def least_first(model: AdditiveModel, rule: FeatureRule,
                values: tuple[Stretch, ...] | tuple[str, ...], floor: float,
                direction: str) -> list[float | str]:
    """The values that would do (`values`, from `accepted`), the one the model scores least
    favourably first, so a plan can ask for no more than the goal needs ("572 or more would
    do" rather than the best value the rules allow). Numbers are searched where such a value
    lies: the breaks and bounds `supply_values` lists, the stretches' own ends, and (with no
    step) the floating-point neighbours of those ends."""
    term = model.term(rule.feature)
    toward = 1.0 if direction == "at-least" else -1.0
    if isinstance(term, LevelsTerm):
        table = dict(zip(term.levels, term.values, strict=True))
        return sorted((v for v in values if v in table), key=lambda v: toward * table[v])
    lower, upper, step = supply_rules(model, rule)
    breaks = term.knots if isinstance(term, CurveTerm) else term.edges
    points = list(supply_values(breaks, lower, upper, step, rule.feature))
    for stretch in values:
        for end in (stretch.low, stretch.high):
            if math.isfinite(end):
                points.append(end)
                if step is None:
                    points += [np.nextafter(end, -np.inf), np.nextafter(end, np.inf)]
    points = np.array(sorted({float(x) for x in points if lower <= x <= upper}), dtype=float)
    inside = np.array([any(s.low <= x <= s.high and not (s.low_open and x == s.low)
                           for s in values) for x in points], dtype=bool)
    points = points[inside]
    gains = toward * (term.evaluate(points) - floor)
    order = np.argsort(gains, kind="stable")
    return [float(points[i]) for i in order if gains[i] >= -1e-12]


def _curve(knots: np.ndarray, values: np.ndarray, floor: float, toward: float, lower: float,
           upper: float) -> tuple[Stretch, ...]:
    def good(x: np.ndarray) -> np.ndarray:
        return toward * (np.interp(x, knots, values) - floor) >= 0

    ok = good(knots)
    crossing = np.flatnonzero(ok[:-1] != ok[1:])
    left, right = knots[crossing], knots[crossing + 1]
    roots = left + (floor - values[crossing]) * (right - left) / (
        values[crossing + 1] - values[crossing])
    points = np.unique(np.r_[knots, roots, [b for b in (lower, upper) if math.isfinite(b)]])
    points = points[(points >= lower) & (points <= upper)]
    if not len(points):  # the bounds lie between two breaks that are both outside them
        return ()
    # beyond the outer points the table is flat (or the bounds stop it)
    ends = np.r_[lower if math.isinf(lower) else points[0], points,
                 upper if math.isinf(upper) else points[-1]]
    middles = np.r_[points[0], (points[:-1] + points[1:]) / 2.0, points[-1]]
    pieces = [Stretch(float(a), float(b)) for a, b, keep in
              zip(ends[:-1], ends[1:], good(middles), strict=True) if keep and a <= b]
    pieces += [Stretch(float(p), float(p)) for p in points[good(points)]]
    return _merged(pieces)


def _bins(edges: np.ndarray, values: np.ndarray, floor: float, toward: float, lower: float,
          upper: float) -> tuple[Stretch, ...]:
    starts, stops = np.r_[-math.inf, edges], np.r_[edges, math.inf]
    pieces = []
    for start, stop, value in zip(starts, stops, values, strict=True):
        low, high = max(start, lower), min(stop, upper)
        low_open = start >= lower  # the bin starts just past its lower edge
        if toward * (value - floor) >= 0 and (low < high or (low == high and not low_open)):
            pieces.append(Stretch(float(low), float(high), bool(low_open and
                                                                  math.isfinite(low))))
    return _merged(pieces)


def _merged(pieces: list[Stretch]) -> tuple[Stretch, ...]:
    """Overlapping or touching stretches joined, in order (every stretch holds its high end,
    so one that starts where another ends continues it)."""
    out: list[Stretch] = []
    for piece in sorted(pieces, key=lambda p: (p.low, p.low_open, p.high)):
        if out and piece.low <= out[-1].high:
            last = out[-1]
            out[-1] = Stretch(last.low, max(last.high, piece.high), last.low_open)
        else:
            out.append(piece)
    return tuple(out)


def _on_grid(found: tuple[Stretch, ...], step: float, feature: str) -> tuple[Stretch, ...]:
    """Each stretch narrowed to the multiples of `step` in it (dropped if there are none)."""
    out = []
    for piece in found:
        low = _grid_end(piece.low, step, 1, piece.low_open, feature)
        high = _grid_end(piece.high, step, -1, False, feature)
        if low <= high:
            out.append(Stretch(low, high))
    return tuple(out)


def _grid_end(end: float, step: float, side: int, open_: bool, feature: str) -> float:
    """The multiple of `step` nearest `end` on the inside (side +1: at or past it, past it
    when `open_`; -1: at or before it), found among the four multiples around the quotient
    (rounding moves a product by less than a step); an infinite end stays."""
    if not math.isfinite(end):
        return end
    if not abs(end / step) < WHOLE:
        raise MutabilityError(f"[feature.{feature}] step {step:g} is too fine for the "
                              f"table's range: more than {LARGEST_STEP_COUNT:,} steps")
    base = math.ceil(end / step) if side > 0 else math.floor(end / step)
    tries = rounded((base + side * np.arange(-1, 3)) * step)
    inside = side * (tries - end) > 0 if open_ else side * (tries - end) >= 0
    return float(tries[np.argmax(inside)])


def accepted_words(values: tuple[Stretch, ...] | tuple[str, ...], kind: str,
                   show: Callable[[float | str], str]) -> str:
    """The values that would do, in words to follow "any value" ('from 25,000 to 80,000',
    '1,200 or more') or "any of" (levels, a flag's values: 'rent or own'); `show` writes one
    value in the feature's units."""
    if kind == "flag":  # a flag's values are 0 and 1: name those inside
        values = tuple(show(v) for v in (0.0, 1.0) if any(
            s.low <= v <= s.high and not (s.low_open and v == s.low) for s in values))
    words = []
    for value in values:
        if isinstance(value, str):
            words.append(value)
        elif value.low == value.high:
            words.append(show(value.low))
        elif math.isinf(value.low) and math.isinf(value.high):
            words.append("at all")
        elif math.isinf(value.low):
            words.append(f"{show(value.high)} or less")
        elif math.isinf(value.high):
            words.append(f"more than {show(value.low)}" if value.low_open
                         else f"{show(value.low)} or more")
        else:
            start = "more than" if value.low_open else "from"
            words.append(f"{start} {show(value.low)} to {show(value.high)}")
    if len(words) < 2:
        return words[0] if words else "none"
    return ", ".join(words[:-1]) + " or " + words[-1]
