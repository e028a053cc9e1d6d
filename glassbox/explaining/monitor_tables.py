"""Monitoring's result: the summed counts of each period turned into tables, against the
development baseline (stability, characteristic analysis, attribution drift, new levels,
missing values, and outcomes when the files have them)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from glassbox.core.additive import AdditiveModel
from glassbox.core.exact import exact_variance
from glassbox.explaining.baseline import Baseline, FeatureBins
from glassbox.explaining.cards import PointsCard
from glassbox.explaining.monitor_counts import Counts
from glassbox.explaining.stability import (
    auc_interval,
    development_bins,
    flag,
    ks_interval,
    psi,
    psi_test,
    rate_interval,
)

INTERVAL_LEVEL = 0.95  # every interval in the outcome table


@dataclass(frozen=True)
class Monitoring:
    """Every period against the development baseline; the tables present and demo use."""

    model_checksum: str
    baseline_source: str
    periods: tuple[str, ...]
    development_rows: int
    summary: pd.DataFrame
    features: pd.DataFrame
    bins: pd.DataFrame
    score_bins: pd.DataFrame
    new_levels: pd.DataFrame
    outcomes: pd.DataFrame | None = None
    pairs: pd.DataFrame | None = None  # a model with pairs: each pair's drift per period


def _stability(development: np.ndarray, current: np.ndarray, rows: int,
               development_rows: int) -> dict:
    """PSI, the chi-square check and the flag of one set of bins; `bins` counts the bins
    with development rows (the degrees of freedom are one fewer)."""
    bins = development_bins(development)
    value = psi(development, current)
    p_value = psi_test(value, bins, rows, development_rows)
    word, rule = flag(value, p_value)
    return {"psi": value, "p_value": p_value, "flag": word, "rule": rule, "bins": bins}


def _development_points(card: PointsCard, feature: str) -> float:
    """The mean points of the development rows, from the card's own training rows per bin
    (NaN when the card does not keep them)."""
    table = card.feature(feature)
    counts = list(table.training_rows)
    points = list(table.points[:len(counts)])
    if table.missing_points is not None and table.missing_rows:
        counts.append(table.missing_rows)
        points.append(table.missing_points)
    total = sum(counts)
    if not counts or total == 0:
        return math.nan
    return sum(p * c for p, c in zip(points, counts, strict=True)) / total


def build_tables(counts: dict[str, Counts], periods: list[str], model: AdditiveModel,
                 baseline: Baseline, *, card: PointsCard | None, outcome: bool,
                 model_checksum: str) -> Monitoring:
    """The result tables from each period's summed counts, periods in the given order."""
    development_rows = baseline.rows
    dev_abs = sum(f.mean_absolute_contribution for f in baseline.features)
    dev_points = ({f.feature: _development_points(card, f.feature) for f in card.features}
                  if card is not None else {})
    summary, features, bins, score_bins, new_levels, outcomes = [], [], [], [], [], []
    pairs: list[dict] = []
    for period in periods:
        found = counts[period]
        scored = found.scored
        means = {name: total.mean(scored) for name, total in found.contribution.items()}
        absolute = {name: total.mean(scored) for name, total in found.absolute.items()}
        all_abs = (sum(absolute[f.feature] for f in baseline.features) if scored
                   else math.nan)
        flagged = 0
        for feature in baseline.features:
            name = feature.feature
            current = found.bins[name]
            check = _stability(np.asarray(feature.counts), current, found.rows,
                               development_rows)
            flagged += bool(check["flag"])
            row = {"period": period, "feature": name, **check,
                   "missing_share": current[-1] / found.rows if found.rows else math.nan,
                   "development_missing_share": feature.counts[-1] / development_rows,
                   "new_level_rows": int(sum(found.new_levels.get(name, {}).values())),
                   "mean_contribution": means[name],
                   "development_mean_contribution": feature.mean_contribution,
                   "contribution_change": means[name] - feature.mean_contribution,
                   "contribution_spread": math.sqrt(exact_variance(
                       found.contribution[name], found.squares[name], scored)),
                   "development_contribution_spread": feature.contribution_spread}
            if card is not None and name in found.points:
                row["points_change"] = found.points[name].mean(scored) - dev_points[name]
            row.update(_attribution(absolute[name], all_abs, feature, dev_abs))
            features.append(row)
            bins.extend(_bin_rows(period, feature, current, found.rows))
            for level, rows in sorted(found.new_levels.get(name, {}).items()):
                new_levels.append({"period": period, "feature": name, "level": level,
                                   "rows": rows})
        score_check = _stability(np.asarray(baseline.score.counts), found.score_bins,
                                 scored, development_rows)
        mean_score = found.score.mean(scored)
        line = {"period": period, "rows": found.rows, "scored_rows": scored,
                "unscored_rows": found.rows - scored, "mean_score": mean_score,
                "development_mean_score": baseline.score.mean,
                "score_change": mean_score - baseline.score.mean,
                **{f"score_{k}": v for k, v in score_check.items() if k != "bins"},
                "features_flagged": flagged}
        if card is not None:
            mean_points = card.base_points + sum(total.mean(scored)
                                                 for total in found.points.values())
            development = card.base_points + sum(dev_points.values())
            line.update(mean_points=mean_points, points_change=mean_points - development)
        summary.append(line)
        dev_shares = baseline.score.shares
        shares = found.score_bins / scored if scored else np.full(len(dev_shares), math.nan)
        for index, label in enumerate(baseline.score.labels):
            score_bins.append({"period": period, "bin": label,
                               "development_share": float(dev_shares[index]),
                               "share": float(shares[index])})
        if outcome:
            outcomes.append(_outcome_row(period, found, model))
        for cells in baseline.pairs:
            name = cells.pair
            check = _stability(np.asarray(cells.counts), found.bins[name], found.rows,
                               development_rows)
            pairs.append({"period": period, "pair": name, **check,
                          "mean_contribution": means[name],
                          "development_mean_contribution": cells.mean_contribution,
                          "contribution_change": means[name] - cells.mean_contribution,
                          "contribution_spread": math.sqrt(exact_variance(
                              found.contribution[name], found.squares[name], scored)),
                          "development_contribution_spread": cells.contribution_spread})
    return Monitoring(
        model_checksum=model_checksum, baseline_source=baseline.source,
        periods=tuple(periods), development_rows=development_rows,
        summary=pd.DataFrame(summary), features=pd.DataFrame(features),
        bins=pd.DataFrame(bins, columns=["period", "feature", "bin", "development_share",
                                         "share"]),
        score_bins=pd.DataFrame(score_bins),
        new_levels=pd.DataFrame(new_levels, columns=["period", "feature", "level", "rows"]),
        outcomes=pd.DataFrame(outcomes) if outcome else None,
        pairs=pd.DataFrame(pairs) if baseline.pairs else None)


SPREAD_COLLAPSE = 0.25  # a spread below this share of development's is called a collapse
# (common practice, no source: a prompt to look at the feed, not a test)


def collapsed(features: pd.DataFrame) -> pd.DataFrame:
    """The (period, feature) rows whose contributions barely vary any more: spread below
    SPREAD_COLLAPSE of development's (a column filled with one value has spread 0)."""
    development = features["development_contribution_spread"].astype(float)
    spread = features["contribution_spread"].astype(float)
    return features[(development > 0) & (spread < SPREAD_COLLAPSE * development)]


def _attribution(mean_absolute: float, total: float, feature: FeatureBins,
                 development_total: float) -> dict:
    """A feature's share of the summed mean |contribution|, now and in development."""
    share = mean_absolute / total if total else math.nan
    development = (feature.mean_absolute_contribution / development_total
                   if development_total else math.nan)
    return {"attribution_share": share, "development_attribution_share": development,
            "attribution_change": share - development}


def _bin_rows(period: str, feature: FeatureBins, current: np.ndarray, rows: int) -> list[dict]:
    dev_shares = feature.shares
    return [{"period": period, "feature": feature.feature, "bin": label,
             "development_share": float(dev_shares[index]),
             "share": float(current[index] / rows) if rows else math.nan}
            for index, label in enumerate(feature.labels)]


def _outcome_row(period: str, found: Counts, model: AdditiveModel) -> dict:
    n = found.outcome_rows
    if model.task == "classification":
        rate = rate_interval(found.positives, n, INTERVAL_LEVEL)
        row = {"period": period, "rows": n, "positives": found.positives,
               "observed_rate": rate.estimate, "rate_low": rate.low, "rate_high": rate.high,
               "predicted_rate": found.predicted.mean(n)}
        # sorted by (score, outcome): the figures never depend on the order rows arrived in
        order = np.lexsort((found.pair_labels, found.pair_scores))
        scores, labels = found.pair_scores[order], found.pair_labels[order]
        notes = [f"rate: {rate.note}"] if rate.note else []
        both = 0 < found.positives < n
        for name, interval in (
                ("auc", auc_interval(scores, labels, INTERVAL_LEVEL) if both else None),
                ("ks", ks_interval(scores, labels, level=INTERVAL_LEVEL) if both else None)):
            if interval is None:  # one class only, or no outcomes: no figure
                interval = (math.nan, math.nan, math.nan, "needs both outcomes")
            row.update({name: interval[0], f"{name}_low": interval[1],
                        f"{name}_high": interval[2]})
            if interval[3]:
                notes.append(f"{name.upper()}: {interval[3]}")
        row["note"] = "; ".join(notes)
        return row
    mean = found.observed.mean(n)
    low = high = math.nan
    if n > 1:  # Student t interval of the mean, from exact sums of y and y squared
        variance = exact_variance(found.observed, found.observed_squares, n, ddof=1)
        half = stats.t.ppf(0.5 + INTERVAL_LEVEL / 2, n - 1) * math.sqrt(variance / n)
        low, high = mean - half, mean + half
    return {"period": period, "rows": n, "observed_mean": mean, "observed_low": low,
            "observed_high": high, "predicted_mean": found.predicted.mean(n)}



