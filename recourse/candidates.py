"""Candidate values per feature: where it may move, what that adds, what it costs.

Each list starts with the current value (cost 0). Contributions are read from
the model's own term table, so a plan built from them scores exactly as the
model scores the changed row.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from glassbox.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm
from glassbox.errors import OptionError
from recourse.errors import MutabilityError
from recourse.mutability import ANY_LEVEL, NO_SPREAD, FeatureRule, Mutability, unit_spread

DECIMALS = 12  # grid values are rounded to drop float noise (0.1 + 0.2 -> 0.3)
TOLERANCE = 1e-9  # relative to the step: a grid point this close to a bound is on it


@dataclass(frozen=True)
class Candidate:
    """One value a feature may take, its contribution to the score and its cost."""

    value: float | str
    contribution: float
    cost: float
    current: bool


def feature_candidates(model: AdditiveModel, feature: str, current: float | str,
                       rule: FeatureRule, cap: int = 300) -> list[Candidate]:
    """The current value (first, cost 0) and every value the rule lets the feature reach."""
    if cap < 3:
        raise OptionError(f"cap must be at least 3 (current and both extremes), not {cap}")
    term = model.term(feature)
    if isinstance(term, LevelsTerm):
        return _level_candidates(term, str(current), rule)
    now = float(current)
    kind = model.schema.feature(feature).kind
    lower, upper = _interval(feature, now, rule, kind)
    if rule.change == "fixed":
        values: list[float] = []
    else:
        step = rule.step if rule.step is not None else (1.0 if kind != "number" else None)
        if isinstance(term, StepTerm):
            values = _step_values(term, now, lower, upper, step, rule.change)
        else:
            values = _curve_values(term, now, lower, upper, step, rule.change, cap)
    everything = np.array([now, *values], dtype=float)
    contributions = term.evaluate(everything)
    costs = _costs(model, feature, now, everything, rule)
    costs[0] = 0.0
    return [Candidate(float(v), float(c), float(k), i == 0)
            for i, (v, c, k) in enumerate(zip(everything, contributions, costs, strict=True))]


def row_candidates(model: AdditiveModel, row: pd.Series,
                   mutability: Mutability) -> dict[str, list[Candidate]]:
    """Candidates of every feature of one raw row that has a term and a rule."""
    encoded = model.encode(pd.DataFrame([row]))
    return encoded_candidates(model, encoded.iloc[0], mutability)


def encoded_candidates(model: AdditiveModel, values: Mapping[str, Any],
                       mutability: Mutability) -> dict[str, list[Candidate]]:
    """The same, from a row already typed by `AdditiveModel.encode` (feature -> value)."""
    out: dict[str, list[Candidate]] = {}
    for feature in model.features:
        rule = mutability.rules.get(feature)
        if rule is None:
            continue
        try:
            out[feature] = feature_candidates(model, feature, values[feature], rule)
        except MutabilityError as exc:
            if not mutability.source:
                raise
            raise MutabilityError(f"{mutability.source}: {exc}") from None
    return out


# ---------------------------------------------------------------- categories


def _level_candidates(term: LevelsTerm, current: str, rule: FeatureRule) -> list[Candidate]:
    if isinstance(rule.cost, str):
        raise MutabilityError(f"[feature.{term.feature}] cost of a category must be a number "
                              f"per move, not {rule.cost!r}")
    if rule.change == "fixed":
        allowed: set[str] = set()
    elif rule.moves is None:
        allowed = set(term.levels)
    else:
        allowed = set(rule.moves.get(current, ())) | set(rule.moves.get(ANY_LEVEL, ()))
    levels = [current] + [level for level in term.levels if level in allowed and level != current]
    contributions = term.evaluate(np.array(levels, dtype=object))
    return [Candidate(level, float(c), 0.0 if i == 0 else float(rule.cost), i == 0)
            for i, (level, c) in enumerate(zip(levels, contributions, strict=True))]


# ---------------------------------------------------------------- numbers


def _interval(feature: str, now: float, rule: FeatureRule, kind: str) -> tuple[float, float]:
    """Bounds, largest change and direction as one closed interval around `now`."""
    here = f"[feature.{feature}]"
    if rule.change != "fixed":
        if rule.lower is not None and now < rule.lower:
            raise MutabilityError(f"{here} lower bound {rule.lower:g} excludes the current "
                                  f"value {now:g}")
        if rule.upper is not None and now > rule.upper:
            raise MutabilityError(f"{here} upper bound {rule.upper:g} excludes the current "
                                  f"value {now:g}")
    lower = -math.inf if rule.lower is None else rule.lower
    upper = math.inf if rule.upper is None else rule.upper
    if rule.largest_change is not None:  # rounded like the grid, so now + k*step can hit it
        lower = max(lower, round(now - rule.largest_change, DECIMALS))
        upper = min(upper, round(now + rule.largest_change, DECIMALS))
    if kind == "flag":
        lower, upper = max(lower, 0.0), min(upper, 1.0)
    if rule.change == "increase":
        lower = now
    elif rule.change == "decrease":
        upper = now
    return lower, upper


def _grid_range(now: float, lower: float, upper: float, step: float) -> tuple[float, float]:
    """The smallest and largest k with now + k*step (rounded) inside [lower, upper]."""
    low = -math.inf if math.isinf(lower) else math.ceil((lower - now) / step - TOLERANCE)
    high = math.inf if math.isinf(upper) else math.floor((upper - now) / step + TOLERANCE)
    while high > 0 and _point(now, high, step) > upper:  # type: ignore[arg-type]
        high -= 1
    while low < 0 and _point(now, low, step) < lower:  # type: ignore[arg-type]
        low += 1
    return min(low, 0), max(high, 0)


def _point(now: float, k: int, step: float) -> float:
    return round(now + k * step, DECIMALS)


def _step_values(term: StepTerm, now: float, lower: float, upper: float,
                 step: float | None, change: str) -> list[float]:
    """One value per reachable bin: the point of the bin closest to `now`."""
    edges = list(term.edges)
    here = int(term.bin_of(np.array([now]))[0])
    bins = len(term.values)
    values: list[float] = []
    k_low, k_high = _grid_range(now, lower, upper, step) if step else (0, 0)
    if change in ("increase", "either"):
        for index in range(here + 1, bins):
            edge = edges[index - 1]  # the bin is (edge, next edge]
            if step is None:
                value = float(np.nextafter(edge, math.inf))
            else:
                k = max(1, math.floor((edge - now) / step))
                while _point(now, k, step) <= edge and k <= k_high:
                    k += 1
                if k > k_high:
                    break
                value = _point(now, k, step)
            if value > upper:
                break
            if int(term.bin_of(np.array([value]))[0]) == index:
                values.append(value)
    if change in ("decrease", "either"):
        for index in range(here - 1, -1, -1):
            edge = edges[index]  # the bin is (previous edge, edge]
            if step is None:
                value = edge
            else:
                k = min(-1, math.ceil((edge - now) / step))
                while _point(now, k, step) > edge and k >= k_low:
                    k -= 1
                if k < k_low:
                    break
                value = _point(now, k, step)
            if value < lower:
                break
            if int(term.bin_of(np.array([value]))[0]) == index:
                values.append(value)
    return sorted(values)


def _curve_values(term: CurveTerm, now: float, lower: float, upper: float,
                  step: float | None, change: str, cap: int) -> list[float]:
    """Grid points (or, with no grid, knots and finite bounds) within the interval."""
    knots = np.asarray(term.knots, dtype=float)
    if step is None:
        inside = knots[(knots >= lower) & (knots <= upper)]
        points = set(inside.tolist()) | {b for b in (lower, upper) if math.isfinite(b)}
        values = sorted(p for p in points if p != now)
        return _nearest(values, now, cap)
    # An unbounded side stops at the first grid point at or past the outermost knot:
    # beyond it the table is flat, so further points only cost more.
    k_low, k_high = _grid_range(now, lower, upper, step)
    if math.isinf(k_low):
        k_low = math.floor((min(knots[0], now) - now) / step + TOLERANCE)
    if math.isinf(k_high):
        k_high = math.ceil((max(knots[-1], now) - now) / step - TOLERANCE)
    if change == "increase":
        k_low = 0
    elif change == "decrease":
        k_high = 0
    ks = [k for k in range(k_low, k_high + 1) if k != 0] if k_high - k_low < cap else (
        _nearest_steps(k_low, k_high, cap))
    return sorted({_point(now, k, step) for k in ks} - {now})


def _nearest_steps(k_low: int, k_high: int, cap: int) -> list[int]:
    """Both extremes, then the steps nearest zero, `cap - 1` in all."""
    chosen = [k for k in (k_low, k_high) if k != 0]
    distance = 1
    while len(chosen) < cap - 1 and (distance <= -k_low or distance <= k_high):
        for k in (-distance, distance):
            if k_low <= k <= k_high and k not in chosen and len(chosen) < cap - 1:
                chosen.append(k)
        distance += 1
    return chosen


def _nearest(values: list[float], now: float, cap: int) -> list[float]:
    """At most `cap - 1` values: both extremes, then those nearest `now`."""
    if len(values) < cap:
        return values
    kept = {values[0], values[-1]}
    for value in sorted(values, key=lambda v: (abs(v - now), v)):
        if len(kept) >= cap - 1:
            break
        kept.add(value)
    return sorted(kept)


# ---------------------------------------------------------------- costs


def _costs(model: AdditiveModel, feature: str, now: float, values: np.ndarray,
           rule: FeatureRule) -> np.ndarray:
    distance = np.abs(values - now)
    if not isinstance(rule.cost, str):
        return float(rule.cost) * distance
    profile = model.profile(feature)
    if rule.cost == "percentile":
        ranks = profile.percentile_of(np.concatenate([[now], values]))
        return np.abs(ranks[1:] - ranks[0])
    if rule.cost == "spread":
        spread = unit_spread(profile)
        if spread is None:
            raise MutabilityError(f"[feature.{feature}] {NO_SPREAD}")
        return distance / spread
    raise MutabilityError(f"[feature.{feature}] cost must be percentile, spread or a number, "
                          f"not {rule.cost!r}")
