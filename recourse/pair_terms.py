"""The model's pairwise terms (glassbox.core.pairs) in one row's plan, kept exact.

A pair f_jk reads two features. In a row, each pair is one of three kinds:

- both features may move: a *joint* pair. Its table goes into the program as a table over
  the two groups' candidates (recourse.pairs.PairValues, linearised exactly there), and the
  two features' candidates are listed without the one-feature reductions (a dearer value,
  or one that loses on its own table, may win with the other feature's value), then
  reduced only by what holds whatever the other feature picks (`reduced`);
- one feature may move, the other stays: the pair is a one-feature term of the moving
  feature, folded into its main term (`glassbox.core.pairs.add_to_main`, exact on the union
  of the grids), so everything one-feature stays exact;
- neither moves: a constant, left in the program's base.

Every pair touching a movable feature also merges its axis's grid into that feature's main
term (a zero function added), so the candidates' grid arguments (one value per bin, the
knots, flat past the outermost knot) see the pair's breaks too.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from glassbox.core.additive import AdditiveModel, CurveTerm
from glassbox.core.pairs import Axis, PairTerm, add_to_main
from recourse.grid import LARGEST_STEP_COUNT, _distinct, _first_past, grid_run
from recourse.pair_rules import movable
from recourse.pairs import PairValues

SAME_VALUE = 1e-12  # a pair's value moved by no more than this has not moved (rounding)
NEED_SLACK = 1e-9  # as recourse.candidates: changes are kept a hair past the gap


@dataclass(frozen=True)
class RowPairs:
    """One row's pairs by kind, and the model whose main terms hold the folded ones."""

    model: AdditiveModel  # main terms only, folded pairs added in (pairs=())
    joint: tuple[PairTerm, ...]
    folded: tuple[PairTerm, ...]

    @property
    def joint_features(self) -> set[str]:
        return {f for p in self.joint for f in p.features}


def _axis_weights(axis: Axis, value: Any) -> np.ndarray:
    """The weights a single value puts on each entry of the axis (its shares as a column
    of one row)."""
    return axis.shares(np.array([value], dtype=object if axis.kind == "levels" else float))


def _oriented(pair: PairTerm, feature: str) -> tuple[Axis, Axis, np.ndarray]:
    """(this feature's axis, the other's, the table with this feature's entries as rows)."""
    if pair.first.feature == feature:
        return pair.first, pair.second, pair.table()
    return pair.second, pair.first, pair.table().T


def row_pairs(model: AdditiveModel, rules: Mapping[str, Any], values: Mapping[str, Any]
              ) -> RowPairs:
    """Sort the model's pairs for one row (`rules`: the row's feature rules, one-sided links
    folded in; `values`: the row typed by `AdditiveModel.encode`)."""
    if not model.pairs:
        return RowPairs(model, (), ())
    terms = {t.feature: t for t in model.terms}
    joint, folded = [], []
    for pair in model.pairs:
        moves = [movable(rules, f, values[f]) for f in pair.features]
        for feature, moving in zip(pair.features, moves, strict=True):
            if moving:  # the pair's breaks into the main term's grid (adds nothing)
                axis = _oriented(pair, feature)[0]
                terms[feature] = add_to_main(terms[feature], axis, np.zeros(axis.size))
        if all(moves):
            joint.append(pair)
        elif any(moves):
            feature = pair.features[moves.index(True)]
            axis, other, table = _oriented(pair, feature)
            column = table @ _axis_weights(other, values[other.feature])
            terms[feature] = add_to_main(terms[feature], axis, column)
            folded.append(pair)
    folded_model = replace(model, terms=tuple(terms[f] for f in model.features), pairs=())
    return RowPairs(folded_model, tuple(joint), tuple(folded))


def _rows_along(pair: PairTerm, feature: str, candidates: np.ndarray) -> np.ndarray:
    """The pair's value at each candidate of `feature` (rows) and each entry of the other
    feature's axis (columns): every value the other feature can give is a mix of these."""
    axis, _, table = _oriented(pair, feature)
    index, weight = axis.entries(candidates)
    return weight[:, :1] * table[index[:, 0]] + weight[:, 1:] * table[index[:, 1]]


def reduced(candidates: Any, feature: str, joint: Sequence[PairTerm],
            values: Mapping[str, Any], direction: str, need: float) -> np.ndarray:
    """Positions of the candidates of a feature in joint pairs that can be in a cheapest
    plan (the current one, first, always), in their order.

    x' (dearer) is dropped for x (no dearer) when x scores at least as well whatever the
    other features pick: its main contribution, plus each pair's value at the other
    feature's entry b, is no worse for every b, since any value of the other feature mixes
    entries (a knots axis interpolates), as shown by either test below (both only drop, so
    the plans stay exact): the worst x can do is no worse than the best x' can do (`low`,
    `high`), or x, the last kept on the same side of the current value, is no worse entry
    by entry. A plan with x' swaps it for x at no more cost and no less score; the set of
    changed features stays the same or shrinks. And, as for one-feature candidates, nothing
    dearer than the cheapest change that reaches the goal alone (the other features as
    they are) is kept: that change alone is a plan, no dearer."""
    toward = 1.0 if direction == "at-least" else -1.0
    reach = need + NEED_SLACK * (1.0 + abs(need)) if math.isfinite(need) else math.inf
    own = toward * np.asarray(candidates.contributions, dtype=float)
    costs = np.asarray(candidates.costs, dtype=float)
    rows = [toward * _rows_along(p, feature, candidates.values) for p in joint
            if feature in p.features]
    low = own + sum((r.min(axis=1) for r in rows), np.zeros(len(own)))
    high = own + sum((r.max(axis=1) for r in rows), np.zeros(len(own)))
    alone = own - own[0]
    for pair in joint:
        if feature in pair.features:
            other = _oriented(pair, feature)[1]
            here = toward * _rows_along(pair, feature, candidates.values) @ _axis_weights(
                other, values[other.feature])
            alone = alone + here - here[0]
    side = _sides(candidates.values)
    order = 1 + np.lexsort((-high[1:], costs[1:]))
    kept, best_low, last = [0], low[0], {}
    for i in order:
        if high[i] <= best_low:
            continue
        d = last.get(side[i])
        if d is not None and own[d] - own[i] + sum(float(np.min(r[d] - r[i]))
                                                   for r in rows) >= 0:
            continue
        kept.append(int(i))
        best_low, last[side[i]] = max(best_low, low[i]), int(i)
        if alone[i] >= reach:
            break
    return np.array(sorted(kept))


def _sides(values: np.ndarray) -> np.ndarray:
    """Which side of the current value (first) each candidate lies on: -1, 1, or 0 for a
    level or a stated value (one side)."""
    try:
        numbers = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        return np.zeros(len(values), dtype=int)
    if len(numbers) == 0 or math.isnan(numbers[0]):
        return np.zeros(len(values), dtype=int)
    return np.sign(numbers - numbers[0]).astype(int)


def joint_loss(candidates: Mapping[str, Any], joint: Sequence[PairTerm],
               values: Mapping[str, Any], direction: str) -> float:
    """The most the joint pairs' tables can lose together from the row's current cells
    (toward the goal): each table's worst entry against its current value."""
    toward = 1.0 if direction == "at-least" else -1.0
    loss = 0.0
    for pair in joint:
        a, b = (_axis_weights(axis, values[axis.feature]) for axis in (pair.first, pair.second))
        now = float(a @ pair.table() @ b)
        loss += max(0.0, -float(np.min(toward * (pair.table() - now))))
    return loss


def _classes(axis: Axis, candidates: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Candidates the axis cannot tell apart share a class (same entries, same weights):
    each candidate's class, and each class's entries and weights."""
    index, weight = axis.entries(candidates)
    keys = np.c_[index, weight]
    distinct, of = np.unique(keys, axis=0, return_inverse=True)
    return of.ravel(), distinct[:, :2].astype(np.intp), distinct[:, 2:]


def program_tables(pairs: Sequence[PairTerm], candidates: Mapping[str, Any],
                   names: Sequence[str]) -> tuple[list[PairValues], dict[str, np.ndarray],
                                                  float]:
    """The joint pairs as the program reads them: tables over the candidates' classes; a
    pair one of whose groups has a single candidate is a one-feature term of the other
    (returned as what it adds to that group's contributions), or a constant when both
    have one (returned as what it adds to the base)."""
    group = {name: g for g, name in enumerate(names)}
    tables, added, constant = [], {}, 0.0
    for pair in pairs:
        first, second = (candidates[f].values for f in pair.features)
        fa, ia, wa = _classes(pair.first, first)
        fb, ib, wb = _classes(pair.second, second)
        table = pair.table()
        cells = sum(wa[:, s][:, None] * wb[:, t][None, :] * table[np.ix_(ia[:, s], ib[:, t])]
                    for s in (0, 1) for t in (0, 1))
        if len(first) == 1 or len(second) == 1:
            values = cells[fa][:, fb]
            if len(first) == 1 and len(second) == 1:
                constant += float(values[0, 0])
            elif len(first) == 1:
                added[pair.second.feature] = added.get(pair.second.feature, 0.0) + values[0]
            else:
                added[pair.first.feature] = added.get(pair.first.feature, 0.0) + values[:, 0]
            continue
        tables.append(PairValues(group[pair.first.feature], group[pair.second.feature],
                                 fa, fb, np.asarray(cells, dtype=float), pair.name))
    return tables, added, constant


def pair_shares(model: AdditiveModel, before: Any, after: Any) -> tuple[tuple[str, float, float],
                                                                        ...]:
    """(pair name, value before, value after) for each pair of the model a plan moves: the
    plan's score breakdown shows one line per pair. A pair moves when its value changes by
    more than SAME_VALUE: two cells of a centred table can hold one value that differs in
    the last bits only (1e-17), which is no move."""
    out = []
    for pair in model.pairs:
        old = float(pair.evaluate_frame(before)[0])
        new = float(pair.evaluate_frame(after)[0])
        if abs(new - old) > SAME_VALUE:
            out.append((pair.name, old, new))
    return tuple(out)


def folded_at(model: AdditiveModel, feature: str, row: Mapping[str, Any]) -> AdditiveModel:
    """The model with every pair of `feature` folded into its main term at the other
    features' values in `row` (what the feature's own values do, the rest held as in
    `row`); the other pairs dropped."""
    if not any(feature in p.features for p in model.pairs):
        return model
    terms = {t.feature: t for t in model.terms}
    for pair in model.pairs:
        if feature in pair.features:
            axis, other, table = _oriented(pair, feature)
            terms[feature] = add_to_main(terms[feature], axis,
                                         table @ _axis_weights(other, row[other.feature]))
    return replace(model, terms=tuple(terms[f] for f in model.features), pairs=())


def curve_grid(term: CurveTerm, now: float, lower: float, upper: float,
                step: float) -> np.ndarray:
    """Every allowed grid point up to the first at or past the outermost knot on each side
    (beyond it every table, pairs too, is flat: the nearest such point is the cheapest)."""
    knots = np.asarray(term.knots, dtype=float)
    found, count = [], 0
    for side, bound in ((-1, lower), (1, upper)):
        if not side * (bound - now) > 0:
            continue
        outer = knots[-1] if side > 0 else knots[0]
        ends = _first_past(now, step, side, np.array([outer, bound]), np.array([True, False]))

        def last_of(first: int, ends: np.ndarray = ends) -> int:
            last = max(int(ends[0]), first)
            return min(last, int(ends[1]) - 1) if ends[1] <= LARGEST_STEP_COUNT else last
        count = grid_run(term.feature, now, step, side, lower, upper, last_of, count, found,
                         "a pairwise term of the model reads it with another movable "
                         "feature, so every point of its step grid up to the outermost knot "
                         "is weighed")
    values = _distinct(np.concatenate([np.empty(0), *found]))
    return values[(values != now) & (values >= lower) & (values <= upper)]
