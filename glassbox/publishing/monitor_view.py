"""What `glassbox monitor` shows in a terminal, built from a `Monitoring` at the last moment.

The period summary, then per period the flagged features worst first, the outcomes when
the data had them, and one line of caution. Every table fits 80 columns: long cells wrap
or fold onto more lines, nothing is cut. The words and number styles here are shared with
the page (monitor_page.py) and the files (monitor_files.py).
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import pandas as pd
from rich import box
from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from glassbox.core.wording import plural
from glassbox.explaining.monitor_tables import collapsed
from glassbox.explaining.stability import ACT_PSI, FLAG_ORDER, LEVEL, WATCH_PSI

if TYPE_CHECKING:  # the engine's result; only its fields are read here
    from glassbox.explaining.monitor import Monitoring

RULE_KEY = (f"Flagged by PSI: the trade's convention, watch from {WATCH_PSI:.2f} and act "
            f"from {ACT_PSI:.2f} (Lewis 1994; Siddiqi). By χ²: the sample-size check, "
            f"p < {LEVEL:g} under no change.")
CAUTION = ("Stability is not accuracy, and a flag is a prompt to investigate, not a verdict: "
           "these are counts of rows and of the model's tables, not a judgment of anyone.")
WIDTH = 80
FIRST_WIDTH = 16  # a period or feature name this long stays on one line in the tables


# ---------------------------------------------------------------- one style per column


def _finite(value: Any) -> bool:
    return value is not None and not (isinstance(value, float) and math.isnan(value)) \
        and not pd.isna(value)


def count_text(value: Any) -> str:
    return f"{int(value):,}" if _finite(value) else ""


def psi_text(value: Any) -> str:
    return f"{float(value):.3f}" if _finite(value) else ""


def signed_text(value: Any, digits: int = 3) -> str:
    """A change with its sign, so a fall and a rise read apart at a glance."""
    if not _finite(value):
        return ""
    value = float(value)
    return f"{0.0 if abs(value) < 0.5 * 10 ** -digits else value:+.{digits}f}"


def fixed_text(value: Any, style: str = ".3f") -> str:
    """A value in a fixed style (".3f" for rates and AUC, ".4g" for means); blank for none."""
    return format(float(value), style) if _finite(value) else ""


def range_text(low: Any, high: Any, style: str = ".3f") -> str:
    """An interval as "low to high"; blank when either end is missing."""
    if not (_finite(low) and _finite(high)):
        return ""
    return f"{fixed_text(low, style)} to {fixed_text(high, style)}"


def share_text(value: Any) -> str:
    return f"{100 * float(value):.1f}%" if _finite(value) else ""


def points_text(value: Any) -> str:
    """A change in percentage points of a share."""
    return f"{signed_text(100 * float(value), 1)} pp" if _finite(value) else ""


def p_text(value: Any) -> str:
    if not _finite(value):
        return ""
    return "<0.0001" if float(value) < 1e-4 else f"{float(value):.4f}"


def flagged(flag: Any) -> bool:
    return flag in FLAG_ORDER


def flag_words(flag: Any, rule: Any) -> str:
    """"act: PSI ≥ 0.25"; "" when no rule flagged, or the reason none could (no rows)."""
    if not flagged(flag):
        return str(rule) if _finite(rule) and rule else ""
    return f"{flag}: {rule}" if rule else str(flag)


def worst_first(features: pd.DataFrame) -> pd.DataFrame:
    """Rows ordered by flag (act, watch, changed, none), then PSI from the largest."""
    rank = features["flag"].map({flag: i for i, flag in enumerate(FLAG_ORDER)}).fillna(
        len(FLAG_ORDER))
    order = pd.DataFrame({"rank": rank, "psi": -features["psi"].astype(float).fillna(-1.0),
                          "feature": features["feature"].astype(str)})
    return features.loc[order.sort_values(["rank", "psi", "feature"], kind="stable").index]


def uses_points(monitoring: Monitoring) -> bool:
    """Whether a points card was given: the tables then carry points changes."""
    return "points_change" in monitoring.features.columns and bool(
        monitoring.features["points_change"].notna().any())


def unscored_note(summary: pd.DataFrame) -> str:
    """One sentence on rows the model could not score, or "" when there were none."""
    parts = [f"{count_text(row.unscored_rows)} in {row.period}"
             for row in summary.itertuples() if _finite(row.unscored_rows)
             and row.unscored_rows > 0]
    if not parts:
        return ""
    return ("Rows the model cannot score (a missing value where its term has no entry for "
            f"one): {', '.join(parts)}. They count in the feature bins and missing rates, "
            "not in the score's figures.")


# ---------------------------------------------------------------- the terminal view


def _table(title: str, headings: Sequence[tuple[str, str]],
           rows: Sequence[Sequence[str]], width: int = WIDTH) -> Table:
    """A table laid out for `width` columns with nothing cut: each column as wide as its
    longest line (headings break between words); when that is too wide, the first column
    (periods or features) folds down to FIRST_WIDTH and text columns wrap at spaces down
    to their longest word; past that every text column folds further. Numbers never
    fold. Widths are set here, so rich never has to crop."""
    texts = [textwrap.fill(heading, max(5, *(len(w) for w in heading.split())))
             for heading, _ in headings]
    numeric = [justify == "right" for _, justify in headings]

    def longest(values, split=str.splitlines) -> int:
        return max((len(part) for value in values for part in split(value)), default=0)

    columns = [[texts[j], *(row[j] for row in rows)] for j in range(len(headings))]
    natural = [longest(column) for column in columns]
    floors = [natural[j] if numeric[j] else max(longest(columns[j], str.split),
                                                 longest([texts[j]], str.split))
              for j in range(len(headings))]
    floors[0] = min(natural[0], max(FIRST_WIDTH, longest([texts[0]], str.split)))
    room = width - 3 * (len(headings) - 1) - 2  # a gap of three between columns, two edges
    widths = list(natural)
    for limit in (floors, [natural[j] if numeric[j] else min(natural[j], 6)
                           for j in range(len(headings))]):
        for j in sorted(range(len(headings)), key=lambda j: j != 0):
            excess = sum(widths) - room
            if excess > 0:
                widths[j] = max(limit[j], widths[j] - excess)
    table = Table(title=title, box=box.SIMPLE_HEAD, title_justify="left", title_style="bold",
                  header_style="bold", pad_edge=False, expand=False)
    for text, (_, justify), column_width in zip(texts, headings, widths, strict=True):
        table.add_column(text, justify=justify, width=column_width,  # type: ignore[arg-type]
                         overflow="fold")
    for row in rows:
        table.add_row(*row)
    return table


def short_flag(flag: Any, rule: Any) -> str:
    """The flag and, in brackets, which rules raised it ("act (PSI, χ²)"), for a narrow
    column; `RULE_KEY` spells them out under the tables."""
    if not flagged(flag):
        return str(rule) if _finite(rule) and rule else "none"
    rules = [name for name, mark in (("PSI", "PSI"), ("χ²", "χ²")) if mark in str(rule)]
    return f"{flag} ({', '.join(rules)})" if rules else str(flag)


def period_table(monitoring: Monitoring, width: int = WIDTH) -> Table:
    points = "points_change" in monitoring.summary.columns and \
        monitoring.summary["points_change"].notna().any()
    headings = [("period", "left"), ("rows", "right"), ("mean score change", "right")]
    if points:
        headings.append(("mean points change", "right"))
    headings += [("score PSI", "right"), ("score flag", "left"),
                 ("features flagged", "right")]
    rows = []
    for row in monitoring.summary.itertuples(index=False):
        cells = [str(row.period), count_text(row.rows), signed_text(row.score_change)]
        if points:
            cells.append(signed_text(row.points_change, 1))
        cells += [psi_text(row.score_psi), short_flag(row.score_flag, row.score_rule),
                  count_text(row.features_flagged)]
        rows.append(cells)
    return _table("Periods against the development sample", headings, rows, width)


def flagged_table(monitoring: Monitoring, period: str, width: int = WIDTH) -> Table | None:
    """The flagged features of one period, worst first; None when none is flagged."""
    rows_all = monitoring.features[monitoring.features["period"] == period]
    shown = worst_first(rows_all[rows_all["flag"].map(flagged)])
    if shown.empty:
        return None
    points = uses_points(monitoring)
    change = ("points change", "right") if points else ("contribution change", "right")
    rows = []
    for row in shown.itertuples(index=False):
        moved = signed_text(row.points_change, 1) if points else signed_text(
            row.contribution_change)
        missing = points_text(row.missing_share - row.development_missing_share)
        rows.append([str(row.feature), psi_text(row.psi), short_flag(row.flag, row.rule),
                     moved, points_text(row.attribution_change), missing])
    return _table(f"{period}: {plural(len(shown), 'flagged feature')} of {len(rows_all)}, "
                  "worst first", [("feature", "left"), ("PSI", "right"), ("flag", "left"),
                                  change, ("attribution change", "right"),
                                  ("missing change", "right")], rows, width)


def collapse_lines(monitoring: Monitoring) -> list[str]:
    """One line per period and feature whose contributions barely vary any more."""
    return [f"{row.period}: {row.feature} no longer separates rows: the spread of its "
            f"contributions is {row.contribution_spread:.3f} against "
            f"{row.development_contribution_spread:.3f} in development (nearly every row "
            "gets the same from it; a broken feed?)."
            for row in collapsed(monitoring.features).itertuples(index=False)]


def new_level_lines(monitoring: Monitoring, limit: int = 5) -> list[str]:
    """Per period and feature, the new levels with their rows (most rows first); past
    `limit` levels the line says how many more there are."""
    levels = monitoring.new_levels
    if levels is None or levels.empty:
        return []
    lines = []
    for (period, feature), group in levels.groupby(["period", "feature"], sort=False):
        group = group.sort_values(["rows", "level"], ascending=[False, True], kind="stable")
        named = [f"{level!r} ({count_text(rows)})" for level, rows in
                 zip(group["level"][:limit], group["rows"][:limit], strict=True)]
        more = len(group) - limit
        tail = f" and {plural(more, 'more level')} (in the files)" if more > 0 else ""
        lines.append(f"New levels of {feature} in {period}: {', '.join(named)}{tail}.")
    return lines


def outcome_table(monitoring: Monitoring, width: int = WIDTH) -> Table | None:
    outcomes = monitoring.outcomes
    if outcomes is None or outcomes.empty:
        return None
    if "observed_rate" in outcomes.columns:
        rows = [[str(row.period), count_text(row.rows),
                 _with_interval(row.observed_rate, row.rate_low, row.rate_high),
                 _with_interval(row.predicted_rate, None, None),
                 _with_interval(row.auc, row.auc_low, row.auc_high),
                 _with_interval(row.ks, row.ks_low, row.ks_high)]
                for row in outcomes.itertuples(index=False)]
        return _table("Outcomes by period (95% intervals below each value)",
                      [("period", "left"), ("rows", "right"), ("observed rate", "right"),
                       ("predicted rate", "right"), ("ROC AUC", "right"), ("KS", "right")],
                      rows, width)
    low, high = interval_columns(outcomes)
    rows = []
    for row in outcomes.itertuples(index=False):
        values = row._asdict()
        rows.append([str(row.period), count_text(row.rows),
                     _with_interval(row.observed_mean, values.get(low), values.get(high), 4),
                     _with_interval(row.predicted_mean, None, None, 4)])
    return _table("Outcomes by period (95% interval of the observed mean below it)",
                  [("period", "left"), ("rows", "right"), ("observed mean", "right"),
                   ("predicted mean", "right")], rows, width)


def outcome_notes(outcomes: pd.DataFrame | None) -> list[str]:
    """One line per period whose outcome figures are missing or qualified: no rows with an
    outcome, or an interval clipped or not computed (the engine's note)."""
    if outcomes is None or outcomes.empty:
        return []
    lines = []
    for row in outcomes.to_dict(orient="records"):
        if not _finite(row.get("rows")) or row["rows"] == 0:
            lines.append(f"{row['period']}: no rows with an outcome, so no outcome figures.")
        elif _finite(row.get("note")) and row.get("note"):
            lines.append(f"{row['period']}: {row['note']}.")
    return lines


def interval_columns(outcomes: pd.DataFrame) -> tuple[str | None, str | None]:
    """The columns holding a regression's interval of the observed mean, if any."""
    for low, high in (("mean_low", "mean_high"), ("observed_low", "observed_high"),
                      ("interval_low", "interval_high")):
        if low in outcomes.columns and high in outcomes.columns:
            return low, high
    return None, None


def _with_interval(value: Any, low: Any, high: Any, digits: int = 3) -> str:
    if not _finite(value):
        return ""
    style = f".{digits}f" if digits == 3 else f".{digits}g"
    text = format(float(value), style)
    if _finite(low) and _finite(high):
        text += f"\n{format(float(low), style)}–{format(float(high), style)}"
    return text


def pair_table(monitoring: Monitoring, width: int = WIDTH) -> Table | None:
    """Each pair's drift per period, beside the features': PSI over its cells, and how far
    its mean contribution moved; None for a model without pairs."""
    pairs = monitoring.pairs
    if pairs is None or pairs.empty:
        return None
    rows = [[str(row.period), str(row.pair), psi_text(row.psi), short_flag(row.flag, row.rule),
             signed_text(row.contribution_change)]
            for row in pairs.itertuples(index=False)]
    return _table("Pairs: PSI over each pair's cells, and its mean contribution moved",
                  [("period", "left"), ("pair", "left"), ("PSI", "right"), ("flag", "left"),
                   ("contribution moved", "right")], rows, width)


def monitoring_view(monitoring: Monitoring, width: int = WIDTH) -> RenderableType:
    """Everything the terminal shows, in reading order, laid out for `width` columns."""
    summary = monitoring.summary
    head = (f"Monitoring {plural(len(monitoring.periods), 'period')} against "
            f"{plural(int(monitoring.development_rows), 'development row')} "
            f"({monitoring.baseline_source})")
    parts: list[RenderableType] = [Text(head), Text(f"model {monitoring.model_checksum}"),
                                   Text(""), period_table(monitoring, width)]
    note = unscored_note(summary)
    if note:
        parts += [Text(note), Text("")]
    quiet = []
    for period in monitoring.periods:
        table = flagged_table(monitoring, period, width)
        if table is None:
            quiet.append(str(period))
        else:
            parts.append(table)
    if quiet:
        parts += [Text(f"No feature flagged in {', '.join(quiet)}."), Text("")]
    pairs = pair_table(monitoring, width)
    if pairs is not None:
        parts.append(pairs)
    lines = collapse_lines(monitoring) + new_level_lines(monitoring)
    if lines:
        parts += [Text(line) for line in lines] + [Text("")]
    outcomes = outcome_table(monitoring, width)
    if outcomes is not None:
        parts.append(outcomes)
        notes = outcome_notes(monitoring.outcomes)
        if notes:
            parts += [Text(line) for line in notes] + [Text("")]
    parts.append(Text(RULE_KEY, style="dim"))
    parts += [Text("Every feature and bin: --format json or csv, or --page FILE.html.",
                   style="dim"), Text(CAUTION, style="italic")]
    return Group(*parts)
