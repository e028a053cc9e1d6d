"""Two versions of a model scoring the same rows: decisions that flip at a cut-off, the
distribution of the score shift, and the rows a version cannot score.

A row a version cannot score (a missing value its term has no entry for, or one its
schema refuses) is counted and named, never given a made-up score; flips, shifts and
importance are over the rows both versions score, and the counts say how many that is.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, fields, replace
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, LevelsTerm
from glassbox.core.encoding import prepare, rows_text
from glassbox.core.errors import DataError, UnseenLevelWarning, value_text
from glassbox.core.wording import noun
from glassbox.explaining.reasons import checked_cutoff, unfavourable

PERCENTILES = (1, 5, 25, 50, 75, 95, 99)


@dataclass(frozen=True)
class Unscored:
    """Rows one version cannot score because of one feature: how many, which (data rows
    numbered from 1), and why."""

    version: str
    feature: str
    rows: int
    which: str
    reason: str


@dataclass(frozen=True)
class DataChanges:
    """Both versions on the same rows.

    `to_unfavourable` counts rows the old version put on the favourable side of the
    cut-off and the new one on the unfavourable side, `to_favourable` the other way;
    shares are of the rows both versions score. The score shift is new - old on the
    link scale (log-odds for classification)."""

    source: str
    rows: int
    scored: int
    cutoff: float
    old_unfavourable: int
    new_unfavourable: int
    to_unfavourable: int
    to_favourable: int
    shift_mean: float | None
    shift_min: float | None
    shift_percentiles: tuple[tuple[int, float], ...]
    shift_max: float | None
    unscored_old: int
    unscored_new: int
    unscored: tuple[Unscored, ...]
    old_importance: dict[str, float]
    new_importance: dict[str, float]

    @property
    def flipped(self) -> int:
        return self.to_unfavourable + self.to_favourable

    def share(self, count: int) -> float | None:
        """`count` as a share of the rows both versions score (None when there are none)."""
        return count / self.scored if self.scored else None

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {}
        for item in fields(self):
            if item.name in ("old_importance", "new_importance"):
                continue  # in the review's importance table
            value = getattr(self, item.name)
            if item.name == "unscored":
                value = [{f.name: getattr(u, f.name) for f in fields(u)} for u in value]
            elif item.name == "shift_percentiles":
                value = {str(p): v for p, v in value}
            data[item.name] = value
        data.update(flipped=self.flipped, flipped_share=self.share(self.flipped),
                    to_unfavourable_share=self.share(self.to_unfavourable),
                    to_favourable_share=self.share(self.to_favourable))
        return data


@dataclass(frozen=True)
class Scored:
    """One version's scores of the rows (NaN where it cannot score), each term's
    contribution, and the reasons for the rows it cannot score."""

    score: np.ndarray
    contributions: dict[str, np.ndarray]
    unscored: tuple[Unscored, ...]


def data_changes(old: AdditiveModel, new: AdditiveModel, frame: pd.DataFrame, *,
                 cutoff: float | None = None, source: str | None = None,
                 names: tuple[str, str] = ("old", "new")) -> DataChanges:
    """Score `frame` with both versions and compare their decisions and scores."""
    where = source or frame.attrs.get("source") or "the data"
    _check_columns(old, new, frame, where, names)
    cut = checked_cutoff(old, cutoff)
    before = score_rows(old, frame, where, names[0])
    after = score_rows(new, frame, where, names[1])
    both = ~np.isnan(before.score) & ~np.isnan(after.score)
    old_score, new_score = before.score[both], after.score[both]
    old_side = unfavourable(old, old_score, cut)
    new_side = unfavourable(new, new_score, cut)
    shift = new_score - old_score
    some = len(shift) > 0
    return DataChanges(
        source=where, rows=len(frame), scored=int(both.sum()), cutoff=cut,
        old_unfavourable=int(old_side.sum()), new_unfavourable=int(new_side.sum()),
        to_unfavourable=int((~old_side & new_side).sum()),
        to_favourable=int((old_side & ~new_side).sum()),
        shift_mean=float(np.mean(shift)) if some else None,
        shift_min=float(np.min(shift)) if some else None,
        shift_percentiles=tuple((p, float(v)) for p, v in zip(
            PERCENTILES, np.percentile(shift, PERCENTILES), strict=True)) if some else (),
        shift_max=float(np.max(shift)) if some else None,
        unscored_old=int(np.isnan(before.score).sum()),
        unscored_new=int(np.isnan(after.score).sum()),
        unscored=before.unscored + after.unscored,
        old_importance=_mean_absolute(before, both),
        new_importance=_mean_absolute(after, both))


def _check_columns(old: AdditiveModel, new: AdditiveModel, frame: pd.DataFrame, where: str,
                   names: tuple[str, str]) -> None:
    """The data must carry the columns of both versions; name each missing one and the
    version that needs it."""
    lacking = []
    for model, name in ((old, names[0]), (new, names[1])):
        absent = [f for f in model.features if f not in frame.columns]
        if absent:
            lacking.append(f"{', '.join(map(value_text, absent))} (needed by {name})")
    if lacking:
        raise DataError(f"{where}: missing {noun(len(lacking), 'column')} {'; '.join(lacking)}; "
                        f"the data must "
                        "carry the columns of both versions")
    if frame.shape[0] == 0:
        raise DataError(f"{where}: no rows")


def score_rows(model: AdditiveModel, frame: pd.DataFrame, where: str,
               version: str) -> Scored:
    """Each row's score as `glassbox score` gives it (the intercept, then each term in the
    model's order), or NaN for a row the model cannot score, with the reason."""
    refused = {f.name for f in model.schema.used_features if f.missing == "refuse"}
    lenient = replace(model.schema, features=tuple(
        replace(f, missing="learn") if f.name in refused else f for f in model.schema.features))
    encoded = prepare(frame, lenient, require_target=False, source=where,
                      features=model.features).features
    score = np.full(len(frame), float(model.intercept))
    blocked = np.zeros(len(frame), dtype=bool)
    contributions, unscored = {}, []
    for term in model.terms:
        column = encoded[term.feature].to_numpy()
        absent = pd.isna(column).astype(bool)
        if absent.any() and (term.missing is None or term.feature in refused):
            reason = ("its schema refuses a missing value" if term.feature in refused
                      else "its term has no entry for a missing value")
            unscored.append(Unscored(version, term.feature, int(absent.sum()),
                                     rows_text(absent), reason))
            blocked |= absent
            column = column.copy()
            column[absent] = (term.levels[0] if isinstance(term, LevelsTerm)
                              else 0.0)  # a stand-in: these rows get no score below
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UnseenLevelWarning)
            values = term.evaluate(column)
        for found in caught:  # say which version met the level (both may)
            warnings.warn(f"{version}: {found.message}", found.category, stacklevel=2)
        contributions[term.feature] = values
        score += values
    for pair in model.pairs:  # each pairwise table, after the terms
        columns = []
        for axis in (pair.first, pair.second):
            column = encoded[axis.feature].to_numpy()
            absent = pd.isna(column).astype(bool)
            if absent.any() and not axis.missing:
                if not blocked[absent].all():
                    unscored.append(Unscored(
                        version, pair.name, int(absent.sum()), rows_text(absent),
                        f"its pairwise table has no entry for a missing {axis.feature}"))
                blocked |= absent
                column = column.copy()
                column[absent] = axis.points[0] if axis.kind == "levels" else 0.0
            columns.append(column)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UnseenLevelWarning)  # said by the term above
            values = pair.evaluate(*columns)
        contributions[pair.name] = values
        score += values
    score[blocked] = np.nan
    return Scored(score, contributions, tuple(unscored))


def _mean_absolute(scored: Scored, rows: np.ndarray) -> dict[str, float]:
    """Each term's mean |contribution| over `rows`; empty when there are none."""
    if not rows.any():
        return {}
    return {feature: float(np.mean(np.abs(values[rows])))
            for feature, values in scored.contributions.items()}
