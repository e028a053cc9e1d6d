"""Candidate values per feature: where it may move, what that adds, what it costs.

Each table starts with the current value (cost 0) and keeps only the values that can be in a
cheapest plan: a change is dropped when another change of the same feature costs no more and
moves the score at least as far toward the goal (or when staying put does), and so is every
change dearer than the cheapest one that closes the row's gap alone. Every point of a declared
step grid is weighed without being listed: costs grow with the distance from the current
value on each side, and a curve is a straight line between knots, so each run of grid points
between two knots is settled by arithmetic and bisection. Contributions are read from the
model's own term table, so a plan built from them scores exactly as the model scores the
changed row.

Rules between two features (recourse.pair_rules) change what is exact. A rule whose other
side cannot move in the row is a bound on this side, folded into the feature's rule before
anything is listed, so everything above stays exact. A feature that a rule pairs with another
movable one keeps every value its rules allow (`every`): no dominance and no cut at the gap,
because a dearer value, or one that loses score, may be the only one allowed with the other
feature's value; the program then chooses among all of them with the pair rule (exact over
that list). On a step grid that is every grid point within the bounds (a side the feature may
move along without end is refused, as is a list longer than MOST_VALUES); with no step it is,
as ever, the table's knots (a step table: one value per bin) and the bounds, plus the values
that meet a rule exactly against a value listed for the other side. The other features are
still reduced by dominance, which stays exact (their choice does not touch a pair rule), but
their cut at the gap is raised by the most the paired features can lose together.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm
from recourse.errors import MutabilityError, OutsideError
from recourse.grid import (
    LARGEST_STEP_COUNT,
    MOST_VALUES,
    _bisect,
    _distinct,
    _first_past,
    _nearest_allowed,
    _points,
    grid_run,
    rounded,
)
from recourse.mutability import ANY_LEVEL, NO_SPREAD, FeatureRule, Mutability, unit_spread
from recourse.pair_rules import row_rules, tight_values
from recourse.pair_terms import curve_grid, joint_loss, reduced, row_pairs
from recourse.program import best_changes

LISTED_STEPS = 4096  # a side of the grid this short is read point by point, not run by run
NEED_SLACK = 1e-9  # relative: changes are kept a hair past the gap, so rounding never cuts one
# A row's value beyond this many steps from zero is "outside what the model can plan for":
# floats that large are spaced more than 1/1024 of a step apart (2**52 / 2**10), so grid
# points anchored on the value could no longer be placed where the rules put them.
FARTHEST_STEPS = 2**42
OUTSIDE = "value outside what the model can plan for"


@dataclass(frozen=True)
class Candidate:
    """One value a feature may take, its contribution to the score and its cost."""

    value: float | str | None  # NaN (numbers) or None (categories): no value, as encoded
    contribution: float
    cost: float
    current: bool


@dataclass(frozen=True, eq=False)
class FeatureCandidates(Sequence[Candidate]):
    """One feature's candidates as arrays, the current value first; indexing gives Candidates.

    `weighed` counts the values the rules allow that the table tells apart, before the
    undominated ones were kept (grid points up to the first at or past the table's outermost
    knot, or knots and bounds, or one per reachable bin, or the allowed levels).
    """

    values: np.ndarray
    contributions: np.ndarray
    costs: np.ndarray
    weighed: int

    def __len__(self) -> int:
        return len(self.values)

    def __getitem__(self, index):  # type: ignore[override]
        if isinstance(index, slice):
            return [self[i] for i in range(*index.indices(len(self)))]
        position = range(len(self))[index]
        value = self.values[position]
        return Candidate(value if isinstance(value, str) or value is None else float(value),
                         float(self.contributions[position]), float(self.costs[position]),
                         position == 0)


def feature_candidates(model: AdditiveModel, feature: str, current: float | str,
                       rule: FeatureRule, direction: str = "at-least",
                       need: float = math.inf, every: bool = False,
                       extra: np.ndarray | None = None,
                       keep_all: bool = False) -> FeatureCandidates:
    """The current value (first, cost 0) and the values the rule lets the feature reach that
    can be in a cheapest plan for a goal in `direction` ("at-least" raises the score).

    `need` is the gain (link scale) that closes the row's gap: no change dearer than the
    cheapest one that gains it is kept. Values keep the order of the table (numbers ascending).
    `every`: keep every value the rules allow (a feature paired with another by a rule),
    with `extra` values a number with no step may move to as well.
    `keep_all`: list what the table tells apart (one value per bin, the knots and bounds, on
    a step grid every point up to the first past the outermost knot) and drop nothing: a
    feature a pairwise term reads with another movable one (recourse.pair_terms filters
    them).
    """
    toward = 1.0 if direction == "at-least" else -1.0
    reach = need + NEED_SLACK * (1.0 + abs(need)) if math.isfinite(need) else math.inf
    term = model.term(feature)
    extra = np.empty(0) if extra is None else np.asarray(extra, dtype=float)
    if every or keep_all:  # nothing is dropped: every value is listed with its cost
        reach, toward = math.inf, 0.0
    if is_missing(current):
        return _supply_candidates(model, term, rule, toward, reach, extra, every)
    if rule.change == "fixed":  # a rule kept for its supply_cost: a value present stays
        here = np.array([current], dtype=object if isinstance(term, LevelsTerm) else float)
        return FeatureCandidates(here, term.evaluate(here), np.zeros(1), 0)
    if isinstance(term, LevelsTerm):
        levels = _level_values(term, str(current), rule)
        everything = np.array([str(current), *levels], dtype=object)
        costs = np.r_[0.0, np.full(len(levels), float(rule.cost))]
        return _undominated(everything, term.evaluate(everything), costs, toward, reach,
                            len(levels))
    now = float(current)
    kind = model.schema.feature(feature).kind
    step = rule.step if rule.step is not None else (1.0 if kind != "number" else None)
    check_plannable(model, feature, now, step)
    lower, upper = _interval(now, rule, kind)
    if rule.change == "fixed" or lower > upper:  # nothing to propose: only staying put
        values, weighed = np.empty(0), 0
    elif every:
        values = _every_value(term, now, lower, upper, step, extra)
        weighed = len(values)
    elif isinstance(term, StepTerm):
        values = _step_values(term, now, lower, upper, step)
        weighed = len(values)
    elif step is None:
        values = _knot_values(term, now, lower, upper)
        weighed = len(values)
    elif keep_all:
        values = curve_grid(term, now, lower, upper, step)
        weighed = len(values)
    else:
        values, weighed = _grid_values(term, now, lower, upper, step, toward, reach)
    everything = np.concatenate([[now], values])
    costs = _costs(model, feature, now, everything, rule)
    costs[0] = 0.0
    if not np.all(np.isfinite(costs)):
        raise OutsideError(f"{OUTSIDE}: moving {feature} from {now:g} costs more than a "
                           "floating-point number can hold")
    _check_costs_grow(feature, now, everything, costs)
    return _undominated(everything, term.evaluate(everything), costs, toward, reach, weighed)


def row_candidates(model: AdditiveModel, row: pd.Series, mutability: Mutability,
                   need: float = math.inf) -> dict[str, FeatureCandidates]:
    """Candidates of every feature of one raw row that has a term and a rule."""
    encoded = model.encode(pd.DataFrame([row]))
    return encoded_candidates(model, encoded.iloc[0], mutability, need)


def encoded_candidates(model: AdditiveModel, values: Mapping[str, Any], mutability: Mutability,
                       need: float = math.inf) -> dict[str, FeatureCandidates]:
    """The same, from a row already typed by `AdditiveModel.encode` (feature -> value).

    Pairwise terms of the model: one whose other feature stays in this row is folded into
    the moving feature's table; the features of one whose two features may both move keep
    what `recourse.pair_terms.reduced` keeps, and the others' cut at the gap is raised by
    the most those features and tables can lose (recourse.pair_terms).

    Rules between two features: one-sided ones are folded into this row's feature rules;
    the features they pair keep every value (listed first, then with the values that meet a
    rule exactly against the other side's), and the others' cut at the gap is raised by the
    most the paired features can lose (see the module's docstring)."""
    rules, paired = row_rules(model, mutability, values)
    direction = mutability.goal.direction
    pairs = row_pairs(model, rules, values)  # the model's pairwise terms (recourse.pair_terms)
    model = pairs.model

    def build(feature: str, reach: float, every: bool = False,
              extra: np.ndarray | None = None, keep_all: bool = False) -> FeatureCandidates:
        try:
            return feature_candidates(model, feature, values[feature], rules[feature],
                                      direction, reach, every, extra, keep_all)
        except MutabilityError as exc:
            if not mutability.source:
                raise
            raise MutabilityError(f"{mutability.source}: {exc}") from None

    listed = {f: build(f, math.inf, every=True) for f in model.features if f in paired}
    for feature in [f for f in listed if model.schema.feature(f).kind != "category"]:
        extra = tight_values(mutability, feature, {f: c.values for f, c in listed.items()
                                                   if f != feature})
        if len(extra):
            listed[feature] = build(feature, math.inf, every=True, extra=extra)
    for feature in sorted(pairs.joint_features - set(listed), key=model.features.index):
        found = build(feature, math.inf, keep_all=True)
        kept = reduced(found, feature, pairs.joint, values, direction, need)
        listed[feature] = FeatureCandidates(found.values[kept], found.contributions[kept],
                                            found.costs[kept], found.weighed)
    toward = 1.0 if direction == "at-least" else -1.0
    loss = sum(max(0.0, -float(np.min(toward * (c.contributions - c.contributions[0]))))
               for c in listed.values()) + joint_loss(listed, pairs.joint, values, direction)
    return {feature: listed[feature] if feature in listed else build(feature, need + loss)
            for feature in model.features if feature in rules}


def _undominated(values: np.ndarray, contributions: np.ndarray, costs: np.ndarray,
                 toward: float, reach: float, weighed: int) -> FeatureCandidates:
    """Keep the current value and the changes `best_changes` keeps, in the values' order;
    every value when `toward` is 0 (a feature paired by a rule: nothing is dropped)."""
    if toward == 0.0:
        return FeatureCandidates(values, contributions, costs, weighed)
    gains = toward * (contributions[1:] - contributions[0])
    kept = np.concatenate([[0], np.sort(best_changes(gains, costs[1:], reach)) + 1])
    return FeatureCandidates(values[kept], contributions[kept], costs[kept], weighed)


def plannable_unit(model: AdditiveModel, feature: str, step: float | None) -> float:
    """What a value of `feature` is measured against: the step, or with no step (knots and
    bounds only) the width of the training range (1 when there is none)."""
    if step is not None:
        return float(step)
    profile = next((p for p in model.profiles if p.feature == feature), None)
    table = profile.percentiles if profile is not None else ()
    width = float(table[-1] - table[0]) if len(table) else 0.0
    return width if math.isfinite(width) and width > 0 else 1.0


def check_plannable(model: AdditiveModel, feature: str, now: float, step: float | None) -> None:
    """Refuse a current value more than FARTHEST_STEPS units from zero (OutsideError, the
    row's own status); a table whose own knots or edges lie that far is the step's fault
    (MutabilityError: the rules are too fine for every row)."""
    unit = plannable_unit(model, feature, step)
    term = model.term(feature)
    breaks = np.asarray(term.knots if isinstance(term, CurveTerm) else term.edges, float)
    what = f"steps of {unit:g}" if step is not None else (
        f"times the training range's width ({unit:g})")
    if len(breaks) and not np.abs(breaks).max() <= FARTHEST_STEPS * unit:
        raise MutabilityError(f"[feature.{feature}] step {unit:g} is too fine for the "
                              f"table's range: its knots or edges lie beyond 2**42 {what}")
    if not abs(now) <= FARTHEST_STEPS * unit:
        raise OutsideError(f"{OUTSIDE}: {feature} = {now:g} lies beyond 2**42 {what} from "
                           "zero, where its steps can no longer be placed exactly")


def _check_costs_grow(feature: str, now: float, values: np.ndarray, costs: np.ndarray) -> None:
    """The frontier relies on costs growing with the distance from the current value
    (`values` ascending after the current one, as every reader here gives them)."""
    for paid in (costs[1:][values[1:] < now][::-1], costs[1:][values[1:] > now]):
        if np.any(np.diff(paid) < -1e-9 * (1.0 + np.abs(paid[1:]))):
            raise RuntimeError(f"costs of {feature} do not grow with the distance from "
                               f"{now:g}; candidates would not be exact")


# ---------------------------------------------------------------- categories


def _level_values(term: LevelsTerm, current: str, rule: FeatureRule) -> list[str]:
    if isinstance(rule.cost, str):
        raise MutabilityError(f"[feature.{term.feature}] cost of a category must be a number "
                              f"per move, not {rule.cost!r}")
    if rule.change == "fixed":
        return []
    allowed = set(term.levels) if rule.moves is None else (
        set(rule.moves.get(current, ())) | set(rule.moves.get(ANY_LEVEL, ())))
    return [level for level in term.levels if level in allowed and level != current]


# ---------------------------------------------------------------- numbers


def _interval(now: float | np.ndarray, rule: FeatureRule, kind: str) -> tuple[Any, Any]:
    """Bounds, largest change and direction as one closed interval of proposed values (for
    one value, or with arrays for a batch of rows: `recourse.batch_tables`).

    The bounds limit what a plan proposes, not the row: a current value outside them stays
    allowed (staying put), and the interval then lies wholly on one side of it (empty, lower
    above upper, when the direction or largest change points away from the bounds)."""
    lower = -math.inf if rule.lower is None else rule.lower
    upper = math.inf if rule.upper is None else rule.upper
    if rule.largest_change is not None:  # rounded like the grid, so now + k*step can hit it
        lower = np.maximum(lower, rounded(now - rule.largest_change))
        upper = np.minimum(upper, rounded(now + rule.largest_change))
    if kind == "flag":
        lower, upper = np.maximum(lower, 0.0), np.minimum(upper, 1.0)
    if rule.change == "increase":
        lower = np.maximum(lower, now)
    elif rule.change == "decrease":
        upper = np.minimum(upper, now)
    if np.ndim(now) == 0:
        return float(lower), float(upper)
    return (np.broadcast_to(lower, np.shape(now)).astype(float),
            np.broadcast_to(upper, np.shape(now)).astype(float))


def _step_values(term: StepTerm, now: float, lower: float, upper: float,
                 step: float | None) -> np.ndarray:
    """One value per reachable bin: its allowed point closest to `now`, so the cheapest
    (a bin's values all contribute the same)."""
    edges = np.asarray(term.edges, dtype=float)
    here = int(term.bin_of(np.array([now]))[0])
    up, down = edges[here:], edges[:here]  # bins above start past these, bins below end on them
    if step is None:  # a bin cut by a bound the row lies beyond starts at the bound
        found = np.r_[np.maximum(np.nextafter(up, math.inf), lower), np.minimum(down, upper)]
    else:
        steps = np.r_[_first_past(now, step, 1, up, False), _first_past(now, step, -1, down, True)]
        if np.any((steps > LARGEST_STEP_COUNT) & (np.r_[up, down] >= lower)
                  & (np.r_[up, down] <= upper)):
            raise MutabilityError(f"[feature.{term.feature}] step {step:g} is too fine for "
                                  f"the table's range: more than {LARGEST_STEP_COUNT:,} steps")
        firsts = [_nearest_allowed(term.feature, now, step, side, lower, upper)
                  for side in (1, -1)]
        found = np.r_[_points(now, step, 1, np.maximum(steps[:len(up)], firsts[0])),
                      _points(now, step, -1, np.maximum(steps[len(up):], firsts[1]))]
    bins = np.r_[np.arange(here + 1, len(edges) + 1), np.arange(here)]
    inside = (found >= lower) & (found <= upper) & (term.bin_of(found) == bins)
    return np.sort(found[inside])


def _knot_values(term: CurveTerm, now: float, lower: float, upper: float) -> np.ndarray:
    """With no grid: the knots within the interval and its finite ends."""
    knots = np.asarray(term.knots, dtype=float)
    points = np.r_[knots[(knots >= lower) & (knots <= upper)],
                   [b for b in (lower, upper) if math.isfinite(b)]]
    points = _distinct(points)
    return points[points != now]


def _grid_values(term: CurveTerm, now: float, lower: float, upper: float, step: float,
                 toward: float, reach: float) -> tuple[np.ndarray, int]:
    """The grid points that may be undominated, ascending, and how many points were weighed.

    On each side, a point can only be undominated if it gains more than every allowed point
    nearer `now` (they cost no more): a record. Where `now` lies beyond a bound, the side
    toward the bound starts at its first grid point on or past it (the points before are
    not allowed, so they dominate nothing). Between two knots the gain moves one way, so a run
    of points either rises (its records are the points past the best before it, found by
    bisection) or not (only its first points can be records). Past the outermost knot the
    table is flat, so a side stops at its first point there; it also stops at its first
    point that gains `reach`.
    """
    knots = np.asarray(term.knots, dtype=float)
    table = np.asarray(term.values, dtype=float)
    here = float(np.interp(now, knots, table))
    found, weighed = [], 0
    for side, bound in ((-1, lower), (1, upper)):
        if not side * (bound - now) > 0:
            continue
        first = _nearest_allowed(term.feature, now, step, side, lower, upper)
        outer = knots[-1] if side > 0 else knots[0]
        ends = _first_past(now, step, side, np.array([outer, bound]), np.array([True, False]))
        last = max(int(ends[0]), first)  # past the outer knot only the nearest point counts
        if ends[1] <= LARGEST_STEP_COUNT:  # else the bound lies further than the grid reaches
            last = min(last, int(ends[1]) - 1)
        if last > LARGEST_STEP_COUNT:
            raise MutabilityError(f"[feature.{term.feature}] step {step:g} is too fine for "
                                  f"the table's range: more than {LARGEST_STEP_COUNT:,} steps")
        if last < first:
            continue
        weighed += last - first + 1

        def gain(k: np.ndarray, side: int = side) -> np.ndarray:
            return toward * (np.interp(_points(now, step, side, k), knots, table) - here)

        if last - first < LISTED_STEPS:  # few enough to read point by point
            steps = np.arange(first, last + 1)
            gains = gain(steps)
            reaching = np.flatnonzero(gains >= reach)
            stop = reaching[0] + 1 if len(reaching) else len(steps)
            steps = _beating_nearer(steps[:stop], gains[:stop])
        else:
            inner = knots[side * (knots - now) > 0]
            breaks = _first_past(now, step, side, inner, True)
            starts = _distinct(np.append(first, breaks[(breaks > first) & (breaks <= last)]))
            steps = _records(gain, starts, last, reach, term.feature)
        found.append(_points(now, step, side, steps))
    values = _distinct(np.concatenate(found)) if found else np.empty(0)
    return values[values != now], weighed


def _every_value(term: Any, now: float, lower: float, upper: float, step: float | None,
                 extra: np.ndarray, keep_now: bool = False) -> np.ndarray:
    """Every value a paired feature may move to (see the module's docstring), ascending;
    `now` itself only with `keep_now` (a value to state is anchored on 0, and may be 0)."""
    if step is None:
        values = (_step_values(term, now, lower, upper, None) if isinstance(term, StepTerm)
                  else _knot_values(term, now, lower, upper))
        values = _distinct(np.r_[values, extra[(extra >= lower) & (extra <= upper)]])
        return values[values != now]
    found, count = [], 0
    for side, bound in ((-1, lower), (1, upper)):
        if not side * (bound - now) > 0:
            continue
        if not math.isfinite(bound):
            raise MutabilityError(
                f"[feature.{term.feature}] a link or level_bound pairs it with another "
                "feature, so every value its rules allow is weighed; it may move "
                f"{'up' if side > 0 else 'down'} without end: give "
                f"{'upper' if side > 0 else 'lower'} (or a percentile bound, or largest_change)")
        beyond = int(_first_past(now, step, side, np.array([bound]), False)[0]) - 1
        count = grid_run(term.feature, now, step, side, lower, upper,
                         lambda first, beyond=beyond: beyond, count, found,
                         "a link or level_bound pairs it with another feature, so every "
                         "value its rules allow is weighed")
    values = _distinct(np.concatenate([np.empty(0), *found, [now] if keep_now else []]))
    return values[(values >= lower) & (values <= upper)]


def _records(gain: Callable[[np.ndarray], np.ndarray], starts: np.ndarray, last: int,
             reach: float, feature: str) -> np.ndarray:
    """Steps (1..last) on one side that gain more than every nearer step and than staying put,
    up to the first that gains `reach`. Runs start at `starts`; gain is monotone within a
    run from its second step on (its first may differ by rounding at the knot)."""
    ends = np.r_[starts[1:] - 1, last]
    seconds = np.minimum(starts + 1, ends)
    first, second, end = gain(starts), gain(seconds), gain(ends)
    tops = np.maximum(np.maximum(first, second), end)
    reaching = np.flatnonzero(tops >= reach)
    if len(reaching):  # stop at the first step that gains `reach`
        r = int(reaching[0])
        cut = starts[r] if first[r] >= reach else seconds[r] if second[r] >= reach else (
            _bisect(lambda k: gain(k) >= reach, seconds[r:r + 1], ends[r:r + 1])[0])
        starts, ends = starts[:r + 1], np.r_[ends[:r], cut]
        seconds = np.minimum(starts + 1, ends)
        first, second, end = gain(starts), gain(seconds), gain(ends)
        tops = np.maximum(np.maximum(first, second), end)
    best_before = np.maximum.accumulate(np.r_[0.0, tops[:-1]])
    rising = end > np.maximum(best_before, second)
    low = np.where(second > best_before, starts, seconds)[rising]  # known not past the best
    past = _bisect(lambda k: gain(k) > best_before[rising], low, ends[rising])
    lengths = ends[rising] - past + 1
    count = int(lengths.sum()) + 2 * len(starts)
    if count > MOST_VALUES:
        raise MutabilityError(f"[feature.{feature}] the step grid leaves {count:,} values that "
                              f"could each be the cheapest (more than {MOST_VALUES:,}): use a "
                              "coarser step or tighter bounds")
    offsets = np.arange(int(lengths.sum())) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    steps = _distinct(np.concatenate([starts, seconds, np.repeat(past, lengths) + offsets]))
    return _beating_nearer(steps, gain(steps))


def _beating_nearer(steps: np.ndarray, gains: np.ndarray) -> np.ndarray:
    """The steps (nearest first) that gain more than every nearer one and than staying put."""
    best_before = np.maximum.accumulate(np.concatenate([[0.0], gains[:-1]]))
    return steps[gains > best_before]


# ---------------------------------------------------------------- supplying a missing value


def is_missing(value: Any) -> bool:
    """Whether an encoded value is missing (NaN in a numeric column, None in a category)."""
    return value is None or (isinstance(value, float | np.floating) and math.isnan(value))


def _supply_candidates(model: AdditiveModel, term: Any, rule: FeatureRule, toward: float,
                       reach: float, extra: np.ndarray, every: bool) -> FeatureCandidates:
    """A row with no value: that (at its missing-value entry, cost 0) first, then, when the
    rule has `supply_cost`, the values that may be stated, each at that one cost. With one
    cost for all, the dominance rule keeps the value (the first, on ties) that moves the
    score furthest toward the goal. A plan never makes a value missing: only this path has
    a missing candidate, and only as the row's own value. With `toward` 0 nothing is
    dropped; with `every` too (a feature paired by a rule) every value that may be stated is
    listed: on a step grid every multiple of the step within the bounds, else these and
    `extra`. (A pairwise term needs no more than the listed values: with one cost for
    every stated value, the best one given the other features is where the tables are
    best, at a break or an end, and a pair's breaks are among its main term's.)"""
    if isinstance(term, LevelsTerm):
        if rule.supplies and rule.moves is not None:
            allowed = set(rule.moves.get(ANY_LEVEL, ()))
            values: Any = [level for level in term.levels if level in allowed]
        else:
            values = list(term.levels) if rule.supplies else []
        everything = np.array([None, *values], dtype=object)
    else:
        lower, upper, step = supply_rules(model, rule)
        breaks = term.knots if isinstance(term, CurveTerm) else term.edges
        values = (supply_values(breaks, lower, upper, step, term.feature) if rule.supplies
                  else np.empty(0))
        if rule.supplies and every and lower <= upper:
            values = (_distinct(np.r_[values, extra[(extra >= lower) & (extra <= upper)]])
                      if step is None else _every_value(term, 0.0, lower, upper, step, extra,
                                                        keep_now=True))
        everything = np.r_[math.nan, values]
    costs = np.r_[0.0, np.full(len(values), rule.supply_cost or 0.0)]
    return _undominated(everything, term.evaluate(everything), costs, toward, reach,
                        len(values))


def supply_rules(model: AdditiveModel, rule: FeatureRule) -> tuple[float, float, float | None]:
    """What limits a stated value: the bounds (a flag's within 0 and 1) and the step (whole
    numbers for integers and flags by default; none for numbers). Direction and largest
    change measure from a current value, so they do not apply to a missing one."""
    kind = model.schema.feature(rule.feature).kind
    step = rule.step if rule.step is not None else (1.0 if kind != "number" else None)
    lower = -math.inf if rule.lower is None else rule.lower
    upper = math.inf if rule.upper is None else rule.upper
    if kind == "flag":
        lower, upper = max(lower, 0.0), min(upper, 1.0)
    return lower, upper, step


def supply_values(breaks: Sequence[float], lower: float, upper: float, step: float | None,
                  feature: str = "") -> np.ndarray:
    """Values that may be stated for a missing one, among which a best one always lies.

    The rules allow every value in [lower, upper] or, with a step, every whole multiple of
    the step there (rounded to 12 decimals, as every grid here). A curve is a straight line
    between knots and flat beyond them, and a step table is constant between edges, so on
    each stretch between two breaks (knots or edges) or bounds the best allowed value is at
    one of its ends: a break, the allowed value nearest it on either side, a bound, or just
    past the last break. Those (and 0) are listed, never more than six per break.
    """
    breaks = np.asarray(breaks, dtype=float)
    ends = [b for b in (lower, upper) if math.isfinite(b)]
    if step is None:
        points = np.r_[breaks, np.nextafter(breaks[-1:], math.inf), ends, 0.0]
    else:
        anchors = np.r_[breaks, ends, 0.0] / step
        if not np.all(np.abs(anchors) < LARGEST_STEP_COUNT):
            raise MutabilityError(f"[feature.{feature}] step {step:g} is too fine for the "
                                  f"table's range: more than {LARGEST_STEP_COUNT:,} steps")
        steps = np.floor(anchors)[:, None] + np.arange(-1, 3)
        points = rounded(steps.ravel() * step)
    return _distinct(points[(points >= lower) & (points <= upper)])


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
