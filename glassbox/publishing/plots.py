"""Pictures of the shape functions: one PNG per feature and an importance overview.

Drawn with matplotlib's object interface (no pyplot, no display, no global
state). Every picture is read from the model's own tables and training profile.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.axis import Ticker
from matplotlib.figure import Figure
from matplotlib.ticker import (
    FuncFormatter,
    LogLocator,
    NullFormatter,
    NullLocator,
    SymmetricalLogLocator,
)

from glassbox.core.additive import (
    AdditiveModel,
    CurveTerm,
    FeatureProfile,
    LevelsTerm,
    StepTerm,
)
from glassbox.core.files import output_folder, safe_file_name, write_atomic
from glassbox.core.schema import MISSING_LEVEL
from glassbox.explaining.shapes import (
    chosen_features,
    missing_words,
    pair_file_stem,
    percent_text,
    summary,
    term_table,
    value_rows,
)
from glassbox.publishing.palette import (
    BAND,
    FAINT,
    FALL,
    INK,
    MISSING,
    QUIET,
    RISE,
    SHAPE,
)

DPI = 110
TOP_PERCENTILES = (1, 10, 25, 50, 75, 90, 99)  # the scale along the top of a numeric picture
CLOSE = 0.045  # ticks nearer than this share of the axis width take turns on two rows
HATCH = "///"


@dataclass(frozen=True)
class AxisScale:
    """How a numeric picture spaces its x axis, and the words its axis label adds.

    kind: "linear"; "log"; "symlog" (linear from 0 to `threshold`, logarithmic above);
    "percentile" (each stored training percentile evenly spaced: `values` at `positions`).
    """

    kind: str
    words: str = ""
    threshold: float | None = None
    values: tuple[float, ...] = ()
    positions: tuple[float, ...] = ()
    ticks: tuple[float, ...] = ()  # "percentile": the deciles' values, to two figures
    span: float | None = None  # "log": the maximum over the minimum


def axis_scale(profile: FeatureProfile | None) -> AxisScale:
    """The x axis for a numeric feature, by a rule read from its 101 training percentiles
    p0 (the minimum) to p100 (the maximum):

    1. linear, unless a linear axis would crowd the data: *crowded* when the middle 98% of
       rows (p1 to p99) would fill less than half the axis, so the 1% at either end stretch
       it; *lopsided* when the upper half of rows spans four times or more the width of the
       lower half ((p99 - p50) >= 4 (p50 - p1), p99 above p50);
    2. then, when no value is negative and p99 is at least ten times the smallest positive
       stored percentile (the values span a decade or more, as money amounts do):
       logarithmic if the minimum is above 0, else "symlog": linear from 0 to that smallest
       positive percentile and logarithmic above it (so zeros keep a place);
    3. otherwise spaced by training percentile (each stored percentile evenly spaced,
       a tie at the middle of its run, straight lines between them and beyond the ends),
       unless the feature takes few distinct values (the profile keeps their counts, at
       most 64): then linear, as ties would squeeze the values between them.

    A model without a stored profile keeps a linear axis.
    """
    if profile is None or len(profile.percentiles) < 101:
        return AxisScale("linear")
    points = np.asarray(profile.percentiles, dtype=float)
    width = points[100] - points[0]
    if not width > 0:
        return AxisScale("linear")
    crowded = points[99] - points[1] < 0.5 * width
    lopsided = points[99] > points[50] and \
        points[99] - points[50] >= 4 * (points[50] - points[1])
    if not (crowded or lopsided):
        return AxisScale("linear")
    positive = points[points > 0]
    if points[0] >= 0 and len(positive) and points[99] >= 10 * positive[0]:
        if points[0] > 0:
            return AxisScale("log", " (log scale)", span=float(points[100] / points[0]))
        return _symlog(float(positive[0]))
    if profile.value_counts:
        return AxisScale("linear")
    values, first = np.unique(points, return_index=True)
    last = len(points) - 1 - np.unique(points[::-1], return_index=True)[1]
    return AxisScale("percentile", " (spaced by training percentile)",
                     values=tuple(float(v) for v in values),
                     positions=tuple(float(p) for p in (first + last) / 2),
                     ticks=tuple(np.unique([float(f"{v:.2g}") for v in points[::10]])))


def _symlog(threshold: float) -> AxisScale:
    return AxisScale("symlog", f" (log scale; linear from 0 to {threshold:.4g})",
                     threshold=threshold)


def _through(x, known: np.ndarray, found: np.ndarray) -> np.ndarray:
    """Piecewise-linear through (known, found), extended by the end slopes beyond them."""
    x = np.asarray(x, dtype=float)
    out = np.interp(x, known, found)
    low = (found[1] - found[0]) / (known[1] - known[0])
    high = (found[-1] - found[-2]) / (known[-1] - known[-2])
    out = np.where(x < known[0], found[0] + (x - known[0]) * low, out)
    return np.where(x > known[-1], found[-1] + (x - known[-1]) * high, out)


def _apply_scale(axis, scale: AxisScale) -> None:
    if scale.kind == "log":
        axis.set_xscale("log")
        decades = np.log10(scale.span) if scale.span else 0.0
        axis.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0) if decades < 2.5
                                                else (1.0,)))
    elif scale.kind == "symlog":
        axis.set_xscale("symlog", linthresh=scale.threshold, linscale=0.5)
        axis.xaxis.set_major_locator(SymmetricalLogLocator(linthresh=scale.threshold,
                                                           base=10, subs=(1.0,)))
    elif scale.kind == "percentile":
        values, positions = np.array(scale.values), np.array(scale.positions)
        axis.set_xscale("function", functions=(lambda x: _through(x, values, positions),
                                               lambda y: _through(y, positions, values)))
        axis.set_xticks(scale.ticks)
    if scale.kind != "linear":
        axis.xaxis.set_major_formatter(FuncFormatter(_plain))
        axis.xaxis.set_minor_formatter(NullFormatter())


def _plain(value: float, _position=None) -> str:
    """A tick value written out (1,000 rather than 10³)."""
    return f"{value:,.0f}" if abs(value) >= 10 else f"{value:.3g}"


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


def _percentile_names(numbers: Sequence[int]) -> str:
    return f"p{numbers[0]}" if len(numbers) == 1 else f"p{numbers[0]}–p{numbers[-1]}"


def _percentile_scale(model: AdditiveModel, feature: str, axis, top) -> None:
    """The training percentiles TOP_PERCENTILES as a scale along the top of `axis`, drawn
    on `top` (its twin: the same x scale and limits): a tick at each stored percentile's
    value, labelled "p1" to "p99" (equal values share one tick, "p1–p25"; ticks close
    together take turns on two rows), and a faint line down through the picture at each."""
    # twins share their tick makers: give the top its own, so its ticks leave the bottom's
    top.xaxis.major, top.xaxis.minor = Ticker(), Ticker()
    top.xaxis.set_minor_locator(NullLocator())
    profile = next((p for p in model.profiles if p.feature == feature), None)
    if profile is None or not profile.percentiles:
        top.xaxis.set_major_locator(NullLocator())  # an older model file: no profile
        return
    points = np.asarray(profile.percentiles)
    groups: list[tuple[float, list[int]]] = []
    for number in TOP_PERCENTILES:
        value = float(points[number])
        if groups and groups[-1][0] == value:
            groups[-1][1].append(number)
        else:
            groups.append((value, [number]))
    values = np.array([value for value, _ in groups])
    scaled = axis.xaxis.get_transform().transform(values)
    low, high = axis.xaxis.get_transform().transform(np.array(axis.get_xlim()))
    where = (scaled - low) / (high - low)
    labels, row, previous = [], 0, -np.inf
    for (_, numbers), place in zip(groups, where, strict=True):
        row = 1 - row if place - previous < CLOSE else 0
        previous = place
        labels.append(_percentile_names(numbers) + ("\n" if row else ""))
    top.set_xticks(values, labels, fontsize=8, color=QUIET)
    top.tick_params(axis="x", colors=QUIET, length=4)
    top.set_xlabel("training percentiles (p50: half the rows below; p99: 1% above)",
                   fontsize=8, color=QUIET)
    for value in values:
        axis.axvline(value, color=FAINT, linewidth=0.8, zorder=0)


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
    axis.axhline(0, color=QUIET, linewidth=0.8, linestyle=":")
    axis.tick_params(axis="y", labelleft=False)
    axis.set_xlim(-1, 1)
    if term.missing is None:
        axis.set_xticks([0], [MISSING_LEVEL])
        axis.text(0.5, 0.5, "refused\n(none in\ntraining)", transform=axis.transAxes,
                  ha="center", va="center", fontsize=8, color=QUIET)
        return
    share = summary(model).set_index("feature").loc[feature, "missing_share"]
    rows = f"{percent_text(share)} of rows" if np.isfinite(share) else "share not\nrecorded"
    axis.set_xticks([0], [f"{MISSING_LEVEL}\n{rows}"], fontsize=8, color=MISSING)
    axis.errorbar([0.0], [term.missing], yerr=_missing_error(term), fmt="D", color=MISSING,
                  ecolor=MISSING, capsize=4, markersize=7)


def _hatched(patch) -> None:
    """A band's look: hatching in the band colour, no fill (plain in grey-scale print)."""
    patch.set_facecolor("none")
    patch.set_edgecolor(BAND)
    patch.set_hatch(HATCH)
    patch.set_linewidth(0)


def _numeric_figure(model: AdditiveModel, feature: str) -> Figure:
    """The curve or steps on an x axis chosen by `axis_scale`, the band as dashed bounds
    with hatching between, the training percentiles along the top; beside it the
    missing-value entry on the same score scale."""
    term = model.term(feature)
    profile = next((p for p in model.profiles if p.feature == feature), None)
    scale = axis_scale(profile)
    figure = Figure(figsize=(8.5, 4.6), dpi=DPI, layout="constrained")
    main, top, side = _three_axes(figure)
    _missing_marker(model, feature, side)
    if isinstance(term, CurveTerm):
        x, y = np.asarray(term.knots), np.asarray(term.values)
        if len(x) == 1:
            x, y = np.r_[x - 0.5, x + 0.5], np.r_[y, y]
        if scale.kind == "log" and x.min() <= 0:  # a knot at or below 0: zero needs room
            scale = _symlog(float(np.min(x[x > 0])) if (x > 0).any() else 1.0)
    _apply_scale(main, scale)  # the twin along the top shares it
    if isinstance(term, CurveTerm):
        drawn = _drawn_at(main, x)
        main.plot(drawn, np.interp(drawn, x, y), color=SHAPE, linewidth=2.2, label="shape",
                  zorder=3)
        if term.lower is not None:
            low, high = np.asarray(term.lower), np.asarray(term.upper)
            if len(term.knots) == 1:
                low, high = np.r_[low, low], np.r_[high, high]
            low, high = np.interp(drawn, x, low), np.interp(drawn, x, high)
            _hatched(main.fill_between(drawn, low, high, label="95% band", zorder=1))
            for bound in (low, high):
                main.plot(drawn, bound, color=BAND, linewidth=1, linestyle="--", zorder=2)
    else:
        assert isinstance(term, StepTerm)
        start = profile.minimum if profile else (term.edges[0] if term.edges else 0.0) - 1
        stop = profile.maximum if profile else (term.edges[-1] if term.edges else 0.0) + 1
        inner = [e for e in term.edges if start < e < stop]
        keep = [i for i, e in enumerate([-np.inf, *term.edges]) if e < stop and (
            i == len(term.edges) or term.edges[i] > start)]
        edges = np.array([start, *inner, stop])
        values = np.asarray(term.values)[keep]
        main.stairs(values, edges, color=SHAPE, linewidth=2.2, baseline=None, label="shape",
                    zorder=3)
        if term.lower is not None:
            low, high = np.asarray(term.lower)[keep], np.asarray(term.upper)[keep]
            _hatched(main.stairs(high, edges, baseline=low, fill=True,
                                 label="spread across seeds", zorder=1))
            for bound in (low, high):
                main.stairs(bound, edges, baseline=None, color=BAND, linewidth=1,
                            linestyle="--", zorder=2)
    main.margins(x=0.02, y=0.08)
    main.autoscale_view()
    main.axhline(0, color=QUIET, linewidth=0.8, linestyle=":")
    main.set_ylabel(_score_label(model))
    main.set_title(_title(model, feature), fontsize=10, loc="left", color=INK)
    main.grid(axis="y", color=FAINT, linewidth=0.8)
    if term.lower is not None:
        main.legend(loc="best", fontsize=8, frameon=False)
    main.set_xlabel(_axis_label(model, feature) + scale.words)
    _percentile_scale(model, feature, main, top)
    return figure


def _drawn_at(axis, knots: np.ndarray) -> np.ndarray:
    """Where to draw a curve: its knots, and on an axis that is not linear, points between
    them evenly spaced on the axis (at most 1/400 of the knots' span apart), so that the
    straight lines between knots, as the model reads them, are drawn as the axis bends
    them. Each point's value is read from the table as the model reads it (np.interp)."""
    if axis.get_xscale() == "linear" or len(knots) < 2:
        return knots
    forward = axis.xaxis.get_transform()
    scaled = forward.transform(knots)
    span = scaled[-1] - scaled[0]
    if not span > 0:
        return knots
    parts = [knots[:1]]
    for left, right, a, b in zip(scaled[:-1], scaled[1:], knots[:-1], knots[1:],
                                 strict=True):
        count = int(np.ceil(400 * (right - left) / span))
        inner = forward.inverted().transform(np.linspace(left, right, count + 1)[1:-1])
        parts += [np.clip(inner, a, b), [b]]
    return np.concatenate(parts)


def _three_axes(figure: Figure):
    """The picture's axes in `figure.axes` order: the shape, its twin for the percentile
    scale along the top (sharing x: the same scale and limits), the missing-value entry."""
    grid = figure.add_gridspec(1, 2, width_ratios=[7, 1])
    main = figure.add_subplot(grid[0, 0])
    top = main.twinx()  # a twin sharing the x axis, showing it along the top only
    top.yaxis.set_visible(False)
    top.xaxis.set_visible(True)
    top.xaxis.tick_top()
    top.xaxis.set_label_position("top")
    return main, top, figure.add_subplot(grid[0, 1], sharey=main)


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
    axis.axhline(0.5, color=QUIET, linewidth=0.8, linestyle="--")
    if term.missing is not None:
        axis.errorbar([term.missing], [0.0], xerr=_missing_error(term), fmt="D",
                      color=MISSING, ecolor=MISSING, capsize=3, markersize=7)
    axis.barh(positions, values, color=[RISE if v > 0 else FALL for v in values],
              height=0.6)
    if table["lower"].notna().all():
        low = values - table["lower"].to_numpy(dtype=float)
        high = table["upper"].to_numpy(dtype=float) - values
        axis.errorbar(values, positions, xerr=[low, high], fmt="none", ecolor=INK,
                      elinewidth=1, capsize=3)
    shares = table["training_share"].to_numpy(dtype=float)
    names = [f"{label}  ({percent_text(share)} of rows)" if np.isfinite(share) else label
             for label, share in zip(labels, shares, strict=True)]
    axis.set_yticks([*positions, 0.0], [*names, _missing_label(model, feature)])
    axis.get_yticklabels()[-1].set_color(MISSING if term.missing is not None else QUIET)
    axis.axvline(0, color=QUIET, linewidth=0.8)
    axis.set_xlabel(_score_label(model))
    axis.set_title(_title(model, feature), fontsize=10, loc="left")
    axis.grid(axis="x", color=FAINT, linewidth=0.8)
    axis.set_axisbelow(True)
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
    axis.barh(positions, table["importance"], color=SHAPE, height=0.6)
    axis.set_yticks(positions, table["feature"])
    scale = "log-odds" if model.link == "logit" else model.schema.target.column
    axis.set_xlabel(f"importance: mean |contribution| over training rows ({scale})")
    family = model.metadata.get("family", "")
    axis.set_title(f"Feature importance, {family} model of {model.schema.target.column}",
                   fontsize=10, loc="left")
    axis.grid(axis="x", color=FAINT, linewidth=0.8)
    axis.set_axisbelow(True)
    return figure


def pair_figure(model: AdditiveModel, name: str) -> Figure:
    """A heat map of one pair's table: the first axis down, the second across, each cell
    coloured on a scale diverging around 0 (RISE raises the score, FALL lowers it, white
    adds nothing; the same depth both ways) and its value written in it."""
    from matplotlib.colors import LinearSegmentedColormap

    from glassbox.explaining.pair_shapes import find_pair, heat_grid

    pair = find_pair(model, name)
    grid = heat_grid(model, name)
    values = grid.to_numpy(dtype=float)
    rows, columns = values.shape
    reach = float(np.max(np.abs(values))) or 1.0
    colours = LinearSegmentedColormap.from_list("pair", [FALL, "#ffffff", RISE])
    figure = Figure(figsize=(min(14.0, 2.6 + 0.9 * columns), min(12.0, 1.8 + 0.45 * rows)),
                    dpi=DPI, layout="constrained")
    axis = figure.subplots()
    image = axis.imshow(values, cmap=colours, vmin=-reach, vmax=reach, aspect="auto")
    for a in range(rows):
        for b in range(columns):
            deep = abs(values[a, b]) > 0.55 * reach  # light text on the deepest cells
            axis.text(b, a, f"{values[a, b]:+.2g}", ha="center", va="center", fontsize=8,
                      color="#ffffff" if deep else INK)
    axis.set_xticks(range(columns), list(grid.columns), rotation=30 if columns > 4 else 0,
                    ha="right" if columns > 4 else "center", fontsize=8)
    axis.set_yticks(range(rows), list(grid.index), fontsize=8)
    for axis_of, which in ((pair.first, "row"), (pair.second, "column")):
        if axis_of.missing:  # the missing entry apart: a line before it
            at = axis_of.size - 1.5
            (axis.axhline if which == "row" else axis.axvline)(at, color=MISSING,
                                                               linewidth=1.5)
    axis.set_ylabel(_axis_label(model, pair.first.feature))
    axis.set_xlabel(_axis_label(model, pair.second.feature))
    colour_bar = figure.colorbar(image, ax=axis, shrink=0.9)
    colour_bar.set_label(_score_label(model), fontsize=8)
    importance = model.metadata.get("importance", {}).get(pair.name)
    words = "" if importance is None else f": importance {importance:.3g}"
    axis.set_title(f"{pair.name} (pair, {pair.first.kind} × {pair.second.kind}){words}",
                   fontsize=10, loc="left")
    return figure


def picture_names(features: Sequence[str], pairs: Sequence[str] = ()) -> list[str]:
    """The files `write_plots` writes: the importance overview, then one per feature,
    then one per pair."""
    return ["importance.png", *(f"{safe_file_name(name)}.png" for name in features),
            *(f"{pair_file_stem(name)}.png" for name in pairs)]


def write_plots(model: AdditiveModel, folder: str | Path,
                features: Sequence[str] | None = None,
                pairs: Sequence[str] = ()) -> list[Path]:
    """Write `importance.png`, one `FEATURE.png` per chosen feature (all by default) and
    one heat map per pair named; return the paths."""
    names = [] if pairs and not features else chosen_features(model, features)
    folder = output_folder(folder, "plots")
    written = []
    figures = ([importance_figure(model)] + [feature_figure(model, name) for name in names]
               + [pair_figure(model, name) for name in pairs])
    for file_name, figure in zip(picture_names(names, pairs), figures, strict=True):
        buffer = io.BytesIO()
        figure.savefig(buffer, format="png", metadata={"Software": None})
        path = folder / file_name
        write_atomic(path, buffer.getvalue())
        written.append(path)
    return written
