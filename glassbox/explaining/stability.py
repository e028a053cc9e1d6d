"""Statistics for monitoring a model between periods: pure functions on counts and arrays.

Population stability (PSI) over the development bins, with the trade's thresholds and a
sample-size-aware chi-square check beside them; and, when outcomes arrive, the observed rate
with its exact binomial interval, ROC AUC with DeLong's interval and the KS statistic with a
bootstrap interval. No I/O and no printing: the monitor counts, these functions judge.

Conventions, stated once:
- A bin's share of 0 on either side is raised to `EMPTY_SHARE` and that side's shares are
  renormalised before PSI (otherwise one empty bin makes PSI infinite); bins empty on both
  sides are dropped.
- With no rows on a side PSI and its p-value are NaN, and `flag` gives no flag with the
  rule `NO_ROWS`; an interval over no rows is NaN; AUC and KS need both classes (else None).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy import stats

# A share of 0 is raised to this before PSI (then the side is renormalised): small against
# any share a decile or a level with a few rows in it has, and it keeps a bin that appears
# or vanishes visible (it adds about share * ln(share / EMPTY_SHARE)) without making PSI
# infinite. Common practice, no source for the value itself.
EMPTY_SHARE = 1e-4

# PSI from 0.10 "watch" and from 0.25 "act": the convention of the trade (Lewis 1994,
# carried on by Siddiqi 2006, "Credit Risk Scorecards"). Common practice, not a test.
WATCH_PSI = 0.10
ACT_PSI = 0.25
# The sample-size-aware check flags "changed" below this p-value.
LEVEL = 0.01

ACT, WATCH, CHANGED, NO_FLAG = "act", "watch", "changed", ""
FLAG_ORDER = (ACT, WATCH, CHANGED)        # the flags, worst first
NO_ROWS = "no rows to compare"
CLIPPED = "clipped to [0, 1]"
TOO_FEW = "too few rows of a class for an interval"
NO_SPREAD = "DeLong's variance is 0 (each class's cases all place alike): width 0"


class Interval(NamedTuple):
    """An estimate with the ends of its interval; `note` says when the ends were clipped
    to the range the estimate can take, or could not be computed."""

    estimate: float
    low: float
    high: float
    note: str = ""


# ------------------------------------------------------------------ population stability


def psi_shares(expected_counts, actual_counts) -> tuple[np.ndarray, np.ndarray]:
    """The two sides' shares PSI is computed on: bins empty on both sides dropped, a share
    of 0 raised to `EMPTY_SHARE` and that side renormalised. NaN shares for a side with
    no rows."""
    expected = _counts(expected_counts, "expected_counts")
    actual = _counts(actual_counts, "actual_counts")
    if expected.shape != actual.shape:
        raise ValueError(f"expected {expected.size} bins and actual {actual.size} bins differ")
    kept = (expected > 0) | (actual > 0)
    return _adjusted(expected[kept]), _adjusted(actual[kept])


def psi(expected_counts, actual_counts) -> float:
    """Population stability index: sum over bins of (a - e) * ln(a / e), with e the
    development share and a the current share of each bin (Lewis 1994; Siddiqi 2006),
    which is the Jeffreys divergence KL(a‖e) + KL(e‖a). Shares as `psi_shares` adjusts
    them; NaN when either side has no rows."""
    expected, actual = psi_shares(expected_counts, actual_counts)
    if expected.size == 0 or np.isnan(expected).any() or np.isnan(actual).any():
        return math.nan
    return math.fsum((actual - expected) * np.log(actual / expected))


def development_bins(expected_counts) -> int:
    """k for `psi_test`: the bins with a development share above 0. A bin that only the
    current period fills (a new level, a missing bin development never had) has
    probability 0 under no change, so it adds no degree of freedom; its rows still
    raise PSI."""
    return int(np.count_nonzero(_counts(expected_counts, "expected_counts")))


def psi_test(psi_value: float, bins: int, n: int, development_rows: int) -> float:
    """p-value of PSI under no change: PSI on n current rows against N development rows in
    k bins (k from `development_bins`) is approximately (1/n + 1/N) * chi-square(k - 1), since
    PSI is the Jeffreys divergence and n*N/(n+N) times it is asymptotically chi-square
    (Kullback 1959, "Information Theory and Statistics"). With k = 1 the distribution is
    the point 0: p is 1 for PSI 0, else 0. NaN when n or N is 0, or PSI is NaN."""
    if n <= 0 or development_rows <= 0 or math.isnan(psi_value):
        return math.nan
    if bins <= 1:
        return 1.0 if psi_value <= 0 else 0.0
    statistic = psi_value / (1.0 / n + 1.0 / development_rows)
    return float(stats.chi2.sf(statistic, bins - 1))


def flag(psi_value: float, p_value: float, level: float = LEVEL) -> tuple[str, str]:
    """(flag, rule): "act" from PSI `ACT_PSI`, "watch" from `WATCH_PSI` (the trade's
    convention: Lewis 1994; Siddiqi 2006), else "changed" when the chi-square p-value of
    `psi_test` is below `level`; "" when nothing flagged. The rule names every rule that
    flagged, e.g. "PSI ≥ 0.25 and χ² p < 0.01"; with no rows it is `NO_ROWS`."""
    if math.isnan(psi_value):
        return NO_FLAG, NO_ROWS
    rules = []
    if psi_value >= ACT_PSI:
        rules.append(f"PSI ≥ {ACT_PSI:.2f}")
    elif psi_value >= WATCH_PSI:
        rules.append(f"PSI ≥ {WATCH_PSI:.2f}")
    if not math.isnan(p_value) and p_value < level:
        rules.append(f"χ² p < {level:g}")
    worst = ACT if psi_value >= ACT_PSI else WATCH if psi_value >= WATCH_PSI else (
        CHANGED if rules else NO_FLAG)
    return worst, " and ".join(rules)


# ------------------------------------------------------------------------------ outcomes


def rate_interval(positives: int, n: int, level: float = 0.95) -> Interval:
    """Observed rate with the Clopper-Pearson exact binomial interval (Clopper & Pearson
    1934), by scipy's binomtest. NaN throughout when n is 0."""
    if n <= 0:
        return Interval(math.nan, math.nan, math.nan, NO_ROWS)
    if not 0 <= positives <= n:
        raise ValueError(f"positives {positives} not between 0 and n {n}")
    ends = stats.binomtest(int(positives), int(n)).proportion_ci(level, method="exact")
    return Interval(positives / n, float(ends.low), float(ends.high))


def auc_interval(scores, labels, level: float = 0.95) -> Interval | None:
    """ROC AUC (positives scoring above negatives, ties counting half) with DeLong's
    variance (DeLong, DeLong & Clarke-Pearson 1988, Biometrics 44) from midranks (Sun &
    Xu 2014), and a normal interval clipped to [0, 1]; the note says when it was clipped or
    has width 0. None without both classes; NaN ends with a single row in a class."""
    scores, labels = _outcome_arrays(scores, labels)
    positive, negative = scores[labels], scores[~labels]
    m, n = positive.size, negative.size
    if m == 0 or n == 0:
        return None
    pooled = stats.rankdata(np.concatenate([positive, negative]))
    # each positive: negatives below it (ties half); each negative: positives above it
    above = (pooled[:m] - stats.rankdata(positive)) / n
    below = 1.0 - (pooled[m:] - stats.rankdata(negative)) / m
    auc = math.fsum(above) / m
    if m < 2 or n < 2:
        return Interval(auc, math.nan, math.nan, TOO_FEW)
    variance = float(above.var(ddof=1) / m + below.var(ddof=1) / n)
    half = float(stats.norm.ppf(0.5 + level / 2)) * math.sqrt(variance)
    return _clipped(auc, auc - half, auc + half)


def ks_interval(scores, labels, seed: int = 0, replicates: int = 200,
                level: float = 0.95) -> Interval | None:
    """KS statistic: the largest gap between the positives' and the negatives' empirical
    score distributions (Kolmogorov-Smirnov two-sample statistic), with a stratified
    bootstrap percentile interval (Efron & Tibshirani 1993): each class resampled at its own
    size. Each class's rows are sorted by score first, so the order rows arrive in never
    changes the numbers. None without both classes."""
    scores, labels = _outcome_arrays(scores, labels)
    values, where = np.unique(scores, return_inverse=True)
    positive, negative = np.sort(where[labels]), np.sort(where[~labels])
    if positive.size == 0 or negative.size == 0:
        return None
    ks = _largest_gap(positive, negative, values.size)
    generator = np.random.default_rng(seed)
    resampled = np.array([
        _largest_gap(positive[generator.integers(0, positive.size, positive.size)],
                     negative[generator.integers(0, negative.size, negative.size)],
                     values.size)
        for _ in range(replicates)])
    low, high = np.quantile(resampled, [0.5 - level / 2, 0.5 + level / 2])
    return Interval(ks, float(low), float(high))


# ------------------------------------------------------------------------------- helpers


def _counts(values, name: str) -> np.ndarray:
    counts = np.asarray(values, dtype=float).ravel()
    if not np.isfinite(counts).all() or (counts < 0).any():
        raise ValueError(f"{name} must be finite and not negative")
    return counts


def _adjusted(counts: np.ndarray) -> np.ndarray:
    total = counts.sum()
    if total <= 0:
        return np.full(counts.size, math.nan)
    shares = counts / total
    if (shares == 0).any():
        shares = np.where(shares == 0, EMPTY_SHARE, shares)
        shares = shares / shares.sum()
    return shares


def _outcome_arrays(scores, labels) -> tuple[np.ndarray, np.ndarray]:
    scores = np.asarray(scores, dtype=float).ravel()
    raw = np.asarray(labels).ravel()
    if scores.shape != raw.shape:
        raise ValueError(f"{scores.size} scores but {raw.size} labels")
    if np.isnan(scores).any():
        raise ValueError("scores hold NaN: pass scored rows only")
    if not np.isin(raw, (0, 1)).all():
        raise ValueError("labels must be 0 or 1 (True or False)")
    return scores, raw.astype(bool)


def _largest_gap(positive: np.ndarray, negative: np.ndarray, values: int) -> float:
    """Largest |F+(t) - F-(t)| over the distinct scores, from each class's rows as codes of
    their distinct score; in integers (m * n times the gap), so the one division rounds."""
    m, n = positive.size, negative.size
    below = np.cumsum(np.bincount(positive, minlength=values) * n
                      - np.bincount(negative, minlength=values) * m)
    return float(np.abs(below).max() / (m * n))


def _clipped(estimate: float, low: float, high: float) -> Interval:
    if low == high:
        return Interval(estimate, low, high, NO_SPREAD)
    if low >= 0.0 and high <= 1.0:
        return Interval(estimate, low, high)
    return Interval(estimate, max(low, 0.0), min(high, 1.0), CLIPPED)
