"""The declared structure of every file glassbox reads, checked when it is read.

One structure per file kind, all in this module: the model file, the points card, the
comparison JSON, the recourse reach JSON, the schema TOML and the mutability TOML. A
structure says which keys a table holds (required, optional, and whether others may
appear), what type each value has, and the range of each number (finite always;
probabilities in [0, 1], counts whole and at least 0, edges increasing, ...).

`check(structure, value, where, error)` raises `error` with one line naming the file and
the key path of the first problem, e.g.

    model file m.json: terms[3].values[2] must be a finite number, not "abc"

so a damaged file never reaches code that would fail with a traceback. Rules that tie
several keys together (as many values as knots) stay with the records that hold them.
"""

from __future__ import annotations

import json
import math
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import date
from typing import Any

from glassbox.core.errors import GlassboxError

# A points card's points are summed in 64-bit integers: any one row's points stay far
# inside that range (a card's points are hundreds, not billions).
POINTS_LIMIT = 10**9


class _Problem(Exception):
    def __init__(self, path: str, text: str) -> None:
        super().__init__(path, text)
        self.path, self.text = path, text


def _shown(value: Any) -> str:
    try:
        text = json.dumps(value, ensure_ascii=False, allow_nan=True)
    except (TypeError, ValueError):
        text = type(value).__name__
    return text if len(text) <= 40 else text[:37] + "..."


def _join(path: str, key: str | int) -> str:
    if isinstance(key, int):
        return f"{path}[{key}]"
    return f"{path}.{key}" if path else str(key)


class Spec:
    """A declared structure: `describe` in words, `check` a value at a key path. Simple
    structures say whether they `accept` a value; tables and lists check their parts."""

    null: bool = False

    def describe(self) -> str:
        raise NotImplementedError

    def check(self, value: Any, path: str) -> None:
        if value is None and self.null:
            return
        if not self.accepts(value, path):
            raise _Problem(path, f"must be {self.describe()}"
                                 + (" or null" if self.null else "") + f", not {_shown(value)}")

    def accepts(self, value: Any, path: str) -> bool:
        raise NotImplementedError


def _number_text(value: float | None) -> str:
    return "" if value is None else str(value) if isinstance(value, int) else f"{value:g}"


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


@dataclass(frozen=True)
class Number(Spec):
    """A finite number, optionally whole (a JSON integer) and within [low, high]; `above`
    makes the low end exclusive."""

    low: float | None = None
    high: float | None = None
    whole: bool = False
    above: bool = False
    null: bool = False

    def describe(self) -> str:
        words = "a whole number" if self.whole else "a finite number"
        low, high = _number_text(self.low), _number_text(self.high)
        if self.low is not None and self.high is not None:
            return f"{words} from {low} to {high}" if not self.above else \
                f"{words} above {low} and at most {high}"
        if self.low is not None:
            return f"{words} {'above' if self.above else 'of at least'} {low}"
        if self.high is not None:
            return f"{words} of at most {high}"
        return words

    def accepts(self, value: Any, path: str) -> bool:
        if not _is_number(value) or (self.whole and not isinstance(value, int)):
            return False
        if isinstance(value, float) and not math.isfinite(value):
            return False
        if isinstance(value, int) and abs(value) > sys.float_info.max:
            return False  # a whole number too large for any float (readers use floats)
        if self.low is not None and (value < self.low or (self.above and value == self.low)):
            return False
        return self.high is None or value <= self.high


@dataclass(frozen=True)
class Text(Spec):
    """A string, optionally one of `choices`."""

    choices: tuple[str, ...] = ()
    null: bool = False

    def describe(self) -> str:
        if self.choices:
            return "one of " + ", ".join(json.dumps(c) for c in self.choices)
        return "text"

    def accepts(self, value: Any, path: str) -> bool:
        return isinstance(value, str) and (not self.choices or value in self.choices)


@dataclass(frozen=True)
class Day(Spec):
    """A calendar day written YYYY-MM-DD (ISO 8601)."""

    null: bool = False

    def describe(self) -> str:
        return "a date written YYYY-MM-DD"

    def accepts(self, value: Any, path: str) -> bool:
        try:
            return isinstance(value, str) and date.fromisoformat(value).isoformat() == value
        except ValueError:
            return False


@dataclass(frozen=True)
class Flag(Spec):
    null: bool = False

    def describe(self) -> str:
        return "true or false"

    def accepts(self, value: Any, path: str) -> bool:
        return isinstance(value, bool)


@dataclass(frozen=True)
class Anything(Spec):
    """Any value (free-form settings); numbers in it must still be finite."""

    null: bool = True

    def describe(self) -> str:
        return "any value"

    def check(self, value: Any, path: str) -> None:
        if isinstance(value, float) and not math.isfinite(value):
            raise _Problem(path, f"must be a finite number, not {_shown(value)}")
        if isinstance(value, Mapping):
            for key, inner in value.items():
                self.check(inner, _join(path, str(key)))
        elif isinstance(value, list):
            for index, inner in enumerate(value):
                self.check(inner, _join(path, index))


@dataclass(frozen=True)
class Either(Spec):
    """One of several structures (the first that accepts the value)."""

    options: tuple[Spec, ...]
    null: bool = False

    def describe(self) -> str:
        return " or ".join(option.describe() for option in self.options)

    def accepts(self, value: Any, path: str) -> bool:
        for option in self.options:
            try:
                option.check(value, path)
            except _Problem:
                continue
            return True
        return False


@dataclass(frozen=True)
class Items(Spec):
    """A list of `item`s: of exactly `length`, or at least `at_least`; `order` "strict"
    (each above the last) or "weak" (none below the last) for numbers."""

    item: Spec
    length: int | None = None
    at_least: int = 0
    order: str | None = None
    null: bool = False

    def describe(self) -> str:
        count = (f"exactly {self.length} " if self.length is not None else
                 f"at least {self.at_least} " if self.at_least else "")
        return f"a list of {count}values"

    def check(self, value: Any, path: str) -> None:
        if value is None and self.null:
            return
        if not isinstance(value, list):
            raise _Problem(path, f"must be a list, not {_shown(value)}")
        if (self.length is not None and len(value) != self.length) or len(value) < self.at_least:
            raise _Problem(path, f"must be {self.describe()}, not {len(value)}")
        for index, item in enumerate(value):
            self.item.check(item, _join(path, index))
        if self.order:
            for index in range(1, len(value)):
                before, now = value[index - 1], value[index]
                if now < before or (self.order == "strict" and now == before):
                    raise _Problem(_join(path, index), "must be "
                                   + ("above" if self.order == "strict" else "at least")
                                   + f" the value before it ({_shown(before)}), not "
                                     f"{_shown(now)}")


@dataclass(frozen=True)
class Fixed(Spec):
    """A list of fixed length whose positions have their own structures (a pair)."""

    items: tuple[Spec, ...]
    null: bool = False

    def describe(self) -> str:
        return f"a list of {len(self.items)} values"

    def check(self, value: Any, path: str) -> None:
        if value is None and self.null:
            return
        if not isinstance(value, list) or len(value) != len(self.items):
            raise _Problem(path, f"must be {self.describe()}, not {_shown(value)}")
        for index, (spec, item) in enumerate(zip(self.items, value, strict=True)):
            spec.check(item, _join(path, index))


@dataclass(frozen=True)
class Record(Spec):
    """A table with `required` and `optional` keys; other keys are refused unless `extra`
    gives their structure."""

    required: Mapping[str, Spec] = field(default_factory=dict)
    optional: Mapping[str, Spec] = field(default_factory=dict)
    extra: Spec | None = None
    null: bool = False

    def describe(self) -> str:
        return "a table of keys"

    def check(self, value: Any, path: str) -> None:
        if value is None and self.null:
            return
        if not isinstance(value, Mapping):
            raise _Problem(path, f"must be a table of keys, not {_shown(value)}")
        for key in self.required:
            if key not in value:
                raise _Problem(_join(path, key), "is missing")
        for key, item in value.items():
            spec = self.required.get(key) or self.optional.get(key) or self.extra
            if spec is None:
                known = ", ".join([*self.required, *self.optional])
                raise _Problem(_join(path, str(key)), f"is not a key this file has (known "
                                                      f"here: {known})")
            spec.check(item, _join(path, str(key)))


@dataclass(frozen=True)
class Keyed(Spec):
    """A table whose keys are names (features, levels) and whose values share a structure."""

    value: Spec
    null: bool = False

    def describe(self) -> str:
        return "a table of names"

    def check(self, value: Any, path: str) -> None:
        if value is None and self.null:
            return
        if not isinstance(value, Mapping):
            raise _Problem(path, f"must be a table of names, not {_shown(value)}")
        for key, item in value.items():
            self.value.check(item, _join(path, str(key)))


@dataclass(frozen=True)
class Tagged(Spec):
    """A table whose `tag` key picks its structure (a term's "kind")."""

    tag: str
    options: Mapping[str, Record]
    null: bool = False

    def describe(self) -> str:
        return "a table of keys"

    def check(self, value: Any, path: str) -> None:
        if not isinstance(value, Mapping):
            raise _Problem(path, f"must be a table of keys, not {_shown(value)}")
        kind = value.get(self.tag)
        if not isinstance(kind, str) or kind not in self.options:
            raise _Problem(_join(path, self.tag), "must be one of "
                           + ", ".join(json.dumps(k) for k in self.options)
                           + f", not {_shown(kind)}")
        self.options[kind].check(value, path)


def check(structure: Spec, value: Any, where: str, error: type[GlassboxError]) -> None:
    """Raise `error` naming `where` (the file) and the key path if `value` does not have
    the declared `structure`."""
    try:
        structure.check(value, "")
    except _Problem as problem:
        path = problem.path or "its content"
        raise error(f"{where}: {path} {problem.text}") from None


def problem(where: str, path: str, text: str, error: type[GlassboxError]) -> GlassboxError:
    """An error in the same words as `check`'s, for rules that tie several keys together."""
    return error(f"{where}: {path} {text}")


# ---------------------------------------------------------------- the declared structures

NUMBER = Number()
NUMBERS = Items(NUMBER)
COUNT = Number(low=0, whole=True)
POSITIVE = Number(low=0)  # spreads, differences, costs: never below 0
SHARE = Number(low=0, high=1)  # a probability or a share of rows
OPEN_SHARE = Number(low=0, high=1, above=True)  # a cut-off: above 0 (below 1 checked apart)
POINTS = Number(low=-POINTS_LIMIT, high=POINTS_LIMIT, whole=True)
TEXT = Text()
TEXTS = Items(TEXT)
SHA256 = Text(null=True)
SCALAR = Either((TEXT, NUMBER, Flag()))  # a category level, a fill value, a positive label

# The schema as model files, cards and comparisons carry it, and as TOML files hold it.
# Unknown keys and the meaning of each value are checked by Schema.from_dict in its own
# words (a missing [target] too); here only that every value has its type.
SCHEMA = Record(
    optional={
        "id": TEXT,
        "target": Record(required={"column": TEXT},
                         optional={"task": TEXT, "positive": SCALAR, "better": TEXT},
                         extra=Anything()),
        "feature": Keyed(Record(
            required={"kind": TEXT},
            optional={"monotone": TEXT, "protected": Flag(), "ignore": Flag(),
                      "fill": SCALAR, "description": TEXT, "reason": TEXT, "missing": TEXT,
                      "missing_codes": Items(SCALAR), "pool_below": POSITIVE,
                      "pooled": TEXTS, "days_before": Anything(), "date_layout": Anything()},
            extra=Anything())),
    },
    extra=Anything())

_BANDS = {"lower": NUMBERS, "upper": NUMBERS, "missing": Number(null=True),
          "missing_band": Fixed((NUMBER, NUMBER), null=True)}
TERM = Tagged("kind", {
    "curve": Record(required={"feature": TEXT, "kind": TEXT,
                              "knots": Items(NUMBER, at_least=1, order="strict"),
                              "values": Items(NUMBER, at_least=1)}, optional=_BANDS),
    "steps": Record(required={"feature": TEXT, "kind": TEXT,
                              "edges": Items(NUMBER, order="strict"),
                              "values": Items(NUMBER, at_least=1)}, optional=_BANDS),
    "levels": Record(required={"feature": TEXT, "kind": TEXT,
                               "levels": Items(TEXT, at_least=1),
                               "values": Items(NUMBER, at_least=1)},
                     optional={"unseen": NUMBER, **_BANDS}),
})
_AXIS_MISSING = {"missing": Flag()}
PAIR_AXIS = Tagged("kind", {
    "edges": Record(required={"feature": TEXT, "kind": TEXT,
                              "edges": Items(NUMBER, order="strict")}, optional=_AXIS_MISSING),
    "knots": Record(required={"feature": TEXT, "kind": TEXT,
                              "knots": Items(NUMBER, at_least=1, order="strict")},
                    optional=_AXIS_MISSING),
    "levels": Record(required={"feature": TEXT, "kind": TEXT,
                               "levels": Items(TEXT, at_least=1)}, optional=_AXIS_MISSING),
})
# a pairwise table (glassbox.core.pairs); its shape against its axes is checked by PairTerm
PAIR = Record(required={"kind": Text(("pair",)), "features": Items(TEXT, length=2),
                        "axes": Items(PAIR_AXIS, length=2),
                        "values": Items(Items(NUMBER, at_least=1), at_least=1)})
PERCENTILE_POINTS = 101  # 0%, 1%, ..., 100%
PROFILE = Record(
    required={"feature": TEXT, "kind": TEXT},
    optional={"percentiles": Items(NUMBER, length=PERCENTILE_POINTS, order="weak"),
              "mean": Number(null=True), "median_absolute_deviation": Number(low=0, null=True),
              "level_counts": Keyed(COUNT),
              "value_counts": Items(Fixed((NUMBER, Number(low=1, whole=True)))),
              "rows": COUNT, "missing": COUNT})
CELLS = Record(
    required={"feature": TEXT, "resolution": POSITIVE, "lower": Items(NUMBER, at_least=1),
              "upper": Items(NUMBER, at_least=1),
              "rows": Items(Number(low=1, whole=True), at_least=1),
              "sums": Items(NUMBER, at_least=1)},
    optional={"missing_rows": COUNT, "missing_sum": NUMBER})
METADATA = Record(
    optional={"family": TEXT, "parameters": Anything(), "details": Anything(),
              "rows": COUNT, "positive_rate": Number(low=0, high=1, null=True),
              "target_mean": Number(null=True), "data_sha256": SHA256,
              "features_used": TEXTS, "importance": Keyed(POSITIVE),
              "glassbox_version": TEXT, "versions": Keyed(TEXT),
              "pooled_levels": Anything(), "fit_date": Day()},
    extra=Anything())  # what a fit recorded: older files hold other keys, never read
# the development baseline monitoring compares periods with (glassbox.explaining.baseline); bin
# counts against bin labels and rows are checked by Baseline itself
BASELINE = Record(required={
    "rows": COUNT, "source": TEXT,
    "score": Record(required={"edges": Items(NUMBER, order="strict"),
                              "counts": Items(COUNT, at_least=1), "mean": NUMBER}),
    "features": Items(Record(
        required={"feature": TEXT, "source": Text(("steps", "deciles", "levels")),
                  "counts": Items(COUNT, at_least=1), "mean_contribution": NUMBER,
                  "mean_absolute_contribution": POSITIVE, "contribution_spread": POSITIVE},
        optional={"edges": Items(NUMBER, order="strict"), "levels": TEXTS}))},
    optional={"pairs": Items(Record(required={
        "pair": TEXT, "counts": Items(COUNT, at_least=1), "mean_contribution": NUMBER,
        "mean_absolute_contribution": POSITIVE, "contribution_spread": POSITIVE}))})
MODEL = Record(
    required={"link": Text(("logit", "identity")), "intercept": NUMBER,
              "terms": Items(TERM), "schema": SCHEMA},
    optional={"profiles": Items(PROFILE), "metadata": METADATA, "cells": Items(CELLS),
              "baseline": BASELINE, "pairs": Items(PAIR)})

FEATURE_POINTS = Record(
    required={"feature": TEXT, "term": Text(("curve", "steps", "levels")),
              "points": Items(POINTS, at_least=1), "contributions": Items(NUMBER, at_least=1)},
    optional={"edges": Items(NUMBER, order="strict"), "levels": TEXTS,
              "unseen_points": POINTS, "unseen_contribution": NUMBER,
              "training_rows": Items(COUNT), "spreads": Items(POSITIVE),
              "largest": Items(POSITIVE), "exact": Flag(),
              "resolution": Number(low=0, null=True),
              "missing_points": Number(low=-POINTS_LIMIT, high=POINTS_LIMIT, whole=True,
                                       null=True),
              "missing_contribution": Number(null=True),
              "missing_rows": Number(low=0, whole=True, null=True),
              "missing_largest": Number(low=0, null=True)})
FIDELITY = Record(
    required={"rows": COUNT, "largest_difference": POSITIVE, "mean_difference": POSITIVE,
              "spearman": Number(low=-1, high=1, null=True), "cutoff": OPEN_SHARE,
              "agree": COUNT, "favourable_card_only": COUNT, "favourable_model_only": COUNT,
              "agree_rounded": COUNT},
    optional={"agreement": Number(low=0, high=1, null=True), "data_sha256": SHA256,
              "missing_rows": Number(low=0, whole=True, null=True),
              "missing_agree": Number(low=0, whole=True, null=True)})
_GRID = Items(Items(NUMBER, at_least=1), at_least=1)
# a points grid per pairwise table (glassbox.explaining.pair_points); its shape against its
# axes is checked by PairPoints
PAIR_POINTS = Record(required={"features": Items(TEXT, length=2),
                               "axes": Items(PAIR_AXIS, length=2),
                               "points": Items(Items(POINTS, at_least=1), at_least=1),
                               "contributions": _GRID, "largest": _GRID},
                     optional={"binned": TEXTS})
CARD = Record(
    required={"scaling": Record(required={"base_score": NUMBER, "base_odds": Number(
                                              low=0, above=True),
                                          "pdo": Number(low=0, above=True), "factor": NUMBER,
                                          "offset": NUMBER}),
              "base_points": POINTS, "intercept": NUMBER, "features": Items(FEATURE_POINTS),
              "schema": SCHEMA},
    optional={"tolerance": Number(low=0, null=True), "cutoff": OPEN_SHARE,
              "bins": Number(low=1, whole=True),  # version 1 cards: equal-share bins
              "cutoff_points": NUMBER, "model_checksum": SHA256, "fidelity": FIDELITY,
              "pairs": Items(PAIR_POINTS)})

# One row of a comparison's tables: a model (or sparsity size) and a metric, with numbers
# that may be null where no interval exists (one fold) and a note saying why.
_INTERVAL = {"mean": Number(null=True), "lower": Number(null=True),
             "upper": Number(null=True), "interval_note": Text(null=True)}
# One fold's search of the tuned trees benchmark (glassbox/fitting/benchmark_search.py):
# the candidate settings are free-form (the grid may grow), their numbers finite.
_SETTING = {"rounds": Number(low=1, whole=True)}
TUNING = Record(
    required={"repeat": COUNT, "fold": COUNT, "budget": Number(low=1, whole=True),
              "candidates_tried": Number(low=1, whole=True),
              "chosen": Record(required=_SETTING, extra=Either((NUMBER, TEXT, Flag()))),
              "chosen_candidate": Number(low=1, whole=True), "validation_loss": POSITIVE},
    optional={"inner_training_rows": COUNT, "inner_validation_rows": COUNT,
              "inner_folds": Number(low=2, whole=True), "loss": TEXT,
              "tried": Items(Record(required={"candidate": Number(low=1, whole=True),
                                              "validation_loss": POSITIVE},
                                    optional=_SETTING, extra=Either((NUMBER, TEXT, Flag()))))},
    extra=Anything())
METRIC = Text(("auc", "gini", "ks", "log_loss", "brier", "accuracy", "rmse", "mae", "r2"))
COMPARISON = Record(
    required={"format": TEXT, "version": Number(whole=True), "headline": TEXT,
              "task": Text(("classification", "regression")), "primary_metric": METRIC,
              "settings": Record(required={"benchmark": TEXT},
                                 optional={"folds": Number(low=2, whole=True),
                                           "repeats": Number(low=1, whole=True),
                                           "cutoff": OPEN_SHARE, "families": TEXTS,
                                           "seed": Number(whole=True),
                                           "stratified": Flag(), "interval": TEXT,
                                           "test_to_train_ratio": POSITIVE,
                                           "family_options": Keyed(Record(extra=Anything())),
                                           "benchmark_origin": TEXT,
                                           "benchmark_settings": Record(extra=Anything()),
                                           # your own scores in the benchmark's place
                                           "benchmark_scores": TEXT,
                                           "benchmark_scores_layout": TEXT,
                                           # the trees benchmark's search in each fold
                                           "benchmark_budget": Number(low=1, whole=True),
                                           "benchmark_tuning": Items(TUNING)},
                                 extra=Anything()),
              "provenance": Record(optional={"rows": COUNT, "benchmark_scores_sha256": SHA256},
                                   extra=Anything()),
              "models": Items(Record(required={"model": TEXT, "metric": METRIC},
                                     optional={"kind": TEXT, "t": Number(null=True),
                                               "p_value": Number(low=0, high=1, null=True),
                                               **_INTERVAL}))},
    optional={"cost_convention": TEXT, "rerun": TEXT, "metric_definitions": TEXT,
              # version 3: the no-skill model, calibration, the curve's entering features
              "base_rate": Record(null=True, required={"rows": COUNT},
                                  optional={"share_of_positives": SHARE, "mean": NUMBER,
                                            "no_skill_model": TEXT}),
              "no_skill_rule": TEXT,
              "no_skill_flags": Items(Record(required={"model": TEXT, "metric": METRIC,
                                                       "beats": Flag()},
                                             optional={"mean": Number(null=True),
                                                       "no_skill": Number(null=True)}),
                                      null=True),
              "calibration_definition": TEXT,
              "calibration_fit": Items(Record(required={"model": TEXT},
                                              optional={"slope": Number(null=True),
                                                        "intercept": Number(null=True),
                                                        "rows": COUNT,
                                                        "note": Text(null=True)}), null=True),
              "calibration_deciles": Items(Record(required={"model": TEXT,
                                                            "decile": Number(low=1, whole=True),
                                                            "rows": COUNT,
                                                            "mean_predicted": SHARE,
                                                            "observed_rate": SHARE}), null=True),
              "sparsity_step_rule": TEXT,
              "sparsity_steps": Items(Record(required={"max_features": Number(low=1,
                                                                              whole=True),
                                                       "joined": TEXT},
                                             optional={"repeat": COUNT, "fold": COUNT,
                                                       "on_path": Flag(),
                                                       "left": TEXTS}), null=True),
              "schema": Record(null=True, extra=Anything()),
              "schema_sha256": SHA256,
              "costs": Items(Record(required={"model": TEXT, "metric": METRIC,
                                              "cost": NUMBER},
                                    optional={"lower": Number(null=True),
                                              "upper": Number(null=True),
                                              "t": Number(null=True), "t_note": Text(null=True),
                                              "p_value": Number(low=0, high=1, null=True),
                                              "distinguishable": Flag(null=True),
                                              "interval_note": Text(null=True)})),
              "differences": Items(Record(required={"model": TEXT, "metric": METRIC,
                                                    "mean": NUMBER}, extra=Anything())),
              "sparsity_curve": Items(Record(required={"max_features": Number(low=1,
                                                                              whole=True),
                                                       "metric": METRIC},
                                             optional=_INTERVAL)),
              "folds": Items(Record(required={"model": TEXT},
                                    extra=Either((NUMBER, TEXT), null=True))),
              # issue 19: what each pair buys (null or absent: no pair curve was asked for)
              "pair_curve": Items(Record(required={"model": TEXT,
                                                   "pairs": Number(low=0, whole=True),
                                                   "metric": METRIC},
                                         optional={"pairs_fitted": Number(low=0, whole=True),
                                                   **_INTERVAL}), null=True)})

REACH = Record(
    required={"format": TEXT, "version": Number(whole=True),
              "summary": Record(required={"declined": COUNT, "with_plan": COUNT,
                                          "no_plan": COUNT},
                                optional={"share_with_plan": Number(low=0, high=1, null=True),
                                          "misfits": COUNT, "outside": COUNT,
                                          "tail_warned": COUNT, "handed_off": COUNT}),
              "cost_quantiles": Keyed(Number(low=0, null=True)),
              "main_changes": Items(Record(required={"feature": TEXT, "rows": COUNT,
                                                     "share": SHARE}, extra=Anything())),
              "binding_rules": Items(Record(required={"rule": TEXT, "rows": COUNT,
                                                      "share": SHARE}, extra=Anything())),
              "groups": Keyed(Items(Record(
                  required={"group": SCALAR, "declined": COUNT, "with_plan": COUNT},
                  optional={"share_with_plan": Number(low=0, high=1, null=True),
                            "median_cost": Number(low=0, null=True)},
                  extra=Anything())))},
    optional={"context": Record(optional={"goal": TEXT, "goal_direction": TEXT,
                                          "goal_target": NUMBER,
                                          "model_file_sha256": SHA256,
                                          "data_file_sha256": SHA256},
                                extra=Anything()),
              "min_group": COUNT})
