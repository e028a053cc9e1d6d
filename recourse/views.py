"""The planner's results for the terminal: rich renderables built from the library's data."""

from __future__ import annotations

import pandas as pd
from rich.console import Group, RenderableType
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

from glassbox.explaining.groups import flag_caption, flag_words
from glassbox.publishing.render import frame_table
from recourse import reach
from recourse.batch import NOT_STATED
from recourse.planner import CAUTION, PlanResult
from recourse.supply import accepted_words


def audit_view(result: reach.Reach) -> RenderableType:
    """The audit's tables for the terminal, then the caution."""
    parts: list[RenderableType] = [
        Text(f"Recourse for the declined rows ({result.context.get('goal', 'the goal')})",
             style="bold"),
        frame_table(reach.summary_table(result))]
    if not result.main_changes.empty:
        parts.append(frame_table(result.main_changes,
                                 title="The change that costs most in each cheapest plan"))
    if not result.binding_rules.empty:
        parts.append(frame_table(result.binding_rules,
                                 title="Rows without a plan: the rule that binds most"))
    for column, table in result.groups.items():
        shown = pd.DataFrame({
            "group": table["group"], "rows": table["declined"],
            "planned": table["with_plan"],
            "share": [f"{100 * v:.1f}%" for v in table["share_with_plan"]],
            "median cost": [f"{v:.3g}" if v == v else "" for v in table["median_cost"]],
            "ratio": [f"{v:.3f}" if v == v else "" for v in table["ratio_to_best"]],
            "flagged": flag_words(table["flagged"], table["small"])})
        title = f"By {column}: " + flag_caption(table["group"], table["flagged"],
                                                table["small"], result.min_group)
        parts.append(frame_table(shown, title=title))
    if result.groups:
        parts.append(Text(reach.group_note(result.min_group)))
    parts.append(Text(CAUTION, style="italic"))
    return Group(*parts)


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
        for reason in result.binding:  # wrapped lines stay under the text, not the dash
            bullet = Table.grid(padding=(0, 1))
            bullet.add_row("  -", Text(reason))
            lines.append(bullet)
    for number, plan in enumerate(result.plans, start=1):
        lines.append(Text(""))
        lines.append(Text(f"Plan {number}: {plan.count} change(s), total cost "
                          f"{plan.total_cost:.3g} -> {_outcome(model, plan.outcome)}",
                          style="bold"))
        for change in plan.changes:
            kind = model.schema.feature(change.feature).kind
            start = NOT_STATED if change.supplied else _number(change.current, kind)
            moved = f"{start} -> {_number(change.proposed, kind)}"
            if change.difference is not None and kind != "flag":
                sign = "+" if change.difference > 0 else "-"
                moved += f"  ({sign}{_number(abs(change.difference), kind)})"
            lines.append(Text(f"  {change.feature:<22} {moved:<32} cost {change.cost:.3g}"))
            if change.supplied:
                lines.append(Padding(Text(supplied_words(change, kind), style="dim"),
                                     (0, 0, 0, 4)))
            if change.tail is not None:
                lines.append(Padding(Text(f"caution: {change.tail.text()}", style="yellow"),
                                     (0, 0, 0, 4)))
    lines += [Text(""), Text(CAUTION, style="italic")]
    return Group(*lines)
