"""Pairwise terms: a two-dimensional table for two features, beside the one-feature tables.

    score(x) = intercept + sum_j f_j(x_j) + sum_(j,k) f_jk(x_j, x_k)

Each axis of a pair's table is one feature's grid, of one of three kinds:

- `edges`: steps, as a `StepTerm` cuts a number: entry i holds edges[i-1] < x <= edges[i]
  (the first entry runs down to minus infinity, the last up to plus infinity);
- `knots`: a piecewise-linear grid, as a `CurveTerm` reads a number: between two knots the
  table is interpolated linearly along that axis (so bilinearly in a cell of two knot
  axes), and values beyond the end knots are read at the ends;
- `levels`: one entry per category level. A level never seen in training adds nothing
  (its row of the table is zero, the pair's mean value after centring).

An axis whose feature had missing values in training has one more entry, last, for a
missing value; an axis without one refuses a missing value, as a term does.

Centring. A fitted pair is centred so that the main effects keep their meaning: along each
axis, the table has mean zero over the training rows' values of the other feature,

    for every x:  mean over training rows i of f_jk(x, x_ik) = 0, and the same for x_k.

`purify` moves what a fitted table holds beyond that into the two features' main terms and
the intercept (the two-way analysis-of-variance split with the training marginals as
weights; see its docstring). With it, the partial dependence of the model on x_j (the mean
score over training rows with x_j set to x) is

    PD_j(x) = intercept + f_j(x) + c_j,

where the other main terms add their training means (zero) and the pairs with x_j their
means along the other axis (zero), and c_j is the sum of the training-row means of the
pairs without x_j: a constant. So the main effect is the partial dependence less a
constant. The same sum over every pair is why, in a model with pairs, the intercept is
the mean training score less the pairs' training-row means (a pair is centred along each
axis, not on the joint rows).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from glassbox.core.errors import ModelFileError, OptionError
from glassbox.core.wording import plural

AXIS_KINDS = ("edges", "knots", "levels")
MAIN_KIND = {"edges": "steps", "knots": "curve", "levels": "levels"}


def pair_name(first: str, second: str) -> str:
    """How a pair is named in tables, columns and messages."""
    return f"{first} & {second}"


@dataclass(frozen=True)
class Axis:
    """One feature's grid along a pair's table (see the module docstring)."""

    feature: str
    kind: str
    points: tuple[Any, ...]  # edges or knots (floats), or levels (texts)
    missing: bool = False  # one more entry, last, for a missing value

    def __post_init__(self) -> None:
        if self.kind not in AXIS_KINDS:
            raise ModelFileError(f"pair axis '{self.feature}': unknown kind {self.kind!r} "
                                 f"(expected {', '.join(AXIS_KINDS)})")
        if self.kind == "levels":
            if not self.points or len(set(self.points)) != len(self.points):
                raise ModelFileError(f"pair axis '{self.feature}': needs distinct levels (≥1)")
            return
        points = np.asarray(self.points, dtype=float)
        if self.kind == "knots" and len(points) == 0:
            raise ModelFileError(f"pair axis '{self.feature}': needs at least one knot")
        if not np.all(np.isfinite(points)) or np.any(np.diff(points) <= 0):
            raise ModelFileError(f"pair axis '{self.feature}': {self.kind} must be finite "
                                 "and strictly increasing")

    @property
    def values_size(self) -> int:
        """Entries for values (without the missing entry)."""
        return len(self.points) + (1 if self.kind == "edges" else 0)

    @property
    def size(self) -> int:
        return self.values_size + int(self.missing)

    @property
    def missing_at(self) -> int | None:
        return self.values_size if self.missing else None

    def labels(self) -> list[str]:
        """A short text per entry, for tables."""
        if self.kind == "levels":
            labels = [str(p) for p in self.points]
        elif self.kind == "knots":
            labels = [f"{p:g}" for p in self.points]
        else:
            edges = [f"{p:g}" for p in self.points]
            labels = ([f"≤ {edges[0]}"] if edges else ["any"]) + [
                f"{low} to {high}" for low, high in zip(edges, edges[1:], strict=False)]
            if edges:
                labels.append(f"> {edges[-1]}")
        return labels + (["missing"] if self.missing else [])

    def entries(self, column: np.ndarray, where: str = "the data") -> tuple[np.ndarray,
                                                                             np.ndarray]:
        """For each value, two entries of the axis and their weights (the second weight is
        0 except between two knots); a level never seen in training weighs 0 on both."""
        n = len(column)
        index = np.zeros((n, 2), dtype=np.intp)
        weight = np.zeros((n, 2))
        if self.kind == "levels":
            values = np.asarray(column, dtype=object)
            absent = np.asarray(pd.isna(values), dtype=bool)
            codes, distinct = pd.factorize(values)
            position = np.r_[pd.Index(self.points).get_indexer(distinct), -1][codes]
            known = position >= 0
            index[:, 0] = np.where(known, position, 0)
            weight[:, 0] = known.astype(float)
        else:
            values = np.asarray(column, dtype=float)
            absent = np.isnan(values)
            points = np.asarray(self.points, dtype=float)
            if self.kind == "edges":
                index[:, 0] = np.searchsorted(points, values, side="left")
                weight[:, 0] = 1.0
            else:
                last = len(points) - 1
                low = np.clip(np.searchsorted(points, values, side="right") - 1, 0, last)
                high = np.minimum(low + 1, last)
                span = points[high] - points[low]
                with np.errstate(invalid="ignore", divide="ignore"):
                    share = np.where(span > 0, (values - points[low]) / np.where(
                        span > 0, span, 1.0), 0.0)
                share = np.clip(np.nan_to_num(share), 0.0, 1.0)
                index[:, 0], index[:, 1] = low, high
                weight[:, 0], weight[:, 1] = 1.0 - share, share
        if absent.any():
            if not self.missing:
                from glassbox.core.additive import refuse_missing

                refuse_missing(self.feature, absent, where,
                               "a pairwise table of the model has no entry")
            index[absent] = (self.missing_at, 0)
            weight[absent] = (1.0, 0.0)
        return index, weight

    def shares(self, column: np.ndarray) -> np.ndarray:
        """Each entry's mean weight over the rows: the training marginal, for centring."""
        index, weight = self.entries(column)
        totals = sum(np.bincount(index[:, s], weight[:, s], minlength=self.size)
                     for s in (0, 1))
        return np.asarray(totals, dtype=float) / max(len(column), 1)

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {"feature": self.feature, "kind": self.kind,
                                self.kind: list(self.points)}
        if self.missing:
            data["missing"] = True
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Axis:
        kind = str(data["kind"])
        if kind not in AXIS_KINDS:
            raise ModelFileError(f"pair axis {data.get('feature')!r}: unknown kind {kind!r}")
        points = (tuple(str(p) for p in data[kind]) if kind == "levels"
                  else tuple(float(p) for p in data[kind]))
        return cls(str(data["feature"]), kind, points, bool(data.get("missing", False)))


class OverTwoAxes:
    """What every table over two axes (a pair's values, a card's points grid) is named by:
    its two features and the pair's name."""

    first: Axis
    second: Axis

    @property
    def features(self) -> tuple[str, str]:
        return (self.first.feature, self.second.feature)

    @property
    def name(self) -> str:
        return pair_name(*self.features)


@dataclass(frozen=True)
class PairTerm(OverTwoAxes):
    """A two-dimensional table: `values[a][b]` at entry a of `first` and b of `second`."""

    first: Axis
    second: Axis
    values: tuple[tuple[float, ...], ...]
    kind: ClassVar[str] = "pair"

    def __post_init__(self) -> None:
        table = np.asarray(self.values, dtype=float)
        if self.first.feature == self.second.feature:
            raise ModelFileError(f"pair '{self.name}': needs two different features")
        if table.shape != (self.first.size, self.second.size):
            raise ModelFileError(
                f"pair '{self.name}': its table is {'x'.join(map(str, table.shape))} but its "
                f"axes have {self.first.size} and {self.second.size} entries")
        if not np.all(np.isfinite(table)):
            raise ModelFileError(f"pair '{self.name}': every table value must be a number")

    @property
    def feature(self) -> str:
        """The pair's name where a term's feature name is expected (columns, messages)."""
        return self.name

    def table(self) -> np.ndarray:
        return np.asarray(self.values, dtype=float)

    def evaluate(self, first: np.ndarray, second: np.ndarray,
                 where: str = "the data") -> np.ndarray:
        """The table at each row's two values."""
        ia, wa = self.first.entries(first, where)
        ib, wb = self.second.entries(second, where)
        table = self.table()
        out = np.zeros(len(ia))
        for s in (0, 1):
            for t in (0, 1):
                out += wa[:, s] * wb[:, t] * table[ia[:, s], ib[:, t]]
        return out

    def evaluate_frame(self, frame: pd.DataFrame, where: str = "the data") -> np.ndarray:
        return self.evaluate(frame[self.first.feature].to_numpy(),
                             frame[self.second.feature].to_numpy(), where)

    def largest(self) -> float:
        return float(np.max(np.abs(self.table())))

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "features": list(self.features),
                "axes": [self.first.to_dict(), self.second.to_dict()],
                "values": [list(row) for row in self.values]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> PairTerm:
        try:
            first, second = (Axis.from_dict(axis) for axis in data["axes"])
            if [first.feature, second.feature] != list(data["features"]):
                raise ModelFileError(f"pair {data.get('features')!r}: its axes name "
                                     f"{first.feature!r} and {second.feature!r}")
            return cls(first, second, tuple(tuple(float(v) for v in row)
                                            for row in data["values"]))
        except ModelFileError:
            raise
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"pair {data.get('features')!r} is incomplete: {exc}") from None


def table_tuple(table: np.ndarray) -> tuple[tuple[float, ...], ...]:
    return tuple(tuple(float(v) for v in row) for row in np.asarray(table, dtype=float))


def missing_level_to_entry(pair: PairTerm, level: str) -> PairTerm:
    """A pair whose levels axis holds `level` (a missing category fitted as a level) with
    that level turned into the axis's missing entry."""
    table = pair.table()
    axes = [pair.first, pair.second]
    for which, axis in enumerate(axes):
        if axis.kind != "levels" or level not in axis.points:
            continue
        at = axis.points.index(level)
        order = [i for i in range(len(axis.points)) if i != at] + [at]
        if len(order) == 1:
            raise ModelFileError(f"pair '{pair.name}': '{axis.feature}' has no values at all")
        table = table[order, :] if which == 0 else table[:, order]
        axes[which] = Axis(axis.feature, "levels", tuple(axis.points[i] for i in order[:-1]),
                           missing=True)
    return PairTerm(axes[0], axes[1], table_tuple(table))


def _main_from_axis(axis: Axis, values: np.ndarray) -> Any:
    from glassbox.core.additive import CurveTerm, LevelsTerm, StepTerm

    missing = float(values[axis.missing_at]) if axis.missing else None
    own = tuple(float(v) for v in values[:axis.values_size])
    if axis.kind == "edges":
        return StepTerm(axis.feature, tuple(axis.points), own, missing=missing)
    if axis.kind == "knots":
        return CurveTerm(axis.feature, tuple(axis.points), own, missing=missing)
    return LevelsTerm(axis.feature, tuple(axis.points), own, 0.0, missing=missing)


def add_to_main(term: Any, axis: Axis, values: np.ndarray) -> Any:
    """`term` plus the function the axis reads from `values` (one per entry), as one table of
    the term's kind: exact, on the union of the two grids. `term` None: a new term."""
    from glassbox.core.additive import CurveTerm, LevelsTerm, StepTerm

    values = np.asarray(values, dtype=float)
    if term is None:
        return _main_from_axis(axis, values)
    if term.kind != MAIN_KIND[axis.kind]:
        raise OptionError(f"a pair's {axis.kind} axis on '{axis.feature}' cannot add into "
                          f"its {term.kind} term")
    if axis.missing and term.missing is None:
        raise OptionError(f"a pair has a missing-value entry for '{axis.feature}', its main "
                          "term none")
    own = values[:axis.values_size]
    extra = float(values[axis.missing_at]) if axis.missing else 0.0
    changes: dict[str, Any] = {}
    if isinstance(term, CurveTerm):
        grid = np.union1d(np.asarray(term.knots), np.asarray(axis.points, dtype=float))
        added = np.interp(grid, np.asarray(axis.points, dtype=float), own)
        changes["knots"] = tuple(float(v) for v in grid)

        def moved(old: Sequence[float]) -> tuple[float, ...]:
            return tuple(float(v) for v in np.interp(grid, term.knots, old) + added)
    elif isinstance(term, StepTerm):
        grid = np.union1d(np.asarray(term.edges), np.asarray(axis.points, dtype=float))
        reps = np.r_[grid, np.inf]  # a point in each bin of the union (its upper edge)
        added = own[np.searchsorted(np.asarray(axis.points, dtype=float), reps, side="left")]
        at = term.bin_of(reps)
        changes["edges"] = tuple(float(v) for v in grid)

        def moved(old: Sequence[float]) -> tuple[float, ...]:
            return tuple(float(v) for v in np.asarray(old, dtype=float)[at] + added)
    else:
        assert isinstance(term, LevelsTerm)
        levels = list(term.levels) + [p for p in axis.points if p not in term.levels]
        position = {p: i for i, p in enumerate(axis.points)}
        added = np.array([own[position[p]] if p in position else 0.0 for p in levels])
        changes["levels"] = tuple(levels)

        def moved(old: Sequence[float]) -> tuple[float, ...]:
            base = list(old) + [term.unseen] * (len(levels) - len(term.levels))
            return tuple(float(v) for v in np.asarray(base, dtype=float) + added)
    changes["values"] = moved(term.values)
    for name in ("lower", "upper"):
        if getattr(term, name) is not None:
            changes[name] = moved(getattr(term, name))
    if term.missing is not None:
        changes["missing"] = float(term.missing + extra)
    if term.missing_band is not None:
        changes["missing_band"] = tuple(float(v + extra) for v in term.missing_band)
    return replace(term, **changes)


def purify(terms: Sequence[Any], pairs: Sequence[PairTerm], features: pd.DataFrame
           ) -> tuple[tuple[Any, ...], tuple[PairTerm, ...], float]:
    """Centre each pair along both axes; return main terms, pairs and the intercept's shift.

    With p the first axis's training marginal (each entry's mean weight over the rows), q
    the second's and V the table: r = V q (the mean over rows along the second axis, at
    each first entry), c = p V, m = p V q, and the centred table is V - r 1' - 1 c' + m.
    Since every training row's weights sum to one, f = f' + r(x_j) + c(x_k) - m exactly,
    where r(x_j) is the axis function with values r. So r is added to x_j's main term, c to
    x_k's (on the union of the grids, `add_to_main`; a feature with no main term gets one)
    and -m to the intercept. The centred table has mean zero along each axis: for any x_j,
    sum_b q_b V'_ab = r_a - r_a - m + m = 0 at every entry a, so along the axis too.
    The main terms are no longer centred; `centre_terms` does that after."""
    mains = {t.feature: t for t in terms}
    order = [t.feature for t in terms]
    centred: list[PairTerm] = []
    shift = 0.0
    for pair in pairs:
        p = pair.first.shares(features[pair.first.feature].to_numpy())
        q = pair.second.shares(features[pair.second.feature].to_numpy())
        table = pair.table()
        r, c = table @ q, p @ table
        m = float(p @ table @ q)
        centred.append(replace(pair, values=table_tuple(
            table - r[:, None] - c[None, :] + m)))
        for axis, moved in ((pair.first, r), (pair.second, c)):
            if axis.feature not in mains:
                order.append(axis.feature)
            mains[axis.feature] = add_to_main(mains.get(axis.feature), axis, moved)
        shift -= m
    return tuple(mains[name] for name in order), tuple(centred), shift


def refuse_pairs(model: Any, what: str) -> None:
    """Refuse a model with pairwise terms where `what` does not read them yet."""
    pairs = getattr(model, "pairs", ())
    if pairs:
        raise OptionError(f"{what} does not handle pairwise terms yet, and the model has "
                          f"{plural(len(pairs), 'pair')} ({', '.join(p.name for p in pairs)}); "
                          "fit it without pairs (--pairs 0) for this")
