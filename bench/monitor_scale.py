"""Monitoring at scale: 10 million rows × 20 features, our monitor against plain pandas.

`bench/run.py monitor` calls `monitor_rows`. The data is invented (a lender's applications
with skewed money amounts, gaps, an id column and two categories with rare levels), written
in chunks so memory stays flat, as Parquet and as CSV. Each contender runs in a fresh
process (this file run as a script) that times itself and reports its own peak resident
memory, so one contender's memory never counts against the other.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROWS = 10_000_000
CHUNK_ROWS = 500_000
SAMPLE_ROWS = 100_000
SEED = 20261203
CONTENDERS = {"pandas": "pandas", "local": "ours, local", "local-2": "ours, local --jobs 2",
              "dask": "ours, dask 2 workers"}
JOBS = {"local": 1, "local-2": 2, "dask": 2}

# (name, log-scale median, log-scale spread, share missing): right-skewed money amounts
AMOUNTS = (
    ("annual_revenue", 5.6, 0.9, 0.08),
    ("monthly_turnover", 3.2, 0.9, 0.03),
    ("cash_balance", 2.8, 1.3, 0.05),
    ("overdraft_limit", 2.3, 0.8, 0.10),
    ("existing_debt", 3.9, 1.1, 0.04),
    ("amount_requested", 4.0, 0.7, 0.00),
    ("asset_value", 5.0, 1.4, 0.12),
    ("payroll_cost", 4.3, 1.0, 0.06),
    ("rent_cost", 2.5, 0.7, 0.09),
    ("tax_paid", 2.9, 1.2, 0.07),
    ("card_sales", 3.5, 1.1, 0.15),
    ("invoice_total", 3.8, 1.0, 0.05),
    ("savings", 2.2, 1.6, 0.11),
    ("collateral_value", 4.6, 1.3, 0.14),
)
# (name, mean, share missing): counts, many of them zero
COUNTS = (
    ("years_trading", 7.0, 0.00),
    ("staff_count", 9.0, 0.02),
    ("late_payments_24m", 0.6, 0.03),
    ("overdue_invoices", 1.5, 0.05),
)
SECTORS = ("retail", "hospitality", "construction", "manufacturing", "professional services",
           "agriculture", "transport", "mining", "fishing")  # the last two rare
SECTOR_SHARES = (0.22, 0.16, 0.15, 0.12, 0.17, 0.08, 0.0997, 0.0002, 0.0001)
REGIONS = tuple(f"region {chr(ord('A') + i)}" for i in range(12))
FEATURES = ([name for name, *_ in AMOUNTS] + [name for name, *_ in COUNTS]
            + ["sector", "region"])


def draw_chunk(rng: np.random.Generator, first_id: int, rows: int) -> pd.DataFrame:
    """One chunk of applications with a drawn outcome (invented: a made-up additive truth)."""
    frame = {"application_id": np.arange(first_id, first_id + rows, dtype=np.int64)}
    score = np.full(rows, -2.4)
    for name, centre, spread, gap in AMOUNTS:
        log_value = centre + spread * rng.standard_normal(rows)
        if name in ("annual_revenue", "cash_balance", "savings"):
            score -= 0.25 * (log_value - centre) / spread
        elif name in ("existing_debt", "amount_requested"):
            score += 0.3 * (log_value - centre) / spread
        frame[name] = np.where(rng.random(rows) < gap, np.nan, np.round(np.exp(log_value), 2))
    for name, mean, gap in COUNTS:
        counts = rng.negative_binomial(1.2, 1.2 / (1.2 + mean), size=rows).astype(float)
        if name == "late_payments_24m":
            score += 0.6 * np.minimum(counts, 3)
        elif name == "years_trading":
            score -= 0.08 * np.minimum(counts, 10)
        frame[name] = np.where(rng.random(rows) < gap, np.nan, counts)
    sector = rng.choice(len(SECTORS), size=rows, p=np.asarray(SECTOR_SHARES))
    score += np.array([0.0, 0.5, 0.4, -0.1, -0.4, 0.2, 0.3, 0.6, 0.6])[sector]
    frame["sector"] = np.asarray(SECTORS, dtype=object)[sector]
    frame["region"] = np.asarray(REGIONS, dtype=object)[rng.integers(0, len(REGIONS), rows)]
    frame["defaulted"] = np.where(rng.random(rows) < 1 / (1 + np.exp(-score)), "yes", "no")
    return pd.DataFrame(frame)


def write_data(folder: Path, rows: int = ROWS) -> tuple[Path, Path, pd.DataFrame]:
    """The monitored file as Parquet and CSV (no outcome column: the current applications),
    written chunk by chunk; and a separate development sample of SAMPLE_ROWS to fit on."""
    import pyarrow as pa
    import pyarrow.csv as pa_csv
    import pyarrow.parquet as pq

    parquet_path, csv_path = folder / "current.parquet", folder / "current.csv"
    streams = np.random.SeedSequence(SEED).spawn(1 + -(-rows // CHUNK_ROWS))
    sample = draw_chunk(np.random.default_rng(streams[0]), 1, SAMPLE_ROWS)
    writer = None
    with open(csv_path, "wb") as csv_file:
        for index, first in enumerate(range(0, rows, CHUNK_ROWS)):
            chunk = draw_chunk(np.random.default_rng(streams[1 + index]),
                               SAMPLE_ROWS + 1 + first, min(CHUNK_ROWS, rows - first))
            table = pa.Table.from_pandas(chunk.drop(columns=["defaulted"]),
                                         preserve_index=False)
            if writer is None:
                writer = pq.ParquetWriter(parquet_path, table.schema)
            writer.write_table(table)
            pa_csv.write_csv(table, csv_file,
                             pa_csv.WriteOptions(include_header=index == 0))
    writer.close()
    return parquet_path, csv_path, sample


def fit_sample(sample: pd.DataFrame, path: Path) -> str:
    """The sparse model of the development sample (curves and levels, the term kinds the
    spline family also gives, fitted in seconds), saved as a model file."""
    from glassbox import fit_model
    from glassbox.core import artifact
    from glassbox.core.schema import FeatureSpec, Schema, TargetSpec

    features = tuple(FeatureSpec(name, "category" if name in ("sector", "region")
                                 else "number") for name in FEATURES)
    schema = Schema(TargetSpec("defaulted", "classification", "yes", "lower"), features,
                    id_column="application_id")
    model = fit_model(sample, schema, "sparse")
    artifact.save(model, path)
    kinds = [type(term).__name__ for term in model.terms]
    return (f"{kinds.count('CurveTerm')} curves, {kinds.count('LevelsTerm')} levels terms, "
            f"{kinds.count('StepTerm')} step terms")


# ---------------------------------------------------------------------------
# The contenders, each run in its own process (`python bench/monitor_scale.py KIND ...`)
# ---------------------------------------------------------------------------


def pandas_counts(data: Path) -> dict:
    """The plain way: read the whole file, then `value_counts` per feature."""
    frame = pd.read_parquet(data) if data.suffix == ".parquet" else pd.read_csv(data)
    counts = {name: frame[name].value_counts(dropna=False) for name in FEATURES}
    return {"rows": len(frame),
            "missing": {name: int(frame[name].isna().sum()) for name in FEATURES},
            "levels": {name: {str(k): int(v) for k, v in counts[name].items()}
                       for name in ("sector", "region")}}


def our_monitor(data: Path, model_path: Path, engine: str) -> dict:
    """Our monitor at its default block size: the local engine in one process or with two
    worker processes, or dask with two workers."""
    import hashlib

    from glassbox.core import artifact
    from glassbox.explaining import monitor

    result = monitor.monitor(artifact.load(model_path), [data],
                             engine="dask" if engine == "dask" else "local", jobs=JOBS[engine])
    features = result.features
    rows = int(result.summary["rows"].sum())
    tables = "".join(table.to_csv(index=False) for table in (
        result.summary, result.features, result.bins, result.score_bins, result.new_levels))
    return {"rows": rows,
            "missing": {str(row.feature): int(round(row.missing_share * rows))
                        for row in features.itertuples()},
            "score_psi": float(result.summary["score_psi"].iloc[0]),
            "tables_sha256": hashlib.sha256(tables.encode()).hexdigest()}


def peak_bytes(workers: int = 0) -> int:
    """Peak resident memory of this process since it started, plus `workers` times the
    largest peak of the processes it waited for (an upper bound of their sum; with no
    workers the larger of the two). Linux's VmHWM, not getrusage's ru_maxrss: a process
    started from a large one inherits that one's peak in ru_maxrss (the memory at the fork
    counts), VmHWM does not."""
    status = Path("/proc/self/status").read_text()
    own = next(int(line.split()[1]) for line in status.splitlines()
               if line.startswith("VmHWM:"))
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return (own + workers * children if workers else max(own, children)) * 1024


def child(kind: str, data: Path, model_path: Path | None) -> None:
    start = time.perf_counter()
    result = pandas_counts(data) if kind == "pandas" else our_monitor(data, model_path, kind)
    result.update(seconds=time.perf_counter() - start,
                  peak=peak_bytes(2 if kind == "local-2" else 0))
    print(json.dumps(result))


def run_child(kind: str, data: Path, model_path: Path) -> dict:
    """One contender in a fresh process; its own timing and peak memory."""
    environment = {**os.environ, "OMP_NUM_THREADS": "1"}
    done = subprocess.run([sys.executable, __file__, kind, str(data), str(model_path)],
                          capture_output=True, text=True, env=environment)
    if done.returncode != 0:
        return {"failed": (done.stderr.strip().splitlines() or ["no output"])[-1]}
    return json.loads(done.stdout.strip().splitlines()[-1])


def monitor_rows(folder: Path, rows: int = ROWS) -> list[str]:
    """Rows per second and peak memory of our monitor and of the pandas baseline."""
    start = time.perf_counter()
    parquet_path, csv_path, sample = write_data(folder, rows)
    written = time.perf_counter() - start
    start = time.perf_counter()
    model_path = folder / "current.sparse.json"
    terms = fit_sample(sample, model_path)
    fitted = time.perf_counter() - start
    results = {}
    for data in (parquet_path, csv_path):
        for kind in CONTENDERS:
            results[data.suffix, kind] = run_child(kind, data, model_path)
            print(f"{data.suffix} {kind}: {results[data.suffix, kind]}"[:300], file=sys.stderr,
                  flush=True)
    lines = [
        "## Monitoring at scale: our monitor against a pandas baseline",
        "",
        f"{rows:,} invented applications × 20 features (14 right-skewed money amounts and 4 "
        "counts, each with its own share of gaps up to 15%; two categories, one with two "
        "rare levels), plus an integer id column, no outcome column; written in chunks of "
        f"{CHUNK_ROWS:,} rows as Parquet ({parquet_path.stat().st_size / 2**20:,.0f} MiB) and "
        f"CSV ({csv_path.stat().st_size / 2**20:,.0f} MiB) in {written:.0f} s. The model: the "
        f"sparse family ({terms}) fitted on a separate sample of "
        f"{SAMPLE_ROWS:,} rows ({fitted:.0f} s). "
        "Each contender runs in a fresh process, one after the other in this run, timing itself "
        "from before reading to the result (start-up excluded) and reporting its own peak "
        "resident memory (with dask: the largest of the process and its workers). `ours, "
        "local` is the local engine at its default block size (one process; with `--jobs 2` "
        "two worker processes count blocks while the main one reads, and its peak is the "
        "main process's plus twice the largest worker's): every term "
        "scored, bin counts, missing and new levels, exact sums, PSI and its χ² check for the "
        "score and every feature; `ours, dask` the same counts on a two-worker dask cluster "
        "started for the run (start-up included). `pandas` reads the whole file (every "
        "column) and calls `value_counts(dropna=False)` on each feature: no binning, no "
        "scoring. Target: ours at least 3× the baseline's rows per second, under 2 GB peak.",
        "",
        "| file | contender | seconds | rows per second | peak memory (MiB) | "
        "throughput ours / pandas |",
        "|---|---|---:|---:|---:|---:|",
    ]
    agree, same = [], []
    for suffix in (".parquet", ".csv"):
        plain = results[suffix, "pandas"]
        for kind in CONTENDERS:
            result = results[suffix, kind]
            label = CONTENDERS[kind]
            if "failed" in result:
                lines.append(f"| {suffix[1:]} | {label} | failed: {result['failed'][:120]} "
                             "| | | |")
                continue
            ratio = (f"{plain['seconds'] / result['seconds']:.2f}"
                     if kind != "pandas" and "failed" not in plain else "")
            lines.append(f"| {suffix[1:]} | {label} | {result['seconds']:.1f} | "
                         f"{result['rows'] / result['seconds']:,.0f} | "
                         f"{result['peak'] / 2**20:,.0f} | {ratio} |")
        ours = [results[suffix, kind] for kind in CONTENDERS if kind != "pandas"]
        ours = [result for result in ours if "failed" not in result]
        if "failed" not in plain and ours:
            agree.append(f"{suffix[1:]}: " + ("yes" if all(
                plain["missing"] == result["missing"] and plain["rows"] == result["rows"]
                for result in ours) else "NO"))
        if len(ours) > 1:
            same.append(f"{suffix[1:]}: " + ("yes" if len({r["tables_sha256"] for r in ours})
                                             == 1 else "NO"))
    lines += ["", "Same row count and missing count in every feature from pandas and ours: "
              + ("; ".join(agree) or "not compared") + ". Every table byte-identical from "
              "every engine and job count: " + ("; ".join(same) or "not compared") + "."]
    psi = [f"{suffix[1:]} {results[suffix, 'local']['score_psi']:.5f}"
           for suffix in (".parquet", ".csv") if "failed" not in results[suffix, "local"]]
    if psi:
        lines.append("Score PSI of the current rows against the development sample (drawn "
                     "alike, so near 0): " + "; ".join(psi) + ".")
    return lines


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    child(sys.argv[1], Path(sys.argv[2]), Path(sys.argv[3]) if len(sys.argv) > 3 else None)
