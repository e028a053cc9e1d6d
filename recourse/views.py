"""The planner's results for the terminal: rich renderables built from the library's data."""

from __future__ import annotations

import math
from typing import Any

import pandas as pd
from rich.console import Group, RenderableType
from rich.text import Text

from glassbox.core.wording import plural
from glassbox.explaining.groups import flag_caption, flag_words
from glassbox.publishing import palette
from glassbox.publishing.narrow import (
    FittedTable,
    bullet,
    frame_texts,
    indented,
    number_texts,
)
from glassbox.publishing.render import frame_table
from recourse import reach
from recourse.batch import NOT_STATED, summary_frame
from recourse.planner import CAUTION, PlanResult
from recourse.supply import accepted_words


def summary_tables(summary: pd.DataFrame) -> list[FittedTable]:
    """A (measure, value) summary as two tables, one style per column: the counts of rows
    (with their share of the declined rows), then the cost quantiles of the cheapest
    plans."""
    costs = summary["measure"].str.contains("cost") | summary["measure"].isin(
        ["median", "90%"])
    counts = summary[~costs & (summary["measure"] != "share with a plan")]
    declined = float(counts["value"].iloc[0]) if len(counts) else 0.0
    shares = [value / declined if declined else math.nan for value in counts["value"]]
    rows = pd.DataFrame({"measure": counts["measure"], "rows": counts["value"],
                         "share of declined": shares})
    tables = [FittedTable.of_frame(frame_texts(rows, styles={"rows": "count",
                                                             "share of declined": "share"}))]
    if costs.any():
        cost = summary[costs]
        labels = [name.replace("cheapest plan cost, ", "") for name in cost["measure"]]
        labels = ["50%" if name == "median" else name for name in labels]
        quantiles = pd.DataFrame({"share of rows with a plan at or below": labels,
                                  "cost": cost["value"].to_numpy()})
        tables.append(FittedTable.of_frame(frame_texts(quantiles),
                                           title="Cost of the cheapest plan"))
    return tables


def reach_view(result: reach.Reach) -> RenderableType:
    """The population's tables for the terminal, then the caution."""
    parts: list[RenderableType] = [
        Text(f"Recourse for the declined rows ({result.context.get('goal', 'the goal')})",
             style="bold"),
        *summary_tables(reach.summary_table(result))]
    if not result.main_changes.empty:
        parts.append(frame_table(result.main_changes,
                                 title="The change that costs most in each cheapest plan "
                                       "(share: of the rows with a plan)"))
    if not result.binding_rules.empty:
        parts.append(frame_table(result.binding_rules,
                                 title="Rows without a plan: the rule that binds most "
                                       "(share: of the rows without a plan)"))
    for column, table in result.groups.items():
        parts.append(FittedTable.of_frame(group_texts(table), title=f"By {column}: " +
                                          flag_caption(table["group"], table["flagged"],
                                                       table["small"], result.min_group)))
    if result.groups:
        parts.append(Text(reach.group_note(result.min_group)))
    parts.append(Text(CAUTION, style="italic"))
    return Group(*parts)


def group_texts(table: pd.DataFrame) -> pd.DataFrame:
    """One group table as the terminal shows it: each column in one style."""
    shown = pd.DataFrame({
        "group": table["group"], "rows": table["declined"], "planned": table["with_plan"],
        "share": table["share_with_plan"], "median cost": table["median_cost"],
        "ratio": table["ratio_to_best"]})
    texts = frame_texts(shown, styles={"rows": "count", "planned": "count"})
    texts["flagged"] = flag_words(table["flagged"], table["small"])
    return texts


def declined_view(results: list[PlanResult]) -> RenderableType:
    """What `recourse plan --declined` prints on standard error: the counts, the cost
    quantiles, then the caution."""
    return Group(Text("Declined rows", style="bold"), *summary_tables(summary_frame(results)),
                 Text(CAUTION, style="italic"))


def _number(value: float | str, kind: str) -> str:
    """A value in the feature's own units: flags as yes/no, thousands separated."""
    if isinstance(value, str):
        return value
    if kind == "flag":
        return "yes" if value >= 0.5 else "no"
    if float(value).is_integer():
        return f"{int(value):,}"
    return f"{value:,.4g}" if abs(value) < 1000 else f"{value:,.2f}"


def supplied_words(change, kind: str) -> str:
    """What a plan that states a missing value asks: state it, and which values would do."""
    values = accepted_words(change.accepted, kind, lambda v: _number(v, kind))
    which = "any of" if kind in ("category", "flag") else "any value"
    return (f"state your {change.feature}: {which} {values} reaches the goal with this "
            f"plan's other changes (the row has no {change.feature}; stating one within the "
            f"rules costs {change.cost:.3g}, whatever the value)")


def _outcome(model, value: float) -> str:
    return f"probability {value:.3f}" if model.link == "logit" else f"prediction {value:,.4g}"


def change_rows(model, plan) -> tuple[list[tuple[str, str, str, str]], list[Any]]:
    """A plan's changes as (feature, now -> planned, by, cost) rows, and the sentences
    read under the table (a value to state, a caution about a sparse tail)."""
    costs = number_texts([change.cost for change in plan.changes], significant=3)
    rows, notes = [], []
    for change, cost in zip(plan.changes, costs, strict=True):
        kind = model.schema.feature(change.feature).kind
        start = NOT_STATED if change.supplied else _number(change.current, kind)
        by = ""
        if change.difference is not None and kind != "flag":
            sign = "+" if change.difference > 0 else "-"
            by = f"{sign}{_number(abs(change.difference), kind)}"
        rows.append((change.feature, f"{start} -> {_number(change.proposed, kind)}", by, cost))
        if change.supplied:
            notes.append(indented(Text(supplied_words(change, kind), style="dim")))
        if change.tail is not None:
            caution = Text(f"caution: {change.tail.text()}", style=palette.CAUTION_STYLE)
            notes.append(indented(caution))
    return rows, notes


def pair_rows(plan) -> list[tuple[str, str]]:
    """The pairwise terms a plan moves as (pair, before -> after) rows, values on the
    model's scale (four decimals)."""
    return [(name, f"{before:+.4f} -> {after:+.4f}") for name, before, after in plan.pairs]


def pair_table(model, plan) -> FittedTable:
    """One line per pairwise term the plan moves: its value before and after the plan (the
    plan's outcome above already includes them)."""
    from recourse.planner import scale

    return FittedTable(f"Pairwise terms it moves ({scale(model)})",
                       [("pair", "left"), ("before -> after", "left")], pair_rows(plan),
                       title_style="")


def result_view(model, result: PlanResult) -> RenderableType:
    """The plans for one row as short readable blocks, then the caution."""
    who = f"Row {result.row_id}" if result.row_id is not None else "This row"
    goal = f"goal: {result.direction.replace('-', ' ')} {result.target:g}"
    lines: list[RenderableType] = [
        Text(f"{who}: {_outcome(model, result.outcome)} ({goal})", style="bold")]
    if result.status == "already":
        lines.append(Text("It already meets the goal; no change is needed."))
    elif result.status in ("outside", "error"):
        lines.append(Text(f"No plan: {result.message}", style="bold"))
    elif result.status == "none":
        lines.append(Text("No plan reaches the goal within the rules.", style="bold"))
        lines.append(Text(f"The best the rules allow: {_outcome(model, result.best_outcome)}."))
        lines += [bullet(reason) for reason in result.binding]
    for number, plan in enumerate(result.plans, start=1):
        lines.append(Text(""))
        lines.append(Text(f"Plan {number}: {plural(plan.count, 'change')}, total cost "
                          f"{plan.total_cost:.3g} -> {_outcome(model, plan.outcome)}",
                          style="bold"))
        rows, notes = change_rows(model, plan)
        lines.append(indented(FittedTable(None, [("feature", "left"), ("now -> planned", "left"),
                                                 ("by", "right"), ("cost", "right")], rows,
                                          mixed=["by"]),
                              2))
        lines += notes
        if plan.pairs:
            lines.append(indented(pair_table(model, plan), 2))
    lines += [Text(""), Text(CAUTION, style="italic")]
    return Group(*lines)
