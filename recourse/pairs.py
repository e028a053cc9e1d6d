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


def check_pairs(pairs: Sequence[PairRule], sizes: Sequence[int]) -> None:
    """Raise ValueError on a malformed pair rule (a programmer error, not a user's)."""
    for p in pairs:
        if not (0 <= p.first < len(sizes) and 0 <= p.second < len(sizes)
                and p.first != p.second):
            raise ValueError(f"pair rule names groups {p.first} and {p.second}, outside "
                             f"0..{len(sizes) - 1} or the same group twice")
        shape = (sizes[p.first], sizes[p.second])
        if np.shape(p.allowed) != shape or np.asarray(p.allowed).dtype != bool:
            raise ValueError(f"pair rule between groups {p.first} and {p.second} has a "
                             f"matrix of shape {np.shape(p.allowed)}; expected booleans "
                             f"of shape {shape}")


def most_gain(gains: Sequence[np.ndarray], pairs: Sequence[PairRule],
              max_changes: int | None, current: Sequence[int]) -> float:
    """The largest summed gain of one candidate per group keeping every pair rule and the
    limit on changes (the threshold and forbidden sets left out): an integer program
    solved by scipy.optimize.milp (HiGHS), exact; -inf when no choice keeps the rules."""
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
    matrix = np.zeros((len(rows), n))
    lower, upper = np.full(len(rows), -np.inf), np.full(len(rows), np.inf)
    for k, (columns, coefficients, sense, rhs) in enumerate(rows):
        matrix[k, columns] = coefficients
        lower[k] = rhs if sense == "=" else -np.inf
        upper[k] = rhs
    result = milp(-np.concatenate([np.asarray(g, float) for g in gains]),
                  constraints=LinearConstraint(matrix, lower, upper),
                  integrality=np.ones(n), bounds=Bounds(np.zeros(n), np.ones(n)),
                  options={"disp": False, "mip_rel_gap": 0.0, "presolve": False})
    if result.status == 2:
        return -math.inf
    if result.status != 0:
        raise RuntimeError(f"scipy milp stopped: {result.message}")
    picked = [int(np.argmax(result.x[a:b])) for a, b in zip(starts[:-1], starts[1:],
                                                             strict=True)]
    if not keeps(pairs, picked):
        raise RuntimeError("scipy milp returned a choice that breaks a pair rule")
    return float(sum(g[k] for g, k in zip(gains, picked, strict=True)))
