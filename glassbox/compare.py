"""The accuracy cost of going glass-box: every model on the same folds as a black box.

Each glass-box family and the black-box benchmark are fitted and scored on the
same (stratified, for classification) folds, so their differences are paired.
Intervals use the corrected resampled t statistic of Nadeau & Bengio (2003,
Machine Learning 52): the variance of a mean over J resampled folds is
(1/J + n_test/n_train) * s², not s²/J, because the training sets overlap.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from threadpoolctl import threadpool_limits

from glassbox import __version__
from glassbox.benchmarks import BENCHMARKS, benchmark_settings, fit_benchmark
from glassbox.errors import DataError, OptionError
from glassbox.families import FAMILIES
from glassbox.files import read_json
from glassbox.fitting import fit_model
from glassbox.metrics import classification_metrics, regression_metrics
from glassbox.provenance import frame_fingerprint, library_versions
from glassbox.schema import Schema, prepare

FORMAT = "glassbox-comparison"
VERSION = 1
CLASSIFICATION_METRICS = ("auc", "log_loss", "brier", "accuracy")
REGRESSION_METRICS = ("rmse", "mae", "r2")
HIGHER_IS_BETTER = {"auc": True, "accuracy": True, "r2": True, "log_loss": False,
                    "brier": False, "rmse": False, "mae": False}
METRIC_NAMES = {"auc": "ROC AUC", "log_loss": "log loss", "brier": "Brier",
                "accuracy": "accuracy", "rmse": "RMSE", "mae": "MAE", "r2": "R²"}


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


# ---------------------------------------------------------------- statistics


def interval(values: Sequence[float], test_share: float, level: float = 0.95) -> dict:
    """Mean with the corrected resampled t interval (Nadeau & Bengio 2003).

    `test_share` is n_test / n_train of one fold. With J values the variance of
    the mean is (1/J + test_share) * s²; the interval uses t with J - 1 degrees
    of freedom. The t statistic and two-sided p-value test a mean of zero.
    """
    values = np.asarray(values, dtype=float)
    count = len(values)
    mean = float(values.mean())
    if count < 2:
        return {"mean": mean, "lower": float("nan"), "upper": float("nan"),
                "t": float("nan"), "p_value": float("nan")}
    variance = float(values.var(ddof=1))
    error = np.sqrt((1.0 / count + test_share) * variance)
    quantile = stats.t.ppf(0.5 + level / 2, count - 1)
    t_value = mean / error if error > 0 else (0.0 if mean == 0 else np.copysign(np.inf, mean))
    p_value = float(2 * stats.t.sf(abs(t_value), count - 1)) if np.isfinite(t_value) else (
        1.0 if t_value == 0 else 0.0)
    return {"mean": mean, "lower": float(mean - quantile * error),
            "upper": float(mean + quantile * error), "t": float(t_value), "p_value": p_value}


# ---------------------------------------------------------------- the folds


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


def run_task(task: Task, frame: pd.DataFrame, schema: Schema,
             settings: CompareSettings) -> list[dict[str, Any]]:
    """Fit on the task's training rows, score its test rows; one record per model.

    Each task runs on one thread: parallelism comes from running tasks side by
    side (`jobs`), and nested OpenMP threads on a busy machine slow boosting by
    an order of magnitude.
    """
    with threadpool_limits(limits=1):
        return _run_task(task, frame, schema, settings)


def _run_task(task: Task, frame: pd.DataFrame, schema: Schema,
              settings: CompareSettings) -> list[dict[str, Any]]:
    goal = schema.target.task
    prepared = prepare(frame, schema)
    target = prepared.target
    train, test = frame.iloc[task.train], frame.iloc[task.test]
    base = {"repeat": task.repeat, "fold": task.fold, "train_rows": len(task.train),
            "test_rows": len(task.test)}
    if task.kind == "benchmark":
        prediction = fit_benchmark(settings.benchmark, goal, prepared.features, target,
                                   task.train, task.test, settings.seed + task.repeat)
        return [{**base, "model": task.name,
                 **_scores(goal, target[task.test], prediction, settings.cutoff)}]
    if task.kind == "family":
        options = settings.family_options.get(task.name, {})
        model = fit_model(train, schema, task.name, **options)
        prediction = model.predict(test)
        return [{**base, "model": task.name,
                 **_scores(goal, target[task.test], prediction, settings.cutoff)}]
    # the sparsity curve: one L1 path per fold, then a refit per number of features
    from glassbox.families import sparse

    options = {k: v for k, v in settings.family_options.get("sparse", {}).items()
               if k != "max_features"}
    train_prepared = prepare(train, schema)
    design = sparse.build_design(train_prepared.features, schema)
    order = sparse.entry_order(design, train_prepared.target, goal,
                               options.get("path_points", sparse.DEFAULTS["path_points"]))
    records = []
    for size in range(1, len(order) + 1):
        chosen = order[:size]
        model = fit_model(train, schema.restricted_to(chosen), "sparse", **options)
        records.append({**base, "model": "sparse", "max_features": size,
                        "features": list(chosen),
                        **_scores(goal, target[task.test], model.predict(test),
                                  settings.cutoff)})
    return records


# ---------------------------------------------------------------- the comparison


@dataclass(frozen=True)
class Comparison:
    """Everything a comparison found, as plain data (the JSON file is `to_dict`)."""

    task: str
    primary: str
    headline: str
    models: pd.DataFrame        # model, kind, metric, mean, lower, upper
    differences: pd.DataFrame   # model, metric, mean, lower, upper, t, p_value, better
    folds: pd.DataFrame         # one row per model per fold
    sparsity: pd.DataFrame      # max_features, metric, mean, lower, upper
    settings: dict[str, Any]
    provenance: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        def records(table: pd.DataFrame) -> list[dict]:
            return [{k: _plain(v) for k, v in row.items()}
                    for row in table.to_dict(orient="records")]

        return {"format": FORMAT, "version": VERSION, "headline": self.headline,
                "task": self.task, "primary_metric": self.primary,
                "settings": self.settings, "provenance": self.provenance,
                "models": records(self.models), "differences": records(self.differences),
                "sparsity_curve": records(self.sparsity), "folds": records(self.folds)}


def _plain(value: Any) -> Any:
    if isinstance(value, np.floating | float):
        return None if np.isnan(value) else float(value)
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
    prepared = prepare(frame, schema, source=source)
    goal = schema.target.task
    folds = make_folds(prepared.target, goal, settings)
    tasks = plan_tasks(folds, settings)
    records: list[dict[str, Any]] = []
    done = 0
    if progress:
        progress(0, len(tasks), "starting")
    for task_records, label in _run_all(tasks, frame, schema, settings):
        records += task_records
        done += 1
        if progress:
            progress(done, len(tasks), label)
    return summarise(records, prepared, schema, settings, folds)


def _run_all(tasks: list[Task], frame: pd.DataFrame, schema: Schema, settings: CompareSettings):
    """Yield (records, label) per finished task, in parallel when jobs > 1."""
    if settings.jobs == 1:
        for task in tasks:
            yield run_task(task, frame, schema, settings), _label(task)
        return
    from joblib import Parallel, delayed

    runner = Parallel(n_jobs=settings.jobs, return_as="generator_unordered")
    labelled = runner(delayed(_with_label)(task, frame, schema, settings) for task in tasks)
    yield from labelled


def _with_label(task: Task, frame, schema, settings) -> tuple[list[dict], str]:
    return run_task(task, frame, schema, settings), _label(task)


def _label(task: Task) -> str:
    name = "sparsity curve" if task.kind == "sparsity" else task.name
    return f"{name}, fold {task.fold + 1} of repeat {task.repeat + 1}"


def summarise(records: list[dict[str, Any]], prepared, schema: Schema,
              settings: CompareSettings, folds) -> Comparison:
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
    model_rows, difference_rows = [], []
    base = fold_rows[fold_rows["model"] == benchmark].set_index(["repeat", "fold"])
    for name in order:
        rows = fold_rows[fold_rows["model"] == name].set_index(["repeat", "fold"])
        for metric in metrics:
            model_rows.append({"model": name,
                               "kind": "black box" if name == benchmark else "glass box",
                               "metric": metric, **interval(rows[metric], share)})
            if name == benchmark:
                continue
            paired = rows[metric] - base.loc[rows.index, metric]
            result = interval(paired, share)
            better = result["mean"] > 0 if HIGHER_IS_BETTER[metric] else result["mean"] < 0
            distinct = not (result["lower"] <= 0 <= result["upper"])
            difference_rows.append({"model": name, "metric": metric, **result,
                                    "glass_box_better": bool(better),
                                    "distinguishable": bool(distinct)})
    models = pd.DataFrame(model_rows)
    differences = pd.DataFrame(difference_rows)
    sparsity = _sparsity(curve_rows, metrics, share)
    headline = make_headline(models, differences, primary, benchmark)
    provenance = {"rows": int(len(prepared.features)),
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
                       "interval": "95%, corrected resampled t (Nadeau & Bengio 2003)",
                       "test_to_train_ratio": share}
    return Comparison(goal, primary, headline, models, differences,
                      fold_rows.reset_index(drop=True), sparsity, settings_record, provenance)


def _sparsity(curve_rows: pd.DataFrame, metrics: Sequence[str], share: float) -> pd.DataFrame:
    if curve_rows.empty:
        return pd.DataFrame(columns=["max_features", "metric", "mean", "lower", "upper"])
    rows = []
    for size, group in curve_rows.groupby("max_features", sort=True):
        for metric in metrics:
            result = interval(group[metric], share)
            rows.append({"max_features": int(size), "metric": metric,
                         **{k: result[k] for k in ("mean", "lower", "upper")}})
    return pd.DataFrame(rows)


def make_headline(models: pd.DataFrame, differences: pd.DataFrame, primary: str,
                  benchmark: str) -> str:
    """One sentence: the best glass-box model, its cost against the benchmark, and whether
    that cost is distinguishable from zero."""
    glass = models[(models["kind"] == "glass box") & (models["metric"] == primary)]
    best = glass.sort_values("mean", ascending=not HIGHER_IS_BETTER[primary],
                             kind="mergesort").iloc[0]
    gap = differences[(differences["model"] == best["model"])
                      & (differences["metric"] == primary)].iloc[0]
    sign = 1.0 if HIGHER_IS_BETTER[primary] else -1.0
    cost = -sign * gap["mean"]  # positive: the glass box is worse
    low, high = sorted((-sign * gap["lower"], -sign * gap["upper"]))
    name = METRIC_NAMES[primary]
    if gap["distinguishable"]:
        verdict = ("a real cost (the interval excludes zero)" if cost > 0 else
                   "a real gain over the benchmark (the interval excludes zero)")
    else:
        verdict = "not distinguishable from zero"
    what = "costs" if cost >= 0 else "gains"
    if cost < 0:  # speak of the gain, and give the gain's interval
        low, high = -high, -low
    return (f"Best glass-box model: {best['model']} ({name} {best['mean']:.3f}); against "
            f"the {benchmark} it {what} {abs(cost):.3f} {name} (95% interval {low:.3f} to "
            f"{high:.3f}), {verdict}.")


# ---------------------------------------------------------------- tables for people


def _range(lower: float, upper: float, digits: int) -> str:
    return "" if np.isnan(lower) else f"{lower:.{digits}f} to {upper:.{digits}f}"


def accuracy_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """One row per model: the primary metric with its interval, then the other metrics."""
    models, primary = comparison.models, comparison.primary
    rows = []
    for name in dict.fromkeys(models["model"]):
        mine = models[models["model"] == name].set_index("metric")
        row: dict[str, Any] = {"model": name}
        for metric in mine.index:
            row[METRIC_NAMES[metric]] = f"{mine.loc[metric, 'mean']:.{digits}f}"
            if metric == primary:
                row["95% interval"] = _range(mine.loc[metric, "lower"],
                                             mine.loc[metric, "upper"], digits)
        rows.append(row)
    return pd.DataFrame(rows)


def cost_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """Each glass-box model's paired cost against the benchmark in the primary metric
    (positive: the glass box is worse)."""
    primary = comparison.primary
    sign = 1.0 if HIGHER_IS_BETTER[primary] else -1.0
    gaps = comparison.differences[comparison.differences["metric"] == primary]
    rows = []
    for gap in gaps.to_dict(orient="records"):
        low, high = sorted((-sign * gap["lower"], -sign * gap["upper"]))
        rows.append({"model": gap["model"],
                     f"cost in {METRIC_NAMES[primary]}": f"{-sign * gap['mean']:.{digits}f}",
                     "95% interval": _range(low, high, digits),
                     "p-value": f"{gap['p_value']:.3f}",
                     "differs from zero": "yes" if gap["distinguishable"] else "no"})
    return pd.DataFrame(rows)


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
        "95% interval": [_range(lo, hi, digits) for lo, hi in
                         zip(rows["lower"], rows["upper"], strict=True)],
    })


def to_markdown(comparison: Comparison) -> str:
    """The headline, the overview and the sparsity curve as Markdown."""
    from glassbox.formats import to_markdown as table_markdown

    parts = ["# Accuracy cost of the glass-box models", "", comparison.headline, "",
             "## Accuracy on held-out folds", "", table_markdown(accuracy_table(comparison)),
             f"## Cost against the {comparison.settings['benchmark']} benchmark "
             "(paired by fold)", "", table_markdown(cost_table(comparison))]
    curve = sparsity_table(comparison)
    if not curve.empty:
        parts += ["## Sparse family: accuracy by number of features", "",
                  table_markdown(curve)]
    settings = comparison.settings
    parts += [f"{settings['folds']} folds × {settings['repeats']} repeat(s), seed "
              f"{settings['seed']}; intervals: {settings['interval']}.", ""]
    return "\n".join(parts)


# ---------------------------------------------------------------- reading a comparison file

NUMBER_COLUMNS = ("mean", "lower", "upper", "t", "p_value")


def comparison_from_dict(document: Any, source: str = "the comparison") -> Comparison:
    """Rebuild a `Comparison` from `Comparison.to_dict` output (a comparison JSON file)."""
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        raise DataError(f"{source} is not a glassbox comparison file (no \"format\": "
                        f"\"{FORMAT}\")")
    if document.get("version") != VERSION:
        raise DataError(f"{source} is comparison format version {document.get('version')!r}; "
                        f"this glassbox reads version {VERSION}")

    def table(key: str) -> pd.DataFrame:
        frame = pd.DataFrame(document.get(key) or [])
        for column in NUMBER_COLUMNS:
            if column in frame:
                frame[column] = pd.to_numeric(frame[column], errors="coerce").astype(float)
        return frame

    try:
        return Comparison(
            task=str(document["task"]), primary=str(document["primary_metric"]),
            headline=str(document["headline"]), models=table("models"),
            differences=table("differences"), folds=table("folds"),
            sparsity=table("sparsity_curve"), settings=dict(document["settings"]),
            provenance=dict(document["provenance"]))
    except (KeyError, TypeError, ValueError) as exc:
        raise DataError(f"{source} is incomplete: {exc}") from None


def read_comparison(path: str | Path) -> Comparison:
    """Read a comparison JSON file written by `glassbox compare --format json`."""
    document = read_json(path, "comparison file", DataError)
    return comparison_from_dict(document, f"comparison file {path}")
