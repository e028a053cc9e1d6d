"""A comparison's folds and the work on them: the folds themselves, the frame typed once
and shared, and each (model, fold) task, run here or in worker processes.

`glassbox.fitting.compare` plans a comparison with these and summarises what they return.
"""

from __future__ import annotations

from concurrent.futures import as_completed
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from threadpoolctl import threadpool_limits

from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import DataError
from glassbox.core.schema import Schema, pool_levels, prepare
from glassbox.core.workers import become_worker, pool_running, sigint_held
from glassbox.fitting.benchmarks import benchmark_fold
from glassbox.fitting.choices import pair_families
from glassbox.fitting.fit import _missing_as_level, finished, fit_typed, ready, unpooled
from glassbox.fitting.metrics import (
    classification_metrics,
    regression_metrics,
    separation_metrics,
)

if TYPE_CHECKING:
    from glassbox.fitting.compare import CompareSettings

PREDICTIONS = "predictions"  # a record's out-of-fold predictions, in its test rows' order
TUNING = "tuning"  # the benchmark record's search in its fold (the tuned trees only)
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

    kind: str  # "family", "benchmark", "sparsity" or "pairs"
    name: str
    repeat: int
    fold: int
    train: np.ndarray
    test: np.ndarray


def fold_scores(task: str, target: np.ndarray, prediction: np.ndarray, cutoff: float) -> dict:
    if task == "classification":
        return {**classification_metrics(target, prediction, cutoff),
                **separation_metrics(target, prediction)}
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
        prediction, tuning = benchmark_fold(settings.benchmark, goal, typed.pooled, target,
                                            task.train, task.test, settings.seed + task.repeat,
                                            settings.benchmark_budget)
        return [{**base, "model": task.name,
                 **fold_scores(goal, target[task.test], prediction, settings.cutoff),
                 PREDICTIONS: np.asarray(prediction, dtype=float), TUNING: tuning}]
    if task.kind == "family":
        options = settings.family_options.get(task.name, {})
        model = fold_model(typed, schema, task.name, task.train, options)
        prediction = fold_prediction(model, typed, task.test)
        return [{**base, "model": task.name,
                 **fold_scores(goal, target[task.test], prediction, settings.cutoff),
                 PREDICTIONS: np.asarray(prediction, dtype=float)}]
    if task.kind == "pairs":  # the pair curve: the family refitted per number of pairs
        records = []
        for step in settings.pair_steps:
            options = {**settings.family_options.get(task.name, {}), "pairs": step}
            model = fold_model(typed, schema, task.name, task.train, options)
            records.append({**base, "model": task.name, "pairs": step,
                            "pairs_fitted": len(model.pairs),
                            **fold_scores(goal, target[task.test],
                                          fold_prediction(model, typed, task.test),
                                          settings.cutoff)})
        return records
    # the sparsity curve: one L1 path per fold, then a refit per number of features
    records = []
    steps: dict[str, Any] = {}
    for size, chosen, model in sparsity_models(typed, schema, task.train, settings, steps):
        joined = chosen[-1]
        records.append({**base, "model": "sparse", "max_features": size,
                        "features": list(chosen), "joined": joined,
                        "on_path": joined in steps["left"],
                        "left": list(steps["left"].get(joined, ())),
                        **fold_scores(goal, target[task.test],
                                  fold_prediction(model, typed, task.test), settings.cutoff)})
    return records


def sparsity_models(typed: Typed, schema: Schema, train: np.ndarray,
                    settings: CompareSettings, steps: dict[str, Any] | None = None):
    """(size, the features in the order they enter, fold model) for each number of features
    along the fold's L1 path: per size, the model `fold_model` gives for the schema
    restricted to them, from one typed fold and one design shared by every size (a
    design's columns are each a function of its feature's column alone, so restricting
    the design is the design of the restricted frame; one of a single column is built
    alone, as numpy sums such a matrix pairwise, see `sparse.standardised`).

    `steps`, when given, receives "left": for each feature that enters the path, the
    features that had entered before it but are back at zero where it enters."""
    from glassbox.fitting.families import sparse

    options = {k: v for k, v in settings.family_options.get("sparse", {}).items()
               if k != "max_features"}
    settings_of = {**sparse.DEFAULTS, **options}
    goal = schema.target.task
    target = typed.target[train]
    schema = unpooled(schema)
    names = [spec.name for spec in schema.used_features]
    features, pooled = ready(typed.features[names].iloc[train], target, schema, "the data")
    design = sparse.build_design(_missing_as_level(features, pooled), pooled,
                                 min_level_rows=settings_of["min_level_rows"])
    # the path reads the frame with the schema's own pooled levels: the same design unless
    # a pool_below rule pooled the fold's levels afresh
    path_design = design if all(spec.pool_below is None for spec in schema.used_features) \
        else sparse.build_design(typed.pooled.iloc[train], schema,
                                 min_level_rows=settings_of["min_level_rows"])
    coefs = sparse.l1_path(path_design, target, goal, settings_of["path_points"])
    order = sparse.order_along(coefs, path_design)
    if steps is not None:
        steps["left"] = sparse.left_along(coefs, path_design)
    leveled = _missing_as_level(features, pooled)
    for size in range(1, len(order) + 1):
        chosen = order[:size]
        restricted = schema.restricted_to(chosen)
        restricted = replace(restricted, features=tuple(
            pooled.feature(spec.name) if spec.used else spec for spec in restricted.features))
        kept = [spec.name for spec in restricted.used_features]  # in the schema's order
        in_order = [name for name in dict.fromkeys(design.feature_of) if name in kept]
        own = design  # but numpy sums a one-column matrix otherwise: built alone
        if design.columns_of(set(in_order)).sum() == 1:
            own = sparse.build_design(leveled[kept], restricted,
                                      min_level_rows=settings_of["min_level_rows"])
        with threadpool_limits(limits=1, user_api="blas"):
            fitted = sparse.refit(own, target, goal, in_order, in_order, settings_of["ridge"])
        family_fit = sparse.compiled(fitted, leveled[kept], restricted,
                                     {**settings_of, "max_features": None})
        yield size, chosen, finished(family_fit, features[kept], target, restricted, "sparse",
                                     summaries=False)


def plan_tasks(folds, settings: CompareSettings) -> list[Task]:
    """Every (model, fold) pair, the slowest kinds first so parallel runs finish together."""
    tasks = []
    for repeat, fold, train, test in folds:
        if not settings.benchmark_scores:  # else the outside scores are the benchmark's
            tasks.append(Task("benchmark", f"benchmark ({settings.benchmark})", repeat, fold,
                              train, test))
        for family in settings.families:
            tasks.append(Task("family", family, repeat, fold, train, test))
        if settings.sparsity_curve and "sparse" in settings.families:
            tasks.append(Task("sparsity", "sparse", repeat, fold, train, test))
        if settings.pair_steps:
            tasks += [Task("pairs", family, repeat, fold, train, test)
                      for family in pair_families(settings.families)]
    return tasks


def run_all(tasks: list[Task], typed: Typed, schema: Schema, settings: CompareSettings):
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
    name = {"sparsity": "sparsity curve", "pairs": f"{task.name} by pairs"}.get(task.kind,
                                                                               task.name)
    return f"{name}, fold {task.fold + 1} of repeat {task.repeat + 1}"


