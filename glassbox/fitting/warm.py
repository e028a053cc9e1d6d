"""Compile the spline family's kernels once, so the first spline fit does not wait for them:
`python -m glassbox.fitting.warm` (`make install` runs it). numba keeps the compiled code in
a cache next to the package (or in the user's cache folder when that is not writable).

The kernels are compiled by fitting the family on a small invented frame (constructed
here, not data): a number with gaps and more distinct values than bins, an integer, a
category; classification and regression; and once with more bins than a 16-bit index
holds, which compiles the pair pass for the wider index."""

from __future__ import annotations

import time

import numpy as np
import pandas as pd


def warm() -> float:
    """Fit the family on the invented frames; the seconds it took (compiling included)."""
    from glassbox import fit_model
    from glassbox.core.schema import Schema

    start = time.perf_counter()
    generator = np.random.default_rng(0)
    for rows, bins in ((600, 64), (40_000, 40_000)):
        amount = generator.lognormal(3.0, 1.0, rows)
        amount[::17] = np.nan
        frame = pd.DataFrame({
            "amount": amount,
            "count": generator.integers(0, 6, rows),
            "kind": generator.choice(["a", "b", "c"], rows),
            "outcome": generator.integers(0, 2, rows),
            "level": generator.normal(size=rows),
        })
        features = {"amount": {"kind": "number"}, "count": {"kind": "integer"},
                    "kind": {"kind": "category"}}
        for target, task in (("outcome", "classification"), ("level", "regression")):
            schema = Schema.from_dict({"target": {"column": target, "task": task,
                                                  "better": "higher"}, "feature": features})
            fit_model(frame.drop(columns=[c for c in ("outcome", "level") if c != target]),
                      schema, "spline", bins=bins, penalties=[1.0])
    return time.perf_counter() - start


if __name__ == "__main__":
    print(f"spline kernels ready ({warm():.1f} s)")
