"""Rules between two groups of a recourse program, in a form every solver reads.

A `PairRule` says which candidates of one group may be chosen together with which of
another: a boolean matrix over the first group's candidates x the second's. The integer
program encodes each rule with the standard linearisation of such a compatibility table
(common practice, no source): for each candidate i of the first group whose row is not all
true, x_i <= the sum of x_j over the second group's candidates j allowed with it. Since each
group picks exactly one candidate, that row holds exactly when the pick of the first group
is allowed with the pick of the second.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class PairRule:
    """Candidates of group `first` x candidates of group `second`: which may go together."""

    first: int
    second: int
    allowed: np.ndarray  # bool, (len of first's candidates, len of second's)


def paired_groups(pairs: Sequence[PairRule]) -> frozenset[int]:
    """The groups that some pair rule names."""
    return frozenset(g for p in pairs for g in (p.first, p.second))


def keeps(pairs: Sequence[PairRule], choice: Sequence[int]) -> bool:
    """Whether a choice (one candidate index per group) keeps every pair rule."""
    return all(bool(p.allowed[choice[p.first], choice[p.second]]) for p in pairs)


def allowed_picks(pairs: Sequence[PairRule], choice: Sequence[int], group: int,
                  size: int) -> np.ndarray:
    """Which candidates of `group` keep every pair rule, the other groups as in `choice`."""
    ok = np.ones(size, dtype=bool)
    for p in pairs:
        if p.first == group:
            ok &= p.allowed[:, choice[p.second]]
        if p.second == group:
            ok &= p.allowed[choice[p.first], :]
    return ok


def pair_rows(pairs: Sequence[PairRule], kept: Sequence[np.ndarray],
              starts: np.ndarray) -> list[tuple[np.ndarray, np.ndarray, str, float]]:
    """The linearised rows over the kept candidates (columns from `starts`):
    x_(first, i) - sum of allowed x_(second, j) <= 0, for each i whose row is not all true."""
    rows = []
    for p in pairs:
        first, second = kept[p.first], kept[p.second]
        table = p.allowed[np.ix_(first, second)]
        seconds = starts[p.second] + np.arange(len(second))
        for i in np.flatnonzero(~table.all(axis=1)):
            partners = seconds[table[i]]
            rows.append((np.r_[starts[p.first] + i, partners],
                         np.r_[1.0, -np.ones(len(partners))], "<=", 0.0))
    return rows


def _check_groups(what: str, first: int, second: int, sizes: Sequence[int]) -> None:
    """Raise ValueError unless `first` and `second` are two different groups of `sizes`."""
    if not (0 <= first < len(sizes) and 0 <= second < len(sizes) and first != second):
        raise ValueError(f"{what} names groups {first} and {second}, outside "
                         f"0..{len(sizes) - 1} or the same group twice")


def check_pairs(pairs: Sequence[PairRule], sizes: Sequence[int]) -> None:
    """Raise ValueError on a malformed pair rule (a programmer error, not a user's)."""
    for p in pairs:
        _check_groups("pair rule", p.first, p.second, sizes)
        shape = (sizes[p.first], sizes[p.second])
        if np.shape(p.allowed) != shape or np.asarray(p.allowed).dtype != bool:
            raise ValueError(f"pair rule between groups {p.first} and {p.second} has a "
                             f"matrix of shape {np.shape(p.allowed)}; expected booleans "
                             f"of shape {shape}")


def most_gain(gains: Sequence[np.ndarray], pairs: Sequence[PairRule],
              max_changes: int | None, current: Sequence[int],
              tables: Sequence[PairValues] = (), sign: float = 1.0) -> float:
    """The largest summed gain of one candidate per group keeping every pair rule and the
    limit on changes (the threshold and forbidden sets left out), the pairwise `tables`
    included (their gain over the current cells, toward the goal of `sign`): an integer
    program solved by scipy.optimize.milp (HiGHS), exact; -inf when no choice keeps the
    rules."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    sizes = [len(g) for g in gains]
    starts = np.r_[0, np.cumsum(sizes)]
    n = int(starts[-1])
    kept = [np.arange(s) for s in sizes]
    rows = [(np.arange(a, b), np.ones(b - a), "=", 1.0)
            for a, b in zip(starts[:-1], starts[1:], strict=True)]
    if max_changes is not None:
        moved = np.concatenate([np.arange(s) != now for s, now in zip(sizes, current,
                                                                     strict=True)])
        rows.append((np.flatnonzero(moved), np.ones(int(moved.sum())), "<=",
                     float(max_changes)))
    rows += pair_rows(pairs, kept, starts)
    cells, cell_gains, tied = value_columns(tables, kept, starts, n, sign, current)
    rows += tied
    size = n + cells
    matrix = np.zeros((len(rows), size))
    lower, upper = np.full(len(rows), -np.inf), np.full(len(rows), np.inf)
    for k, (columns, coefficients, sense, rhs) in enumerate(rows):
        matrix[k, columns] = coefficients
        lower[k] = rhs if sense == "=" else -np.inf
        upper[k] = rhs
    result = milp(-np.concatenate([*(np.asarray(g, float) for g in gains), cell_gains]),
                  constraints=LinearConstraint(matrix, lower, upper),
                  integrality=np.r_[np.ones(n), np.zeros(cells)],
                  bounds=Bounds(np.zeros(size), np.r_[np.ones(n), np.full(cells, np.inf)]),
                  options={"disp": False, "mip_rel_gap": 0.0, "presolve": False})
    if result.status == 2:
        return -math.inf
    if result.status != 0:
        raise RuntimeError(f"scipy milp stopped: {result.message}")
    picked = [int(np.argmax(result.x[a:b])) for a, b in zip(starts[:-1], starts[1:],
                                                             strict=True)]
    if not keeps(pairs, picked):
        raise RuntimeError("scipy milp returned a choice that breaks a pair rule")
    cross = sign * (value_gains(tables, picked) - value_gains(tables, current))
    return float(sum(g[k] for g, k in zip(gains, picked, strict=True)) + cross)


@dataclass(frozen=True, eq=False)
class PairValues:
    """A pairwise term of the model between two groups: what it adds to the score for each
    choice of their candidates. Candidates the term cannot tell apart share a class
    (`first_class[i]`: the class of the first group's candidate i), and `table[a, b]` is the
    term's value at class a of the first group and class b of the second. For a pair whose
    axes cut into steps or levels a class is an entry of the axis; along a knots axis the
    value moves within an entry, so a class is one distinct value.

    The integer program adds one variable z_ab >= 0 per cell (a, b) and the rows
    sum_b z_ab = u_a and sum_a z_ab = v_b, with u_a the sum of the first group's binaries
    in class a and v_b the second's in class b; the score gains sum z_ab table[a, b].
    Exact (a standard linearisation of a product of two choices; the proof): each group
    picks one candidate, so u is 0 except u_a* = 1 and v is 0 except v_b* = 1. For a != a*,
    the z_ab sum to 0 and none is negative, so all are 0; then for b != b*, z_a*b = v_b = 0;
    so z_a*b* = u_a* = 1. Every z is the product u_a v_b: the score gains table[a*, b*].
    The z need no integrality: the binaries force them.
    """

    first: int
    second: int
    first_class: np.ndarray  # int, one per candidate of the first group
    second_class: np.ndarray  # int, one per candidate of the second group
    table: np.ndarray  # float, (classes of first, classes of second)
    name: str = ""

    def values(self) -> np.ndarray:
        """The term's value at every pair of candidates (first's x second's)."""
        return self.table[np.ix_(self.first_class, self.second_class)]

    def at(self, choice: Sequence[int]) -> float:
        return float(self.table[self.first_class[choice[self.first]],
                                self.second_class[choice[self.second]]])


def check_values(tables: Sequence[PairValues], sizes: Sequence[int]) -> None:
    """Raise ValueError on a malformed pairwise table (a programmer error, not a user's)."""
    for t in tables:
        _check_groups("pairwise table", t.first, t.second, sizes)
        shape = np.shape(t.table)
        if (len(t.first_class) != sizes[t.first] or len(t.second_class) != sizes[t.second]
                or len(shape) != 2 or np.min(t.first_class, initial=0) < 0
                or np.min(t.second_class, initial=0) < 0
                or np.max(t.first_class, initial=-1) >= shape[0]
                or np.max(t.second_class, initial=-1) >= shape[1]
                or not np.all(np.isfinite(t.table))):
            raise ValueError(f"pairwise table between groups {t.first} and {t.second} does "
                             "not match its groups' candidates")


def value_gains(tables: Sequence[PairValues], choice: Sequence[int]) -> float:
    """What the pairwise tables add at a choice (one candidate index per group)."""
    return float(sum(t.at(choice) for t in tables))


def value_columns(tables: Sequence[PairValues], kept: Sequence[np.ndarray], starts: np.ndarray,
                  first_column: int, sign: float, current: Sequence[int]
                  ) -> tuple[int, np.ndarray, list[tuple[np.ndarray, np.ndarray, str, float]]]:
    """The cells' columns (continuous z >= 0, from `first_column` on) over the kept
    candidates: how many, each cell's gain over the current cell (toward the goal) and the
    rows that tie them to the binaries (see `PairValues`)."""
    gains, rows, column = [], [], first_column
    for t in tables:
        first, second = kept[t.first], kept[t.second]
        a_classes, a_of = np.unique(t.first_class[first], return_inverse=True)
        b_classes, b_of = np.unique(t.second_class[second], return_inverse=True)
        now = t.table[t.first_class[current[t.first]], t.second_class[current[t.second]]]
        cells = sign * (t.table[np.ix_(a_classes, b_classes)] - now)
        na, nb = cells.shape
        z = column + np.arange(na * nb).reshape(na, nb)
        for a in range(na):  # sum_b z_ab - u_a = 0
            members = starts[t.first] + np.flatnonzero(a_of == a)
            rows.append((np.r_[z[a], members], np.r_[np.ones(nb), -np.ones(len(members))],
                         "=", 0.0))
        for b in range(nb):  # sum_a z_ab - v_b = 0
            members = starts[t.second] + np.flatnonzero(b_of == b)
            rows.append((np.r_[z[:, b], members], np.r_[np.ones(na), -np.ones(len(members))],
                         "=", 0.0))
        gains.append(cells.ravel())
        column += na * nb
    return column - first_column, np.concatenate([np.zeros(0), *gains]), rows
