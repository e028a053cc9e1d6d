"""Fitting at portfolio scale: each family and the CLI at 100k and 1M generated rows.

`bench/run.py scale` calls `scale_rows(folder)`. The data comes from bench/scale_data.py
(20 numeric and 2 categorical features, gaps, an id column); each size is generated with
25% more rows than it names, and that last fifth of the generated rows is the held-out part
every fitted model is scored on (log loss), so a speed-up that costs accuracy shows.

Every contender runs in a fresh process, started by a small launcher process (this file
run as `launch`, standard library only) that sets the memory ceiling (RLIMIT_AS), stops the
contender's whole process group at the time limit, times the wall clock and reads the
contender's resource use with wait4: user + system CPU of it and the worker processes it
waited for, and the largest resident set among them. A launcher is used so that no
contender's peak memory includes the benchmark's own (Linux carries the parent's resident
set into a child's ru_maxrss through fork and exec). A Python contender (this file run as
`fit`) also prints its own getrusage(RUSAGE_SELF), VmHWM and the seconds inside the fit
alone as JSON on its last line; its wall, CPU and peak are then taken up to the end of its
fit (from the launcher's start to the contender's own clock, its getrusage, its VmHWM), so
the held-out scoring after the fit is not counted. All wall and CPU figures include starting
Python and the imports; a Python contender's also include reading the Parquet file.
"""

from __future__ import annotations

import json
import os
import resource
import signal
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve()
ROOT = HERE.parent.parent
SIZES = (100_000, 1_000_000)
REPEATS = {100_000: 3, 1_000_000: 1}
LIMIT_SECONDS = 900.0
LIMIT_BYTES = 16 * 2**30
SCORE_SAMPLE = 20_000
FAMILIES = (("sparse", "lr", "scikit-learn LogisticRegression"),
            ("spline", "pygam", "pygam LogisticGAM"),
            ("boosted", "hgb", "scikit-learn HistGradientBoostingClassifier"))
# the targets: (what, limit)
SPLINE_WALL, SPLINE_PEAK_GB, LIBRARY_RATIO = 60.0, 4.0, 1.5
COMPARE_WALL, SCHEMA_WALL, SCORE_WALL = 300.0, 10.0, 10.0


def progress(text: str) -> None:
    print(f"[scale {time.strftime('%H:%M:%S')}] {text}", file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------
# Data: generated in its own process so the benchmark's process stays small
# ---------------------------------------------------------------------------

def make_data(rows: int, folder: Path) -> None:
    sys.path.insert(0, str(ROOT))
    from bench.scale_data import make_frame, schema_text

    frame = make_frame(rows + rows // 4, seed=0)
    train, held_out = frame.iloc[:rows], frame.iloc[rows:].reset_index(drop=True)
    stem = folder / f"rows_{rows}"
    train.to_parquet(f"{stem}.parquet", index=False)
    train.to_csv(f"{stem}.csv", index=False)
    held_out.to_parquet(f"{stem}_held_out.parquet", index=False)
    Path(f"{stem}.schema.toml").write_text(schema_text(train))
    if rows >= SCORE_SAMPLE:
        train.iloc[:SCORE_SAMPLE].to_csv(folder / f"sample_{SCORE_SAMPLE}.csv", index=False)


# ---------------------------------------------------------------------------
# The Python contenders (`python bench/scale_run.py fit KIND STEM`)
# ---------------------------------------------------------------------------

def filled(frame, name: str, state: dict, fitting: bool):
    """A number's values with each gap at the median of the present values, and its 0/1
    missing indicator when the training column had gaps (None otherwise)."""
    import numpy as np

    values = frame[name].to_numpy(dtype=float)
    gaps = np.isnan(values)
    if fitting:
        state["medians"][name] = (float(np.median(values[~gaps])), bool(gaps.any()))
    median, indicator = state["medians"][name]
    return np.where(gaps, median, values), (gaps.astype(float) if indicator else None)


def plain_design(frame, numbers: list[str], categories: list[str], state: dict | None = None):
    """The sparse family's design in plain numpy: a gap gets the median of the present
    values plus a 0/1 missing indicator, numbers are standardised, a category gets 0/1
    indicators of its levels but the most frequent, only centred. (The family also pools
    levels seen in fewer than 30 rows; the generated data has none that rare.)"""
    import numpy as np

    fitting = state is None
    state = state if state is not None else {"medians": {}, "levels": {}}
    blocks, scaled = [], []
    for name in numbers:
        values, indicator = filled(frame, name, state, fitting)
        blocks.append(values)
        scaled.append(True)
        if indicator is not None:
            blocks.append(indicator)
            scaled.append(False)
    for name in categories:
        column = frame[name].astype(str)
        if fitting:
            counts = column.value_counts()
            state["levels"][name] = sorted(counts.index, key=lambda v: (-counts[v], v))[1:]
        for level in state["levels"][name]:
            blocks.append((column == level).to_numpy(dtype=float))
            scaled.append(False)
    raw = np.column_stack(blocks)
    if fitting:
        state["centre"] = raw.mean(axis=0)
        state["scale"] = np.where(scaled, raw.std(axis=0), 1.0)
    return (raw - state["centre"]) / state["scale"], state


def plain_gam_matrix(frame, numbers: list[str], categories: list[str], state: dict | None = None):
    """pygam's input: each number (a gap at the median), a 0/1 column per number with gaps,
    each category as codes of its sorted levels; the term list to go with it."""
    import numpy as np
    from pygam import f, l, s

    fitting = state is None
    state = state if state is not None else {"medians": {}, "levels": {}}
    blocks, terms = [], []
    for name in numbers:
        values, indicator = filled(frame, name, state, fitting)
        terms.append(s(len(blocks), n_splines=20))
        blocks.append(values)
        if indicator is not None:
            terms.append(l(len(blocks)))
            blocks.append(indicator)
    for name in categories:
        column = frame[name].astype(str).to_numpy()
        if fitting:
            state["levels"][name] = sorted(set(column))
        terms.append(f(len(blocks)))
        blocks.append(np.searchsorted(state["levels"][name], column).astype(float))
    model_terms = terms[0]
    for term in terms[1:]:
        model_terms = model_terms + term
    return np.column_stack(blocks), model_terms, state


def plain_trees_matrix(frame, numbers: list[str], categories: list[str], state: dict | None = None):
    """Categories first (codes of sorted levels), then numbers with their gaps as NaN."""
    import numpy as np

    state = state if state is not None else {
        name: sorted(set(frame[name].astype(str))) for name in categories}
    blocks = [np.searchsorted(state[name], frame[name].astype(str).to_numpy()).astype(float)
              for name in categories]
    blocks += [frame[name].to_numpy(dtype=float) for name in numbers]
    return np.column_stack(blocks), state


def fit_contender(kind: str, stem: str) -> dict:
    """Fit one contender on STEM.parquet; its resource use, then held-out log loss."""
    import tomllib

    import numpy as np
    import pandas as pd
    from sklearn.metrics import log_loss
    from threadpoolctl import threadpool_limits

    frame = pd.read_parquet(f"{stem}.parquet")
    held_out = pd.read_parquet(f"{stem}_held_out.parquet")
    truth = (held_out["bad"] == "yes").to_numpy(dtype=int)
    target = (frame["bad"] == "yes").to_numpy(dtype=int)
    declared = tomllib.loads(Path(f"{stem}.schema.toml").read_text())["feature"]
    numbers = [n for n, spec in declared.items() if spec["kind"] != "category"]
    categories = [n for n, spec in declared.items() if spec["kind"] == "category"]
    extra: dict = {}
    if kind in ("sparse", "spline", "boosted"):
        sys.path.insert(0, str(ROOT))
        from glassbox import fit_model
        from glassbox.core.schema import load_schema

        schema = load_schema(f"{stem}.schema.toml")
        start = time.perf_counter()
        model = fit_model(frame, schema, kind)
        fit_seconds = time.perf_counter() - start

        def predict():
            return model.probability(held_out)
    elif kind == "lr":
        from sklearn.linear_model import LogisticRegression

        start = time.perf_counter()
        matrix, state = plain_design(frame, numbers, categories)
        extra["design_seconds"] = time.perf_counter() - start
        # the sparse family's refit with its default ridge 1.0 (C = 1), one BLAS thread
        estimator = LogisticRegression(C=1.0, solver="newton-cholesky", tol=1e-10, max_iter=500)
        start = time.perf_counter()
        with threadpool_limits(limits=1):
            estimator.fit(matrix, target)
        fit_seconds = time.perf_counter() - start

        def predict():
            return estimator.predict_proba(plain_design(held_out, numbers, categories,
                                                        state)[0])[:, 1]
    elif kind == "pygam":
        from pygam import LogisticGAM

        start = time.perf_counter()
        matrix, terms, state = plain_gam_matrix(frame, numbers, categories)
        extra["design_seconds"] = time.perf_counter() - start
        gam = LogisticGAM(terms)  # pygam's default penalty 0.6 on every term
        start = time.perf_counter()
        with threadpool_limits(limits=1):
            gam.fit(matrix, target)
        fit_seconds = time.perf_counter() - start

        def predict():
            return gam.predict_mu(plain_gam_matrix(held_out, numbers, categories, state)[0])
    elif kind == "hgb":
        from sklearn.ensemble import HistGradientBoostingClassifier

        start = time.perf_counter()
        matrix, state = plain_trees_matrix(frame, numbers, categories)
        extra["design_seconds"] = time.perf_counter() - start
        count = matrix.shape[1]
        # the boosted family's first-stage settings, one feature per tree as it fits them
        estimator = HistGradientBoostingClassifier(
            learning_rate=0.05, max_iter=1000, max_leaf_nodes=4, max_depth=None,
            min_samples_leaf=20, l2_regularization=1.0, max_bins=255,
            categorical_features=[i < len(categories) for i in range(count)],
            interaction_cst=[[i] for i in range(count)], early_stopping=True, scoring="loss",
            validation_fraction=0.1, n_iter_no_change=20, tol=1e-7, random_state=0)
        start = time.perf_counter()
        with threadpool_limits(limits=1, user_api="openmp"):
            estimator.fit(matrix, target)
        fit_seconds = time.perf_counter() - start
        extra["iterations"] = int(estimator.n_iter_)

        def predict():
            return estimator.predict_proba(plain_trees_matrix(held_out, numbers, categories,
                                                              state)[0])[:, 1]
    else:
        raise SystemExit(f"unknown contender {kind}")
    finished = time.time()
    usage = resource.getrusage(resource.RUSAGE_SELF)
    status = Path("/proc/self/status").read_text().splitlines()
    high_water = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
    probability = np.clip(predict(), 1e-15, 1 - 1e-15)
    return {"fit_seconds": fit_seconds, "finished": finished, "ru_maxrss_kib": usage.ru_maxrss,
            "vm_hwm_kib": high_water, "ru_utime": usage.ru_utime, "ru_stime": usage.ru_stime,
            "log_loss": float(log_loss(truth, probability, labels=[0, 1])), **extra}


# ---------------------------------------------------------------------------
# The launcher (`python bench/scale_run.py launch SECONDS BYTES COMMAND...`)
# ---------------------------------------------------------------------------

def launch(seconds: float, ceiling: int, command: list[str], log: Path) -> dict:
    """Run `command` under a memory ceiling and a time limit; what it used."""
    resource.setrlimit(resource.RLIMIT_AS, (ceiling, ceiling))
    with open(log, "wb") as out:
        start, started = time.perf_counter(), time.time()
        child = subprocess.Popen(command, stdout=out, stderr=subprocess.STDOUT,
                                 stdin=subprocess.DEVNULL, start_new_session=True)
        stopped = False
        while True:
            pid, status, usage = os.wait4(child.pid, os.WNOHANG)
            if pid:
                break
            if time.perf_counter() - start > seconds:
                os.killpg(child.pid, signal.SIGKILL)
                pid, status, usage = os.wait4(child.pid, 0)
                stopped = True
                break
            time.sleep(0.05)
        wall = time.perf_counter() - start
    try:  # workers left behind by a stopped contender
        os.killpg(child.pid, signal.SIGKILL)
    except ProcessLookupError:
        pass
    lines = log.read_bytes().decode(errors="replace").strip().splitlines()
    result = {"wall": wall, "cpu": usage.ru_utime + usage.ru_stime,
              "peak_bytes": usage.ru_maxrss * 1024, "status": os.waitstatus_to_exitcode(status),
              "stopped": stopped, "last_line": lines[-1] if lines else ""}
    if not stopped and result["status"] == 0 and lines and lines[-1].startswith("{"):
        own = result["own"] = json.loads(lines[-1])
        # up to the end of the fit: the held-out scoring after it is not counted
        result.update(wall=own["finished"] - started, cpu=own["ru_utime"] + own["ru_stime"],
                      peak_bytes=own["vm_hwm_kib"] * 1024)
    elif any("MemoryError" in line or "Cannot allocate memory" in line for line in lines[-30:]):
        result["memory_ceiling"] = True
    return result


def run(command: list[str], log: Path, seconds: float = LIMIT_SECONDS,
        ceiling: int = LIMIT_BYTES) -> dict:
    """One contender through the launcher, in a fresh process."""
    launcher = [sys.executable, str(HERE), "launch", str(seconds), str(ceiling), str(log),
                "--", *command]
    done = subprocess.run(launcher, capture_output=True, text=True, timeout=seconds + 120,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    if done.returncode != 0:
        return {"stopped": False, "status": done.returncode, "wall": float("nan"),
                "cpu": float("nan"), "peak_bytes": 0,
                "last_line": (done.stderr.strip().splitlines() or ["launcher failed"])[-1]}
    return json.loads(done.stdout.strip().splitlines()[-1])


def outcome(result: dict, seconds: float, ceiling: int) -> str:
    if result.get("stopped"):
        return f"stopped at the {seconds:.0f} s limit"
    if result.get("memory_ceiling"):
        return f"stopped by the {ceiling / 2**30:.0f} GB memory ceiling"
    if result["status"] != 0:
        return f"failed (status {result['status']}): {result['last_line'][:120]}"
    return "ok"


def median_of(results: list[dict]) -> dict:
    """Each figure's median over the repeats that finished (None when none did)."""
    done = [r for r in results if outcome(r, 0, 1) == "ok"]
    if not done:
        return {"failed": results[-1], "wall": None, "cpu": None, "peak": None, "fit": None,
                "log_loss": None, "runs": 0}
    return {"wall": statistics.median(r["wall"] for r in done),
            "cpu": statistics.median(r["cpu"] for r in done),
            "peak": statistics.median(r["peak_bytes"] for r in done),
            "fit": (statistics.median(r["own"]["fit_seconds"] for r in done)
                    if all("own" in r for r in done) else None),
            "log_loss": done[0].get("own", {}).get("log_loss"),
            "runs": len(done), "failed": None}


# ---------------------------------------------------------------------------
# The section
# ---------------------------------------------------------------------------

def seconds_text(value: float | None) -> str:
    return "–" if value is None else f"{value:.1f}"


def gb_text(value: float | None) -> str:
    return "–" if value is None else f"{value / 2**30:.2f}"


def ratio_text(ours: float | None, theirs: float | None) -> str:
    return "–" if ours is None or not theirs else f"{ours / theirs:.2f}"


def row_text(rows: int) -> str:
    return f"{rows // 1_000_000}M" if rows >= 1_000_000 else f"{rows // 1000}k"


def contender_row(rows: int, label: str, figures: dict, seconds: float, ceiling: int) -> str:
    if figures["runs"]:
        note = f"{figures['runs']} run(s), median"
    elif figures.get("not_run"):
        note = figures["not_run"]
    else:
        note = outcome(figures["failed"], seconds, ceiling)
        if figures["failed"].get("stopped") or figures["failed"].get("memory_ceiling"):
            note += (f" (then {figures['failed']['cpu']:.0f} s CPU, "
                     f"{gb_text(figures['failed']['peak_bytes'])} GB)")
    loss = "–" if figures["log_loss"] is None else f"{figures['log_loss']:.5f}"
    return (f"| {row_text(rows)} | {label} | {seconds_text(figures['wall'])} | "
            f"{seconds_text(figures['cpu'])} | {seconds_text(figures['fit'])} | "
            f"{gb_text(figures['peak'])} | {loss} | {note} |")


def family_figures(folder: Path, rows: int, repeats: int, seconds: float, ceiling: int,
                   skip: dict[str, str]) -> dict[str, dict]:
    """Ours and the library's plain call for each family, alternating repeat by repeat."""
    stem = str(folder / f"rows_{rows}")
    figures: dict[str, dict] = {}
    for family, library, _ in FAMILIES:
        kinds = [k for k in (family, library) if k not in skip]
        results: dict[str, list[dict]] = {k: [] for k in kinds}
        for repeat in range(repeats):
            for kind in kinds:
                if any(outcome(r, 0, 1) != "ok" for r in results[kind]):
                    continue  # once stopped, not again
                progress(f"{row_text(rows)} {kind}, run {repeat + 1} of {repeats}")
                result = run([sys.executable, str(HERE), "fit", kind, stem],
                             folder / f"{kind}_{rows}.log", seconds, ceiling)
                results[kind].append(result)
                progress(f"  {outcome(result, seconds, ceiling)}: {result['wall']:.1f} s wall, "
                         f"{result['cpu']:.1f} s CPU, {gb_text(result['peak_bytes'])} GB")
        for kind in kinds:
            figures[kind] = median_of(results[kind])
        for kind in set((family, library)) - set(kinds):
            figures[kind] = {"runs": 0, "not_run": skip[kind], "wall": None, "cpu": None,
                             "fit": None, "peak": None, "log_loss": None, "failed": None}
    return figures


def cli_figures(folder: Path, sizes: tuple[int, ...], seconds: float, ceiling: int,
                compare_seconds: float) -> dict[str, dict]:
    """The CLI end to end: compare at 100k, schema and score at the largest size."""
    glassbox = str(Path(sys.executable).parent / "glassbox")
    figures: dict[str, dict] = {}

    def one(name: str, command: list[str], limit: float = seconds) -> None:
        progress(f"CLI {name}")
        result = run(command, folder / f"cli_{name}.log", limit, ceiling)
        progress(f"  {outcome(result, limit, ceiling)}: {result['wall']:.1f} s wall, "
                 f"{result['cpu']:.1f} s CPU, {gb_text(result['peak_bytes'])} GB")
        figures[name] = {**median_of([result]), "result": result, "limit": limit}

    if 100_000 in sizes:
        data = folder / "rows_100000"
        one("compare", [glassbox, "compare", f"{data}.csv", "--schema", f"{data}.schema.toml",
                        "--jobs", "2", "--format", "json", "--out",
                        str(folder / "compare.json"), "--force"], compare_seconds)
    big = max(sizes)
    if big >= SCORE_SAMPLE:
        data = folder / f"rows_{big}"
        one("schema", [glassbox, "schema", f"{data}.csv", "--target", "bad", "--positive",
                       "yes", "--id", "application", "--out", str(folder / "inferred.toml"),
                       "--force"])
        model = folder / "score_model.json"
        one("fit", [glassbox, "fit", str(folder / f"sample_{SCORE_SAMPLE}.csv"), "--schema",
                    f"{data}.schema.toml", "--out", str(model), "--force"])
        for suffix in ("parquet", "csv"):
            out = folder / f"scores.{suffix}"
            out.unlink(missing_ok=True)
            one(f"score_{suffix}", [glassbox, "score", str(model), f"{data}.csv", "--out",
                                    str(out), "--force"])
            written = out.read_bytes()[:4] if out.exists() else b""
            figures[f"score_{suffix}"]["parquet"] = written == b"PAR1"
        figures["big"] = {"rows": big}
    return figures


def target_row(what: str, measured: str, met: bool | None) -> str:
    verdict = "not measured" if met is None else "met" if met else "missed"
    return f"| {what} | {measured} | {verdict} |"


def scale_rows(folder: Path, sizes: tuple[int, ...] = SIZES, repeats: dict | None = None,
               seconds: float = LIMIT_SECONDS, ceiling: int = LIMIT_BYTES,
               compare_seconds: float = LIMIT_SECONDS, pygam_at_million: bool = False,
               ) -> list[str]:
    """The section: every contender at every size, the CLI, the issue's targets."""
    repeats = repeats or REPEATS
    start = time.perf_counter()
    by_size: dict[int, dict] = {}
    pygam_per_row = None
    for rows in sizes:
        progress(f"generating {rows:,} rows (+ {rows // 4:,} held out)")
        subprocess.run([sys.executable, str(HERE), "data", str(rows), str(folder)], check=True)
        skip = {}
        if rows >= 1_000_000 and not pygam_at_million:
            need = (f"more than {pygam_per_row * rows / 2**30:.0f} GB"
                    if pygam_per_row else "too much memory")
            skip["pygam"] = f"not run: pygam alone needs {need} (its peak at 100k, scaled)"
        by_size[rows] = family_figures(folder, rows, repeats.get(rows, 1), seconds, ceiling,
                                       skip)
        if by_size[rows]["pygam"]["peak"]:
            pygam_per_row = by_size[rows]["pygam"]["peak"] / rows
    cli = cli_figures(folder, sizes, seconds, ceiling, compare_seconds)
    elapsed = time.perf_counter() - start
    progress(f"done in {elapsed / 60:.1f} min")
    return section_lines(by_size, cli, seconds, ceiling, elapsed)


def section_lines(by_size: dict[int, dict], cli: dict, seconds: float, ceiling: int,
                  elapsed: float) -> list[str]:
    lines = ["## Fitting at portfolio scale: each family against its library, and the CLI",
             "",
             "Generated data (bench/scale_data.py: 20 numeric features with skewed money amounts",
             "and gaps, 2 categories, an id column); the held-out log loss is on 25% more rows",
             "generated with the fitted ones (a fifth of all generated rows), the same for every",
             "contender. Each contender is its own fresh process: wall and CPU (user + system,",
             "worker processes included) cover the whole process up to the end of its fit,",
             "imports and reading the Parquet file included, held-out scoring not; a CLI",
             "command's cover it to its exit. `fit` is the time inside the fit call alone (ours:",
             "`fit_model` from the raw frame; the library: its `fit` on a design already built).",
             "Peak is the largest resident set of the process and its workers. The library",
             "calls run on one BLAS / OpenMP thread; ours run as the families set them.",
             "`LogisticRegression` (newton-cholesky, C = 1 as the sparse family's refit) is fitted",
             "on the sparse family's design rebuilt in numpy (standardised numbers, a gap at the",
             "median plus a missing indicator, reference-coded levels); `LogisticGAM` has one",
             "spline (20 basis functions) per number, a linear term per missing indicator and a",
             "factor per category at pygam's default penalty; `HistGradientBoostingClassifier`",
             "has the boosted family's first-stage settings including its one-feature-per-tree",
             "interaction constraint, so both fit the same kind of model and the ratio is the",
             "family's own cost around it.",
             f"Limits: {seconds:.0f} s and {ceiling / 2**30:.0f} GB of address space per "
             "contender.",
             "",
             "| rows | contender | wall (s) | CPU (s) | fit (s) | peak (GB) | held-out log loss "
             "| runs |",
             "|---|---|---:|---:|---:|---:|---:|---|"]
    for rows, figures in by_size.items():
        for family, library, label in FAMILIES:
            lines.append(contender_row(rows, f"{family} (ours)", figures[family], seconds,
                                       ceiling))
            lines.append(contender_row(rows, label, figures[library], seconds, ceiling))
    lines += ["", "Ratios ours / library, measured side by side:", "",
              "| rows | family | whole-process CPU | fit-only wall | peak memory |",
              "|---|---|---:|---:|---:|"]
    for rows, figures in by_size.items():
        for family, library, _ in FAMILIES:
            ours, theirs = figures[family], figures[library]
            lines.append(f"| {row_text(rows)} | {family} | {ratio_text(ours['cpu'], theirs['cpu'])}"
                         f" | {ratio_text(ours['fit'], theirs['fit'])} | "
                         f"{ratio_text(ours['peak'], theirs['peak'])} |")
    lines += ["", "The CLI end to end (`glassbox ...`, its own process, imports included; "
              "score uses a model `glassbox fit` made from the first 20,000 rows):", "",
              "| command | rows | wall (s) | CPU (s) | peak (GB) | outcome |",
              "|---|---:|---:|---:|---:|---|"]
    big = cli.get("big", {}).get("rows", 0)
    names = {"compare": ("compare --jobs 2", 100_000), "schema": ("schema (CSV)", big),
             "fit": ("fit (sparse, CSV)", SCORE_SAMPLE),
             "score_parquet": ("score --out x.parquet (CSV in)", big),
             "score_csv": ("score --out x.csv (CSV in)", big)}
    for name, (label, rows) in names.items():
        if name not in cli:
            continue
        figures = cli[name]
        note = outcome(figures["result"], figures["limit"], ceiling)
        if "parquet" in figures and name == "score_parquet":
            note += "; the file written is " + ("Parquet" if figures["parquet"]
                                                else "not Parquet")
        result = figures["result"]
        lines.append(f"| {label} | {rows:,} | {result['wall']:.1f} | {result['cpu']:.1f} | "
                     f"{gb_text(result['peak_bytes'])} | {note} |")
    lines += ["", "The issue's targets:", "", "| target | measured | |", "|---|---|---|"]
    million = by_size.get(1_000_000)
    if million:
        spline = million["spline"]
        lines.append(target_row(
            "spline at 1M: under 60 s wall and 4 GB peak",
            (f"{spline['wall']:.1f} s, {gb_text(spline['peak'])} GB" if spline["runs"]
             else outcome(spline["failed"], seconds, ceiling)),
            bool(spline["runs"]) and spline["wall"] < SPLINE_WALL
            and spline["peak"] < SPLINE_PEAK_GB * 2**30))
        for family, library, _ in (FAMILIES[0], FAMILIES[2]):
            ours, theirs = million[family], million[library]
            cpu = ours["cpu"] / theirs["cpu"] if ours["runs"] and theirs["runs"] else None
            fit = ours["fit"] / theirs["fit"] if ours["runs"] and theirs["runs"] else None
            lines.append(target_row(
                f"{family} at 1M: within {LIBRARY_RATIO}× of the library",
                "–" if cpu is None else f"CPU {cpu:.2f}×, fit-only wall {fit:.2f}×",
                None if cpu is None else cpu <= LIBRARY_RATIO and fit <= LIBRARY_RATIO))
    for name, what, limit in (("compare", "compare --jobs 2 at 100k: under 5 min", COMPARE_WALL),
                              ("schema", "schema at 1M: under 10 s", SCHEMA_WALL),
                              ("score_parquet", "score at 1M to Parquet: under 10 s",
                               SCORE_WALL)):
        if name not in cli or (name != "compare" and big < 1_000_000):
            continue
        result = cli[name]["result"]
        ok = outcome(result, 0, 1) == "ok" and cli[name].get("parquet", True)
        lines.append(target_row(what, f"{result['wall']:.1f} s"
                                + ("" if outcome(result, 0, 1) == "ok" else " (stopped)")
                                + ("" if cli[name].get("parquet", True) else ", not Parquet"),
                                ok and result["wall"] < limit))
    lines += ["", f"The section took {elapsed / 60:.0f} minutes."]
    return lines


def main(arguments: list[str]) -> None:
    if arguments[0] == "data":
        make_data(int(arguments[1]), Path(arguments[2]))
    elif arguments[0] == "fit":
        print(json.dumps(fit_contender(arguments[1], arguments[2])))
    elif arguments[0] == "launch":
        split = arguments.index("--")
        print(json.dumps(launch(float(arguments[1]), int(arguments[2]), arguments[split + 1:],
                                Path(arguments[3]))))
    elif arguments[0] == "section":  # the section alone, with smaller limits for a check
        seconds = float(arguments[2]) if len(arguments) > 2 else LIMIT_SECONDS
        ceiling = int(float(arguments[3]) * 2**30) if len(arguments) > 3 else LIMIT_BYTES
        repeats = int(arguments[4]) if len(arguments) > 4 else None
        print("\n".join(scale_rows(
            Path(arguments[1]), seconds=seconds, ceiling=ceiling, compare_seconds=seconds,
            repeats={rows: repeats for rows in SIZES} if repeats else None)))
    else:
        raise SystemExit("usage: scale_run.py section FOLDER [SECONDS GB REPEATS] | "
                         "data ROWS FOLDER | fit KIND STEM | "
                         "launch SECONDS BYTES LOG -- COMMAND...")


if __name__ == "__main__":
    main(sys.argv[1:])
