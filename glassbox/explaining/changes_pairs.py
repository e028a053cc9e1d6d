"""Pairwise tables compared between two versions of a model (part of `changes`).

Pairs added and removed are listed by name; for a pair both versions have, the largest
change of its table (new - old) is found exactly: along each axis the difference of two
tables is constant between edges and straight between knots, so on the union of both
versions' grids it is largest at a corner: a level either version knows, or an end of the
training range, a knot, an edge or the next double above an edge (where a step has
jumped), within the training range. The missing entries are compared where both versions
have one for that feature, and a cell where only one does is named in the note.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from glassbox.core.additive import AdditiveModel
from glassbox.core.pairs import Axis, PairTerm


@dataclass(frozen=True)
class PairChange:
    """How far one pair's table moved (new - old, on the model's scale), where, and its
    importance in each version (None where the version has no such pair or records none).
    `largest` and `at` are None for a pair only one version has (`status` says which)."""

    pair: str
    status: str  # "common", "added" or "removed"
    largest: float | None
    at: tuple[Any, Any] | None
    points: int
    old_importance: float | None
    new_importance: float | None
    note: str = ""
    cell: tuple[str, str] | None = None  # where `at` falls in the new version's table


def _profile_range(model: AdditiveModel, feature: str) -> tuple[float, float] | None:
    for profile in model.profiles:
        if profile.feature == feature and profile.percentiles:
            return profile.minimum, profile.maximum
    return None


def axis_points(old: AdditiveModel, new: AdditiveModel, before: Axis,
                after: Axis) -> tuple[list[Any], bool]:
    """The values where two versions' axes of one feature can differ most (see the module
    docstring), and whether a missing value is among them (both have its entry)."""
    both_missing = before.missing and after.missing
    if before.kind == "levels" or after.kind == "levels":
        levels = list(dict.fromkeys([*before.points, *after.points]))
        return levels + ([None] if both_missing else []), both_missing
    marks = [np.asarray(a.points, dtype=float) for a in (before, after)]
    above = [np.nextafter(np.asarray(a.points, dtype=float), np.inf)
             for a in (before, after) if a.kind == "edges"]
    ranges = [r for r in (_profile_range(old, before.feature),
                          _profile_range(new, after.feature)) if r is not None]
    every = np.unique(np.concatenate([*marks, *above, np.asarray(
        [v for r in ranges for v in r], dtype=float)]))
    if ranges:
        low, high = min(r[0] for r in ranges), max(r[1] for r in ranges)
        every = every[(every >= low) & (every <= high)]
    values: list[Any] = [float(v) for v in every] or [0.0]
    return values + ([np.nan] if both_missing else []), both_missing


def _grid_of(pair: PairTerm, firsts: list[Any], seconds: list[Any]) -> np.ndarray:
    def column(axis: Axis, values: list[Any]) -> np.ndarray:
        return (np.asarray(values, dtype=object) if axis.kind == "levels"
                else np.asarray(values, dtype=float))

    a = np.repeat(column(pair.first, firsts), len(seconds))
    b = np.tile(column(pair.second, seconds), len(firsts))
    return pair.evaluate(a, b)


def pair_change(old: AdditiveModel, new: AdditiveModel, before: PairTerm,
                after: PairTerm) -> PairChange:
    """The largest change of one pair both versions have (see the module docstring)."""
    firsts, first_missing = axis_points(old, new, before.first, after.first)
    seconds, second_missing = axis_points(old, new, before.second, after.second)
    change = _grid_of(after, firsts, seconds) - _grid_of(before, firsts, seconds)
    top = int(np.argmax(np.abs(change)))
    at = (firsts[top // len(seconds)], seconds[top % len(seconds)])
    at = tuple(None if isinstance(v, float) and np.isnan(v) else v for v in at)
    only = [a.feature for a, b, both in ((before.first, after.first, first_missing),
                                         (before.second, after.second, second_missing))
            if (a.missing or b.missing) and not both]
    note = (f"a missing {', '.join(only)} has an entry in one version only: not compared"
            if only else "")
    cell = (_entry_label(after.first, at[0]), _entry_label(after.second, at[1]))
    return PairChange(before.name, "common", float(change[top]), at, int(change.size),
                      _importance(old, before.name), _importance(new, after.name), note,
                      cell)


def _entry_label(axis: Axis, value: Any) -> str:
    """Where a value falls on an axis, in words: its entry's label (edges, levels, the
    missing entry), or the value itself on a knots axis (read between knots)."""
    if value is None:
        return "missing"
    if axis.kind == "knots":
        return f"{axis.feature} {value:.6g}"
    column = np.asarray([value], dtype=object if axis.kind == "levels" else float)
    index, weight = axis.entries(column)
    if weight[0, 0] == 0:
        return f"{axis.feature} {value} (a level this version did not see)"
    return f"{axis.feature} {axis.labels()[index[0, 0]]}"


def _importance(model: AdditiveModel, name: str) -> float | None:
    value = (model.metadata.get("importance") or {}).get(name)
    return None if value is None else float(value)


def pair_changes(old: AdditiveModel, new: AdditiveModel) -> tuple[PairChange, ...]:
    """Every pair of either version: the common ones (matched by their two features, in
    either order) with their largest change, then those added, then those removed."""
    def key(pair: PairTerm) -> frozenset[str]:
        return frozenset(pair.features)

    olds = {key(p): p for p in old.pairs}
    news = {key(p): p for p in new.pairs}
    out = []
    for pair in new.pairs:
        if key(pair) in olds:
            before = olds[key(pair)]
            if before.features != pair.features:  # the same two features, axes swapped
                before = PairTerm(before.second, before.first,
                                  tuple(zip(*before.values, strict=True)))
            out.append(pair_change(old, new, before, pair))
    out += [PairChange(p.name, "added", None, None, 0, None, _importance(new, p.name))
            for p in new.pairs if key(p) not in olds]
    out += [PairChange(p.name, "removed", None, None, 0, _importance(old, p.name), None)
            for p in old.pairs if key(p) not in news]
    return tuple(out)
