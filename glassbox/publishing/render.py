"""Rich renderings of the library's results, built at the last moment for the CLI.

Library functions return DataFrames and dicts; this module only arranges them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from rich import box
from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from glassbox.core.additive import AdditiveModel
from glassbox.core.schema import MISSING_LEVEL
from glassbox.explaining.reasons import is_missing
from glassbox.explaining.shapes import missing_words, readable_rows, value_rows
from glassbox.publishing import palette

HEADINGS = {
    "row": "value",
    "training_share": "training share",
    "training_percentile": "training percentile",
    "slope": "slope per unit",
    "contribution": "contribution",
    "lower": "band low",
    "upper": "band high",
    "importance": "importance",
    "range": "contribution range",
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


def _numeric_text(column: pd.Series) -> bool:
    """Whether a text column holds numbers written out, blanks aside (right-align those)."""
    present = column.dropna()
    if present.empty or not (column.dtype == object
                             or pd.api.types.is_string_dtype(column.dtype)):
        return False
    return bool(pd.to_numeric(present, errors="coerce").notna().all())


def frame_table(frame: pd.DataFrame, title: str | None = None,
                columns: Sequence[str] | None = None, digits: int = 4) -> Table:
    """A DataFrame as a rich table; numeric columns right-aligned."""
    columns = list(columns or frame.columns)
    table = Table(title=title, box=box.SIMPLE_HEAD, title_justify="left",
                  title_style="bold", header_style="bold", pad_edge=False)
    for position, name in enumerate(columns):
        numeric = pd.api.types.is_numeric_dtype(frame[name].dtype) or _numeric_text(
            frame[name])
        heading = HEADINGS.get(name, name.replace("_", " "))
        table.add_column(heading, justify="right" if numeric else "left",
                         no_wrap=position == 0 or name.endswith("interval"),
                         min_width=min(len(heading), 12))
    for row in frame[columns].itertuples(index=False):
        table.add_row(*(cell(value, digits) for value in row))
    return table


def key_values(pairs: Mapping[str, Any], title: str | None = None) -> Table:
    table = Table(title=title, box=None, show_header=False, title_justify="left",
                  title_style="bold", pad_edge=False)
    table.add_column(style="bold")
    table.add_column()
    for key, value in pairs.items():
        table.add_row(key, cell(value))
    return table


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
        pairs[f"training {binning['loss']}, at bin points / values"] = (
            f"{binning['loss_at_bin_points']:.6g} / {binning['loss_at_values']:.6g}")
    elif isinstance(binning, dict) and binning.get("exact"):
        pairs["binned"] = "no: every value its own bin (exact)"
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
    for key, value in fit.items():
        pairs[f"{names.get(key, key)} (training rows)"] = value
    return key_values(pairs, title="Fitted")


def shapes_view(summary: pd.DataFrame, tables: Mapping[str, pd.DataFrame],
                scale: str = "score") -> RenderableType:
    """The summary table, then each feature's table (long curves thinned)."""
    shown = summary.assign(
        range=[f"{low:.3g} to {high:.3g}" for low, high in
               zip(summary["lowest"], summary["highest"], strict=True)],
        missing=[missing_words(m, s, short=True) for m, s in
                 zip(summary["missing"], summary["missing_share"], strict=True)])
    parts: list[RenderableType] = [
        frame_table(shown, title="Features by importance (mean |contribution| on the "
                                 f"{scale} scale; missing: the entry for a blank and its "
                                 "share of training rows, or refused when training had none)",
                    columns=["feature", "importance", "range", "observed", "declared",
                             "missing"])
    ]
    kinds = dict(zip(summary["feature"], summary["term"], strict=True))
    for feature, table in tables.items():
        shown = readable_rows(table)
        title = f"{feature} ({kinds.get(feature, 'term')})"
        if len(shown) < len(table):
            title += f" ({len(shown)} of {len(table)} rows; files hold all)"
        columns = [c for c in terminal_columns(table) if not table[c].isna().all()]
        parts.append(frame_table(shown, title=title, columns=columns))
    return Group(*parts)


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


def error_text(message: str) -> Text:
    return Text.assemble(("error: ", palette.ERROR_STYLE), message)


def warning_text(message: str) -> Text:
    return Text.assemble(("warning: ", palette.WARNING_STYLE), message)


def comparison_view(headline: str, accuracy: pd.DataFrame, cost: pd.DataFrame,
                    sparsity: pd.DataFrame, folds: int, repeats: int,
                    cost_note: str = "") -> RenderableType:
    """What `glassbox compare` prints: the headline, accuracy, cost, the sparsity curve."""
    parts: list[RenderableType] = [
        Text(headline, style="bold"), Text(""),
        frame_table(accuracy, title=f"Held-out accuracy, {folds} folds × {repeats}"),
        frame_table(cost, title="Cost against the benchmark, paired by fold"),
    ]
    if cost_note:
        parts += [Text(cost_note), Text("")]
    if not sparsity.empty:
        parts.append(frame_table(sparsity, title="Sparse family by number of features"))
    return Group(*parts)


def reasons_view(row: Mapping[str, Any], reasons: Sequence[Any], scale: str) -> RenderableType:
    """One row's score and its reasons, largest gap first."""
    table = Table(box=box.SIMPLE_HEAD, title=f"Reasons, largest gap below the best first "
                                             f"({scale} scale)")
    for heading, justify in (("#", "right"), ("feature", "left"), ("value", "right"),
                             ("gap", "right"), ("reason", "left")):
        table.add_column(heading, justify=justify)  # type: ignore[arg-type]
    for number, reason in enumerate(reasons, start=1):
        value = MISSING_LEVEL if is_missing(reason.value) else cell(reason.value)
        table.add_row(str(number), reason.feature, value, cell(reason.gap, 3), reason.text)
    parts: list[RenderableType] = [key_values(row, title="Row")]
    parts.append(table if reasons else Text("No term holds this row below its best."))
    return Group(*parts)


def points_view(summary: Mapping[str, Any], rows: pd.DataFrame,
                fidelity: Mapping[str, Any] | None = None) -> RenderableType:
    """What `glassbox points` prints: the scaling, the fidelity if measured, then the
    base points and each feature's rows of points, with each row's training rows, its
    spread and the largest difference any value in it can have (points)."""
    parts: list[RenderableType] = [key_values(summary, title="Points card")]
    if fidelity is not None:
        parts.append(key_values(fidelity, title="Card against the exact score"))
    for feature, group in rows.groupby("feature", sort=False):
        shown = group.rename(columns={"row": "value or range", "training_rows": "rows",
                                      "largest_difference": "max diff"})
        parts.append(frame_table(shown, title=str(feature), digits=3,
                                 columns=["value or range", "points", "contribution", "rows",
                                          "spread", "max diff"]))
    return Group(*parts)
