"""The accuracy cost of going glass-box: every model on the same folds as a black box.

Each glass-box family and the black-box benchmark are fitted and scored on the
same (stratified, for classification) folds, so their differences are paired.
Intervals use the corrected resampled t statistic of Nadeau & Bengio (2003,
Machine Learning 52): the variance of a mean over J resampled folds is
(1/J + n_test/n_train) * s², not s²/J, because the training sets overlap.

One sign convention throughout (`COST_CONVENTION`): a glass-box model's cost is how
much worse it scores than the benchmark, the benchmark's score minus its own where
higher is better (ROC AUC, accuracy, R²) and its own minus the benchmark's where lower
is better (log loss, Brier, RMSE, MAE); a negative cost is a gain. Only these paired
costs get a test against zero; a single model's metric gets its interval only.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from concurrent.futures import as_completed
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from threadpoolctl import threadpool_limits

from glassbox import __version__
from glassbox.core.additive import AdditiveModel
from glassbox.core.documents import checksum
from glassbox.core.encoding import Prepared
from glassbox.core.errors import DataError, OptionError
from glassbox.core.provenance import frame_fingerprint, library_versions
from glassbox.core.schema import Schema, pool_levels, prepare
from glassbox.core.workers import become_worker, pool_running, sigint_held
from glassbox.fitting.benchmarks import BENCHMARKS, benchmark_settings, fit_benchmark
from glassbox.fitting.families import FAMILIES
from glassbox.fitting.fit import fit_typed, unpooled
from glassbox.fitting.intervals import (  # noqa: F401  (interval: re-exported)
    CLIPPED,
    COST_RANGES,
    INF,
    INTERVAL_METHOD,
    METRIC_RANGES,
    NO_VARIANCE,
    interval,
    read_within_ranges,
)
from glassbox.fitting.metrics import classification_metrics, regression_metrics

FORMAT = "glassbox-comparison"
VERSION = 2  # 2: costs signed as the screen shows them, the schema inside; 1 is still read
CLASSIFICATION_METRICS = ("auc", "log_loss", "brier", "accuracy")
REGRESSION_METRICS = ("rmse", "mae", "r2")
HIGHER_IS_BETTER = {"auc": True, "accuracy": True, "r2": True, "log_loss": False,
                    "brier": False, "rmse": False, "mae": False}
METRIC_NAMES = {"auc": "ROC AUC", "log_loss": "log loss", "brier": "Brier",
                "accuracy": "accuracy", "rmse": "RMSE", "mae": "MAE", "r2": "R²"}
COST_CONVENTION = ("cost = benchmark minus glass-box model for metrics where higher is better "
                   "(auc, accuracy, r2), glass-box model minus benchmark where lower is better "
                   "(log_loss, brier, rmse, mae): a positive cost means the glass-box model "
                   "does worse, a negative one that it does better")


@dataclass(frozen=True)
class CompareSettings:
    """What to compare and how to resample."""

    families: tuple[str, ...] = ("sparse", "spline", "boosted")
    benchmark: str = "trees"
    folds: int = 5
    repeats: int = 1
    seed: int = 0
    jobs: int = 1
    cutoff: float = 0.5
    sparsity_curve: bool = True
    family_options: dict[str, dict[str, Any]] = field(default_factory=dict)

    def check(self) -> None:
        unknown = [f for f in self.families if f not in FAMILIES]
        if unknown or not self.families:
            raise OptionError(f"unknown family {', '.join(unknown) or '(none given)'} "
                              f"(known: {', '.join(FAMILIES)})")
        if self.benchmark not in BENCHMARKS:
            raise OptionError(f"unknown benchmark {self.benchmark!r} "
                              f"(known: {', '.join(BENCHMARKS)})")
        if self.folds < 2:
            raise OptionError(f"--folds must be at least 2, not {self.folds}")
        if self.repeats < 1:
            raise OptionError(f"--repeats must be at least 1, not {self.repeats}")
        if self.jobs < 1:
            raise OptionError(f"--jobs must be at least 1, not {self.jobs}")
        if not 0.0 < self.cutoff < 1.0:
            raise OptionError(f"--cutoff must lie between 0 and 1, not {self.cutoff}")


# ---------------------------------------------------------------- the folds

SET_ASIDE_RULE = ("each misses a feature that no training row of its fold misses, so a model "
                  "fitted there that uses it has no missing-value entry for it and would refuse "
                  "the row; such rows are left out of every model's test rows alike")


def keep_scorable(features: pd.DataFrame, folds: list[tuple[int, int, np.ndarray, np.ndarray]]
                  ) -> tuple[list[tuple[int, int, np.ndarray, np.ndarray]], dict[str, Any]]:
    """The folds without the test rows no fold model could score, and a count of them.

    A model learns a missing-value entry for a feature only from training rows that miss
    it; a test row missing a feature its fold's training rows never miss would be
    refused, so no model (the benchmark included) is scored on it.
    """
    missing = features.isna().to_numpy()
    kept, count, by_feature = [], 0, dict.fromkeys(features.columns, 0)
    for repeat, fold, train, test in folds:
        refused = missing[test] & ~missing[train].any(axis=0)  # (row, feature) cells
        for name, cells in zip(features.columns, refused.sum(axis=0), strict=True):
            by_feature[name] += int(cells)
        count += int(refused.any(axis=1).sum())
        kept.append((repeat, fold, train, test[~refused.any(axis=1)]))
    return kept, {"test_rows": count, "rule": SET_ASIDE_RULE,
                  "rows_missing_each_feature": {k: v for k, v in by_feature.items() if v}}


def make_folds(target: np.ndarray, task: str, settings: CompareSettings
               ) -> list[tuple[int, int, np.ndarray, np.ndarray]]:
    """(repeat, fold, train rows, test rows) for every fold, checked for one-class folds."""
    count = len(target)
    if count < settings.folds:
        raise DataError(f"only {count} rows but {settings.folds} folds; use --folds {count} "
                        "or fewer")
    if task == "classification":
        positives = int(target.sum())
        rarest = min(positives, count - positives)
        if rarest == 0:
            raise DataError("the target has one class only; there is nothing to compare")
        if rarest < settings.folds:
            raise DataError(f"the rarer class has only {rarest} rows, so some of the "
                            f"{settings.folds} folds would hold one class only; use --folds "
                            f"{max(rarest, 2)} or fewer")
        splitter = RepeatedStratifiedKFold(n_splits=settings.folds, n_repeats=settings.repeats,
                                           random_state=settings.seed)
    else:
        splitter = RepeatedKFold(n_splits=settings.folds, n_repeats=settings.repeats,
                                 random_state=settings.seed)
    folds = []
    for number, (train, test) in enumerate(splitter.split(np.zeros(count), target)):
        repeat, fold = divmod(number, settings.folds)
        if task == "classification":
            for rows, side in ((train, "training"), (test, "test")):
                if len(np.unique(target[rows])) < 2:
                    raise DataError(f"fold {fold + 1} of repeat {repeat + 1} has one class only "
                                    f"in its {side} rows; use fewer folds")
        folds.append((repeat, fold, train, test))
    return folds


@dataclass(frozen=True)
class Task:
    """One unit of work: a model (or the sparsity curve) on one fold."""

    kind: str  # "family", "benchmark" or "sparsity"
    name: str
    repeat: int
    fold: int
    train: np.ndarray
    test: np.ndarray


def _scores(task: str, target: np.ndarray, prediction: np.ndarray, cutoff: float) -> dict:
    if task == "classification":
        return classification_metrics(target, prediction, cutoff)
    return regression_metrics(target, prediction)


@dataclass(frozen=True)
class Typed:
    """The whole frame typed once per comparison and shared by every task: `features` as
    `fit_typed` takes them (categories not yet pooled by a `pool_below` rule), `pooled`
    the same with the schema's own pooled levels (what the benchmark and the sparsity
    path read, as a raw frame typed by the schema would be), and the target."""

    features: pd.DataFrame
    pooled: pd.DataFrame
    target: np.ndarray


def type_frame(frame: pd.DataFrame, schema: Schema, source: str | None = None) -> Typed:
    """Validate and type the frame once for every fold and task."""
    prepared = prepare(frame, unpooled(schema), source=source)
    features = prepared.features
    pooled = features.assign(**{
        spec.name: pool_levels(features[spec.name], spec.pooled)
        for spec in schema.used_features if spec.pooled and spec.pool_below is not None})
    return Typed(features, pooled, prepared.target)


def run_task(task: Task, typed: Typed, schema: Schema,
             settings: CompareSettings) -> list[dict[str, Any]]:
    """Fit on the task's training rows, score its test rows; one record per model.

    Each task runs on one thread: parallelism comes from running tasks side by
    side (`jobs`), and nested OpenMP threads on a busy machine slow boosting by
    an order of magnitude.
    """
    with threadpool_limits(limits=1):
        return _run_task(task, typed, schema, settings)


def fold_model(typed: Typed, schema: Schema, family: str, train: np.ndarray,
               options: dict[str, Any]) -> AdditiveModel:
    """A family fitted on a fold's training rows of the shared typed frame: the model
    `fit_model` gives on those raw rows, without what only a saved model keeps."""
    names = [spec.name for spec in schema.used_features]
    return fit_typed(typed.features[names].iloc[train], typed.target[train], schema, family,
                     summaries=False, **options)


def fold_prediction(model: AdditiveModel, typed: Typed, rows: np.ndarray) -> np.ndarray:
    """`model.predict` of the raw rows, from the shared typed frame: the model's pooled
    levels pooled, rows it cannot score refused, the terms added as `predict` adds them."""
    encoded = typed.features[list(model.features)].iloc[rows]
    encoded = encoded.assign(**{
        name: pool_levels(encoded[name], model.schema.feature(name).pooled)
        for name in model.features if model.schema.feature(name).pooled})
    model.check_missing(encoded, "the data")
    score = model.intercept + model.contributions_encoded(encoded).sum(axis=1).to_numpy()
    return model.inverse_link(score)


def _run_task(task: Task, typed: Typed, schema: Schema,
              settings: CompareSettings) -> list[dict[str, Any]]:
    goal = schema.target.task
    target = typed.target
    base = {"repeat": task.repeat, "fold": task.fold, "train_rows": len(task.train),
            "test_rows": len(task.test)}
    if task.kind == "benchmark":
        prediction = fit_benchmark(settings.benchmark, goal, typed.pooled, target,
                                   task.train, task.test, settings.seed + task.repeat)
        return [{**base, "model": task.name,
                 **_scores(goal, target[task.test], prediction, settings.cutoff)}]
    if task.kind == "family":
        options = settings.family_options.get(task.name, {})
        model = fold_model(typed, schema, task.name, task.train, options)
        prediction = fold_prediction(model, typed, task.test)
        return [{**base, "model": task.name,
                 **_scores(goal, target[task.test], prediction, settings.cutoff)}]
    # the sparsity curve: one L1 path per fold, then a refit per number of features
    from glassbox.fitting.families import sparse

    options = {k: v for k, v in settings.family_options.get("sparse", {}).items()
               if k != "max_features"}
    design = sparse.build_design(
        typed.pooled.iloc[task.train], schema,
        min_level_rows=options.get("min_level_rows", sparse.DEFAULTS["min_level_rows"]))
    order = sparse.entry_order(design, target[task.train], goal,
                               options.get("path_points", sparse.DEFAULTS["path_points"]))
    records = []
    for size in range(1, len(order) + 1):
        chosen = order[:size]
        model = fold_model(typed, schema.restricted_to(chosen), "sparse", task.train, options)
        records.append({**base, "model": "sparse", "max_features": size,
                        "features": list(chosen),
                        **_scores(goal, target[task.test],
                                  fold_prediction(model, typed, task.test), settings.cutoff)})
    return records


# ---------------------------------------------------------------- the comparison


@dataclass(frozen=True)
class Comparison:
    """Everything a comparison found, as plain data (the JSON file is `to_dict`)."""

    task: str
    primary: str
    headline: str
    models: pd.DataFrame        # model, kind, metric, mean, lower, upper
    costs: pd.DataFrame         # model, metric, cost, lower, upper, t, p_value, ...
    folds: pd.DataFrame         # one row per model per fold
    sparsity: pd.DataFrame      # max_features, metric, mean, lower, upper
    settings: dict[str, Any]
    provenance: dict[str, Any]
    schema: dict[str, Any] | None = None  # as in model files; None in version 1 files

    def to_dict(self) -> dict[str, Any]:
        def records(table: pd.DataFrame) -> list[dict]:
            return [{k: _plain(v) for k, v in row.items()}
                    for row in table.to_dict(orient="records")]

        return {"format": FORMAT, "version": VERSION, "headline": self.headline,
                "task": self.task, "primary_metric": self.primary,
                "cost_convention": COST_CONVENTION, "schema": self.schema,
                "schema_sha256": None if self.schema is None else checksum(self.schema),
                "settings": self.settings, "provenance": self.provenance,
                "models": records(self.models), "costs": records(self.costs),
                "sparsity_curve": records(self.sparsity), "folds": records(self.folds)}


def _plain(value: Any) -> Any:
    """JSON-ready: numpy scalars as Python ones; NaN and infinities as null (the row's
    interval_note says why)."""
    if isinstance(value, np.floating | float):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def plan_tasks(folds, settings: CompareSettings) -> list[Task]:
    """Every (model, fold) pair, the slowest kinds first so parallel runs finish together."""
    tasks = []
    for repeat, fold, train, test in folds:
        tasks.append(Task("benchmark", f"benchmark ({settings.benchmark})", repeat, fold,
                          train, test))
        for family in settings.families:
            tasks.append(Task("family", family, repeat, fold, train, test))
        if settings.sparsity_curve and "sparse" in settings.families:
            tasks.append(Task("sparsity", "sparse", repeat, fold, train, test))
    return tasks


def compare(
    frame: pd.DataFrame,
    schema: Schema,
    settings: CompareSettings | None = None,
    *,
    source: str | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> Comparison:
    """Fit every model on the same folds and measure what the glass-box ones cost."""
    settings = settings or CompareSettings()
    settings.check()
    schema.require_better()  # every fold fits: refuse at once, not in the first fold
    typed = type_frame(frame, schema, source)
    goal = schema.target.task
    folds, set_aside = keep_scorable(typed.features, make_folds(typed.target, goal, settings))
    tasks = plan_tasks(folds, settings)
    records: list[dict[str, Any]] = []
    done = 0
    if progress:
        progress(0, len(tasks), "starting")
    for task_records, label in _run_all(tasks, typed, schema, settings):
        records += task_records
        done += 1
        if progress:
            progress(done, len(tasks), label)
    return summarise(records, Prepared(typed.pooled, typed.target, None, pd.DataFrame()),
                     schema, settings, folds, set_aside)


def _run_all(tasks: list[Task], typed: Typed, schema: Schema, settings: CompareSettings):
    """Yield (records, label) per finished task; with jobs > 1 in worker processes, each
    given the typed frame once when it starts (tasks carry only their rows)."""
    if settings.jobs == 1:
        for task in tasks:
            yield run_task(task, typed, schema, settings), _label(task)
        return
    with pool_running(settings.jobs, _start_worker, (typed, schema, settings)) as pool:
        with sigint_held():  # a submit may start a process
            pending = [pool.submit(_run_in_worker, task) for task in tasks]
        for future in as_completed(pending):
            yield future.result()


_SHARED: dict[str, Any] = {}  # set once per worker process by `_start_worker`


def _start_worker(parent: int, typed: Typed, schema: Schema,
                  settings: CompareSettings) -> None:
    become_worker(parent)
    _SHARED.update(typed=typed, schema=schema, settings=settings)


def _run_in_worker(task: Task) -> tuple[list[dict], str]:
    return (run_task(task, _SHARED["typed"], _SHARED["schema"], _SHARED["settings"]),
            _label(task))


def _label(task: Task) -> str:
    name = "sparsity curve" if task.kind == "sparsity" else task.name
    return f"{name}, fold {task.fold + 1} of repeat {task.repeat + 1}"


def summarise(records: list[dict[str, Any]], prepared, schema: Schema,
              settings: CompareSettings, folds,
              set_aside: dict[str, Any] | None = None) -> Comparison:
    """Means, intervals, paired differences and the headline from per-fold records."""
    goal = schema.target.task
    metrics = CLASSIFICATION_METRICS if goal == "classification" else REGRESSION_METRICS
    primary = metrics[0]
    table = pd.DataFrame(records).sort_values(["repeat", "fold", "model"], kind="mergesort")
    curve_rows = table[table.get("max_features", pd.Series(np.nan, index=table.index)).notna()]
    fold_rows = table.drop(curve_rows.index)
    fold_rows = fold_rows.drop(columns=[c for c in ("max_features", "features")
                                        if c in fold_rows], errors="ignore")
    train_rows = np.mean([len(f[2]) for f in folds])
    test_rows = np.mean([len(f[3]) for f in folds])
    share = float(test_rows / train_rows)
    benchmark = f"benchmark ({settings.benchmark})"
    order = [*settings.families, benchmark]
    model_rows, cost_rows = [], []
    base = fold_rows[fold_rows["model"] == benchmark].set_index(["repeat", "fold"])
    for name in order:
        rows = fold_rows[fold_rows["model"] == name].set_index(["repeat", "fold"])
        for metric in metrics:
            spread = interval(rows[metric], share, bounds=METRIC_RANGES[metric])
            model_rows.append({"model": name,
                               "kind": "black box" if name == benchmark else "glass box",
                               "metric": metric,
                               **{k: spread[k] for k in ("mean", "lower", "upper")},
                               "interval_note": spread["note"]})
            if name == benchmark:
                continue
            worse = base.loc[rows.index, metric] - rows[metric]  # higher is better
            result = interval(worse if HIGHER_IS_BETTER[metric] else -worse, share,
                              bounds=COST_RANGES.get(metric, (-INF, INF)))
            note = result.pop("note")
            cost_rows.append({"model": name, "metric": metric, "cost": result.pop("mean"),
                              **result, "distinguishable": bool(not (result["lower"] <= 0
                                                                     <= result["upper"])),
                              "interval_note": note})
    models = pd.DataFrame(model_rows)
    costs = pd.DataFrame(cost_rows)
    sparsity = _sparsity(curve_rows, metrics, share)
    headline = make_headline(models, costs, primary, benchmark)
    set_aside = set_aside or {"test_rows": 0}
    if set_aside["test_rows"]:
        headline += (f" {set_aside['test_rows']} test row(s) over all folds were scored by no "
                     f"model: {SET_ASIDE_RULE}.")
    provenance = {"rows": int(len(prepared.features)), "test_rows_set_aside": set_aside,
                  "features": list(prepared.features.columns),
                  "data_sha256": frame_fingerprint(prepared.features.assign(
                      __target__=prepared.target)),
                  "glassbox_version": __version__, "versions": library_versions()}
    settings_record = {"families": list(settings.families), "benchmark": settings.benchmark,
                       "benchmark_settings": benchmark_settings(settings.benchmark, goal,
                                                                settings.seed),
                       "folds": settings.folds, "repeats": settings.repeats,
                       "seed": settings.seed, "cutoff": settings.cutoff,
                       "stratified": goal == "classification",
                       "family_options": settings.family_options,
                       "interval": INTERVAL_METHOD,
                       "test_to_train_ratio": share}
    return Comparison(goal, primary, headline, models, costs, fold_rows.reset_index(drop=True),
                      sparsity, settings_record, provenance, schema.to_dict())


def _sparsity(curve_rows: pd.DataFrame, metrics: Sequence[str], share: float) -> pd.DataFrame:
    if curve_rows.empty:
        return pd.DataFrame(columns=["max_features", "metric", "mean", "lower", "upper"])
    rows = []
    for size, group in curve_rows.groupby("max_features", sort=True):
        for metric in metrics:
            result = interval(group[metric], share, bounds=METRIC_RANGES[metric])
            rows.append({"max_features": int(size), "metric": metric,
                         **{k: result[k] for k in ("mean", "lower", "upper")},
                         "interval_note": result["note"]})
    return pd.DataFrame(rows)


def make_headline(models: pd.DataFrame, costs: pd.DataFrame, primary: str,
                  benchmark: str) -> str:
    """The best glass-box model, its cost against the benchmark with the interval (and,
    when it was picked from several, that the interval does not allow for the picking),
    and what the interval says."""
    glass = models[(models["kind"] == "glass box") & (models["metric"] == primary)]
    best = glass.sort_values("mean", ascending=not HIGHER_IS_BETTER[primary],
                             kind="mergesort").iloc[0]
    gap = costs[(costs["model"] == best["model"]) & (costs["metric"] == primary)].iloc[0]
    cost, low, high = gap["cost"], gap["lower"], gap["upper"]
    name = METRIC_NAMES[primary]
    what = "costs" if cost >= 0 else "gains"
    if cost < 0:  # speak of the gain, and give the gain's interval
        cost, low, high = -cost, -high, -low
    picked = len(glass)
    who = (f"Best of {picked} glass-box models: " if picked > 1 else "Glass-box model: ")
    caveat = (f", not adjusted for picking the best of {picked} on these same folds, which "
              "flatters the winner" if picked > 1 else "")
    if np.isnan(low):
        verdict = "one fold gives no interval"
    elif not gap["distinguishable"]:
        verdict = "the interval contains zero, so these folds cannot tell the two apart"
    else:
        side = "scores higher" if gap["cost"] > 0 else "scores lower"
        verdict = (f"the interval excludes zero: on this data the benchmark {side} by more "
                   "than the folds vary, which says nothing of whether the gap matters")
    return (f"{who}{best['model']} ({name} {best['mean']:.3f}). Against the {benchmark} it "
            f"{what} {cost:.3f} {name} (95% interval {low:.3f} to {high:.3f}{caveat}): "
            f"{verdict}.")


# ---------------------------------------------------------------- tables for people


def _range(lower: float, upper: float, digits: int, note: Any = None) -> str:
    """An interval for people; a clipped or zero-width interval says so."""
    if np.isnan(lower):
        return ""
    text = f"{lower:.{digits}f} to {upper:.{digits}f}"
    marks = [mark for key, mark in ((CLIPPED, "clipped"), (NO_VARIANCE, "no variance"))
             if isinstance(note, str) and key in note]
    return f"{text} ({', '.join(marks)})" if marks else text


def metric_heading(comparison: Comparison, metric: str) -> str:
    """A metric's name for people; accuracy says the cut-off it counts at."""
    if metric == "accuracy":
        return f"accuracy at {comparison.settings.get('cutoff', 0.5):g}"
    return METRIC_NAMES[metric]


def accuracy_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """One row per model: the primary metric with its interval, then the other metrics."""
    models, primary = comparison.models, comparison.primary
    rows = []
    for name in dict.fromkeys(models["model"]):
        mine = models[models["model"] == name].set_index("metric")
        row: dict[str, Any] = {"model": name}
        for metric in mine.index:
            row[metric_heading(comparison, metric)] = f"{mine.loc[metric, 'mean']:.{digits}f}"
            if metric == primary:
                row["95% interval"] = _range(mine.loc[metric, "lower"],
                                             mine.loc[metric, "upper"], digits,
                                             mine.loc[metric].get("interval_note"))
        rows.append(row)
    return pd.DataFrame(rows)


def cost_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """Each glass-box model's paired cost against the benchmark in the primary metric
    (positive: the glass box is worse; see `COST_CONVENTION`)."""
    gaps = comparison.costs[comparison.costs["metric"] == comparison.primary]
    rows = []
    for gap in gaps.to_dict(orient="records"):
        rows.append({"model": gap["model"],
                     f"cost in {METRIC_NAMES[comparison.primary]}":
                         f"{gap['cost']:.{digits}f}",
                     "95% interval": _range(gap["lower"], gap["upper"], digits,
                                            gap.get("interval_note")),
                     "p-value": f"{gap['p_value']:.3f}",
                     "differs from zero": "yes" if gap["distinguishable"] else "no"})
    return pd.DataFrame(rows)


def cost_note(comparison: Comparison) -> str:
    """What the cost column means, in a line."""
    name = METRIC_NAMES[comparison.primary]
    if HIGHER_IS_BETTER[comparison.primary]:
        way = f"the benchmark's {name} minus the glass-box model's"
    else:
        way = f"the glass-box model's {name} minus the benchmark's"
    return (f"Cost is {way}, fold by fold: positive means the glass-box model does worse. "
            "The p-value tests a cost of zero (corrected resampled t).")


def sparsity_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """The sparse family's primary metric at each number of features."""
    curve = comparison.sparsity
    if curve.empty:
        return pd.DataFrame()
    primary = comparison.primary
    rows = curve[curve["metric"] == primary]
    name = METRIC_NAMES[primary]
    return pd.DataFrame({
        "features": rows["max_features"].astype(int).to_numpy(),
        name: [f"{m:.{digits}f}" for m in rows["mean"]],
        "95% interval": [_range(lo, hi, digits, note) for lo, hi, note in
                         zip(rows["lower"], rows["upper"],
                             rows.get("interval_note", [None] * len(rows)), strict=True)],
    })


def rerun_command(settings: dict[str, Any], data: str, schema: str) -> str:
    """The `glassbox compare` command line that repeats a comparison made with `settings`
    (the schema file holding the comparison's "schema" table, as TOML)."""
    return (f"glassbox compare {data} --schema {schema} --families "
            f"{','.join(settings['families'])} --benchmark {settings['benchmark']} --folds "
            f"{settings['folds']} --repeats {settings['repeats']} --seed {settings['seed']} "
            f"--cutoff {settings['cutoff']:g}")


def to_markdown(comparison: Comparison) -> str:
    """The headline, the overview and the sparsity curve as Markdown."""
    from glassbox.core.formats import to_markdown as table_markdown

    parts = ["# Accuracy cost of the glass-box models", "", comparison.headline, "",
             "## Accuracy on held-out folds", "", table_markdown(accuracy_table(comparison)),
             f"## Cost against the {comparison.settings['benchmark']} benchmark "
             "(paired by fold)", "", table_markdown(cost_table(comparison)),
             cost_note(comparison), ""]
    curve = sparsity_table(comparison)
    if not curve.empty:
        parts += ["## Sparse family: accuracy by number of features", "",
                  table_markdown(curve)]
    settings = comparison.settings
    parts += [f"{settings['folds']} folds × {settings['repeats']} repeat(s), seed "
              f"{settings['seed']}; intervals: {settings['interval']}.", ""]
    return "\n".join(parts)


# ---------------------------------------------------------------- reading a comparison file
