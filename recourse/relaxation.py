"""The Lagrangian relaxation of a total-cost recourse program: bounds for reduced-cost fixing.

Arrays in, numbers out: per group, the gains and costs of its changes (the current candidate
left out). `recourse.program` drops the changes whose bound exceeds the cost of a plan already
in hand; the bounds are valid (weak duality), so that is exact.
"""

from __future__ import annotations

import numpy as np


class Relaxation:
    """The Lagrangian relaxation of a total-cost program: the score row moved into the objective.

    For a multiplier m >= 0 each group's best reduced cost is min(0, cost - m * gain) over its
    changes; the `max_changes` most negative are taken, and m * need is added. Every m gives a
    lower bound on the least total cost (weak duality); the best m gives the LP bound, since
    the rows left (one candidate per group, a limit on changes) form an integral polytope.
    """

    def __init__(self, gains: list[np.ndarray], costs: list[np.ndarray], kept: list[np.ndarray],
                 current: tuple[int, ...], need: float, limit: int) -> None:
        changes = [k[k != now] for k, now in zip(kept, current, strict=True)]
        width = max((len(c) for c in changes), default=1) or 1  # padding costs inf: never taken
        self.gain = np.zeros((len(kept), width))
        self.cost = np.full((len(kept), width), np.inf)
        for group, picked in enumerate(changes):
            self.gain[group, :len(picked)] = gains[group][picked]
            self.cost[group, :len(picked)] = costs[group][picked]
        self.changes, self.need, self.limit = changes, need, min(limit, len(kept))

    def at(self, multiplier: float, held: int | None = None
           ) -> tuple[float, np.ndarray, np.ndarray]:
        """The bound, each group's best reduced cost (0 if none is negative), the change taken
        per group (-1 for none) under the limit; a `held` group makes no change."""
        reduced = self.reduced(multiplier)
        if held is not None:
            reduced[held] = np.inf
        best = reduced.argmin(axis=1)
        value = np.minimum(0.0, reduced[np.arange(len(reduced)), best])
        taken = np.full(len(value), -1)
        order = np.argsort(value, kind="stable")[:self.limit]
        order = order[value[order] < 0]
        taken[order] = best[order]
        return float(multiplier * self.need + value[order].sum()), value, taken

    def reduced(self, multiplier: float) -> np.ndarray:
        """Each change's cost less the multiplier times its gain."""
        return self.cost - multiplier * self.gain

    def gain_of(self, taken: np.ndarray) -> float:
        rows = np.flatnonzero(taken >= 0)
        return float(self.gain[rows, taken[rows]].sum())

    def search(self, steps: int = 30, held: int | None = None
               ) -> tuple[float, float, np.ndarray | None]:
        """(best bound, its multiplier, a choice of changes that reaches the need or None)."""
        low, high, reaching = 0.0, 1.0, None
        bound, where = self.at(0.0, held)[0], 0.0
        for _ in range(steps):  # grow the multiplier until the relaxation's choice reaches
            value, _, taken = self.at(high, held)
            if value > bound:
                bound, where = value, high
            if self.gain_of(taken) >= self.need:
                reaching = taken
                break
            low, high = high, 2 * high
        if reaching is None:
            return bound, where, None
        for _ in range(steps):  # then bisect on the sign of the supergradient
            middle = (low + high) / 2
            value, _, taken = self.at(middle, held)
            if value > bound:
                bound, where = value, middle
            if self.gain_of(taken) >= self.need:
                high, reaching = middle, taken
            else:
                low = middle
        return bound, where, reaching

    def bounds(self, multiplier: float) -> np.ndarray:
        """Per group and change, a lower bound on any choice that makes that change."""
        value = self.at(multiplier)[1]
        sums = np.concatenate(([0.0], np.cumsum(np.sort(value))))
        rank = np.empty(len(value), int)
        rank[np.argsort(value, kind="stable")] = np.arange(len(value))
        # the best limit - 1 changes among the other groups
        others = np.where(rank < self.limit - 1, sums[self.limit] - value, sums[self.limit - 1])
        return multiplier * self.need + others[:, None] + self.reduced(multiplier)
