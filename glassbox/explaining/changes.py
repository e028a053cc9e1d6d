"""Two versions of a model compared, for a validator's change review.

What changed in the structure (terms added and removed, the intercept, the family and its
settings, the schema feature by feature and its target), how far each common term's
contribution moved and where, and how the importance of each term moved. With data
(`glassbox.explaining.changes_data`), how many rows the new version decides the other way and how
their scores shift.

The largest change of a numeric term is exact, not read off a grid: both tables are
piecewise-linear (curves) or piecewise-constant (steps, right-closed) in the value, so
their difference is linear between the union of all knots and edges; its largest
absolute value over the training range is reached at a knot, at an edge or just above it
(the next double up, where a step has already jumped), or at an end of the range.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, LevelsTerm, Term
from glassbox.core.columns import OTHER_LEVEL
from glassbox.core.encoding import pool_levels
from glassbox.core.errors import ModelFileError
from glassbox.explaining.shapes import term_importance

if TYPE_CHECKING:
    from glassbox.explaining.changes_data import DataChanges
    from glassbox.explaining.changes_pairs import PairChange

FORMAT = "glassbox-changes"
VERSION = 1
UNSEEN = "(a level neither version saw)"  # where a levels term's unseen-level value differs
# settings of a schema's feature compared between versions, in the order shown
FEATURE_SETTINGS = ("kind", "monotone", "missing", "fill", "missing_codes", "pool_below",
                    "pooled", "protected", "ignore", "days_before", "date_layout", "reason")
TURNS_ROUND = {
    "better": "which way the score is better for the person is turned round: every "
              "decision, reason and plan reads the other way",
    "positive": "the positive label changed: the score now predicts another outcome",
    "column": "the model now predicts another column",
    "monotone": "the declared direction of this feature changed: its shape is read "
                "(and held) the other way",
}


@dataclass(frozen=True)
class Change:
    """One setting that differs between the versions: `subject` (the model, the target, a
    feature), the setting, its old and new value (None: not set), and, for changes that
    turn the model's reading round, why that matters (`prominent`)."""

    subject: str
    setting: str
    old: Any
    new: Any
    prominent: str = ""


@dataclass(frozen=True)
class TermChange:
    """How far one common term's contribution moved (new - old, on the model's scale).

    `largest` is the signed change where its absolute value is largest over the training
    range of either version (numbers: at the value `at`; categories: at the level `at`,
    or UNSEEN for the value of a level neither version saw), found among `points`
    candidate points. The missing-value entry is compared on its own (`old_missing`,
    `new_missing`; None when that version refuses a missing value). `low` and `high` are
    the range searched (numbers only); `just_above` says `at` is the next double above an
    edge (where a step has jumped). None throughout when the tables cannot be compared
    value by value (the feature's kind changed); `note` says why."""

    feature: str
    old_kind: str
    new_kind: str
    largest: float | None
    at: float | str | None
    low: float | None
    high: float | None
    points: int
    old_missing: float | None
    new_missing: float | None
    note: str = ""
    just_above: bool = False

    @property
    def missing_change(self) -> float | None:
        if self.old_missing is None or self.new_missing is None:
            return None
        return self.new_missing - self.old_missing

    @property
    def missing_words(self) -> str:
        """"gained" or "lost" when only one version has a missing-value entry."""
        if (self.old_missing is None) == (self.new_missing is None):
            return ""
        return "gained" if self.old_missing is None else "lost"


@dataclass(frozen=True)
class Importance:
    """A term's importance (mean |contribution|) and rank (1 = most important) in each
    version; None in a version without the term."""

    feature: str
    old: float | None
    new: float | None
    old_rank: int | None
    new_rank: int | None

    @property
    def change(self) -> float | None:
        return None if self.old is None or self.new is None else self.new - self.old


@dataclass(frozen=True)
class Changes:
    """The change review of two versions of one model."""

    old_name: str
    new_name: str
    task: str
    scale: str
    added: tuple[str, ...]
    removed: tuple[str, ...]
    old_intercept: float
    new_intercept: float
    settings: tuple[Change, ...]
    schema: tuple[Change, ...]
    terms: tuple[TermChange, ...]
    importance: tuple[Importance, ...]
    old_importance_source: str
    new_importance_source: str
    data: DataChanges | None = None
    pairs: tuple[PairChange, ...] = ()  # pairwise tables: common, added, removed

    @property
    def prominent(self) -> tuple[Change, ...]:
        """The changes that turn the model's reading round (shown first)."""
        return tuple(change for change in self.schema if change.prominent)

    def to_dict(self) -> dict[str, Any]:
        """The review as JSON-ready data: format and version first, plain numbers."""
        document: dict[str, Any] = {
            "format": FORMAT, "version": VERSION,
            "old": self.old_name, "new": self.new_name, "task": self.task,
            "scale": self.scale, "added": list(self.added), "removed": list(self.removed),
            "intercept": {"old": self.old_intercept, "new": self.new_intercept,
                          "change": self.new_intercept - self.old_intercept},
            "prominent": [_record(c) for c in self.prominent],
            "settings": [_record(c) for c in self.settings],
            "schema": [_record(c) for c in self.schema],
            "terms": [{**_record(t), "missing_change": t.missing_change,
                       "missing_entry": t.missing_words} for t in self.terms],
            "importance": {"old_source": self.old_importance_source,
                           "new_source": self.new_importance_source,
                           "terms": [{**_record(i), "change": i.change}
                                     for i in self.importance]},
            "data": None if self.data is None else self.data.to_dict(),
        }
        if self.pairs:  # only models with pairs: other reviews keep their exact content
            document["pairs"] = [_record(p) for p in self.pairs]
        return document


def _record(item: Any) -> dict[str, Any]:
    return {f.name: _plain(getattr(item, f.name)) for f in fields(item)}


def _plain(value: Any) -> Any:
    """A value as JSON holds it: tuples as lists, numpy numbers as Python ones."""
    if isinstance(value, tuple | list):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


# ---------------------------------------------------------------- the review


def model_changes(old: AdditiveModel, new: AdditiveModel, frame: pd.DataFrame | None = None,
                  *, cutoff: float | None = None, source: str | None = None,
                  names: tuple[str, str] = ("old", "new")) -> Changes:
    """Compare two versions of a model; with `frame` (raw rows carrying both versions'
    columns), also how both versions score those rows. `cutoff` is the decision's
    cut-off (a probability for classification, default 0.5; a predicted value for
    regression, required with data). Versions of different tasks are refused: their
    scores are on different scales, so no term, importance or score compares."""
    from glassbox.explaining.changes_pairs import pair_changes

    if old.task != new.task:
        raise ModelFileError(
            f"{names[0]} is a {old.task} model and {names[1]} a {new.task} model: their "
            "scores are on different scales (log-odds against the target's units), so no "
            "term or score can be compared; compare two versions of the same task")
    data = None
    if frame is not None:
        from glassbox.explaining.changes_data import data_changes

        data = data_changes(old, new, frame, cutoff=cutoff, source=source, names=names)
    common = [t.feature for t in old.terms if t.feature in set(new.features)]
    importance_old, source_old = _importances(old, data and data.old_importance)
    importance_new, source_new = _importances(new, data and data.new_importance)
    return Changes(
        old_name=names[0], new_name=names[1], task=old.task,
        scale="log-odds" if old.link == "logit" else "the predicted value's units",
        added=tuple(f for f in new.features if f not in set(old.features)),
        removed=tuple(f for f in old.features if f not in set(new.features)),
        old_intercept=float(old.intercept), new_intercept=float(new.intercept),
        settings=setting_changes(old.metadata, new.metadata),
        schema=schema_changes(old, new),
        terms=tuple(term_change(old, new, feature) for feature in common),
        importance=_ranked(old, new, importance_old, importance_new),
        old_importance_source=source_old, new_importance_source=source_new, data=data,
        pairs=pair_changes(old, new))


# ---------------------------------------------------------------- structure


def setting_changes(old: Mapping[str, Any], new: Mapping[str, Any]) -> tuple[Change, ...]:
    """The family, each fitting setting, the training rows, the training data's
    fingerprint and the versions of glassbox where the two model files differ."""
    found = []
    for key, words in (("family", "family"), ("rows", "training rows"),
                       ("data_sha256", "training data (fingerprint)"),
                       ("glassbox_version", "glassbox version"), ("fit_date", "fit date")):
        if _plain(old.get(key)) != _plain(new.get(key)):
            found.append(Change("model", words, _plain(old.get(key)), _plain(new.get(key))))
    old_settings = old.get("parameters") or {}
    new_settings = new.get("parameters") or {}
    for key in [*old_settings, *(k for k in new_settings if k not in old_settings)]:
        before, after = _plain(old_settings.get(key)), _plain(new_settings.get(key))
        if before != after:
            found.append(Change("fitting", str(key), before, after))
    return tuple(found)


def schema_changes(old: AdditiveModel, new: AdditiveModel) -> tuple[Change, ...]:
    """The schema's changes: the id column, the target, then each feature of either
    version (declared in one only, or a setting that differs)."""
    found = []
    if old.schema.id_column != new.schema.id_column:
        found.append(Change("schema", "id column", old.schema.id_column,
                            new.schema.id_column))
    for setting in ("column", "task", "positive", "better"):
        before = _plain(getattr(old.schema.target, setting))
        after = _plain(getattr(new.schema.target, setting))
        if before != after:
            found.append(Change("target", setting, before, after, TURNS_ROUND.get(setting, "")))
    old_specs = {f.name: f for f in old.schema.features}
    new_specs = {f.name: f for f in new.schema.features}
    for name in [*old_specs, *(n for n in new_specs if n not in old_specs)]:
        before, after = old_specs.get(name), new_specs.get(name)
        if before is None or after is None:
            found.append(Change(f"feature {name}", "declared",
                                None if before is None else before.kind,
                                None if after is None else after.kind))
            continue
        for setting in FEATURE_SETTINGS:
            was, now = _plain(getattr(before, setting)), _plain(getattr(after, setting))
            if was != now:
                found.append(Change(f"feature {name}", setting, was, now,
                                    TURNS_ROUND.get(setting, "")))
    return tuple(found)


# ---------------------------------------------------------------- terms


def term_change(old: AdditiveModel, new: AdditiveModel, feature: str) -> TermChange:
    """The largest change of one common term's contribution, exactly (module docstring)."""
    before, after = old.term(feature), new.term(feature)
    shared = {"feature": feature, "old_kind": before.kind, "new_kind": after.kind,
              "old_missing": before.missing, "new_missing": after.missing}
    if isinstance(before, LevelsTerm) != isinstance(after, LevelsTerm):
        return TermChange(largest=None, at=None, low=None, high=None, points=0,
                          note="one version reads the feature as a category and the other "
                               "as a number: the tables cannot be compared value by value",
                          **shared)
    if isinstance(before, LevelsTerm) and isinstance(after, LevelsTerm):
        levels, old_values, new_values = level_values(old, new, before, after)
        change = np.asarray(new_values) - np.asarray(old_values)
        place = int(np.argmax(np.abs(change)))
        return TermChange(largest=float(change[place]), at=levels[place], low=None,
                          high=None, points=len(levels), **shared)
    low, high, note = training_range(old, new, feature)
    points, above = candidate_points(before, after, low, high)
    change = after.evaluate(points) - before.evaluate(points)
    place = int(np.argmax(np.abs(change)))
    return TermChange(largest=float(change[place]), at=float(points[place]), low=low,
                      high=high, points=len(points), note=note,
                      just_above=bool(above[place]), **shared)


def candidate_points(first: Term, second: Term, low: float, high: float
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Where the difference of two numeric tables can be largest on [low, high]: the
    ends, every knot and edge within, and the next double above each edge (steps are
    right-closed: at an edge a step still has its lower value, just above it the next).
    Sorted, once each; with a mark on the points that are only "just above an edge"."""
    marks, above = [np.array([low, high])], []
    for term in (first, second):
        if isinstance(term, LevelsTerm):
            raise TypeError("candidate_points takes numeric terms")
        if term.kind == "curve":
            marks.append(np.asarray(term.knots, dtype=float))
        else:
            edges = np.asarray(term.edges, dtype=float)
            marks.append(edges)
            above.append(np.nextafter(edges, np.inf))
    marks_all = np.concatenate(marks)
    every = np.unique(np.concatenate([marks_all, *above]))
    every = every[(every >= low) & (every <= high)]
    return every, ~np.isin(every, marks_all)


def training_range(old: AdditiveModel, new: AdditiveModel, feature: str
                   ) -> tuple[float, float, str]:
    """From the lowest to the highest training value of either version's profile; where
    neither keeps a profile, the span of both tables' knots and edges (and a note)."""
    ends = [(p.minimum, p.maximum) for model in (old, new) for p in model.profiles
            if p.feature == feature and p.percentiles]
    if ends:
        return min(e[0] for e in ends), max(e[1] for e in ends), ""
    marks = np.concatenate([np.asarray(getattr(t, "knots", getattr(t, "edges", ())), float)
                            for t in (old.term(feature), new.term(feature))])
    if len(marks) == 0:
        return 0.0, 0.0, "no training profile and no edges: both tables are constant"
    return (float(marks.min()), float(marks.max()),
            "no training profile: searched over the span of both tables' knots and edges")


def level_values(old: AdditiveModel, new: AdditiveModel, before: LevelsTerm,
                 after: LevelsTerm) -> tuple[list[str], list[float], list[float]]:
    """Every level either version knows (its term's levels and its schema's pooled
    levels), each valued as that version scores it (a pooled level as its pool, a level
    it never saw with its unseen-level value), then UNSEEN: a level neither saw. The
    pool's own label is no level of the data: its pooled levels stand for it."""
    pooled = [old.schema.feature(before.feature).pooled,
              new.schema.feature(after.feature).pooled]
    levels = [level for level in dict.fromkeys(
        [*before.levels, *after.levels, *pooled[0], *pooled[1]]) if level != OTHER_LEVEL]
    valued = []
    for term, pool in zip((before, after), pooled, strict=True):
        scored = pool_levels(pd.Series(levels, dtype=object), pool).to_numpy(dtype=object)
        place = pd.Index(term.levels).get_indexer(scored)
        values = np.asarray(term.values, dtype=float)[np.where(place < 0, 0, place)]
        valued.append([*np.where(place < 0, term.unseen, values).tolist(), term.unseen])
    return [*levels, UNSEEN], valued[0], valued[1]


# ---------------------------------------------------------------- importance


def _importances(model: AdditiveModel, over_data: Mapping[str, float] | None
                 ) -> tuple[dict[str, float], str]:
    """Each term's mean |contribution| and where it comes from: the data given, the
    model file's development baseline, the value recorded at fit, or (older files) an
    estimate from the training percentiles."""
    if over_data:  # none when no row is scored by both versions
        return dict(over_data), "the data given (rows both versions score)"
    if model.baseline is not None and {b.feature for b in model.baseline.features} >= set(
            model.features):
        return ({b.feature: float(b.mean_absolute_contribution)
                 for b in model.baseline.features if b.feature in set(model.features)},
                "training rows (the model file's development baseline)")
    recorded = model.metadata.get("importance") or {}
    exact = all(feature in recorded for feature in model.features)
    return ({t.feature: term_importance(model, t) for t in model.terms},
            "training rows (recorded at fit)" if exact else
            "estimated from the training percentiles (the model file records no exact value)")


def _ranks(importance: Mapping[str, float]) -> dict[str, int]:
    order = sorted(importance, key=lambda name: (-importance[name], name))
    return {name: rank for rank, name in enumerate(order, start=1)}


def _ranked(old: AdditiveModel, new: AdditiveModel, before: Mapping[str, float],
            after: Mapping[str, float]) -> tuple[Importance, ...]:
    """Every term of either version, in the new version's order of importance, then the
    removed terms in the old one's."""
    old_ranks, new_ranks = _ranks(before), _ranks(after)
    order = sorted(new_ranks, key=new_ranks.__getitem__) + sorted(
        (name for name in old_ranks if name not in new_ranks), key=old_ranks.__getitem__)
    return tuple(Importance(name, before.get(name), after.get(name), old_ranks.get(name),
                            new_ranks.get(name)) for name in order)
