"""Pictures of a monitoring result, for the monitoring page.

Drawn with matplotlib's object interface (no pyplot, no global state), from the tables of
a `Monitoring` only: score PSI over periods, each feature's mean contribution over periods
against its development value, the feature × period PSI heat table, the characteristic
analysis (what moved the mean score), attribution shares, development against latest, and
for a model with pairs the pair × period PSI heat table.
"""

from __future__ import annotations

import textwrap
from collections.abc import Collection, Sequence

import numpy as np
import pandas as pd
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from glassbox.core.wording import plural
from glassbox.publishing.monitor_view import psi_text
from glassbox.publishing.palette import (
    ACT,
    DEVELOPMENT,
    FAINT,
    INK,
    LATEST,
    MOVERS,
    OTHERS,
    PAPER,
    QUIET,
    STEADY,
    WATCH,
)

DPI = 110
WATCH_COLOUR, ACT_COLOUR = WATCH, ACT
MOVER_COLOURS = MOVERS  # the characteristic analysis's largest movers, each its own


def _periods_axis(axis, periods: Sequence[str]) -> None:
    """Periods along x; labels turned when they would not fit side by side (about 0.075
    inch a character at size 8, in the axis's share of its figure's width)."""
    positions = np.arange(len(periods))
    inches = axis.get_position().width * axis.get_figure().get_size_inches()[0]
    rotate = max(len(str(p)) for p in periods) * 0.075 > 0.9 * inches / len(periods)
    axis.set_xticks(positions, [str(p) for p in periods], rotation=30 if rotate else 0,
                    ha="right" if rotate else "center", fontsize=8)
    axis.set_xlim(-0.6, len(periods) - 0.4)


def score_psi_figure(summary: pd.DataFrame, watch: float, act: float) -> Figure:
    """Score PSI per period as bars, the watch and act lines across; a period the
    sample-size check flagged carries a ring above its bar."""
    periods = summary["period"].astype(str).tolist()
    values = summary["score_psi"].astype(float).to_numpy()
    figure = Figure(figsize=(max(6.5, 1.0 + 0.55 * len(periods)), 4.0), dpi=DPI,
                    layout="constrained")
    axis = figure.subplots()
    colours = [ACT_COLOUR if v >= act else WATCH_COLOUR if v >= watch else DEVELOPMENT
               for v in np.nan_to_num(values)]
    positions = np.arange(len(periods))
    axis.bar(positions, np.nan_to_num(values), color=colours, width=0.6)
    axis.axhline(watch, color=WATCH_COLOUR, linestyle="--", linewidth=1.2,
                 label=f"watch from {watch:.2f}")
    axis.axhline(act, color=ACT_COLOUR, linestyle="--", linewidth=1.2,
                 label=f"act from {act:.2f}")
    rings = summary["score_rule"].astype(str).str.contains("χ²").to_numpy()
    if rings.any():
        axis.scatter(positions[rings], np.nan_to_num(values)[rings] + 0.02 * act,
                     facecolors="none", edgecolors=INK, s=60,
                     label="flagged by the sample-size check")
    top = max(act * 1.25, float(np.nanmax(values)) * 1.15 if np.isfinite(values).any() else 0)
    axis.set_ylim(0, top)
    _periods_axis(axis, periods)
    axis.set_ylabel("PSI of the score (development deciles)")
    axis.set_title("Score stability by period", fontsize=10, loc="left")
    figure.legend(loc="outside lower center", ncols=3, fontsize=8, frameon=False)
    axis.grid(axis="y", color=FAINT, linewidth=0.8)
    axis.set_axisbelow(True)
    return figure


def contribution_figure(features: pd.DataFrame, names: Sequence[str], periods: Sequence[str],
                        scale: str) -> Figure:
    """Small multiples on one shared scale: per feature, its mean contribution in each
    period (line) against its development value (dashed)."""
    columns = min(3, len(names))
    rows = -(-len(names) // columns)
    figure = Figure(figsize=(3.1 * columns + 0.4, 2.4 * rows + 0.5), dpi=DPI,
                    layout="constrained")
    # one scale for every panel, so a small move looks small beside a large one
    axes = np.atleast_1d(figure.subplots(rows, columns, squeeze=False, sharey=True).ravel())
    for axis, name in zip(axes, names, strict=False):
        own = features[features["feature"] == name].set_index("period").reindex(periods)
        values = own["mean_contribution"].astype(float).to_numpy()
        development = float(own["development_mean_contribution"].dropna().iloc[0])
        axis.axhline(development, color=DEVELOPMENT, linestyle="--", linewidth=1.2)
        axis.plot(np.arange(len(periods)), values, color=LATEST, marker="o", linewidth=1.8)
        axis.set_title(textwrap.fill(str(name), 36), fontsize=9, loc="left")
        _periods_axis(axis, periods)
        axis.tick_params(axis="y", labelsize=8)
        axis.grid(color=FAINT, linewidth=0.8)
        axis.set_axisbelow(True)
    for axis in axes[len(names):]:
        axis.set_visible(False)
    figure.supylabel(f"mean contribution ({scale})", fontsize=9)
    figure.legend(handles=[Patch(color=LATEST, label="period"),
                           Patch(color=DEVELOPMENT, label="development")],
                  loc="outside lower center", ncols=2, fontsize=8, frameon=False)
    return figure


def heat_figure(features: pd.DataFrame, periods: Sequence[str], watch: float,
                act: float, *, title: str = "PSI by feature and period (worst feature on "
                                            "top)") -> Figure:
    """Feature × period PSI: a cell per feature and period, coloured by band, the PSI
    written inside; a cell the sample-size check flagged is outlined. A model's pairs are
    drawn the same way, their names in the `feature` column (`pair_heat_figure`)."""
    table = features.pivot(index="feature", columns="period", values="psi").reindex(
        columns=list(periods))
    order = table.max(axis=1).sort_values(ascending=False, kind="stable").index
    table = table.loc[order]
    changed = features.assign(ring=features["rule"].astype(str).str.contains("χ²")).pivot(
        index="feature", columns="period", values="ring").reindex(index=order,
                                                                  columns=list(periods))
    values = table.to_numpy(dtype=float)
    figure = Figure(figsize=(min(14.0, max(6.5, 2.6 + 0.75 * len(periods))),
                             1.2 + 0.34 * len(order)), dpi=DPI, layout="constrained")
    axis = figure.subplots()
    colours = ListedColormap([STEADY, WATCH_COLOUR, ACT_COLOUR])
    norm = BoundaryNorm([0.0, watch, act, max(act * 2, np.nanmax(values) + 1.0)], 3)
    axis.imshow(np.nan_to_num(values), cmap=colours, norm=norm, aspect="auto")
    size = 8 if len(periods) <= 12 else 6
    for (row, column), value in np.ndenumerate(values):
        axis.text(column, row, psi_text(value), ha="center", va="center", fontsize=size,
                  color=PAPER if value >= act else INK)
        if bool(changed.iat[row, column]):
            axis.add_patch(_ring(row, column))
    axis.set_yticks(np.arange(len(order)), [str(name) for name in order], fontsize=8)
    _periods_axis(axis, periods)
    axis.set_title(title, fontsize=10, loc="left")
    figure.legend(handles=[Patch(color=STEADY, label=f"below {watch:.2f}"),
                           Patch(color=WATCH_COLOUR, label=f"watch, {watch:.2f} to {act:.2f}"),
                           Patch(color=ACT_COLOUR, label=f"act, from {act:.2f}"),
                           Patch(facecolor="none", edgecolor=INK,
                                 label="flagged by the sample-size check")],
                  loc="outside lower center", ncols=4, fontsize=7, frameon=False)
    return figure


def pair_heat_figure(pairs: pd.DataFrame, periods: Sequence[str], watch: float,
                     act: float) -> Figure:
    """Pair × period PSI over each pair's cells, in the bands and colours of the features'
    heat table."""
    return heat_figure(pairs.rename(columns={"pair": "feature"}), periods, watch, act,
                       title="PSI over each pair's cells by period (worst pair on top)")


def _ring(row: int, column: int):
    from matplotlib.patches import Rectangle

    return Rectangle((column - 0.46, row - 0.42), 0.92, 0.84, fill=False, edgecolor=INK,
                     linewidth=1.4)


def movers(features: pd.DataFrame, change: str, count: int) -> list[str]:
    """The `count` features whose change moved furthest in any period, largest first."""
    size = features.assign(size=features[change].astype(float).abs()).groupby(
        "feature", sort=False)["size"].max()
    return size.sort_values(ascending=False, kind="stable").index[:count].tolist()


def characteristic_figure(summary: pd.DataFrame, features: pd.DataFrame,
                          periods: Sequence[str], change: str, total: str,
                          unit: str, pairs: Collection[str] = ()) -> Figure:
    """Per period, each feature's change in mean contribution as stacked bars (rises up,
    falls down); the diamond is their sum, the change in the mean score. A model's pairs
    come in `features` as rows of their own (their names listed in `pairs`), since the
    score sums them too."""
    named = movers(features, change, len(MOVER_COLOURS))
    figure = Figure(figsize=(max(7.0, 2.2 + 0.7 * len(periods)), 5.0), dpi=DPI,
                    layout="constrained")
    axis = figure.subplots()
    positions = np.arange(len(periods))
    up, down = np.zeros(len(periods)), np.zeros(len(periods))
    groups = [(name, [name], colour) for name, colour in zip(named, MOVER_COLOURS,
                                                             strict=False)]
    rest = sorted(set(features["feature"]) - set(named))
    if rest:
        paired = sum(name in pairs for name in rest)
        words = " and ".join(plural(count, word) for count, word in (
            (len(rest) - paired, "feature"), (paired, "pair")) if count)
        count, what = words.split(" ", 1)  # "3 other features and 1 pair"
        groups.append((f"{count} other {what}", rest, OTHERS))
    for label, members, colour in groups:
        chosen = features[features["feature"].isin(members)]
        for sign, base in ((1, up), (-1, down)):
            part = chosen[chosen[change].astype(float) * sign > 0].groupby("period")[
                change].sum().reindex(periods).fillna(0.0).to_numpy(dtype=float)
            axis.bar(positions, part, bottom=base, color=colour, width=0.6,
                     label=label if sign == 1 else None)
            base += part
    totals = summary.set_index("period")[total].reindex(periods).to_numpy(dtype=float)
    axis.scatter(positions, totals, marker="D", color=INK, zorder=3, s=36,
                 label=f"mean score change ({unit})")
    axis.axhline(0, color=QUIET, linewidth=0.8)
    _periods_axis(axis, periods)
    axis.set_ylabel(f"change in mean contribution ({unit})")
    whose = "feature's and pair's" if pairs else "feature's"
    axis.set_title(f"What moved the mean score: each {whose} change, by period",
                   fontsize=10, loc="left")
    figure.legend(loc="outside lower center", ncols=2, fontsize=8, frameon=False)
    axis.grid(axis="y", color=FAINT, linewidth=0.8)
    axis.set_axisbelow(True)
    return figure


def attribution_figure(features: pd.DataFrame, period: str) -> Figure:
    """Each feature's share of the mean |contribution|, development against `period`,
    largest movers on top."""
    own = features[features["period"] == period]
    own = own.assign(size=own["attribution_change"].astype(float).abs()).sort_values(
        ["size", "feature"], ascending=[False, True], kind="stable")
    figure = Figure(figsize=(7.5, max(2.6, 0.42 * len(own) + 1.3)), dpi=DPI,
                    layout="constrained")
    axis = figure.subplots()
    positions = np.arange(len(own))[::-1].astype(float)
    axis.barh(positions + 0.19, 100 * own["development_attribution_share"].astype(float),
              height=0.38, color=DEVELOPMENT, label="development")
    axis.barh(positions - 0.19, 100 * own["attribution_share"].astype(float), height=0.38,
              color=LATEST, label=str(period))
    axis.set_yticks(positions, own["feature"].astype(str).tolist(), fontsize=8)
    axis.set_xlabel("share of the total mean |contribution| (%)")
    figure.suptitle(f"Attribution shares, development against {period}: largest movers on "
                    "top", fontsize=10, x=0.01, ha="left")
    figure.legend(loc="outside lower center", ncols=2, fontsize=8, frameon=False)
    axis.grid(axis="x", color=FAINT, linewidth=0.8)
    axis.set_axisbelow(True)
    return figure
