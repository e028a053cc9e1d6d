"""The exact recourse search compiled for a batch of rows: one call solves many programs.

`solve_rows` takes plain arrays (per row and feature group, its changes' gains and costs) and
returns, per row, up to `n_plans` plans: plan p is the optimum under cuts that forbid, for
each earlier plan of the row, changing every group that plan changes. It solves what
`recourse.program.solve` solves (total cost; least largest cost; fewest changes; ties on the
last two to the least total cost) and, like recourse.solver, searches by a dynamic program
over the groups. Nothing is capped or approximated: state arrays grow as needed, and every
bound only drops states that cannot beat a plan in hand (with a margin for rounding that
keeps, never drops, a state that might tie).

The caller's side of the contract (recourse.program's conventions):
- per row r and group g, the first `sizes[r, g]` entries of `gains[r, g]` and `costs[r, g]`
  are the group's changes (staying put is implied: gain 0, cost 0); the rest is padding.
  Gains are towards the goal, over the current value; costs >= 0 and finite (values below
  recourse.program.NOISE set to 0 by the caller, as every solver sees them). A change that
  gains nothing (gain <= 0) is never needed and is ignored here.
- `need[r]` is the gain a plan must reach (>=), BUFFER included. With need <= 0 staying put
  is the one plan (found 1, every group -1): every later plan would change the empty set.
- `limit[r]` the most changes (the number of groups when unlimited).

Kept as one module, longer than the house's ~600 lines, on purpose: numba's cache
(cache=True) checks the file of the function it compiled, not the files of compiled
helpers it calls, so a helper moved elsewhere could be edited without the cache noticing.
"""

from __future__ import annotations

import numpy as np
from numba import njit

MOST_PLANS = 64  # cuts are bits of an int64 mask: 63 earlier plans at most
TOTAL_COST, LARGEST_COST, FEWEST_CHANGES = 0, 1, 2
TIE = 1e-9  # relative margin over the best plan in hand: states that might tie are kept
SLACK = 1e-9  # relative slack on the need in every pruning test: rounding never drops a state


@njit(cache=True)
def _room(array, size):
    """`array`, or a longer copy when it holds fewer than `size` items (doubling)."""
    if size <= array.shape[0]:
        return array
    grown = np.empty(max(size, 2 * array.shape[0]), array.dtype)
    for i in range(array.shape[0]):  # a loop, not a slice: quicker to compile
        grown[i] = array[i]
    return grown


@njit(cache=True)
def _stable_by(labels, order, classes):
    """`order` re-sorted by `labels[order]` (0..classes-1), stable: a counting sort."""
    start = np.zeros(classes + 1, np.int64)
    for i in order:
        start[labels[i] + 1] += 1
    for c in range(classes):
        start[c + 1] += start[c]
    out = np.empty(order.shape[0], np.int64)
    for i in order:
        out[start[labels[i]]] = i
        start[labels[i]] += 1
    return out


@njit(cache=True)
def _keys(counts, masks, n):
    """Codes 0..K-1 of the distinct (changes, open cuts) pairs among the first n, numbered
    in (changes, mask) order, and the pairs."""
    most = 0
    for i in range(n):
        most = max(most, counts[i])
    order = _stable_by(counts, np.argsort(masks[:n], kind="mergesort"), most + 1)
    codes = np.empty(n, np.int64)
    key_count = np.empty(n, np.int64)
    key_mask = np.empty(n, np.int64)
    size = 0
    for i in order:
        if size == 0 or counts[i] != key_count[size - 1] or masks[i] != key_mask[size - 1]:
            key_count[size], key_mask[size] = counts[i], masks[i]
            size += 1
        codes[i] = size - 1
    return codes, size, key_count[:size], key_mask[:size]


@njit(cache=True)
def _frontier(gains, costs, sizes, need):
    """Per group, the changes that can be in a best plan, cheapest first: those that gain
    more than every cheaper change (of equal costs, the one that gains most), up to the
    first that gains `need` (recourse.program.best_changes: exact for every objective)."""
    groups, width = gains.shape
    gain = np.zeros((groups, width))
    cost = np.zeros((groups, width))
    pick = np.full((groups, width), -1, np.int64)
    count = np.zeros(groups, np.int64)
    for g in range(groups):
        n = sizes[g]
        by_gain = np.argsort(-gains[g, :n], kind="mergesort")
        order = by_gain[np.argsort(costs[g, :n][by_gain], kind="mergesort")]
        best = 0.0
        for i in order:
            if gains[g, i] > best:
                gain[g, count[g]], cost[g, count[g]], pick[g, count[g]] = (
                    gains[g, i], costs[g, i], i)
                count[g] += 1
                best = gains[g, i]
                if best >= need:
                    break
    return gain, cost, pick, count


@njit(cache=True)
def _layout(gain, within, changed, cuts):
    """The search's order of groups and the cuts as bits.

    Only groups with a change within the cap (`within` > 0) take part, and only cuts all
    of whose groups do (no other can be completed). Groups in cuts come first, so the cuts
    settle early, then the shortest frontiers (a state takes each change of a group but the
    last, where only the change that finishes a plan is looked up), then the largest gains.
    Per position: the cuts the group is in (`inside`)
    and those it is the last of (`closing`); `value`: each group's largest gain."""
    groups = within.shape[0]
    value = np.zeros(groups)
    for g in range(groups):
        if within[g] > 0:
            value[g] = gain[g, within[g] - 1]  # gains rise along the frontier
    live = np.zeros(cuts, np.bool_)
    in_cut = np.zeros(groups, np.int64)
    for c in range(cuts):
        live[c] = True
        for g in range(groups):
            if changed[c, g] and within[g] == 0:
                live[c] = False
        if live[c]:
            for g in range(groups):
                if changed[c, g]:
                    in_cut[g] = 1
    taking = np.empty(groups, np.int64)
    size = 0
    for g in range(groups):
        if within[g] > 0:
            taking[size] = g
            size += 1
    taking = taking[:size]
    by_value = taking[np.argsort(-value[taking], kind="mergesort")]
    by_length = by_value[np.argsort(within[by_value], kind="mergesort")]
    order = _stable_by(1 - in_cut, by_length, 2)
    position = np.full(groups, -1, np.int64)
    for k in range(size):
        position[order[k]] = k
    inside = np.zeros(size, np.int64)
    closing = np.zeros(size, np.int64)
    full, bit = 0, 0
    for c in range(cuts):
        if not live[c]:
            continue
        last = -1
        for g in range(groups):
            if changed[c, g]:
                inside[position[g]] |= 1 << bit
                last = max(last, position[g])
        if last < 0:
            continue  # an empty cut: the caller never makes one
        closing[last] |= 1 << bit
        full |= 1 << bit
        bit += 1
    return order, size, inside, closing, full, value


@njit(cache=True)
def _top(order, size, value):
    """top[k, i]: the sum of the i largest gains of the groups at positions k, k + 1, ...
    (all of them when fewer than i)."""
    top = np.zeros((size + 1, size + 1))
    for k in range(size):
        later = value[order[k:]]
        later = later[np.argsort(-later, kind="mergesort")]  # largest first
        for i in range(size):
            top[k, i + 1] = top[k, i] + (later[i] if i < later.shape[0] else 0.0)
    return top


@njit(cache=True)
def _changes_in(order, size, within):
    """How many frontier changes the first `size` groups of `order` hold."""
    total = 0
    for k in range(size):
        total += within[order[k]]
    return total


@njit(cache=True)
def _hulls(order, size, gain, cost, within):
    """Each group's lower convex hull of (gain, cost) from staying put over its first
    `within` frontier changes, as segments: their slopes, lengths (in gain) and the
    position k of their group (group order[k])."""
    total = _changes_in(order, size, within)
    seg_slope = np.empty(total)
    seg_length = np.empty(total)
    seg_at = np.empty(total, np.int64)
    hull = np.empty(total + 1, np.int64)
    segments = 0
    for k in range(size):
        g = order[k]
        hull[0], points = -1, 1  # -1 stands for staying put: (0, 0)
        for j in range(within[g]):
            while points >= 2:  # drop the last point while it is on or above the chord
                a, b = hull[points - 2], hull[points - 1]
                ga, ca = (0.0, 0.0) if a < 0 else (gain[g, a], cost[g, a])
                gb, cb = gain[g, b], cost[g, b]
                if (cb - ca) * (gain[g, j] - ga) >= (cost[g, j] - ca) * (gb - ga):
                    points -= 1
                else:
                    break
            hull[points] = j
            points += 1
        for p in range(1, points):
            a, b = hull[p - 1], hull[p]
            ga, ca = (0.0, 0.0) if a < 0 else (gain[g, a], cost[g, a])
            seg_length[segments] = gain[g, b] - ga
            seg_slope[segments] = (cost[g, b] - ca) / seg_length[segments]
            seg_at[segments] = k
            segments += 1
    return seg_slope[:segments], seg_length[:segments], seg_at[:segments]


@njit(cache=True)
def _suffixes(order, size, gain, cost, within):
    """What the groups from each position on can still add, for the lower bound on cost.

    The linear relaxation (Zemel 1984): each group's lower convex hull of (gain, cost) from
    staying put over its frontier, all groups' hull segments taken cheapest per unit of gain
    first; per position k, the cumulative gain `reach[k]` and cost `paid[k]` of the segments
    of groups at k or later, and their `slope`. With one change left: every change of those
    groups by gain (`single_gain[k]`) and the least cost of one gaining as much or more."""
    seg_slope, seg_length, seg_at = _hulls(order, size, gain, cost, within)
    segments = seg_slope.shape[0]
    total = _changes_in(order, size, within)
    one_gain = np.empty(total)
    one_cost = np.empty(total)
    one_at = np.empty(total, np.int64)
    changes = 0
    for k in range(size):
        g = order[k]
        for j in range(within[g]):
            one_gain[changes], one_cost[changes], one_at[changes] = gain[g, j], cost[g, j], k
            changes += 1
    by_slope = np.argsort(seg_slope[:segments], kind="mergesort")
    by_gain = np.argsort(one_gain[:changes], kind="mergesort")
    reach = np.zeros((size + 1, segments + 1))
    paid = np.zeros((size + 1, segments + 1))
    slope = np.zeros((size + 1, segments + 1))
    n_segments = np.zeros(size + 1, np.int64)
    single_gain = np.zeros((size + 1, changes + 1))
    single_cost = np.zeros((size + 1, changes + 1))
    n_single = np.zeros(size + 1, np.int64)
    for k in range(size + 1):
        i = 0
        for s in by_slope:
            if seg_at[s] >= k:
                slope[k, i] = seg_slope[s]
                reach[k, i + 1] = reach[k, i] + seg_length[s]
                paid[k, i + 1] = paid[k, i] + seg_slope[s] * seg_length[s]
                i += 1
        n_segments[k] = i
        i = 0
        for s in by_gain:
            if one_at[s] >= k:
                single_gain[k, i], single_cost[k, i] = one_gain[s], one_cost[s]
                i += 1
        n_single[k] = i
        for j in range(i - 2, -1, -1):
            single_cost[k, j] = min(single_cost[k, j], single_cost[k, j + 1])
    return reach, paid, slope, n_segments, single_gain, single_cost, n_single


@njit(cache=True)
def _lower(k, rest, left, top, size, reach, paid, slope, n_segments, single_gain, single_cost,
           n_single):
    """A lower bound on the cost of adding `rest` more gain with the groups from position k
    on, with at most `left` changes (inf where that is out of reach). `rest` already has the
    slack taken off, so rounding never makes it too large."""
    if rest <= 0.0:
        return 0.0
    if left <= 0 or top[k, min(left, size - k)] < rest:
        return np.inf
    n = n_segments[k]
    if reach[k, n] < rest:  # rounding only (the top gains reach): the whole hull's cost
        bound = paid[k, n]
    else:
        low = _first_reaching(reach[k], 1, n, rest)
        bound = paid[k, low - 1] + slope[k, low - 1] * (rest - reach[k, low - 1])
    if left == 1:
        low = _first_reaching(single_gain[k], 0, n_single[k], rest)
        bound = max(bound, single_cost[k, low] if low < n_single[k] else np.inf)
    return bound


@njit(cache=True)
def _first_reaching(values, low, high, rest):
    """The first position in low..high of the ascending `values` at or past `rest` (high
    when none is), by bisection."""
    while low < high:
        middle = (low + high) // 2
        if values[middle] >= rest:
            high = middle
        else:
            low = middle + 1
    return low


@njit(cache=True)
def _first_gaining(gain, n, least):
    """The first of the n rising gains that is >= `least` (n when none is)."""
    return _first_reaching(gain, 0, n, least)


@njit(cache=True)
def _cheapest(order, size, inside, closing, full, value, gain, cost, within, need, limit,
              known, picks):
    """The least total cost of a plan over the groups' frontiers (the first `within` changes
    of each), at most `limit` changes, no cut completed; inf when there is none. `picks`
    gets the frontier position each group takes (-1: stays). `known`: the cost of a plan
    in hand (inf: none), whose changes the frontiers hold; from the start, states whose
    bound passes it go.

    Layer k extends every state by group order[k]: it stays (cuts it is in can no longer be
    completed) or takes one change. A state that reaches the need is a plan (the later groups
    stay put, which completes no cut still open). Per (changes, open cuts), only states that
    no cheaper state out-gains are kept; a state goes when its cost plus the lower bound of
    the later groups passes the best plan in hand."""
    top = _top(order, size, value)
    reach, paid, slope, n_segments, single_gain, single_cost, n_single = _suffixes(
        order, size, gain, cost, within)
    slack = SLACK * (1.0 + need)
    upper, margin = np.inf, known + TIE * (1.0 + known)
    found_parent, found_layer, found_pick = -1, -1, -1
    # the layer's states, grouped by key; every state ever kept is in the history
    state_cost, state_gain = np.zeros(1), np.zeros(1)
    state_id = np.zeros(1, np.int64)
    key_count, key_mask = np.zeros(1, np.int64), np.full(1, full, np.int64)
    key_start = np.array([0, 1], np.int64)
    history_parent, history_pick = np.full(64, -1, np.int64), np.full(64, -1, np.int64)
    held = 1  # the start: no change, every cut open
    new_cost, new_gain, new_bound = np.empty(64), np.empty(64), np.empty(64)
    new_parent, new_pick, new_code = (np.empty(64, np.int64), np.empty(64, np.int64),
                                      np.empty(64, np.int64))
    for k in range(size):
        g = order[k]
        n = within[g]
        keys = key_count.shape[0]
        target_count = np.empty(2 * keys, np.int64)
        target_mask = np.empty(2 * keys, np.int64)
        for a in range(keys):
            target_count[2 * a], target_mask[2 * a] = key_count[a], key_mask[a] & ~inside[k]
            target_count[2 * a + 1], target_mask[2 * a + 1] = key_count[a] + 1, key_mask[a]
        codes, targets, next_count, next_mask = _keys(target_count, target_mask, 2 * keys)
        room = state_cost.shape[0] * (1 + n)
        new_cost, new_gain, new_bound = (_room(new_cost, room), _room(new_gain, room),
                                         _room(new_bound, room))
        new_parent, new_pick, new_code = (_room(new_parent, room), _room(new_pick, room),
                                          _room(new_code, room))
        m = 0
        for a in range(keys):
            left = limit - key_count[a]
            moving = left > 0 and (key_mask[a] & closing[k]) == 0
            for i in range(key_start[a], key_start[a + 1]):
                spent, gained = state_cost[i], state_gain[i]
                bound = spent + _lower(k + 1, need - gained - slack, left, top, size, reach,
                                       paid, slope, n_segments, single_gain, single_cost,
                                       n_single)
                if bound <= margin:
                    new_cost[m], new_gain[m], new_bound[m] = spent, gained, bound
                    new_parent[m], new_pick[m], new_code[m] = state_id[i], -1, codes[2 * a]
                    m += 1
                if not moving:
                    continue
                # gains rise along the frontier: the changes before `first` leave the state
                # short even with the largest later gains (the bound would drop them); with
                # no change left after this one, only the first that finishes can be a plan
                after = min(left - 1, size - k - 1)  # changes that may follow this one
                reach_later = top[k + 1, after]
                first = _first_gaining(gain[g], n, need - gained - reach_later - 2.0 * slack)
                for j in range(first, n):
                    paying = spent + cost[g, j]
                    if paying > margin:
                        break  # the frontier gets dearer from here
                    getting = gained + gain[g, j]
                    if getting >= need:  # a plan; dearer changes of this group add nothing
                        if paying < upper:
                            upper, margin = paying, paying + TIE * (1.0 + paying)
                            found_parent, found_layer, found_pick = state_id[i], k, j
                        break
                    if after == 0:
                        continue  # short of the need with no change left: never a plan
                    bound = paying + _lower(k + 1, need - getting - slack, left - 1, top,
                                            size, reach, paid, slope, n_segments,
                                            single_gain, single_cost, n_single)
                    if bound <= margin:
                        new_cost[m], new_gain[m], new_bound[m] = paying, getting, bound
                        new_parent[m], new_pick[m] = state_id[i], j
                        new_code[m] = codes[2 * a + 1]
                        m += 1
        # by key, then cost: keep a state only when it out-gains every cheaper one of its key
        ranked = _stable_by(new_code, np.argsort(new_cost[:m], kind="mergesort"), targets)
        state_cost, state_gain = np.empty(m), np.empty(m)
        state_id = np.empty(m, np.int64)
        key_count, key_mask = np.empty(targets, np.int64), np.empty(targets, np.int64)
        key_start = np.zeros(targets + 1, np.int64)
        history_parent = _room(history_parent, held + m)
        history_pick = _room(history_pick, held + m)
        kept, keys, code, best = 0, 0, -1, -np.inf
        for i in ranked:
            if new_bound[i] > margin:
                continue
            if new_code[i] != code:
                if kept > key_start[keys]:
                    keys += 1
                code, best = new_code[i], -np.inf
                key_count[keys], key_mask[keys] = next_count[code], next_mask[code]
                key_start[keys] = kept
            if new_gain[i] <= best:
                continue
            if kept > key_start[keys] and new_cost[i] == state_cost[kept - 1]:
                kept -= 1  # as cheap as the last one kept and gains more: it replaces it
            state_cost[kept], state_gain[kept], best = new_cost[i], new_gain[i], new_gain[i]
            history_parent[held + kept], history_pick[held + kept] = new_parent[i], new_pick[i]
            state_id[kept] = held + kept
            kept += 1
        if kept > key_start[keys]:
            keys += 1
        key_start[keys] = kept
        key_count, key_mask, key_start = key_count[:keys], key_mask[:keys], key_start[:keys + 1]
        state_cost, state_gain, state_id = state_cost[:kept], state_gain[:kept], state_id[:kept]
        held += kept
        if kept == 0:
            break
    for g in range(picks.shape[0]):
        picks[g] = -1
    if found_layer < 0:
        return np.inf
    picks[order[found_layer]] = found_pick
    state = found_parent
    for layer in range(found_layer - 1, -1, -1):
        picks[order[layer]] = history_pick[state]
        state = history_parent[state]
    return upper


@njit(cache=True)
def _fewest(order, size, inside, closing, full, value, need, limit):
    """The fewest changes that reach the need without completing a cut (-1: none), each
    group taking its largest gain within the cap (`value`; which change of a group is
    taken does not matter to the cuts). States (changes, open cuts) keep their largest
    gain; a state goes when even the largest later gains within the changes left fall
    short, or when it cannot come in under the fewest found so far."""
    top = _top(order, size, value)
    slack = SLACK * (1.0 + need)
    most, found = min(limit, size), -1
    counts, masks = np.zeros(1, np.int64), np.full(1, full, np.int64)
    gains = np.zeros(1)
    for k in range(size):
        g = order[k]
        n = counts.shape[0]
        next_count, next_mask = np.empty(2 * n, np.int64), np.empty(2 * n, np.int64)
        next_gain = np.empty(2 * n)
        m = 0
        for i in range(n):
            next_count[m], next_mask[m], next_gain[m] = counts[i], masks[i] & ~inside[k], gains[i]
            m += 1
            if counts[i] < most and (masks[i] & closing[k]) == 0:
                if gains[i] + value[g] >= need:
                    found, most = counts[i] + 1, counts[i]
                else:
                    next_count[m], next_mask[m] = counts[i] + 1, masks[i]
                    next_gain[m] = gains[i] + value[g]
                    m += 1
        alive = np.zeros(m, np.int64)
        a = 0
        for i in range(m):
            left = most - next_count[i]
            if left > 0 and next_gain[i] + top[k + 1, min(left, size - k - 1)] >= need - slack:
                alive[a] = i
                a += 1
        alive = alive[:a]
        codes, keys, key_count, key_mask = _keys(next_count[alive], next_mask[alive], a)
        best = np.full(keys, -np.inf)
        for i in range(a):
            best[codes[i]] = max(best[codes[i]], next_gain[alive[i]])
        counts, masks, gains = key_count, key_mask, best
        if keys == 0:
            break
    return found


@njit(cache=True)
def _within(cost, count, cap):
    """Per group, how many of its frontier changes cost at most `cap` (a prefix: the
    frontier is cheapest first)."""
    groups = count.shape[0]
    within = np.zeros(groups, np.int64)
    for g in range(groups):
        while within[g] < count[g] and cost[g, within[g]] <= cap:
            within[g] += 1
    return within


@njit(cache=True)
def _relaxed(gain, cost, within, multiplier, limit, least, taken):
    """The Lagrangian relaxation at `multiplier` >= 0 (the need moved into the objective):
    per group its least reduced cost min(0, cost - multiplier * gain) (`least`; ties to the
    larger gain) and that change (`taken`, -1: none); of those, the `limit` most negative
    stay taken. Returns the bound less multiplier * need: the sum of the taken `least`."""
    groups = within.shape[0]
    for g in range(groups):
        least[g], taken[g] = 0.0, -1
        for j in range(within[g]):
            reduced = cost[g, j] - multiplier * gain[g, j]
            if reduced <= least[g]:
                least[g], taken[g] = reduced, j
    bound = 0.0
    for rank, g in enumerate(np.argsort(least, kind="mergesort")):
        if rank < limit:
            bound += least[g]
        else:
            taken[g] = -1
    return bound


@njit(cache=True)
def _completes(taken, changed, cuts):
    """Whether changing the groups with taken >= 0 completes one of the first `cuts` cuts."""
    for c in range(cuts):
        every = True
        for g in range(taken.shape[0]):
            if changed[c, g] and taken[g] < 0:
                every = False
                break
        if every:
            return True
    return False


@njit(cache=True)
def _reaching(gain, cost, within, slopes, need, limit, least, taken):
    """The relaxation's choice at the least hull slope at which it reaches the need (by
    bisection; at a slope the group there takes the far end of its segment: rounded up),
    in `taken`; returns whether there is one, and the best bound seen and its multiplier."""
    low, high = 0, slopes.shape[0] - 1
    best_bound, best_multiplier, reached = 0.0, 0.0, False
    probe = high  # the top first: does it reach at all?
    while low <= high:
        bound = need * slopes[probe] + _relaxed(gain, cost, within, slopes[probe], limit,
                                                least, taken)
        if bound > best_bound:
            best_bound, best_multiplier = bound, slopes[probe]
        getting = 0.0
        for g in range(within.shape[0]):
            if taken[g] >= 0:
                getting += gain[g, taken[g]]
        if getting >= need:
            reached, high = True, probe
        elif not reached:
            break
        else:
            low = probe + 1
        if low >= high:
            if reached and probe != high:
                _relaxed(gain, cost, within, slopes[high], limit, least, taken)
            break
        probe = (low + high) // 2
    return reached, best_bound, best_multiplier


@njit(cache=True)
def _in_hand(gain, cost, within, changed, cuts, need, limit, hand):
    """A plan found cheaply, to bound the search from its start (`hand`: frontier positions,
    -1 stays; returns its cost, inf when none is found): the cheapest of the best single
    change and the relaxation's rounded choice (`_reaching`); when that completes a cut,
    the same with each of its groups held in turn (as recourse.program._known_choice).
    Also returns the multiplier of the best bound seen."""
    groups = within.shape[0]
    slopes = np.sort(_hulls(np.arange(groups), groups, gain, cost, within)[0])
    least, taken = np.empty(groups), np.full(groups, -1, np.int64)
    known = np.inf
    hand[:] = -1
    for g in range(groups if limit >= 1 else 0):
        j = _first_gaining(gain[g], within[g], need)
        if j < within[g] and cost[g, j] < known:
            taken[:] = -1
            taken[g] = j
            if not _completes(taken, changed, cuts):
                known = cost[g, j]
                hand[:] = taken
    if slopes.shape[0] == 0:
        return known, 0.0
    reached, _, multiplier = _reaching(gain, cost, within, slopes, need, limit, least, taken)
    first = taken.copy()
    for held in range(-1, groups):
        if held >= 0:
            if first[held] < 0 or not _completes(first, changed, cuts):
                continue
            kept, within[held] = within[held], 0
            reached = _reaching(gain, cost, within, slopes, need, limit, least, taken)[0]
            within[held] = kept
        paying = 0.0
        for g in range(groups):
            if taken[g] >= 0:
                paying += cost[g, taken[g]]
        if reached and paying < known and not _completes(taken, changed, cuts):
            known = paying
            hand[:] = taken
    return known, multiplier


@njit(cache=True)
def _fixed(gain, cost, within, need, limit, known, hand, multiplier):
    """The frontiers less the changes that cannot be in a plan as cheap as the one in hand
    (reduced-cost fixing, as recourse.program._fixed_by_bound): a plan that makes change j
    of group g costs at least multiplier * need + its reduced cost + the `limit` - 1 most
    negative least reduced costs of the other groups (weak duality; cuts and a cap only
    shrink the plans, so it holds under them). Kept: those within the margin for ties, and
    the plan in hand. Returns the kept changes' gains, costs, frontier positions, counts."""
    groups, width = gain.shape
    least, taken = np.empty(groups), np.empty(groups, np.int64)
    _relaxed(gain, cost, within, multiplier, groups, least, taken)
    order = np.argsort(least, kind="mergesort")
    sums = np.zeros(groups + 1)
    rank = np.empty(groups, np.int64)
    for i in range(groups):
        sums[i + 1] = sums[i] + least[order[i]]
        rank[order[i]] = i
    most = min(limit, groups)
    out_gain, out_cost = np.zeros((groups, width)), np.zeros((groups, width))
    out_at, out_count = np.zeros((groups, width), np.int64), np.zeros(groups, np.int64)
    for g in range(groups):
        others = sums[most] - least[g] if rank[g] < most - 1 else sums[max(most - 1, 0)]
        for j in range(within[g]):
            bound = multiplier * need + others + cost[g, j] - multiplier * gain[g, j]
            scale = 1.0 + known + multiplier * (need + gain[g, j]) - others  # of the terms
            if bound <= known + TIE * scale or j == hand[g]:
                n = out_count[g]
                out_gain[g, n], out_cost[g, n], out_at[g, n] = gain[g, j], cost[g, j], j
                out_count[g] += 1
    return out_gain, out_cost, out_at, out_count


@njit(cache=True)
def _plan(gain, cost, count, changed, cuts, need, limit, objective, picks):
    """One plan under the first `cuts` cuts: the objective's optimum, then the least total
    cost among the plans that keep it (exactly: a cap on each cost, or a limit on changes).
    Returns whether there is one; `picks` gets each group's frontier position (-1: stays).

    Largest cost: the least of the distinct costs under which some plan still exists, by
    bisection (the dearest first: is there a plan at all?); fewest changes: the fewest with
    no cap. Either way the check is the search over which groups change (`_fewest`)."""
    cap = np.inf
    if objective != TOTAL_COST:
        total = 0
        for g in range(count.shape[0]):
            total += count[g]
        every = np.empty(total)
        i = 0
        for g in range(count.shape[0]):
            for j in range(count[g]):
                every[i] = cost[g, j]
                i += 1
        every = every[np.argsort(every, kind="mergesort")]
        levels = np.full(1, np.inf)
        if objective == LARGEST_COST:
            levels = np.empty(total)
            i = 0
            for value in every:  # the distinct costs, in order
                if i == 0 or value != levels[i - 1]:
                    levels[i] = value
                    i += 1
            levels = levels[:i]
        if levels.shape[0] == 0:
            return False
        low = 0
        high = probe = levels.shape[0] - 1
        while True:
            within = _within(cost, count, levels[probe])
            order, size, inside, closing, full, value = _layout(gain, within, changed, cuts)
            fewest = _fewest(order, size, inside, closing, full, value, need, limit)
            if fewest >= 0:
                high = probe
            elif probe == levels.shape[0] - 1:
                return False
            else:
                low = probe + 1
            if low >= high:
                break
            probe = (low + high) // 2
        cap = levels[high]
        if objective == FEWEST_CHANGES:
            limit = fewest
    within = _within(cost, count, cap)
    hand = np.empty(within.shape[0], np.int64)
    known, multiplier = _in_hand(gain, cost, within, changed, cuts, need, limit, hand)
    if known < np.inf:
        kept_gain, kept_cost, at, kept = _fixed(gain, cost, within, need, limit, known, hand,
                                                multiplier)
        if _search(kept_gain, kept_cost, kept, changed, cuts, need, limit, known, picks):
            for g in range(picks.shape[0]):
                if picks[g] >= 0:
                    picks[g] = at[g, picks[g]]
            return True
        # only if the search, summing in its own order, reads the plan in hand as short
    return _search(gain, cost, within, changed, cuts, need, limit, np.inf, picks)


@njit(cache=True)
def _search(gain, cost, within, changed, cuts, need, limit, known, picks):
    """`_cheapest` over the frontiers' first `within` changes: whether there is a plan."""
    order, size, inside, closing, full, value = _layout(gain, within, changed, cuts)
    return _cheapest(order, size, inside, closing, full, value, gain, cost, within, need,
                     limit, known, picks) < np.inf


@njit(cache=True)
def solve_rows(gains, costs, sizes, need, limit, objective, n_plans):
    """Up to `n_plans` plans for every row: `choice` [rows, n_plans, groups], each group's
    change index (-1: stays), and `found` [rows], how many plans each row has.

    gains, costs: float64 [rows, groups, width], per group its changes, padded past
    `sizes` (int64 [rows, groups]); need: float64 [rows]; limit: int64 [rows];
    objective: 0 total cost, 1 least largest cost, 2 fewest changes (ties on 1 and 2 go
    to the least total cost). Plan p is the optimum under cuts that forbid changing every
    group an earlier plan of the row changes."""
    rows, groups, width = gains.shape
    if n_plans < 1 or n_plans > MOST_PLANS:
        raise ValueError("n_plans must be 1 to 64: each earlier plan is a bit of a mask")
    if objective < 0 or objective > 2:
        raise ValueError("objective must be 0 (total cost), 1 (largest cost) or 2 (fewest)")
    if costs.shape != gains.shape or sizes.shape != (rows, groups) or need.shape[0] != rows \
            or limit.shape[0] != rows:
        raise ValueError("gains, costs [rows, groups, width], sizes [rows, groups], need and "
                         "limit [rows] must agree in shape")
    for r in range(rows):
        if not np.isfinite(need[r]) or limit[r] < 0:
            raise ValueError("a row's need is not a finite number or its limit is negative")
        for g in range(groups):
            if sizes[r, g] < 0 or sizes[r, g] > width:
                raise ValueError("a group's size is outside 0..width")
            for j in range(sizes[r, g]):
                if not (np.isfinite(gains[r, g, j]) and np.isfinite(costs[r, g, j])
                        and costs[r, g, j] >= 0.0):
                    raise ValueError("a gain or cost is not a finite number, or a cost is "
                                     "negative")
    choice = np.full((rows, n_plans, groups), -1, np.int64)
    found = np.zeros(rows, np.int64)
    picks = np.empty(groups, np.int64)
    for r in range(rows):
        if need[r] <= 0.0:  # staying put; a later plan would change the empty set: cut
            found[r] = 1
            continue
        gain, cost, pick, count = _frontier(gains[r], costs[r], sizes[r], need[r])
        changed = np.zeros((n_plans, groups), np.bool_)
        for p in range(n_plans):
            if not _plan(gain, cost, count, changed, p, need[r], limit[r], objective, picks):
                break
            found[r] += 1
            for g in range(groups):
                if picks[g] >= 0:
                    choice[r, p, g] = pick[g, picks[g]]
                    changed[p, g] = True
    return choice, found
