"""The points card as records, and its file.

A card is base points plus one table of whole points per feature, with the
scaling that made them (see `glassbox.explaining.points` for how a card is built from a
model). The card file is checksummed JSON:

    {"format": "glassbox-points", "version": 3, "checksum": "sha256:...", "card": {...}}

The checksum is SHA-256 over the canonical JSON of "card", as for model files.
Version 4 adds a points grid per pairwise table ("pairs", `glassbox.explaining.pair_points`);
a card without pairs is still written as version 3, byte for byte as before.
Version 3 gives each feature a row for a missing value: its points where the model
learned a value for it, or a refusal where its training data had none. Version 2
cards (no such rows: every missing value refused, as their models did) and version 1
cards (equal-share bins, no tolerance or cut-off) still load and score.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core import documents, structure
from glassbox.core.additive import refuse_missing
from glassbox.core.errors import (
    GlassboxError,
    ModelFileError,
    OptionError,
    UnseenLevelWarning,
    value_text,
)
from glassbox.core.schema import MISSING_LEVEL, Schema
from glassbox.core.wording import plural
from glassbox.explaining.pair_points import PairPoints

FORMAT = "glassbox-points"
VERSION = 4
WITHOUT_PAIRS = 3
DEFAULT_CUTOFF = 0.5
UNSEEN_ROW = "(level not seen in training)"
MISSING_ROW = MISSING_LEVEL  # the row for a missing value
REFUSED_ROW = f"{MISSING_LEVEL}: refused, training had no missing value"
CARD_COLUMNS = ("feature", "row", "from", "to", "points", "contribution", "training_rows",
                "spread", "largest_difference")
BASE_ROW = "base points"


def whole_points(values: float | np.ndarray) -> np.ndarray:
    """Round to whole points, halves away from zero (so +x and -x get opposite points)."""
    values = np.asarray(values, dtype=float)
    return (np.sign(values) * np.floor(np.abs(values) + 0.5)).astype(np.int64)


MOST_PDO = 10**5  # with ln odds within +-700 (doubles), points stay inside the file's range
MOST_BASE_SCORE = 10**7


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
        # Points are whole numbers: below one point per doubling of the odds, rounding each
        # bin to a whole point would erase the model; the card file holds points within
        # +-10**9 (structure.POINTS_LIMIT), so the scale must leave room for the tables.
        if not 1 <= self.pdo <= MOST_PDO:
            raise OptionError(f"points to double the odds (pdo) must be from 1 to {MOST_PDO:,}, "
                              f"not {self.pdo:g}: points are whole numbers, so a smaller pdo "
                              "rounds every bin to the same points")
        if abs(self.base_score) > MOST_BASE_SCORE:
            raise OptionError(f"base score must be within +-{MOST_BASE_SCORE:,}, "
                              f"not {self.base_score:g}")
        if not 1e-9 <= self.base_odds <= 1e9:
            raise OptionError(f"base odds must be from 1e-9 to 1e9 (good:bad), "
                              f"not {self.base_odds:g}")

    @property
    def factor(self) -> float:
        """Points per unit of ln(odds)."""
        return self.pdo / math.log(2.0)

    @property
    def offset(self) -> float:
        """The score at even odds (ln odds 0)."""
        return self.base_score - self.factor * math.log(self.base_odds)

    @property
    def default_tolerance(self) -> float:
        """A twentieth of the points that double the odds (ln 2 / 20 on the log-odds
        scale; one point at PDO 20), the spread whole-point rounding itself allows."""
        return self.pdo / 20.0

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
    (on the model's scale, before the good sign). Per row, when known: `training_rows`
    (the unseen-level row has none), `spreads` (points: how far the term moves over
    every value the row covers) and `largest` (points: the largest difference any
    value of the row can have from the exact scaled contribution; for levels the
    unseen-level row's comes last). `exact` is False when bin values are approximate
    (from percentiles); `resolution` is the widest spread of a stored cell, in points.

    A missing value has its own row: `missing_points`, rounded from the term's
    missing-value entry `missing_contribution`, with its training rows and largest
    difference (its spread is 0: one value). `missing_points` None means the model has
    no entry for a missing value (its training data had none), so the card refuses one.
    """

    feature: str
    term: str  # the model term it came from: curve, steps or levels
    points: tuple[int, ...]
    contributions: tuple[float, ...]
    edges: tuple[float, ...] = ()
    levels: tuple[str, ...] = ()
    unseen_points: int = 0
    unseen_contribution: float = 0.0
    training_rows: tuple[int, ...] = ()
    spreads: tuple[float, ...] = ()
    largest: tuple[float, ...] = ()
    exact: bool = True
    resolution: float | None = None
    missing_points: int | None = None
    missing_contribution: float | None = None
    missing_rows: int | None = None
    missing_largest: float | None = None

    def __post_init__(self) -> None:
        if self.term not in ("curve", "steps", "levels"):
            raise ModelFileError(f"feature '{self.feature}': unknown term kind {self.term!r}")
        self._check_missing_row()
        if len(self.contributions) != len(self.points) or not self.points:
            raise ModelFileError(f"feature '{self.feature}': needs one contribution per row "
                                 "of points (at least one row)")
        if any(not isinstance(p, int) or isinstance(p, bool) for p in
               (*self.points, self.unseen_points)):
            raise ModelFileError(f"feature '{self.feature}': points must be whole numbers")
        if any(not isinstance(n, int) or isinstance(n, bool) or n < 0
               for n in self.training_rows):
            raise ModelFileError(f"feature '{self.feature}': training rows must be whole "
                                 "numbers of at least 0")
        rows = len(self.points) + (1 if self.by_level else 0)
        for name, count in (("training_rows", len(self.points)), ("spreads", len(self.points)),
                            ("largest", rows)):
            if getattr(self, name) and len(getattr(self, name)) != count:
                raise ModelFileError(f"feature '{self.feature}': needs one {name} entry "
                                     "per row")
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

    def _check_missing_row(self) -> None:
        where = f"feature '{self.feature}': the row for a missing value"
        if self.missing_points is None:
            if any(v is not None for v in (self.missing_contribution, self.missing_rows,
                                           self.missing_largest)):
                raise ModelFileError(f"{where} has no points but other entries")
            return
        if not isinstance(self.missing_points, int) or isinstance(self.missing_points, bool):
            raise ModelFileError(f"{where} needs whole points")
        if self.missing_contribution is None or not math.isfinite(self.missing_contribution):
            raise ModelFileError(f"{where} needs the contribution its points come from")
        rows = self.missing_rows
        if rows is not None and (not isinstance(rows, int) or isinstance(rows, bool)
                                 or rows < 0):
            raise ModelFileError(f"{where}: training rows must be a whole number of at least 0")

    def over(self, tolerance: float) -> int:
        """How many rows spread more than `tolerance` points (beyond floating-point noise)."""
        return int(sum(spread > tolerance * (1 + 1e-9) for spread in self.spreads))

    @property
    def by_level(self) -> bool:
        return self.term == "levels"

    def points_of(self, column: np.ndarray, where: str = "the data") -> np.ndarray:
        """The points of each value of an encoded column; a row with no value (NaN, None)
        gets the missing-value points, or is refused (naming the rows of `where`)."""
        points = np.asarray(self.points, dtype=np.int64)
        absent = np.asarray(pd.isna(column), dtype=bool)
        if self.missing_points is None:
            refuse_missing(self.feature, absent, where, "the card has no points")
        if not self.by_level:
            bins = np.searchsorted(np.asarray(self.edges, dtype=float),
                                   np.asarray(column, dtype=float), side="left")
            return np.where(absent, self.missing_points or 0, points[bins])
        values = np.asarray(column, dtype=object)
        position = pd.Index(self.levels).get_indexer(values)
        unseen = (position < 0) & ~absent
        out = np.where(absent, self.missing_points or 0,
                       points[np.where(position < 0, 0, position)])
        if unseen.any():
            strange = sorted({str(v) for v in values[unseen]})[:5]
            warnings.warn(
                f"feature '{self.feature}': {plural(int(unseen.sum()), 'row')} with a level "
                f"never seen "
                f"in training ({', '.join(map(value_text, strange))}); given the unseen-level "
                f"points {self.unseen_points}", UnseenLevelWarning, stacklevel=3)
            out[unseen] = self.unseen_points
        return out

    def rows(self, flag: bool = False) -> list[dict[str, Any]]:
        """The feature's rows as records: label, bounds, points, contribution, training
        rows, spread and largest difference (None where unknown)."""
        if self.by_level:
            rows = [{"row": level, "from": None, "to": None, "points": p, "contribution": c}
                    for level, p, c in zip(self.levels, self.points, self.contributions,
                                           strict=True)]
            rows.append({"row": UNSEEN_ROW, "from": None, "to": None,
                         "points": self.unseen_points, "contribution": self.unseen_contribution})
        else:
            bounds = [-math.inf, *self.edges, math.inf]
            rows = [{"row": _bin_text(bounds[i], bounds[i + 1], flag), "from": bounds[i],
                     "to": bounds[i + 1], "points": p, "contribution": c}
                    for i, (p, c) in enumerate(zip(self.points, self.contributions,
                                                   strict=True))]
        for index, row in enumerate(rows):
            for key, values in (("training_rows", self.training_rows),
                                ("spread", self.spreads), ("largest_difference", self.largest)):
                row[key] = values[index] if index < len(values) else None
        rows.append(self.missing_row())
        return rows

    def missing_row(self) -> dict[str, Any]:
        """The row for a missing value as a record (a refusal where there are no points)."""
        if self.missing_points is None:
            return {"row": REFUSED_ROW, "from": None, "to": None, "points": None,
                    "contribution": None, "training_rows": None, "spread": None,
                    "largest_difference": None}
        return {"row": MISSING_ROW, "from": None, "to": None, "points": self.missing_points,
                "contribution": self.missing_contribution, "training_rows": self.missing_rows,
                "spread": 0.0, "largest_difference": self.missing_largest}

    def every_points(self) -> list[int]:
        """The points of every row a value can get: bins or levels, the unseen level,
        the missing value."""
        every = list(self.points)
        if self.by_level:
            every.append(self.unseen_points)
        if self.missing_points is not None:
            every.append(self.missing_points)
        return every

    def largest_of_all(self) -> float | None:
        """The largest difference over every row (None when the card does not record it)."""
        if not self.largest or (self.missing_points is not None
                                and self.missing_largest is None):
            return None
        extra = [] if self.missing_largest is None else [self.missing_largest]
        return max([*self.largest, *extra])

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
        for name in ("training_rows", "spreads", "largest"):
            if getattr(self, name):
                data[name] = list(getattr(self, name))
        data["exact"] = self.exact
        if self.resolution is not None:
            data["resolution"] = self.resolution
        for name in ("missing_points", "missing_contribution", "missing_rows",
                     "missing_largest"):  # a missing points entry of None: refused
            data[name] = getattr(self, name)
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
                training_rows=tuple(data.get("training_rows", ())),
                spreads=tuple(float(v) for v in data.get("spreads", ())),
                largest=tuple(float(v) for v in data.get("largest", ())),
                exact=bool(data.get("exact", True)),
                resolution=(None if data.get("resolution") is None
                            else float(data["resolution"])),
                missing_points=data.get("missing_points"),
                missing_contribution=_number_or_none(data.get("missing_contribution")),
                missing_rows=data.get("missing_rows"),
                missing_largest=_number_or_none(data.get("missing_largest")),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"feature {data.get('feature')!r} is incomplete: "
                                 f"{exc}") from None


def _number_or_none(value: Any) -> float | None:
    return None if value is None else float(value)


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
    tolerance: float | None = None  # points; None on cards made before tolerances
    cutoff: float = DEFAULT_CUTOFF
    model_checksum: str | None = None
    fidelity: Fidelity | None = None
    pairs: tuple[PairPoints, ...] = ()  # a points grid per pairwise table

    def __post_init__(self) -> None:
        check_cutoff(self.cutoff)
        names = [f.feature for f in self.features]
        if len(set(names)) != len(names):
            raise ModelFileError("a feature has more than one table of points")
        used = {f.name for f in self.schema.used_features}
        stray = [n for n in names if n not in used]
        if stray:
            raise ModelFileError(f"points for {', '.join(stray)} which the schema does not use")
        for pair in self.pairs:
            if not set(pair.features) <= set(names):
                raise ModelFileError(f"points for the pair '{pair.name}' whose features do "
                                     "not both have points")
        if len({p.name for p in self.pairs}) != len(self.pairs):
            raise ModelFileError("a pair has more than one grid of points")

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

    @property
    def cutoff_points(self) -> float:
        """The exact score at the cut-off probability: totals at or above it are favourable."""
        log_odds = math.log(self.cutoff / (1.0 - self.cutoff))
        return float(self.scaling.score(self.good_sign * log_odds))

    def largest_difference(self) -> float | None:
        """The most any row's total can differ from the exact scaled score: the base
        points' rounding plus each feature's largest row difference (None when the card
        does not record them)."""
        largest = [table.largest_of_all() for table in self.features]
        if any(value is None for value in largest):
            return None
        largest += [pair.largest_of_all() for pair in self.pairs]
        exact_base = self.scaling.offset + self.scaling.factor * self.good_sign * self.intercept
        return abs(self.base_points - exact_base) + sum(largest)  # type: ignore[arg-type]

    def points_range(self) -> tuple[int, int]:
        """The lowest and highest total any row can get (missing values included)."""
        lowest = highest = self.base_points
        for table in (*self.features, *self.pairs):
            every = table.every_points()
            lowest += min(every)
            highest += max(every)
        return lowest, highest


def check_cutoff(cutoff: float) -> None:
    """Refuse a cut-off that is not a probability strictly between 0 and 1."""
    if not isinstance(cutoff, int | float) or isinstance(cutoff, bool) or not 0 < cutoff < 1:
        raise OptionError(f"the cut-off is a probability between 0 and 1, not {cutoff!r}")


@dataclass(frozen=True)
class Fidelity:
    """How closely the card's whole-point totals follow the exact scaled score, and how
    often the card and the model take the same side of the cut-off. `agree_rounded` is
    how often they would with no bins at all, each row's exact contributions rounded to
    whole points: no card of whole points per feature can be expected to do better.
    `missing_rows` counts the compared rows with no value for at least one feature (scored
    by missing-value rows, and counted in every figure), `missing_agree` how many of them
    the card and the model decide alike (None on cards made before missing values)."""

    rows: int
    largest_difference: float
    mean_difference: float
    spearman: float
    cutoff: float
    agree: int
    favourable_card_only: int  # the card favourable, the model not
    favourable_model_only: int
    agree_rounded: int
    data_sha256: str | None = None
    missing_rows: int | None = None
    missing_agree: int | None = None

    @property
    def agreement(self) -> float:
        return self.agree / self.rows if self.rows else math.nan

    def summary(self) -> dict[str, Any]:
        return {"rows compared": self.rows,
                "largest difference (points)": self.largest_difference,
                "mean difference (points)": self.mean_difference,
                "Spearman rank correlation": self.spearman,
                f"decisions that agree at cut-off {self.cutoff:g}":
                    f"{self.agreement:.2%} ({self.agree:,} of {self.rows:,})",
                "favourable by the card only": self.favourable_card_only,
                "favourable by the model only": self.favourable_model_only,
                "the same with no bins (exact contributions rounded)":
                    f"{self.agree_rounded / self.rows:.2%} ({self.agree_rounded:,} of "
                    f"{self.rows:,})" if self.rows else "",
                **self._missing_summary()}

    def _missing_summary(self) -> dict[str, Any]:
        if self.missing_rows is None:
            return {}
        if not self.missing_rows:
            return {"rows with a missing value": 0}
        agree = self.missing_agree or 0
        return {"rows with a missing value": self.missing_rows,
                "decisions that agree on those rows":
                    f"{agree / self.missing_rows:.2%} ({agree:,} of {self.missing_rows:,})"}

    def to_dict(self) -> dict[str, Any]:
        return {"rows": self.rows, "largest_difference": self.largest_difference,
                "mean_difference": self.mean_difference,
                "spearman": None if math.isnan(self.spearman) else self.spearman,
                "cutoff": self.cutoff, "agree": self.agree, "agreement": self.agreement,
                "favourable_card_only": self.favourable_card_only,
                "favourable_model_only": self.favourable_model_only,
                "agree_rounded": self.agree_rounded, "data_sha256": self.data_sha256,
                "missing_rows": self.missing_rows, "missing_agree": self.missing_agree}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Fidelity:
        spearman = data["spearman"]
        return cls(int(data["rows"]), float(data["largest_difference"]),
                   float(data["mean_difference"]),
                   math.nan if spearman is None else float(spearman), float(data["cutoff"]),
                   int(data["agree"]), int(data["favourable_card_only"]),
                   int(data["favourable_model_only"]), int(data["agree_rounded"]),
                   data.get("data_sha256"), data.get("missing_rows"), data.get("missing_agree"))


# ---------------------------------------------------------------- the card file


def card_to_dict(card: PointsCard) -> dict[str, Any]:
    """The card's content as plain data (what the checksum covers)."""
    content = {
        "scaling": card.scaling.to_dict(),
        "tolerance": card.tolerance,
        "cutoff": card.cutoff,
        "cutoff_points": card.cutoff_points,
        "base_points": card.base_points,
        "intercept": card.intercept,
        "model_checksum": card.model_checksum,
        "features": [table.to_dict() for table in card.features],
        "schema": card.schema.to_dict(),
    }
    if card.fidelity is not None:
        content["fidelity"] = card.fidelity.to_dict()
    if card.pairs:
        content["pairs"] = [pair.to_dict() for pair in card.pairs]
    return content


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
            schema=Schema.from_dict(content["schema"], source=source,
                                   unstated_better="higher"),
            intercept=float(content["intercept"]),
            tolerance=None if content.get("tolerance") is None else float(content["tolerance"]),
            cutoff=float(content.get("cutoff", DEFAULT_CUTOFF)),
            model_checksum=None if checksum_value is None else str(checksum_value),
            fidelity=(Fidelity.from_dict(content["fidelity"]) if "fidelity" in content
                      else None),
            pairs=tuple(PairPoints.from_dict(p) for p in content.get("pairs", ())),
        )
    except KeyError as exc:
        raise ModelFileError(f"{where}: missing entry {exc}") from None
    except (TypeError, ValueError, GlassboxError) as exc:
        raise ModelFileError(f"{where}: {exc}") from None


CARD_FILE = documents.Kind(FORMAT, VERSION, "card", "points card", "a glassbox points card",
                           "restore the original or make the card again", structure.CARD)
_PLAIN_CARD = replace(CARD_FILE, version=WITHOUT_PAIRS)


def _kind(card: PointsCard) -> documents.Kind:
    return CARD_FILE if card.pairs else _PLAIN_CARD


def dumps(card: PointsCard) -> str:
    """The card file's text: indented, keys in a fixed order, ends with a newline."""
    return documents.dumps(_kind(card), card_to_dict(card))


def save(card: PointsCard, path: str | Path) -> Path:
    """Write the card file atomically and return its path."""
    return documents.save(_kind(card), card_to_dict(card), path)


def loads(text: str, source: str = "<text>") -> PointsCard:
    """Parse a card file's text, checking format, version and checksum."""
    return card_from_dict(documents.loads(CARD_FILE, text, source), source)


def load(path: str | Path) -> PointsCard:
    """Read a card file written by `save`."""
    return card_from_dict(documents.load(CARD_FILE, path), str(path))
