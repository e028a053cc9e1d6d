"""The audit report: one document about a model, from its tables, a data file and
(optionally) a comparison, rendered as a self-contained HTML page and as Markdown.

`build_report` computes: it returns a `Report` made of sections holding paragraphs,
bullet lists, DataFrames and matplotlib figures. `to_html`, `to_markdown` and
`write_report` only arrange that content. Nothing in the output depends on the time
it was made, so the same inputs give the same bytes.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from glassbox import __version__
from glassbox.core.additive import AdditiveModel, LevelsTerm
from glassbox.core.errors import DataError, GlassboxError, OptionError
from glassbox.core.files import safe_file_name
from glassbox.core.provenance import (
    csv_text_fingerprint,
    file_sha256,
    fingerprint_method,
    frame_fingerprint,
    short_fingerprint,
)
from glassbox.core.schema import prepare
from glassbox.core.wording import noun
from glassbox.explaining import groups, shapes
from glassbox.publishing import plots
from glassbox.publishing.heat import report_grid
from glassbox.publishing.render import HEADINGS, cell, terminal_columns
from glassbox.publishing.report_document import (  # noqa: F401  (the document: re-exported)
    Block,
    Bullets,
    Paragraph,
    Picture,
    Report,
    Section,
    Table,
    output_files,
    to_html,
    to_markdown,
    unique_names,
    write_report,
)

SHOWN_ROWS = 16

CAUTIONS = (
    "This report describes a statistical model: what its tables do with the inputs and "
    "how its outcomes fall. It is not a decision and does not say what any decision "
    "should be.",
    "Protected characteristics are never inputs to the model and never levers for "
    "changing an outcome. They are read here only to compare outcomes between groups.",
    "Outcomes and group comparisons must be reviewed under local law and fair-lending "
    "rules by licensed compliance staff before anything is concluded from them.",
    "The four-fifths flag is a customary screen (29 CFR 1607.4(D)), not a legal finding. "
    "Local law decides what an outcome gap means and what, if anything, follows.",
)


# ---------------------------------------------------------------- building


def check_same_data(model: AdditiveModel, comparison, model_name: str,
                    comparison_name: str, frame: pd.DataFrame | None = None) -> None:
    """A comparison belongs in the report only when made on the model's own data. A
    comparison fingerprinted by the older method is accepted when the report's data gives
    both files' fingerprints, each by its own method."""
    made_on = comparison.provenance.get("data_sha256")
    fitted_on = model.metadata.get("data_sha256")
    if not fitted_on:
        raise DataError(f"{model_name} records no fingerprint of its training data, so "
                        f"{comparison_name} cannot be checked against it")
    if made_on == fitted_on:
        return
    made_how, fitted_how = fingerprint_method(made_on), fingerprint_method(fitted_on)
    if made_how != fitted_how and frame is not None and _both_from(model, frame, made_on,
                                                                  fitted_on):
        return
    if made_how != fitted_how:
        raise DataError(f"{comparison_name} and {model_name} fingerprint their data by "
                        f"different methods ({made_how} against {fitted_how}: one was made "
                        "by an older glassbox), so whether they used the same data cannot be "
                        "told; redo the older of the two")
    raise DataError(f"{comparison_name} was made on other data than {model_name} "
                    f"(data fingerprints differ: {short_fingerprint(made_on)} against "
                    f"{short_fingerprint(fitted_on)})")


def _both_from(model: AdditiveModel, frame: pd.DataFrame, made_on: str,
               fitted_on: str) -> bool:
    """Whether `frame` typed as the model types it gives both fingerprints."""
    from glassbox.fitting.fit import unpooled

    try:
        typed = prepare(frame, unpooled(model.schema))
        pooled = prepare(frame, model.schema)
    except GlassboxError:
        return False
    prints = {method(table.features.assign(__target__=table.target))
              for method in (frame_fingerprint, csv_text_fingerprint)
              for table in (typed, pooled)}
    return made_on in prints and fitted_on in prints


def build_report(
    model: AdditiveModel,
    frame: pd.DataFrame,
    *,
    model_file: str | Path | None = None,
    comparison=None,
    comparison_file: str | Path | None = None,
    cutoff: float | None = None,
    source: str | None = None,
    recourse_file: str | Path | None = None,
    min_group: int = groups.MIN_GROUP,
    bands: Mapping[str, Sequence[float]] | None = None,
) -> Report:
    """The report's content for `model` on the rows of `frame`.

    `comparison` is a `compare.Comparison` (or give `comparison_file` to read one); it
    must have been made on the model's training data. `cutoff` is a probability for a
    classification model (default 0.5) and a predicted value for regression (required).
    `recourse_file` is a `recourse reach` JSON file made with the same model file (or one
    written by its old name, `recourse audit`). Groups (the report's and the reach file's)
    of fewer than `min_group` rows are not flagged.
    `bands` gives band edges for numeric protected columns (see `groups.band_edges`).
    """
    from glassbox.explaining import reasons
    from glassbox.fitting.compare_files import read_comparison
    from glassbox.publishing import report_recourse

    reach = report_recourse.read_reach(recourse_file) if recourse_file is not None else None
    model_name = f"model file {Path(model_file).name}" if model_file else "the model"
    if comparison is None and comparison_file is not None:
        comparison = read_comparison(comparison_file)
    if comparison is not None:
        where = (f"comparison file {Path(comparison_file).name}" if comparison_file
                 else "the comparison")
        check_same_data(model, comparison, model_name, where, frame)
    source = source or frame.attrs.get("source") or "the data"
    if reach is not None:  # before any scoring: a mismatched reach file is refused at once
        report_recourse.check_reach(reach, f"recourse reach file {Path(recourse_file).name}",
                                    model_file=model_file, data_file=source,
                                    better=model.schema.target.better,
                                    cutoff=reasons.checked_cutoff(model, cutoff))
    prepared = prepare(frame, model.schema, require_target=False, source=source,
                       features=model.features)
    model.check_missing(prepared.features, source)
    score = model.score_encoded(prepared.features)
    unfavourable = reasons.unfavourable(model, score, cutoff)
    cutoff = 0.5 if cutoff is None else float(cutoff)
    prediction = model.inverse_link(score)

    sections = [Section("Read this first", (Bullets(CAUTIONS, caution=True),)),
                _summary_section(model, model_file, cutoff, source, len(frame),
                                 comparison is not None, reach is not None)]
    if comparison is not None:
        sections.append(_comparison_section(comparison, cutoff))
    sections.append(_importance_section(model))
    sections += _feature_sections(model)
    sections += _pair_sections(model, prepared.features, source)
    sections.append(_reasons_section(model, frame, cutoff, unfavourable, source))
    group_tables = protected_outcomes(model, prepared.protected, ~unfavourable, prediction,
                                      min_group, bands)
    sections.append(_groups_section(model, group_tables, cutoff, min_group,
                                    _band_notes(model, prepared.protected, bands)))
    if reach is not None:
        sections.append(report_recourse.recourse_section(
            reach, int(unfavourable.sum()), cutoff, min_group))
    family = model.metadata.get("family", "additive")
    title = f"Audit report: {family} model of {model.schema.target.column}"
    intro = (f"Made by glassbox {__version__} from {model_name} and data file "
             f"{Path(source).name} ({len(frame):,} rows).")
    facts = {"unfavourable_rows": int(unfavourable.sum()), "rows": len(frame),
             "cutoff": cutoff, "groups": group_tables}
    return Report(title, intro, tuple(sections), facts)


def protected_outcomes(model: AdditiveModel, protected: pd.DataFrame,
                       favourable: np.ndarray, prediction: np.ndarray,
                       min_group: int = groups.MIN_GROUP,
                       bands: Mapping[str, Sequence[float]] | None = None,
                       ) -> dict[str, pd.DataFrame]:
    """`groups.outcomes_by_group` for every protected column present in the data, numeric
    ones in bands (`bands` by column name, else as `groups.band_edges` decides)."""
    bands = dict(bands or {})
    unknown = sorted(set(bands) - set(map(str, protected.columns)))
    if unknown:
        raise OptionError(f"--band {', '.join(unknown)}: not a protected column in the data "
                          f"(protected: {', '.join(map(str, protected.columns)) or 'none'})")
    return {str(column): groups.outcomes_by_group(
                groups.group_labels(protected[column], bands.get(str(column)),
                                    _levels(model, str(column))),
                favourable, prediction, min_rows=min_group)
            for column in protected.columns}


def _levels(model: AdditiveModel, column: str) -> bool:
    """Whether the schema declares a protected column a category or flag (by level)."""
    return model.schema.feature(column).kind in ("category", "flag")


def _band_notes(model: AdditiveModel, protected: pd.DataFrame,
                bands: Mapping[str, Sequence[float]] | None) -> list[str]:
    """One sentence per banded protected column: how it was cut."""
    bands = dict(bands or {})
    notes = []
    for column in protected.columns:
        edges = groups.band_edges(protected[column], bands.get(str(column)),
                                  _levels(model, str(column)))
        if edges is not None:
            notes.append(groups.band_note(str(column), edges, str(column) in bands))
    return notes


def _outcome_words(model: AdditiveModel) -> str:
    target = model.schema.target
    if model.link == "logit":
        return f"probability of {target.column} = {target.positive}" \
            if target.positive is not None else f"probability of the positive {target.column}"
    return f"predicted {target.column}"


def _favourable_words(model: AdditiveModel, cutoff: float) -> str:
    side = "at or below" if model.schema.target.better == "lower" else "at or above"
    return f"{_outcome_words(model)} {side} {cutoff:g}"


def _dated(model: AdditiveModel) -> str:
    """The fit date the model file records (UTC day); never the file's modification time,
    so the same model file gives the same report."""
    day = model.metadata.get("fit_date")
    return f"{day} (UTC)" if day else "not recorded (the model file predates fit dates)"


def _summary_section(model: AdditiveModel, model_file: str | Path | None, cutoff: float,
                     source: str, rows: int, compared: bool = False,
                     audited: bool = False) -> Section:
    meta, target = model.metadata, model.schema.target
    link = ("logit: the score is the log-odds of " + _outcome_words(model).removeprefix(
        "probability of ") if model.link == "logit" else "identity: the score is the prediction")
    pairs: dict[str, object] = {
        "model file": Path(model_file).name if model_file else "(not from a file)",
        "model file SHA-256": file_sha256(model_file) if model_file else "",
        "family": meta.get("family", ""),
        "link": link,
        "better for the person": f"a {target.better} score (schema: better = {target.better})",
        f"features with a term ({len(model.terms)})": ", ".join(model.features),
    }
    left_out = [f.name for f in model.schema.used_features if f.name not in model.features]
    if left_out:
        pairs["features without a term"] = ", ".join(left_out)
    protected = [f.name for f in model.schema.protected_features]
    pairs["protected (never inputs)"] = ", ".join(protected) or "none declared"
    pairs["training rows"] = f"{meta['rows']:,}" if "rows" in meta else "not recorded"
    pairs["fit date"] = _dated(model)
    versions = meta.get("versions") or {}
    pairs["library versions"] = ", ".join(f"{k} {v}" for k, v in versions.items()) \
        or "not recorded"
    pairs["report data"] = f"{Path(source).name}, {rows:,} rows"
    pairs["cut-off"] = f"{cutoff:g}; favourable: {_favourable_words(model, cutoff)}"
    table = pd.DataFrame({"item": list(pairs), "value": [str(v) for v in pairs.values()]})
    tables = "the principal reasons, the outcomes by group" + (
        " and the recourse for the declined rows" if audited else "")
    used = (f"Every table below that sorts rows into favourable and unfavourable uses the "
            f"cut-off {cutoff:g} ({_favourable_words(model, cutoff)}): {tables}.")
    if compared:
        used += (" The accuracy comparison's accuracy column counts at the cut-off the "
                 "comparison was made with, which its heading names.")
    return Section("Model summary", (Table(table, pairs=True), Paragraph(used)))


def _comparison_section(comparison, cutoff: float) -> Section:
    from glassbox.fitting import compare_tables as tables
    from glassbox.fitting.calibration import DEFINITION as CALIBRATION_DEFINITION
    from glassbox.fitting.compare import accuracy_table

    settings = comparison.settings
    made_at = float(settings.get("cutoff", 0.5))
    fingerprint = short_fingerprint(comparison.provenance.get("data_sha256"))
    note = (f"Held-out accuracy on {settings.get('folds')} folds × {settings.get('repeats')} "
            f"{noun(settings.get('repeats') or 0, 'repeat')}, seed {settings.get('seed')}; made "
            f"on the same data as the model "
            f"(fingerprint {fingerprint}). ROC AUC, Gini, KS, "
            f"log loss and Brier use no cut-off; accuracy counts a probability of "
            f"{made_at:g} or more as the positive label, the cut-off the comparison was "
            "made with" + ("." if made_at == cutoff else
                           f", not this report's {cutoff:g}."))
    blocks: list[Block] = [Paragraph(comparison.headline)]
    missing = tables.absent_note(comparison)
    if missing:
        blocks.append(Paragraph(missing))
    blocks += [Table(accuracy_table(comparison)), Paragraph(note)]
    if comparison.base_rate is not None:
        blocks.append(Paragraph(tables.base_rate_note(comparison)))
    fits = tables.calibration_fit_table(comparison)
    if not fits.empty:
        deciles = pd.concat([tables.calibration_deciles(comparison, model).assign(model=model)
                             for model in fits["model"]], ignore_index=True)
        blocks += [Table(fits, caption="Calibration of the pooled out-of-fold predictions"),
                   Paragraph(f"Definitions: {CALIBRATION_DEFINITION}."),
                   Table(deciles[["model", "decile", "rows", "mean predicted",
                                  "observed rate"]],
                         caption="Observed against predicted by decile")]
    curve = tables.sparsity_table(comparison)
    if not curve.empty:
        blocks.append(Table(curve, caption="Sparse family by number of features: the "
                                           "feature that joins at each size"))
    pairs = tables.pair_table(comparison)
    if not pairs.empty:
        blocks += [Table(pairs, caption="What each pair buys: accuracy by number of pairs"),
                   Paragraph(tables.pair_note(comparison))]
    return Section("Accuracy against a black box", tuple(blocks))


def _importance_section(model: AdditiveModel) -> Section:
    summary = shapes.summary(model)
    shown = pd.DataFrame({
        "feature": summary["feature"], "term": summary["term"],
        "importance": summary["importance"],
        "contribution range": [f"{cell(lo, 3)} to {cell(hi, 3)}" for lo, hi in
                               zip(summary["lowest"], summary["highest"], strict=True)],
        "declared": summary["declared"], "observed": summary["observed"],
        "missing value": [shapes.missing_words(m, share) for m, share in
                          zip(summary["missing"], summary["missing_share"], strict=True)]})
    scale = "log-odds" if model.link == "logit" else model.schema.target.column
    text = (f"Importance is the mean absolute contribution over the training rows, on the "
            f"{scale} scale: how far a feature moves a typical score. Rows with no value "
            "count with the feature's missing-value entry; the last column gives that entry "
            "and its share of training rows, or says that a missing value is refused "
            "because the training data had none.")
    picture = Picture("overview", plots.importance_figure(model),
                      "Bar chart of the features ranked by importance")
    return Section("Feature importance", (Paragraph(text), picture, Table(shown)))


def _direction_text(model: AdditiveModel, feature: str, observed: str) -> str:
    spec = model.schema.feature(feature)
    if isinstance(model.term(feature), LevelsTerm):
        return "A category: its levels have no order, so no direction applies."
    if not spec.monotone:
        return f"No direction declared; observed: {observed}."
    agree = observed in (spec.monotone, "flat")
    verdict = "they agree" if agree else "they disagree: check the fit and the schema"
    return f"Declared {spec.monotone}; observed {observed}: {verdict}."


def _feature_sections(model: AdditiveModel) -> list[Section]:
    summary = shapes.summary(model)
    summary = summary[summary["kind"] != "pair"].set_index("feature")
    way = "worse" if model.schema.target.better == "lower" else "better"
    sections = [Section("Features one by one", (Paragraph(
        f"One picture and one table per feature, most important first. A positive "
        f"contribution raises the score, which is {way} for the person. Long tables are "
        f"thinned to at most {SHOWN_ROWS} rows here; the glassbox shapes command writes every "
        "row."),))]
    names = unique_names((f"feature-{safe_file_name(f)}" for f in summary.index),
                          taken=["overview"])
    for feature, name in zip(summary.index, names, strict=True):
        table = shapes.term_table(model, feature)
        shown = shapes.readable_rows(table, SHOWN_ROWS)
        columns = [c for c in terminal_columns(table) if not table[c].isna().all()]
        caption = (f"{len(shown)} of {len(table)} rows, spread over the training data"
                   if len(shown) < len(table) else "")
        frame = shown[columns].rename(columns={"row": "value or range", **HEADINGS})
        blocks = (
            Picture(name, plots.feature_figure(model, feature),
                    f"Shape function of {feature}: its contribution to the score"),
            Paragraph(_direction_text(model, feature, summary.loc[feature, "observed"])),
            Table(frame.reset_index(drop=True), caption),
        )
        kind = summary.loc[feature, "term"]
        sections.append(Section(f"{feature} ({kind})", blocks, level=3))
    return sections


def _pair_sections(model: AdditiveModel, encoded: pd.DataFrame, source: str) -> list[Section]:
    """A section per pairwise table, after the features: its heat map, its table (rows the
    first feature's entries, columns the second's), each cell's share of the training rows
    where the model file's baseline keeps them (`pair_shapes.baseline_shares`) and of the
    report's data rows."""
    from glassbox.explaining import pair_shapes

    if not model.pairs:
        return []
    summary = shapes.summary(model)
    names = list(summary.loc[summary["kind"] == "pair", "feature"])
    sections = [Section("Pairs of features", (Paragraph(
        "A pairwise table adds to the score for two features together, beyond what each "
        "adds alone: a row's value is read in the cell of its two values. Each table has "
        "mean zero along each of its axes over the training rows, so the features' own "
        "shape functions keep their meaning. Colours run from the darkest blue (lowers the "
        "score most) through white (adds nothing) to the darkest red (raises it most)."),))]
    taken = [f"feature-{safe_file_name(f)}" for f in model.features] + ["overview"]
    pictures = unique_names((f"pair-{safe_file_name(n)}" for n in names), taken=taken)
    for name, picture in zip(names, pictures, strict=True):
        pair = pair_shapes.find_pair(model, name)
        values, thinned = _heat_table(pair, pair_shapes.heat_grid(model, name))
        share_table, _ = _heat_table(pair, pair_shapes.share_grid(model, name, encoded).map(
            shapes.percent_text))
        training = pair_shapes.training_share_grid(model, name)
        training_blocks = () if training is None else (Table(
            _heat_table(pair, training.map(shapes.percent_text))[0],
            f"{name}: share of the training rows in each cell (from the development "
            f"baseline kept in the model file){' (the same cells)' if thinned else ''}"),)
        importance = model.metadata.get("importance", {}).get(name)
        words = ("importance not recorded" if importance is None
                 else f"importance {importance:.3g} (mean absolute contribution over the "
                      "training rows)")
        knots = [a.feature for a in (pair.first, pair.second) if a.kind == "knots"]
        read = (f" {' and '.join(knots)}: values at the knots, read on a straight line "
                "between two knots and at the end knot beyond the ends." if knots else "")
        blocks = (
            Picture(picture, plots.pair_figure(model, name),
                    f"Heat map of the pairwise table of {pair.first.feature} and "
                    f"{pair.second.feature}"),
            Paragraph(f"{pair.first.kind} × {pair.second.kind}; {words}.{read} Training "
                      f"shares of cells: {pair_shapes.shares_words(model, pair)}."),
            Table(values, f"{name}: what the pair adds to the score{thinned}"),
            *training_blocks,
            Table(share_table, f"{name}: share of the rows of {Path(source).name} in each "
                               f"cell{' (the same cells)' if thinned else ''}"),
        )
        sections.append(Section(f"{name} (pair)", blocks, level=3))
    return sections


def _heat_table(pair, grid: pd.DataFrame) -> tuple[pd.DataFrame, str]:
    """A pair's grid as the report shows it (`heat.report_grid`: a huge one thinned) and
    the words its caption adds when thinned (how to get every cell)."""
    corner = f"{pair.first.feature} \\ {pair.second.feature}"
    table, words = report_grid(grid, corner, pair.first.missing, pair.second.missing)
    return table, (f" ({words}; glassbox shapes with --pair '{pair.name}' and --format csv "
                   "writes every cell, one line per cell)" if words else "")


def _percent(share: float) -> str:
    return "" if share is None or not np.isfinite(share) else f"{100 * share:.1f}%"


def _reasons_section(model: AdditiveModel, frame: pd.DataFrame, cutoff: float,
                     unfavourable: np.ndarray, source: str) -> Section:
    from glassbox.explaining import reasons

    title = "Principal reasons on the unfavourable side"
    count, rows = int(unfavourable.sum()), len(unfavourable)
    side = "above" if model.schema.target.better == "lower" else "below"
    text = (f"{count:,} of {rows:,} rows ({_percent(count / rows)}) lie on the unfavourable "
            f"side of the cut-off ({_outcome_words(model)} {side} {cutoff:g}). For each, the "
            "principal reason is the feature whose contribution sits furthest below the best "
            "its table allows; this is how often each feature comes first.")
    if count == 0:
        return Section(title, (Paragraph(text),))
    table = reasons.principal_reasons(model, frame, cutoff, source=source)
    shown = pd.DataFrame({"feature": table["feature"], "reason": table["reason"],
                          "rows": table["rows"].astype(int),
                          "share": [_percent(s) for s in table["share"]]})
    return Section(title, (Paragraph(text), Table(shown)))


def _groups_section(model: AdditiveModel, tables: Mapping[str, pd.DataFrame],
                    cutoff: float, min_group: int = groups.MIN_GROUP,
                    band_notes: Sequence[str] = ()) -> Section:
    title = "Outcomes by protected group"
    declared = [f.name for f in model.schema.protected_features]
    if not tables:
        text = ("The schema declares no protected columns, so no group comparison was made."
                if not declared else
                f"The data holds none of the protected columns the schema declares "
                f"({', '.join(declared)}), so no group comparison was made.")
        return Section(title, (Paragraph(text),))
    mean = ("mean probability" if model.link == "logit" else "mean prediction")
    blocks: list[Block] = [Paragraph(
        f"Favourable outcome: {_favourable_words(model, cutoff)}. The adverse-impact ratio "
        "is a group's favourable share divided by that of the most favoured group. Ratios "
        "below 0.8 are flagged, after the four-fifths rule of the US Uniform Guidelines on "
        "Employee Selection Procedures (1978), 29 CFR 1607.4(D), the customary screen; "
        f"local law decides what a gap means. {groups.size_note(min_group)}"
        + "".join(f" {note}" for note in band_notes))]
    for column, table in tables.items():
        shown = pd.DataFrame({
            "group": table["group"], "rows": table["rows"],
            "favourable rows": table["favourable_rows"],
            "favourable share": [_percent(s) for s in table["favourable_share"]],
            mean: [cell(v, 3) for v in table["mean_prediction"]],
            "impact ratio": ["" if np.isnan(r) else f"{r:.3f}" for r in table["impact_ratio"]],
            "below 0.8": groups.flag_words(table["flagged"], table["small"])})
        caption = f"{column}: " + groups.flag_caption(table["group"], table["flagged"],
                                                      table["small"], min_group)
        blocks.append(Table(shown, caption))
    return Section(title, tuple(blocks))
