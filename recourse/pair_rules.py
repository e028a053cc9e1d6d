"""Rules between two features of a mutability file: links and level bounds.

`[[link]]`: one number at most (or at least) `times` x another number + `plus`, e.g. the
amount asked at most the price. `[[level_bound]]`: moving a category to one level limits a
number, e.g. moving to a purpose caps the amount. Both limit what a plan proposes, as a bound
does: a plan that changes neither feature (for a level bound: does not move the category to
the level) leaves the row as it is, even where the row breaks the rule today. A missing value
after the plan (on either side) is not checked.

Per row, a rule whose other side cannot move in that row is a bound on the side that can
(`row_rules`): a link becomes a lower or upper bound at the exact float edge of the relation,
a level bound whose number is fixed and outside it removes the level from the category's
targets. Only a rule whose two sides may both move pairs them in the program
(`pair_matrices`); those features keep every value their rules allow (see candidates).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from glassbox.core.additive import AdditiveModel, LevelsTerm
from glassbox.core.schema import is_number
from glassbox.core.wording import noun
from recourse.errors import MutabilityError
from recourse.pairs import PairRule

LINK_KEYS = ("feature", "at_most", "at_least", "times", "plus")
LEVEL_BOUND_KEYS = ("when", "is", "feature", "lower", "upper")
SIDES = ("at_most", "at_least")


@dataclass(frozen=True)
class Link:
    """`feature` <= (at_most) or >= (at_least) `times` x `other` + `plus`."""

    feature: str
    other: str
    side: str
    times: float = 1.0
    plus: float = 0.0

    def holds(self, value: Any, other: Any) -> np.ndarray:
        """Whether the pair keeps the link (true where either value is missing)."""
        value, other = np.asarray(value, dtype=float), np.asarray(other, dtype=float)
        with np.errstate(invalid="ignore", over="ignore"):
            edge = self.times * other + self.plus
            kept = value <= edge if self.side == "at_most" else value >= edge
        return kept | np.isnan(value) | np.isnan(other)

    def text(self) -> str:
        sign = "<=" if self.side == "at_most" else ">="
        return f"{self.feature} {sign} {self.times:g} x {self.other} + {self.plus:g}"


@dataclass(frozen=True)
class LevelBound:
    """Moving `when` to `level` keeps `feature` within [lower, upper] after the plan."""

    when: str
    level: str
    feature: str
    lower: float | None = None
    upper: float | None = None

    def within(self, value: Any) -> np.ndarray:
        """Whether a value of `feature` lies within the bounds (true where missing)."""
        value = np.asarray(value, dtype=float)
        low = -math.inf if self.lower is None else self.lower
        high = math.inf if self.upper is None else self.upper
        with np.errstate(invalid="ignore"):
            return ((value >= low) & (value <= high)) | np.isnan(value)

    def text(self) -> str:
        low = "" if self.lower is None else f"{self.lower:g} <= "
        high = "" if self.upper is None else f" <= {self.upper:g}"
        return f"{self.when} moved to {self.level!r}: {low}{self.feature}{high}"


# ---------------------------------------------------------------- reading


def _tables(data: Any, key: str, where: str) -> list[Mapping[str, Any]]:
    if not isinstance(data, list) or not all(isinstance(e, Mapping) for e in data):
        raise MutabilityError(f"{where}'{key}' must be a list of [[{key}]] tables")
    return data


def _feature(model: AdditiveModel, entry: Mapping[str, Any], key: str, here: str,
             numeric: bool) -> str:
    """A feature the rule names: known, used by the model, of the right kind, not protected."""
    name = entry.get(key)
    if not isinstance(name, str):
        raise MutabilityError(f"{here}{key} must name a feature, not {name!r}")
    known = {spec.name for spec in model.schema.features}
    if name not in known:
        raise MutabilityError(f"{here}{key}: unknown feature '{name}' (the model's schema "
                              f"has: {', '.join(sorted(known))})")
    spec = model.schema.feature(name)
    if spec.protected:
        raise MutabilityError(f"{here}{key}: '{name}' is protected: protected "
                              "characteristics are never levers and never limit a plan")
    if name not in model.features:
        raise MutabilityError(f"{here}{key}: the model does not use '{name}', so a plan "
                              "never sees its value")
    if numeric and spec.kind == "category":
        raise MutabilityError(f"{here}{key}: '{name}' is a category; this rule needs a number")
    if not numeric and spec.kind != "category":
        raise MutabilityError(f"{here}{key}: '{name}' is a {spec.kind}; this rule needs a "
                              "category")
    return name


def _number(entry: Mapping[str, Any], key: str, here: str, default: float | None
            ) -> float | None:
    if key not in entry:
        return default
    value = entry[key]
    if not is_number(value) or not math.isfinite(value):
        raise MutabilityError(f"{here}{key} must be a finite number, not {value!r}")
    return float(value)


def known_keys(entry: Mapping[str, Any], known: tuple[str, ...], here: str) -> None:
    """Refuse keys of a table that its kind does not know (every table of the file)."""
    unknown = sorted(set(entry) - set(known))
    if unknown:
        raise MutabilityError(f"{here}unknown {noun(len(unknown), 'key')}: {', '.join(unknown)} "
                              f"(expected {', '.join(known)})")


def read_links(data: Any, model: AdditiveModel, where: str) -> tuple[Link, ...]:
    """The `[[link]]` tables, checked against the model."""
    out = []
    for number, entry in enumerate(_tables(data, "link", where), start=1):
        here = f"{where}[[link]] number {number}: "
        known_keys(entry, LINK_KEYS, here)
        sides = [side for side in SIDES if side in entry]
        if len(sides) != 1:
            raise MutabilityError(f"{here}give exactly one of at_most and at_least")
        feature = _feature(model, entry, "feature", here, numeric=True)
        other = _feature(model, entry, sides[0], here, numeric=True)
        if other == feature:
            raise MutabilityError(f"{here}{sides[0]}: '{feature}' is linked to itself")
        times = _number(entry, "times", here, 1.0)
        if times <= 0:
            raise MutabilityError(f"{here}times must be above zero, not {times:g}")
        out.append(Link(feature, other, sides[0], times, _number(entry, "plus", here, 0.0)))
    return tuple(out)


def read_level_bounds(data: Any, model: AdditiveModel, where: str) -> tuple[LevelBound, ...]:
    """The `[[level_bound]]` tables, checked against the model."""
    out = []
    for number, entry in enumerate(_tables(data, "level_bound", where), start=1):
        here = f"{where}[[level_bound]] number {number}: "
        known_keys(entry, LEVEL_BOUND_KEYS, here)
        when = _feature(model, entry, "when", here, numeric=False)
        level = entry.get("is")
        levels = model.term(when).levels if isinstance(model.term(when), LevelsTerm) else ()
        if not isinstance(level, str) or level not in levels:
            raise MutabilityError(f"{here}is must be one of {when}'s levels "
                                  f"({', '.join(levels)}), not {level!r}")
        feature = _feature(model, entry, "feature", here, numeric=True)
        lower, upper = (_number(entry, key, here, None) for key in ("lower", "upper"))
        if lower is None and upper is None:
            raise MutabilityError(f"{here}give lower, upper or both")
        if lower is not None and upper is not None and lower > upper:
            raise MutabilityError(f"{here}lower ({lower:g}) is above upper ({upper:g})")
        out.append(LevelBound(when, level, feature, lower, upper))
    return tuple(out)


# ---------------------------------------------------------------- one row


def _missing(value: Any) -> bool:
    return value is None or (isinstance(value, float | np.floating) and math.isnan(value))


def movable(rules: Mapping[str, Any], name: str, value: Any) -> bool:
    """Whether a plan may change this feature in this row (a rule that changes it, or a
    missing value that may be stated)."""
    rule = rules.get(name)
    return rule is not None and (rule.change != "fixed" or (_missing(value) and rule.supplies))


def _edge(holds: Callable[[float], bool], guess: float, upward: bool) -> float:
    """The last float that keeps a relation whose floats that keep it form a half-line
    (upward: every float from the edge up). `guess` is within a few floats of it."""
    if not math.isfinite(guess):
        return guess
    outward, inward = (-math.inf, math.inf) if upward else (math.inf, -math.inf)
    edge = guess
    for _ in range(64):
        if holds(edge):
            break
        edge = math.nextafter(edge, inward)
    for _ in range(64):
        beyond = math.nextafter(edge, outward)
        if not holds(beyond):
            return edge
        edge = beyond
    raise RuntimeError(f"the edge of a link did not settle near {guess!r}")


def link_edge(link: Link, value: float | None, other: float | None) -> tuple[str, float]:
    """With one side's value given (the other None): the bound it puts on the other side,
    as ("lower" | "upper", the exact float edge)."""
    if other is not None:  # bound on the feature: the relation's right-hand side itself
        edge = float(link.times * other + link.plus)
        return ("upper" if link.side == "at_most" else "lower"), edge
    upward = link.side == "at_most"  # value <= times x other + plus: other from the edge up
    guess = (value - link.plus) / link.times
    edge = _edge(lambda b: bool(link.holds(value, b)), guess, upward)
    return ("lower" if upward else "upper"), edge


def _tightened(rule: Any, side: str, edge: float) -> Any:
    now = getattr(rule, side)
    if now is not None:
        edge = max(now, edge) if side == "lower" else min(now, edge)
    return replace(rule, **{side: edge})


def _without_level(rule: Any, term: LevelsTerm, current: Any, level: str) -> Any:
    """The rule with `level` taken out of the levels this row may move (or be stated) to."""
    moves = rule.moves
    if moves is None:
        allowed = set(term.levels)
    elif _missing(current):
        allowed = set(moves.get("*", ()))
    else:
        allowed = set(moves.get(current, ())) | set(moves.get("*", ()))
    kept = tuple(x for x in term.levels if x in allowed and x != level)
    return replace(rule, moves={"*": kept})


def row_rules(model: AdditiveModel, mutability: Any, values: Mapping[str, Any]
              ) -> tuple[dict[str, Any], set[str]]:
    """This row's feature rules with the one-sided rules folded in as bounds, and the
    features that a rule pairs with another movable feature."""
    rules = dict(mutability.rules)
    paired: set[str] = set()
    for link in mutability.links:
        a, b = link.feature, link.other
        moves_a, moves_b = movable(rules, a, values[a]), movable(rules, b, values[b])
        if moves_a and moves_b:
            paired |= {a, b}
        elif moves_a and not _missing(values[b]):
            side, edge = link_edge(link, None, float(values[b]))
            rules[a] = _tightened(rules[a], side, edge)
        elif moves_b and not _missing(values[a]):
            side, edge = link_edge(link, float(values[a]), None)
            rules[b] = _tightened(rules[b], side, edge)
    for bound in mutability.level_bounds:
        w, f = bound.when, bound.feature
        if not movable(rules, w, values[w]):
            continue  # the category stays: the rule never applies
        if movable(rules, f, values[f]):
            paired |= {w, f}
        elif not bound.within(values[f]):
            rules[w] = _without_level(rules[w], model.term(w), values[w], bound.level)
    return rules, paired


def tight_values(mutability: Any, feature: str, listed: Mapping[str, np.ndarray]
                 ) -> np.ndarray:
    """Values of `feature` that meet a rule exactly against a value listed for the other side
    (the link's edge; a level bound's own bounds): with no step, a number may also move to
    these, so that it can go just as far as a rule allows."""
    found: list[float] = []
    for link in mutability.links:
        if link.feature == feature and link.other in listed:
            found += [link_edge(link, None, float(v))[1] for v in listed[link.other]
                      if not _missing(v)]
        elif link.other == feature and link.feature in listed:
            found += [link_edge(link, float(v), None)[1] for v in listed[link.feature]
                      if not _missing(v)]
    for bound in mutability.level_bounds:
        if bound.feature == feature and bound.when in listed:
            found += [b for b in (bound.lower, bound.upper) if b is not None]
    values = np.asarray(found, dtype=float)
    return np.unique(values[np.isfinite(values)])


def pair_matrices(mutability: Any, values: Mapping[str, Sequence[Any]],
                  names: Sequence[str]) -> tuple[PairRule, ...]:
    """The pair rules of a row's program: for each rule whose two features are both groups,
    which of their candidates (current first, as in `values`) may go together. Both staying
    put is always allowed; otherwise the values after the plan must keep the rule."""
    group = {name: g for g, name in enumerate(names)}
    tables: dict[tuple[int, int], np.ndarray] = {}

    def add(a: str, b: str, allowed: np.ndarray) -> None:
        if a not in group or b not in group:
            return
        allowed[0, 0] = True  # a plan that changes neither leaves the row as it is
        key = (group[a], group[b])
        tables[key] = tables[key] & allowed if key in tables else allowed

    for link in mutability.links:
        a, b = np.asarray(values.get(link.feature, []), dtype=object), \
            np.asarray(values.get(link.other, []), dtype=object)
        if len(a) > 1 or len(b) > 1:
            add(link.feature, link.other, link.holds(a.astype(float)[:, None],
                                                     b.astype(float)[None, :]))
    for bound in mutability.level_bounds:
        levels = np.asarray(values.get(bound.when, []), dtype=object)
        numbers = np.asarray(values.get(bound.feature, []), dtype=object)
        if len(levels) > 1 and len(numbers):
            moved = (levels == bound.level) & (np.arange(len(levels)) > 0)
            add(bound.when, bound.feature, ~moved[:, None] | bound.within(
                numbers.astype(float))[None, :])
    return tuple(PairRule(a, b, allowed) for (a, b), allowed in sorted(tables.items()))


def rules_kept(mutability: Any, before: Mapping[str, Any], after: Mapping[str, Any]) -> bool:
    """Whether a changed row keeps every link and level bound (the plan's check)."""
    def changed(name: str) -> bool:
        old, new = before[name], after[name]
        return not (old == new or (_missing(old) and _missing(new)))

    for link in mutability.links:
        if (changed(link.feature) or changed(link.other)) and not link.holds(
                after[link.feature], after[link.other]):
            return False
    for bound in mutability.level_bounds:
        if (changed(bound.when) and after[bound.when] == bound.level
                and not bound.within(after[bound.feature])):
            return False
    return True
