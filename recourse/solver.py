"""An exact solver built for the recourse program's shape: a multiple-choice knapsack with a
limit on changes and cuts between plans.

`solve_exact` keeps `recourse.program`'s contract (objectives, BUFFER, NOISE, the tie rule,
the reductions by dominance and the Lagrangian bound, the verdict checked in Python) and
replaces only the search. The search is a dynamic program over the groups: a state is a
partial choice (total cost, gain, number of changes, which cuts may still be completed), and
states are dropped when another with the same changes and open cuts costs no more and gains
no less, when even the best the later groups could add misses the need (their largest gains
within the limit), or when a lower bound passes the best plan in hand. The bound is the
larger of the linear relaxation over the later groups (`hull_bound`: each group's lower
convex hull of (gain, cost) points, walked in order of slope; Sinha & Zemel 1979, Zemel 1984)
and, with one change left, the cheapest single change of a later group that finishes the
plan. A state that reaches the need is a plan (the later groups stay put, which breaks no
cut still open), so it ends there. Nothing is capped or approximated: the bound only drops
states that cannot beat a plan already found, with a margin for rounding. Rules between two
groups (`Program.pairs`) and pairwise tables (`Program.tables`) are not part of this search:
such a program is solved by the integer program and the solution's message says so.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from recourse.program import (
    NOISE,
    Program,
    Solution,
    _closed_form,
    _denoised,
    _kept,
    _lexicographic,
    _need,
    _tables,
    solve,
)

NAME = "exact"
HANDED_OFF = "the exact solver does not cover"  # the message of a program it hands on


def hull_bound(gains: Sequence[np.ndarray], costs: Sequence[np.ndarray], need: float) -> float:
    """The least cost of the linear relaxation: per group, weights >= 0 on its points that sum
    to 1, the weighted gains of all groups adding to at least `need`; inf when no weights do.

    Each group starts from its cheapest point (of those, the one that gains most); what a
    group can add beyond it lies on the lower convex hull of its (gain, cost) points, and the
    hull segments of all groups are taken cheapest per unit of gain first (Zemel 1984).
    """
    start_cost, start_gain, slopes, lengths = _segments(gains, costs)
    rest = need - start_gain
    if rest <= 0:
        return start_cost
    order = np.argsort(slopes, kind="stable")
    cumulative = np.cumsum(lengths[order])
    if len(cumulative) == 0 or cumulative[-1] < rest:
        return math.inf
    at = int(np.searchsorted(cumulative, rest, side="left"))
    before = cumulative[at - 1] if at else 0.0
    paid = float(np.dot(slopes[order][:at], lengths[order][:at]))
    return start_cost + paid + float(slopes[order][at] * (rest - before))


def _segments(gains: Sequence[np.ndarray], costs: Sequence[np.ndarray]
              ) -> tuple[float, float, np.ndarray, np.ndarray]:
    """The summed starting cost and gain of every group, and every hull segment's slope (cost
    per unit of gain) and length in gain."""
    pieces = [_group_hull(np.asarray(g, float), np.asarray(c, float))
              for g, c in zip(gains, costs, strict=True)]
    if not pieces:
        return 0.0, 0.0, np.zeros(0), np.zeros(0)
    return (float(sum(p[0] for p in pieces)), float(sum(p[1] for p in pieces)),
            np.concatenate([p[2] for p in pieces]), np.concatenate([p[3] for p in pieces]))


def _group_hull(gain: np.ndarray, cost: np.ndarray) -> tuple[float, float, np.ndarray, np.ndarray]:
    """One group's starting point (cheapest, then most gain) and its hull segments."""
    first = int(np.lexsort((-gain, cost))[0])
    hull = _lower_hull(gain, cost, first)
    return (float(cost[first]), float(gain[first]), np.diff(cost[hull]) / np.diff(gain[hull]),
            np.diff(gain[hull]))


def _lower_hull(gain: np.ndarray, cost: np.ndarray, first: int) -> list[int]:
    """Indices of the lower convex hull of the points that gain more than `first`, from it,
    in increasing gain (of equal gains, the cheapest)."""
    above = np.flatnonzero(gain > gain[first])
    above = above[np.lexsort((cost[above], gain[above]))]
    hull = [first]
    for point in above:
        if gain[point] == gain[hull[-1]]:
            continue  # the same gain at no less cost (sorted so)
        while len(hull) >= 2:
            a, b = hull[-2], hull[-1]
            # drop b when it lies on or above the segment from a to the new point
            if ((cost[b] - cost[a]) * (gain[point] - gain[a])
                    >= (cost[point] - cost[a]) * (gain[b] - gain[a])):
                hull.pop()
            else:
                break
        hull.append(int(point))
    return hull


def _after(first: float, values: np.ndarray) -> np.ndarray:
    """`values` with `first` in front (np.r_ is slow on the hot path)."""
    return np.concatenate(((first,), values))


@dataclass(frozen=True)
class _Suffix:
    """What the groups from one position on can still add: the bound's ingredients."""

    slopes: np.ndarray  # hull segments, cheapest per unit of gain first
    reach: np.ndarray  # cumulative gain of those segments
    paid: np.ndarray  # cumulative cost of those segments
    best_gains: np.ndarray  # cumulative sum of the groups' largest gains, largest first
    single_gain: np.ndarray  # every change of those groups sorted by gain
    single_cost: np.ndarray  # the least cost of a change gaining at least as much

    @classmethod
    def every(cls, pieces: Sequence[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]
              ) -> list[_Suffix]:
        """The suffixes from each position (and the empty one), from each group's changes
        (gains, costs) and its hull from staying put (slopes, lengths: a change that costs
        nothing gives a first segment of slope 0). Sorted once, then filtered."""
        def joined(part: int) -> tuple[np.ndarray, np.ndarray]:
            values = np.concatenate([np.zeros(0), *(p[part] for p in pieces)])
            at = np.repeat(np.arange(len(pieces)), [len(p[part]) for p in pieces])
            return values, at

        slopes, slope_at = joined(2)
        lengths = joined(3)[0]
        order = np.argsort(slopes, kind="stable")
        slopes, lengths, slope_at = slopes[order], lengths[order], slope_at[order]
        best = np.array([p[0].max() if len(p[0]) else 0.0 for p in pieces])
        by_best = np.argsort(-best, kind="stable")
        gains, gain_at = joined(0)
        costs = joined(1)[0]
        by_gain = np.argsort(gains, kind="stable")
        gains, costs, gain_at = gains[by_gain], costs[by_gain], gain_at[by_gain]
        out = []
        for k in range(len(pieces) + 1):
            here, later, top = slope_at >= k, gain_at >= k, by_best[by_best >= k]
            single = np.minimum.accumulate(costs[later][::-1])[::-1]
            out.append(cls(slopes[here], _after(0.0, np.cumsum(lengths[here])),
                           _after(0.0, np.cumsum(slopes[here] * lengths[here])),
                           _after(0.0, np.cumsum(best[top])), gains[later], single))
        return out

    def bound(self, rest: np.ndarray, left: np.ndarray) -> np.ndarray:
        """A lower bound on the cost of gaining `rest` more with at most `left` changes
        (inf where that is out of reach)."""
        top = self.best_gains[np.minimum(left, len(self.best_gains) - 1)]
        at = np.searchsorted(self.reach, rest, side="left")
        inside = at < len(self.reach)
        at = np.clip(at, 1, len(self.reach) - 1) if len(self.reach) > 1 else np.zeros_like(at)
        if len(self.slopes):
            hull = self.paid[at - 1] + self.slopes[at - 1] * (rest - self.reach[at - 1])
        else:
            hull = np.zeros(len(rest))
        hull = np.where(rest <= 0, 0.0, np.where(inside, hull, np.inf))
        one = left == 1
        if one.any() and len(self.single_gain):
            where = np.searchsorted(self.single_gain, rest[one], side="left")
            found = where < len(self.single_gain)
            single = np.where(found, self.single_cost[np.minimum(where, len(self.single_gain) - 1)],
                              np.inf)
            hull[one] = np.maximum(hull[one], single)
        return np.where(top >= rest, hull, np.inf)


def suffix_bounds(gains: Sequence[np.ndarray], costs: Sequence[np.ndarray]) -> list[_Suffix]:
    """For each position k (and the end), the bound on what groups k, k + 1, ... can add;
    per group, its changes' gains (> 0) and costs, staying put (0 at cost 0) implied."""
    pieces = []
    for gain, cost in zip(gains, costs, strict=True):  # each group's hull from staying put
        _, start_gain, slopes, lengths = _group_hull(_after(0.0, gain), _after(0.0, cost))
        if start_gain > 0:  # a change that costs nothing: free gain first
            slopes, lengths = _after(0.0, slopes), _after(start_gain, lengths)
        pieces.append((gain, cost, slopes, lengths))
    return _Suffix.every(pieces)


def cheapest(gains: Sequence[np.ndarray], costs: Sequence[np.ndarray], need: float,
             limit: int, forbidden: Sequence[frozenset[int]]) -> tuple[int, ...] | None:
    """The least-cost choice of at most one change per group (-1: none) gaining at least
    `need`, with at most `limit` changes and no forbidden set all changed; None if none.

    `gains` and `costs` are per group, over its changes only (gains > 0, costs >= 0).
    """
    groups = len(gains)
    if any(not f for f in forbidden):
        return None  # an empty set is changed by every choice
    if need <= 0:
        return (-1,) * groups
    cuts = [f for f in forbidden if all(len(gains[g]) for g in f)]  # others cannot close
    # groups in cuts first, so that the open cuts settle early; then the largest gains
    order = sorted(range(groups), key=lambda g: (not any(g in f for f in cuts),
                                                 -(gains[g].max() if len(gains[g]) else 0.0)))
    position = {g: k for k, g in enumerate(order)}
    last = [max(position[g] for g in f) for f in cuts]  # where each cut settles
    suffixes = suffix_bounds([gains[g] for g in order], [costs[g] for g in order])
    upper, found = math.inf, None  # the best plan in hand: its cost and how to rebuild it
    # states by key (changes, open cuts as a bit mask): costs, gains and where they came from
    start = (0, (1 << len(cuts)) - 1)
    states = {start: (np.zeros(1), np.zeros(1), np.zeros(1, int))}
    history: list[tuple[np.ndarray, np.ndarray]] = []  # per layer, each state's parent, pick
    for k, group in enumerate(order):
        inside = sum(1 << i for i, f in enumerate(cuts) if group in f)
        closing = sum(1 << i for i, at in enumerate(last) if at == k)
        grown: dict[tuple[int, int], list] = {}
        for (count, mask), (cost, gain, ids) in states.items():
            stay = (count, mask & ~inside)
            grown.setdefault(stay, []).append((cost, gain, ids, np.full(len(cost), -1)))
            if len(gains[group]) == 0 or count >= limit or (mask & closing) != 0:
                continue  # no change here, none left, or it would close a cut
            moved_cost = (cost[:, None] + costs[group][None, :]).ravel()
            moved_gain = (gain[:, None] + gains[group][None, :]).ravel()
            parents = np.repeat(ids, len(gains[group]))
            picks = np.tile(np.arange(len(gains[group])), len(cost))
            done = moved_gain >= need
            if done.any():  # a plan: the later groups stay put
                best = int(np.argmin(np.where(done, moved_cost, np.inf)))
                if moved_cost[best] < upper:
                    upper, found = float(moved_cost[best]), (k, int(parents[best]),
                                                               int(picks[best]))
            keep = ~done
            grown.setdefault((count + 1, mask), []).append(
                (moved_cost[keep], moved_gain[keep], parents[keep], picks[keep]))
        states, layer_parent, layer_pick = {}, [], []
        margin = upper + 1e-9 * (1.0 + upper) if math.isfinite(upper) else math.inf
        total = 0
        for (count, mask), parts in sorted(grown.items()):
            cost = np.concatenate([p[0] for p in parts])
            gain = np.concatenate([p[1] for p in parts])
            parent = np.concatenate([p[2] for p in parts])
            pick = np.concatenate([p[3] for p in parts])
            bound = cost + suffixes[k + 1].bound(need - gain, np.full(len(cost), limit - count))
            alive = np.isfinite(bound) & (bound <= margin)
            cost, gain, parent, pick = cost[alive], gain[alive], parent[alive], pick[alive]
            if len(cost) == 0:
                continue
            order_here = np.lexsort((-gain, cost))
            best_before = np.maximum.accumulate(_after(-np.inf, gain[order_here]))[:-1]
            kept = order_here[gain[order_here] > best_before]  # no cheaper state gains as much
            states[(count, mask)] = (cost[kept], gain[kept], np.arange(total, total + len(kept)))
            layer_parent.append(parent[kept])
            layer_pick.append(pick[kept])
            total += len(kept)
        history.append((np.concatenate([np.zeros(0, int), *layer_parent]),
                        np.concatenate([np.zeros(0, int), *layer_pick])))
        if not states:
            break
    if found is None:
        return None
    return _rebuild(found, history, order, groups)


def _rebuild(found: tuple[int, int, int], history: list[tuple[np.ndarray, np.ndarray]],
             order: list[int], groups: int) -> tuple[int, ...]:
    """The choice behind a plan found at layer k: follow the parents back to the start."""
    k, parent, pick = found
    choice = [-1] * groups
    choice[order[k]] = pick
    for layer in range(k - 1, -1, -1):
        parents, picks = history[layer]
        choice[order[layer]] = int(picks[parent])
        parent = int(parents[parent])
    return tuple(choice)


def _exact_run(program: Program, cap: float) -> tuple[int, ...] | None:
    """The best choice of the program's objective with every cost within `cap` (None if no
    choice keeps the rules), over the candidates `recourse.program` keeps."""
    gains, costs = _tables(program)
    changes = [k[k != now] for k, now in zip(_kept(program, cap), program.current, strict=True)]
    moves = [_denoised(gains[g][c], costs[g][c]) for g, c in enumerate(changes)]
    gain, cost = [m[0] for m in moves], [m[1] for m in moves]
    need = _need(program)
    limit = len(changes) if program.max_changes is None else program.max_changes
    if program.objective == "total-cost":
        picked = cheapest(gain, cost, need, limit, program.forbidden)
    elif program.objective == "fewest-changes":
        picked = _fewest(gain, cost, need, limit, program.forbidden, math.inf)
    else:
        lowest = _closed_form(program)  # the optimum with no forbidden sets
        if lowest is None:
            return None
        picked = _least_largest(gain, cost, need, limit, program.forbidden, lowest)
    if picked is None:
        return None
    return tuple(now if pick < 0 else int(c[pick])
                 for now, pick, c in zip(program.current, picked, changes, strict=True))


def _fewest(gains: list[np.ndarray], costs: list[np.ndarray], need: float, limit: int,
            forbidden: Sequence[frozenset[int]], cap: float) -> tuple[int, ...] | None:
    """The fewest changes within `cap` that reach the need (None if none keeps the rules).

    Of a group's changes only the one that gains most within the cap is worth taking, so
    the search is over which groups change: a dynamic program whose states (changes, cuts
    still open) keep their largest gain, dropped when the best later gains cannot reach."""
    best = []
    for gain, cost in zip(gains, costs, strict=True):
        within = np.flatnonzero(cost <= cap)
        best.append(int(within[np.argmax(gain[within])]) if len(within) else -1)
    groups = len(gains)
    if any(not f for f in forbidden):
        return None  # an empty set is changed by every choice
    if need <= 0:
        return (-1,) * groups
    value = [float(gains[g][b]) if b >= 0 else 0.0 for g, b in enumerate(best)]
    order = sorted((g for g in range(groups) if best[g] >= 0), key=lambda g: -value[g])
    cuts = [f for f in forbidden if all(best[g] >= 0 for g in f)]  # others cannot close
    last = [max(order.index(g) for g in f) for f in cuts]
    # states: (changes, open cuts) -> (largest gain, the groups changed)
    states = {(0, (1 << len(cuts)) - 1): (0.0, ())}
    found: tuple[int, ...] | None = None
    for k, group in enumerate(order):
        inside = sum(1 << i for i, f in enumerate(cuts) if group in f)
        closing = sum(1 << i for i, at in enumerate(last) if at == k)
        later = sorted((value[g] for g in order[k + 1:]), reverse=True)
        most = limit if found is None else min(limit, len(found) - 1)
        grown: dict[tuple[int, int], tuple[float, tuple[int, ...]]] = {}
        for (count, mask), (gain, changed) in states.items():
            options = [((count, mask & ~inside), (gain, changed))]
            if count < most and not mask & closing:
                options.append(((count + 1, mask), (gain + value[group], (*changed, group))))
            for key, state in options:
                if state[0] >= need:  # a plan with key[0] changes: the later groups stay
                    if found is None or key[0] < len(found):
                        found = state[1]
                    continue
                if key[0] >= most or state[0] + sum(later[:most - key[0]]) < need:
                    continue  # no change left, or even the best later gains fall short
                if key not in grown or grown[key][0] < state[0]:
                    grown[key] = state
        states = grown
    if found is None:
        return None
    return tuple(best[g] if g in found else -1 for g in range(groups))


def _least_largest(gains: list[np.ndarray], costs: list[np.ndarray], need: float, limit: int,
                   forbidden: Sequence[frozenset[int]], lowest: float) -> tuple[int, ...] | None:
    """The choice whose largest cost is least: the cheapest cap under which some choice still
    reaches the need. The caps tried are the costs that occur from `lowest` (the optimum
    without the forbidden sets, a lower bound) up, doubling the step until one reaches, then
    bisecting."""
    levels = np.unique(np.concatenate([np.zeros(1), *costs]))
    levels = levels[levels >= lowest - NOISE]  # costs below NOISE count as 0 here
    low, step, high, best = 0, 1, len(levels) - 1, None
    while low <= high:  # gallop up from the lower bound
        probe = min(low + step - 1, high)
        best = _fewest(gains, costs, need, limit, forbidden, levels[probe])
        if best is not None:
            high = probe
            break
        low, step = probe + 1, 2 * step
    if best is None:
        return None
    while low < high:
        middle = (low + high) // 2
        found = _fewest(gains, costs, need, limit, forbidden, levels[middle])
        if found is None:
            low = middle + 1
        else:
            high, best = middle, found
    return best


def solve_exact(program: Program) -> Solution:
    """Solve the program exactly with the dedicated search; the same contract as
    `recourse.program.solve` (ties to the least total cost, the choice verified in Python).

    A program with pair rules (a link between two features, a level that bounds a number)
    or pairwise terms of the model (two features' tables read together) is handed to the
    integer program (HiGHS), exactly, and the message says so."""
    if program.pairs or program.tables:
        found = solve(program, "highs")
        why = "pairwise terms" if program.tables else "linked rules"
        return replace(found, message=found.message.replace(
            "(highs)", f"(highs: {HANDED_OFF} {why})"))
    return _lexicographic(program, _exact_run, NAME)  # checks the program first

