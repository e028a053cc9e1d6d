"""The monitoring page: one self-contained HTML file about a model's periods against its
development sample, laid out with the audit report's machinery (report.Report, to_html).

`build_page` turns a `Monitoring` into sections of paragraphs, tables and pictures, each
picture with a sentence on how to read it; `write_page` writes the HTML with the pictures
inside. Nothing depends on the time it was made: the same inputs give the same bytes.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from glassbox.core.files import write_atomic
from glassbox.explaining.baseline import SHORT_DIGITS
from glassbox.explaining.monitor_tables import SPREAD_COLLAPSE, collapsed
from glassbox.explaining.stability import ACT_PSI, EMPTY_SHARE, LEVEL, WATCH_PSI
from glassbox.publishing import monitor_plots as pictures
from glassbox.publishing import monitor_view
from glassbox.publishing.monitor_view import (
    count_text,
    fixed_text,
    flag_words,
    outcome_notes,
    p_text,
    plural,
    points_text,
    psi_text,
    range_text,
    share_text,
    signed_text,
    unscored_note,
    uses_points,
    worst_first,
)
from glassbox.publishing.report import CAUTIONS
from glassbox.publishing.report_document import (
    Block,
    Bullets,
    Paragraph,
    Picture,
    Report,
    Section,
    Table,
    to_html,
)

if TYPE_CHECKING:
    from glassbox.explaining.monitor import Monitoring

SMALL_MULTIPLES = 6  # features drawn one by one over periods; every feature is in the table
PAGE_CAUTIONS = (
    "Stability is not accuracy. A stable population can be scored badly and a shifted one "
    "well; only outcomes, once they arrive, show how well the model ranks and predicts.",
    "A flag is a prompt to investigate, not a verdict. It says the rows now look different "
    "from the development rows by a stated rule; whether that matters, and why it "
    "happened (the market, the product, a data feed), is for people to find out.",
    "This page describes a statistical model and the rows it was given: how they compare "
    "with the rows it was developed on. It is not a decision and does not say what any "
    "decision should be.",
    "Protected characteristics are never inputs to the model and never levers for "
    "changing an outcome; monitoring reads only the model's features, the period and the "
    "outcome.",
    CAUTIONS[2],  # the house caution on law and compliance review, as the report words it
)


def _scale(link: str | None) -> str:
    return "log-odds" if link in (None, "logit") else "prediction units"


def build_page(monitoring: Monitoring, *, model_name: str = "the model",
               link: str | None = "logit", inputs: Sequence[str] = ()) -> Report:
    """The page's content. `link` is the model's link ("logit" or "identity"), for the
    units; `inputs` names the data files, for the introduction."""
    periods = [str(period) for period in monitoring.periods]
    scale = _scale(link)
    sections = [
        Section("Read this first", (Bullets(PAGE_CAUTIONS, caution=True),)),
        _summary_section(monitoring, periods),
        _score_section(monitoring, periods),
        _characteristic_section(monitoring, periods, scale),
        _stability_section(monitoring, periods),
        *_pair_section(monitoring, periods, scale),
        _contribution_section(monitoring, periods, scale),
        _attribution_section(monitoring, periods),
        _missing_section(monitoring),
    ]
    if monitoring.outcomes is not None and not monitoring.outcomes.empty:
        sections.append(_outcome_section(monitoring))
    sections.append(_rules_section())
    files = f" ({', '.join(Path(name).name for name in inputs)})" if inputs else ""
    intro = (f"{model_name}, {plural(len(periods), 'period')}{files}, against "
             f"{plural(int(monitoring.development_rows), 'development row')} "
             f"({monitoring.baseline_source}).")
    return Report("Monitoring between periods", intro, tuple(sections),
                  facts={"periods": periods})


def write_page(page: Report, path: str | Path) -> Path:
    """The page as one HTML file, pictures inside."""
    write_atomic(path, to_html(page))
    return Path(path)


def _summary_section(monitoring: Monitoring, periods: list[str]) -> Section:
    summary = monitoring.summary
    shown = pd.DataFrame({
        "period": summary["period"].astype(str),
        "rows": [count_text(v) for v in summary["rows"]],
        "scored rows": [count_text(v) for v in summary["scored_rows"]],
        "mean score": [fixed_text(v, ".4f") for v in summary["mean_score"]],
        "change": [signed_text(v) for v in summary["score_change"]],
        "score PSI": [psi_text(v) for v in summary["score_psi"]],
        "p-value": [p_text(v) for v in summary["score_p_value"]],
        "flag": [flag_words(f, r) for f, r in zip(summary["score_flag"],
                                                   summary["score_rule"], strict=True)],
        "features flagged": [count_text(v) for v in summary["features_flagged"]]})
    if "points_change" in summary.columns and summary["points_change"].notna().any():
        shown.insert(5, "points change", [signed_text(v, 1) for v in summary["points_change"]])
    development = float(summary["development_mean_score"].iloc[0])
    pairs = pd.DataFrame({"item": ["model checksum", "development sample", "development rows",
                                   "development mean score", "periods"],
                          "value": [str(monitoring.model_checksum),
                                    str(monitoring.baseline_source),
                                    count_text(monitoring.development_rows),
                                    fixed_text(development, ".4f"), ", ".join(periods)]})
    blocks = [Table(pairs, pairs=True), Table(shown, "Each period against development")]
    note = unscored_note(summary)
    if note:
        blocks.append(Paragraph(note))
    return Section("Summary", tuple(blocks))


def _score_section(monitoring: Monitoring, periods: list[str]) -> Section:
    figure = pictures.score_psi_figure(monitoring.summary, WATCH_PSI, ACT_PSI)
    how = ("How to read it: each bar is one period's PSI over the score's development "
           "deciles (ten bins each holding a tenth of the development rows). Below the "
           f"first dashed line ({WATCH_PSI:.2f}) the score's distribution is close to "
           f"development; between the lines, watch it; above {ACT_PSI:.2f}, look into it now. "
           "A ring marks a period the sample-size check flagged: its shift is larger than "
           "chance allows for its number of rows, even when the PSI is small.")
    blocks: list = [Paragraph(how), Picture("score-psi", figure,
                                            "Bar chart of the score's PSI in each period")]
    bins = getattr(monitoring, "score_bins", None)
    if bins is not None and not bins.empty:
        wide = bins.pivot_table(index="bin", columns="period", values="share", sort=False)
        development = bins.drop_duplicates("bin").set_index("bin")["development_share"]
        table = pd.DataFrame({"score decile": wide.index.astype(str),
                              "development": [share_text(v) for v in development[wide.index]]})
        for period in periods:
            table[period] = [share_text(v) for v in wide[period]]
        blocks.append(Table(table, "Share of scored rows in each development score decile "
                            f"(edges rounded to {SHORT_DIGITS} significant digits; the model "
                            "file keeps them whole)"))
    return Section("Score stability", tuple(blocks))


def _characteristic_section(monitoring: Monitoring, periods: list[str],
                            scale: str) -> Section:
    points = uses_points(monitoring)
    change, total, unit = (("points_change", "points_change", "points") if points else
                           ("contribution_change", "score_change", scale))
    # the score sums its pairs too, so their changes are bars of their own (a points card
    # holds the features only, and so does its total)
    pairs = _pairs(monitoring) if not points else None
    parts = monitoring.features if pairs is None else pd.concat(
        [monitoring.features, pairs.rename(columns={"pair": "feature"})], ignore_index=True)
    names = () if pairs is None else tuple(pairs["pair"].unique())
    figure = pictures.characteristic_figure(monitoring.summary, parts, periods, change,
                                            total, unit, pairs=names)
    movers, what, whose = (("features and pairs", "features' and pairs'",
                            "feature's and pair's") if names
                           else ("features", "features'", "feature's"))
    how = (f"How to read it: the model's score is the sum of its {what} contributions, so "
           "the change in the mean score from development to a period is exactly the sum of "
           f"the changes in each {whose} mean contribution. Bars above zero raised the mean "
           f"score, bars below lowered it; the diamond is their sum. The {movers} that "
           f"moved most have their own colour (up to {len(pictures.MOVER_COLOURS)}); the rest "
           "share the grey. A feature that moves the score while its PSI stays small is "
           "worth a look too: a few rows in an extreme bin can do it.")
    table = _per_period(parts, periods, lambda v: signed_text(v, 1 if points else 3), change)
    return _explained("What moved the mean score", how, Picture(
        "characteristics", figure, f"Stacked bars of each {whose} change in mean contribution"),
        Table(table, f"Change in each {whose} mean contribution ({unit}), by period"))


def _pairs(monitoring: Monitoring) -> pd.DataFrame | None:
    """The pairs' drift table, or None for a model without pairs."""
    pairs = getattr(monitoring, "pairs", None)
    return None if pairs is None or pairs.empty else pairs


def _pair_section(monitoring: Monitoring, periods: list[str], scale: str) -> list[Section]:
    """For a model with pairs: each pair's PSI over its cells and how far its mean
    contribution moved, by period (nothing for a model without pairs)."""
    pairs = _pairs(monitoring)
    if pairs is None:
        return []
    figure = pictures.pair_heat_figure(pairs, periods, WATCH_PSI, ACT_PSI)
    how = ("How to read it: a pair is a table of two features together, added to the score "
           "beside their own terms. Its PSI is taken over its cells (each combination of the "
           "two features' bins, with a cell for a missing value), so it sees rows moving "
           "between combinations even when each feature alone looks steady. The colours and "
           "lines are the features' (pale below "
           f"{WATCH_PSI:.2f}, amber to watch, red to act on, outlined where the sample-size "
           "check flagged). The table gives each pair's mean contribution in development "
           f"and in the period ({scale}) and how far it moved; those moves are in the bars of "
           "what moved the mean score.")
    table = pd.DataFrame({
        "period": pairs["period"].astype(str), "pair": pairs["pair"].astype(str),
        "PSI": [psi_text(v) for v in pairs["psi"]],
        "p-value": [p_text(v) for v in pairs["p_value"]],
        "cells": [count_text(v) for v in pairs["bins"]],
        "flag": [flag_words(f, r) for f, r in zip(pairs["flag"], pairs["rule"], strict=True)],
        "development mean": [signed_text(v) for v in pairs["development_mean_contribution"]],
        "mean": [signed_text(v) for v in pairs["mean_contribution"]],
        "moved": [signed_text(v) for v in pairs["contribution_change"]]})
    return [_explained("Pair stability", how, Picture(
        "pair-heat", figure, "Heat table of PSI over each pair's cells by period"),
        Table(table, f"Each pair by period: PSI over its cells (cells counts those holding "
                     f"development rows) and its mean contribution ({scale})"))]


def _stability_section(monitoring: Monitoring, periods: list[str]) -> Section:
    features = monitoring.features
    figure = pictures.heat_figure(features, periods, WATCH_PSI, ACT_PSI)
    how = ("How to read it: one row per feature, one column per period; each cell holds the "
           "PSI of the feature's bins in that period against development (the term's own "
           "steps or levels, deciles for curves, and a bin for missing values). Pale cells "
           f"are below {WATCH_PSI:.2f}, amber ones are to watch, red ones to act on; an outlined "
           "cell was flagged by the sample-size check. Read across a row for a feature "
           "drifting over time, down a column for a period when many moved at once.")
    worst = worst_first(features[features["flag"].map(
        monitor_view.flagged)])
    blocks: list = [Paragraph(how), Picture("stability-heat", figure,
                                            "Heat table of PSI by feature and period")]
    if worst.empty:
        blocks.append(Paragraph("No feature was flagged in any period."))
    else:
        blocks.append(Table(pd.DataFrame({
            "period": worst["period"].astype(str), "feature": worst["feature"].astype(str),
            "PSI": [psi_text(v) for v in worst["psi"]],
            "p-value": [p_text(v) for v in worst["p_value"]],
            "bins": [count_text(v) for v in worst["bins"]],
            "flagged by": [flag_words(f, r) for f, r in zip(worst["flag"], worst["rule"],
                                                              strict=True)]}),
            "Flagged features, worst first"))
        blocks += _bin_tables(monitoring, periods, worst["feature"].unique()[:SMALL_MULTIPLES])
    return Section("Feature stability", tuple(blocks))


def _bin_tables(monitoring: Monitoring, periods: list[str], names) -> list[Block]:
    """For the worst flagged features, each bin's share of rows in development and in
    every period: which bins the rows moved between."""
    bins = monitoring.bins
    if bins is None or bins.empty or not len(names):
        return []
    blocks: list[Block] = [Paragraph(
        f"Where the rows moved, for the {plural(len(names), 'flagged feature')} flagged worst "
        "(every feature's bins are in the JSON file, --format json): each bin's share of "
        "rows in development and in each period.")]
    for name in names:
        own = bins[bins["feature"] == name]
        labels = own.drop_duplicates("bin")["bin"].tolist()
        wide = own.pivot(index="bin", columns="period", values="share")
        development = own.drop_duplicates("bin").set_index("bin")["development_share"]
        table = pd.DataFrame({"bin": [str(label) for label in labels],
                              "development": [share_text(development[b]) for b in labels]})
        for period in periods:
            table[period] = [share_text(wide.at[b, period]) if period in wide.columns
                             else "" for b in labels]
        blocks.append(Table(table, f"{name}: share of rows in each bin"))
    return blocks


def _contribution_section(monitoring: Monitoring, periods: list[str], scale: str) -> Section:
    features = monitoring.features
    names = pictures.movers(features, "contribution_change", SMALL_MULTIPLES)
    figure = pictures.contribution_figure(features, names, periods, scale)
    how = ("How to read it: each panel is one feature's mean contribution to the score in "
           "each period (orange) against its value on the development rows (dashed). Terms "
           "are centred on the development rows, so the dashed line sits near zero. A panel "
           "drifting away from its line is a feature pushing the score. All panels share one "
           "scale, so a small move looks small beside a large one; the "
           f"{plural(len(names), 'feature')} drawn are those that moved most in any period "
           f"(of {features['feature'].nunique()}); the table has every feature.")
    table = _per_period(features, periods, signed_text, "mean_contribution",
                        development="development_mean_contribution")
    return _explained("Mean contribution over periods", how, Picture(
        "contributions", figure, "Small multiples of mean contribution by period"),
        Table(table, f"Mean contribution ({scale}) by period"))


def _attribution_section(monitoring: Monitoring, periods: list[str]) -> Section:
    features = monitoring.features
    latest = periods[-1]
    figure = pictures.attribution_figure(features, latest)
    how = ("How to read it: a feature's attribution share is its mean absolute contribution "
           "as a share of all features' together: how much of the model's reasoning it "
           f"carries. Grey-blue bars are development, orange bars the latest period ({latest}); "
           "the largest movers are on top. The spread table below is the standard "
           "deviation of each feature's contributions: how much the feature separates one "
           "row from another. A spread that collapses is the mark of a column filled with "
           "one value (a broken feed): every row gets the same from it, whatever its "
           f"share. Collapsed here: below {SPREAD_COLLAPSE:.0%} of development's spread.")
    table = _per_period(features, periods, points_text, "attribution_change")
    shares = features.drop_duplicates("feature").set_index("feature")[
        "development_attribution_share"]
    table.insert(1, "development share", [share_text(shares[name]) for name in table["feature"]])
    spread = _per_period(features, periods, lambda v: f"{v:.3f}", "contribution_spread",
                         development="development_contribution_spread")
    gone = collapsed(features)
    said = (Paragraph("Collapsed spreads: " + "; ".join(
        f"{row.feature} in {row.period} ({row.contribution_spread:.3f} against "
        f"{row.development_contribution_spread:.3f})" for row in gone.itertuples(index=False))
        + ".") if not gone.empty else Paragraph("No feature's spread collapsed."))
    return _explained("Attribution drift", how, Picture(
        "attribution", figure, "Paired bars of attribution shares, development and latest"),
        Table(table, "Change in attribution share (percentage points) by period"), said,
        Table(spread, "Spread of contributions (standard deviation) by period"))


def _explained(title: str, how: str, picture: Picture, *more: Block) -> Section:
    """A section of a picture after the sentence on how to read it, then its tables."""
    return Section(title, (Paragraph(how), picture, *more))


def _missing_section(monitoring: Monitoring) -> Section:
    features = monitoring.features
    moved = features[(features["missing_share"].astype(float)
                      != features["development_missing_share"].astype(float))
                     | (features["new_level_rows"].fillna(0) > 0)]
    blocks: list = [Paragraph(
        "Missing values have their own bin in every feature's PSI; here are their rates, "
        "and rows whose category level was never seen in development (scored with the "
        "model's unseen-level entry).")]
    if moved.empty:
        blocks.append(Paragraph("No feature's missing-value rate changed and no new level "
                                "appeared in any period."))
    else:
        blocks.append(Table(pd.DataFrame({
            "period": moved["period"].astype(str), "feature": moved["feature"].astype(str),
            "development missing": [share_text(v) for v in moved["development_missing_share"]],
            "missing": [share_text(v) for v in moved["missing_share"]],
            "new-level rows": [count_text(v) for v in moved["new_level_rows"].fillna(0)]}),
            "Missing-value rates and new levels that differ from development"))
    levels = monitoring.new_levels
    if levels is not None and not levels.empty:
        blocks.append(Table(levels[["period", "feature", "level", "rows"]].assign(
            rows=[count_text(v) for v in levels["rows"]]), "New levels"))
    return Section("Missing values and new levels", tuple(blocks))


def _outcome_section(monitoring: Monitoring) -> Section:
    from glassbox.publishing.monitor_view import interval_columns

    outcomes = monitoring.outcomes
    if "observed_rate" in outcomes.columns:
        shown = pd.DataFrame({
            "period": outcomes["period"].astype(str),
            "rows": [count_text(v) for v in outcomes["rows"]],
            "observed rate": [fixed_text(v) for v in outcomes["observed_rate"]],
            "95% interval": [range_text(lo, hi) for lo, hi in
                             zip(outcomes["rate_low"], outcomes["rate_high"], strict=True)],
            "predicted rate": [fixed_text(v) for v in outcomes["predicted_rate"]]})
        for name, column in (("ROC AUC", "auc"), ("KS", "ks")):
            shown[name] = [fixed_text(v) for v in outcomes[column]]
            shown[f"{name} 95% interval"] = [
                range_text(lo, hi) for lo, hi in zip(outcomes[f"{column}_low"],
                                                     outcomes[f"{column}_high"], strict=True)]
        how = ("Observed against predicted rate, with a Clopper-Pearson 95% interval for the "
               "observed rate: a predicted rate outside it says the model's calibration has "
               "moved. ROC AUC (DeLong's interval) and KS (bootstrap interval) measure how "
               "well the score ranks the outcomes in each period.")
    else:
        low, high = interval_columns(outcomes)
        shown = pd.DataFrame({
            "period": outcomes["period"].astype(str),
            "rows": [count_text(v) for v in outcomes["rows"]],
            "observed mean": [fixed_text(v, ".4g") for v in outcomes["observed_mean"]],
            "predicted mean": [fixed_text(v, ".4g") for v in outcomes["predicted_mean"]]})
        if low is not None:
            shown.insert(3, "95% interval", [range_text(lo, hi, ".4g") for lo, hi in
                                             zip(outcomes[low], outcomes[high], strict=True)])
        how = ("Observed against predicted mean by period: a predicted mean outside the "
               "observed mean's interval says the model's level has moved.")
    notes = outcome_notes(outcomes)
    blocks: list[Block] = [Paragraph(how), Table(shown)]
    if notes:
        blocks.append(Bullets(tuple(notes)))
    return Section("Outcomes by period", tuple(blocks))


def _rules_section() -> Section:
    return Section("How flags are made", (Bullets((
        f"PSI (population stability index) compares the shares of rows in each bin: "
        f"from {WATCH_PSI:.2f} a feature or the score is flagged \"watch\", from "
        f"{ACT_PSI:.2f} \"act\". These are a convention of the trade (Lewis 1994, carried on "
        "by Siddiqi), not a statistical test.",
        "Beside them a sample-size check: with no change, the PSI of n rows against N "
        "development rows over k bins (those holding development rows) is about "
        "(1/n + 1/N) times a chi-square variable with k - 1 degrees of freedom. A p-value "
        f"under {LEVEL:g} flags \"changed\", so small periods are not flagged for noise and "
        "very large ones are not waved through.",
        f"A bin empty on one side has its share raised to {EMPTY_SHARE:g} (and that side's "
        "shares renormalised) before the PSI is taken, since a share of zero would make it "
        "infinite; bins empty on both sides are left out. Each flag says which rule raised "
        "it.")),))


def _per_period(features: pd.DataFrame, periods: list[str], text, column: str,
                development: str | None = None) -> pd.DataFrame:
    """A feature × period table of one column, as text; the development value first."""
    wide = features.pivot(index="feature", columns="period", values=column)
    order = features.drop_duplicates("feature")["feature"].tolist()
    table = pd.DataFrame({"feature": [str(name) for name in order]})
    if development is not None:
        base = features.drop_duplicates("feature").set_index("feature")[development]
        table["development"] = [text(base[name]) for name in order]
    for period in periods:
        table[period] = [text(wide.at[name, period]) for name in order]
    return table
