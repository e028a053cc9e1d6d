"""The development baseline a model file carries for monitoring.

At fit time the training rows are summarised once, so that monitoring a later period needs
only the model file: for each feature, how the rows fell into its bins (a steps term's own
steps, a curve's deciles, a category's levels; rows with no value in a bin of their own),
and each term's mean, mean absolute contribution and spread (standard deviation); for the
score, its deciles and the rows in each; for each pairwise table, how the rows fell into
its cells (`pair_cells`) and its mean, mean absolute contribution and spread. Counts are
whole numbers and means are exact
(`glassbox.core.exact`), so a period identical to the training rows shows no change at all.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from glassbox.core.errors import DataError, ModelFileError
from glassbox.core.exact import ExactSum, exact_variance, weighted_sums

if TYPE_CHECKING:
    from glassbox.core.additive import AdditiveModel, Term
    from glassbox.core.pairs import Axis, PairTerm

MISSING_BIN = "missing"  # the bin of rows with no value (always the last bin)
NEW_LEVEL_BIN = "new level"  # a category's bin for levels never seen in training
DECILES = tuple(q / 10 for q in range(1, 10))
MOST_STEPS = 20  # a steps term with more bins is grouped at its own edges next to the deciles
SOURCES = ("steps", "deciles", "levels")
SHORT_DIGITS = 4  # score decile labels: significant digits (the file keeps every digit)
TRAINING_ROWS = "training rows"


FEW_EDGES = 64  # up to this many edges, comparing with each beats a binary search


def edges_below(edges: np.ndarray, values: np.ndarray) -> np.ndarray:
    """How many edges lie below each value: np.searchsorted(edges, values, side="left")
    for values that are not NaN (a NaN gets 0 here, so callers mark rows with no value).
    With few edges, one comparison per edge over the whole column: about five times
    faster than numpy's binary search row by row."""
    if len(edges) > FEW_EDGES:
        return np.where(np.isnan(values), 0, np.searchsorted(edges, values, side="left"))
    below = np.zeros(len(values), dtype=np.int8)  # FEW_EDGES fits
    for edge in edges:
        np.add(below, values > edge, out=below, casting="unsafe")
    return below.astype(np.int64)


def number_text(value: float) -> str:
    """A bin edge as labels show it: the shortest text that reads back as the same float."""
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


def decile_edges(values: np.ndarray) -> tuple[float, ...]:
    """The distinct deciles of `values` below their largest, each a value of the column (the
    smallest with at least that share of values at or below it), so that no bin is empty on
    the rows they came from; none for a constant column."""
    values = np.asarray(values, dtype=float)
    values = values[~np.isnan(values)]
    if len(values) == 0:
        return ()
    edges = np.unique(np.quantile(values, DECILES, method="inverted_cdf"))  # data values
    return tuple(float(e) for e in edges[edges < values.max()])


@lru_cache(maxsize=8)
def _decile_ranks(count: int) -> np.ndarray:
    """The ranks (from 0) np.quantile's inverted_cdf deciles take among `count` values:
    its deciles of 0, 1, ..., count - 1."""
    return np.quantile(np.arange(count, dtype=float), DECILES,
                       method="inverted_cdf").astype(np.int64)


def decile_edges_of_runs(distinct: np.ndarray, counts: np.ndarray) -> tuple[float, ...]:
    """`decile_edges` of the present values given as sorted distinct values and counts."""
    if len(distinct) == 0:
        return ()
    ranks = _decile_ranks(int(counts.sum()))
    edges = np.unique(distinct[np.searchsorted(np.cumsum(counts), ranks, side="right")])
    return tuple(float(e) for e in edges[edges < distinct[-1]])


def edge_labels(edges: tuple[float, ...], short: bool = False) -> tuple[str, ...]:
    """Labels of the bins between inner edges: `<= a`, `(a, b]`, ..., `> z`; `short`
    rounds the edges to the fewest significant digits (at least SHORT_DIGITS) that keep
    them apart (for scores, whose deciles are not values anyone typed)."""
    if not edges:
        return ("any value",)
    texts = [number_text(e) for e in edges]
    for digits in range(SHORT_DIGITS, 18) if short else ():
        rounded = [f"{e:.{digits}g}" for e in edges]
        if len(set(rounded)) == len(rounded):
            texts = rounded
            break
    middle = [f"({low}, {high}]" for low, high in zip(texts, texts[1:], strict=False)]
    return (f"<= {texts[0]}", *middle, f"> {texts[-1]}")


@dataclass(frozen=True)
class FeatureBins:
    """How development rows fell into one feature's bins, and its term's mean contributions.

    Numeric bins follow the steps convention: bin i holds edges[i-1] < x <= edges[i]. A
    category has one bin per level, then NEW_LEVEL_BIN (no development rows by definition);
    every feature ends with MISSING_BIN."""

    feature: str
    source: str
    edges: tuple[float, ...] = ()
    levels: tuple[str, ...] = ()
    counts: tuple[int, ...] = ()
    mean_contribution: float = 0.0
    mean_absolute_contribution: float = 0.0
    contribution_spread: float = 0.0  # standard deviation over development rows

    def __post_init__(self) -> None:
        if self.source not in SOURCES:
            raise ModelFileError(f"baseline of '{self.feature}': unknown bins {self.source!r}")
        if len(self.counts) != len(self.labels):
            raise ModelFileError(f"baseline of '{self.feature}': {len(self.counts)} counts "
                                 f"for {len(self.labels)} bins")
        if self.source == "levels" and self.counts[-2]:
            raise ModelFileError(f"baseline of '{self.feature}': development rows in the "
                                 "bin of levels never seen in development")

    @property
    def labels(self) -> tuple[str, ...]:
        values = ((*self.levels, NEW_LEVEL_BIN) if self.source == "levels"
                  else edge_labels(self.edges))
        return (*values, MISSING_BIN)

    @property
    def rows(self) -> int:
        return int(sum(self.counts))

    @property
    def shares(self) -> np.ndarray:
        counts = np.asarray(self.counts, dtype=float)
        return counts / counts.sum() if counts.sum() else counts

    def bin_index(self, column: np.ndarray) -> np.ndarray:
        """Each value's bin (its position in `labels`) for a column as `prepare` types it."""
        last = len(self.labels) - 1
        if self.source == "levels":
            column = np.asarray(column, dtype=object)
            absent = pd.isna(column)
            place = pd.Index(self.levels).get_indexer(column)
            place = np.where(place < 0, len(self.levels), place)
        else:
            column = np.asarray(column, dtype=float)
            absent = np.isnan(column)
            place = edges_below(np.asarray(self.edges, dtype=float), column)
        return np.where(absent, last, place)

    def count(self, column: np.ndarray) -> np.ndarray:
        """Rows per bin (int64), in the order of `labels`."""
        return np.bincount(self.bin_index(column), minlength=len(self.labels))

    def new_levels(self, column: np.ndarray) -> dict[str, int]:
        """Rows of each level never seen in development (categories only), by level."""
        if self.source != "levels":
            return {}
        column = np.asarray(column, dtype=object)
        unseen = (pd.Index(self.levels).get_indexer(column) < 0) & ~pd.isna(column)
        if not unseen.any():
            return {}
        counts = pd.Series(column[unseen]).astype(str).value_counts()
        return {str(level): int(counts[level]) for level in sorted(counts.index)}

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {"feature": self.feature, "source": self.source}
        if self.source == "levels":
            data["levels"] = list(self.levels)
        else:
            data["edges"] = list(self.edges)
        data.update(counts=list(self.counts), mean_contribution=self.mean_contribution,
                    mean_absolute_contribution=self.mean_absolute_contribution,
                    contribution_spread=self.contribution_spread)
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> FeatureBins:
        return cls(str(data["feature"]), str(data["source"]),
                   tuple(float(e) for e in data.get("edges", ())),
                   tuple(str(v) for v in data.get("levels", ())),
                   tuple(int(c) for c in data["counts"]), float(data["mean_contribution"]),
                   float(data["mean_absolute_contribution"]),
                   float(data["contribution_spread"]))


@dataclass(frozen=True)
class ScoreBins:
    """The score's development deciles, the rows in each bin they make, and its mean."""

    edges: tuple[float, ...]
    counts: tuple[int, ...]
    mean: float

    def __post_init__(self) -> None:
        if len(self.counts) != len(self.edges) + 1:
            raise ModelFileError(f"baseline score: {len(self.counts)} counts for "
                                 f"{len(self.edges) + 1} bins")

    @property
    def labels(self) -> tuple[str, ...]:
        """Rounded for reading (SHORT_DIGITS); the exact edges are in the model file."""
        return edge_labels(self.edges, short=True)

    @property
    def shares(self) -> np.ndarray:
        counts = np.asarray(self.counts, dtype=float)
        return counts / counts.sum() if counts.sum() else counts

    def count(self, score: np.ndarray) -> np.ndarray:
        place = edges_below(np.asarray(self.edges, dtype=float), np.asarray(score, dtype=float))
        return np.bincount(place, minlength=len(self.counts))

    def to_dict(self) -> dict[str, Any]:
        return {"edges": list(self.edges), "counts": list(self.counts), "mean": self.mean}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ScoreBins:
        return cls(tuple(float(e) for e in data["edges"]),
                   tuple(int(c) for c in data["counts"]), float(data["mean"]))


def axis_cells(axis: Axis, column: np.ndarray) -> np.ndarray:
    """Each value's cell along a pair's axis (its position in `axis_cell_labels`): an edge
    bin, a knot's stretch up to the next knot (the first from minus infinity, the last to
    plus infinity), or a level; then, for levels, a level never seen in training; last, no
    value (whether or not the axis has an entry for it)."""
    values_size = axis.values_size
    if axis.kind == "levels":
        column = np.asarray(column, dtype=object)
        absent = np.asarray(pd.isna(column), dtype=bool)
        place = pd.Index(axis.points).get_indexer(column)
        place = np.where(place < 0, values_size, place)
    else:
        column = np.asarray(column, dtype=float)
        absent = np.isnan(column)
        points = np.asarray(axis.points, dtype=float)
        if axis.kind == "edges":
            place = edges_below(points, column)
        else:
            place = np.clip(np.searchsorted(points, column, side="right") - 1, 0,
                            len(points) - 1)
    return np.where(absent, len(axis_cell_labels(axis)) - 1, place)


def axis_cell_labels(axis: Axis) -> tuple[str, ...]:
    if axis.kind == "levels":
        values: tuple[str, ...] = (*map(str, axis.points), NEW_LEVEL_BIN)
    elif axis.kind == "edges":
        values = edge_labels(tuple(float(p) for p in axis.points))
    else:
        texts = [number_text(p) for p in axis.points]
        values = tuple(f"[{low}, {high})" for low, high in zip(texts, texts[1:], strict=False))
        values = (f"< {texts[1]}", *values[1:], f">= {texts[-1]}") if len(texts) > 1 \
            else ("any value",)
    return (*values, MISSING_BIN)


def pair_cells(pair: PairTerm, first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Each row's cell of a pair: first axis's cell x second axis's cells + second's."""
    return (axis_cells(pair.first, first) * len(axis_cell_labels(pair.second))
            + axis_cells(pair.second, second))


def pair_cell_count(pair: PairTerm) -> int:
    return len(axis_cell_labels(pair.first)) * len(axis_cell_labels(pair.second))


@dataclass(frozen=True)
class PairBins:
    """How development rows fell into a pair's cells (`pair_cells`), and its mean
    contributions (as `FeatureBins` keeps them for a feature)."""

    pair: str
    counts: tuple[int, ...]
    mean_contribution: float = 0.0
    mean_absolute_contribution: float = 0.0
    contribution_spread: float = 0.0

    @property
    def rows(self) -> int:
        return int(sum(self.counts))

    def to_dict(self) -> dict[str, Any]:
        return {"pair": self.pair, "counts": list(self.counts),
                "mean_contribution": self.mean_contribution,
                "mean_absolute_contribution": self.mean_absolute_contribution,
                "contribution_spread": self.contribution_spread}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> PairBins:
        return cls(str(data["pair"]), tuple(int(c) for c in data["counts"]),
                   float(data["mean_contribution"]), float(data["mean_absolute_contribution"]),
                   float(data["contribution_spread"]))


def contribution_sums(contributions: np.ndarray) -> tuple[float, float, float]:
    """Mean, mean absolute value and spread (standard deviation), from exact sums."""
    rows = len(contributions)
    positive, negative = ExactSum.split(contributions)
    total = ExactSum(positive.units - negative.units)
    spread = math.sqrt(exact_variance(total, ExactSum.of(contributions * contributions), rows))
    return total.mean(rows) + 0.0, (positive + negative).mean(rows), spread


@dataclass(frozen=True)
class Baseline:
    """What monitoring compares a period with: the development rows, summarised."""

    rows: int
    source: str
    score: ScoreBins
    features: tuple[FeatureBins, ...]
    pairs: tuple[PairBins, ...] = ()  # older baselines (and models without pairs): none

    def __post_init__(self) -> None:
        for bins in (self.score, *self.features, *self.pairs):
            if int(sum(bins.counts)) != self.rows:
                where = getattr(bins, "feature", getattr(bins, "pair", "the score"))
                raise ModelFileError(f"baseline of {where!r}: its bins hold "
                                     f"{int(sum(bins.counts)):,} rows, not {self.rows:,}")

    def feature(self, name: str) -> FeatureBins:
        for bins in self.features:
            if bins.feature == name:
                return bins
        raise KeyError(name)

    def pair(self, name: str) -> PairBins:
        for bins in self.pairs:
            if bins.pair == name:
                return bins
        raise KeyError(name)

    def to_dict(self) -> dict[str, Any]:
        data = {"rows": self.rows, "source": self.source, "score": self.score.to_dict(),
                "features": [bins.to_dict() for bins in self.features]}
        if self.pairs:  # a baseline without pairs is written as before
            data["pairs"] = [bins.to_dict() for bins in self.pairs]
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Baseline:
        return cls(int(data["rows"]), str(data["source"]), ScoreBins.from_dict(data["score"]),
                   tuple(FeatureBins.from_dict(f) for f in data["features"]),
                   tuple(PairBins.from_dict(p) for p in data.get("pairs", ())))


def feature_bins(term: Term, column: np.ndarray, contributions: np.ndarray,
                 runs: tuple[np.ndarray, np.ndarray] | None = None) -> FeatureBins:
    """One feature's development bins and mean contributions, from its typed column;
    `runs` may give a numeric column's sorted distinct present values and their counts,
    from which the deciles and the exact sums are read instead of from every row."""
    from glassbox.core.additive import LevelsTerm, StepTerm

    deciles = (lambda: decile_edges_of_runs(*runs)) if runs is not None \
        else (lambda: decile_edges(column))
    if isinstance(term, LevelsTerm):
        layout: dict[str, Any] = {"source": "levels", "levels": tuple(term.levels)}
    elif isinstance(term, StepTerm) and len(term.edges) + 1 <= MOST_STEPS:
        layout = {"source": "steps", "edges": tuple(term.edges)}
    elif isinstance(term, StepTerm):
        layout = {"source": "steps", "edges": _grouped_steps(term.edges, deciles())}
    else:
        layout = {"source": "deciles", "edges": deciles()}
    empty = FeatureBins(term.feature, counts=(0,) * (len(_labels_of(layout)) + 1), **layout)
    rows = len(contributions)  # + 0.0 below: a mean of zero is never shown as -0
    if runs is not None and not isinstance(term, LevelsTerm):
        # each distinct value's contribution (a term is evaluated value by value) times its
        # rows, and the rows with no value: the same exact sums as over every row
        distinct, counts = runs
        absent = rows - int(counts.sum())
        values = np.asarray(term.evaluate(np.r_[distinct, [np.nan] * bool(absent)]),
                            dtype=float)
        weights = np.r_[counts, [absent] * bool(absent)]
        positive, negative = weighted_sums(values, weights)
        squares = weighted_sums(values * values, weights)[0]
    else:
        positive, negative = ExactSum.split(contributions)
        squares = ExactSum.of(contributions * contributions)
    total = ExactSum(positive.units - negative.units)
    spread = math.sqrt(exact_variance(total, squares, rows))
    return FeatureBins(term.feature, counts=tuple(int(c) for c in empty.count(column)),
                       mean_contribution=total.mean(rows) + 0.0,
                       mean_absolute_contribution=(positive + negative).mean(rows),
                       contribution_spread=spread, **layout)


def _labels_of(layout: Mapping[str, Any]) -> tuple[str, ...]:
    if layout["source"] == "levels":
        return (*layout["levels"], NEW_LEVEL_BIN)
    return edge_labels(layout["edges"])


def _grouped_steps(edges: tuple[float, ...], deciles: tuple[float, ...]) -> tuple[float, ...]:
    """At most about ten groups of whole steps: at each development decile, the term's own
    first edge at or above it (so every group is a union of the term's steps)."""
    inner = np.asarray(edges, dtype=float)
    chosen = {float(inner[i]) for q in deciles
              if (i := int(np.searchsorted(inner, q, side="left"))) < len(inner)}
    return tuple(sorted(chosen))


def build_baseline(model: AdditiveModel, encoded: pd.DataFrame, source: str,
                   known: Mapping[str, np.ndarray] | None = None,
                   runs: Mapping[str, tuple[np.ndarray, np.ndarray]] | None = None,
                   ) -> Baseline:
    """The baseline of typed development rows (every one scorable by the model); `known`
    may give each term's (and pair's, by its name) contributions over these rows, already
    evaluated, and `runs`
    each numeric column's sorted distinct present values and counts."""
    features, score = [], None
    for term in model.terms:
        column = encoded[term.feature].to_numpy()
        contributions = (known[term.feature] if known is not None
                         else np.asarray(term.evaluate(column), dtype=float))
        score = contributions.copy() if score is None else score + contributions
        features.append(feature_bins(term, column, contributions,
                                     (runs or {}).get(term.feature)))
    pairs = []
    for pair in model.pairs:  # added after the terms, as the model scores
        first, second = (encoded[name].to_numpy() for name in pair.features)
        contributions = (known[pair.name] if known is not None and pair.name in known
                         else np.asarray(pair.evaluate(first, second), dtype=float))
        score = contributions.copy() if score is None else score + contributions
        cells = np.bincount(pair_cells(pair, first, second), minlength=pair_cell_count(pair))
        pairs.append(PairBins(pair.name, tuple(int(c) for c in cells),
                              *contribution_sums(contributions)))
    rows = len(encoded)
    score = np.full(rows, float(model.intercept)) + (0.0 if score is None else score)
    edges = decile_edges(score)
    counts = np.bincount(np.searchsorted(np.asarray(edges), score, side="left"),
                         minlength=len(edges) + 1)
    return Baseline(rows, source, ScoreBins(edges, tuple(int(c) for c in counts),
                                            ExactSum.of(score).mean(rows)), tuple(features),
                    tuple(pairs))


def baseline_from_file(model: AdditiveModel, path: str | Path) -> Baseline:
    """The baseline of a development data file (`--baseline DATA`), every row scorable."""
    from glassbox.core.schema import read_table

    frame = read_table(path)
    encoded = model.encode(frame, source=str(path))
    return build_baseline(model, encoded, str(path))


def model_baseline(model: AdditiveModel, where: str = "the model file") -> Baseline:
    """The baseline the model file carries, or an error saying how to give one."""
    if model.baseline is None:
        raise DataError(f"{where} has no development baseline (it was fitted before glassbox "
                        "stored one): give --baseline DATA, the development sample")
    return model.baseline


def check_baseline(model: AdditiveModel, baseline: Baseline, where: str) -> None:
    """A baseline must describe the model's own features, in its term order."""
    names = tuple(bins.feature for bins in baseline.features)
    if names != model.features:
        raise ModelFileError(f"{where}: its baseline describes {', '.join(names) or 'nothing'}"
                             f", not the model's features {', '.join(model.features)}")
    for term, bins in zip(model.terms, baseline.features, strict=True):
        if (bins.source == "levels") != (term.kind == "levels"):
            raise ModelFileError(f"{where}: the baseline of '{term.feature}' has "
                                 f"{bins.source} bins for a {term.kind} term")
    if model.pairs and not baseline.pairs:
        raise DataError(f"{where} has no baseline for the model's pairs (it was made before "
                        "glassbox kept one): give --baseline DATA, the development sample")
    names = tuple(bins.pair for bins in baseline.pairs)
    if names != tuple(pair.name for pair in model.pairs):
        raise ModelFileError(f"{where}: its baseline describes the pairs "
                             f"{', '.join(names) or 'none'}, not the model's "
                             f"{', '.join(p.name for p in model.pairs) or 'none'}")
    for pair, bins in zip(model.pairs, baseline.pairs, strict=True):
        if len(bins.counts) != pair_cell_count(pair):
            raise ModelFileError(f"{where}: the baseline of '{pair.name}' has "
                                 f"{len(bins.counts)} cells, not {pair_cell_count(pair)}")
