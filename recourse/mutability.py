"""What may change: the goal of a plan and one rule per feature, read from TOML.

A mutability file has a `[goal]` table, one `[feature.NAME]` table per
feature that may change, and rules between two features: `[[link]]` and `[[level_bound]]`
tables (recourse.pair_rules). Every problem names the file and the key at fault.
Percentile bounds are resolved here through the model's training profiles;
checks that need the applicant's row (bounds that exclude the current value)
happen in `recourse.candidates`.
"""

from __future__ import annotations

import json
import math
import textwrap
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from glassbox.core.additive import AdditiveModel, FeatureProfile, LevelsTerm
from glassbox.core.files import read_toml
from glassbox.core.schema import is_number
from glassbox.core.wording import noun
from recourse.errors import MutabilityError
from recourse.pair_rules import LevelBound, Link, known_keys, read_level_bounds, read_links

DIRECTIONS = ("at-least", "at-most")
OBJECTIVES = ("total-cost", "largest-cost", "fewest-changes")
CHANGES = ("fixed", "increase", "decrease", "either")
COSTS = ("percentile", "spread")
ANY_LEVEL = "*"
GOAL_KEYS = ("probability", "value", "direction", "margin", "max_changes", "objective")
NUMBER_KEYS = ("lower", "upper", "lower_percentile", "upper_percentile", "step",
               "largest_change")
RULE_KEYS = ("change", *NUMBER_KEYS, "cost", "moves", "supply_cost")
PERCENTILE_GRID = np.linspace(0.0, 100.0, 101)
# For a normal distribution the median absolute deviation is 0.6745 standard deviations and
# the interquartile range 1.349 (both from the normal's quartile, 0.67449; scipy's
# median_abs_deviation and iqr with scale="normal" use the same): so MAD x 1.4826 and
# IQR / 1.349 both estimate the standard deviation, and cost "spread" counts in those units.
NORMAL_QUARTILE = 0.6744897501960817
MAD_TO_SD = 1.0 / NORMAL_QUARTILE
IQR_TO_SD = 2.0 * NORMAL_QUARTILE
NO_SPREAD = ('cost "spread" needs a spread, but half or more of the training rows share one '
             "value (median absolute deviation and interquartile range are 0): give cost = "
             '"percentile" or a number per unit')


@dataclass(frozen=True)
class Goal:
    """The outcome a plan must reach, and how plans are compared."""

    target: float
    direction: str
    margin: float = 0.0
    max_changes: int | None = None
    objective: str = "total-cost"

    def threshold(self, link: str) -> float:
        """What a plan must reach: the target moved past by the margin, on the link scale
        (log-odds for "logit")."""
        if self.direction not in DIRECTIONS:
            raise MutabilityError(f"[goal] direction must be at-least or at-most, "
                                  f"not {self.direction!r}")
        aim = self.target + self.margin if self.direction == "at-least" else (
            self.target - self.margin)
        if link != "logit":
            return float(aim)
        if not 0.0 < aim < 1.0:
            raise MutabilityError(f"[goal] probability {self.target:g} with margin "
                                  f"{self.margin:g} asks for {aim:g}, outside (0, 1)")
        return math.log(aim / (1.0 - aim))

    def missed(self, score: np.ndarray, link: str) -> np.ndarray:
        """Which scores miss the goal itself (the declined rows); the margin is not part
        of it: it only sets how far a plan must go (`threshold`)."""
        bare = replace(self, margin=0.0).threshold(link)
        score = np.asarray(score, dtype=float)
        return score < bare if self.direction == "at-least" else score > bare


@dataclass(frozen=True)
class FeatureRule:
    """How one feature may change: direction, bounds, grid, largest change, cost."""

    feature: str
    change: str
    lower: float | None = None
    upper: float | None = None
    step: float | None = None
    largest_change: float | None = None
    cost: str | float = "percentile"
    moves: Mapping[str, tuple[str, ...]] | None = None
    supply_cost: float | None = None  # a missing value may be supplied, at this cost

    @property
    def supplies(self) -> bool:
        """Whether a row with no value here may be given one (any value within the rules)."""
        return self.supply_cost is not None


@dataclass(frozen=True)
class Mutability:
    """The goal, the rules of the features that may change, and rules between two."""

    goal: Goal
    rules: Mapping[str, FeatureRule]
    source: str = ""
    links: tuple[Link, ...] = ()
    level_bounds: tuple[LevelBound, ...] = ()


def load_mutability(path: str | Path, model: AdditiveModel) -> Mutability:
    """Read and check a TOML mutability file against the model."""
    data = read_toml(path, "mutability file", MutabilityError)
    return mutability_from_dict(data, model, source=str(path))


def mutability_from_dict(data: Mapping[str, Any], model: AdditiveModel,
                         source: str = "") -> Mutability:
    """Build and check a Mutability from parsed TOML (or any nested mapping)."""
    where = f"{source}: " if source else "mutability: "
    if not isinstance(data, Mapping):
        raise MutabilityError(f"{where}expected a table of settings")
    unknown = sorted(set(data) - {"goal", "feature", "link", "level_bound"})
    if unknown:
        raise MutabilityError(f"{where}unknown top-level {noun(len(unknown), 'key')}: "
                              f"{', '.join(unknown)} (expected goal, feature, link, level_bound)")
    goal = _goal(data.get("goal", {}), model, where)
    features = data.get("feature", {})
    if not isinstance(features, Mapping):
        raise MutabilityError(f"{where}'feature' must hold [feature.NAME] tables")
    known = {spec.name for spec in model.schema.features}
    rules: dict[str, FeatureRule] = {}
    for name, entry in features.items():
        if name not in known:
            raise MutabilityError(f"{where}[feature.{name}] unknown feature '{name}' (the "
                                  f"model's schema has: {', '.join(sorted(known))})")
        rule = _rule(str(name), entry, model, f"{where}[feature.{name}] ")
        if rule.change != "fixed" or rule.supplies:
            rules[str(name)] = rule
    return Mutability(goal, rules, source, read_links(data.get("link", []), model, where),
                      read_level_bounds(data.get("level_bound", []), model, where))


def _number(entry: Mapping[str, Any], key: str, here: str) -> float | None:
    if key not in entry:
        return None
    value = entry[key]
    if not is_number(value):
        raise MutabilityError(f"{here}{key} must be a number, not {value!r}")
    return float(value)


def _choice(entry: Mapping[str, Any], key: str, allowed: tuple[str, ...], default: str,
            here: str) -> str:
    value = entry.get(key, default)
    if value not in allowed:
        raise MutabilityError(f"{here}{key} must be one of {', '.join(allowed)}, not {value!r}")
    return str(value)


def _goal(entry: Any, model: AdditiveModel, where: str) -> Goal:
    here = f"{where}[goal] "
    if not isinstance(entry, Mapping):
        raise MutabilityError(f"{where}'goal' must be a table")
    known_keys(entry, GOAL_KEYS, here)
    if model.link == "logit":
        if "value" in entry:
            raise MutabilityError(f"{here}value is for regression models; this model is a "
                                  "classifier, so give probability")
        target = _number(entry, "probability", here)
        target = 0.5 if target is None else target
        if not 0.0 < target < 1.0:
            raise MutabilityError(f"{here}probability must lie strictly between 0 and 1, "
                                  f"not {target:g}")
    else:
        if "probability" in entry:
            raise MutabilityError(f"{here}probability is for classification models; this "
                                  "model is a regression, so give value")
        target = _number(entry, "value", here)
        if target is None:
            raise MutabilityError(f"{here}value is required for a regression model")
    margin = _number(entry, "margin", here) or 0.0
    if margin < 0:
        raise MutabilityError(f"{here}margin must be zero or more, not {margin:g}")
    max_changes = entry.get("max_changes")
    if max_changes is not None and (not isinstance(max_changes, int)
                                    or isinstance(max_changes, bool) or max_changes < 1):
        raise MutabilityError(f"{here}max_changes must be a whole number of at least 1, "
                              f"not {max_changes!r}")
    if "direction" not in entry and model.schema.target.better is None:
        raise MutabilityError(f"{here}direction is required: the model does not say which "
                              'way is better for the person (give direction = "at-least" or '
                              '"at-most")')
    default = _better_way(model) if model.schema.target.better is not None else "at-least"
    goal = Goal(target, _choice(entry, "direction", DIRECTIONS, default, here), margin,
                max_changes, _choice(entry, "objective", OBJECTIVES, "total-cost", here))
    try:
        goal.threshold(model.link)
    except MutabilityError as exc:
        raise MutabilityError(f"{where}{exc}") from None
    return goal


def _known_levels(model: AdditiveModel, name: str) -> tuple[str, ...]:
    terms = [t for t in model.terms if t.feature == name and isinstance(t, LevelsTerm)]
    if terms:
        return terms[0].levels
    return tuple(level for p in model.profiles if p.feature == name for level, _ in p.level_counts)


def _percentiles(model: AdditiveModel, name: str) -> tuple[float, ...]:
    return next((p.percentiles for p in model.profiles if p.feature == name), ())


def unit_spread(profile: FeatureProfile) -> float | None:
    """The distance that costs 1 under cost "spread": the training values' standard deviation,
    estimated robustly as the median absolute deviation x 1.4826; when that is 0 (over half
    the rows share one value), the interquartile range / 1.349; when that is 0 too, the
    standard deviation itself from the exact value counts. None when none is above 0."""
    for spread in (MAD_TO_SD * (profile.spread or 0.0),
                   (profile.percentiles[75] - profile.percentiles[25]) / IQR_TO_SD):
        if spread > 0:
            return float(spread)
    if profile.value_counts:
        values = np.array([v for v, _ in profile.value_counts])
        counts = np.array([c for _, c in profile.value_counts], dtype=float)
        deviation = math.sqrt(np.average((values - np.average(values, weights=counts)) ** 2,
                                         weights=counts))
        if deviation > 0:
            return deviation
    return None


def _rule(name: str, entry: Any, model: AdditiveModel, here: str) -> FeatureRule:
    if not isinstance(entry, Mapping):
        raise MutabilityError(f"{here}must be a table")
    known_keys(entry, RULE_KEYS, here)
    spec = model.schema.feature(name)
    change = _choice(entry, "change", CHANGES, "fixed", here)
    if spec.protected and (change != "fixed" or "supply_cost" in entry):
        what = f"change is {change!r}" if change != "fixed" else "supply_cost is given"
        raise MutabilityError(f"{here}{what} but '{name}' is protected: "
                              "protected characteristics are never levers")
    supply = _supply_cost(entry, here)
    if spec.kind == "category":
        return replace(_category_rule(name, entry, change, model, here), supply_cost=supply)
    if "moves" in entry:
        raise MutabilityError(f"{here}moves applies to categories only; '{name}' is a "
                              f"{spec.kind}")
    values = {key: _number(entry, key, here) for key in NUMBER_KEYS}
    bounds = {}
    for side in ("lower", "upper"):
        percent = values[f"{side}_percentile"]
        if values[side] is not None and percent is not None:
            raise MutabilityError(f"{here}give {side} or {side}_percentile, not both")
        bounds[side] = values[side]
        if percent is not None:
            if not 0.0 <= percent <= 100.0:
                raise MutabilityError(f"{here}{side}_percentile must lie between 0 and 100, "
                                      f"not {percent:g}")
            table = _percentiles(model, name)
            if table:  # no profile: the model does not use the feature, so no effect
                bounds[side] = float(np.interp(percent, PERCENTILE_GRID, table))
    lower, upper = bounds["lower"], bounds["upper"]
    if lower is not None and upper is not None and lower > upper:
        raise MutabilityError(f"{here}lower ({lower:g}) is above upper ({upper:g})")
    step, largest = values["step"], values["largest_change"]
    if step is not None and step <= 0:
        raise MutabilityError(f"{here}step must be above zero, not {step:g}")
    if step is not None and spec.kind in ("integer", "flag") and step != round(step):
        raise MutabilityError(f"{here}step must be a whole number for a {spec.kind}, "
                              f"not {step:g}")
    if largest is not None and largest <= 0:
        raise MutabilityError(f"{here}largest_change must be above zero, not {largest:g}")
    cost = entry.get("cost", "percentile")
    if not (cost in COSTS or (is_number(cost) and cost >= 0)):
        raise MutabilityError(f"{here}cost must be percentile, spread or a number of at "
                              f"least 0 per unit, not {cost!r}")
    profile = next((p for p in model.profiles if p.feature == name), None)
    if (cost == "spread" and change != "fixed" and profile is not None and profile.percentiles
            and unit_spread(profile) is None):
        raise MutabilityError(f"{here}{NO_SPREAD}")
    return FeatureRule(name, change, lower, upper, step, largest,
                       cost if isinstance(cost, str) else float(cost), supply_cost=supply)


def _supply_cost(entry: Mapping[str, Any], here: str) -> float | None:
    """`supply_cost`: a missing value may be supplied, at this cost (a number of at least 0)."""
    if "supply_cost" not in entry:
        return None
    value = entry["supply_cost"]
    if not is_number(value) or value < 0:
        raise MutabilityError(f"{here}supply_cost must be a number of at least 0 (the cost "
                              f"of stating a value that is missing), not {value!r}")
    return float(value)


def _category_rule(name: str, entry: Mapping[str, Any], change: str, model: AdditiveModel,
                   here: str) -> FeatureRule:
    for key in NUMBER_KEYS:
        if key in entry:
            raise MutabilityError(f"{here}{key} does not apply to a category ('{name}' has "
                                  "levels, not numbers)")
    if change in ("increase", "decrease"):
        raise MutabilityError(f"{here}change {change!r} needs an order; a category can be "
                              "fixed or either")
    cost = entry.get("cost", 1.0)
    if not is_number(cost) or cost < 0:
        raise MutabilityError(f"{here}cost of a category must be a number of at least 0 "
                              f"per move, not {cost!r} (percentile and spread need numbers)")
    moves = entry.get("moves")
    if moves is None:
        return FeatureRule(name, change, cost=float(cost))
    if not isinstance(moves, Mapping):
        raise MutabilityError(f"{here}moves must be a table of level = [levels]")
    known = set(_known_levels(model, name))
    checked: dict[str, tuple[str, ...]] = {}
    for level, targets in moves.items():
        if known and level != ANY_LEVEL and level not in known:
            raise MutabilityError(f"{here}moves names unknown level {level!r}")
        if not isinstance(targets, list) or not all(isinstance(t, str) for t in targets):
            raise MutabilityError(f"{here}moves.{level} must be a list of levels")
        for target in targets:
            if known and target not in known:
                raise MutabilityError(f"{here}moves names unknown level {target!r}")
        checked[str(level)] = tuple(dict.fromkeys(targets))
    return FeatureRule(name, change, cost=float(cost), moves=checked)


# ---------------------------------------------------------------- template


def _key(name: str) -> str:
    if name and all(c.isalnum() or c in "_-" for c in name):
        return name
    return json.dumps(name)


def _g(value: float) -> str:
    """A number for a TOML value or comment: short, and always valid TOML."""
    text = f"{value:.6g}"
    return text if any(c in text for c in ".en") else f"{text}.0"


def _nice_step(span: float) -> float:
    if span <= 0:
        return 1.0
    return float(10.0 ** math.floor(math.log10(span / 100.0)))


TEMPLATE_WIDTH = 80  # the template's comments fold to fit this many columns
GLUE = "\xa0"  # holds words together while a comment folds (never a line break there)


def _line(code: str, note: str = "") -> str:
    """A template line: the code, then its note as a comment from column 29; a note too
    long folds onto comment-only lines starting at the same column."""
    if not note:
        return code
    start = f"{code:<27} # "
    room = TEMPLATE_WIDTH - len(start)
    if room < 20:  # a long code line: the note goes under it, as a comment line
        return "\n".join([code, _comment(note)])
    pieces = textwrap.wrap(note, room, break_long_words=False, break_on_hyphens=False)
    below = " " * (len(start) - 2) + "# "
    return "\n".join([start + pieces[0], *(below + piece for piece in pieces[1:])])


def _comment(text: str) -> str:
    """A comment folded to the template's width at spaces (`GLUE` holds words together)."""
    pieces = textwrap.wrap(text, TEMPLATE_WIDTH - 2, break_long_words=False,
                           break_on_hyphens=False)
    return "\n".join("# " + piece.replace(GLUE, " ") for piece in pieces)


def _glued(items: list[str]) -> str:
    """Items joined by commas, each kept on one line when a comment folds."""
    return ", ".join(item.replace(" ", GLUE) for item in items)


def _better_way(model: AdditiveModel) -> str:
    """The goal's direction that the schema calls better for the person."""
    return "at-most" if model.schema.target.better == "lower" else "at-least"


def template(model: AdditiveModel) -> str:
    """A starting mutability file: every feature fixed, its training range, key examples."""
    lines = ["# Mutability file: what the planner may change to reach the goal.",
             "# Every feature starts fixed; set `change` and uncomment the keys you need.",
             "", "[goal]"]
    lines += [_line("probability = 0.5", "the probability the plan must reach")
              if model.link == "logit" else
              _line(f"value = {_g(model.intercept)}", "the prediction to reach (here: the "
                    "training mean)"),
              _line(f'direction = "{_better_way(model)}"', "at-least | at-most (from [target] "
                    "better)"),
              _line("# margin = 0.0", "pass the target by this much, in its own units"),
              _line("# max_changes = 3", "at most this many features change"),
              _line('# objective = "total-cost"', "total-cost | largest-cost | fewest-changes")]
    used = set(model.features)
    for spec in model.schema.features:
        if spec.ignore:
            continue
        lines += ["", f"[feature.{_key(spec.name)}]"]
        if spec.protected:
            lines.append(_line('change = "fixed"', "protected characteristic: it can never "
                               "change"))
            continue
        if spec.name not in used:
            lines.append("# the model does not use this feature: a rule here has no effect")
        lines += _feature_lines(model, spec.name, spec.kind)
        if spec.name in used and model.term(spec.name).missing is not None:
            lines += _supply_lines(model, spec.name)
    return "\n".join(lines + _pair_lines(model)) + "\n"


def _pair_lines(model: AdditiveModel) -> list[str]:
    """Commented examples of the rules between two features, on the model's own features
    (indented: they are switched on together, header and keys, not key by key)."""
    usable = [spec for spec in model.schema.features
              if spec.name in model.features and not spec.protected and not spec.ignore]
    numbers = [s.name for s in usable if s.kind != "category"]
    categories = [s.name for s in usable if s.kind == "category" and _known_levels(model, s.name)]
    lines = []
    if len(numbers) >= 2:
        lines += ["", "# A link between two numbers: when a plan changes either, the values",
                  "# after it keep feature <= times x other + plus (at_least: >=); a missing",
                  "# value is not checked.",
                  "#   [[link]]", _line(f"#   feature = {json.dumps(numbers[0])}"),
                  _line(f"#   at_most = {json.dumps(numbers[1])}", "or at_least"),
                  _line("#   times = 1.0", "above zero"), _line("#   plus = 0.0")]
    if categories and numbers:
        level = json.dumps(_known_levels(model, categories[0])[0], ensure_ascii=False)
        lines += ["", "# A level that bounds a number: a plan that moves the category to the level",
                  "# keeps the number within lower / upper (one or both).",
                  "#   [[level_bound]]", _line(f"#   when = {json.dumps(categories[0])}"),
                  _line(f"#   is = {level}"), _line(f"#   feature = {json.dumps(numbers[0])}"),
                  _line("#   upper = 100.0")]
    return lines


def _feature_lines(model: AdditiveModel, name: str, kind: str) -> list[str]:
    if kind == "category":
        levels = _known_levels(model, name)
        shown = json.dumps(list(levels[:2]) or ["LEVEL"], ensure_ascii=False)
        return [_comment(f"levels: {_glued(levels) if levels else 'unknown'}"),
                _line('change = "fixed"', "fixed | either"),
                _line(f'# moves = {{ "*" = {shown} }}', 'from a level ("*": any) to these'),
                _line("# cost = 1.0", "per move")]
    table = _percentiles(model, name)
    lines = []
    if table:
        lines.append(_comment("training: " + _glued([
            f"min {_g(table[0])}", f"5th percentile {_g(table[5])}",
            f"median {_g(table[50])}", f"95th percentile {_g(table[95])}",
            f"max {_g(table[100])}"])))
    lines.append(_line('change = "fixed"', "fixed | increase | decrease | either"))
    if kind != "flag" and table:
        span = table[95] - table[5]
        step = 1.0 if kind == "integer" else _nice_step(span)
        largest = max(step, round(span / 2.0 / step) * step)
        lines += [_line(f"# lower = {_g(table[5])}", "or lower_percentile = 5"),
                  _line(f"# upper = {_g(table[95])}", "or upper_percentile = 95"),
                  _line(f"# step = {_g(step)}", "values move in whole steps from the current"),
                  _line(f"# largest_change = {_g(largest)}", "|new - current| at most this")]
    lines.append(_line('# cost = "percentile"', "percentile | spread | a number per unit; "
                       "spread: per standard deviation, estimated as MAD x 1.4826"))
    return lines


def _supply_lines(model: AdditiveModel, name: str) -> list[str]:
    """The supply rule of a feature whose table has an entry for a missing value."""
    profile = next((p for p in model.profiles if p.feature == name), None)
    share = profile.missing_share if profile is not None else None
    seen = (f"{profile.missing:,} of {profile.rows:,} training rows had no value"
            if share is not None else "the model has an entry for a missing value")
    return [_comment(f"{seen}; a row with no value keeps it unless supply_cost is given"),
            _line("# supply_cost = 1.0", "a missing value may be stated at this cost: " + (
                'any level (or those moves "*" lists)' if model.term(name).kind == "levels"
                else "any value within the bounds and step above (change and "
                "largest_change do not apply)"))]

