"""A model's (or a points card's) tables and the raw-column rules, spelled out for other
scoring engines.

The SQL and PMML exports both start here, so they say the same thing: for each feature,
how a raw value becomes the number or label a table reads (`ColumnRule`: the schema's
missing codes, flag words, dates read as their age in days) and what the table then adds
(`ExportTable`). Every value in an `ExportTable` is computed by the tool's own scoring
(`glassbox.core.encoding.encode_column`, `Term.evaluate`, `FeaturePoints.points_of`), never
re-derived, so an engine that copies the table scores exactly as `glassbox score` does.

Three shapes remain:

- "curve": value at knot i; between knots k[i] <= x < k[i+1] the value is
  ``values[i] + (x - k[i]) * slopes[i]`` (numpy.interp's own arithmetic); at or below the
  first knot the first value, at or above the last knot the last (clamped);
- "steps": value i for edges[i-1] < x <= edges[i] (the first bin runs down to minus
  infinity, the last up to plus infinity);
- "levels": one value per label; a label not listed takes `unseen`, or is refused (None).

Categories and flags are both "levels": a category's labels are the term's levels and the
pooled rare levels (scored as the pooled level's value); a flag's labels are its words
(`TRUE_WORDS`, `FALSE_WORDS`, compared in lower case), each with the value the table gives
at 1 or 0, and any other word is refused, as the tool refuses it.

A missing input (no value, a blank text, or one of the feature's missing codes) takes
`missing`: the term's learned entry, or the value at the schema's fill value, or None
where the tool refuses the row (no entry learned, or `missing = "refuse"`).

A pairwise table (`PairExportTable`) is spelled out the same way, in two steps: how the
first feature's raw value weighs the entries of its axis (`AxisTable`: one entry, or two
between knots, or none for a level never seen in training), and for each entry of the
first axis, the pair along the second feature as an ordinary `ExportTable` (its row of the
table). The pair adds the weighted sum of those rows: an engine writes it as a CASE on the
first feature with, inside, a CASE on the second. A pair's table in long form (one line
per cell) for auditors is `glassbox.explaining.pair_shapes.long_form`.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, Term
from glassbox.core.columns import ages_in_days
from glassbox.core.encoding import encode_column, label_text
from glassbox.core.errors import DataError, GlassboxError, UnseenLevelWarning
from glassbox.core.guesses import FALSE_WORDS, TRUE_WORDS
from glassbox.core.pairs import Axis, PairTerm
from glassbox.core.schema import FeatureSpec, Schema

if TYPE_CHECKING:
    from glassbox.explaining.cards import FeaturePoints, PointsCard

SHAPES = ("curve", "steps", "levels")


@dataclass(frozen=True)
class ColumnRule:
    """How the raw column `name` becomes what its table reads.

    `kind` is the schema's: number, integer, flag or category. `missing_codes` are the
    values that mean "missing" besides no value and blank text: numbers for a number or
    integer, labels (as `label_text` writes them: trimmed text, whole numbers without
    ".0") for a flag or a category. `days_before` (an ISO date, YYYY-MM-DD) marks a column
    of dates, in `date_layout` (strftime codes; None is ISO, %Y-%m-%d), read as the whole
    days from the date to `days_before` (positive for dates before it). `lowercase` says the
    labels are compared in lower case (flags).
    """

    name: str
    kind: str
    missing_codes: tuple[Any, ...] = ()
    days_before: str | None = None
    date_layout: str | None = None
    lowercase: bool = False

    @property
    def numeric(self) -> bool:
        """Whether the table reads a number (number, integer, or dates as days)."""
        return self.kind in ("number", "integer")


@dataclass(frozen=True)
class ExportTable:
    """What one feature adds to the score (a model's log-odds or prediction scale, or a
    card's whole points), for every input. See the module docstring for the shapes."""

    feature: str
    rule: ColumnRule
    shape: str
    points: tuple[float, ...] = ()  # curve: knots; steps: inner edges; levels: none
    values: tuple[float, ...] = ()  # curve: per knot; steps: per bin; levels: per label
    slopes: tuple[float, ...] = ()  # curve: per segment between knots
    levels: tuple[str, ...] = ()  # levels: the labels, in the order of `values`
    unseen: float | None = None  # levels: any other label (None: refused)
    missing: float | None = None  # a missing input (None: refused)

    def __post_init__(self) -> None:
        if self.shape not in SHAPES:
            raise ValueError(f"unknown table shape {self.shape!r}")

    def read(self, raw: pd.Series) -> np.ndarray:
        """The table applied to a raw column by its rule, refused rows NaN: what an engine
        copying the table computes, step by step (the tests hold it to `glassbox score`)."""
        if self.shape == "levels":
            labels, absent = _read_labels(self.rule, raw)
            lookup = dict(zip(self.levels, self.values, strict=True))
            unseen = np.nan if self.unseen is None else self.unseen
            out = np.array([lookup.get(v, unseen) if v is not None else 0.0 for v in labels],
                           dtype=float)
        else:
            numbers, absent = _read_numbers(self.rule, raw)
            if self.shape == "steps":
                out = np.asarray(self.values)[np.searchsorted(np.asarray(self.points),
                                                              numbers, side="left")]
            else:
                out = np.interp(numbers, self.points, self.values)
        return np.where(absent, np.nan if self.missing is None else self.missing, out)


def _read_labels(rule: ColumnRule, raw: pd.Series) -> tuple[list[str | None], np.ndarray]:
    """Each raw value as the label a levels table compares (None: no value), and whether
    it reads as missing (no value, blank, or a missing code)."""
    labels = [None if _blank(v) else label_text(v) for v in raw]
    if rule.lowercase:
        labels = [None if v is None else v.lower() for v in labels]
    codes = {str(code).lower() if rule.lowercase else str(code) for code in rule.missing_codes}
    return labels, np.array([v is None or v in codes for v in labels], dtype=bool)


def _read_numbers(rule: ColumnRule, raw: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Each raw value as the number a table reads (a date as days), and whether it reads
    as missing."""
    if rule.days_before is not None:
        raw = ages_in_days(raw, rule.days_before, rule.date_layout, rule.name, "the export")
    numbers = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    absent = np.isnan(numbers) | np.isin(numbers, np.asarray(rule.missing_codes, dtype=float))
    return numbers, absent


def _blank(value: Any) -> bool:
    return value is None or (not isinstance(value, str) and pd.isna(value)) or (
        isinstance(value, str) and not value.strip())


def model_tables(model: AdditiveModel) -> tuple[ExportTable, ...]:
    """One table per term of the model, in the model's order."""
    return tuple(_term_table(model.schema.feature(term.feature), term) for term in model.terms)


def card_tables(card: PointsCard) -> tuple[ExportTable, ...]:
    """One table of whole points per feature of the card, in the card's order (steps or
    levels: a card has no curves); its pairs' points grids are `card_pair_tables`."""
    return tuple(_points_table(card.schema.feature(table.feature), table)
                 for table in card.features)


def card_pair_tables(card: PointsCard) -> tuple[PairExportTable, ...]:
    """Each points grid of the card's pairs spelled out as a model's pair is (its axes are
    edges or levels: one entry per value, so every cell adds whole points), in its order."""
    mains = {t.feature: t for t in card_tables(card)}
    return tuple(_pair_table(card.schema, mains, PairTerm(
        grid.first, grid.second, tuple(tuple(float(p) for p in row) for row in grid.points)))
        for grid in card.pairs)


def refuse_card_pairs(card: PointsCard, what: str) -> None:
    """A clear refusal for an export that does not write a card's points grids."""
    if getattr(card, "pairs", ()):
        from glassbox.core.errors import OptionError

        raise OptionError(f"{what} does not handle a points card's pairs' grids "
                          f"({', '.join(p.name for p in card.pairs)}); export the card as "
                          "SQL, or the model as PMML")


def column_rule(spec: FeatureSpec) -> ColumnRule:
    """The raw-column rule of a schema feature."""
    if spec.kind in ("number", "integer"):
        codes: tuple[Any, ...] = tuple(float(code) for code in spec.missing_codes)
    else:
        codes = tuple(label_text(code) for code in spec.missing_codes)
    return ColumnRule(spec.name, spec.kind, codes, spec.days_before, spec.date_layout,
                      lowercase=spec.kind == "flag")


def _typed(spec: FeatureSpec, raw: list[Any]) -> pd.Series:
    """Raw values typed exactly as scoring types them (dates aside: the values given for a
    date column are already days)."""
    plain = replace(spec, days_before=None, date_layout=None)
    return encode_column(pd.Series(raw, dtype=object), plain, "the export")


def _missing_value(spec: FeatureSpec, learned: float | None,
                   evaluate: Callable[[pd.Series], np.ndarray]) -> float | None:
    """What a missing input adds: the learned entry, the value at the fill, or refused."""
    if spec.missing == "refuse":
        return None
    if spec.missing == "fill":
        return float(evaluate(_typed(spec, [None]))[0])
    return None if learned is None else float(learned)


def _labels(spec: FeatureSpec, known: tuple[str, ...]) -> list[str]:
    """The labels a levels table lists: a flag's words, or a category's known levels and
    pooled levels, leaving out labels that are missing codes (those read as missing)."""
    if spec.kind == "flag":
        return sorted(TRUE_WORDS) + sorted(FALSE_WORDS)
    codes = {label_text(code) for code in spec.missing_codes}
    return [label for label in dict.fromkeys([*known, *spec.pooled]) if label not in codes]


def _as_levels(spec: FeatureSpec, known: tuple[str, ...], unseen: float | None,
               evaluate: Callable[[pd.Series], np.ndarray]) -> dict[str, Any]:
    labels = _labels(spec, known)
    if spec.kind == "flag":  # flag codes are words too: a code reads as missing
        codes = {label_text(code).lower() for code in spec.missing_codes}
        labels = [label for label in labels if label not in codes]
        unseen = None
    plain = replace(spec, missing="learn", fill=None, missing_codes=())
    with warnings.catch_warnings():  # the pooled level may itself be unseen: that value
        warnings.simplefilter("ignore", UnseenLevelWarning)
        values = evaluate(_typed(plain, labels)) if labels else np.array([])
    return {"shape": "levels", "levels": tuple(labels), "values": _floats(values),
            "unseen": unseen}


def _floats(values: Any) -> tuple[float, ...]:
    return tuple(float(v) for v in np.asarray(values, dtype=float))


def _term_table(spec: FeatureSpec, term: Term) -> ExportTable:
    def evaluate(typed: pd.Series) -> np.ndarray:
        return term.evaluate(typed.to_numpy())

    rule = column_rule(spec)
    missing = _missing_value(spec, term.missing, evaluate)
    if isinstance(term, LevelsTerm) or spec.kind == "flag":
        unseen = float(term.unseen) if isinstance(term, LevelsTerm) else None
        known = term.levels if isinstance(term, LevelsTerm) else ()
        return ExportTable(term.feature, rule, missing=missing,
                           **_as_levels(spec, known, unseen, evaluate))
    if isinstance(term, StepTerm):
        return ExportTable(term.feature, rule, "steps", points=term.edges,
                           values=term.values, missing=missing)
    if isinstance(term, CurveTerm):
        knots, values = np.asarray(term.knots), np.asarray(term.values)
        slopes = np.diff(values) / np.diff(knots)  # numpy.interp's slope, segment by segment
        return ExportTable(term.feature, rule, "curve", points=term.knots, values=term.values,
                           slopes=_floats(slopes), missing=missing)
    raise GlassboxError(f"unknown term type {type(term).__name__}")


def _points_table(spec: FeatureSpec, table: FeaturePoints) -> ExportTable:
    def evaluate(typed: pd.Series) -> np.ndarray:
        return table.points_of(typed.to_numpy(), "the export").astype(float)

    rule = column_rule(spec)
    missing = _missing_value(spec, table.missing_points, evaluate)
    if table.by_level or spec.kind == "flag":
        unseen = float(table.unseen_points) if table.by_level else None
        return ExportTable(table.feature, rule, missing=missing,
                           **_as_levels(spec, table.levels, unseen, evaluate))
    return ExportTable(table.feature, rule, "steps", points=table.edges,
                       values=_floats(table.points), missing=missing)


# ---------------------------------------------------------------- pairwise tables


@dataclass(frozen=True)
class AxisTable:
    """How one feature's raw value weighs the entries of a pair's axis (`axis`).

    `shape` "steps" (the axis's edges: one entry, value i for edges[i-1] < x <= edges[i])
    or "curve" (its knots: at or below the first knot entry 0, at or above the last the
    last entry, between knots k[i] <= x < k[i+1] entry i with weight 1 - s and entry i+1
    with weight s = (x - k[i]) / (k[i+1] - k[i]), the tool's own arithmetic) read the
    number; "levels" reads the label (a category, or a flag's words), each label in
    `levels` with its weights per entry in `label_weights`. `unseen` weighs a label not
    listed (all zero: a level never seen in training adds nothing; None: refused, as a
    flag's unknown word is), `missing` a missing input (None: refused)."""

    feature: str
    rule: ColumnRule
    axis: Axis
    shape: str
    levels: tuple[str, ...] = ()
    label_weights: tuple[tuple[float, ...], ...] = ()
    unseen: tuple[float, ...] | None = None
    missing: tuple[float, ...] | None = None

    @property
    def points(self) -> tuple[float, ...]:
        return tuple(float(p) for p in self.axis.points) if self.shape != "levels" else ()

    def weights(self, raw: pd.Series) -> np.ndarray:
        """Each row's weight on each entry [rows, entries], refused rows NaN."""
        out = np.zeros((len(raw), self.axis.size))
        refused = np.full(self.axis.size, np.nan)
        if self.shape == "levels":
            labels, absent = _read_labels(self.rule, raw)
            lookup = dict(zip(self.levels, self.label_weights, strict=True))
            for row, label in enumerate(labels):
                if not absent[row]:
                    found = lookup.get(label, self.unseen)
                    out[row] = refused if found is None else found
        else:
            numbers, absent = _read_numbers(self.rule, raw)
            finite = ~absent & np.isfinite(numbers)
            index, weight = self.axis.entries(numbers[finite])
            rows = np.flatnonzero(finite)
            for s in (0, 1):
                np.add.at(out, (rows, index[:, s]), weight[:, s])
            out[~absent & ~finite] = refused
        out[absent] = refused if self.missing is None else self.missing
        return out


@dataclass(frozen=True)
class PairExportTable:
    """A pairwise table spelled out: the first feature weighs the entries of its axis
    (`first`); `rows[j]` is the pair along the second feature at entry j of the first
    (an `ExportTable` of the second feature); the pair adds sum_j weight_j * rows[j]."""

    name: str
    first: AxisTable
    rows: tuple[ExportTable, ...]

    @property
    def second(self) -> str:
        return self.rows[0].feature

    def read(self, raw_first: pd.Series, raw_second: pd.Series) -> np.ndarray:
        """The pair applied to two raw columns, refused rows NaN."""
        weights = self.first.weights(raw_first)
        out = np.zeros(len(weights))
        for j, row in enumerate(self.rows):
            mine = weights[:, j]
            if np.any(mine != 0):
                out += np.where(mine == 0, 0.0, mine * row.read(raw_second))
        return np.where(np.isnan(weights).any(axis=1), np.nan, out)


def pair_tables(model: AdditiveModel) -> tuple[PairExportTable, ...]:
    """One spelled-out table per pair of the model, in the model's order."""
    mains = {t.feature: t for t in model_tables(model)}
    return tuple(_pair_table(model.schema, mains, pair) for pair in model.pairs)


def _entry_weights(axis: Axis, typed: pd.Series) -> np.ndarray:
    """The weights per entry of typed values [values, entries] (the tool's own reading)."""
    index, weight = axis.entries(typed.to_numpy(), "the export")
    out = np.zeros((len(typed), axis.size))
    for s in (0, 1):
        np.add.at(out, (np.arange(len(typed)), index[:, s]), weight[:, s])
    return out


def _axis_table(spec: FeatureSpec, axis: Axis, main: ExportTable) -> AxisTable:
    rule = column_rule(spec)
    missing = None
    if spec.missing != "refuse":
        try:
            missing = tuple(_entry_weights(axis, _typed(spec, [None]))[0].tolist())
        except DataError:  # the axis has no entry for a missing value: refused
            missing = None
    if main.shape != "levels":
        return AxisTable(spec.name, rule, axis, "steps" if axis.kind == "edges" else "curve",
                         missing=missing)
    plain = replace(spec, missing="learn", fill=None, missing_codes=())
    labels = list(main.levels)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelWarning)
        weights = _entry_weights(axis, _typed(plain, labels)) if labels else np.zeros((0, 0))
    unseen = None if spec.kind == "flag" else (0.0,) * axis.size
    return AxisTable(spec.name, rule, axis, "levels", tuple(labels),
                     tuple(tuple(row) for row in weights.tolist()), unseen, missing)


def _pair_table(schema: Schema, mains: dict[str, ExportTable],
                pair: PairTerm) -> PairExportTable:
    first = _axis_table(schema.feature(pair.first.feature), pair.first,
                        mains[pair.first.feature])
    second = _axis_table(schema.feature(pair.second.feature), pair.second,
                         mains[pair.second.feature])
    table = pair.table()
    return PairExportTable(pair.name, first, tuple(_along(second, row) for row in table))


def _along(axis: AxisTable, row: np.ndarray) -> ExportTable:
    """The pair along the second feature at one entry of the first: an ExportTable."""
    missing = None if axis.missing is None else float(np.dot(axis.missing, row))
    if axis.shape == "levels":
        values = np.asarray(axis.label_weights, dtype=float).reshape(-1, len(row)) @ row
        unseen = None if axis.unseen is None else float(np.dot(axis.unseen, row))
        return ExportTable(axis.feature, axis.rule, "levels", levels=axis.levels,
                           values=_floats(values), unseen=unseen, missing=missing)
    own = row[:axis.axis.values_size]
    if axis.shape == "steps":
        return ExportTable(axis.feature, axis.rule, "steps", points=axis.points,
                           values=_floats(own), missing=missing)
    slopes = np.diff(own) / np.diff(np.asarray(axis.points))
    return ExportTable(axis.feature, axis.rule, "curve", points=axis.points,
                       values=_floats(own), slopes=_floats(slopes), missing=missing)
