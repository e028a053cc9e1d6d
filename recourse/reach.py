"""Who can reach the goal across a population: can declined rows reach it, at what cost, and
does that differ between groups? (`recourse reach`)

Works on the planner's outcome rows (one per declined row, see `recourse.batch.outcome_frame`),
whichever engine produced them. The JSON form is read by `glassbox report --recourse`.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import DataError
from glassbox.core.wording import plural, verb
from glassbox.explaining.groups import (
    FOUR_FIFTHS,
    MIN_GROUP,
    group_labels,
    outcomes_by_group,
    size_note,
)
from recourse.choices import HANDED_WORDS
from recourse.tails import TAIL_WORDS

FORMAT = "recourse-reach"
# the kind written as `recourse audit` before the command was renamed; `glassbox report
# --recourse` still reads it, for one release
OLD_FORMAT = "recourse-audit"
VERSION = 1
QUANTILES = (10, 25, 50, 75, 90)
CAUTION = ("Plans are what-ifs computed from a statistical model, not advice and not a promise "
           "of any decision; protected characteristics are never levers, only groupings here. "
           "Defer to local law, fair-lending rules and licensed compliance review.")
GROUP_COLUMNS = ("group", "declined", "with_plan", "share_with_plan", "median_cost",
                 "ratio_to_best", "small", "flagged")


def group_note(min_rows: int = MIN_GROUP) -> str:
    """What the group tables show, and the minimum group size they were judged with."""
    return ("Share of declined rows with a plan, and its ratio to the best-served group's; a "
            f"ratio below {FOUR_FIFTHS:g} is flagged (the four-fifths rule of the US Uniform "
            "Guidelines, 29 CFR 1607.4(D), a customary screen, not a legal finding: local law "
            f"decides). {size_note(min_rows)}")


@dataclass(frozen=True)
class Reach:
    """What the planner found across all declined rows, overall and by group."""

    declined: int
    with_plan: int
    no_plan: int
    misfits: int  # rows the rules do not fit (a step grid too fine for the row, ...)
    cost_quantiles: dict[str, float]  # of the cheapest plan's total cost, rows with a plan
    main_changes: pd.DataFrame  # feature, rows, share (of rows with a plan)
    binding_rules: pd.DataFrame  # rule, rows, share (of rows without a plan)
    groups: dict[str, pd.DataFrame] = field(default_factory=dict)  # column -> GROUP_COLUMNS
    context: dict[str, Any] = field(default_factory=dict)  # goal, files, settings
    min_group: int = MIN_GROUP  # groups with fewer declined rows are shown, not flagged
    outside: int = 0  # rows with a value outside what the model can plan for
    tail_warned: int = 0  # rows whose cheapest plan moves a feature into a sparse, uncertain tail
    handed_off: int = 0  # rows the fast solver handed to the integer program (pairwise terms...)

    @property
    def share_with_plan(self) -> float:
        return self.with_plan / self.declined if self.declined else math.nan


def _counted(values: pd.Series, name: str, of: int) -> pd.DataFrame:
    """How often each value occurs (blanks left out), the most frequent first, ties by name."""
    values = values[values.astype(str) != ""]
    counts = values.value_counts()
    order = sorted(counts.index, key=lambda key: (-counts[key], str(key)))
    return pd.DataFrame({name: [str(k) for k in order],
                         "rows": [int(counts[k]) for k in order],
                         "share": [counts[k] / of if of else math.nan for k in order]},
                        columns=[name, "rows", "share"])


def _quantiles(costs: pd.Series) -> dict[str, float]:
    if costs.empty:
        return {}
    return {f"{q}%": float(np.percentile(costs.to_numpy(dtype=float), q)) for q in QUANTILES}


def by_group(outcomes: pd.DataFrame, column: str, threshold: float = FOUR_FIFTHS,
             min_rows: int = MIN_GROUP) -> pd.DataFrame:
    """Per group of `column`: declined rows, rows with a plan and their share, the median
    cost of the cheapest plan, and the share's ratio to the best-served group's (flagged
    below four-fifths, the customary screen of 29 CFR 1607.4(D); local law decides); a
    group of fewer than `min_rows` declined rows is `small`: shown, never flagged."""
    if column not in outcomes:
        raise DataError(f"--by {column}: no such column among the planned rows (columns: "
                        f"{', '.join(c for c in outcomes.columns)})")
    labels = group_labels(outcomes[column]).reset_index(drop=True)
    planned = (outcomes["status"] == "plans").to_numpy()
    table = outcomes_by_group(labels, planned, threshold=threshold, min_rows=min_rows)
    costs = pd.Series(outcomes["total_cost"].to_numpy(dtype=float)).where(planned)
    medians = costs.groupby(labels.map(str)).median()
    return pd.DataFrame({
        "group": table["group"], "declined": table["rows"],
        "with_plan": table["favourable_rows"], "share_with_plan": table["favourable_share"],
        "median_cost": table["group"].map(medians).to_numpy(dtype=float),
        "ratio_to_best": table["impact_ratio"], "small": table["small"],
        "flagged": table["flagged"],
    }, columns=list(GROUP_COLUMNS))


def reach(outcomes: pd.DataFrame, by: Sequence[str] = (),
          context: Mapping[str, Any] | None = None, min_group: int = MIN_GROUP) -> Reach:
    """Summarise outcome rows: shares, cost quantiles, main changes, binding rules, groups
    (a group of fewer than `min_group` declined rows is shown but not flagged)."""
    _check_counted_once(outcomes)
    status = outcomes["status"].astype(str)
    planned = outcomes[status == "plans"]
    stuck = outcomes[status == "none"]
    misfits = int((status == "error").sum())
    outside = int((status == "outside").sum())
    if len(planned) + len(stuck) + misfits + outside != len(outcomes):
        raise DataError(f"the reach summary's counts do not add up: {len(planned)} with a plan + "
                        f"{len(stuck)} without + {misfits} misfits + {outside} outside "
                        f"!= {len(outcomes)} declined rows")
    return Reach(
        declined=len(outcomes), with_plan=len(planned), no_plan=len(stuck),
        misfits=misfits,
        cost_quantiles=_quantiles(planned["total_cost"]),
        main_changes=_counted(planned["main_change"], "feature", len(planned)),
        binding_rules=_counted(stuck["binding_rule"], "rule", len(stuck)),
        groups={column: by_group(outcomes, column, min_rows=min_group) for column in by},
        context=dict(context or {}), min_group=min_group,
        outside=outside,
        tail_warned=int((planned["tail_warnings"] > 0).sum()),
        handed_off=int((outcomes["handed_off"].fillna("").astype(str) != "").sum())
        if "handed_off" in outcomes else 0,
    )


STATUSES = ("plans", "none", "error", "outside")  # what a declined row's outcome can be
RESUME_COUNTS = (("parts_kept", "parts kept from an earlier run"),
                 ("parts_replanned", "parts planned again (a failed check)"),
                 ("files_ignored", "files ignored (not in the manifest)"))


def run_context(model: Any, rules: Any, *, model_file: Path, data: Path,
                mutability_file: Path, engine: str, run: Any, resume: bool) -> dict[str, Any]:
    """What the summary was made from: the files (and their SHA-256, which `glassbox report
    --recourse` checks), the goal in words and numbers, the engine, and on resume how many
    parts were kept, planned again or ignored (`run` is a `recourse.scale.ScaleRun`)."""
    from glassbox.core.provenance import file_sha256

    goal, target = rules.goal, model.schema.target
    what = (f"a probability of {target.column} = {target.positive}"
            if model.link == "logit" else f"a predicted {target.column}")
    context = {"model_file": str(model_file), "model_file_sha256": file_sha256(model_file),
               "data_file": str(data), "data_file_sha256": file_sha256(data),
               "mutability_file": str(mutability_file),
               "goal": f"{what} {goal.direction.replace('-', ' ')} {goal.target:g}",
               "goal_direction": goal.direction, "goal_target": goal.target,
               "margin": goal.margin, "engine": engine, "partitions": run.partitions}
    if resume:
        context["resume"] = {"parts_kept": run.partitions - len(run.planned),
                             "parts_replanned": run.replanned, "files_ignored": run.ignored}
    return context


def _check_counted_once(outcomes: pd.DataFrame) -> None:
    """Each declined row once (by its `row` number, when the outcomes have one), each with
    a known status; otherwise the summary would count some rows twice or not at all."""
    if "row" in outcomes:
        repeated = outcomes["row"][outcomes["row"].duplicated()]
        if len(repeated):
            shown = ", ".join(str(int(r) + 1) for r in repeated.unique()[:10])
            raise DataError(f"{plural(repeated.nunique(), 'declined row')} "
                            f"{verb(repeated.nunique(), 'appears', 'appear')} more than once among "
                            f"the outcomes (data rows {shown}); each must be counted once")
    status = outcomes["status"].astype(str)
    unknown = sorted(set(status) - set(STATUSES))
    if unknown:
        raise DataError(f"{plural(int((~status.isin(STATUSES)).sum()), 'outcome row')} with a "
                        f"status "
                        f"that is not one of {', '.join(STATUSES)} "
                        f"({', '.join(map(repr, unknown[:5]))})")


def summary_table(result: Reach) -> pd.DataFrame:
    """The headline numbers as (measure, value) rows."""
    rows = [("declined rows", result.declined), ("with a plan", result.with_plan),
            ("share with a plan", result.share_with_plan),
            ("no plan within the rules", result.no_plan),
            ("rules do not fit the row", result.misfits),
            ("value outside what the model can plan for", result.outside),
            (TAIL_WORDS, result.tail_warned)]
    if result.handed_off:  # slower, still exact: said when it happened
        rows.append((HANDED_WORDS, result.handed_off))
    rows += [(f"cheapest plan cost, {name}", value)
             for name, value in result.cost_quantiles.items()]
    resumed = result.context.get("resume")
    if isinstance(resumed, Mapping):
        rows += [(f"resume: {words}", resumed[key]) for key, words in RESUME_COUNTS
                 if key in resumed]
    return pd.DataFrame(rows, columns=["measure", "value"])


# ---------------------------------------------------------------- files

def _records(table: pd.DataFrame) -> list[dict[str, Any]]:
    def plain(value: Any) -> Any:
        if isinstance(value, float | np.floating):
            return None if not math.isfinite(value) else float(value)
        if isinstance(value, np.integer):
            return int(value)
        if isinstance(value, np.bool_):
            return bool(value)
        return value

    return [{k: plain(v) for k, v in row.items()} for row in table.to_dict(orient="records")]


def to_dict(result: Reach) -> dict[str, Any]:
    """Plain data for the JSON file (`glassbox report --recourse` reads it)."""
    return {
        "format": FORMAT, "version": VERSION, "context": result.context,
        "summary": {"declined": result.declined, "with_plan": result.with_plan,
                    "share_with_plan": None if not result.declined
                    else result.share_with_plan,
                    "no_plan": result.no_plan, "misfits": result.misfits,
                    "outside": result.outside, "tail_warned": result.tail_warned,
                    "handed_off": result.handed_off},
        "cost_quantiles": result.cost_quantiles,
        "main_changes": _records(result.main_changes),
        "binding_rules": _records(result.binding_rules),
        "groups": {column: _records(table) for column, table in result.groups.items()},
        "min_group": result.min_group,
    }


def to_json(result: Reach) -> str:
    return json.dumps(to_dict(result), indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def to_markdown(result: Reach) -> str:
    """The reach summary as Markdown: headline numbers, main changes, binding rules, groups."""
    from glassbox.core.formats import to_markdown as table_markdown

    parts = ["# Recourse across the declined rows", CAUTION,
             table_markdown(summary_table(result)).strip()]
    if not result.main_changes.empty:
        parts += ["## The change that costs most in each cheapest plan",
                  table_markdown(result.main_changes).strip()]
    if not result.binding_rules.empty:
        parts += ["## Rows without a plan: the rule that binds most",
                  table_markdown(result.binding_rules).strip()]
    for column, table in result.groups.items():
        parts += [f"## By {column}", group_note(result.min_group),
                  table_markdown(table).strip()]
    return "\n\n".join(parts) + "\n"
