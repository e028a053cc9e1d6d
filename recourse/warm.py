"""Compile the recourse kernel once, so the first plan does not wait for it:
`python -m recourse.warm` (`make install` runs it). numba keeps the compiled code in a cache
next to the package (or in the user's cache folder when that is not writable); later
processes load it in well under a second."""

from __future__ import annotations

import time

import numpy as np


def warm() -> float:
    """Solve one tiny batch with every objective; the seconds it took (compiling included)."""
    from recourse.kernel import solve_rows

    start = time.perf_counter()
    gains = np.array([[[1.0, 2.0], [0.5, 0.0]]])
    costs = np.array([[[1.0, 3.0], [0.2, 0.0]]])
    for objective in (0, 1, 2):
        solve_rows(gains, costs, np.array([[2, 1]]), np.array([1.2]), np.array([2]),
                   objective, 2)
    return time.perf_counter() - start


if __name__ == "__main__":
    print(f"recourse solver ready ({warm():.1f} s)")
