"""Points cards: an additive classification model as whole points per bin or level.

The usual scaling: points = offset + factor × ln(odds of the good outcome), with
factor = PDO / ln 2 (PDO: points to double the odds) and offset = base score −
factor × ln(base odds). The schema's `[target] better` says which outcome is
good: "higher" means ln(odds good) is the model's score, "lower" its negative.

Each term becomes rows of whole points:

- steps keep their own right-closed bins (neighbours are merged only when they
  round to the same points, so no value scores differently);
- levels keep one row per level plus the unseen-level row;
- curves are cut at training percentiles (`bins` equal shares; edges rounded
  for reading, to whole numbers for integer features, which moves no row, else
  to a power of ten no coarser than 1/1000 of the training range; repeated
  edges merged); a feature with at most `bins` distinct training values gets
  one bin per value. A bin's contribution is the mean over the training rows in it:
  exact from the value counts where the profile keeps them, otherwise over the
  1% slices between the 101 percentiles, each slice taken at its midpoint.

Every row's points are round(factor × good sign × contribution), halves away
from zero; the intercept and the offset make the separate base points, so a
row's total is the base points plus one row's points per feature.

    {"format": "glassbox-points", "version": 1, "checksum": "sha256:...", "card": {...}}

The checksum is SHA-256 over the canonical JSON of "card", as for model files.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

from glassbox import documents
from glassbox.additive import AdditiveModel, CurveTerm, FeatureProfile, LevelsTerm, StepTerm
from glassbox.artifact import checksum, model_to_dict
from glassbox.errors import GlassboxError, ModelFileError, OptionError, UnseenLevelWarning
from glassbox.schema import Schema, prepare

FORMAT = "glassbox-points"
VERSION = 1
DEFAULT_BINS = 10
UNSEEN_ROW = "(level not seen in training)"
CARD_COLUMNS = ("feature", "row", "from", "to", "points", "contribution")
BASE_ROW = "base points"


def whole_points(values: float | np.ndarray) -> np.ndarray:
    """Round to whole points, halves away from zero (so +x and -x get opposite points)."""
    values = np.asarray(values, dtype=float)
    return (np.sign(values) * np.floor(np.abs(values) + 0.5)).astype(np.int64)


@dataclass(frozen=True)
class Scaling:
    """Base score at base odds (good:bad), and the points that double the odds."""

    base_score: float = 600.0
    base_odds: float = 50.0
    pdo: float = 20.0

    def __post_init__(self) -> None:
        for name in ("base_score", "base_odds", "pdo"):
            value = getattr(self, name)
            if not isinstance(value, int | float) or isinstance(value, bool) or not (
                    math.isfinite(value)):
                raise OptionError(f"{name.replace('_', ' ')} must be a finite number, "
                                  f"not {value!r}")
        if self.pdo <= 0:
            raise OptionError(f"points to double the odds (pdo) must be above 0, not {self.pdo:g}")
        if self.base_odds <= 0:
            raise OptionError(f"base odds must be above 0 (good:bad, e.g. 50 for 50:1), "
                              f"not {self.base_odds:g}")

    @property
    def factor(self) -> float:
        """Points per unit of ln(odds)."""
        return self.pdo / math.log(2.0)

    @property
    def offset(self) -> float:
        """The score at even odds (ln odds 0)."""
        return self.base_score - self.factor * math.log(self.base_odds)

    def score(self, log_odds_good: float | np.ndarray) -> np.ndarray:
        """The exact (unrounded) scaled score of ln(odds of the good outcome)."""
        return self.offset + self.factor * np.asarray(log_odds_good, dtype=float)

    def to_dict(self) -> dict[str, float]:
        return {"base_score": float(self.base_score), "base_odds": float(self.base_odds),
                "pdo": float(self.pdo), "factor": self.factor, "offset": self.offset}


@dataclass(frozen=True)
class FeaturePoints:
    """One feature's rows: right-closed bins over `edges`, or levels, each with points.

    `contributions` are the model's log-odds each row's points were rounded from
    (on the model's scale, before the good sign).
    """

    feature: str
    term: str  # the model term it came from: curve, steps or levels
    points: tuple[int, ...]
    contributions: tuple[float, ...]
    edges: tuple[float, ...] = ()
    levels: tuple[str, ...] = ()
    unseen_points: int = 0
    unseen_contribution: float = 0.0

    def __post_init__(self) -> None:
        if self.term not in ("curve", "steps", "levels"):
            raise ModelFileError(f"feature '{self.feature}': unknown term kind {self.term!r}")
        if len(self.contributions) != len(self.points) or not self.points:
            raise ModelFileError(f"feature '{self.feature}': needs one contribution per row "
                                 "of points (at least one row)")
        if any(not isinstance(p, int) or isinstance(p, bool) for p in
               (*self.points, self.unseen_points)):
            raise ModelFileError(f"feature '{self.feature}': points must be whole numbers")
        if self.by_level:
            if len(self.levels) != len(self.points) or self.edges:
                raise ModelFileError(f"feature '{self.feature}': needs one row per level")
            if len(set(self.levels)) != len(self.levels):
                raise ModelFileError(f"feature '{self.feature}': a level is listed twice")
            return
        if len(self.points) != len(self.edges) + 1 or self.levels:
            raise ModelFileError(f"feature '{self.feature}': needs one more row than edges")
        edges = np.asarray(self.edges, dtype=float)
        if not np.all(np.isfinite(edges)) or np.any(np.diff(edges) <= 0):
            raise ModelFileError(f"feature '{self.feature}': edges must be finite and "
                                 "strictly increasing")

    @property
    def by_level(self) -> bool:
        return self.term == "levels"

    def points_of(self, column: np.ndarray) -> np.ndarray:
        """The points of each value of an encoded column."""
        points = np.asarray(self.points, dtype=np.int64)
        if not self.by_level:
            bins = np.searchsorted(np.asarray(self.edges, dtype=float),
                                   np.asarray(column, dtype=float), side="left")
            return points[bins]
        values = np.asarray(column, dtype=object)
        position = pd.Index(self.levels).get_indexer(values)
        unseen = position < 0
        out = points[np.where(unseen, 0, position)]
        if unseen.any():
            strange = sorted({str(v) for v in values[unseen]})[:5]
            warnings.warn(
                f"feature '{self.feature}': {int(unseen.sum())} row(s) have a level never seen "
                f"in training ({', '.join(repr(s) for s in strange)}); given the unseen-level "
                f"points {self.unseen_points}", UnseenLevelWarning, stacklevel=3)
            out[unseen] = self.unseen_points
        return out

    def rows(self, flag: bool = False) -> list[dict[str, Any]]:
        """The feature's rows as records: label, bounds, points, contribution."""
        if self.by_level:
            rows = [{"row": level, "from": None, "to": None, "points": p, "contribution": c}
                    for level, p, c in zip(self.levels, self.points, self.contributions,
                                           strict=True)]
            rows.append({"row": UNSEEN_ROW, "from": None, "to": None,
                         "points": self.unseen_points, "contribution": self.unseen_contribution})
            return rows
        bounds = [-math.inf, *self.edges, math.inf]
        rows = []
        for index, (p, c) in enumerate(zip(self.points, self.contributions, strict=True)):
            low, high = bounds[index], bounds[index + 1]
            rows.append({"row": _bin_text(low, high, flag), "from": low, "to": high,
                         "points": p, "contribution": c})
        return rows

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {"feature": self.feature, "term": self.term}
        if self.by_level:
            data["levels"] = list(self.levels)
        else:
            data["edges"] = list(self.edges)
        data["points"] = list(self.points)
        data["contributions"] = list(self.contributions)
        if self.by_level:
            data["unseen_points"] = self.unseen_points
            data["unseen_contribution"] = self.unseen_contribution
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> FeaturePoints:
        try:
            return cls(
                feature=str(data["feature"]), term=str(data["term"]),
                points=tuple(data["points"]),
                contributions=tuple(float(v) for v in data["contributions"]),
                edges=tuple(float(v) for v in data.get("edges", ())),
                levels=tuple(str(v) for v in data.get("levels", ())),
                unseen_points=data.get("unseen_points", 0),
                unseen_contribution=float(data.get("unseen_contribution", 0.0)),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"feature {data.get('feature')!r} is incomplete: "
                                 f"{exc}") from None


def _bin_text(low: float, high: float, flag: bool = False) -> str:
    if flag and low == -math.inf and high == 0.0:
        return "no (0)"
    if flag and low == 0.0 and high == math.inf:
        return "yes (1)"
    if low == -math.inf and high == math.inf:
        return "any value"
    if low == -math.inf:
        return f"≤ {high:.6g}"
    if high == math.inf:
        return f"> {low:.6g}"
    return f"{low:.6g} < x ≤ {high:.6g}"


@dataclass(frozen=True)
class PointsCard:
    """Base points plus one table of whole points per feature, and how they were scaled."""

    scaling: Scaling
    base_points: int
    features: tuple[FeaturePoints, ...]
    schema: Schema
    intercept: float
    bins: int = DEFAULT_BINS
    model_checksum: str | None = None

    def __post_init__(self) -> None:
        names = [f.feature for f in self.features]
        if len(set(names)) != len(names):
            raise ModelFileError("a feature has more than one table of points")
        used = {f.name for f in self.schema.used_features}
        stray = [n for n in names if n not in used]
        if stray:
            raise ModelFileError(f"points for {', '.join(stray)} which the schema does not use")

    @property
    def feature_names(self) -> tuple[str, ...]:
        return tuple(f.feature for f in self.features)

    @property
    def good_sign(self) -> int:
        return self.schema.target.good_sign

    def feature(self, name: str) -> FeaturePoints:
        for table in self.features:
            if table.feature == name:
                return table
        raise OptionError(f"the card has no points for '{name}' "
                          f"(its features: {', '.join(self.feature_names)})")

    def points_range(self) -> tuple[int, int]:
        """The lowest and highest total any row can get."""
        lowest = highest = self.base_points
        for table in self.features:
            every = [*table.points, table.unseen_points] if table.by_level else table.points
            lowest += min(every)
            highest += max(every)
        return lowest, highest


# ---------------------------------------------------------------- building a card


def _check_bins(bins: int) -> None:
    if not isinstance(bins, int) or isinstance(bins, bool) or bins < 2:
        raise OptionError(f"bins must be a whole number of at least 2, not {bins!r}")


def _readable(edges: np.ndarray, profile: FeatureProfile, whole: bool) -> np.ndarray:
    """Edges rounded for reading: whole numbers for integer data (which keeps every
    row in its bin), else to a power of ten at most 1/1000 of the training range."""
    if whole:
        return np.floor(edges)
    spread = profile.maximum - profile.minimum
    if spread <= 0:
        return edges
    step = 10.0 ** math.floor(math.log10(spread / 1000.0))
    return np.round(edges / step) * step


def _mean_per_bin(edges: np.ndarray, where: np.ndarray, weights: np.ndarray,
                  contributions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Edges with empty bins merged into the next occupied one, and each bin's
    weighted mean contribution."""
    bins = np.searchsorted(edges, where, side="left")
    weight = np.bincount(bins, weights=weights, minlength=len(edges) + 1)
    occupied = np.flatnonzero(weight > 0)
    kept = edges[occupied[:-1]]
    bins = np.searchsorted(kept, where, side="left")
    total = np.bincount(bins, weights=weights * contributions, minlength=len(kept) + 1)
    weight = np.bincount(bins, weights=weights, minlength=len(kept) + 1)
    return kept, total / weight


def curve_bins(term: CurveTerm, profile: FeatureProfile, bins: int = DEFAULT_BINS,
               whole: bool = False) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Inner edges of a curve's bins and each bin's mean contribution on the training rows."""
    _check_bins(bins)
    if not profile.percentiles:
        raise OptionError(f"the model keeps no training percentiles for '{term.feature}', "
                          "so its curve cannot be cut into bins")
    if profile.value_counts:
        values = np.array([v for v, _ in profile.value_counts], dtype=float)
        weights = np.array([c for _, c in profile.value_counts], dtype=float)
        if len(values) <= bins:  # one bin per training value: no binning error at all
            return (tuple(float(v) for v in values[:-1]),
                    tuple(float(c) for c in term.evaluate(values)))
    else:
        grid = np.asarray(profile.percentiles, dtype=float)
        values = (grid[:-1] + grid[1:]) / 2  # the 1% slices of training rows
        weights = np.ones(len(values))
    shares = np.linspace(0.0, 100.0, bins + 1)[1:-1]
    percent = np.linspace(0.0, 100.0, len(profile.percentiles))
    edges = _readable(np.interp(shares, percent, profile.percentiles), profile, whole)
    edges = np.unique(edges[(edges >= profile.minimum) & (edges < profile.maximum)])
    kept, means = _mean_per_bin(edges, values, weights, term.evaluate(values))
    return tuple(float(e) for e in kept), tuple(float(m) for m in means)


def feature_points(model: AdditiveModel, feature: str, scaling: Scaling,
                   bins: int = DEFAULT_BINS) -> FeaturePoints:
    """One term of the model as rows of whole points."""
    term = model.term(feature)
    scale = scaling.factor * model.schema.target.good_sign
    if isinstance(term, LevelsTerm):
        return FeaturePoints(
            feature, term.kind, tuple(int(p) for p in whole_points(scale * np.asarray(
                term.values))), tuple(term.values), levels=term.levels,
            unseen_points=int(whole_points(scale * term.unseen)),
            unseen_contribution=float(term.unseen))
    if isinstance(term, StepTerm):
        points = whole_points(scale * np.asarray(term.values))
        # merge neighbours only where they score the same points: no value moves
        change = np.flatnonzero(points[1:] != points[:-1])
        starts = np.concatenate([[0], change + 1])
        ends = np.concatenate([change + 1, [len(points)]])
        contributions = [float(np.mean(term.values[s:e])) for s, e in
                         zip(starts, ends, strict=True)]
        return FeaturePoints(feature, term.kind, tuple(int(points[s]) for s in starts),
                             tuple(contributions),
                             edges=tuple(float(term.edges[i]) for i in change))
    whole = model.schema.feature(feature).kind in ("integer", "flag")
    edges, contributions = curve_bins(term, model.profile(feature), bins, whole)
    points = whole_points(scale * np.asarray(contributions))
    return FeaturePoints(feature, term.kind, tuple(int(p) for p in points), contributions,
                         edges=edges)


def model_checksum(model: AdditiveModel) -> str | None:
    """The checksum its model file records (None if the model cannot be written)."""
    try:
        return checksum(model_to_dict(model))
    except (TypeError, ValueError):
        return None


def points_card(model: AdditiveModel, scaling: Scaling | None = None,
                bins: int = DEFAULT_BINS) -> PointsCard:
    """The points card of a classification model."""
    if model.link != "logit":
        raise OptionError(f"points need a classification model (logit link); this model is "
                          f"a {model.task} model (link {model.link})")
    _check_bins(bins)
    scaling = scaling or Scaling()
    base = scaling.offset + scaling.factor * model.schema.target.good_sign * model.intercept
    tables = tuple(feature_points(model, name, scaling, bins) for name in model.features)
    return PointsCard(scaling, int(whole_points(base)), tables, model.schema,
                      float(model.intercept), bins, model_checksum(model))


# ---------------------------------------------------------------- reading and scoring


def card_table(card: PointsCard) -> pd.DataFrame:
    """Every row of the card: the base points first, then each feature's rows."""
    rows: list[dict[str, Any]] = [{"feature": BASE_ROW, "row": "offset and intercept",
                                   "from": None, "to": None, "points": card.base_points,
                                   "contribution": card.intercept}]
    for table in card.features:
        flag = card.schema.feature(table.feature).kind == "flag"
        rows += [{"feature": table.feature, **row} for row in table.rows(flag)]
    return pd.DataFrame(rows, columns=list(CARD_COLUMNS))


def card_summary(card: PointsCard) -> dict[str, Any]:
    """The scaling and what a total can be, for reading beside the rows."""
    lowest, highest = card.points_range()
    target = card.schema.target
    positive = (f"{target.column} = {target.positive}" if target.positive is not None
                else f"the positive label of {target.column}")
    chance = "lower" if card.good_sign < 0 else "higher"
    good = f"more points, {chance} chance of {positive}"
    return {
        "base score": card.scaling.base_score,
        "base odds (good:bad)": f"{card.scaling.base_odds:g}:1",
        "points to double the odds": card.scaling.pdo,
        "factor (points per ln odds)": card.scaling.factor,
        "offset (points at even odds)": card.scaling.offset,
        "direction": good,
        "base points": card.base_points,
        "possible totals": f"{lowest} to {highest}",
    }


def score_points(card: PointsCard, frame: pd.DataFrame,
                 source: str | None = None) -> pd.DataFrame:
    """Per row: the id (when the schema names one), total points, base points and each
    feature's points (`points:FEATURE`)."""
    prepared = prepare(frame, card.schema, require_target=False, source=source,
                       features=card.feature_names)
    parts = {table.feature: table.points_of(prepared.features[table.feature].to_numpy())
             for table in card.features}
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


@dataclass(frozen=True)
class Fidelity:
    """How closely the card's whole-point totals follow the exact scaled score."""

    rows: int
    largest_difference: float
    mean_difference: float
    spearman: float

    def summary(self) -> dict[str, Any]:
        return {"rows compared": self.rows,
                "largest difference (points)": self.largest_difference,
                "mean difference (points)": self.mean_difference,
                "Spearman rank correlation": self.spearman}


def exact_points(card: PointsCard, model: AdditiveModel, frame: pd.DataFrame,
                 source: str | None = None) -> np.ndarray:
    """The unrounded scaled score of each row: offset + factor × ln(odds good)."""
    return card.scaling.score(card.good_sign * model.score(frame, source))


def card_fidelity(card: PointsCard, model: AdditiveModel, frame: pd.DataFrame,
                  source: str | None = None) -> Fidelity:
    """Largest and mean absolute difference (points) and Spearman rank correlation
    between the card's totals and the exact scaled score on the rows of `frame`."""
    known = model_checksum(model)
    if card.model_checksum and known and card.model_checksum != known:
        raise OptionError("the card was made from a different model (the model checksums "
                          "differ); compare a card with its own model")
    if set(card.feature_names) != set(model.features):
        raise OptionError("the card and the model use different features")
    totals = score_points(card, frame, source)["total_points"].to_numpy(dtype=float)
    exact = exact_points(card, model, frame, source)
    gaps = np.abs(totals - exact)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # constant totals: no rank correlation (nan)
        rank = float(spearmanr(totals, exact).statistic) if len(totals) > 1 else math.nan
    return Fidelity(int(len(totals)), float(gaps.max()), float(gaps.mean()), rank)


# ---------------------------------------------------------------- the card file


def card_to_dict(card: PointsCard) -> dict[str, Any]:
    """The card's content as plain data (what the checksum covers)."""
    return {
        "scaling": card.scaling.to_dict(),
        "bins": card.bins,
        "base_points": card.base_points,
        "intercept": card.intercept,
        "model_checksum": card.model_checksum,
        "features": [table.to_dict() for table in card.features],
        "schema": card.schema.to_dict(),
    }


def card_from_dict(content: Mapping[str, Any], source: str = "") -> PointsCard:
    """Rebuild a card from `card_to_dict` output."""
    where = f"points card {source}"
    try:
        scaling_data = content["scaling"]
        scaling = Scaling(scaling_data["base_score"], scaling_data["base_odds"],
                          scaling_data["pdo"])
        for name in ("factor", "offset"):
            if not math.isclose(scaling_data[name], getattr(scaling, name), rel_tol=1e-12):
                raise ModelFileError(f"its {name} does not follow from its scaling")
        base_points = content["base_points"]
        if not isinstance(base_points, int) or isinstance(base_points, bool):
            raise ModelFileError("base points must be a whole number")
        checksum_value = content.get("model_checksum")
        return PointsCard(
            scaling=scaling, base_points=base_points,
            features=tuple(FeaturePoints.from_dict(f) for f in content["features"]),
            schema=Schema.from_dict(content["schema"], source=source),
            intercept=float(content["intercept"]), bins=int(content["bins"]),
            model_checksum=None if checksum_value is None else str(checksum_value),
        )
    except KeyError as exc:
        raise ModelFileError(f"{where}: missing entry {exc}") from None
    except (TypeError, ValueError, GlassboxError) as exc:
        raise ModelFileError(f"{where}: {exc}") from None


CARD_FILE = documents.Kind(FORMAT, VERSION, "card", "points card", "a glassbox points card",
                           "restore the original or make the card again")


def dumps(card: PointsCard) -> str:
    """The card file's text: indented, keys in a fixed order, ends with a newline."""
    return documents.dumps(CARD_FILE, card_to_dict(card))


def save(card: PointsCard, path: str | Path) -> Path:
    """Write the card file atomically and return its path."""
    return documents.save(CARD_FILE, card_to_dict(card), path)


def loads(text: str, source: str = "<text>") -> PointsCard:
    """Parse a card file's text, checking format, version and checksum."""
    return card_from_dict(documents.loads(CARD_FILE, text, source), source)


def load(path: str | Path) -> PointsCard:
    """Read a card file written by `save`."""
    return card_from_dict(documents.load(CARD_FILE, path), str(path))
