"""The recourse program: pick one candidate per feature, reach the threshold, pay least.

Array in, result out: a `Program` holds tuples or arrays built from the candidate tables, `solve`
returns a `Solution` whose choice, score and objective are recomputed in Python. Candidates
that cannot be in a best choice are dropped first (dominance, the gap, a Lagrangian bound);
what is left is searched by listing its combinations when few enough (recourse.combinations),
else as an integer program (pulp: HiGHS or CBC). Both are exact. Rules between two groups
(`pairs`, recourse.pairs) and the model's pairwise terms (`tables`, recourse.pairs.PairValues:
the score gains a table's value at the two groups' picks) go to the integer program only, and
the reductions keep every candidate of a group either names (see `_kept`). Ties on
largest-cost and fewest-changes go to the least total cost, exactly: a second solve minimises
total cost among the choices that keep the first optimum (a small weight on total cost would
have to sit below the gaps between cost levels, which can be finer than solver tolerances).
"""

from __future__ import annotations

import functools
import math
import numbers
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np

from recourse.choices import DEFAULT_SOLVER, SOLVERS
from recourse.combinations import best_combination, changed_sets
from recourse.errors import PlanningError
from recourse.pairs import (
    PairRule,
    PairValues,
    allowed_picks,
    check_pairs,
    check_values,
    keeps,
    most_gain,
    pair_rows,
    paired_groups,
    value_columns,
    value_gains,
)
from recourse.relaxation import Relaxation

BUFFER = 1e-6  # the solver must pass the threshold by this much (link scale), so plans always do
OBJECTIVES = ("total-cost", "largest-cost", "fewest-changes")
DIRECTIONS = ("at-least", "at-most")
TOLERANCE = 1e-9  # feasibility and integrality tolerance asked of the solvers
NOISE = 1e-12  # gains and costs below this are zero to the solvers


@dataclass(frozen=True)
class Program:
    """One row's choice: per group (feature) the candidates' contributions and costs."""

    base: float
    contributions: tuple[Sequence[float], ...]  # tuples or numpy arrays
    costs: tuple[Sequence[float], ...]
    current: tuple[int, ...]
    threshold: float
    direction: str
    objective: str
    max_changes: int | None = None
    forbidden: tuple[frozenset[int], ...] = ()  # sets of groups that may not all change
    names: tuple[str, ...] = ()
    pairs: tuple[PairRule, ...] = ()  # which candidates of two groups may go together
    tables: tuple[PairValues, ...] = ()  # pairwise terms: what two groups' picks add together


@dataclass(frozen=True)
class Solution:
    """The solver's verdict; `choice`, `objective` and `score` are recomputed in Python."""

    status: str
    choice: tuple[int, ...] = ()
    objective: float = math.nan
    score: float = math.nan
    message: str = ""


@dataclass(frozen=True)
class _Rows:
    """The program as linear rows over x (one binary per kept candidate) and, maybe, t."""

    kept: list[np.ndarray]  # per group, the candidate indices that get a binary, in column order
    objective: np.ndarray  # over the binaries, then t under largest-cost, then the cells
    rows: list[tuple[np.ndarray, np.ndarray, str, float]]  # (columns, coefficients, sense, rhs)

    @property
    def binaries(self) -> int:
        return int(sum(len(k) for k in self.kept))


def _label(program: Program, group: int) -> str:
    name = f" ({program.names[group]})" if program.names else ""
    return f"group {group}{name}"


def _whole(value: object) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def _current_score(program: Program) -> float:
    pairs = zip(program.contributions, program.current, strict=True)
    return float(program.base + sum(values[now] for values, now in pairs)
                 + value_gains(program.tables, program.current))


def _blocked(program: Program, changed: frozenset[int]) -> bool:
    """Whether a set of changed groups holds every group of some forbidden set."""
    return any(forbidden <= changed for forbidden in program.forbidden)


def _changed(program: Program, choice: tuple[int, ...]) -> frozenset[int]:
    pairs = enumerate(zip(choice, program.current, strict=True))
    return frozenset(group for group, (picked, now) in pairs if picked != now)


def _check(program: Program) -> None:
    """Raise ValueError on a malformed program: these are programmer errors, not user errors."""
    groups = len(program.contributions)
    if len(program.costs) != groups or len(program.current) != groups:
        raise ValueError(f"program has {groups} contribution groups, {len(program.costs)} cost "
                         f"groups and {len(program.current)} current indices; they must match")
    if program.names and len(program.names) != groups:
        raise ValueError(f"program has {len(program.names)} names for {groups} groups")
    if program.direction not in DIRECTIONS:
        raise ValueError(f"unknown direction {program.direction!r}; known: {', '.join(DIRECTIONS)}")
    if program.objective not in OBJECTIVES:
        raise ValueError(f"unknown objective {program.objective!r}; known: {', '.join(OBJECTIVES)}")
    if not (math.isfinite(program.base) and math.isfinite(program.threshold)):
        raise ValueError("program base and threshold must be finite numbers")
    limit = program.max_changes
    if limit is not None and not (_whole(limit) and limit >= 0):
        raise ValueError(f"max_changes must be None or a whole number >= 0, not {limit!r}")
    for group, (values, costs, now) in enumerate(
            zip(program.contributions, program.costs, program.current, strict=True)):
        where = _label(program, group)
        if len(values) == 0 or len(values) != len(costs):
            raise ValueError(f"{where} has {len(values)} contributions and {len(costs)} costs; "
                             "they must match and not be empty")
        if not (np.isfinite(values).all() and np.isfinite(costs).all()
                and np.min(costs) >= 0):
            raise ValueError(f"{where} has a contribution or cost that is not a finite number, "
                             "or a negative cost")
        if not (_whole(now) and 0 <= now < len(values)):
            raise ValueError(f"{where} current index {now!r} is not in 0..{len(values) - 1}")
        if costs[now] != 0:
            raise ValueError(f"{where} current candidate costs {costs[now]}, it must cost 0")
    for changed in program.forbidden:
        if not all(_whole(g) and 0 <= g < groups for g in changed):
            raise ValueError(f"forbidden set {sorted(changed)} names a group outside "
                             f"0..{groups - 1}")
    check_pairs(program.pairs, [len(values) for values in program.contributions])
    check_values(program.tables, [len(values) for values in program.contributions])


def _sign(program: Program) -> float:
    return 1.0 if program.direction == "at-least" else -1.0


def gain_needed(score: float, threshold: float, direction: str) -> float:
    """The gain over `score`, toward the goal in `direction`, that passes the threshold by
    the buffer (what every plan must add; the candidates and the program share it)."""
    return (1.0 if direction == "at-least" else -1.0) * (threshold - score) + BUFFER


def _need(program: Program) -> float:
    return gain_needed(_current_score(program), program.threshold, program.direction)


def _tables(program: Program) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Per group, each candidate's gain over the current one (towards the goal) and its cost."""
    sign = _sign(program)
    gains = [sign * (np.asarray(v, float) - v[now])
             for v, now in zip(program.contributions, program.current, strict=True)]
    return gains, [np.asarray(c, float) for c in program.costs]


def best_changes(gains: np.ndarray, costs: np.ndarray, need: float = math.inf) -> np.ndarray:
    """Indices of the changes of one group that can be in a cheapest plan, cheapest first.

    A change is kept when it gains more than staying put and than every cheaper change (of
    equal costs, the one that gains most), and only up to the first that gains `need`. Exact
    for every objective and rule but pair rules (a group they name keeps every candidate):
    a dropped change can be swapped for a kept one of the same group, or taken back out,
    without costing more, losing score past `need` (kept changes all gain; `need` is raised
    by what paired groups may lose) or making a forbidden set of groups change.
    """
    gains, costs = np.asarray(gains, dtype=float), np.asarray(costs, dtype=float)
    order = np.lexsort((-gains, costs))
    best_before = np.maximum.accumulate(np.r_[0.0, gains[order]])[:-1]
    kept = order[gains[order] > best_before]
    reaching = np.flatnonzero(gains[kept] >= need)
    return kept[:reaching[0] + 1] if len(reaching) else kept


def _frontier(gains: np.ndarray, costs: np.ndarray, now: int, cap: float,
              need: float) -> np.ndarray:
    """The current candidate and the changes within `cap` that `best_changes` keeps."""
    others = np.delete(np.arange(len(gains)), now)
    others = others[costs[others] <= cap]
    return np.sort(np.r_[now, others[best_changes(gains[others], costs[others], need)]])


def _known_choice(program: Program, relaxation: Relaxation,
                  reaching: np.ndarray) -> tuple[int, ...] | None:
    """A choice that keeps every rule, from the relaxation's; None if none was found.

    When the relaxation's choice changes a forbidden set of groups, the relaxation is
    searched again with each of those groups held at its current candidate in turn.
    """
    def picked(taken: np.ndarray) -> tuple[int, ...]:
        choice = list(program.current)
        for group in np.flatnonzero(taken >= 0):
            choice[group] = int(relaxation.changes[group][taken[group]])
        return tuple(choice)

    def allowed(choice: tuple[int, ...]) -> bool:
        return not _blocked(program, _changed(program, choice)) and keeps(program.pairs, choice)

    first = picked(reaching)
    if allowed(first):
        return _polished(program, first)
    found = []
    for group in sorted(_changed(program, first)):
        other = relaxation.search(held=group)[2]
        if other is not None and allowed(picked(other)):
            choice = _polished(program, picked(other))
            found.append((sum(c[k] for c, k in zip(program.costs, choice, strict=True)), choice))
    return min(found)[1] if found else None


def _fixed_by_bound(program: Program, gains: list[np.ndarray], costs: list[np.ndarray],
                    kept: list[np.ndarray]) -> list[np.ndarray]:
    """Drop the changes that cannot be in any choice cheaper than a known one (total cost).

    The known choice comes from the relaxation and is polished; a change whose Lagrangian
    bound exceeds its cost cannot improve on it (reduced-cost fixing; common practice, no
    source). Forbidden sets and pair rules only shrink the choices, so the bounds stay valid
    with them; the known choice keeps them (`_known_choice`).
    """
    limit = len(kept) if program.max_changes is None else program.max_changes
    need = _need(program)
    if limit < 1 or need <= 0 or not kept:
        return kept
    relaxation = Relaxation(gains, costs, kept, program.current, need, limit)
    _, multiplier, reaching = relaxation.search()
    choice = None if reaching is None else _known_choice(program, relaxation, reaching)
    if choice is None:
        return kept
    known = float(sum(c[k] for c, k in zip(costs, choice, strict=True)))
    worst = known + 1e-9 * (1.0 + known)  # keep anything that might tie, rounding included
    bounds = relaxation.bounds(multiplier)
    out = []
    for group, now in enumerate(program.current):
        changes = relaxation.changes[group]
        keep = changes[bounds[group, :len(changes)] <= worst]
        out.append(np.unique(np.r_[now, keep, choice[group]]))
    return out


def _kept(program: Program, cap: float = math.inf) -> list[np.ndarray]:
    """Per group, the candidates left to choose from: the frontier of changes within `cap`
    and, for total cost, those the Lagrangian bound cannot rule out (both exact).

    A group named by a pair rule keeps every candidate within `cap` (a dearer one, or one
    that loses, may be the only one allowed with the other group's pick); the others' cut
    at `need` is raised by the most the paired groups can lose together, so a change that
    closes that alone still closes the gap whatever they pick."""
    gains, costs = _tables(program)
    paired = paired_groups(program.pairs) | _table_groups(program)
    need = _need(program) + sum(max(0.0, -float(gains[g][costs[g] <= cap].min()))
                                for g in paired) + _table_loss(program)
    kept = [np.flatnonzero((c <= cap) | (np.arange(len(c)) == now)) if group in paired
            else _frontier(g, c, now, cap, need)
            for group, (g, c, now) in enumerate(zip(gains, costs, program.current, strict=True))]
    if program.objective == "total-cost" and not program.tables:  # the bound adds gains
        kept = _fixed_by_bound(program, gains, costs, kept)
    return kept


def _table_groups(program: Program) -> frozenset[int]:
    """The groups that a pairwise table names."""
    return frozenset(g for t in program.tables for g in (t.first, t.second))


def _table_loss(program: Program) -> float:
    """The most the pairwise tables can lose together, from their current cells (toward
    the goal): each table's worst cell, so never less than they lose."""
    sign = _sign(program)
    return float(sum(max(0.0, -float(np.min(sign * (t.table - t.at(program.current)))))
                     for t in program.tables))


def _gain_of(program: Program, choice: Sequence[int]) -> float:
    """A choice's gain over the current candidates, the pairwise tables included."""
    gains = _tables(program)[0]
    return float(sum(g[c] for g, c in zip(gains, choice, strict=True))
                 + _sign(program) * (value_gains(program.tables, choice)
                                     - value_gains(program.tables, program.current)))


def _run(program: Program, cap: float,
         mip: Callable[[Program, _Rows], tuple[int, ...] | None]) -> tuple[int, ...] | None:
    """The best choice over the kept candidates (None if none keeps the rules): by listing
    combinations when they are few enough, else by the integer program `mip`."""
    if not program.tables and sum(_gains(program, cap)[:_limit(program)]) < _need(program):
        return None  # even the best change of every group falls short: no search needed
    kept = _kept(program, cap)
    sets = _listable(program, kept)
    if sets is None:
        return mip(program, _rows(program, kept))
    gains, costs = _tables(program)
    return best_combination(gains, costs, kept, program.current, _need(program),
                            program.objective, sets)


def _listable(program: Program, kept: list[np.ndarray]) -> list[tuple[int, ...]] | None:
    """The sets of groups `best_combination` would list, or None for the integer program
    (always with pair rules or pairwise tables: the listing does not read them)."""
    if program.pairs or program.tables:
        return None
    return changed_sets(kept, program.current, program.max_changes, program.forbidden)


def _limit(program: Program) -> int:
    groups = len(program.contributions)
    return groups if program.max_changes is None else min(program.max_changes, groups)


def _denoised(gain: np.ndarray, cost: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Copies with gains and costs below NOISE set to zero, as every solver sees them.

    Solvers see values this small as noise (HiGHS once mis-scaled a cost of 5e-324); the
    choice is then judged and polished on the exact values."""
    gain, cost = np.array(gain, dtype=float), np.array(cost, dtype=float)
    gain[np.abs(gain) < NOISE], cost[cost < NOISE] = 0.0, 0.0
    return gain, cost


def _rows(program: Program, kept: list[np.ndarray]) -> _Rows:
    """Lay the program out as linear rows; shared by every solver so they solve the same thing."""
    gains, costs = _tables(program)
    gain, cost = _denoised(np.concatenate([g[k] for g, k in zip(gains, kept, strict=True)]),
                           np.concatenate([c[k] for c, k in zip(costs, kept, strict=True)]))
    sizes = [len(k) for k in kept]
    starts = np.concatenate(([0], np.cumsum(sizes)))
    n, columns = int(starts[-1]), np.arange(int(starts[-1]))
    moved = np.concatenate([k != now for k, now in zip(kept, program.current, strict=True)])
    spans = list(zip(starts[:-1], starts[1:], strict=True))
    rows = [(columns[a:b], np.ones(b - a), "=", 1.0) for a, b in spans]
    rows.append((columns[gain != 0], gain[gain != 0], ">=", _need(program)))
    if program.max_changes is not None:
        rows.append((columns[moved], np.ones(int(moved.sum())), "<=", float(program.max_changes)))
    group_of = np.repeat(np.arange(len(sizes)), sizes)[moved]
    for changed in program.forbidden:  # not every group of S changes: changes in S <= |S| - 1
        inside = np.isin(group_of, sorted(changed))
        rows.append((columns[moved][inside], np.ones(int(inside.sum())), "<=",
                     len(changed) - 1.0))
    rows += pair_rows(program.pairs, kept, starts)
    objective = cost
    if program.objective == "largest-cost":  # t >= cost of the chosen candidate in every group
        objective = np.append(np.zeros(n), 1.0)
        for a, b in spans:
            rows.append((np.append(columns[a:b], n), np.append(-cost[a:b], 1.0), ">=", 0.0))
    elif program.objective == "fewest-changes":
        objective = moved.astype(float)
    if program.tables:  # the cells of the pairwise tables, after the binaries (and t)
        cells, cell_gain, tied = value_columns(program.tables, kept, starts, len(objective),
                                               _sign(program), program.current)
        cell_gain[np.abs(cell_gain) < NOISE] = 0.0
        gain_row = rows[len(spans)]
        at = len(objective) + np.flatnonzero(cell_gain != 0)
        rows[len(spans)] = (np.r_[gain_row[0], at], np.r_[gain_row[1], cell_gain[cell_gain != 0]],
                            ">=", gain_row[3])
        rows += tied
        objective = np.append(objective, np.zeros(cells))
    return _Rows(kept, objective, rows)


def _choice(program: Program, layout: _Rows, values: np.ndarray, solver: str) -> tuple[int, ...]:
    """Round the solver's x to one candidate per group (original indices)."""
    choice, start = [], 0
    for group, kept in enumerate(layout.kept):
        chunk = values[start:start + len(kept)]
        start += len(kept)
        picked = np.flatnonzero(chunk > 0.5)
        if len(picked) != 1 or np.abs(chunk - np.round(chunk)).max() > 1e-6:
            raise RuntimeError(f"{solver} did not pick exactly one candidate in "
                               f"{_label(program, group)}: {chunk.tolist()}")
        choice.append(int(kept[picked[0]]))
    return tuple(choice)


def _judged(program: Program, choice: tuple[int, ...], solver: str) -> Solution:
    """Check every rule in Python and report score and objective computed from the tables."""
    score = float(program.base + sum(
        v[c] for v, c in zip(program.contributions, choice, strict=True))
        + value_gains(program.tables, choice))
    paid = [costs[c] for costs, c in zip(program.costs, choice, strict=True)]
    changed = _changed(program, choice)
    objective = {"total-cost": sum(paid), "largest-cost": max(paid, default=0.0),
                 "fewest-changes": len(changed)}[program.objective]
    reached = _sign(program) * (score - program.threshold) >= 0
    within = program.max_changes is None or len(changed) <= program.max_changes
    if not reached or not within or _blocked(program, changed) or not keeps(program.pairs,
                                                                             choice):
        raise RuntimeError(f"{solver} returned a choice that breaks the program's rules "
                           f"(score {score!r}, threshold {program.threshold!r}, changed "
                           f"{sorted(changed)})")
    return Solution("optimal", choice, float(objective), score, f"optimal ({solver})")


def _lexicographic(program: Program, run: Callable[[Program, float], tuple[int, ...] | None],
                   solver: str) -> Solution:
    """Find the objective's optimum, then the least total cost among choices that match it."""
    _check(program)
    if not program.contributions:  # one choice, the empty one: no solver needed
        run = _empty_run
    optimum = None
    if program.objective != "total-cost":
        if program.forbidden or program.pairs or program.tables:  # no closed form: solve first
            first = run(program, math.inf)
            optimum = None if first is None else _judged(
                program, _polished(program, first), solver).objective
        else:
            optimum = _closed_form(program)
        if optimum is None:
            return _no_plan(solver)
    cheapest = replace(program, objective="total-cost")
    if program.objective == "fewest-changes":
        cheapest = replace(cheapest, max_changes=int(optimum))
    choice = run(cheapest, optimum if program.objective == "largest-cost" else math.inf)
    if choice is None:
        if optimum is not None:
            raise RuntimeError(f"{solver} found no choice that reaches the optimum {optimum}")
        return _no_plan(solver)
    return _judged(program, _polished(cheapest, choice), solver)


def _polished(program: Program, choice: tuple[int, ...]) -> tuple[int, ...]:
    """Move single groups to cheaper candidates while every rule still holds (exact, in Python).

    Solvers take cost differences below their tolerances (~1e-7) for ties, and may keep a change
    that costs a little and gains nothing; this takes such changes back out.
    """
    (gains, costs), picked, need = _tables(program), list(choice), _need(program)
    # each move makes one group strictly cheaper, so a group moves at most once per candidate
    for _ in range(sum(len(cost) for cost in costs) + 1):
        total = _gain_of(program, picked)
        changed = _changed(program, tuple(picked))
        best = (0.0, -1, -1)  # (saving, group, candidate)
        for group, (gain, cost, now) in enumerate(zip(gains, costs, program.current,
                                                      strict=True)):
            moved = gain - gain[picked[group]] + _cross(program, picked, group)
            ok = (cost < cost[picked[group]]) & (total + moved >= need)
            if _blocked(program, changed | {group}):  # taking a group back out never blocks
                ok[np.arange(len(ok)) != now] = False
            if program.pairs:  # never into a pick a pair rule forbids
                ok &= allowed_picks(program.pairs, picked, group, len(ok))
            if ok.any():
                candidate = int(np.argmin(np.where(ok, cost, np.inf)))
                best = max(best, (cost[picked[group]] - cost[candidate], group, candidate))
        if best[1] < 0:
            return tuple(picked)
        picked[best[1]] = best[2]
    raise RuntimeError("polishing a choice moved more often than there are candidates")


def _cross(program: Program, picked: Sequence[int], group: int) -> np.ndarray:
    """What the pairwise tables gain (toward the goal) when `group` alone moves from its
    pick to each of its candidates."""
    out = np.zeros(len(program.contributions[group]))
    for t in program.tables:
        if t.first == group:
            column = t.table[:, t.second_class[picked[t.second]]][t.first_class]
        elif t.second == group:
            column = t.table[t.first_class[picked[t.first]], :][t.second_class]
        else:
            continue
        out += _sign(program) * (column - t.at(picked))
    return out


def _no_plan(solver: str) -> Solution:
    return Solution("infeasible", message=f"no choice of candidates meets the rules ({solver})")


def _empty_run(program: Program, cap: float) -> tuple[int, ...] | None:
    margin = _sign(program) * (program.base - program.threshold)
    return None if margin < BUFFER or _blocked(program, frozenset()) else ()


def _gains(program: Program, cap: float) -> list[float]:
    """Every group's best gain over its current candidate, changes costing <= cap; best first."""
    best = [gain[cost <= cap].max() for gain, cost in zip(*_tables(program), strict=True)]
    return sorted((float(gain) for gain in best if gain > 0), reverse=True)


def _closed_form(program: Program) -> float | None:
    """Fewest changes or least largest cost without forbidden sets: the top gains decide.

    With at most `max_changes` changes, the best score under a cap on each cost takes every
    group's best change within the cap and keeps the largest gains: exact, no solver needed.
    """
    need = _need(program)
    limit = len(program.contributions) if program.max_changes is None else program.max_changes
    if program.objective == "fewest-changes":
        reached = np.flatnonzero(np.cumsum([0.0, *_gains(program, math.inf)[:limit]]) >= need)
        return float(reached[0]) if len(reached) else None
    levels = np.unique(np.concatenate([np.asarray(c, dtype=float) for c in program.costs]))
    low, high = 0, len(levels) - 1
    if sum(_gains(program, levels[high])[:limit]) < need:
        return None
    while low < high:  # the cheapest cap that still reaches
        middle = (low + high) // 2
        if sum(_gains(program, levels[middle])[:limit]) >= need:
            high = middle
        else:
            low = middle + 1
    return float(levels[low])


def solve(program: Program, solver: str = DEFAULT_SOLVER) -> Solution:
    """Solve the program exactly: by listing combinations when few enough, else with PuLP and
    HiGHS or CBC, or with the dedicated search (recourse.solver); the returned choice is
    verified in Python."""
    if solver not in SOLVERS:
        raise PlanningError(f"unknown solver {solver!r}; known solvers: {', '.join(SOLVERS)}")
    if solver == "exact":
        from recourse.solver import solve_exact

        return solve_exact(program)
    from recourse.mip import pulp_run

    return _lexicographic(program, functools.partial(
        _run, mip=functools.partial(pulp_run, solver=solver)), solver)


def solve_with_scipy(program: Program) -> Solution:
    """Solve the same rows with scipy.optimize.milp: a second solver for the tests."""
    from recourse.mip import scipy_run

    return _lexicographic(program, functools.partial(_run, mip=scipy_run), "scipy")


def search_size(program: Program) -> tuple[tuple[int, ...], bool]:
    """Per group, the candidates left after the exact reductions (current one included), and
    whether they are few enough to be listed (else the integer program searches them)."""
    _check(program)
    kept = _kept(program)
    return tuple(len(k) for k in kept), _listable(program, kept) is not None


def best_reachable(program: Program) -> float:
    """The most favourable score the rules allow, ignoring the threshold and forbidden sets.

    Each group's best gain over its current candidate, the largest `max_changes` of them;
    with pair rules or pairwise tables, the most an integer program finds (recourse.pairs).
    """
    _check(program)
    limit = len(program.contributions) if program.max_changes is None else program.max_changes
    if program.pairs or program.tables:
        gained = most_gain(_tables(program)[0], program.pairs, program.max_changes,
                           program.current, program.tables, _sign(program))
        return float(_current_score(program) + _sign(program) * gained)
    gained = sum(_gains(program, math.inf)[:limit])
    return float(_current_score(program) + _sign(program) * gained)
