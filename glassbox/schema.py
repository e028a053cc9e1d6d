"""Schemas: what each column is, which is the target, what may be used for fitting.

A schema is declared in TOML (see the README), inferred from data as a starting
point, and used to turn raw frames into typed, validated ones. Every problem
with the data is reported naming the file, the column and the first rows.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from datetime import date
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.columns import OTHER_LEVEL, ages_in_days, set_aside
from glassbox.errors import DataError, SchemaError
from glassbox.files import read_toml
from glassbox.guesses import (
    FALSE_WORDS,
    TRUE_WORDS,
    Note,
    better_needed,
    column_notes,
    guess_better,
    protected_hint,
)

KINDS = ("number", "integer", "flag", "category")
NUMERIC_KINDS = ("number", "integer", "flag")
TASKS = ("classification", "regression")
BETTER = ("higher", "lower")  # which way the score is better for the person
UNSTATED = "?"  # `better = "?"` in a schema file: not stated yet; fitting refuses it
MONOTONE = ("increasing", "decreasing")
SHOWN_ROWS = 5
# What a missing value means for a feature: "learn" a contribution for it from the data
# (the default: in credit data a blank is information), take the schema's "fill" value,
# or "refuse" the row with an error.
MISSING_RULES = ("learn", "fill", "refuse")
# The only text a CSV file may use for a missing value; anything else is data (a sentinel
# such as -1 or 999 is declared per feature with `missing_codes`).
BLANKS = ("", "NA", "NaN", "nan", "null", "NULL")
MISSING_LEVEL = "(missing)"  # how a missing category is shown; never a level of its own


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
            raise SchemaError(f"{where}unknown top-level key(s): {', '.join(sorted(unknown))}")
        target_data = data.get("target")
        if not isinstance(target_data, Mapping) or "column" not in target_data:
            raise SchemaError(f"{where}a [target] table with a 'column' is required")
        bad = set(target_data) - {"column", "task", "positive", "better"}
        if bad:
            raise SchemaError(f"{where}unknown key(s) in [target]: {', '.join(sorted(bad))}")
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
        raise SchemaError(f"{where}unknown key(s) in [feature.{name}]: "
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
    return Schema.from_dict(data, source=str(path))


# ---------------------------------------------------------------- reading data


def read_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV or Parquet file, with one clear error for anything unreadable."""
    path = Path(path)
    if not path.is_file():
        raise DataError(f"data file {path} does not exist")
    suffix = path.suffix.lower()
    try:
        if suffix in (".parquet", ".pq"):
            frame = pd.read_parquet(path)
        else:
            frame = pd.read_csv(path, skipinitialspace=True, keep_default_na=False,
                                na_values=list(BLANKS))
    except pd.errors.EmptyDataError:
        raise DataError(f"data file {path} is empty") from None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError, OSError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise DataError(f"data file {path} could not be read: {first}") from None
    except ImportError:
        raise DataError(f"reading Parquet file {path} needs pyarrow "
                        "(pip install pyarrow)") from None
    if frame.shape[0] == 0:
        raise DataError(f"data file {path} has a header but no data rows")
    frame.attrs["source"] = str(path)
    return frame


def _source(frame: pd.DataFrame, source: str | None) -> str:
    return source or frame.attrs.get("source") or "the data"


def rows_text(mask: np.ndarray) -> str:
    """'data rows 3, 8, 12 (and 40 more)', numbering data rows from 1."""
    rows = np.flatnonzero(mask) + 1
    shown = ", ".join(str(r) for r in rows[:SHOWN_ROWS])
    more = f" (and {len(rows) - SHOWN_ROWS} more)" if len(rows) > SHOWN_ROWS else ""
    word = "data row" if len(rows) == 1 else "data rows"
    return f"{word} {shown}{more}"


def label_text(value: Any) -> str:
    """A label as text, so 1, 1.0 and '1' compare equal."""
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if isinstance(value, int | float | np.integer | np.floating):
        number = float(value)
        if math.isfinite(number) and number == int(number):
            return str(int(number))
        return repr(number)
    return str(value).strip()


# ---------------------------------------------------------------- encoding


@dataclass(frozen=True)
class Prepared:
    """A frame after validation: typed feature columns, the target, the ids."""

    features: pd.DataFrame
    target: np.ndarray | None
    ids: pd.Series | None
    protected: pd.DataFrame


def prepare(
    frame: pd.DataFrame,
    schema: Schema,
    *,
    require_target: bool = True,
    source: str | None = None,
    features: Iterable[str] | None = None,
) -> Prepared:
    """Validate a raw frame against the schema and encode it.

    Numbers, integers and flags become float columns (flags 0/1), categories
    become text. `features` limits which feature columns are needed (a model
    needs only its own); protected columns are kept aside when present.
    """
    where = _source(frame, source)
    wanted = [f for f in schema.used_features if features is None or f.name in set(features)]
    needed = [f.name for f in wanted]
    if require_target:
        needed.append(schema.target.column)
    missing = [name for name in needed if name not in frame.columns]
    if missing:
        raise DataError(f"{where}: missing column(s) {', '.join(repr(m) for m in missing)} "
                        f"(it has: {', '.join(map(str, frame.columns[:12]))}"
                        f"{', ...' if len(frame.columns) > 12 else ''})")
    if frame.shape[0] == 0:
        raise DataError(f"{where}: no rows")
    encoded = {spec.name: encode_column(frame[spec.name], spec, where) for spec in wanted}
    feature_frame = pd.DataFrame(encoded, index=frame.index)
    target = encode_target(frame[schema.target.column], schema, where) if require_target else None
    ids = frame[schema.id_column] if schema.id_column and schema.id_column in frame else None
    protected_names = [f.name for f in schema.protected_features if f.name in frame.columns]
    protected = frame[protected_names].copy()
    return Prepared(feature_frame, target, ids, protected)


def encode_column(column: pd.Series, spec: FeatureSpec, where: str) -> pd.Series:
    """One raw column to its typed form, or a DataError naming the rows at fault.

    Missing values (blanks and the feature's `missing_codes`) follow the feature's rule:
    "fill" puts the fill value in, "refuse" is an error, "learn" keeps them missing (NaN
    in a numeric column, None in a category) for the model's own missing-value entry.
    """
    if spec.days_before is not None:  # dates, read as their age in days
        column = ages_in_days(column, spec.days_before, spec.date_layout, spec.name, where)
        spec = replace(spec, days_before=None, date_layout=None)
    values = column
    missing = missing_mask(values, spec)
    if missing.any():
        if spec.missing == "refuse":
            raise DataError(f"{where}: column '{spec.name}' has {int(missing.sum())} missing "
                            f"value(s) in {rows_text(missing)} and the schema refuses them "
                            f"(missing = \"refuse\"); set missing = \"learn\" or a fill "
                            "value, or clean the data")
        if spec.missing == "fill":
            values = values.astype(object).where(~missing, spec.fill)
            missing = np.zeros(len(values), dtype=bool)
        else:  # typed with a harmless stand-in, then marked missing (row numbers stay true)
            stand_in = "0" if spec.numeric else MISSING_LEVEL
            plain = replace(spec, missing="fill", fill=stand_in, missing_codes=())
            typed = encode_column(values.astype(object).where(~missing, stand_in), plain,
                                  where)
            return typed.where(~missing, np.nan if spec.numeric else None)
    if spec.kind == "category":
        labels = pool_levels(_labels(values), spec.pooled)
        return pd.Series(labels.to_numpy(dtype=object), index=column.index, dtype=object)
    if spec.kind == "flag":
        return _encode_flag(values, spec, where)
    numbers = pd.to_numeric(values, errors="coerce")
    bad = numbers.isna().to_numpy()
    if bad.any():
        first = values[bad].iloc[0]
        raise DataError(f"{where}: column '{spec.name}' should hold numbers but has text in "
                        f"{rows_text(bad)} (first: {str(first)!r})")
    numbers = numbers.astype(float)
    if not np.isfinite(numbers.to_numpy()).all():
        infinite = ~np.isfinite(numbers.to_numpy())
        raise DataError(f"{where}: column '{spec.name}' has infinite values in "
                        f"{rows_text(infinite)}")
    if spec.kind == "integer":
        fractional = (numbers != np.round(numbers)).to_numpy()
        if fractional.any():
            raise DataError(f"{where}: column '{spec.name}' is declared integer but has "
                            f"fractions in {rows_text(fractional)} "
                            f"(first: {numbers[fractional].iloc[0]!r})")
    return numbers


def pool_levels(labels: pd.Series, pooled: Iterable[str]) -> pd.Series:
    """Category labels with the pooled levels replaced by OTHER_LEVEL (fitting and scoring
    alike)."""
    pooled = list(pooled)
    return labels.where(~labels.isin(pooled), OTHER_LEVEL) if pooled else labels


def _missing_mask(values: pd.Series) -> np.ndarray:
    mask = values.isna().to_numpy()
    if values.dtype == object or pd.api.types.is_string_dtype(values.dtype):
        text = values.astype(str).str.strip()
        mask = mask | (text == "").to_numpy()
    return mask


def missing_mask(values: pd.Series, spec: FeatureSpec) -> np.ndarray:
    """Where a raw column is missing: blank, NaN or None, or one of the feature's codes."""
    mask = _missing_mask(values)
    if spec.missing_codes:
        if spec.kind in ("number", "integer"):
            numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
            mask = mask | np.isin(numbers, np.asarray(spec.missing_codes, dtype=float))
        else:
            codes = {label_text(code) for code in spec.missing_codes}
            mask = mask | _labels(values).isin(codes).to_numpy()
    return mask


def _labels(values: pd.Series) -> pd.Series:
    """`label_text` of every value, computed once per distinct value."""
    distinct = pd.unique(values.to_numpy(dtype=object))
    lookup = {value: label_text(value) for value in distinct}
    return pd.Series(values.to_numpy(dtype=object), index=values.index).map(lookup)


def _encode_flag(values: pd.Series, spec: FeatureSpec, where: str) -> pd.Series:
    words = _labels(values).str.lower()
    truthy = words.isin(TRUE_WORDS).to_numpy()
    falsy = words.isin(FALSE_WORDS).to_numpy()
    bad = ~(truthy | falsy)
    if bad.any():
        first = values[bad].iloc[0]
        raise DataError(f"{where}: column '{spec.name}' is a flag (yes/no, true/false, 1/0) "
                        f"but has other values in {rows_text(bad)} (first: {str(first)!r})")
    return pd.Series(truthy.astype(float), index=values.index)


def encode_target(column: pd.Series, schema: Schema, where: str) -> np.ndarray:
    """The target as floats: 0/1 for classification, the values for regression."""
    name = schema.target.column
    missing = _missing_mask(column)
    if missing.any():
        raise DataError(f"{where}: target column '{name}' has {int(missing.sum())} missing "
                        f"value(s) in {rows_text(missing)}; fill them, or drop those rows "
                        "(--drop-missing-target on fit and compare)")
    if schema.target.task == "regression":
        spec = FeatureSpec(name, "number")
        return encode_column(column, spec, where).to_numpy(dtype=float)
    labels = _labels(column)
    distinct = sorted(set(labels))
    if len(distinct) > 2:
        shown = ", ".join(repr(v) for v in distinct[:6])
        raise DataError(f"{where}: target column '{name}' has {len(distinct)} labels ({shown}"
                        f"{', ...' if len(distinct) > 6 else ''}); a classification target "
                        "needs exactly two")
    positive = schema.target.positive
    if positive is None:
        positive = choose_positive(distinct, labels)
    positive_text = label_text(positive)
    if positive_text not in distinct:
        raise DataError(f"{where}: the positive label {positive!r} of target '{name}' never "
                        f"occurs (labels found: {', '.join(repr(v) for v in distinct)})")
    return (labels == positive_text).to_numpy(dtype=float)


def choose_positive(distinct: list[str], labels: pd.Series) -> str:
    """The positive label when none is declared: 1, yes or true, else the rarer label."""
    for word in ("1", "yes", "true", "y", "t"):
        for label in distinct:
            if label.lower() == word:
                return label
    counts = labels.value_counts()
    return str(sorted(distinct, key=lambda v: (counts.get(v, 0), v))[0])


# ---------------------------------------------------------------- inference


def _looks_protected(name: str) -> bool:
    return protected_hint(name) is not None


def infer_kind(column: pd.Series) -> str:
    """The most likely kind of a raw column."""
    present = column[~_missing_mask(column)]
    if present.empty:
        return "number"
    if pd.api.types.is_bool_dtype(present.dtype):
        return "flag"
    present = pd.Series(pd.unique(present.to_numpy(dtype=object)), dtype=object)  # distinct
    words = set(present.map(label_text).str.lower())
    if len(words) == 2 and words <= (TRUE_WORDS | FALSE_WORDS) and words & TRUE_WORDS:
        return "flag"
    numbers = pd.to_numeric(present, errors="coerce")
    if numbers.notna().all():
        if (numbers == np.round(numbers)).all():
            return "integer"
        return "number"
    return "category"


def infer_schema(
    frame: pd.DataFrame,
    target: str,
    *,
    positive: Any = None,
    id_column: str | None = None,
    task: str | None = None,
    source: str | None = None,
    dates_as_age: str | None = None,
) -> Schema:
    """A starter schema for a frame: kinds guessed, protected columns guessed by name,
    `better` from the words of the target and its positive label (None, written "?",
    when they do not say), and notes on missing counts and columns to check. Row numbers
    and ids are set aside; date columns are ignored, or with `dates_as_age` (YYYY-MM-DD)
    read as their age in days on that date."""
    where = _source(frame, source)
    if dates_as_age is not None:
        check_reference_date(dates_as_age, "the reference date for ages in days")
    if target not in frame.columns:
        raise DataError(f"{where}: no target column '{target}' (it has: "
                        f"{', '.join(map(str, frame.columns[:12]))})")
    column = frame[target]
    labels = column[~_missing_mask(column)].map(label_text)
    distinct = sorted(set(labels))
    if task is None:
        numeric = pd.to_numeric(column[~_missing_mask(column)], errors="coerce").notna().all()
        task = "regression" if (numeric and len(distinct) > 2) else "classification"
    if task == "classification":
        if len(distinct) != 2:
            shown = ", ".join(repr(v) for v in distinct[:6])
            raise DataError(f"{where}: target column '{target}' has {len(distinct)} labels "
                            f"({shown}{', ...' if len(distinct) > 6 else ''}); a classification "
                            "target needs exactly two")
        positive = label_text(positive) if positive is not None else choose_positive(
            distinct, labels)
        if positive not in distinct:
            raise DataError(f"{where}: positive label {positive!r} not found in target "
                            f"'{target}' (labels: {', '.join(repr(v) for v in distinct)})")
        positive = _natural(positive, column)
    else:
        positive = None
    if id_column is None:
        id_column = _guess_id(frame, exclude=target)
    elif id_column not in frame.columns:
        raise DataError(f"{where}: no id column '{id_column}'")
    features = []
    for name in frame.columns:
        if name in (target, id_column):
            continue
        kind = infer_kind(frame[name])
        features.append(FeatureSpec(str(name), kind, protected=_looks_protected(str(name))))
    features, id_column, set_aside_notes = set_aside(frame, features, id_column, dates_as_age)
    if not features:
        raise DataError(f"{where}: no columns besides the target and id")
    better = guess_better(target, None if positive is None else label_text(positive), task)
    gaps = {spec.name: int(missing_mask(frame[spec.name], spec).sum()) for spec in features}
    notes = (Note(target, "better", better.why), *(Note(column, "column", text)
                                                   for column, text in set_aside_notes),
             *column_notes(features, gaps, len(frame)))
    return Schema(TargetSpec(target, task, positive, better.better), tuple(features), id_column,
                  source=str(where), notes=notes)


def _natural(label: str, column: pd.Series) -> Any:
    """Write a numeric positive label as a number in TOML."""
    if pd.api.types.is_numeric_dtype(column.dtype):
        number = float(label)
        return int(number) if number == int(number) else number
    return label


def _guess_id(frame: pd.DataFrame, exclude: str) -> str | None:
    """A text column with a distinct value on every row whose name says id."""
    for name in frame.columns:
        if name == exclude:
            continue
        lowered = str(name).lower()
        if lowered == "id" or lowered.endswith("_id") or lowered.endswith("id") and "_" in lowered:
            column = frame[name]
            if column.notna().all() and column.is_unique:
                return str(name)
    return None
