"""Pictures of the shape functions: one PNG per feature and an importance overview.

Drawn with matplotlib's object interface (no pyplot, no display, no global
state). Every picture is read from the model's own tables and training profile.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm
from glassbox.core.files import output_folder, safe_file_name, write_atomic
from glassbox.core.schema import MISSING_LEVEL
from glassbox.explaining.shapes import (
    chosen_features,
    missing_words,
    percent_text,
    summary,
    term_table,
    value_rows,
)

LINE = "#1f4e79"
BAND = "#9dc3e6"
DATA = "#7f7f7f"
BAR_UP = "#b85450"
BAR_DOWN = "#4a7fb5"
MISSING = "#c55a11"
DPI = 110


def _score_label(model: AdditiveModel) -> str:
    if model.link == "logit":
        positive = model.schema.target.positive
        what = f"log-odds of {model.schema.target.column} = {positive}" if positive is not None \
            else "log-odds"
        return f"contribution to score ({what})"
    return f"contribution to predicted {model.schema.target.column}"


def _axis_label(model: AdditiveModel, feature: str) -> str:
    description = model.schema.feature(feature).description
    return f"{feature} ({description})" if description else feature


def _title(model: AdditiveModel, feature: str) -> str:
    spec = model.schema.feature(feature)
    rows = summary(model).set_index("feature")
    parts = [f"{feature}: importance {rows.loc[feature, 'importance']:.3g}"]
    if spec.monotone:
        parts.append(f"declared {spec.monotone}, observed {rows.loc[feature, 'observed']}")
    return "; ".join(parts)


def _data_strip(model: AdditiveModel, feature: str, axis) -> None:
    """Ticks at the 101 training percentiles (each gap holds 1% of rows); 5-95% shaded."""
    profile = next((p for p in model.profiles if p.feature == feature), None)
    axis.set_yticks([])
    if profile is None or not profile.percentiles:
        return
    points = np.asarray(profile.percentiles)
    axis.axvspan(points[5], points[95], color=BAND, alpha=0.35, linewidth=0)
    axis.vlines(points, 0, 1, color=DATA, linewidth=0.8)
    axis.vlines([points[50]], 0, 1, color=LINE, linewidth=2.0)
    axis.set_ylim(0, 1)
    axis.set_ylabel("training\ndata", rotation=0, ha="right", va="center", fontsize=8)
    axis.set_title("ticks: training percentiles (1% of rows between ticks); shaded: 5–95%; "
                   "thick: median", fontsize=7, loc="left", color=DATA)


def _missing_label(model: AdditiveModel, feature: str) -> str:
    """The missing-value entry's label: its contribution and share, or refused."""
    row = summary(model).set_index("feature").loc[feature]
    return f"{MISSING_LEVEL}: {missing_words(row['missing'], row['missing_share'])}"


def _missing_error(term) -> list[list[float]] | None:
    """The missing-value band as an error bar's (below, above) lengths, if it has one."""
    if term.missing_band is None:
        return None
    low, high = term.missing_band
    return [[term.missing - low], [high - term.missing]]


def _missing_marker(model: AdditiveModel, feature: str, axis) -> None:
    """The missing-value entry beside the curve or steps, on its own axis sharing the score
    scale: a marker with its band (never joined to the values) and its share of training
    rows, or a note that a missing value is refused."""
    term = model.term(feature)
    axis.axhline(0, color=DATA, linewidth=0.8, linestyle=":")
    axis.tick_params(axis="y", labelleft=False)
    axis.set_xlim(-1, 1)
    if term.missing is None:
        axis.set_xticks([0], [MISSING_LEVEL])
        axis.text(0.5, 0.5, "refused\n(none in\ntraining)", transform=axis.transAxes,
                  ha="center", va="center", fontsize=8, color=DATA)
        return
    share = summary(model).set_index("feature").loc[feature, "missing_share"]
    rows = f"{percent_text(share)} of rows" if np.isfinite(share) else "share not\nrecorded"
    axis.set_xticks([0], [f"{MISSING_LEVEL}\n{rows}"], fontsize=8, color=MISSING)
    axis.errorbar([0.0], [term.missing], yerr=_missing_error(term), fmt="D", color=MISSING,
                  ecolor=MISSING, capsize=4, markersize=7)


def _numeric_figure(model: AdditiveModel, feature: str) -> Figure:
    term = model.term(feature)
    profile = next((p for p in model.profiles if p.feature == feature), None)
    figure = Figure(figsize=(8.5, 4.6), dpi=DPI, layout="constrained")
    grid = figure.add_gridspec(2, 2, width_ratios=[7, 1], height_ratios=[6, 1])
    top = figure.add_subplot(grid[0, 0])
    strip = figure.add_subplot(grid[1, 0], sharex=top)
    side = figure.add_subplot(grid[0, 1], sharey=top)
    _missing_marker(model, feature, side)
    top.tick_params(axis="x", labelbottom=False)
    if isinstance(term, CurveTerm):
        x, y = np.asarray(term.knots), np.asarray(term.values)
        if len(x) == 1:
            x, y = np.r_[x - 0.5, x + 0.5], np.r_[y, y]
        top.plot(x, y, color=LINE, linewidth=2)
        if term.lower is not None:
            low, high = np.asarray(term.lower), np.asarray(term.upper)
            if len(term.knots) == 1:
                low, high = np.r_[low, low], np.r_[high, high]
            top.fill_between(x, low, high, color=BAND, alpha=0.6, linewidth=0,
                             label="95% band")
    else:
        assert isinstance(term, StepTerm)
        start = profile.minimum if profile else (term.edges[0] if term.edges else 0.0) - 1
        stop = profile.maximum if profile else (term.edges[-1] if term.edges else 0.0) + 1
        inner = [e for e in term.edges if start < e < stop]
        keep = [i for i, e in enumerate([-np.inf, *term.edges]) if e < stop and (
            i == len(term.edges) or term.edges[i] > start)]
        edges = np.array([start, *inner, stop])
        values = np.asarray(term.values)[keep]
        top.stairs(values, edges, color=LINE, linewidth=2, baseline=None)
        if term.lower is not None:
            top.stairs(np.asarray(term.upper)[keep], edges,
                       baseline=np.asarray(term.lower)[keep], fill=True, color=BAND,
                       alpha=0.6, label="spread across seeds")
    top.margins(x=0.02, y=0.08)
    top.autoscale_view()
    top.axhline(0, color=DATA, linewidth=0.8, linestyle=":")
    top.set_ylabel(_score_label(model))
    top.set_title(_title(model, feature), fontsize=10, loc="left")
    top.grid(alpha=0.25)
    if top.get_legend_handles_labels()[0]:
        top.legend(loc="best", fontsize=8, frameon=False)
    _data_strip(model, feature, strip)
    strip.set_xlabel(_axis_label(model, feature))
    return figure


def _bars_figure(model: AdditiveModel, feature: str) -> Figure:
    """Levels (and flags) as horizontal bars with their band and training share; below a
    dashed line, the missing-value entry as a marker with its band (or refused)."""
    term = model.term(feature)
    table = value_rows(term_table(model, feature))
    if isinstance(term, LevelsTerm):
        table = table.iloc[:-1]  # the unseen-level row is not a level of the data
    labels = table["row"].tolist()
    values = table["contribution"].to_numpy(dtype=float)
    figure = Figure(figsize=(7.5, max(2.6, 0.45 * (len(labels) + 1) + 1.4)), dpi=DPI,
                    layout="constrained")
    axis = figure.subplots()
    positions = np.arange(len(labels))[::-1] + 1.0
    axis.axhline(0.5, color=DATA, linewidth=0.8, linestyle="--")
    if term.missing is not None:
        axis.errorbar([term.missing], [0.0], xerr=_missing_error(term), fmt="D",
                      color=MISSING, ecolor=MISSING, capsize=3, markersize=7)
    axis.barh(positions, values, color=[BAR_UP if v > 0 else BAR_DOWN for v in values],
              height=0.6)
    if table["lower"].notna().all():
        low = values - table["lower"].to_numpy(dtype=float)
        high = table["upper"].to_numpy(dtype=float) - values
        axis.errorbar(values, positions, xerr=[low, high], fmt="none", ecolor="black",
                      elinewidth=1, capsize=3)
    shares = table["training_share"].to_numpy(dtype=float)
    names = [f"{label}  ({share:.0%} of rows)" if np.isfinite(share) else label
             for label, share in zip(labels, shares, strict=True)]
    axis.set_yticks([*positions, 0.0], [*names, _missing_label(model, feature)])
    axis.get_yticklabels()[-1].set_color(MISSING if term.missing is not None else DATA)
    axis.axvline(0, color=DATA, linewidth=0.8)
    axis.set_xlabel(_score_label(model))
    axis.set_title(_title(model, feature), fontsize=10, loc="left")
    axis.grid(axis="x", alpha=0.25)
    return figure


def feature_figure(model: AdditiveModel, feature: str) -> Figure:
    """The picture of one feature's shape function."""
    term = model.term(feature)
    flag = model.schema.feature(feature).kind == "flag"
    if isinstance(term, LevelsTerm) or (flag and isinstance(term, CurveTerm)):
        return _bars_figure(model, feature)
    return _numeric_figure(model, feature)


def importance_figure(model: AdditiveModel) -> Figure:
    """Features ranked by importance (mean absolute contribution over training rows)."""
    table = summary(model)
    figure = Figure(figsize=(7.5, max(2.6, 0.4 * len(table) + 1.4)), dpi=DPI,
                    layout="constrained")
    axis = figure.subplots()
    positions = np.arange(len(table))[::-1]
    axis.barh(positions, table["importance"], color=LINE, height=0.6)
    axis.set_yticks(positions, table["feature"])
    scale = "log-odds" if model.link == "logit" else model.schema.target.column
    axis.set_xlabel(f"importance: mean |contribution| over training rows ({scale})")
    family = model.metadata.get("family", "")
    axis.set_title(f"Feature importance, {family} model of {model.schema.target.column}",
                   fontsize=10, loc="left")
    axis.grid(axis="x", alpha=0.25)
    return figure


def picture_names(features: Sequence[str]) -> list[str]:
    """The files `write_plots` writes: the importance overview, then one per feature."""
    return ["importance.png", *(f"{safe_file_name(name)}.png" for name in features)]


def write_plots(model: AdditiveModel, folder: str | Path,
                features: Sequence[str] | None = None) -> list[Path]:
    """Write `importance.png` and one `FEATURE.png` per chosen feature (all by
    default); return the paths."""
    names = chosen_features(model, features)
    folder = output_folder(folder, "plots")
    written = []
    figures = [importance_figure(model)] + [feature_figure(model, name) for name in names]
    for file_name, figure in zip(picture_names(names), figures, strict=True):
        buffer = io.BytesIO()
        figure.savefig(buffer, format="png", metadata={"Software": None})
        path = folder / file_name
        write_atomic(path, buffer.getvalue())
        written.append(path)
    return written
