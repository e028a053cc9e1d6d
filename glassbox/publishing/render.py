"""Rich renderings of the library's results, built at the last moment for the CLI.

Library functions return DataFrames and dicts; this module only arranges them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from rich.console import Group, RenderableType
from rich.text import Text

from glassbox.core.additive import AdditiveModel
from glassbox.core.schema import MISSING_LEVEL
from glassbox.explaining.reasons import is_missing
from glassbox.explaining.shapes import (
    MarkedRow,
    missing_words,
    percent_text,
    readable_rows,
    value_rows,
)
from glassbox.publishing import palette
from glassbox.publishing.narrow import (
    FittedTable,
    Hanging,
    frame_texts,
    key_value_table,
    number_texts,
)

HEADINGS = {
    "row": "value",
    "training_share": "training share",
    "training_percentile": "training percentile",
    "slope": "slope per unit",
    "contribution": "contribution",
    "lower": "band low",
    "upper": "band high",
    "importance": "importance",
    "range": "range",
    "observed": "observed",
    "declared": "declared",
    "missing": "missing value",
}


def cell(value: Any, digits: int = 4) -> str:
    """A value as short text: numbers to `digits` significant figures, blanks for gaps."""
    if value is None:
        return ""
    if isinstance(value, float | np.floating):
        if np.isnan(value):
            return ""
        if np.isinf(value):
            return "∞" if value > 0 else "-∞"
        if abs(value) < 1e-12:
            return "0"
        return f"{value:.{digits}g}"
    return str(value)


def value_text(value: Any) -> str:
    """One labelled value (a line of a key-value list): whole numbers with thousands
    separators, other numbers to four significant figures, text as it is."""
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    if isinstance(value, int | np.integer):
        return f"{int(value):,}"
    if isinstance(value, float | np.floating):
        if np.isfinite(value) and float(value).is_integer() and abs(value) < 1e15:
            return f"{int(value):,}"
        return number_texts([value], significant=4)[0] if abs(value) >= 1e-4 or value == 0 \
            else f"{value:.3e}"
    return cell(value)


def frame_table(frame: pd.DataFrame, title: str | None = None,
                columns: Sequence[str] | None = None, digits: int = 4,
                styles: Mapping[str, str] | None = None) -> FittedTable:
    """A DataFrame as a table that fits the terminal: each column's numbers in one style
    (`narrow.frame_texts`), numbers right-aligned, nothing cut. `digits` is the number
    of significant figures the largest value of a column keeps."""
    texts = frame_texts(frame, columns, dict(styles or {}))
    return FittedTable.of_frame(texts, title=title, headings=HEADINGS)


def key_values(pairs: Mapping[str, Any], title: str | None = None) -> FittedTable:
    return key_value_table({str(k): value_text(v) for k, v in pairs.items()}, title)


def fit_view(model: AdditiveModel, fit: Mapping[str, float], path: str) -> RenderableType:
    """What `glassbox fit` prints: where the model went, what it uses, how well it fits."""
    meta = model.metadata
    pairs: dict[str, Any] = {
        "model file": path,
        "family": meta.get("family", ""),
        "training rows": meta.get("rows", ""),
        "features used": f"{len(model.terms)}: {', '.join(model.features)}",
    }
    left_out = [f.name for f in model.schema.used_features if f.name not in model.features]
    if left_out:
        pairs["features left out"] = ", ".join(left_out)
    details = meta.get("details") or {}
    if model.pairs:  # in the order they were chosen (best ranked first)
        pairs["pairs"] = f"{len(model.pairs)}: {'; '.join(p.name for p in model.pairs)}"
    if details.get("pairs_note"):
        pairs["fewer pairs than asked"] = details["pairs_note"]
    held = details.get("held_flat_by_declared_direction")
    if held:
        pairs["flat: declared direction binds"] = ", ".join(held)
    loose = {name: entry["unidentified"] for name, entry in
             ((meta.get("details") or {}).get("missing_indicators") or {}).items()
             if "unidentified" in entry}
    if loose:
        pairs["missing entry not pinned down"] = "; ".join(f"{k}: {v}" for k, v in loose.items())
    binning = details.get("bins")
    if isinstance(binning, dict) and binning.get("features"):
        pairs["binned (largest change of a term)"] = "; ".join(
            f"{name}: {entry['bins']:,} bins for {entry['distinct']:,} values "
            f"({entry['largest_change']:.2g})" for name, entry in binning["features"].items())
        pairs[f"training {binning['loss']}, binned / exact"] = (
            f"{binning['loss_at_bin_points']:.6g} / {binning['loss_at_values']:.6g}")
    elif isinstance(binning, dict) and binning.get("exact"):
        pairs["binned"] = "no: every value its own bin (exact)"
    pairs |= pair_fit_lines(details.get("pairs"))
    routed = (meta.get("details") or {}).get("missing_not_learned")
    if routed:
        pairs["missing entry not learned (all gaps in validation part)"] = ", ".join(routed)
    for feature, note in (details.get("pooled_levels") or {}).items():
        pairs[f"rare levels of {feature}"] = note
    if details.get("refit_not_converged"):
        pairs["not converged"] = details["refit_not_converged"]
    protected = [f.name for f in model.schema.protected_features]
    if protected:
        pairs["protected (never inputs)"] = ", ".join(protected)
    names = {"auc": "ROC AUC", "log_loss": "log loss", "brier": "Brier score",
             "accuracy": "accuracy at 0.5", "rmse": "RMSE", "mae": "MAE", "r2": "R²"}
    # measures between 0 and 1 (AUC, log loss, Brier, accuracy) read alike, four decimals
    alike = all(0.0 <= float(v) <= 1.0 for v in fit.values())
    for key, value in fit.items():
        pairs[f"{names.get(key, key)} (training rows)"] = f"{value:.4f}" if alike else value
    return key_values(pairs, title="Fitted")


def pair_fit_lines(record: Any) -> dict[str, str]:
    """The fit summary's lines on the spline pair stage (`details["pairs"]`): each pair table
    that strays from its surface by more than the promise, with its knots; each binned
    pair's cells and largest change at its rows (as the mains' "binned" line)."""
    if not isinstance(record, dict):
        return {}
    lines: dict[str, str] = {}
    promise = record.get("table_promise")
    knots = record.get("table_knots") or {}
    if promise is not None:
        above = {name: stray for name, stray in (record.get("table_error") or {}).items()
                 if stray > promise}
        if above:
            lines[f"pair table off its surface (promise {promise:g})"] = "; ".join(
                f"{name}: {stray:.2g} ("
                f"{' x '.join(str(n) for n in knots.get(name, ()))} entries: the budget)"
                for name, stray in above.items())
    binned = {name: entry for name, entry in (record.get("bins") or {}).items()
              if not entry.get("exact", True)}
    if binned:
        lines["pairs binned (largest change)"] = "; ".join(
            f"{name}: {entry['cells']:,} cells"
            + (f" for {entry['value_pairs']:,} value pairs" if "value_pairs" in entry else "")
            + f" ({entry['largest_change']:.2g})" for name, entry in binned.items())
    return lines


SUMMARY_TITLE = ("Features by importance (mean |contribution| on the {scale} scale; "
                 "range: the lowest to the highest contribution; direction: the way the "
                 "term moves, (declared) when the schema asks for that way; missing: the "
                 "entry for a blank and its share of training rows, or refused when "
                 "training had none)")


def direction_words(observed: str, declared: str) -> str:
    """What a term does beside what the schema declares, in one cell: "decreasing
    (declared)", "neither" (nothing declared), "neither (declared increasing)"."""
    if not declared:
        return observed
    if observed == declared:
        return f"{observed} (declared)"
    return f"{observed} (declared {declared})"


def summary_texts(summary: pd.DataFrame) -> pd.DataFrame:
    """The importance summary as the terminal shows it: each number column in one style,
    the contribution range from the lowest and highest written alike (kept on one line:
    a range broken over three lines reads badly), the observed and declared directions
    in one column."""
    lowest = number_texts(list(summary["lowest"]) + list(summary["highest"]), signed=False)
    half = len(summary)
    texts = frame_texts(summary, ["feature", "importance"])
    texts["range"] = [f"{low} to {high}" for low, high in
                      zip(lowest[:half], lowest[half:], strict=True)]
    texts["direction"] = [direction_words(str(o or ""), str(d or "")) for o, d in
                          zip(summary["observed"], summary["declared"], strict=True)]
    pair = summary["kind"] == "pair"
    texts["missing"] = ["in its table" if is_pair else missing_words(m, s, short=True)
                        for m, s, is_pair in zip(summary["missing"], summary["missing_share"],
                                                 pair, strict=True)]
    return texts


AT_MARK = "◀"  # the row a value asked about falls in (`glassbox shapes --at`)


def term_texts(table: pd.DataFrame, keep: Sequence[int] = (),
               mark: tuple[int, str] | None = None) -> tuple[pd.DataFrame, str]:
    """One term's table as the terminal shows it, and the words its title adds.

    A long table is thinned (`readable_rows`): it then gets a first column numbering each
    row as the files do (from 1), so a skipped row is plain to see, and the title says how
    many rows it shows; its notes go under it (`term_notes`). Rows at positions `keep`
    (the bin a row's value falls in) and the missing-value row are always shown. `mark`
    (position, value): that row is kept and pointed at by a narrow "at" column beside the
    value (`glassbox shapes --at`; the line under the table names the value)."""
    if mark is not None:
        keep = [*keep, mark[0]]
    shown = readable_rows(table, keep=keep)
    columns = [c for c in terminal_columns(table)
               if c != "note" and not table[c].isna().all()]  # notes go under the table
    texts = frame_texts(shown, columns)
    knots = value_rows(shown)
    if len(knots) and knots["from"].notna().all() and (knots["from"] == knots["to"]).all() \
            and not str(knots["row"].iloc[0]).endswith(")"):  # a curve's knots, not a flag's
        labels = number_texts(list(knots["from"]), significant=6)
        texts.loc[knots.index, "row"] = labels
    if mark is not None:
        texts.insert(1, "at", [AT_MARK if position == mark[0] else ""
                               for position in shown.index])
    words = ""
    if len(shown) < len(table):
        texts.insert(0, "#", [str(position + 1) for position in shown.index])
        words = (f": {len(shown)} of {len(table)} rows, # numbering them as the files do "
                 "(--format csv gives all)")
    return texts, words


def term_notes(table: pd.DataFrame) -> list[str]:
    """A term table's notes as lines under it ("(missing): refused: ..."): a column
    for the one row that has a note would squeeze every text column at 80 columns."""
    if "note" not in table:
        return []
    return [f"{row}: {note}" for row, note in zip(table["row"], table["note"], strict=True)
            if isinstance(note, str) and note]


def shapes_view(summary: pd.DataFrame, tables: Mapping[str, pd.DataFrame],
                scale: str = "score",
                keep: Mapping[str, Sequence[int]] | None = None,
                marks: Sequence[MarkedRow] = (), model: AdditiveModel | None = None,
                pairs: Sequence[str] = ()) -> RenderableType:
    """The summary table, then each feature's table (long ones thinned, saying so;
    `keep`: positions of rows each feature's table must show; `marks`: rows a value
    asked about falls in, shown beside the value and said in a line under the table),
    then the heat table of each of the model's `pairs` named."""
    marked = {mark.feature: mark for mark in marks}
    title = SUMMARY_TITLE.format(scale=scale)
    if (summary["kind"] == "pair").any():
        title += "; pairwise tables (FIRST & SECOND) follow the features"
    parts: list[RenderableType] = [FittedTable.of_frame(
        summary_texts(summary), title=title, headings=HEADINGS,
        whole=["range"])]
    kinds = dict(zip(summary["feature"], summary["term"], strict=True))
    for feature, table in tables.items():
        mark = marked.get(feature)
        texts, words = term_texts(table.reset_index(drop=True),
                                  (keep or {}).get(feature, ()),
                                  None if mark is None else (mark.position, mark.shown))
        title = f"{feature} ({kinds.get(feature, 'term')}){words}"
        notes = term_notes(table) + ([] if mark is None else [mark.words])
        parts.append(FittedTable.of_frame(texts, title=title, headings=HEADINGS,
                                          notes=notes))
    parts += [pair_view(model, name) for name in pairs if model is not None]
    return Group(*parts)


def heat_texts(grid: pd.DataFrame) -> pd.DataFrame:
    """A pair's grid (`pair_shapes.heat_grid`) as text cells: a first column of the first
    axis's entries, headed by its feature, then one column per entry of the second axis,
    every value in one signed style (so a column of cells reads like any other)."""
    values = grid.to_numpy(dtype=float)
    texts = np.asarray(number_texts(list(values.ravel()), signed=True),
                       dtype=object).reshape(values.shape)
    frame = pd.DataFrame(texts, columns=[str(c) for c in grid.columns])
    frame.insert(0, str(grid.index.name), [str(label) for label in grid.index])
    return frame


def pair_title(pair: Any, words: str = "") -> str:
    """A heat table's title: the pair, its axes' kinds, which feature runs where."""
    return (f"{pair.name} (pair, {pair.first.kind} × {pair.second.kind}): rows "
            f"{pair.first.feature}, columns {pair.second.feature}{words}")


def pair_notes(pair: Any, shares: str | None = None) -> list[str]:
    """Lines under a heat table: how knots read, the missing entries, where the training
    shares of its cells come from (`pair_shapes.shares_words`) when given."""
    notes = []
    knots = [a.feature for a in (pair.first, pair.second) if a.kind == "knots"]
    if knots:
        notes.append(f"{' and '.join(knots)}: values at the knots; between two knots the "
                     "table is read on a straight line, beyond the ends at the end knot.")
    missing = [a.feature for a in (pair.first, pair.second) if a.missing]
    if missing:
        notes.append(f"The 'missing' {'row' if missing[0] == pair.first.feature else 'column'}"
                     f"{'s' if len(missing) > 1 else ''} ({', '.join(missing)}): a row with "
                     "no value.")
    if shares:
        notes.append(f"Training shares of cells: {shares}.")
    return notes


def pair_view(model: AdditiveModel, name: str) -> RenderableType:
    """One pair's heat table: rows the first axis, columns the second, thinned to what
    reads at the console's width when it is big (`heat.HeatTable`: at most 16 rows, the
    columns that fit in one table, saying so), the notes under it; then, when the model
    file keeps them, each cell's share of the training rows laid out the same way."""
    from glassbox.explaining.pair_shapes import (
        find_pair,
        heat_grid,
        shares_words,
        training_share_grid,
    )
    from glassbox.publishing.heat import HeatTable

    pair = find_pair(model, name)
    grid = heat_grid(model, name)
    values = grid.to_numpy(dtype=float)
    cells = np.asarray(number_texts(list(values.ravel()), signed=True),
                       dtype=object).reshape(values.shape)
    shares = training_share_grid(model, name)
    extra = [] if shares is None else [(
        f"{pair.name}: share of the training rows in each cell (the model file's "
        "development baseline)", shares.map(percent_text).to_numpy(dtype=object))]
    return HeatTable(pair_title(pair), pair.first.feature, list(grid.index),
                     [str(c) for c in grid.columns], cells, pair.first.missing,
                     pair.second.missing, pair_notes(pair, shares_words(model, pair)),
                     whole=f"--pair '{pair.name}' with --format csv or --out FILE gives "
                           "every cell", extra=extra)


def terminal_columns(table: pd.DataFrame) -> list[str]:
    """The columns of a term's table worth a terminal's width.

    Slopes only for straight lines (up to three knots, where percentiles say
    little), training shares only for short tables (steps, levels, small counts),
    and notes (a refused missing value); files keep every column.
    """
    columns = ["row", "contribution", "lower", "upper"]
    curve = table["training_percentile"].notna().any()
    knots = len(value_rows(table))
    line = curve and knots <= 3
    if line:
        columns.insert(2, "slope")
    if curve and not line:
        columns.append("training_percentile")
    if not curve or knots <= 20:
        columns.append("training_share")
    return [*columns, "note"]


def notes_view(lines: Sequence[str]) -> RenderableType:
    """Notes one to a paragraph, each folded at spaces with a hanging indent, so a
    note's second line is plain to tell from the next note."""
    return Group(*(Hanging(line) for line in lines))


def error_text(message: str) -> Text:
    return Text.assemble(("error: ", palette.ERROR_STYLE), message)


def warning_text(message: str) -> Text:
    return Text.assemble(("warning: ", palette.WARNING_STYLE), message)


class WarningView:
    """`warning: MESSAGE` folded at spaces with a hanging indent, for a terminal (where a
    person reads it); the CLI prints `warning_text` on one line to a pipe or a log."""

    def __init__(self, message: str) -> None:
        self.message = message

    def __rich_console__(self, console: Any, options: Any) -> Any:
        lines = Hanging("warning: " + self.message).lines(options.max_width)
        prefix = len("warning: ")
        yield Text.assemble(("warning: ", palette.WARNING_STYLE), lines[0][prefix:])
        for line in lines[1:]:
            yield Text(line, no_wrap=True)


def comparison_view(comparison: Any) -> RenderableType:
    """What `glassbox compare` prints, laid out like every other view (narrow.py): the
    headline, the base rate and no-skill flags, every metric's mean, the primary metric's
    interval, the cost, calibration (every model's deciles in one table), the sparsity
    curve with the feature that joins at each size and the pair curve (when asked for)."""
    from glassbox.fitting import compare_tables as tables

    settings = comparison.settings
    folds, repeats = settings.get("folds"), settings.get("repeats")
    parts: list[RenderableType] = [Text(comparison.headline, style="bold"), Text("")]
    missing = tables.absent_note(comparison)
    if missing:
        parts += [warning_text(missing), Text("")]
    grid = tables.metric_grid(comparison)
    marked = grid.iloc[:, 1:].apply(lambda column: column.str.startswith("!")).any().any()
    parts.append(_text_table(grid, f"Held-out mean of each metric, {folds} folds × "
                             f"{repeats}" + (" (! in front: does not beat the no-skill "
                                             "model)" if marked else ""), right=True))
    if comparison.base_rate is not None:
        parts += [Text(tables.base_rate_note(comparison)), Text("")]
    accuracy = tables.accuracy_table(comparison)
    primary = tables.metric_heading(comparison, comparison.primary)
    parts.append(frame_table(accuracy, title=f"{primary} with its 95% interval",
                             columns=["model", primary, "95% interval"]))
    parts.append(frame_table(tables.cost_table(comparison),
                             title="Cost against the benchmark, paired by fold"))
    parts += [Text(tables.cost_note(comparison)), Text("")]
    fits = tables.calibration_fit_table(comparison)
    if not fits.empty:
        columns = ["model", "calibration slope", "calibration intercept", "rows"]
        parts.append(frame_table(fits, columns=columns, title="Calibration of the pooled "
                                 "out-of-fold predictions (slope 1 and intercept 0 are "
                                 "ideal)"))
        parts += [Text(f"{row.model}: {row.note}") for row in fits.itertuples()
                  if row.note]
        parts.append(_text_table(tables.calibration_grid(comparison),
                                 f"Mean predicted {tables.ARROW} observed rate, by decile of "
                                 "each model's predictions", right=True))
    curve = tables.sparsity_table(comparison)
    if not curve.empty:
        parts.append(frame_table(curve, columns=list(curve.columns[:3]),
                                 title="Sparse family by number of features"))
        if "joined" in curve:
            parts.append(frame_table(curve, columns=["features", "joined",
                                                     "left on the path"],
                                     title="The feature that joins at each size (where "
                                     "folds differ: each name with its share of folds)"))
    pairs = tables.pair_table(comparison)
    if not pairs.empty:
        parts += [frame_table(pairs, title="What each pair buys: accuracy by number of "
                                           "pairs"), Text(tables.pair_note(comparison))]
    return Group(*parts)


def _text_table(grid: pd.DataFrame, title: str, right: bool = True) -> FittedTable:
    """A frame of text cells in the shared layout; with `right`, every column after the
    first is right-aligned (numbers with a mark, or an arrow between two numbers)."""
    table = FittedTable.of_frame(frame_texts(grid), title=title, headings=HEADINGS)
    if right:
        table.headings = [table.headings[0],
                          *((heading, "right") for heading, _ in table.headings[1:])]
    return table


def data_value(value: Any) -> str:
    """A row's own value as its file holds it: a number to six significant figures with
    no padding zeros (0.91, not 0.9100), whole numbers with thousands separators."""
    if isinstance(value, float | np.floating) and np.isfinite(value):
        return value_text(value) if float(value).is_integer() else f"{float(value):.6g}"
    return value_text(value)


def reason_value(value: Any) -> str:
    """A reason's value as the table shows it; a pair's two values joined by "and"."""
    if isinstance(value, tuple):
        return " and ".join(reason_value(v) for v in value)
    return MISSING_LEVEL if is_missing(value) else data_value(value)


def reasons_view(row: Mapping[str, Any], reasons: Sequence[Any], scale: str) -> RenderableType:
    """One row's score and its reasons, largest gap first."""
    gaps = number_texts([reason.gap for reason in reasons])
    rows = [(str(number), reason.feature, reason_value(reason.value), gap, reason.text)
            for number, (reason, gap) in enumerate(zip(reasons, gaps, strict=True), start=1)]
    table = FittedTable(f"Reasons, largest gap below the best first ({scale} scale)",
                        [("#", "right"), ("feature", "left"), ("value", "left"),
                         ("gap", "right"), ("reason", "left")], rows, mixed=["value"])
    parts: list[RenderableType] = [key_values(row, title="Row"), Text("")]
    parts.append(table if reasons else Text("No term holds this row below its best."))
    return Group(*parts)


POINTS_HEADINGS = {"row": "value or range", "training_rows": "rows",
                   "largest_difference": "max diff"}


def points_view(summary: Mapping[str, Any], rows: pd.DataFrame,
                fidelity: Mapping[str, Any] | None = None,
                pairs: Sequence[Any] = ()) -> RenderableType:
    """What `glassbox points` prints: the scaling, the fidelity if measured, then the
    base points and each feature's rows of points, with each row's training rows, its
    spread and the largest difference any value in it can have (points); then a grid of
    points per pair (`pairs`: the card's `PairPoints`)."""
    parts: list[RenderableType] = [key_values(summary, title="Points card")]
    if fidelity is not None:
        parts.append(key_values(fidelity, title="Card against the exact score"))
    columns = ["row", "points", "contribution", "training_rows", "spread",
               "largest_difference"]
    grids = {pair.name for pair in pairs}
    for feature, group in rows.groupby("feature", sort=False):
        if feature in grids:
            continue
        texts = frame_texts(group, columns, {"points": "count", "training_rows": "count"})
        parts.append(FittedTable.of_frame(texts, title=str(feature),
                                          headings=POINTS_HEADINGS))
    parts += [pair_points_view(pair) for pair in pairs]
    return Group(*parts)


def pair_grids_view(grids: Sequence[Any]) -> RenderableType:
    """Only the points grids asked for (`glassbox points --pair`)."""
    return Group(*(pair_points_view(grid) for grid in grids))


def pair_points_view(pair: Any) -> RenderableType:
    """A pair's grid of points: rows the first axis, columns the second, thinned to what
    reads at the console's width when it is big (`heat.HeatTable`); the largest
    difference of its cells under it."""
    from glassbox.publishing.heat import HeatTable

    grid = np.asarray(pair.points, dtype=float)
    texts = np.asarray(number_texts(list(grid.ravel()), "count", signed=True),
                       dtype=object).reshape(grid.shape)
    notes = [f"Largest difference of a cell from the exact scaled value: "
             f"{pair.largest_of_all():.3g} points."]
    if pair.binned:
        notes.append(f"{' and '.join(pair.binned)} read in bins between its knots (each bin: "
                     "the mean of the table over it).")
    if any(a.kind == "levels" for a in (pair.first, pair.second)):
        notes.append("A level never seen in training: 0 points.")
    return HeatTable(f"{pair.name} (points grid): rows {pair.first.feature}, columns "
                     f"{pair.second.feature}", pair.first.feature, pair.first.labels(),
                     pair.second.labels(), texts, pair.first.missing, pair.second.missing,
                     notes, whole=f"--pair '{pair.name}' with --format csv or --out FILE "
                                  "gives every cell")
