"""The one representation: an additive model whose terms are tables.

    score(x) = intercept + sum_j f_j(x_j) + sum_(j,k) f_jk(x_j, x_k)

Each f_j is a table: a curve (piecewise-linear over knots), steps
(piecewise-constant over bin edges) or levels (one value per category). What an
auditor reads in these tables is exactly what scores a row. Numeric values
beyond the training range are scored at the table's ends (clamped).

Every table also has an entry for a missing value (`missing`): what a row with no
value for the feature adds, learned from training rows that had none. A term whose
training data had no missing value has `missing = None` and refuses to score one.

The pairwise tables f_jk (`PairTerm`, glassbox.core.pairs) are optional: a model fitted
without pairs has none, and every feature of a pair also has a main term.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
import pandas as pd

from glassbox.core.cells import TermCells
from glassbox.core.errors import (
    DataError,
    ModelFileError,
    OptionError,
    UnseenLevelWarning,
    value_text,
)
from glassbox.core.logistic import logistic
from glassbox.core.pairs import PairTerm
from glassbox.core.schema import Schema, prepare, rows_text
from glassbox.core.sorted_stats import deviation_median, sorted_median, sorted_percentiles
from glassbox.core.wording import noun, plural

if TYPE_CHECKING:
    from glassbox.explaining.baseline import Baseline

LINKS = ("logit", "identity")
PERCENTILE_POINTS = 101
FEW_VALUES = 64  # numeric features with at most this many distinct values keep exact counts


def _floats(values: Sequence[float] | np.ndarray) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


def _band(term: Any, values: np.ndarray) -> None:
    for name in ("lower", "upper"):
        band = getattr(term, name)
        if band is not None and len(band) != len(values):
            raise ModelFileError(f"term '{term.feature}': {name} band has {len(band)} entries "
                                 f"for {len(values)} values")
    if term.missing is not None and not np.isfinite(term.missing):
        raise ModelFileError(f"term '{term.feature}': the missing-value entry must be a number")
    if term.missing_band is not None and (term.missing is None or len(term.missing_band) != 2):
        raise ModelFileError(f"term '{term.feature}': a missing-value band needs a missing "
                             "value and two ends")


def _with_missing(term: Any, column: np.ndarray, values: np.ndarray,
                  absent: np.ndarray) -> np.ndarray:
    """`values` with the term's missing-value entry where the column has no value."""
    if absent.any():
        if term.missing is None:
            refuse_missing(term.feature, absent, "the data", "the model has no entry")
        values = np.where(absent, term.missing, values)
    return values


@dataclass(frozen=True)
class CurveTerm:
    """Piecewise-linear in the feature: straight lines between (knot, value) pairs."""

    feature: str
    knots: tuple[float, ...]
    values: tuple[float, ...]
    lower: tuple[float, ...] | None = None
    upper: tuple[float, ...] | None = None
    missing: float | None = None
    missing_band: tuple[float, float] | None = None
    kind: ClassVar[str] = "curve"

    def __post_init__(self) -> None:
        knots = np.asarray(self.knots, dtype=float)
        if len(knots) == 0 or len(knots) != len(self.values):
            raise ModelFileError(f"curve '{self.feature}': needs as many values as knots (≥1)")
        if np.any(np.diff(knots) <= 0):
            raise ModelFileError(f"curve '{self.feature}': knots must be strictly increasing")
        _band(self, knots)

    def evaluate(self, column: np.ndarray) -> np.ndarray:
        column = np.asarray(column, dtype=float)
        values = np.interp(column, self.knots, self.values)
        return _with_missing(self, column, values, np.isnan(column))

    def shifted(self, delta: float) -> CurveTerm:
        return replace(self, **_shift_all(self, delta))


@dataclass(frozen=True)
class StepTerm:
    """Piecewise-constant: value i applies to edges[i-1] < x <= edges[i].

    `edges` are the n-1 inner thresholds of n bins; the first bin runs down to
    minus infinity and the last up to plus infinity.
    """

    feature: str
    edges: tuple[float, ...]
    values: tuple[float, ...]
    lower: tuple[float, ...] | None = None
    upper: tuple[float, ...] | None = None
    missing: float | None = None
    missing_band: tuple[float, float] | None = None
    kind: ClassVar[str] = "steps"

    def __post_init__(self) -> None:
        if len(self.values) != len(self.edges) + 1:
            raise ModelFileError(f"steps '{self.feature}': needs one more value than edges")
        if np.any(np.diff(np.asarray(self.edges, dtype=float)) <= 0):
            raise ModelFileError(f"steps '{self.feature}': edges must be strictly increasing")
        _band(self, np.asarray(self.values))

    def bin_of(self, column: np.ndarray) -> np.ndarray:
        return np.searchsorted(np.asarray(self.edges), np.asarray(column, dtype=float),
                               side="left")

    def evaluate(self, column: np.ndarray) -> np.ndarray:
        column = np.asarray(column, dtype=float)
        values = np.asarray(self.values)[self.bin_of(column)]
        return _with_missing(self, column, values, np.isnan(column))

    def shifted(self, delta: float) -> StepTerm:
        return replace(self, **_shift_all(self, delta))


@dataclass(frozen=True)
class LevelsTerm:
    """One value per category level, and a value for a level never seen in training."""

    feature: str
    levels: tuple[str, ...]
    values: tuple[float, ...]
    unseen: float = 0.0
    lower: tuple[float, ...] | None = None
    upper: tuple[float, ...] | None = None
    missing: float | None = None
    missing_band: tuple[float, float] | None = None
    kind: ClassVar[str] = "levels"

    def __post_init__(self) -> None:
        if len(self.levels) != len(self.values) or not self.levels:
            raise ModelFileError(f"levels '{self.feature}': needs one value per level (≥1)")
        if len(set(self.levels)) != len(self.levels):
            raise ModelFileError(f"levels '{self.feature}': a level is listed twice")
        _band(self, np.asarray(self.values))

    def evaluate(self, column: np.ndarray) -> np.ndarray:
        column = np.asarray(column, dtype=object)
        absent = pd.isna(column)
        # each distinct value looked up once (as get_indexer on every row would find it)
        codes, distinct = pd.factorize(column)  # a missing value's code -1 reads the -1
        position = np.r_[pd.Index(self.levels).get_indexer(distinct), -1][codes]
        unseen = (position < 0) & ~absent
        values = np.asarray(self.values, dtype=float)[np.where(unseen, 0, position)]
        if unseen.any():
            strange = sorted({str(v) for v in np.asarray(column, dtype=object)[unseen]})[:5]
            warnings.warn(
                f"feature '{self.feature}': {plural(int(unseen.sum()), 'row')} with a level "
                f"never seen in training ({', '.join(map(value_text, strange))}); scored with the "
                f"unseen-level value {round(self.unseen, 12) + 0.0:.4g}",  # no -3e-18 noise
                UnseenLevelWarning, stacklevel=3,
            )
            values[unseen] = self.unseen
        return _with_missing(self, column, values, absent)

    def shifted(self, delta: float) -> LevelsTerm:
        changes = _shift_all(self, delta)
        changes["unseen"] = float(self.unseen - delta)
        return replace(self, **changes)


Term = CurveTerm | StepTerm | LevelsTerm
TERM_TYPES: dict[str, type] = {t.kind: t for t in (CurveTerm, StepTerm, LevelsTerm)}


def _shift_all(term: Term, delta: float) -> dict[str, Any]:
    changes: dict[str, Any] = {"values": _floats(np.asarray(term.values) - delta)}
    for name in ("lower", "upper"):
        band = getattr(term, name)
        if band is not None:
            changes[name] = _floats(np.asarray(band) - delta)
    if term.missing is not None:
        changes["missing"] = float(term.missing - delta)
    if term.missing_band is not None:
        changes["missing_band"] = _floats(np.asarray(term.missing_band) - delta)
    return changes


def term_to_dict(term: Term) -> dict[str, Any]:
    """A term as plain JSON-ready data."""
    data: dict[str, Any] = {"feature": term.feature, "kind": term.kind}
    if isinstance(term, CurveTerm):
        data["knots"] = list(term.knots)
    elif isinstance(term, StepTerm):
        data["edges"] = list(term.edges)
    else:
        data["levels"] = list(term.levels)
        data["unseen"] = term.unseen
    data["values"] = list(term.values)
    for name in ("lower", "upper"):
        if getattr(term, name) is not None:
            data[name] = list(getattr(term, name))
    if term.missing is not None:
        data["missing"] = term.missing
    if term.missing_band is not None:
        data["missing_band"] = list(term.missing_band)
    return data


def term_from_dict(data: Mapping[str, Any]) -> Term:
    """Rebuild a term from `term_to_dict` output."""
    kind = data.get("kind")
    if kind not in TERM_TYPES:
        raise ModelFileError(f"unknown term kind {kind!r}")
    try:
        band: dict[str, Any] = {name: _floats(data[name]) for name in ("lower", "upper")
                                if name in data}
        if data.get("missing") is not None:
            band["missing"] = float(data["missing"])
        if data.get("missing_band") is not None:
            band["missing_band"] = _floats(data["missing_band"])
        if kind == "curve":
            return CurveTerm(str(data["feature"]), _floats(data["knots"]),
                             _floats(data["values"]), **band)
        if kind == "steps":
            return StepTerm(str(data["feature"]), _floats(data["edges"]),
                            _floats(data["values"]), **band)
        return LevelsTerm(str(data["feature"]), tuple(str(v) for v in data["levels"]),
                          _floats(data["values"]), float(data.get("unseen", 0.0)), **band)
    except (KeyError, TypeError, ValueError) as exc:
        raise ModelFileError(f"term {data.get('feature')!r} is incomplete: {exc}") from None


# ---------------------------------------------------------------- profiles


@dataclass(frozen=True)
class FeatureProfile:
    """What the training data looked like for one feature.

    Numeric features keep 101 percentiles (0%, 1%, ..., 100%), the mean and the
    median absolute deviation, and, when they take few distinct values (flags,
    small counts), the count of each value; categories keep their level counts.
    """

    feature: str
    kind: str
    percentiles: tuple[float, ...] = ()
    mean: float | None = None
    spread: float | None = None
    level_counts: tuple[tuple[str, int], ...] = ()
    value_counts: tuple[tuple[float, int], ...] = ()
    missing: int = 0
    rows: int = 0

    @property
    def missing_share(self) -> float | None:
        """The share of training rows with no value (None when the profile predates it)."""
        return self.missing / self.rows if self.rows else None

    @property
    def minimum(self) -> float:
        return self.percentiles[0]

    @property
    def maximum(self) -> float:
        return self.percentiles[-1]

    def percentile_of(self, values: Sequence[float] | np.ndarray) -> np.ndarray:
        """Each value's training percentile, ties counted half: 100 x (rows below it + half
        the rows equal to it) / rows, the mid-rank of scipy.stats.percentileofscore(kind=
        "mean"). Every reader of the profile turns values into percentiles through this.

        Exact from `value_counts` when the profile keeps them. Otherwise read off the 101
        stored percentiles: a run of equal stored percentiles k..m at v is a tie, and v gets
        (k + m) / 2; between two stored values the rank runs linearly from the last percent
        at the lower to the first at the upper, within about one percentage point (one 1%
        slice of the rows) of the exact rank. Below the minimum 0, above the maximum 100.
        The share of rows at or below x is the rank just above x (`np.nextafter(x, inf)`).
        The way back, a percentile's value, is the stored table read linearly
        (numpy.percentile's own convention), which this rank inverts outside ties.
        """
        given = np.asarray(values, dtype=float)
        values = given.ravel()
        if self.value_counts:
            points, before = self._rank_table
            below = before[np.searchsorted(points, values, side="left")]
            upto = before[np.searchsorted(points, values, side="right")]
            return (100.0 * (below + upto) / (2.0 * before[-1])).reshape(given.shape)
        if not self.percentiles:
            raise OptionError(f"'{self.feature}' has no training percentiles (a category?)")
        points, low, high = self._rank_table
        out = np.full(values.shape, 50.0)
        if len(points) > 1:
            right = np.clip(np.searchsorted(points, values, side="left"), 1, len(points) - 1)
            left = right - 1
            with np.errstate(invalid="ignore", over="ignore"):  # values beyond the ends: below
                share = (values - points[left]) / (points[right] - points[left])
                out = high[left] + share * (low[right] - high[left])
        at = np.minimum(np.searchsorted(points, values, side="left"), len(points) - 1)
        tied = points[at] == values  # a stored value (nan is none)
        out[tied] = ((low + high) / 2.0)[at[tied]]
        out[values < points[0]] = 0.0
        out[values > points[-1]] = 100.0
        return out.reshape(given.shape)

    @functools.cached_property
    def _rank_table(self) -> tuple[np.ndarray, ...]:
        """What `percentile_of` reads, built once per profile: the distinct values and the
        rows before each (from `value_counts`), or the distinct stored percentiles with the
        first and last percent at each."""
        if self.value_counts:
            pairs = sorted(self.value_counts)
            points = np.array([v for v, _ in pairs], dtype=float)
            before = np.concatenate([[0.0], np.cumsum([c for _, c in pairs], dtype=float)])
            return points, before
        table = np.asarray(self.percentiles, dtype=float)
        grid = np.linspace(0.0, 100.0, len(table))
        points, first = np.unique(table, return_index=True)
        low = grid[first]  # the first and last percent at each distinct stored value
        high = grid[len(table) - 1 - np.unique(table[::-1], return_index=True)[1]]
        return points, low, high

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {"feature": self.feature, "kind": self.kind}
        if self.percentiles:
            data.update(percentiles=list(self.percentiles), mean=self.mean,
                        median_absolute_deviation=self.spread)
        if self.level_counts:
            data["level_counts"] = {level: count for level, count in self.level_counts}
        if self.value_counts:
            data["value_counts"] = [[value, count] for value, count in self.value_counts]
        if self.rows:
            data.update(rows=self.rows, missing=self.missing)
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> FeatureProfile:
        counts = data.get("level_counts", {})
        return cls(
            feature=str(data["feature"]), kind=str(data["kind"]),
            percentiles=_floats(data.get("percentiles", ())),
            mean=data.get("mean"), spread=data.get("median_absolute_deviation"),
            level_counts=tuple((str(k), int(v)) for k, v in counts.items()),
            value_counts=tuple((float(v), int(c)) for v, c in data.get("value_counts", ())),
            missing=int(data.get("missing", 0)), rows=int(data.get("rows", 0)),
        )


def profile_features(features: pd.DataFrame, schema: Schema,
                     runs: dict[str, tuple[np.ndarray, np.ndarray]] | None = None,
                     ) -> tuple[FeatureProfile, ...]:
    """Training percentiles, mean, spread and level counts of every used feature, over the
    rows that have a value, and how many rows have none. Given `runs`, each numeric
    column's distinct present values and their counts (as np.unique gives them) are put
    there, from the one sort the profile makes."""
    profiles = []
    for name in features.columns:
        spec = schema.feature(name)
        column = features[name]
        absent = column.isna().to_numpy()
        counted = {"missing": int(absent.sum()), "rows": int(len(column))}
        if spec.kind == "category":
            counts = column.value_counts()
            ordered = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
            profiles.append(FeatureProfile(name, spec.kind,
                                           level_counts=tuple((str(k), int(v))
                                                              for k, v in ordered), **counted))
            continue
        values = column.to_numpy(dtype=float)[~absent]
        if len(values) == 0:
            raise DataError(f"column '{name}' has no values at all; drop it or mark it "
                            "ignore = true in the schema")
        grid = np.linspace(0, 100, PERCENTILE_POINTS)
        mean = float(values.mean())  # in row order (a sum's rounding depends on its order)
        values = np.sort(values)  # once: percentiles then select from sorted values, fast
        percentiles = sorted_percentiles(values, grid)
        median = sorted_median(values)
        first = np.flatnonzero(np.r_[True, values[1:] != values[:-1]])  # as np.unique
        distinct, counts = values[first], np.diff(np.r_[first, len(values)])
        if runs is not None:
            runs[name] = (distinct, counts)
        value_counts = (tuple((float(v), int(c)) for v, c in zip(distinct, counts, strict=True))
                        if len(distinct) <= FEW_VALUES else ())
        profiles.append(FeatureProfile(
            name, spec.kind, percentiles=_floats(percentiles), mean=mean,
            spread=deviation_median(values, median), value_counts=value_counts,
            **counted,
        ))
    return tuple(profiles)


# ---------------------------------------------------------------- the model


@dataclass(frozen=True)
class AdditiveModel:
    """Intercept, link and one table per feature; scores frames exactly as its tables say.

    `pairs` are the two-feature tables (glassbox.core.pairs), centred along each axis;
    `contributions` gives each pair a column named by `pair_name`.

    `cells` summarise the training rows under numeric terms exactly (see
    `glassbox.core.cells`); models fitted before they existed have none. `baseline` is the
    development summary monitoring compares periods with (`glassbox.explaining.baseline`); models
    fitted before it existed have none.
    """

    link: str
    intercept: float
    terms: tuple[Term, ...]
    schema: Schema
    profiles: tuple[FeatureProfile, ...] = ()
    metadata: Mapping[str, Any] = field(default_factory=dict)
    cells: tuple[TermCells, ...] = ()
    baseline: Baseline | None = None
    pairs: tuple[PairTerm, ...] = ()

    def __post_init__(self) -> None:
        if self.link not in LINKS:
            raise ModelFileError(f"unknown link {self.link!r} (expected logit or identity)")
        names = [t.feature for t in self.terms]
        if len(set(names)) != len(names):
            raise ModelFileError("a feature has more than one term")
        used = {f.name for f in self.schema.used_features}
        stray = [n for n in names if n not in used]
        if stray:
            raise ModelFileError(f"{noun(len(stray), 'term')} for {', '.join(stray)} which the "
                                 "schema does not use")
        summarised = [c.feature for c in self.cells]
        if len(set(summarised)) != len(summarised) or not set(summarised) <= used:
            raise ModelFileError("training cells must belong to features the schema uses, "
                                 "one summary per feature")
        seen: set[frozenset[str]] = set()
        for pair in self.pairs:
            lacking = [f for f in pair.features if f not in names]
            if lacking:
                raise ModelFileError(f"pair '{pair.name}': {', '.join(lacking)} has no main "
                                     "term (every feature of a pair has one)")
            if frozenset(pair.features) in seen:
                raise ModelFileError(f"pair '{pair.name}' is listed twice")
            seen.add(frozenset(pair.features))

    @property
    def features(self) -> tuple[str, ...]:
        return tuple(t.feature for t in self.terms)

    @property
    def task(self) -> str:
        return "classification" if self.link == "logit" else "regression"

    def term(self, feature: str) -> Term:
        for term in self.terms:
            if term.feature == feature:
                return term
        raise OptionError(f"the model has no term for '{feature}' "
                          f"(its features: {', '.join(self.features)})")

    @property
    def parts(self) -> tuple[str, ...]:
        """The contribution columns: each main term's feature, then each pair's name."""
        return self.features + tuple(p.name for p in self.pairs)

    def pair(self, first: str, second: str) -> PairTerm:
        """The pair of two features, in either order."""
        for pair in self.pairs:
            if set(pair.features) == {first, second}:
                return pair
        raise OptionError(f"the model has no pair of '{first}' and '{second}'")

    def profile(self, feature: str) -> FeatureProfile:
        for profile in self.profiles:
            if profile.feature == feature:
                return profile
        raise OptionError(f"the model keeps no training profile for '{feature}'")

    def cells_of(self, feature: str) -> TermCells | None:
        """The training cells under a feature's term, if the model keeps them."""
        return next((c for c in self.cells if c.feature == feature), None)

    def encode(self, frame: pd.DataFrame, source: str | None = None) -> pd.DataFrame:
        """Validate and type the model's feature columns of a raw frame."""
        if not isinstance(frame, pd.DataFrame):
            raise DataError("expected a pandas DataFrame of feature columns")
        encoded = prepare(frame, self.schema, require_target=False, source=source,
                          features=self.features).features
        self.check_missing(encoded, source or frame.attrs.get("source") or "the data")
        return encoded

    def check_missing(self, encoded: pd.DataFrame, where: str) -> None:
        """Refuse rows missing a feature whose term learned no missing-value entry."""
        for term in self.terms:
            if term.missing is None:
                refuse_missing(term.feature, encoded[term.feature].isna().to_numpy(), where,
                               "the model has no entry")

    def contributions(self, frame: pd.DataFrame, source: str | None = None) -> pd.DataFrame:
        """One column per term: what each feature adds to the score of each row (then one
        per pair, named by `pair_name`)."""
        encoded = self.encode(frame, source)
        return self.contributions_encoded(encoded)

    def contributions_encoded(self, encoded: pd.DataFrame) -> pd.DataFrame:
        """Contributions for a frame already typed by `encode`."""
        columns = {t.feature: t.evaluate(encoded[t.feature].to_numpy()) for t in self.terms}
        for pair in self.pairs:
            columns[pair.name] = pair.evaluate_frame(encoded)
        return pd.DataFrame(columns, index=encoded.index, columns=list(self.parts))

    def score(self, frame: pd.DataFrame, source: str | None = None) -> np.ndarray:
        """The score on the link scale (log-odds for classification)."""
        return self.intercept + self.contributions(frame, source).sum(axis=1).to_numpy()

    def score_encoded(self, encoded: pd.DataFrame) -> np.ndarray:
        """The score of a frame already typed by `encode` (the terms added in order)."""
        total = np.full(len(encoded), float(self.intercept))
        for term in self.terms:
            total += term.evaluate(encoded[term.feature].to_numpy())
        for pair in self.pairs:
            total += pair.evaluate_frame(encoded)
        return total

    def probability(self, frame: pd.DataFrame, source: str | None = None) -> np.ndarray:
        """Probability of the positive class (classification models only)."""
        if self.link != "logit":
            raise OptionError("a regression model has no probability; use score")
        return logistic(self.score(frame, source))

    def predict(self, frame: pd.DataFrame, source: str | None = None) -> np.ndarray:
        """Probability for classification, the predicted value for regression."""
        score = self.score(frame, source)
        return logistic(score) if self.link == "logit" else score

    def inverse_link(self, score: np.ndarray) -> np.ndarray:
        return logistic(score) if self.link == "logit" else np.asarray(score)


def refuse_missing(feature: str, absent: np.ndarray, where: str, holder: str) -> None:
    """Raise a DataError naming the rows where `feature` has no value, if any; `holder`
    says what lacks an entry for it ("the model has no entry")."""
    if absent.any():
        raise DataError(
            f"{where}: column '{feature}' has {plural(int(absent.sum()), 'missing value')} in "
            f"{rows_text(absent)}, and {holder} for a missing '{feature}' (its training "
            "data had none); supply the values, or give the feature a fill value in the "
            "schema")


def centre_terms(
    terms: Sequence[Term], encoded: pd.DataFrame
) -> tuple[tuple[Term, ...], float]:
    """Shift every term to mean zero over the rows; return the terms and the total shift."""
    centred = []
    total = 0.0
    for term in terms:
        mean = float(np.mean(term.evaluate(encoded[term.feature].to_numpy())))
        centred.append(term.shifted(mean))
        total += mean
    return tuple(centred), total
