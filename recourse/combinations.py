"""Exact search of a recourse program by listing combinations, for programs small enough.

The choices are taken set by set of the groups that change (every set the limit on changes
and the forbidden sets allow). Within a set, every combination of changes of all its groups
but the longest is listed with numpy, and for each the longest group's cheapest change that
closes the rest of the gap is found by binary search over its changes sorted by gain. In a
fixed combination of the others, a dearer change of the longest group that also closes the
gap is never better on any objective, so the best choice found is the optimum: nothing is
approximated. `recourse.program` uses this when the listing stays within `COMBINATIONS`
combinations and `SETS` sets of groups (`SETS_WHEN_LONG` when the lists are long: there the
integer program's bound is weak and it took minutes on some rows), and its integer program
otherwise. Which search runs depends on sizes only; both are exact.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterator, Sequence

import numpy as np

COMBINATIONS = 20_000_000  # the most combinations listed for one program, in all
SETS = 64  # the most sets of changed groups listed (each costs ~0.1 ms; a small MIP ~3 ms)
SETS_WHEN_LONG = 4096  # the same when the lists hold more than LONG candidates in all
LONG = 2000
CHUNK = 500_000  # combinations listed at once (memory: a few arrays of this length)


def changed_sets(kept: Sequence[np.ndarray], current: Sequence[int], max_changes: int | None,
                 forbidden: Sequence[frozenset[int]]) -> list[tuple[int, ...]] | None:
    """The sets of groups that may change together, smallest first, or None when listing
    their combinations would pass COMBINATIONS, or SETS (SETS_WHEN_LONG) sets."""
    most = SETS_WHEN_LONG if sum(len(k) for k in kept) > LONG else SETS
    movable = [g for g, k in enumerate(kept) if np.any(k != current[g])]
    limit = len(movable) if max_changes is None else min(max_changes, len(movable))
    sizes = {g: int(np.sum(kept[g] != current[g])) for g in movable}
    out, work = [], 0
    for count in range(limit + 1):
        for together in itertools.combinations(movable, count):
            if any(f <= set(together) for f in forbidden):
                continue
            out.append(together)
            work += math.prod(sorted(sizes[g] for g in together)[:-1]) if together else 1
            if work > COMBINATIONS or len(out) > most:
                return None
    return out


def best_combination(gains: Sequence[np.ndarray], costs: Sequence[np.ndarray],
                     kept: Sequence[np.ndarray], current: Sequence[int], need: float,
                     objective: str, sets: Sequence[tuple[int, ...]]) -> tuple[int, ...] | None:
    """The choice (one kept candidate per group) that gains at least `need`, changing exactly
    one of `sets`, with the least objective and then the least total cost; None if none.

    `gains` and `costs` are per group, over all candidates; `kept` the indices to choose
    from. Ties go to the first set, then the first combination listed."""
    best: tuple[float, float, tuple[int, ...]] | None = None
    for together in sets:
        found = _best_changing(gains, costs, kept, current, need, objective, together)
        if found is not None and (best is None or found[:2] < best[:2]):
            best = found
    return None if best is None else best[2]


def _best_changing(gains, costs, kept, current, need: float, objective: str,
                   together: tuple[int, ...]) -> tuple[float, float, tuple[int, ...]] | None:
    """(objective, total cost, choice) of the best choice changing exactly `together`."""
    choice = list(current)
    if not together:
        return (0.0, 0.0, tuple(choice)) if need <= 0 else None
    changes = {g: kept[g][kept[g] != current[g]] for g in together}
    longest = max(together, key=lambda g: (len(changes[g]), -g))
    rest = [g for g in together if g != longest]
    order = changes[longest][np.argsort(gains[longest][changes[longest]], kind="stable")]
    by_gain, paying = gains[longest][order], costs[longest][order]
    cheapest = np.minimum.accumulate(paying[::-1])[::-1]  # from each position on
    marked = np.where(paying == cheapest, np.arange(len(order)), len(order))
    first = np.minimum.accumulate(marked[::-1])[::-1]  # where that cheapest one is
    best = None
    for picks, gain, total, top in _listings([changes[g] for g in rest],
                                             [gains[g] for g in rest], [costs[g] for g in rest]):
        position = np.searchsorted(by_gain, need - gain, side="left")
        reached = position < len(order)
        position = np.minimum(position, len(order) - 1)
        paid = cheapest[position]
        spent = np.where(reached, total + paid, np.inf)
        score = {"total-cost": spent, "largest-cost": np.maximum(top, paid),
                 "fewest-changes": np.full(len(spent), float(len(together)))}[objective]
        score = np.where(reached, score, np.inf)
        if not reached.any():
            continue
        at = int(np.lexsort((spent, score))[0])
        if best is None or (score[at], spent[at]) < best[:2]:
            picked = [int(p[at]) for p in picks] + [int(order[first[position[at]]])]
            best = (float(score[at]), float(spent[at]), picked)
    if best is None:
        return None
    for g, pick in zip([*rest, longest], best[2], strict=True):
        choice[g] = pick
    return best[0], best[1], tuple(choice)


def _listings(indices: list[np.ndarray], gains: list[np.ndarray], costs: list[np.ndarray]
              ) -> Iterator[tuple[list[np.ndarray], np.ndarray, np.ndarray, np.ndarray]]:
    """Every combination of one index per group, at most CHUNK at a time: the indices picked
    in each group, and the combinations' summed gain, summed cost and largest cost."""
    if not indices:
        yield [], np.zeros(1), np.zeros(1), np.zeros(1)
        return
    tail = math.prod(len(k) for k in indices[1:])
    if tail > CHUNK:  # fix the first group's pick, list the rest in chunks
        for pick in indices[0]:
            for picks, gain, total, top in _listings(indices[1:], gains[1:], costs[1:]):
                size = len(gain)
                yield ([np.full(size, pick), *picks], gain + gains[0][pick],
                       total + costs[0][pick], np.maximum(top, costs[0][pick]))
        return
    step = max(1, CHUNK // max(tail, 1))
    for start in range(0, len(indices[0]), step):
        lead = indices[0][start:start + step]
        grids = np.meshgrid(lead, *indices[1:], indexing="ij")
        picks = [grid.ravel() for grid in grids]
        gain = sum(g[p] for g, p in zip(gains, picks, strict=True))
        total = sum(c[p] for c, p in zip(costs, picks, strict=True))
        top = np.max([c[p] for c, p in zip(costs, picks, strict=True)], axis=0)
        yield picks, gain, total, top
