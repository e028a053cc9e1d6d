"""Shape tables of pairwise terms: what each two-feature table does, as DataFrames.

A pair's table is read straight from the model: one entry per cell of its two axes
(`glassbox.core.pairs.Axis.labels`), the missing-value entry of an axis last and apart.
The long form (one line per cell: first entry, second entry, value) is what files hold;
the heat grid (rows the first axis, columns the second) is what a terminal, a report and a
picture show. A cell's share of training rows needs the two features together: the model
file's development baseline keeps how its training rows fell into each pair's cells
(`glassbox.explaining.baseline.PairBins`), and shares are read from there when it has them
for edges and levels axes. A knots axis is counted there by the stretch between two knots,
while the table's entries are the knots themselves (a row between two knots counts in part
at each), so such a pair's shares, and those of an older model file without the counts,
are computed when data are given and left blank otherwise, saying so.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import OptionError
from glassbox.core.pairs import Axis, PairTerm, pair_name

PAIR_COLUMNS = ("pair", "first", "second", "first_entry", "second_entry", "first_value",
                "second_value", "value", "training_share")
SHARES_UNKNOWN = ("the model file keeps no counts of its training rows by the two features "
                  "together (it was written before glassbox kept them); give data to count "
                  "them")
SHARES_OF_KNOTS = ("the model file counts its training rows by the stretches between knots, "
                   "not at the knots the table holds; give data to count them")
SHARES_FROM_BASELINE = ("from the development baseline kept in the model file ({rows:,} "
                        "training rows)")


def named(pairs: Sequence[Any], name: str) -> Any:
    """The one of `pairs` (a model's pairs, a card's points grids) named `name` ("A & B",
    either order), or a clear refusal naming them all."""
    wanted = name.strip()
    for pair in pairs:
        first, second = pair.features
        if wanted in (pair.name, pair_name(second, first)):
            return pair
    known = ", ".join(repr(p.name) for p in pairs) or "none"
    raise OptionError(f"--pair {name!r}: the model has no such pair (its pairs: {known}); "
                      "name one as 'FIRST & SECOND'")


def all_named(pairs: Sequence[Any], names: Sequence[str] | None = None) -> list[Any]:
    """The named ones of `pairs` (checked, each once), or all of them in their order."""
    if not names:
        return list(pairs)
    found = [named(pairs, name) for name in names]
    return list({pair.name: pair for pair in found}.values())


def find_pair(model: AdditiveModel, name: str) -> PairTerm:
    """The model's pair named `name` ("A & B", either order), or a clear refusal naming
    the model's pairs."""
    return named(model.pairs, name)


def chosen_pairs(model: AdditiveModel, names: Sequence[str] | None = None) -> list[PairTerm]:
    """The named pairs (checked), or every pair of the model in its order."""
    return all_named(model.pairs, names)


def cell_shares(pair: PairTerm, frame: pd.DataFrame) -> np.ndarray:
    """Each cell's share of the rows of `frame` (encoded as the model reads it); a row
    between two knots is shared between them by its interpolation weights, as it is
    scored."""
    ia, wa = pair.first.entries(frame[pair.first.feature].to_numpy())
    ib, wb = pair.second.entries(frame[pair.second.feature].to_numpy())
    shares = np.zeros((pair.first.size, pair.second.size))
    for s in (0, 1):
        for t in (0, 1):
            np.add.at(shares, (ia[:, s], ib[:, t]), wa[:, s] * wb[:, t])
    return shares / max(len(frame), 1)


def _entry_of_cells(axis: Axis) -> list[int | None]:
    """For each of the baseline's cells along an axis (`baseline.axis_cell_labels`: its
    bins or levels, a new level's cell for levels, then no value), the table's entry it is,
    or None where the table has no entry (a level never seen, a blank without a missing
    entry: such rows add nothing to the table's cells)."""
    own: list[int | None] = list(range(axis.values_size))
    return own + ([None] if axis.kind == "levels" else []) + [axis.missing_at]


def baseline_shares(model: AdditiveModel, pair: PairTerm) -> np.ndarray | None:
    """Each cell's share of the training rows as the model file's baseline counted them,
    laid out as the table; None when the file keeps no counts for its pairs or an axis is
    a knots axis (see the module's note; `shares_words` says which)."""
    if _shares_missing(model, pair) is not None:
        return None
    from glassbox.explaining.baseline import pair_cell_count

    bins = model.baseline.pair(pair.name)
    if len(bins.counts) != pair_cell_count(pair):
        return None
    firsts, seconds = _entry_of_cells(pair.first), _entry_of_cells(pair.second)
    counts = np.asarray(bins.counts, dtype=float).reshape(len(firsts), len(seconds))
    shares = np.zeros((pair.first.size, pair.second.size))
    for i, a in enumerate(firsts):
        for j, b in enumerate(seconds):
            if a is not None and b is not None:
                shares[a, b] += counts[i, j]
    return shares / max(bins.rows, 1)


def _shares_missing(model: AdditiveModel, pair: PairTerm) -> str | None:
    """Why the model file cannot give a pair's training shares, or None when it can."""
    if any(axis.kind == "knots" for axis in (pair.first, pair.second)):
        return SHARES_OF_KNOTS
    baseline = model.baseline
    if baseline is None or pair.name not in {bins.pair for bins in baseline.pairs}:
        return SHARES_UNKNOWN
    return None


def shares_words(model: AdditiveModel, pair: PairTerm) -> str:
    """Where a pair's training shares come from, or why there are none, in a line."""
    missing = _shares_missing(model, pair)
    if missing is not None:
        return missing
    return SHARES_FROM_BASELINE.format(rows=model.baseline.pair(pair.name).rows)


def _entry_values(axis: Axis) -> list[Any]:
    """The value each entry stands for in a file: a level, a knot, an edge bin's upper
    edge (the lowest bin's too; the last bin's is blank), blank for the missing entry."""
    if axis.kind == "levels":
        values: list[Any] = list(axis.points)
    elif axis.kind == "knots":
        values = [float(p) for p in axis.points]
    else:
        values = [float(p) for p in axis.points] + [None]
    return values + ([None] if axis.missing else [])


def long_form(pair: PairTerm, shares: np.ndarray | None = None) -> pd.DataFrame:
    """A pair's table in long form, the one every file of a pair's cells holds: one line
    per cell (first axis outer), its entries' labels (`Axis.labels`) and numbers (from 1),
    the values they stand for, the value the table adds there and, when given (a grid as
    the table), the cell's share of training rows."""
    table = pair.table()
    first_labels, second_labels = pair.first.labels(), pair.second.labels()
    first_values, second_values = _entry_values(pair.first), _entry_values(pair.second)
    rows = []
    for a, first in enumerate(first_labels):
        for b, second in enumerate(second_labels):
            rows.append({"pair": pair.name, "first": first, "second": second,
                         "first_entry": a + 1, "second_entry": b + 1,
                         "first_value": first_values[a], "second_value": second_values[b],
                         "value": float(table[a, b]),
                         "training_share": None if shares is None else float(shares[a, b])})
    return pd.DataFrame(rows, columns=list(PAIR_COLUMNS))


def pair_table(model: AdditiveModel, name: str,
               encoded: pd.DataFrame | None = None) -> pd.DataFrame:
    """A model's pair (by name) in long form (`long_form`), with each cell's share of the
    rows of `encoded` (data as the model reads it) when given, else of the training rows
    from the model file's baseline when it has them (`baseline_shares`), else blank."""
    pair = find_pair(model, name)
    shares = baseline_shares(model, pair) if encoded is None else cell_shares(pair, encoded)
    return long_form(pair, shares)


def all_pair_tables(model: AdditiveModel, names: Sequence[str] | None = None,
                    encoded: pd.DataFrame | None = None) -> pd.DataFrame:
    """Every chosen pair's long table stacked (an empty table with the columns when the
    model has none)."""
    pairs = chosen_pairs(model, names)
    if not pairs:
        return pd.DataFrame(columns=list(PAIR_COLUMNS))
    return pd.concat([pair_table(model, p.name, encoded) for p in pairs], ignore_index=True)


def heat_grid(model: AdditiveModel, name: str) -> pd.DataFrame:
    """A pair's table as a grid: a row per entry of the first axis, a column per entry of
    the second, each labelled by `Axis.labels` (the missing entries last)."""
    pair = find_pair(model, name)
    return pd.DataFrame(pair.table(), index=pd.Index(pair.first.labels(),
                                                     name=pair.first.feature),
                        columns=pd.Index(pair.second.labels(), name=pair.second.feature))


def share_grid(model: AdditiveModel, name: str, encoded: pd.DataFrame) -> pd.DataFrame:
    """Each cell's share of the rows of `encoded`, laid out as `heat_grid`."""
    pair = find_pair(model, name)
    grid = heat_grid(model, name)
    return pd.DataFrame(cell_shares(pair, encoded), index=grid.index, columns=grid.columns)


def training_share_grid(model: AdditiveModel, name: str) -> pd.DataFrame | None:
    """Each cell's share of the training rows from the model file's baseline, laid out as
    `heat_grid`; None where the file cannot give them (`shares_words` says why)."""
    pair = find_pair(model, name)
    shares = baseline_shares(model, pair)
    if shares is None:
        return None
    grid = heat_grid(model, name)
    return pd.DataFrame(shares, index=grid.index, columns=grid.columns)


def pair_importance(model: AdditiveModel, pair: PairTerm) -> float | None:
    """Mean absolute contribution of the pair over the training rows, as the model file
    records it (keyed by the pair's name; every fit records it). None when not recorded:
    it cannot be worked out from one-feature profiles."""
    recorded = model.metadata.get("importance", {})
    return float(recorded[pair.name]) if pair.name in recorded else None


def pair_summary_rows(model: AdditiveModel) -> list[dict[str, Any]]:
    """One summary line per pair (as `shapes.summary` lines read): importance, lowest and
    highest cell; directions and the missing entry do not apply to a table of two."""
    rows = []
    for pair in model.pairs:
        table = pair.table()
        importance = pair_importance(model, pair)
        rows.append({"feature": pair.name, "kind": "pair",
                     "term": f"{pair.first.kind} × {pair.second.kind}",
                     "importance": np.nan if importance is None else importance,
                     "lowest": float(table.min()), "highest": float(table.max()),
                     "observed": "", "declared": "", "missing": None, "missing_share": None})
    return rows
