"""Monitoring's unit of work: one block of raw rows to counts per period, which add up.

`count_block` is pure: the same rows give the same counts in any process, and the counts
of a file are the sum of its blocks' counts whatever the block size (bin counts are whole
numbers, every sum of floats is an `ExactSum`), so the local reader and a dask cluster
give identical numbers.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel
from glassbox.core.encoding import _missing_mask, label_text, prepare, rows_text
from glassbox.core.errors import DataError, GlassboxError, UnseenLevelWarning, value_text
from glassbox.core.exact import ExactSum, weighted_sums
from glassbox.explaining.baseline import (
    Baseline,
    FeatureBins,
    edges_below,
    pair_cell_count,
    pair_cells,
)
from glassbox.explaining.cards import PointsCard

EVERY = ("month", "quarter", "year")


@dataclass(frozen=True)
class Plan:
    """Everything a block needs besides its rows (small enough to ship to a worker)."""

    model: AdditiveModel
    baseline: Baseline
    source: str  # the file, for messages
    label: str | None = None  # the period of every row (one file, one period)
    period: str | None = None  # or the column holding each row's period
    every: str | None = None  # month, quarter or year: the period column holds ISO dates
    card: PointsCard | None = None
    outcome: bool = False  # the file has the target column

    @property
    def classification(self) -> bool:
        return self.model.task == "classification"


def _zero() -> ExactSum:
    return ExactSum()


@dataclass(frozen=True)
class Counts:
    """What monitoring keeps of one period's rows: counts and exact sums only, plus the
    (score, outcome) pairs that AUC and KS need (9 bytes per row with an outcome)."""

    rows: int = 0
    scored: int = 0  # rows the model can score (the others lack a value it has no entry for)
    bins: dict[str, np.ndarray] = field(default_factory=dict)  # per feature (and pair name),
    # the baseline's bins (a pair's cells)
    new_levels: dict[str, dict[str, int]] = field(default_factory=dict)
    contribution: dict[str, ExactSum] = field(default_factory=dict)  # over scored rows
    absolute: dict[str, ExactSum] = field(default_factory=dict)  # |contribution|
    squares: dict[str, ExactSum] = field(default_factory=dict)  # contribution squared
    points: dict[str, ExactSum] = field(default_factory=dict)  # with a card
    score_bins: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    score: ExactSum = field(default_factory=_zero)
    outcome_rows: int = 0  # scored rows with an outcome
    positives: int = 0
    observed: ExactSum = field(default_factory=_zero)  # sum of the outcome
    observed_squares: ExactSum = field(default_factory=_zero)  # regression
    predicted: ExactSum = field(default_factory=_zero)  # probability or prediction
    pair_scores: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.float64))
    pair_labels: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int8))

    def __add__(self, other: Counts) -> Counts:
        def arrays(a: dict, b: dict) -> dict:
            return {k: a[k] + b[k] if k in a and k in b else a.get(k, b.get(k))
                    for k in dict.fromkeys([*a, *b])}

        def levels(a: dict, b: dict) -> dict:
            out = {k: dict(v) for k, v in a.items()}
            for name, found in b.items():
                mine = out.setdefault(name, {})
                for level, rows in found.items():
                    mine[level] = mine.get(level, 0) + rows
            return out

        return Counts(
            rows=self.rows + other.rows, scored=self.scored + other.scored,
            bins=arrays(self.bins, other.bins),
            new_levels=levels(self.new_levels, other.new_levels),
            contribution=arrays(self.contribution, other.contribution),
            absolute=arrays(self.absolute, other.absolute),
            squares=arrays(self.squares, other.squares),
            points=arrays(self.points, other.points),
            score_bins=(self.score_bins + other.score_bins if len(self.score_bins) and
                        len(other.score_bins) else
                        (self.score_bins if len(self.score_bins) else other.score_bins)),
            score=self.score + other.score,
            outcome_rows=self.outcome_rows + other.outcome_rows,
            positives=self.positives + other.positives,
            observed=self.observed + other.observed,
            observed_squares=self.observed_squares + other.observed_squares,
            predicted=self.predicted + other.predicted,
            pair_scores=np.concatenate([self.pair_scores, other.pair_scores]),
            pair_labels=np.concatenate([self.pair_labels, other.pair_labels]))


def add_counts(into: dict[str, Counts], more: dict[str, Counts]) -> dict[str, Counts]:
    """Counts per period, summed period by period (periods in order of first arrival)."""
    out = dict(into)
    for period, counts in more.items():
        out[period] = out[period] + counts if period in out else counts
    return out


# ---------------------------------------------------------------- periods


def period_labels(block: pd.DataFrame, plan: Plan) -> np.ndarray:
    """Each row's period as text: the file's label, or the period column's value (a number
    as `label_text` writes it, so 3 and 3.0 agree), or its date's month, quarter or year."""
    if plan.period is None:
        return np.full(len(block), plan.label, dtype=object)
    column = block[plan.period]
    blank = _missing_mask(column)
    if blank.any():
        raise DataError(f"{plan.source}: the period column '{plan.period}' is blank in "
                        f"{rows_text(blank)}; every row needs a period")
    codes, distinct = pd.factorize(column)  # each distinct value read once
    if plan.every is None:
        return np.array([label_text(value) for value in distinct], dtype=object)[codes]
    text = pd.Series(distinct, dtype=object).astype(str).str.strip()
    try:
        dates = pd.to_datetime(text, format="ISO8601", errors="coerce")
    except (ValueError, TypeError):  # e.g. times with different UTC offsets
        raise DataError(f"{plan.source}: the period column '{plan.period}' mixes time zones "
                        "(or kinds of date); give dates as YYYY-MM-DD for --every") from None
    bad = dates.isna().to_numpy()
    if bad.any():
        rows = bad[codes]
        raise DataError(f"{plan.source}: the period column '{plan.period}' should hold dates "
                        f"(ISO 8601, e.g. 2024-03-31) for --every {plan.every} but has "
                        f"{value_text(column[rows].iloc[0])} in {rows_text(rows)}")
    years = dates.dt.year.to_numpy()
    if plan.every == "year":
        labels = years.astype(str)
    elif plan.every == "quarter":
        labels = np.char.add(np.char.add(years.astype(str), "-Q"),
                             ((dates.dt.month.to_numpy() - 1) // 3 + 1).astype(str))
    else:
        labels = np.char.add(np.char.add(years.astype(str), "-"),
                             np.char.zfill(dates.dt.month.to_numpy().astype(str), 2))
    return labels.astype(object)[codes]


def ordered_periods(labels: list[str]) -> list[str]:
    """Periods in order: numerically when every label is a number, else as text."""
    try:
        numbers = [float(label) for label in labels]
    except ValueError:
        return sorted(labels)
    return [label for _, label in sorted(zip(numbers, labels, strict=True))]


# ---------------------------------------------------------------- one block


def positive_label(plan: Plan) -> str | None:
    positive = plan.model.schema.target.positive
    return None if positive is None else label_text(positive)


def count_block(block: pd.DataFrame, plan: Plan) -> dict[str, Counts]:
    """The counts of one block of raw rows, per period (in order of first appearance).

    Rows the model cannot score (no value where its term has no missing-value entry) count
    in the feature bins and missing rates but not in the score, contributions or
    outcomes."""
    model, baseline = plan.model, plan.baseline
    if len(block) == 0:  # a dask partition may be empty
        return {}
    labels = period_labels(block, plan)
    numbers, categories = _typed(block, plan)
    present = {name: (~pd.isna(categories[name][1]))[categories[name][0]]
               if name in categories else ~numbers[name].isna().to_numpy()
               for name in model.features}
    scored = np.ones(len(block), dtype=bool)
    for term in model.terms:
        if term.missing is None:
            scored &= present[term.feature]
    for pair in model.pairs:  # an axis with no missing entry refuses a missing value
        for axis in (pair.first, pair.second):
            if not axis.missing:
                scored &= present[axis.feature]
    if plan.card is not None:
        for table in plan.card.features:
            if table.missing_points is None:
                scored &= present[table.feature]
    every_row = bool(scored.all())

    def scored_column(name: str) -> np.ndarray:
        if name in categories:
            codes, typed = categories[name]
            return typed[codes if every_row else codes[scored]]
        column = numbers[name].to_numpy()
        return column if every_row else column[scored]

    with warnings.catch_warnings():  # new levels are counted, not warned about
        warnings.simplefilter("ignore", UnseenLevelWarning)
        keyed = {t.feature: _keyed(t, baseline.feature(t.feature), numbers, categories)
                 for t in model.terms}
        parts = {t.feature: (keyed[t.feature].contributions[
                     keyed[t.feature].key if every_row else keyed[t.feature].key[scored]]
                     if keyed[t.feature].key is not None
                     else t.evaluate(scored_column(t.feature)))
                 for t in model.terms}
        points = ({t.feature: t.points_of(scored_column(t.feature)).astype(float)
                   for t in plan.card.features} if plan.card is not None else {})
        for pair in model.pairs:
            parts[pair.name] = pair.evaluate(scored_column(pair.first.feature),
                                             scored_column(pair.second.feature), plan.source)
    total = np.zeros(int(scored.sum()))  # the order the baseline adds them in
    for index, name in enumerate(model.parts):
        total = parts[name] if index == 0 else total + parts[name]
    score = np.full(len(total), float(model.intercept)) + total
    outcome = _outcomes(block, plan, scored)
    score_edges = np.asarray(baseline.score.edges, dtype=float)
    codes, periods = pd.factorize(labels, sort=False)
    scored_codes = codes[scored]
    tallies = {}  # keyed features: rows and scored rows per (period, key), in one pass
    for name, k in keyed.items():
        if k.key is not None:
            size, span = len(k.contributions), len(periods) * len(k.contributions)
            cells = codes * size + k.key
            tallies[name] = (np.bincount(cells, minlength=span).reshape(-1, size),
                             np.bincount(cells[scored], minlength=span).reshape(-1, size))
    def every_column(name: str) -> np.ndarray:
        if name in categories:
            codes_, typed = categories[name]
            return typed[codes_]
        return numbers[name].to_numpy()

    cells = {pair.name: pair_cells(pair, every_column(pair.first.feature),
                                   every_column(pair.second.feature)) for pair in model.pairs}
    out: dict[str, Counts] = {}
    for code, period in enumerate(periods):
        rows = codes == code
        mine = scored_codes == code
        whole, whole_scored = bool(rows.all()), bool(mine.all())
        pick = slice(None) if whole_scored else mine
        counts = Counts(rows=int(rows.sum()), scored=int(mine.sum()),
                        score_bins=np.bincount(edges_below(score_edges, score[pick]),
                                               minlength=len(baseline.score.counts)),
                        score=ExactSum.of(score[pick]),
                        points={k: ExactSum.of(v[pick]) for k, v in points.items()})
        for feature in baseline.features:
            k = keyed[feature.feature]
            if k.key is None:
                column = numbers[feature.feature].to_numpy()
                k.count(counts, feature, column if whole else column[rows], None,
                        parts[feature.feature][pick])
            else:
                tally = tallies[feature.feature]
                k.count(counts, feature, None, (tally[0][code], tally[1][code]), None)
        for pair in model.pairs:
            mine_cells = cells[pair.name] if whole else cells[pair.name][rows]
            counts.bins[pair.name] = np.bincount(mine_cells, minlength=pair_cell_count(pair))
            values = parts[pair.name][pick]
            positive, negative = ExactSum.split(values)
            counts.contribution[pair.name] = ExactSum(positive.units - negative.units)
            counts.absolute[pair.name] = positive + negative
            counts.squares[pair.name] = ExactSum.of(values * values)
        if outcome is not None:
            counts = _with_outcomes(counts, plan, outcome, mine, score[pick])
        out[str(period)] = counts
    return out


@dataclass(frozen=True)
class _Keyed:
    """One feature of a block as a key per row, with the contribution and the baseline bin
    of each key: a category's distinct values, or a steps term's own steps (when the
    baseline's edges are some of the term's). Rows are then counted per key, and a
    feature's exact sums are whole multiples of each key's contribution. Without keys
    (`key` None) `contributions` holds the scored rows' contributions."""

    key: np.ndarray | None
    contributions: np.ndarray
    bins: np.ndarray | None = None  # the baseline bin of each key
    levels: tuple[str, ...] = ()  # a category's distinct values (keys beyond: no value)

    def count(self, counts: Counts, feature: FeatureBins, column: np.ndarray | None,
              tally: tuple[np.ndarray, np.ndarray] | None,
              parts: np.ndarray | None) -> None:
        """Add this feature's bins, new levels and exact sums for one period: from its rows'
        `column` and scored rows' contributions `parts`, or (keyed) from its rows and
        scored rows per key, `tally`."""
        name = feature.feature
        if tally is None:
            counts.bins[name] = np.asarray(feature.count(column), dtype=np.int64)
            positive, negative = ExactSum.split(parts)
            squares = ExactSum.of(parts * parts)
        else:
            per_key, weights = tally
            counts.bins[name] = np.bincount(self.bins, weights=per_key,
                                            minlength=len(feature.labels)).astype(np.int64)
            if feature.source == "levels":
                new_bin = len(feature.labels) - 2
                found: dict[str, int] = {}  # two raw values may type to one level
                for index in np.flatnonzero((self.bins == new_bin) & (per_key > 0)):
                    level = self.levels[index]
                    found[level] = found.get(level, 0) + int(per_key[index])
                if found:
                    counts.new_levels[name] = dict(sorted(found.items()))
            positive, negative = weighted_sums(self.contributions, weights)
            squares = weighted_sums(self.contributions * self.contributions, weights)[0]
        counts.contribution[name] = ExactSum(positive.units - negative.units)
        counts.absolute[name] = positive + negative
        counts.squares[name] = squares


def _typed(block: pd.DataFrame, plan: Plan
           ) -> tuple[pd.DataFrame, dict[str, tuple[np.ndarray, np.ndarray]]]:
    """The model's columns typed as `prepare` types them: the numeric ones as a frame; each
    category as a code per row into its distinct raw values, each typed once (text is slow
    row by row). A code past the distinct values means no value."""
    schema = plan.model.schema
    names = plan.model.features
    levels = [name for name in names if schema.feature(name).kind == "category"]
    others = [name for name in names if name not in levels]
    numbers = (prepare(block, schema, require_target=False, source=plan.source,
                       features=others).features if others else pd.DataFrame(index=block.index))
    categories = {}
    for name in levels:
        codes, distinct = pd.factorize(block[name])
        values = list(distinct) + ([None] if (codes < 0).any() else [])
        try:
            typed = prepare(pd.DataFrame({name: pd.Series(values, dtype=object)}), schema,
                            require_target=False, source=plan.source, features=[name])
        except GlassboxError:  # again on the rows, for an error naming the block's rows
            prepare(block, schema, require_target=False, source=plan.source, features=[name])
            raise
        categories[name] = (np.where(codes < 0, len(distinct), codes),
                            typed.features[name].to_numpy(dtype=object))
    return numbers, categories


def _keyed(term, feature: FeatureBins, numbers: pd.DataFrame,
           categories: dict[str, tuple[np.ndarray, np.ndarray]]) -> _Keyed:
    """Keys for a category or a steps term; else the scored rows' contributions later."""
    if term.feature in categories:
        key, typed = categories[term.feature]
        present = ~pd.isna(typed)
        table = np.full(len(typed), 0.0 if term.missing is None else term.missing)
        if present.any():
            table[present] = term.evaluate(typed[present])
        return _Keyed(key, table, feature.bin_index(typed), tuple(str(v) for v in typed))
    edges = np.asarray(getattr(term, "edges", ()), dtype=float)
    if term.kind == "steps" and feature.source != "levels" and np.isin(feature.edges,
                                                                       edges).all():
        values = numbers[term.feature].to_numpy(dtype=float)
        key = edges_below(edges, values)
        key[np.isnan(values)] = len(edges) + 1  # no value: the key after the last step
        representatives = np.append(edges, np.inf)  # a value in each step
        table = np.append(term.evaluate(representatives),
                          0.0 if term.missing is None else term.missing)
        bins = feature.bin_index(np.append(representatives, np.nan))
        return _Keyed(key, table, bins)
    return _Keyed(None, np.zeros(0))


def _outcomes(block: pd.DataFrame, plan: Plan, scored: np.ndarray
              ) -> tuple[np.ndarray, np.ndarray] | None:
    """Per scored row: whether it has an outcome, and the outcome (1/0, or the value).
    A blank outcome is a row whose outcome is not known yet: it is left out of the
    outcome figures, not refused."""
    if not plan.outcome:
        return None
    target = plan.model.schema.target
    column = block[target.column][scored]
    known = ~_missing_mask(column)
    values = np.zeros(len(column), dtype=float)
    if not known.any():
        return known, values
    if plan.classification:
        distinct = pd.unique(column[known].to_numpy(dtype=object))
        lookup = {value: label_text(value) for value in distinct}
        text = column[known].map(lookup)
        positive = positive_label(plan)
        labels = set(lookup.values())
        if positive is None:
            raise DataError(f"{plan.source}: the model's schema names no positive label for "
                            f"'{target.column}', so its outcomes cannot be read; declare "
                            "`positive` in the schema's [target]")
        if len(labels - {positive}) > 1:
            shown = ", ".join(map(value_text, sorted(labels)[:6]))
            raise DataError(f"{plan.source}: outcome column '{target.column}' has more than "
                            f"two labels ({shown}); a classification outcome needs two")
        values[known] = (text == positive).to_numpy(dtype=float)
        return known, values
    numbers = pd.to_numeric(column[known], errors="coerce")
    bad = numbers.isna().to_numpy() | ~np.isfinite(numbers.to_numpy(dtype=float))
    if bad.any():
        raise DataError(f"{plan.source}: outcome column '{target.column}' should hold numbers "
                        f"but has {value_text(column[known][bad].iloc[0])}")
    values[known] = numbers.to_numpy(dtype=float)
    return known, values


def _with_outcomes(counts: Counts, plan: Plan, outcome: tuple[np.ndarray, np.ndarray],
                   mine: np.ndarray, score: np.ndarray) -> Counts:
    known, values = outcome[0][mine], outcome[1][mine]
    observed = values[known]
    scores = score[known]
    predicted = plan.model.inverse_link(scores)
    extra: dict = {"outcome_rows": int(known.sum()), "observed": ExactSum.of(observed),
                   "predicted": ExactSum.of(predicted)}
    if plan.classification:
        extra.update(positives=int(observed.sum()), pair_scores=scores.astype(np.float64),
                     pair_labels=observed.astype(np.int8))
    else:
        extra["observed_squares"] = ExactSum.of(observed * observed)
    return replace(counts, **extra)
