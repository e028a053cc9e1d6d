"""Schemas: what each column is, which is the target, what may be used for fitting.

A schema is declared in TOML (see the README), inferred from data as a starting
point (`glassbox.core.inference`), and used to turn raw frames into typed, validated
ones (`glassbox.core.encoding`, whose names this module re-exports).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from datetime import date
from pathlib import Path
from typing import Any

from glassbox.core import structure
from glassbox.core.encoding import (  # noqa: F401  (re-exported: the schema module's readers)
    BLANKS,
    MISSING_LEVEL,
    Prepared,
    choose_positive,
    encode_column,
    encode_target,
    label_text,
    missing_mask,
    pool_levels,
    prepare,
    read_table,
    rows_text,
)
from glassbox.core.errors import SchemaError
from glassbox.core.files import read_toml
from glassbox.core.guesses import Note, better_needed
from glassbox.core.wording import noun

KINDS = ("number", "integer", "flag", "category")
NUMERIC_KINDS = ("number", "integer", "flag")
TASKS = ("classification", "regression")
BETTER = ("higher", "lower")  # which way the score is better for the person
UNSTATED = "?"  # `better = "?"` in a schema file: not stated yet; fitting refuses it
MONOTONE = ("increasing", "decreasing")
# What a missing value means for a feature: "learn" a contribution for it from the data
# (the default: in credit data a blank is information), take the schema's "fill" value,
# or "refuse" the row with an error.
MISSING_RULES = ("learn", "fill", "refuse")


@dataclass(frozen=True)
class FeatureSpec:
    """One input column: its kind and how the model may use it."""

    name: str
    kind: str
    monotone: str | None = None
    protected: bool = False
    ignore: bool = False
    fill: Any = None
    description: str = ""
    reason: str = ""
    missing: str = "learn"
    missing_codes: tuple[Any, ...] = ()
    # a category's rare levels: those under this share (below 1) or count (1 or more) of
    # the training rows with a value are pooled into OTHER_LEVEL when fitting; 0 keeps all
    pool_below: float | None = None
    pooled: tuple[str, ...] = ()  # the levels fitting pooled; scored as OTHER_LEVEL
    # a column of dates read as its age in days on this date (ISO), in this layout
    days_before: str | None = None
    date_layout: str | None = None

    @property
    def used(self) -> bool:
        """Whether the column is an input to the model (not protected, not ignored)."""
        return not (self.protected or self.ignore)

    @property
    def numeric(self) -> bool:
        return self.kind in NUMERIC_KINDS


@dataclass(frozen=True)
class TargetSpec:
    """The column to predict, for classification the positive label, and which way the
    score is better for the person the decision is about ("higher" or "lower": a lender
    predicting default wants it lower; None while not stated, which fitting refuses)."""

    column: str
    task: str
    positive: Any = None
    better: str | None = None

    @property
    def good_sign(self) -> int:
        """+1 when a higher score is better for the person, -1 when lower is."""
        self.require_better()
        return 1 if self.better == "higher" else -1

    def require_better(self, where: str = "schema: ") -> None:
        """Refuse a target whose `better` is not stated, saying what to write."""
        if self.better is None:
            positive = None if self.positive is None else label_text(self.positive)
            raise SchemaError(f"{where}[target] better is not stated; "
                              f"{better_needed(self.column, positive)}")


@dataclass(frozen=True)
class Schema:
    """The target, the features and an optional id column of a table."""

    target: TargetSpec
    features: tuple[FeatureSpec, ...]
    id_column: str | None = None
    source: str = field(default="", compare=False)
    # what inference saw (columns set aside, missing counts, guesses), written as comments
    # by `to_toml`
    notes: tuple[Note, ...] = field(default=(), compare=False, repr=False)

    @property
    def used_features(self) -> tuple[FeatureSpec, ...]:
        return tuple(f for f in self.features if f.used)

    @property
    def protected_features(self) -> tuple[FeatureSpec, ...]:
        return tuple(f for f in self.features if f.protected)

    def feature(self, name: str) -> FeatureSpec:
        for spec in self.features:
            if spec.name == name:
                return spec
        raise SchemaError(f"{self._where()}no feature named '{name}'")

    def restricted_to(self, names: Iterable[str]) -> Schema:
        """The same schema with only the named features used (others ignored)."""
        keep = set(names)
        features = tuple(
            f if (f.name in keep or not f.used) else replace(f, ignore=True)
            for f in self.features
        )
        return replace(self, features=features)

    def require_better(self) -> None:
        """Refuse to fit while `[target] better` is not stated, saying what to write."""
        self.target.require_better(self._where())

    def _where(self) -> str:
        return f"schema {self.source}: " if self.source else "schema: "

    def to_dict(self) -> dict[str, Any]:
        """Plain data for JSON (model files) and TOML writing."""
        out: dict[str, Any] = {}
        if self.id_column:
            out["id"] = self.id_column
        target = {"column": self.target.column, "task": self.target.task}
        if self.target.positive is not None:
            target["positive"] = self.target.positive
        target["better"] = self.target.better or UNSTATED
        out["target"] = target
        out["feature"] = {}
        for spec in self.features:
            entry: dict[str, Any] = {"kind": spec.kind}
            for key in ("monotone", "fill"):
                if getattr(spec, key) is not None:
                    entry[key] = getattr(spec, key)
            for key in ("protected", "ignore"):
                if getattr(spec, key):
                    entry[key] = True
            if spec.missing not in ("learn", "fill"):
                entry["missing"] = spec.missing
            if spec.missing_codes:
                entry["missing_codes"] = list(spec.missing_codes)
            if spec.pool_below is not None:
                entry["pool_below"] = spec.pool_below
            if spec.pooled:
                entry["pooled"] = list(spec.pooled)
            for key in ("days_before", "date_layout"):
                if getattr(spec, key) is not None:
                    entry[key] = getattr(spec, key)
            for key in ("description", "reason"):
                if getattr(spec, key):
                    entry[key] = getattr(spec, key)
            out["feature"][spec.name] = entry
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], source: str = "",
                  unstated_better: str | None = None) -> Schema:
        """Build and check a schema from parsed TOML or JSON. A target without `better`
        (or with better = "?") gets `unstated_better`: None in schema files, so fitting
        refuses it; "higher" in model files and points cards, whose writers left it out
        when it was "higher"."""
        where = f"schema {source}: " if source else "schema: "
        if not isinstance(data, Mapping):
            raise SchemaError(f"{where}expected a table of settings")
        unknown = set(data) - {"id", "target", "feature"}
        if unknown:
            raise SchemaError(f"{where}unknown top-level {noun(len(unknown), 'key')}: "
                              f"{', '.join(sorted(unknown))}")
        target_data = data.get("target")
        if not isinstance(target_data, Mapping) or "column" not in target_data:
            raise SchemaError(f"{where}a [target] table with a 'column' is required")
        bad = set(target_data) - {"column", "task", "positive", "better"}
        if bad:
            raise SchemaError(f"{where}unknown {noun(len(bad), 'key')} in [target]: "
                              f"{', '.join(sorted(bad))}")
        task = target_data.get("task", "classification")
        if task not in TASKS:
            raise SchemaError(f"{where}target task must be one of {', '.join(TASKS)}, not '{task}'")
        better = target_data.get("better", UNSTATED)
        better = unstated_better if better == UNSTATED else better
        if better not in (*BETTER, None):
            raise SchemaError(f"{where}[target] better must be one of {', '.join(BETTER)} "
                              f"(or {UNSTATED!r} until you decide), not {better!r}")
        target = TargetSpec(str(target_data["column"]), task, target_data.get("positive"),
                            better)
        features_data = data.get("feature", {})
        if not isinstance(features_data, Mapping) or not features_data:
            raise SchemaError(f"{where}no features declared (add [feature.NAME] tables)")
        features = tuple(
            _feature_from_dict(name, entry, where) for name, entry in features_data.items()
        )
        id_column = data.get("id")
        names = [f.name for f in features]
        for clash in (target.column, id_column):
            if clash is not None and clash in names:
                raise SchemaError(f"{where}'{clash}' is declared both as a feature and as "
                                  "the target or id")
        schema = cls(target, features, str(id_column) if id_column else None, source)
        if not schema.used_features:
            raise SchemaError(f"{where}every feature is protected or ignored; nothing to fit")
        return schema

    def to_toml(self) -> str:
        """The schema as a TOML file a user can read and edit."""
        lines = [
            "# glassbox schema: one [feature.NAME] table per column.",
            "# [target] better = \"lower\" | \"higher\"  (which way the score is better for the",
            "#   person: \"lower\" when the positive label is the bad outcome, e.g. a default;",
            "#   fitting refuses better = \"?\")",
            "# kind: number | integer | flag | category",
            "# monotone = \"increasing\" | \"decreasing\"  (direction of the score)",
            "# protected = true  (never a model input; kept so audits can group by it)",
            "# ignore = true     (not used at all)",
            "# A missing value (blank, NA, NaN, null, or one of missing_codes = [-1, 999]):",
            "#   missing = \"learn\"   the default: it gets its own contribution, learned from",
            "#                       the data (a blank is often information in itself)",
            "#   fill = VALUE        it takes VALUE, as if the row had said so",
            "#   missing = \"refuse\"  it is an error naming the rows",
            "",
        ]
        data = self.to_dict()
        if "id" in data:
            lines += [*_note_lines(self.notes, data["id"]), f"id = {_toml_value(data['id'])}", ""]
        lines.append("[target]")
        lines += [f"{key} = {_toml_value(value)}" for key, value in data["target"].items()]
        lines += _note_lines(self.notes, self.target.column, "better")
        for name, entry in data["feature"].items():
            notes = [note for note in self.notes if note.column == name]
            if any(note.topic == "missing" for note in notes):
                entry.setdefault("missing", self.feature(name).missing)  # shown, not implied
            lines += ["", f"[feature.{_toml_key(name)}]", *_note_lines(notes, name, "column")]
            lines += [f"{key} = {_toml_value(value)}" for key, value in entry.items()]
            lines += [line for line in _note_lines(notes, name)
                      if line not in _note_lines(notes, name, "column")]
        return "\n".join(lines) + "\n"



def _note_lines(notes: Iterable[Note], column: str, topic: str | None = None) -> list[str]:
    return [f"# {line}" for note in notes
            if note.column == column and (topic is None or note.topic == topic)
            for line in note.text.splitlines()]


def _feature_from_dict(name: str, entry: Any, where: str) -> FeatureSpec:
    if not isinstance(entry, Mapping):
        raise SchemaError(f"{where}[feature.{name}] must be a table")
    allowed = {"kind", "monotone", "protected", "ignore", "fill", "description", "reason",
               "missing", "missing_codes", "pool_below", "pooled", "days_before",
               "date_layout"}
    unknown = set(entry) - allowed
    if unknown:
        raise SchemaError(f"{where}unknown {noun(len(unknown), 'key')} in [feature.{name}]: "
                          f"{', '.join(sorted(unknown))}")
    kind = entry.get("kind")
    if kind not in KINDS:
        raise SchemaError(f"{where}[feature.{name}] kind must be one of {', '.join(KINDS)}, "
                          f"not {kind!r}")
    monotone = entry.get("monotone")
    if monotone is not None and monotone not in MONOTONE:
        raise SchemaError(f"{where}[feature.{name}] monotone must be 'increasing' or "
                          f"'decreasing', not {monotone!r}")
    if monotone is not None and kind == "category":
        raise SchemaError(f"{where}[feature.{name}] a category has no order, so it cannot "
                          "be monotone")
    for key in ("protected", "ignore"):
        if not isinstance(entry.get(key, False), bool):
            raise SchemaError(f"{where}[feature.{name}] {key} must be true or false")
    fill = entry.get("fill")
    if fill is not None and kind in ("number", "integer") and not is_number(fill):
        raise SchemaError(f"{where}[feature.{name}] fill for a {kind} must be a number, "
                          f"not {fill!r}")
    if fill is not None and kind == "integer" and float(fill) != int(float(fill)):
        raise SchemaError(f"{where}[feature.{name}] fill for an integer must be whole")
    missing = entry.get("missing", "fill" if fill is not None else "learn")
    if missing not in MISSING_RULES:
        raise SchemaError(f"{where}[feature.{name}] missing must be one of "
                          f"{', '.join(MISSING_RULES)}, not {missing!r}")
    if (missing == "fill") != (fill is not None):
        raise SchemaError(f"{where}[feature.{name}] " + (
            "missing = \"fill\" needs a fill value (fill = VALUE)" if fill is None else
            f"has a fill value but missing = {missing!r}; drop one of them"))
    return FeatureSpec(
        name=str(name), kind=kind, monotone=monotone,
        protected=entry.get("protected", False), ignore=entry.get("ignore", False),
        fill=fill, description=str(entry.get("description", "")),
        reason=str(entry.get("reason", "")), missing=missing,
        missing_codes=_missing_codes(entry.get("missing_codes", []), kind,
                                     f"{where}[feature.{name}]"),
        **_pooling(entry, kind, f"{where}[feature.{name}]"),
        **_dates(entry, kind, f"{where}[feature.{name}]"),
    )


def _dates(entry: Mapping[str, Any], kind: str, where: str) -> dict[str, Any]:
    """`days_before` (an ISO date) and `date_layout` (strftime codes, ISO by default) of a
    number or integer read from dates."""
    days_before, layout = entry.get("days_before"), entry.get("date_layout")
    if days_before is None:
        if layout is not None:
            raise SchemaError(f"{where} date_layout needs days_before = \"YYYY-MM-DD\"")
        return {}
    if kind not in ("number", "integer"):
        raise SchemaError(f"{where} days_before makes a number: give kind = \"integer\"")
    check_reference_date(days_before, f"{where} days_before")
    if layout is not None and not (isinstance(layout, str) and "%" in layout):
        raise SchemaError(f"{where} date_layout must be strftime codes such as "
                          f"\"%d/%m/%Y\", not {layout!r}")
    return {"days_before": days_before, "date_layout": layout}


def check_reference_date(text: Any, where: str) -> None:
    """A reference date must be written YYYY-MM-DD."""
    try:
        date.fromisoformat(text)
    except (TypeError, ValueError):
        raise SchemaError(f"{where} must be a date written YYYY-MM-DD, not {text!r}"
                          ) from None


def _pooling(entry: Mapping[str, Any], kind: str, where: str) -> dict[str, Any]:
    """A category's `pool_below` rule (a share below 1, a whole count from 1, or 0 to keep
    every level) and the `pooled` levels a fit wrote."""
    pool_below, pooled = entry.get("pool_below"), entry.get("pooled", [])
    if (pool_below is not None or pooled) and kind != "category":
        raise SchemaError(f"{where} pool_below and pooled apply to categories only")
    if pool_below is not None and not (
            is_number(pool_below) and (0 <= pool_below < 1 or pool_below == int(pool_below))
            and pool_below >= 0):
        raise SchemaError(f"{where} pool_below must be a share from 0 up to 1 (0.01 pools "
                          f"levels under 1% of rows) or a whole count of rows, not "
                          f"{pool_below!r}")
    if not isinstance(pooled, list) or not all(isinstance(v, str) for v in pooled):
        raise SchemaError(f"{where} pooled must be a list of levels (text)")
    if pool_below is not None and pool_below >= 1:
        pool_below = int(pool_below)
    return {"pool_below": pool_below, "pooled": tuple(pooled)}


def _missing_codes(codes: Any, kind: str, where: str) -> tuple[Any, ...]:
    """The declared sentinels of a feature: numbers for a numeric kind, numbers or text
    for a flag or a category."""
    if not isinstance(codes, list):
        raise SchemaError(f"{where} missing_codes must be a list, e.g. [-1, 999]")
    for code in codes:
        if kind in ("number", "integer") and not is_number(code):
            raise SchemaError(f"{where} missing_codes of a {kind} must be numbers, "
                              f"not {code!r}")
        if not (is_number(code) or isinstance(code, str)) or code == "":
            raise SchemaError(f"{where} missing_codes must be numbers or text, not {code!r}")
    return tuple(codes)


def is_number(value: Any) -> bool:
    """A finite int or float, not a bool (TOML and JSON numbers as users write them)."""
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def _toml_key(name: str) -> str:
    if name and all(c.isalnum() or c in "_-" for c in name):
        return name
    return json.dumps(name)


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    return json.dumps(str(value), ensure_ascii=False)


def load_schema(path: str | Path) -> Schema:
    """Read a TOML schema file."""
    data = read_toml(path, "schema file", SchemaError)
    structure.check(structure.SCHEMA, data, f"schema file {path}", SchemaError)
    return Schema.from_dict(data, source=str(path))
