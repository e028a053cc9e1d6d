"""Shape tables: what each term does, as DataFrames, and writers for them.

Every row is read straight from the model's own tables; importance and
training shares come from the training profile kept in the model (101
percentiles, level counts), so no data file is needed. Every table ends with the
row MISSING_LEVEL: what a row with no value adds, and its share of training rows;
when the training data had no missing value the row says a missing value is refused.
Training shares are of all training rows, so a table's shares add up to one.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import (
    AdditiveModel,
    CurveTerm,
    FeatureProfile,
    LevelsTerm,
    StepTerm,
    Term,
)
from glassbox.core.errors import OptionError
from glassbox.core.files import output_folder, safe_file_name, write_atomic
from glassbox.core.formats import SUFFIXES, write
from glassbox.core.schema import MISSING_LEVEL

FORMATS = ("table", "csv", "markdown", "json")
TABLE_COLUMNS = ("feature", "row", "from", "to", "contribution", "slope", "lower", "upper",
                 "training_percentile", "training_share", "note")
SUMMARY_COLUMNS = ("feature", "kind", "term", "importance", "lowest", "highest",
                   "observed", "declared", "missing", "missing_share")
REFUSED = "refused: no training row lacked a value"


def _share_between(profile: FeatureProfile, low: float, high: float) -> float:
    """Share of training rows in (low, high]: the difference of the shares at or below
    each end, each the training percentile just above it (exact where value counts are
    kept)."""
    ends = profile.percentile_of(np.nextafter([low, high], np.inf))
    return max(0.0, float(ends[1] - ends[0]) / 100.0)


def term_table(model: AdditiveModel, feature: str) -> pd.DataFrame:
    """The rows of one term: where it applies, its contribution, its band, its share."""
    term = model.term(feature)
    profile = _profile_or_none(model, feature)
    present = 1.0 - (_missing_share(profile) or 0.0)  # shares below are of all rows
    rows: list[dict[str, Any]] = []
    lower = term.lower if term.lower is not None else [None] * len(term.values)
    upper = term.upper if term.upper is not None else [None] * len(term.values)
    if isinstance(term, CurveTerm):
        # a curve is read at its knots: where each knot sits in the training data,
        # and the slope (score per unit) from this knot to the next
        for index, (knot, value) in enumerate(zip(term.knots, term.values, strict=True)):
            last = index + 1 == len(term.knots)
            slope = None if last else ((term.values[index + 1] - value)
                                       / (term.knots[index + 1] - knot))
            percentile = share = None
            if profile is not None and profile.percentiles:
                percentile = float(profile.percentile_of(knot))
                # the rows nearest this knot: between the midpoints to its neighbours
                low = -np.inf if index == 0 else (term.knots[index - 1] + knot) / 2
                high = np.inf if last else (knot + term.knots[index + 1]) / 2
                share = present * _share_between(profile, low, high)
            label = f"{knot:.6g}"
            if model.schema.feature(feature).kind == "flag":
                label = {0.0: "no (0)", 1.0: "yes (1)"}.get(float(knot), label)
            rows.append({"row": label, "from": knot, "to": knot,
                         "contribution": value, "slope": slope, "lower": lower[index],
                         "upper": upper[index], "training_percentile": percentile,
                         "training_share": share})
    elif isinstance(term, StepTerm):
        bounds = [-np.inf, *term.edges, np.inf]
        for index, value in enumerate(term.values):
            low, high = bounds[index], bounds[index + 1]
            share = None
            if profile is not None and profile.percentiles:
                share = present * _share_between(profile, low, high)
            rows.append({"row": _interval_text(low, high), "from": low, "to": high,
                         "contribution": value, "lower": lower[index], "upper": upper[index],
                         "training_share": share})
    else:
        counts = dict(profile.level_counts) if profile is not None else {}
        total = sum(counts.values()) / present if present else 0
        for index, (level, value) in enumerate(zip(term.levels, term.values, strict=True)):
            rows.append({"row": level, "from": None, "to": None, "contribution": value,
                         "lower": lower[index], "upper": upper[index],
                         "training_share": counts.get(level, 0) / total if total else None})
        rows.append({"row": "(level not seen in training)", "from": None, "to": None,
                     "contribution": term.unseen, "lower": None, "upper": None,
                     "training_share": 0.0 if total else None})
    rows.append(_missing_row(term, profile))
    table = pd.DataFrame(rows)
    table.insert(0, "feature", feature)
    return table.reindex(columns=list(TABLE_COLUMNS))


def _missing_share(profile: FeatureProfile | None) -> float | None:
    return None if profile is None else profile.missing_share


def _missing_row(term: Term, profile: FeatureProfile | None) -> dict[str, Any]:
    """The table's last row: the missing-value entry, its band and its share of rows."""
    band = term.missing_band or (None, None)
    return {"row": MISSING_LEVEL, "from": None, "to": None, "contribution": term.missing,
            "lower": band[0], "upper": band[1], "training_share": _missing_share(profile),
            "note": REFUSED if term.missing is None else None}


def value_rows(table: pd.DataFrame) -> pd.DataFrame:
    """A term table without its missing-value row: the rows for values."""
    return table[table["row"] != MISSING_LEVEL]


def missing_words(missing: float | None, share: float | None, short: bool = False) -> str:
    """A missing-value entry in a few words (a summary's `missing` and `missing_share`):
    its contribution and share of training rows, or that a missing value is refused.
    `short` (a terminal column): "+0.675 (8.0%)", "refused"."""
    if missing is None or not np.isfinite(missing):
        return "refused" if short else "refused (none in training)"
    recorded = share is not None and np.isfinite(share)
    if short:
        return f"{missing:+.3g} ({percent_text(share)})" if recorded else f"{missing:+.3g}"
    where = f"{percent_text(share)} of training rows" if recorded else "share not recorded"
    return f"{missing:+.3g} ({where})"


def percent_text(share: float) -> str:
    """A share as a percentage: one decimal, or two significant figures below 1% (so a
    handful of rows in thousands does not read as 0.0%)."""
    percent = 100.0 * share
    return f"{percent:.2g}%" if 0 < percent < 1 else f"{percent:.1f}%"


def readable_rows(table: pd.DataFrame, most: int = 16,
                  keep: Sequence[int] = ()) -> pd.DataFrame:
    """At most `most` rows of a long table (more when `keep` asks), for reading in a
    terminal; the index keeps each row's position in the whole table.

    Curve rows are chosen at evenly spaced training percentiles (the knot nearest
    each), so the rows follow where the data lies; other tables evenly by position.
    The first and last value rows, the missing-value row and the rows at positions
    `keep` (the bin a value asked about falls in) are always kept.
    """
    values = value_rows(table)
    count = len(values)
    if len(table) <= most:
        return table
    if values["training_percentile"].notna().all():
        targets = np.linspace(0.0, 100.0, most - 1)
        percentiles = values["training_percentile"].to_numpy(dtype=float)
        chosen = {int(np.argmin(np.abs(percentiles - target))) for target in targets}
    else:
        chosen = set(np.round(np.linspace(0, count - 1, most - 1)).astype(int).tolist())
    chosen |= {0, count - 1} | set(range(count, len(table)))
    chosen |= {int(position) for position in keep if 0 <= int(position) < len(table)}
    return table.iloc[sorted(chosen)]


def row_of_value(table: pd.DataFrame, value: Any) -> int:
    """The position of the row of a term table that a value falls in: its level, its
    bin, the nearest knot of a curve, or the missing-value row for a blank."""
    rows = table["row"].astype(str).tolist()
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return rows.index(MISSING_LEVEL)
    values = value_rows(table)
    if values["from"].isna().all():  # levels
        text = str(value)
        return rows.index(text) if text in rows else len(values) - 1  # the unseen level
    number = float(value)
    starts = values["from"].to_numpy(dtype=float)
    ends = values["to"].to_numpy(dtype=float)
    if np.array_equal(starts, ends):  # a curve: the nearest knot
        return int(np.argmin(np.abs(starts - number)))
    return int(np.searchsorted(ends, number, side="left"))  # the bin (low, high]


@dataclass(frozen=True)
class MarkedRow:
    """The row of a feature's table that a value falls in (`glassbox shapes --at`)."""

    feature: str
    given: str  # the value as given on the command line
    shown: str  # the value as the table's "at" column shows it ("(blank)" for none)
    position: int  # the row's position in the term table (from 0)
    contribution: float  # the term's own contribution at the value
    words: str  # a sentence under the table: where the value falls and what it adds


BLANK_WORDS = ("", "missing", MISSING_LEVEL)


def row_at(model: AdditiveModel, feature: str, given: str) -> MarkedRow:
    """The row of `feature`'s table that `given` (written as in a data file; blank or
    "missing" for no value) falls in: its level (pooled and unseen levels as scoring reads
    them), its bin, or a curve's nearest knot; and the term's contribution at the value
    (a curve interpolates between its knots)."""
    from glassbox.core.encoding import encode_column
    from glassbox.core.errors import DataError

    spec = model.schema.feature(feature)
    term = model.term(feature)
    table = term_table(model, feature)
    text = str(given).strip()
    blank = text.lower() in BLANK_WORDS and not (
        isinstance(term, LevelsTerm) and text in term.levels)
    if blank and spec.missing != "fill":
        if term.missing is None:
            raise OptionError(f"--at {given!r}: the model has no row for a missing "
                              f"{feature} (training had no blank, so a blank is refused)")
        value: Any = None
    else:
        try:
            value = encode_column(pd.Series(["" if blank else text], dtype=object), spec,
                                  "--at").iloc[0]
        except DataError:
            blank_too = ", or missing for no value" if term.missing is not None else ""
            raise OptionError(f"--at {given!r} is not a value of {feature}: give "
                              f"{VALUE_HINTS.get(spec.kind, 'one of its levels')}"
                              f"{blank_too}") from None
    position = row_of_value(table, value)
    column = np.array([value], dtype=object if isinstance(term, LevelsTerm) else float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # an unseen level: said in the words below
        contribution = float(term.evaluate(column)[0])
    contribution = 0.0 if abs(contribution) < 1e-12 else contribution  # rounding noise
    shown = text or "(blank)"
    words = _at_words(term, table, value, position, shown, f"{contribution:+.4g}")
    return MarkedRow(feature, str(given), shown, position, contribution, words)


VALUE_HINTS = {"number": "a number", "integer": "a whole number",
               "flag": "yes or no (true/false, 1/0)"}


def _at_words(term: Term, table: pd.DataFrame, value: Any, position: int, shown: str,
              adds: str) -> str:
    """Where a value falls in a term's table and what the term adds there, in a line."""
    label = table["row"].iloc[position]
    place = f"--at {shown}: row {position + 1} of {len(table)}"
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return f"{place}, {label}: a row with no value adds {adds}."
    if not isinstance(term, CurveTerm):
        return f"{place}, {label}, which adds {adds}."
    knots = np.asarray(term.knots, dtype=float)
    if np.any(knots == value):
        return f"{place}, the knot {label}, which adds {adds}."
    if value < knots[0] or value > knots[-1]:
        end = "first" if value < knots[0] else "last"
        return (f"{place}, the {end} knot {label}; beyond it the curve stays level and adds "
                f"{adds}.")
    after = int(np.searchsorted(knots, value))
    return (f"{place}, the knot {label}, the nearer of {knots[after - 1]:.6g} and "
            f"{knots[after]:.6g}; straight between them the curve adds {adds} at {shown}.")


def _interval_text(low: float, high: float) -> str:
    if np.isinf(low):
        return f"≤ {high:.6g}"
    if np.isinf(high):
        return f"> {low:.6g}"
    return f"{low:.6g} < x ≤ {high:.6g}"


def _profile_or_none(model: AdditiveModel, feature: str) -> FeatureProfile | None:
    for profile in model.profiles:
        if profile.feature == feature:
            return profile
    return None


def term_importance(model: AdditiveModel, term: Term) -> float:
    """Mean absolute contribution over the training rows.

    Exact when the model file records it (every fit does; rows with no value count
    with the missing-value entry); otherwise estimated from the training profile:
    numeric features over the 1% slices between the 101 percentiles, categories
    weighting levels by count, and the missing-value entry weighted by its share.
    """
    recorded = model.metadata.get("importance", {})
    if term.feature in recorded:
        return float(recorded[term.feature])
    profile = _profile_or_none(model, term.feature)
    if profile is None:
        return float(np.mean(np.abs(term.values)))
    share = profile.missing_share or 0.0
    gap = share * abs(term.missing) if term.missing is not None else 0.0
    if isinstance(term, LevelsTerm):
        counts = dict(profile.level_counts)
        total = sum(counts.values()) or 1
        present = sum(abs(v) * counts.get(level, 0)
                      for level, v in zip(term.levels, term.values, strict=True)) / total
        return float((1.0 - share) * present + gap)
    points = np.asarray(profile.percentiles)
    # midpoints between percentiles stand for the 1% slices of the training rows
    middles = (points[:-1] + points[1:]) / 2
    return float((1.0 - share) * np.mean(np.abs(term.evaluate(middles))) + gap)


def observed_direction(term: Term) -> str:
    """'increasing', 'decreasing', 'flat' or 'neither' for an ordered term; '' for levels."""
    if isinstance(term, LevelsTerm):
        return ""
    steps = np.diff(np.asarray(term.values))
    if np.all(np.abs(steps) <= 1e-12):
        return "flat"
    if np.all(steps >= -1e-12):
        return "increasing"
    if np.all(steps <= 1e-12):
        return "decreasing"
    return "neither"


def summary(model: AdditiveModel) -> pd.DataFrame:
    """One line per feature, most important first: importance, the lowest and highest
    contribution (the missing-value entry included), directions, and the missing-value
    entry with its share of training rows (blank entry: a missing value is refused).
    Then one line per pairwise table, most important first (kind "pair"; its lowest and
    highest cell; no direction or missing entry of its own)."""
    from glassbox.explaining.pair_shapes import pair_summary_rows

    rows = []
    for term in model.terms:
        spec = model.schema.feature(term.feature)
        values = [*term.values, *([term.missing] if term.missing is not None else [])]
        rows.append({
            "feature": term.feature, "kind": spec.kind, "term": term.kind,
            "importance": term_importance(model, term),
            "lowest": float(min(values)), "highest": float(max(values)),
            "observed": observed_direction(term), "declared": spec.monotone or "",
            "missing": term.missing,
            "missing_share": _missing_share(_profile_or_none(model, term.feature)),
        })
    order = ["importance", "feature"]
    mains = pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS)).sort_values(
        order, ascending=[False, True], kind="mergesort")
    pairs = pair_summary_rows(model)
    if not pairs:
        return mains.reset_index(drop=True)
    pairs = pd.DataFrame(pairs, columns=list(SUMMARY_COLUMNS)).sort_values(
        order, ascending=[False, True], kind="mergesort", na_position="last")
    return pd.concat([mains, pairs], ignore_index=True)


def chosen_features(model: AdditiveModel, features: Sequence[str] | None = None) -> list[str]:
    """The named features (checked to have terms), or every feature by importance (the
    one-feature terms; pairs are chosen apart, `pair_shapes.chosen_pairs`)."""
    if not features:
        table = summary(model)
        return list(table.loc[table["kind"] != "pair", "feature"])
    for name in features:
        model.term(name)  # a clear error for an unknown feature
    return list(dict.fromkeys(features))


def all_tables(model: AdditiveModel, features: Sequence[str] | None = None) -> pd.DataFrame:
    """Every chosen term's rows stacked, in order of importance (or as named)."""
    names = chosen_features(model, features)
    return pd.concat([term_table(model, name) for name in names], ignore_index=True)


def write_folder(model: AdditiveModel, folder: str | Path, fmt: str,
                 features: Sequence[str] | None = None,
                 pairs: Sequence[str] | None = None) -> list[Path]:
    """`summary.EXT` (every feature and pair), one `FEATURE.EXT` per chosen feature and
    one `FIRST & SECOND.EXT` per chosen pair (its long table) in a folder; return the
    paths."""
    from glassbox.explaining.pair_shapes import pair_table

    names = [] if pairs and not features else chosen_features(model, features)
    pair_names = shown_pairs(model, features, pairs)
    file_names = folder_names(names, fmt, pair_names)
    folder = output_folder(folder, "tables")
    tables = ([summary(model)] + [term_table(model, name) for name in names]
              + [pair_table(model, name) for name in pair_names])
    paths = [folder / file_name for file_name in file_names]
    for path, table in zip(paths, tables, strict=True):
        write_atomic(path, write(table, fmt))
    return paths


def _pairs_of(model: AdditiveModel, features: Sequence[str] | None,
              pairs: Sequence[str] | None) -> list[Any]:
    """The pairs a command shows: those named, else every pair when no feature is named
    (naming features only shows those features)."""
    from glassbox.explaining.pair_shapes import chosen_pairs

    if pairs:
        return chosen_pairs(model, pairs)
    return [] if features else list(model.pairs)


def shown_pairs(model: AdditiveModel, features: Sequence[str] | None = None,
                pairs: Sequence[str] | None = None) -> list[str]:
    """The names of the pairs shown with these --feature and --pair choices."""
    return [p.name for p in _pairs_of(model, features, pairs)]


def pair_file_stem(name: str) -> str:
    """A pair's file name without suffix: `pair_FIRST_SECOND` (the prefix keeps it apart
    from any feature's file)."""
    return f"pair_{safe_file_name(name)}"


def folder_names(features: Sequence[str], fmt: str, pairs: Sequence[str] = ()) -> list[str]:
    """The files `write_folder` writes: `summary.EXT`, then one per feature, then one
    per pair."""
    if fmt not in SUFFIXES:
        raise OptionError(f"unknown format {fmt!r} (use one of: {', '.join(SUFFIXES)})")
    return [f"summary{SUFFIXES[fmt]}",
            *(f"{safe_file_name(name)}{SUFFIXES[fmt]}" for name in features),
            *(f"{pair_file_stem(name)}{SUFFIXES[fmt]}" for name in pairs)]
