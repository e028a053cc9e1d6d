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
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from glassbox import __version__
from glassbox.core.documents import checksum
from glassbox.core.encoding import Prepared
from glassbox.core.errors import OptionError
from glassbox.core.provenance import frame_fingerprint, library_versions
from glassbox.core.schema import Schema
from glassbox.core.wording import plural, verb
from glassbox.fitting.benchmark_search import DEFAULT_BUDGET, check_budget
from glassbox.fitting.benchmarks import BENCHMARKS, benchmark_settings, headline_name
from glassbox.fitting.calibration import DEFINITION as CALIBRATION_DEFINITION
from glassbox.fitting.choices import pair_families
from glassbox.fitting.compare_checks import (
    FLAG_RULE,
    NO_SKILL,
    STEP_RULE,
    base_rate,
    calibration_tables,
    flag_table,
    no_skill_records,
    pop_predictions,
    sparsity_steps,
)
from glassbox.fitting.compare_folds import (
    SET_ASIDE_RULE,
    TUNING,
    keep_scorable,
    make_folds,
    plan_tasks,
    run_all,
    type_frame,
)
from glassbox.fitting.compare_outside import (
    LAYOUT,
    ORIGIN_BUILT_IN,
    ORIGIN_OUTSIDE,
    OUTSIDE_NAME,
    OutsideScores,
    benchmark_label,
    fold_table,
    outside_records,
    read_outside_scores,
    row_ids,
    scored_rows,
)
from glassbox.fitting.compare_tables import (  # noqa: F401  (tables for people: re-exported)
    accuracy_table,
    cost_note,
    cost_table,
    metric_heading,
    rerun_command,
    sparsity_table,
    to_markdown,
)
from glassbox.fitting.families import FAMILIES
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
from glassbox.fitting.metrics import (  # noqa: F401  (re-exported)
    CLASSIFICATION_METRICS,
    HIGHER_IS_BETTER,
    METRIC_DEFINITIONS,
    METRIC_NAMES,
    REGRESSION_METRICS,
)

FORMAT = "glassbox-comparison"
# 3: Gini and KS, the no-skill model and its flags, calibration, the sparsity curve's
# entering features; 2: costs signed as the screen shows them, the schema inside. 1 and 2
# are still read (what they lack is said, not invented).
VERSION = 3
READ_VERSIONS = (1, 2, 3)
COST_CONVENTION = ("cost = benchmark minus glass-box model for metrics where higher is better "
                   "(auc, gini, ks, accuracy, r2), glass-box model minus benchmark where lower "
                   "is better "
                   "(log_loss, brier, rmse, mae): a positive cost means the glass-box model "
                   "does worse, a negative one that it does better")


@dataclass(frozen=True)
class CompareSettings:
    """What to compare and how to resample."""

    families: tuple[str, ...] = ("sparse", "spline", "boosted")
    benchmark: str = "trees"
    benchmark_budget: int = DEFAULT_BUDGET  # candidate settings per fold (the tuned trees)
    folds: int = 5
    repeats: int = 1
    seed: int = 0
    jobs: int = 1
    cutoff: float = 0.5
    sparsity_curve: bool = True
    family_options: dict[str, dict[str, Any]] = field(default_factory=dict)
    # an outside model's out-of-fold scores (CSV or Parquet) in the benchmark's place
    benchmark_scores: str | None = None
    # the pair curve: each family that takes pairs refitted with these numbers of pairs
    # (none: no curve); `pair_steps_up_to` gives the usual steps
    pair_steps: tuple[int, ...] = ()

    def check(self) -> None:
        unknown = [f for f in self.families if f not in FAMILIES]
        if unknown or not self.families:
            raise OptionError(f"unknown family {', '.join(unknown) or '(none given)'} "
                              f"(known: {', '.join(FAMILIES)})")
        if self.benchmark not in BENCHMARKS:
            raise OptionError(f"unknown benchmark {self.benchmark!r} "
                              f"(known: {', '.join(BENCHMARKS)})")
        check_budget(self.benchmark_budget)
        if self.folds < 2:
            raise OptionError(f"--folds must be at least 2, not {self.folds}")
        if self.repeats < 1:
            raise OptionError(f"--repeats must be at least 1, not {self.repeats}")
        if self.jobs < 1:
            raise OptionError(f"--jobs must be at least 1, not {self.jobs}")
        if not 0.0 < self.cutoff < 1.0:
            raise OptionError(f"--cutoff must lie between 0 and 1, not {self.cutoff}")
        if self.pair_steps:
            if any(isinstance(k, bool) or not isinstance(k, int) or k < 0
                   for k in self.pair_steps):
                raise OptionError(f"pair steps must be whole numbers of at least 0, not "
                                  f"{list(self.pair_steps)}")
            if not pair_families(self.families):
                raise OptionError(f"the pair curve needs a family that fits pairs "
                                  f"({', '.join(pair_families())}); compared here: "
                                  f"{', '.join(self.families)}")


PAIR_STEPS = (0, 1, 3, 10)
PAIR_STEP_RULE = ("each family that takes pairs is refitted on every fold with 0, 1, 3 and 10 "
                  "pairs, up to the number asked (--pairs), and no more than the features "
                  "make; the intervals are as for the models")


def pair_steps_up_to(pairs: int) -> tuple[int, ...]:
    """The pair curve's steps for `--pairs N`: those of PAIR_STEPS below N, then N
    (none for N = 0: no curve)."""
    return tuple(k for k in PAIR_STEPS if k < pairs) + (pairs,) if pairs > 0 else ()


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
    # new in version 3; None when read from an older file (which did not hold them)
    base_rate: dict[str, Any] | None = None
    flags: pd.DataFrame | None = None             # model, metric, mean, no_skill, beats
    calibration: pd.DataFrame | None = None       # model, decile, rows, mean_predicted, ...
    calibration_fit: pd.DataFrame | None = None   # model, slope, intercept, rows, note
    sparsity_steps: pd.DataFrame | None = None    # repeat, fold, max_features, joined, ...
    # model, pairs, metric, mean, lower, upper, interval_note, pairs_fitted; None: not asked
    pair_curve: pd.DataFrame | None = None
    version: int = VERSION                        # the format of the file it was read from

    def absent(self) -> list[str]:
        """What this comparison lacks because its file was written by an older glassbox."""
        names = {"base_rate": "the base rate and the no-skill model",
                 "flags": "the flags of models that do not beat the no-skill model"}
        if self.task == "classification":
            names["calibration"] = "the calibration tables (deciles, slope and intercept)"
        if not self.sparsity.empty:
            names["sparsity_steps"] = "the feature that joins at each size of the curve"
        missing = [words for key, words in names.items() if getattr(self, key) is None]
        if self.task == "classification" and not (self.models["metric"] == "ks").any():
            missing.insert(0, "Gini and KS")
        return missing

    def to_dict(self) -> dict[str, Any]:
        def records(table: pd.DataFrame) -> list[dict]:
            return [{k: _plain(v) for k, v in row.items()}
                    for row in table.to_dict(orient="records")]

        document = {
            "format": FORMAT, "version": VERSION, "headline": self.headline,
            "task": self.task, "primary_metric": self.primary,
            "cost_convention": COST_CONVENTION, "metric_definitions": METRIC_DEFINITIONS,
            "schema": self.schema,
            "schema_sha256": None if self.schema is None else checksum(self.schema),
            "settings": self.settings, "provenance": self.provenance,
            "base_rate": self.base_rate, "models": records(self.models),
            "no_skill_rule": FLAG_RULE,
            "no_skill_flags": None if self.flags is None else records(self.flags),
            "costs": records(self.costs),
            "calibration_definition": CALIBRATION_DEFINITION,
            "calibration_fit": None if self.calibration_fit is None
            else records(self.calibration_fit),
            "calibration_deciles": None if self.calibration is None
            else records(self.calibration),
            "sparsity_curve": records(self.sparsity),
            "sparsity_step_rule": STEP_RULE,
            "sparsity_steps": None if self.sparsity_steps is None
            else records(self.sparsity_steps),
            "pair_curve": None if self.pair_curve is None else records(self.pair_curve),
            "folds": records(self.folds)}
        if self.task != "classification":  # calibration is of probabilities
            for key in ("calibration_definition", "calibration_fit", "calibration_deciles"):
                document.pop(key)
        return document


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


def compare(
    frame: pd.DataFrame,
    schema: Schema,
    settings: CompareSettings | None = None,
    *,
    source: str | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    folds_out: Callable[[pd.DataFrame], None] | None = None,
) -> Comparison:
    """Fit every model on the same folds and measure what the glass-box ones cost.

    With `settings.benchmark_scores`, an outside model's out-of-fold scores (see
    `compare_outside.LAYOUT`) take the benchmark's place, checked before any fitting;
    `folds_out`, when given, receives the fold assignment (`compare_outside.fold_table`)
    before any fitting too."""
    settings = settings or CompareSettings()
    settings.check()
    schema.require_better()  # every fold fits: refuse at once, not in the first fold
    typed = type_frame(frame, schema, source)
    goal = schema.target.task
    if settings.pair_steps:  # no more pairs than the features make
        width = len(schema.used_features)
        settings = replace(settings, pair_steps=tuple(sorted(
            {min(k, width * (width - 1) // 2) for k in settings.pair_steps})))
    assigned = make_folds(typed.target, goal, settings)
    folds, set_aside = keep_scorable(typed.features, assigned)
    records: list[dict[str, Any]] = []
    outside = None
    if folds_out is not None or settings.benchmark_scores:
        id_name, ids = row_ids(frame, schema, source or "the data")
        assignment = fold_table(assigned, id_name, ids, settings.repeats)
        if settings.benchmark_scores:
            outside = read_outside_scores(settings.benchmark_scores, id_name, ids, goal,
                                          settings.repeats,
                                          scored_rows(folds, len(ids), settings.repeats),
                                          assignment)
            records += outside_records(outside, folds, typed.target, goal, settings.cutoff,
                                       benchmark_label(settings.benchmark,
                                                       settings.benchmark_scores))
        if folds_out is not None:
            folds_out(assignment)
    tasks = plan_tasks(folds, settings)
    done = 0
    if progress:
        progress(0, len(tasks), "starting")
    for task_records, label in run_all(tasks, typed, schema, settings):
        records += task_records
        done += 1
        if progress:
            progress(done, len(tasks), label)
    return summarise(records, Prepared(typed.pooled, typed.target, None, pd.DataFrame()),
                     schema, settings, folds, set_aside, outside)


def summarise(records: list[dict[str, Any]], prepared, schema: Schema,
              settings: CompareSettings, folds,
              set_aside: dict[str, Any] | None = None,
              outside: OutsideScores | None = None) -> Comparison:
    """Means, intervals, paired differences and the headline from per-fold records."""
    goal = schema.target.task
    metrics = CLASSIFICATION_METRICS if goal == "classification" else REGRESSION_METRICS
    primary = metrics[0]
    records, predictions = pop_predictions(records)
    tuning = [{"repeat": int(record["repeat"]), "fold": int(record["fold"]),
               **record.pop(TUNING)} for record in records if record.get(TUNING) is not None]
    for record in records:
        record.pop(TUNING, None)
    tuning.sort(key=lambda row: (row["repeat"], row["fold"]))
    target = np.asarray(prepared.target)
    # the metrics the models were scored on (records made before Gini and KS lack them)
    metrics = tuple(m for m in metrics if all(m in record for record in records))
    records += no_skill_records(target, folds, goal, settings.cutoff)
    table = pd.DataFrame(records).sort_values(["repeat", "fold", "model"], kind="mergesort")
    curve_rows = table[table.get("max_features", pd.Series(np.nan, index=table.index)).notna()]
    pair_rows = table[table.get("pairs", pd.Series(np.nan, index=table.index)).notna()]
    fold_rows = table.drop(curve_rows.index.union(pair_rows.index))
    fold_rows = fold_rows.drop(columns=[c for c in ("max_features", "features", "joined",
                                                    "on_path", "left", "pairs", "pairs_fitted")
                                        if c in fold_rows], errors="ignore")
    train_rows = np.mean([len(f[2]) for f in folds])
    test_rows = np.mean([len(f[3]) for f in folds])
    share = float(test_rows / train_rows)
    benchmark = benchmark_label(settings.benchmark, settings.benchmark_scores)
    order = [*settings.families, benchmark, NO_SKILL]
    kinds = {benchmark: "black box", NO_SKILL: "no skill"}
    model_rows, cost_rows = [], []
    base = fold_rows[fold_rows["model"] == benchmark].set_index(["repeat", "fold"])
    for name in order:
        rows = fold_rows[fold_rows["model"] == name].set_index(["repeat", "fold"])
        for metric in metrics:
            spread = interval(rows[metric], share, bounds=METRIC_RANGES[metric])
            model_rows.append({"model": name,
                               "kind": kinds.get(name, "glass box"),
                               "metric": metric,
                               **{k: spread[k] for k in ("mean", "lower", "upper")},
                               "interval_note": spread["note"]})
            if name in kinds:
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
    flags = flag_table(models, metrics, HIGHER_IS_BETTER)
    calibration = calibration_fit_table = None
    if goal == "classification":
        calibration, calibration_fit_table = calibration_tables(
            predictions, folds, target, order[:-1])
    headline = make_headline(models, costs, primary,
                             headline_name(settings.benchmark, settings.benchmark_budget)
                             if tuning else benchmark)
    set_aside = set_aside or {"test_rows": 0}
    if set_aside["test_rows"]:
        headline += (f" {plural(set_aside['test_rows'], 'test row')} over all folds "
                     f"{verb(set_aside['test_rows'], 'was', 'were')} scored by no "
                     f"model: {SET_ASIDE_RULE}.")
    provenance = {"rows": int(len(prepared.features)), "test_rows_set_aside": set_aside,
                  "features": list(prepared.features.columns),
                  "data_sha256": frame_fingerprint(prepared.features.assign(
                      __target__=prepared.target)),
                  "glassbox_version": __version__, "versions": library_versions()}
    if outside is not None:
        provenance["benchmark_scores_sha256"] = outside.sha256
        chosen = {"benchmark": OUTSIDE_NAME, "benchmark_scores": outside.file_name,
                  "benchmark_scores_layout": LAYOUT,
                  "benchmark_origin": ORIGIN_OUTSIDE.format(name=outside.file_name)}
    else:
        chosen = {"benchmark": settings.benchmark,
                  "benchmark_settings": benchmark_settings(settings.benchmark, goal,
                                                           settings.seed,
                                                           settings.benchmark_budget),
                  "benchmark_origin": ORIGIN_BUILT_IN}
    settings_record = {"families": list(settings.families), **chosen,
                       "folds": settings.folds, "repeats": settings.repeats,
                       "seed": settings.seed, "cutoff": settings.cutoff,
                       "stratified": goal == "classification",
                       "family_options": settings.family_options,
                       "interval": INTERVAL_METHOD,
                       "test_to_train_ratio": share}
    if settings.pair_steps:
        settings_record["pair_steps"] = list(settings.pair_steps)
        settings_record["pair_step_rule"] = PAIR_STEP_RULE
    if tuning:  # each fold's search: the settings chosen and the budget used
        settings_record["benchmark_budget"] = settings.benchmark_budget
        settings_record["benchmark_tuning"] = tuning
    return Comparison(goal, primary, headline, models, costs, fold_rows.reset_index(drop=True),
                      sparsity, settings_record, provenance, schema.to_dict(),
                      base_rate=base_rate(target, goal), flags=flags,
                      calibration=calibration, calibration_fit=calibration_fit_table,
                      sparsity_steps=sparsity_steps(curve_rows),
                      pair_curve=_pair_curve(pair_rows, metrics, share, settings))


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


def _pair_curve(pair_rows: pd.DataFrame, metrics: Sequence[str], share: float,
                settings: CompareSettings) -> pd.DataFrame | None:
    """Per family and number of pairs: each metric's mean over folds with its interval, and
    the fewest pairs a fold model had (fewer than asked where fewer pairs could be cut)."""
    if not settings.pair_steps:
        return None
    rows = []
    for family in pair_families(settings.families):
        for step in settings.pair_steps:
            group = pair_rows[(pair_rows["model"] == family) & (pair_rows["pairs"] == step)]
            for metric in metrics:
                result = interval(group[metric], share, bounds=METRIC_RANGES[metric])
                rows.append({"model": family, "pairs": int(step), "metric": metric,
                             **{k: result[k] for k in ("mean", "lower", "upper")},
                             "interval_note": result["note"],
                             "pairs_fitted": int(group["pairs_fitted"].min())})
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
