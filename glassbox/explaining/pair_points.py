"""A points grid per pairwise table: whole points for each cell of the pair's two axes.

Each cell's points are round(factor × good sign × value), halves away from zero, as every
row of a card is (`glassbox.explaining.points`), and a row's total adds one cell's points
per pair. Edges and levels axes keep their own entries, so a cell holds one value of the
table and its points differ from the exact scaled value by the rounding only. A knots axis
is read on straight lines between its knots, which no grid of whole points can follow
exactly: the grid reads it in bins, (-inf, first knot], equal parts of each interval between
two knots (right-closed; as many parts as keep the table's move over one within the card's
tolerance, as a curve's bins are) and (last knot, inf); the two end bins hold the end knots'
values (the table is level beyond its ends) and an inner bin is worth the mean of the table
over it (the mean of its corners' values: the mean of a straight line, or of a bilinear
cell, over its span).
Each cell records the largest difference any value in it can have from the exact scaled
value (the corners are where a straight line is furthest), and the card's largest possible
difference adds them up, so the stray is stated, never hidden. A level never seen in
training scores 0 points (the table adds nothing there, exactly); a missing value gets the
axis's missing entry, or is refused where the table has none.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from glassbox.core.errors import ModelFileError
from glassbox.core.pairs import Axis, OverTwoAxes, PairTerm


def whole(values: float | np.ndarray) -> np.ndarray:
    """Whole points, halves away from zero (as `cards.whole_points`)."""
    values = np.asarray(values, dtype=float)
    return (np.sign(values) * np.floor(np.abs(values) + 0.5)).astype(np.int64)


def _grid(rows: Any, cast: type) -> tuple[tuple[Any, ...], ...]:
    return tuple(tuple(cast(v) for v in row) for row in rows)


@dataclass(frozen=True)
class PairPoints(OverTwoAxes):
    """Whole points per cell of a pair's two axes (edges or levels; a knots axis of the
    model is read in bins, named in `binned`), with each cell's contribution (what its
    points were rounded from) and largest difference from the exact scaled value."""

    first: Axis
    second: Axis
    points: tuple[tuple[int, ...], ...]
    contributions: tuple[tuple[float, ...], ...]
    largest: tuple[tuple[float, ...], ...]
    binned: tuple[str, ...] = ()  # features whose knots axis is read in bins

    def __post_init__(self) -> None:
        shape = (self.first.size, self.second.size)
        for name in ("points", "contributions", "largest"):
            grid = getattr(self, name)
            if len(grid) != shape[0] or any(len(row) != shape[1] for row in grid):
                raise ModelFileError(f"pair '{self.name}': its {name} are not one per cell "
                                     f"of its {shape[0]} x {shape[1]} grid")
        if any(axis.kind == "knots" for axis in (self.first, self.second)):
            raise ModelFileError(f"pair '{self.name}': a points grid has edges or levels axes")
        if any(not isinstance(p, int) or isinstance(p, bool) for row in self.points
               for p in row):
            raise ModelFileError(f"pair '{self.name}': points must be whole numbers")

    def points_of(self, first: np.ndarray, second: np.ndarray,
                  where: str = "the data") -> np.ndarray:
        """Each row's cell points; a level never seen in training scores 0 (the table adds
        nothing there); a missing value without a missing entry is refused, naming rows."""
        ia, wa = self.first.entries(first, where)
        ib, wb = self.second.entries(second, where)
        grid = np.asarray(self.points, dtype=np.int64)
        seen = (wa[:, 0] > 0) & (wb[:, 0] > 0)  # edges and levels: one entry, weight 1 or 0
        return np.where(seen, grid[ia[:, 0], ib[:, 0]], 0)

    def every_points(self) -> list[int]:
        """The points of every cell a row can get (0 for an unseen level too)."""
        every = [p for row in self.points for p in row]
        if any(a.kind == "levels" for a in (self.first, self.second)):
            every.append(0)
        return every

    def largest_of_all(self) -> float:
        return max(v for row in self.largest for v in row)

    def rows(self) -> list[dict[str, Any]]:
        """The grid as card rows: one per cell, first axis outer."""
        labels_a, labels_b = self.first.labels(), self.second.labels()
        out = []
        for a, b in itertools.product(range(self.first.size), range(self.second.size)):
            out.append({"row": f"{self.first.feature} {labels_a[a]}; "
                               f"{self.second.feature} {labels_b[b]}",
                        "from": None, "to": None, "points": int(self.points[a][b]),
                        "contribution": float(self.contributions[a][b]),
                        "training_rows": None, "spread": None,
                        "largest_difference": float(self.largest[a][b])})
        return out

    def to_dict(self) -> dict[str, Any]:
        data = {"features": list(self.features),
                "axes": [self.first.to_dict(), self.second.to_dict()],
                "points": [list(row) for row in self.points],
                "contributions": [list(row) for row in self.contributions],
                "largest": [list(row) for row in self.largest]}
        if self.binned:
            data["binned"] = list(self.binned)
        return data

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> PairPoints:
        try:
            first, second = (Axis.from_dict(axis) for axis in data["axes"])
            return cls(first, second, _grid(data["points"], int),
                       _grid(data["contributions"], float), _grid(data["largest"], float),
                       tuple(str(f) for f in data.get("binned", ())))
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"pair points {data.get('features')!r} are incomplete: "
                                 f"{exc}") from None


def _cut(axis: Axis, moves: np.ndarray, tolerance: float) -> tuple[Axis, list[np.ndarray]]:
    """The grid's axis for a model's axis, and for each of its entries the points of the
    model's axis at its ends, each as weights over the model's entries. A knots axis is
    cut at its knots, and each interval between two knots into equal parts, as many as
    keep the table's move over a part (at most `moves[i]` points over interval i, over
    every entry of the other axis) within `tolerance` points."""
    size = axis.size
    if axis.kind != "knots":
        return axis, [np.eye(size)[[i]] for i in range(size)]
    knots = np.asarray(axis.points, dtype=float)
    unit = np.eye(size)
    edges, corners = [float(knots[0])], [unit[[0]]]
    for i in range(1, len(knots)):
        parts = max(1, int(np.ceil(moves[i - 1] / tolerance - 1e-9)))
        for j in range(parts):
            low, high = j / parts, (j + 1) / parts
            corners.append(np.stack([(1 - t) * unit[i - 1] + t * unit[i] for t in (low, high)]))
            end = knots[i] if j + 1 == parts else knots[i - 1] + high * (knots[i] - knots[i - 1])
            edges.append(float(end))
    corners.append(unit[[len(knots) - 1]])
    if axis.missing:
        corners.append(unit[[axis.missing_at]])
    return Axis(axis.feature, "edges", tuple(edges[:-1] + [float(knots[-1])]) if len(knots) > 1
                else (float(knots[0]),), axis.missing), corners


def _moves(table: np.ndarray, axis: Axis, scale: float) -> np.ndarray:
    """Per interval between two knots of a knots axis (the table's first axis), the most
    the table moves over it, in points, over every entry of the other axis."""
    count = len(axis.points) if axis.kind == "knots" else 1
    return np.abs(scale) * np.max(np.abs(np.diff(table[:count], axis=0)), axis=1) \
        if count > 1 else np.zeros(0)


def pair_points(pair: PairTerm, scale: float, tolerance: float) -> PairPoints:
    """A pair's table as whole points, `scale` (factor × good sign) per unit of score; a
    knots axis cut so that the table moves by at most `tolerance` points over a cell
    (half of it along each axis when both are knots)."""
    table = pair.table()
    share = tolerance / 2 if pair.first.kind == pair.second.kind == "knots" else tolerance
    first, corners_a = _cut(pair.first, _moves(table, pair.first, scale), share)
    second, corners_b = _cut(pair.second, _moves(table.T, pair.second, scale), share)
    points, means, largest = [], [], []
    for ends_a in corners_a:
        row_points, row_means, row_largest = [], [], []
        for ends_b in corners_b:
            corners = (ends_a @ table @ ends_b.T).ravel()
            mean = float(np.mean(corners))
            cell = int(whole(scale * mean))
            row_points.append(cell)
            row_means.append(mean)
            row_largest.append(float(np.max(np.abs(cell - scale * corners))))
        points.append(tuple(row_points))
        means.append(tuple(row_means))
        largest.append(tuple(row_largest))
    binned = tuple(a.feature for a in (pair.first, pair.second) if a.kind == "knots")
    return PairPoints(first, second, tuple(points), tuple(means), tuple(largest), binned)


def pair_notes(pairs: tuple[PairPoints, ...]) -> dict[str, str]:
    """The card summary's lines about its pairs: what they are and how knots read."""
    if not pairs:
        return {}
    notes = {"pairs: a points grid each": ", ".join(p.name for p in pairs)}
    binned = [f"{p.name} ({', '.join(p.binned)}; largest difference "
              f"{p.largest_of_all():.3g} points)" for p in pairs if p.binned]
    if binned:
        notes["pairs read in bins between knots"] = (
            "; ".join(binned) + ": a straight line between knots cannot be whole points, so "
            "each bin holds the mean over it (bins cut within the tolerance); the largest "
            "possible difference counts it")
    return notes
