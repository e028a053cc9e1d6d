"""A comparison's tables for people: the terminal, Markdown and the report show these
(data frames of text), so what each shows comes from one place."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from glassbox.core.wording import plural
from glassbox.fitting.calibration import DEFINITION as CALIBRATION_DEFINITION
from glassbox.fitting.compare_checks import FLAG_RULE, NO_SKILL, STEP_RULE, step_words
from glassbox.fitting.intervals import CLIPPED, NO_VARIANCE
from glassbox.fitting.metrics import HIGHER_IS_BETTER, METRIC_DEFINITIONS, METRIC_NAMES

if TYPE_CHECKING:
    from glassbox.fitting.compare import Comparison


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
        if comparison.flags is not None:
            row[FLAG_HEADING] = "" if name == NO_SKILL else flag_words(comparison, name)
        rows.append(row)
    return pd.DataFrame(rows)


FLAG_HEADING = "does not beat no skill on"


def flag_words(comparison: Comparison, model: str) -> str:
    """The metrics on which `model` does not beat the no-skill model, or "none"."""
    flags = comparison.flags
    if flags is None:
        return ""
    losing = flags[(flags["model"] == model) & ~flags["beats"].astype(bool)]
    return ", ".join(metric_heading(comparison, m) for m in losing["metric"]) or "none"


def flagged_models(comparison: Comparison) -> list[str]:
    """Models that do not beat the no-skill model on at least one metric."""
    if comparison.flags is None or comparison.flags.empty:
        return []
    losing = comparison.flags[~comparison.flags["beats"].astype(bool)]
    return list(dict.fromkeys(losing["model"]))


def base_rate_note(comparison: Comparison) -> str:
    """The base rate, what the no-skill model does and the flag rule, in a paragraph; or
    what an older file lacks."""
    rate = comparison.base_rate
    if rate is None:
        return ""
    if "share_of_positives" in rate:
        what = (f"Base rate: {rate['share_of_positives']:.1%} of the {rate['rows']:,} rows "
                "are positive.")
    else:
        what = f"Mean target: {rate['mean']:.4g} over the {rate['rows']:,} rows."
    flagged = flagged_models(comparison)
    verdict = (f"Flagged: {', '.join(flagged)}." if flagged else
               "Every model beats the no-skill model on every metric.")
    return f"{what} {verdict} Rule: {FLAG_RULE}."


def metric_grid(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """Metrics as rows and models as columns (narrow enough for a terminal): each model's
    mean over the folds, marked "! " in front where it does not beat the no-skill model
    (in front, so the digits of a right-aligned column stay aligned)."""
    models = comparison.models
    names = list(dict.fromkeys(models["model"]))
    flags = comparison.flags
    losing = set() if flags is None else {
        (m, k) for m, k, b in zip(flags["model"], flags["metric"], flags["beats"], strict=True)
        if not b}
    rows = []
    for metric in dict.fromkeys(models["metric"]):
        row = {"metric": metric_heading(comparison, metric)}
        for name in names:
            found = models[(models["model"] == name) & (models["metric"] == metric)]
            value = found["mean"].iloc[0] if len(found) else np.nan
            text = "" if np.isnan(value) else f"{value:.{digits}f}"
            row[name] = f"! {text}" if (name, metric) in losing else text
        rows.append(row)
    return pd.DataFrame(rows)


def calibration_fit_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """model, calibration slope, calibration intercept, rows (pooled out-of-fold
    predictions), note."""
    fits = comparison.calibration_fit
    if fits is None or fits.empty:
        return pd.DataFrame()

    def number(value: Any) -> str:
        return "" if value is None or np.isnan(value) else f"{value:.{digits}f}"

    return pd.DataFrame({
        "model": fits["model"],
        "calibration slope": [number(v) for v in fits["slope"]],
        "calibration intercept": [number(v) for v in fits["intercept"]],
        "rows": [f"{int(v):,}" for v in fits["rows"]],
        "note": [v if isinstance(v, str) else "" for v in fits["note"]]})


def calibration_deciles(comparison: Comparison, model: str, digits: int = 3) -> pd.DataFrame:
    """One model's decile table: decile, rows, mean predicted, observed rate."""
    table = comparison.calibration
    if table is None or table.empty:
        return pd.DataFrame()
    mine = table[table["model"] == model]
    return pd.DataFrame({
        "decile": mine["decile"].astype(int).to_numpy(),
        "rows": [f"{int(v):,}" for v in mine["rows"]],
        "mean predicted": [f"{v:.{digits}f}" for v in mine["mean_predicted"]],
        "observed rate": [f"{v:.{digits}f}" for v in mine["observed_rate"]]})


ARROW = "→"


def calibration_grid(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """Every model's deciles in one narrow table: decile, rows, then per model "mean
    predicted → observed rate". One rows column when every model's decile holds the same
    rows (as with no tied predictions), else a rows column per model; a model with fewer
    groups (tied quantile edges merged) is blank past its last."""
    table = comparison.calibration
    if table is None or table.empty:
        return pd.DataFrame()
    models = list(dict.fromkeys(table["model"]))
    table = table.assign(decile=table["decile"].astype(int))
    mine = {name: table[table["model"] == name].set_index("decile") for name in models}
    deciles = sorted(set(table["decile"]))
    counts = {name: [int(mine[name]["rows"].get(d)) if d in mine[name].index else None
                     for d in deciles] for name in models}
    shared = len({tuple(c) for c in counts.values()}) == 1
    grid: dict[str, list[Any]] = {"decile": deciles}
    if shared:
        grid["rows"] = [f"{c:,}" if c is not None else "" for c in counts[models[0]]]
    for name in models:
        if not shared:
            grid[f"{name} rows"] = [f"{c:,}" if c is not None else "" for c in counts[name]]
        grid[name] = [
            f"{mine[name].loc[d, 'mean_predicted']:.{digits}f} {ARROW} "
            f"{mine[name].loc[d, 'observed_rate']:.{digits}f}" if d in mine[name].index
            else "" for d in deciles]
    return pd.DataFrame(grid)


def absent_note(comparison: Comparison) -> str:
    """What an older comparison file does not hold, in a sentence (empty when complete)."""
    missing = comparison.absent()
    if not missing:
        return ""
    return (f"This comparison file is format version {comparison.version}, written before "
            f"glassbox reported {', '.join(missing)}: they are absent here. Run the "
            "comparison again to see them.")


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
    table = pd.DataFrame({
        "features": rows["max_features"].astype(int).to_numpy(),
        name: [f"{m:.{digits}f}" for m in rows["mean"]],
        "95% interval": [_range(lo, hi, digits, note) for lo, hi, note in
                         zip(rows["lower"], rows["upper"],
                             rows.get("interval_note", [None] * len(rows)), strict=True)],
    })
    steps = comparison.sparsity_steps
    if steps is not None:
        words = [step_words(steps, int(size)) for size in table["features"]]
        table["joined"] = [joined for joined, _ in words]
        table["left on the path"] = [left for _, left in words]
    return table


def pair_table(comparison: Comparison, digits: int = 3) -> pd.DataFrame:
    """Each family that takes pairs: its primary metric with 0, 1, 3, ... pairs."""
    curve = comparison.pair_curve
    if curve is None or curve.empty:
        return pd.DataFrame()
    primary = comparison.primary
    rows = curve[curve["metric"] == primary]
    name = METRIC_NAMES[primary]
    fitted = rows.get("pairs_fitted", rows["pairs"]).astype(int).to_numpy()
    asked = rows["pairs"].astype(int).to_numpy()
    return pd.DataFrame({
        "family": rows["model"].to_numpy(),
        "pairs": [str(a) if f >= a else f"{a} ({f} in a fold)"
                  for a, f in zip(asked, fitted, strict=True)],
        name: [f"{m:.{digits}f}" for m in rows["mean"]],
        "95% interval": [_range(lo, hi, digits, note) for lo, hi, note in
                         zip(rows["lower"], rows["upper"],
                             rows.get("interval_note", [None] * len(rows)), strict=True)],
    })


def pair_note(comparison: Comparison) -> str:
    """How the pair curve was made, in a line."""
    rule = comparison.settings.get("pair_step_rule", "")
    return f"Pairs: {rule}." if rule else ""


def rerun_command(settings: dict[str, Any], data: str, schema: str) -> str:
    """The `glassbox compare` command line that repeats a comparison made with `settings`
    (the schema file holding the comparison's "schema" table, as TOML)."""
    from glassbox.fitting.choices import setting_text

    families = " ".join(f"--family {family}" for family in settings["families"])
    options = "".join(f" --option {family}.{name}={setting_text(value)}"
                      for family, chosen in sorted(settings.get("family_options", {}).items())
                      for name, value in sorted(chosen.items()))
    budget = (f" --benchmark-budget {settings['benchmark_budget']}"
              if "benchmark_budget" in settings and not settings.get("benchmark_scores")
              else "")
    benchmark = (f"--benchmark-scores {settings['benchmark_scores']}"
                 if settings.get("benchmark_scores") else f"--benchmark {settings['benchmark']}")
    pairs = f" --pairs {max(settings['pair_steps'])}" if settings.get("pair_steps") else ""
    return (f"glassbox compare {data} --schema {schema} {families} {benchmark}{budget} "
            f"--folds {settings['folds']} --repeats "
            f"{settings['repeats']} --seed {settings['seed']} --cutoff "
            f"{settings['cutoff']:g}{pairs}{options}")


def to_markdown(comparison: Comparison) -> str:
    """The headline, accuracy with the no-skill flags, the cost, calibration and the
    sparsity curve with the feature joining at each size, as Markdown."""
    from glassbox.core.formats import to_markdown as table_markdown

    parts = ["# Accuracy cost of the glass-box models", "", comparison.headline, ""]
    missing = absent_note(comparison)
    if missing:
        parts += [missing, ""]
    parts += ["## Accuracy on held-out folds", "", table_markdown(accuracy_table(comparison))]
    if comparison.base_rate is not None:
        parts += [base_rate_note(comparison), ""]
    if comparison.task == "classification":
        parts += [f"{METRIC_DEFINITIONS}.", ""]
    against = ("your benchmark scores" if comparison.settings.get("benchmark_scores")
               else f"the {comparison.settings['benchmark']} benchmark")
    parts += [f"## Cost against {against} (paired by fold)", "",
              table_markdown(cost_table(comparison)), cost_note(comparison), ""]
    fits = calibration_fit_table(comparison)
    if not fits.empty:
        parts += ["## Calibration of the out-of-fold predictions", "",
                  table_markdown(fits), f"Definitions: {CALIBRATION_DEFINITION}.", ""]
        for model in fits["model"]:
            parts += [f"### {model}: observed against predicted by decile", "",
                      table_markdown(calibration_deciles(comparison, model))]
    curve = sparsity_table(comparison)
    if not curve.empty:
        parts += ["## Sparse family: accuracy by number of features", "",
                  table_markdown(curve)]
        if comparison.sparsity_steps is not None:
            parts += [f"Joined and left, per fold (a name alone: every fold agrees): "
                      f"{STEP_RULE}.", ""]
    pairs = pair_table(comparison)
    if not pairs.empty:
        parts += ["## What each pair buys: accuracy by number of pairs", "",
                  table_markdown(pairs), pair_note(comparison), ""]
    settings = comparison.settings
    parts += [f"{settings['folds']} folds × {plural(settings['repeats'], 'repeat')}, seed "
              f"{settings['seed']}; intervals: {settings['interval']}.", ""]
    return "\n".join(parts)
