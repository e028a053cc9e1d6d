"""Points cards: an additive classification model as whole points per bin or level.

The usual scaling: points = offset + factor × ln(odds of the good outcome), with
factor = PDO / ln 2 (PDO: points to double the odds) and offset = base score −
factor × ln(base odds). The schema's `[target] better` says which outcome is
good: "higher" means ln(odds good) is the model's score, "lower" its negative.

Each term becomes rows of whole points:

- curves are cut where they move (`glassbox.explaining.binning`): over every bin, training
  values and the gaps between them alike, the curve moves by at most the
  tolerance (default PDO / 20 points), and a bin is worth the exact mean
  contribution of its training rows, from the training cells the model file keeps
  (bins where no training value falls are worth the middle of the curve there). A
  model file without cells gives approximate bins, from its percentiles, and the
  card says so;
- steps keep their own right-closed bins (neighbours are merged only when they
  round to the same points, so no value scores differently; a merged row is worth
  the mean of its steps weighted by their training rows where the model counts them);
- levels keep one row per level plus the unseen-level row;
- every feature has a row for a missing value: the term's missing-value entry in
  points (scaled and rounded like every row; one value, so its spread is 0), with
  its training rows (from the cells or the profile), or, where the term has no
  entry (its training data had no missing value), a refusal: scoring such a row is
  an error naming it, as scoring it with the model is.

A pairwise table becomes a points grid (`glassbox.explaining.pair_points`): a cell's
points per cell of its two axes (a knots axis read in bins, its stray counted in the
largest difference), and a row's total adds one cell's points per pair.

Every row's points are round(factor × good sign × contribution), halves away
from zero; the intercept and the offset make the separate base points, so a
row's total is the base points plus one row's points per feature. Each row also
records its training rows, its spread (how far the contributions it stands for
lie apart, in points) and the largest difference any value it covers can have
from the exact scaled contribution, so the card states how far any total can be
from the model.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

from glassbox.core.additive import AdditiveModel, LevelsTerm, StepTerm, Term
from glassbox.core.artifact import checksum, model_to_dict
from glassbox.core.cells import TermCells, term_extremes
from glassbox.core.errors import ModelFileError, OptionError
from glassbox.core.provenance import frame_fingerprint
from glassbox.core.schema import prepare
from glassbox.explaining.binning import CellArrays, bin_extremes, cut_curve, profile_cells
from glassbox.explaining.cards import (
    BASE_ROW,
    CARD_COLUMNS,
    DEFAULT_CUTOFF,
    FeaturePoints,
    Fidelity,
    PointsCard,
    Scaling,
    check_cutoff,
    dumps,
    load,
    loads,
    save,
    whole_points,
)
from glassbox.explaining.pair_points import PairPoints, pair_notes, pair_points
from glassbox.explaining.reasons import unfavourable

__all__ = ["DEFAULT_CUTOFF", "FeaturePoints", "Fidelity", "PointsCard", "Scaling",
           "card_fidelity", "card_summary", "card_table", "check_tolerance", "dumps",
           "feature_points", "load", "loads", "missing_notes", "model_checksum", "points_card",
           "save", "score_points", "tolerance_notes", "whole_points", "with_fidelity"]


# ---------------------------------------------------------------- building a card


def check_tolerance(tolerance: float) -> None:
    """Refuse a tolerance that is not a positive, finite number of points."""
    if (not isinstance(tolerance, int | float) or isinstance(tolerance, bool)
            or not 0 < tolerance < math.inf):
        raise OptionError(f"the tolerance must be a positive number of points, "
                          f"not {tolerance!r}")


def _largest(points: np.ndarray, scale: float, lowest: np.ndarray,
             highest: np.ndarray) -> tuple[float, ...]:
    """Per row: the largest gap between its points and scale × any contribution in
    [lowest, highest] (the row's whole range)."""
    ends = np.abs(np.stack([points - scale * lowest, points - scale * highest]))
    return tuple(float(v) for v in ends.max(axis=0))


def _checked_cells(term: Any, cells: TermCells) -> CellArrays:
    """The stored cells, refused when their means cannot come from this term (each
    cell's mean must lie within what the term does over the cell's span)."""
    arrays = CellArrays.of(cells)
    lowest, highest = term_extremes(term, arrays.lower, arrays.upper)
    means = arrays.sums / arrays.rows
    slack = 1e-9 * (1.0 + np.abs(means))
    wrong = bool(np.any(means < lowest - slack) or np.any(means > highest + slack))
    if cells.missing_rows:  # rows with no value: each worth the missing-value entry
        mean = cells.missing_sum / cells.missing_rows
        wrong = wrong or term.missing is None or (
            abs(mean - term.missing) > 1e-9 * (1.0 + abs(mean)))
    if wrong:
        raise ModelFileError(f"the training cells of '{term.feature}' do not match its "
                             "term (was the term changed after fitting?)")
    return arrays


def _missing_entries(model: AdditiveModel, term: Term, scale: float) -> dict[str, Any]:
    """The entries of a feature's row for a missing value: its points, contribution,
    training rows (from the cells, else the profile; None when neither counts them) and
    largest difference; none when the term has no missing-value entry (refused)."""
    if term.missing is None:
        return {}
    points = int(whole_points(scale * term.missing))
    cells = model.cells_of(term.feature)
    profile = next((p for p in model.profiles if p.feature == term.feature), None)
    rows = (cells.missing_rows if cells is not None else
            profile.missing if profile is not None and profile.rows else None)
    return {"missing_points": points, "missing_contribution": float(term.missing),
            "missing_rows": rows, "missing_largest": abs(points - scale * term.missing)}


def _level_points(model: AdditiveModel, term: LevelsTerm, scale: float) -> FeaturePoints:
    values = np.asarray([*term.values, term.unseen], dtype=float)
    points = whole_points(scale * values)
    profile = next((p for p in model.profiles if p.feature == term.feature), None)
    counts = dict(profile.level_counts) if profile is not None else {}
    return FeaturePoints(
        term.feature, term.kind, tuple(int(p) for p in points[:-1]), tuple(term.values),
        levels=term.levels, unseen_points=int(points[-1]),
        unseen_contribution=float(term.unseen),
        training_rows=tuple(int(counts.get(level, 0)) for level in term.levels)
        if counts else (),
        spreads=(0.0,) * len(term.levels), largest=_largest(points, scale, values, values),
        **_missing_entries(model, term, scale))


def _step_points(model: AdditiveModel, term: StepTerm, scale: float) -> FeaturePoints:
    values = np.asarray(term.values, dtype=float)
    points = whole_points(scale * values)
    # merge neighbours only where they score the same points: no value moves
    change = np.flatnonzero(points[1:] != points[:-1])
    starts = np.concatenate([[0], change + 1])
    ends = np.concatenate([change + 1, [len(points)]])
    cells = model.cells_of(term.feature)
    rows = sums = None
    if cells is not None:
        arrays = _checked_cells(term, cells)
        step = term.bin_of(arrays.lower)
        rows = np.bincount(step, weights=arrays.rows, minlength=len(values))
        sums = np.bincount(step, weights=arrays.sums, minlength=len(values))
    contributions, training = [], []
    for start, end in zip(starts, ends, strict=True):
        held = 0 if rows is None else int(round(rows[start:end].sum()))
        contributions.append(float(sums[start:end].sum() / held) if held > 0 and
                             sums is not None else float(np.mean(values[start:end])))
        training.append(held)
    merged = points[starts]
    lowest = np.minimum.reduceat(values, starts)
    highest = np.maximum.reduceat(values, starts)
    return FeaturePoints(
        term.feature, term.kind, tuple(int(p) for p in merged), tuple(contributions),
        edges=tuple(float(term.edges[i]) for i in change),
        training_rows=tuple(training) if rows is not None else (),
        spreads=tuple(float(v) for v in abs(scale) * (highest - lowest)),
        largest=_largest(merged, scale, lowest, highest), **_missing_entries(model, term, scale))


def feature_points(model: AdditiveModel, feature: str, scaling: Scaling,
                   tolerance: float | None = None) -> FeaturePoints:
    """One term of the model as rows of whole points; a curve cut so that it moves by at
    most `tolerance` points over each bin (default: PDO / 20)."""
    term = model.term(feature)
    scale = scaling.factor * model.schema.target.good_sign
    if isinstance(term, LevelsTerm):
        return _level_points(model, term, scale)
    if isinstance(term, StepTerm):
        return _step_points(model, term, scale)
    tolerance = scaling.default_tolerance if tolerance is None else tolerance
    check_tolerance(tolerance)
    stored = model.cells_of(feature)
    cells = (_checked_cells(term, stored) if stored is not None
             else profile_cells(term, model.profile(feature)))
    whole = model.schema.feature(feature).kind in ("integer", "flag")
    bins = cut_curve(term, cells, tolerance / scaling.factor, whole)
    points = whole_points(scale * np.asarray(bins.means))
    lowest, highest = bin_extremes(term, bins.edges, whole)
    return FeaturePoints(
        feature, term.kind, tuple(int(p) for p in points), bins.means, edges=bins.edges,
        training_rows=tuple(int(round(r)) for r in bins.rows) if cells.exact else (),
        spreads=tuple(scaling.factor * s for s in bins.spreads),
        largest=_largest(points, scale, lowest, highest), exact=cells.exact,
        resolution=None if cells.resolution is None else scaling.factor * cells.resolution,
        **_missing_entries(model, term, scale))


def model_checksum(model: AdditiveModel) -> str | None:
    """The checksum its model file records (None if the model cannot be written)."""
    try:
        return checksum(model_to_dict(model))
    except (TypeError, ValueError):
        return None


def points_card(model: AdditiveModel, scaling: Scaling | None = None,
                tolerance: float | None = None, cutoff: float = DEFAULT_CUTOFF) -> PointsCard:
    """The points card of a classification model: curves cut under `tolerance` points
    (default PDO / 20); `cutoff` is the probability whose points the card states."""
    if model.link != "logit":
        raise OptionError(f"points need a classification model (logit link); this model is "
                          f"a {model.task} model (link {model.link})")
    check_cutoff(cutoff)
    scaling = scaling or Scaling()
    tolerance = scaling.default_tolerance if tolerance is None else tolerance
    check_tolerance(tolerance)
    base = scaling.offset + scaling.factor * model.schema.target.good_sign * model.intercept
    tables = tuple(feature_points(model, name, scaling, tolerance) for name in model.features)
    scale = scaling.factor * model.schema.target.good_sign
    return PointsCard(scaling, int(whole_points(base)), tables, model.schema,
                      float(model.intercept), float(tolerance), float(cutoff),
                      model_checksum(model),
                      pairs=tuple(pair_points(pair, scale, tolerance) for pair in model.pairs))


# ---------------------------------------------------------------- reading and scoring


def card_table(card: PointsCard) -> pd.DataFrame:
    """Every row of the card: the base points first, then each feature's rows."""
    rows: list[dict[str, Any]] = [{"feature": BASE_ROW, "row": "offset and intercept",
                                   "from": None, "to": None, "points": card.base_points,
                                   "contribution": card.intercept}]
    for table in card.features:
        flag = card.schema.feature(table.feature).kind == "flag"
        rows += [{"feature": table.feature, **row} for row in table.rows(flag)]
    for pair in card.pairs:
        rows += [{"feature": pair.name, **row} for row in pair.rows()]
    table = pd.DataFrame(rows, columns=list(CARD_COLUMNS))
    # whole numbers, blank where unknown or refused (not floats with NaN)
    for column in ("points", "training_rows"):
        table[column] = pd.Series([row.get(column) for row in rows], dtype=object)
    return table


def pair_grids(card: PointsCard, names: Sequence[str]) -> list[PairPoints]:
    """The card's points grids named in `names` ("A & B", either order; each once, in the
    order asked), or a clear refusal naming the card's pairs (`glassbox points --pair`)."""
    from glassbox.explaining.pair_shapes import all_named

    return all_named(card.pairs, names)


def check_pair_output(names: Sequence[str] | None, written: str) -> None:
    """`--pair` picks grids to show or rows to write; the card file (.json, what score
    --points reads) is the whole card, so it is refused there before any work."""
    if names and written == "json":
        raise OptionError("--pair: the card file (json) always holds the whole card; "
                          "give --format csv or markdown, or an --out FILE ending in .csv "
                          "or .md, for the pair's cells alone")


def pair_rows(card: PointsCard, names: Sequence[str]) -> pd.DataFrame:
    """The card's rows (`card_table`) of the named points grids only: one per cell."""
    chosen = [grid.name for grid in pair_grids(card, names)]
    table = card_table(card)
    rows = [table[table["feature"] == name] for name in chosen]
    return pd.concat(rows, ignore_index=True)


def card_summary(card: PointsCard) -> dict[str, Any]:
    """The scaling, the cut-off, how the curves were cut and what a total can be, for
    reading beside the rows."""
    lowest, highest = card.points_range()
    target = card.schema.target
    positive = (f"{target.column} = {target.positive}" if target.positive is not None
                else f"the positive label of {target.column}")
    chance = "lower" if card.good_sign < 0 else "higher"
    threshold = card.cutoff_points
    summary: dict[str, Any] = {
        "base score": card.scaling.base_score,
        "base odds (good:bad)": f"{card.scaling.base_odds:g}:1",
        "points to double the odds": card.scaling.pdo,
        "factor (points per ln odds)": card.scaling.factor,
        "offset (points at even odds)": card.scaling.offset,
        "direction": f"more points, {chance} chance of {positive}",
        "cut-off": (f"probability {card.cutoff:g} of {positive}: {threshold:.2f} "
                    f"points; favourable at {math.ceil(threshold)} points or more"),
        "base points": card.base_points,
        "possible totals": f"{lowest} to {highest}",
    }
    summary.update(missing_notes(card))
    summary.update(pair_notes(card.pairs))
    if card.tolerance is not None:
        summary["tolerance (points within a bin)"] = card.tolerance
        summary.update(tolerance_notes(card))
    largest = card.largest_difference()
    if largest is not None:
        summary["largest possible difference (points)"] = largest
    return summary


def missing_notes(card: PointsCard) -> dict[str, str]:
    """Which features give a missing value its own points (with their training rows),
    and which refuse one."""
    own = [f"{t.feature} ({'rows unknown' if t.missing_rows is None else t.missing_rows})"
           for t in card.features if t.missing_points is not None]
    refused = [t.feature for t in card.features if t.missing_points is None]
    notes = {"missing: own points (training rows)": ", ".join(own) or "none"}
    if refused:
        notes["missing: refused (none in training)"] = ", ".join(refused)
    return notes


def tolerance_notes(card: PointsCard) -> dict[str, str]:
    """What the card could not do exactly: bins spreading more than the tolerance,
    approximate bin values (model files without training cells)."""
    tolerance = card.tolerance if card.tolerance is not None else math.inf
    curves = [t for t in card.features if t.term == "curve"]
    over = {t.feature: t.over(tolerance) for t in curves if t.over(tolerance)}
    notes = {"bins spreading more than the tolerance": (
        f"{sum(over.values())}: " + ", ".join(f"{name} {count}" for name, count in over.items())
        if over else "0")}
    coarse = [t.feature for t in curves if t.resolution is not None and
              t.resolution > tolerance]
    if coarse:
        notes["tolerance finer than the stored cells"] = (
            f"{', '.join(coarse)} (cells spread up to "
            f"{max(t.resolution or 0.0 for t in curves):.3g} points)")
    approximate = [t.feature for t in curves if not t.exact]
    notes["curve bin values"] = (
        "exact means over the training rows" if not approximate else
        f"APPROXIMATE for {', '.join(approximate)}: the model file keeps no training "
        "cells, so bins come from its percentiles; refit for exact means")
    return notes


def score_points(card: PointsCard, frame: pd.DataFrame,
                 source: str | None = None) -> pd.DataFrame:
    """Per row: the id (when the schema names one), total points, base points, each
    feature's points (`points:FEATURE`) and each pair's (`points:FIRST & SECOND`); a
    missing value scores its feature's missing-value row, or is refused (naming the rows)
    where the card has none."""
    prepared = prepare(frame, card.schema, require_target=False, source=source,
                       features=card.feature_names)
    where = source or frame.attrs.get("source") or "the data"
    parts = {table.feature: table.points_of(prepared.features[table.feature].to_numpy(),
                                            where)
             for table in card.features}
    for pair in card.pairs:
        parts[pair.name] = pair.points_of(
            *(prepared.features[f].to_numpy() for f in pair.features), where)
    total = np.full(len(frame), card.base_points, dtype=np.int64)
    for points in parts.values():
        total = total + points
    out = pd.DataFrame(index=frame.index)
    if prepared.ids is not None:
        out[card.schema.id_column] = prepared.ids
    out["total_points"] = total
    out["base_points"] = card.base_points
    for name, points in parts.items():
        out[f"points:{name}"] = points
    return out.reset_index(drop=True)


def with_fidelity(card: PointsCard, model: AdditiveModel, frame: pd.DataFrame,
                  source: str | None = None) -> PointsCard:
    """The card carrying its fidelity on `frame` (written into the card file)."""
    return replace(card, fidelity=card_fidelity(card, model, frame, source))


def card_fidelity(card: PointsCard, model: AdditiveModel, frame: pd.DataFrame,
                  source: str | None = None) -> Fidelity:
    """Largest and mean absolute difference (points) and Spearman rank correlation
    between the card's totals and the exact scaled score on the rows of `frame`, and
    the decisions at the card's cut-off: the model's from its probability (scored
    through the model's own tables), the card's from its total against the cut-off's
    points, and the card's had it no bins (each exact contribution rounded)."""
    known = model_checksum(model)
    if card.model_checksum and known and card.model_checksum != known:
        raise OptionError("the card was made from a different model (the model checksums "
                          "differ); compare a card with its own model")
    if set(card.feature_names) != set(model.features):
        raise OptionError("the card and the model use different features")
    if {p.name for p in card.pairs} != {p.name for p in model.pairs}:
        raise OptionError("the card and the model have different pairwise tables")
    totals = score_points(card, frame, source)["total_points"].to_numpy(dtype=float)
    encoded = model.encode(frame, source)
    contributions = model.contributions_encoded(encoded)
    absent = encoded.isna().any(axis=1).to_numpy()  # rows scored by a missing-value row
    score = model.intercept + contributions.sum(axis=1).to_numpy()
    exact = card.scaling.score(card.good_sign * score)
    scale = card.scaling.factor * card.good_sign
    rounded = card.base_points + sum(whole_points(scale * contributions[name].to_numpy())
                                     for name in contributions.columns)
    gaps = np.abs(totals - exact)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # constant totals: no rank correlation (nan)
        rank = float(spearmanr(totals, exact).statistic) if len(totals) > 1 else math.nan
    model_good = ~unfavourable(model, score, card.cutoff)
    card_good = totals >= card.cutoff_points
    rounded_good = rounded >= card.cutoff_points
    return Fidelity(int(len(totals)), float(gaps.max()), float(gaps.mean()), rank,
                    card.cutoff, int(np.sum(model_good == card_good)),
                    int(np.sum(card_good & ~model_good)), int(np.sum(model_good & ~card_good)),
                    int(np.sum(model_good == rounded_good)), frame_fingerprint(frame),
                    int(absent.sum()), int(np.sum((model_good == card_good)[absent])))

