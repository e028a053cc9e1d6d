"""Fitting at portfolio scale: `fit_model` against the plain library call on the same design,
each contender in a fresh process (CPU seconds, wall seconds, peak memory), and
`glassbox compare --jobs 2` from the command line. Data from bench/scale_data.py.

    python bench/fit_scale.py                      # the section's lines (100k and 1M rows)
    python bench/fit_scale.py one FAMILY WHO DATA SCHEMA   # one contender, prints JSON
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def _plain_sparse(frame, schema):
    """scikit-learn's LogisticRegression as the sparse family's refit calls it, on the
    family's own standardised design (built before the clock starts)."""
    from sklearn.linear_model import LogisticRegression

    from glassbox.core.schema import prepare
    from glassbox.fitting.families import sparse

    prepared = prepare(frame, schema)
    design = sparse.build_design(prepared.features, schema)
    model = LogisticRegression(C=1.0, solver="newton-cholesky", tol=1e-10, max_iter=500)
    return lambda: model.fit(design.matrix, prepared.target)


def _plain_boosted(frame, schema):
    """scikit-learn's HistGradientBoostingClassifier with the boosted family's settings
    (one tree per feature, early stopping, one OpenMP thread) on the family's matrix."""
    from sklearn.ensemble import HistGradientBoostingClassifier
    from threadpoolctl import threadpool_limits

    from glassbox.core.schema import prepare
    from glassbox.fitting.families import boosted

    prepared = prepare(frame, schema)
    fitted = boosted.fit_estimators(prepared.features, prepared.target, schema,
                                    task="classification", max_iter=1)
    matrix = fitted.matrix(prepared.features)
    settings = fitted.estimators[0].get_params()
    settings.update(max_iter=boosted.DEFAULTS["max_iter"])

    def run():
        with threadpool_limits(limits=boosted.DEFAULTS["threads"], user_api="openmp"):
            HistGradientBoostingClassifier(**settings).fit(matrix, prepared.target)
    return run


def one(family: str, who: str, data: str, schema_path: str) -> dict:
    """One contender timed in this process: wall, CPU (all threads) and peak memory."""
    import pandas as pd
    from threadpoolctl import threadpool_limits

    from glassbox import fit_model
    from glassbox.core.schema import load_schema

    frame, schema = pd.read_parquet(data), load_schema(schema_path)
    if who == "glassbox":
        def task():
            return fit_model(frame, schema, family)
    else:
        task = {"sparse": _plain_sparse, "boosted": _plain_boosted}[family](frame, schema)
    with threadpool_limits(limits=1, user_api="blas"):  # the library call as fit_model has it
        wall, cpu = time.perf_counter(), time.process_time()
        task()
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # KiB to GiB
    return {"wall": wall, "cpu": cpu, "peak_gib": peak}


def _run(*arguments: str) -> dict:
    found = subprocess.run([sys.executable, __file__, *arguments], check=True,
                           capture_output=True, text=True)
    return json.loads(found.stdout.strip().splitlines()[-1])


def _compare(data: Path, schema: Path, folder: Path) -> dict:
    """`glassbox compare --jobs 2` with default settings: wall, CPU of the command and
    its workers, the largest process's peak memory."""
    command = [str(Path(sys.executable).parent / "glassbox"), "compare", str(data),
               "--schema", str(schema), "--jobs", "2", "--format", "json",
               "--out", str(folder / "comparison.json"), "--force"]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    wall = time.perf_counter()
    subprocess.run(command, check=True, capture_output=True)
    wall = time.perf_counter() - wall
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    return {"wall": wall, "cpu": cpu, "peak_gib": after.ru_maxrss / 2**20}


def scale_rows(sizes: tuple[int, ...] = (100_000, 1_000_000),
               compare_rows: int = 100_000) -> list[str]:
    """The section's lines for bench/RESULTS.md."""
    from bench.scale_data import write

    lines = ["## Fitting at portfolio scale: fit_model against the plain library call", "",
             "Generated data (bench/scale_data.py: 20 numeric features, two with gaps, 2",
             "categories, an id column). Each contender runs alone in a fresh process: `fit",
             "model` from the raw frame (typing, pooling, the family fit on one BLAS thread,",
             "centring, importance, profiles, cells, baseline, fingerprint); `library` is the",
             "family's own scikit-learn call on the design it builds (built before the clock",
             "starts), on one thread. CPU counts every thread.", "",
             "| family | rows | fit_model wall s | CPU s | peak GiB | library wall s | CPU s "
             "| peak GiB | wall ratio |", "|---|---:|---:|---:|---:|---:|---:|---:|---:|"]
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        for rows in sizes:
            data = folder / f"scale_{rows}.parquet"
            schema = write(rows, data)
            for family in ("sparse", "boosted"):
                ours = _run("one", family, "glassbox", str(data), str(schema))
                theirs = _run("one", family, "library", str(data), str(schema))
                lines.append(
                    f"| {family} | {rows:,} | {ours['wall']:.1f} | {ours['cpu']:.1f} | "
                    f"{ours['peak_gib']:.2f} | {theirs['wall']:.1f} | {theirs['cpu']:.1f} | "
                    f"{theirs['peak_gib']:.2f} | {ours['wall'] / theirs['wall']:.2f} |")
        data = folder / f"scale_{compare_rows}.parquet"
        schema = write(compare_rows, data)
        found = _compare(data, schema, folder)
    lines += ["", f"`glassbox compare --jobs 2` at {compare_rows:,} rows with default "
              "settings (sparse, spline, boosted, the sparsity curve, the trees benchmark, 5 "
              f"folds): {found['wall']:.0f} s wall, {found['cpu']:.0f} s CPU over all its "
              f"processes, largest process {found['peak_gib']:.2f} GiB."]
    return lines


if __name__ == "__main__":
    if sys.argv[1:2] == ["one"]:
        print(json.dumps(one(*sys.argv[2:6])))
    else:
        print("\n".join(scale_rows()))
