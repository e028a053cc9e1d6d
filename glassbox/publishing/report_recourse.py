"""The audit report's recourse section, from a `recourse reach --format json` file.

glassbox does not import the planner: it reads the reach summary's JSON document (format
"recourse-reach", version 1) and lays its tables out as report blocks. A file written before
the command was renamed (`recourse audit`, format "recourse-audit", the same document) is
still read, for one release.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any

import pandas as pd

from glassbox.core import structure
from glassbox.core.errors import DataError
from glassbox.core.files import read_json
from glassbox.core.provenance import file_sha256
from glassbox.core.schema import is_number
from glassbox.explaining.groups import (
    MIN_GROUP,
    compare_groups,
    flag_caption,
    flag_words,
    size_note,
)
from glassbox.publishing.report import Paragraph, Section, Table

FORMAT = "recourse-reach"
OLD_FORMAT = "recourse-audit"  # `recourse audit` before the rename: read for one release
VERSION = 1
TITLE = "Recourse for the declined rows"


def read_reach(path: str | Path) -> dict[str, Any]:
    """Read and check a recourse reach file (or one written by the old name, `recourse
    audit`, for one release); a clear one-line error if it is not one."""
    document = read_json(path, "recourse reach file", DataError)
    if not isinstance(document, dict) or document.get("format") not in (FORMAT, OLD_FORMAT):
        raise DataError(f"{path} is not a recourse reach file (write one with "
                        "`recourse reach ... --out FILE.json`)")
    if document.get("version") != VERSION:
        raise DataError(f"{path}: recourse reach version {document.get('version')!r}; this "
                        f"glassbox reads version {VERSION}")
    where = f"recourse reach file {path}"
    structure.check(structure.REACH, document, where, DataError)
    summary = document["summary"]
    counted = (summary["with_plan"] + summary["no_plan"] + summary.get("misfits", 0)
               + summary.get("outside", 0))
    if counted > summary["declined"]:
        raise structure.problem(where, "summary", f"counts {counted} rows with a plan, without "
                                f"one, misfit or outside, more than its "
                                f"{summary['declined']} declined rows", DataError)
    return document


GOAL_WORDS = {"lower": "at most", "higher": "at least"}  # the goal that matches `better`


def check_reach(document: dict[str, Any], reach_name: str, *, model_file: str | Path | None,
                data_file: str | Path | None, better: str, cutoff: float) -> None:
    """Refuse a reach summary that was not made with this model file, on this data file, for the
    goal this report's cut-off states: its tables would describe other rows."""
    context = document.get("context") or {}
    remake = "; remake it with `recourse reach ... --out FILE.json`"
    for key, what in (("model_file_sha256", "model file"), ("data_file_sha256", "data file"),
                      ("goal", "goal")):
        if not context.get(key):
            raise DataError(f"{reach_name} records no {what}, so it cannot be checked "
                            f"against this report{remake}")
    for key, given, what in (("model_file_sha256", model_file, "model file"),
                             ("data_file_sha256", data_file, "data file")):
        if given is None or not Path(given).is_file():
            raise DataError(f"{reach_name} can only be checked against the {what} it was made "
                            f"with: give the report that {what}")
        if context[key] != file_sha256(given):
            raise DataError(f"{reach_name} was made with another {what} than "
                            f"{Path(given).name} (their SHA-256 differ)")
    goal = str(context["goal"])
    expected = f"{GOAL_WORDS[better]} {cutoff:g}"
    if "goal_direction" in context and "goal_target" in context:  # files since the field
        same = (str(context["goal_direction"]).replace("-", " ") == GOAL_WORDS[better]
                and is_number(context["goal_target"])
                and math.isclose(float(context["goal_target"]), cutoff, rel_tol=1e-12))
    else:  # older files record the goal as words only: read its last words
        found = re.search(r"\b(at most|at least) (\S+)$", goal)
        same = found is not None and found.group(0) == expected
    if not same:
        raise DataError(f"{reach_name} was made for the goal '{goal}', but this report's "
                        f"cut-off makes favourable '{expected}': give the report the "
                        "file's cut-off (--cutoff), or remake the file for this one")


def _share(value: Any) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    return f"{100 * float(value):.1f}%"


def _number(value: Any) -> str:
    return "" if value is None or not math.isfinite(float(value)) else f"{float(value):.3g}"


def recourse_section(document: dict[str, Any], unfavourable_rows: int | None = None,
                     cutoff: float | None = None, min_group: int = MIN_GROUP) -> Section:
    """Shares with a plan, cost quantiles, main changes, binding rules and groups.

    `unfavourable_rows` is how many rows the report's other tables place on the
    unfavourable side of its `cutoff`; the section says whether the summary's declined
    rows are those rows. Groups of fewer than `min_group` declined rows are judged as the
    report's own group tables are (shown, not flagged), from the summary's counts.
    """
    summary = document["summary"]
    context = document.get("context", {})
    goal = context.get("goal", "the goal of the mutability file")
    declined = int(summary["declined"])
    if unfavourable_rows is None:
        same = ""
    elif unfavourable_rows == declined:
        same = (f" These are the {declined:,} rows the tables above place on the "
                f"unfavourable side of the cut-off, {cutoff:g}.")
    else:
        same = (f" The reach summary counted {declined:,} rows as declined, where the tables above "
                f"place {unfavourable_rows:,} rows on the unfavourable side of the same "
                f"cut-off, {cutoff:g}: read the two counts with care.")
    intro = (f"For each of the {declined:,} declined rows the planner looked for "
             f"the cheapest changes, within the rules of the mutability file, that reach "
             f"{goal}.{same} {summary['with_plan']:,} rows "
             f"({_share(summary['share_with_plan'])}) "
             f"have a plan; {summary['no_plan']:,} have none within the rules"
             + (f"; the rules do not fit {summary['misfits']:,}" if summary.get("misfits")
                else "")
             + (f"; {summary['outside']:,} have a value outside what the model can plan for"
                if summary.get("outside") else "")
             + (f"; {summary['tail_warned']:,} cheapest plans move a feature into a sparse "
                "tail of the training data where the model's band is wide"
                if summary.get("tail_warned") else "")
             + (f"; {summary['handed_off']:,} rows were planned by the general integer program "
                "instead of the fast solver (pairwise terms of the model, or links and level "
                "bounds between features; slower, just as exact)" if summary.get("handed_off")
                else "")
             + ". Plans are model what-ifs, not advice or a promise; protected "
               "characteristics are never levers, only groupings here.")
    blocks: list[Any] = [Paragraph(intro)]
    if document["cost_quantiles"]:
        costs = pd.DataFrame({"quantile": list(document["cost_quantiles"]),
                              "cost of the cheapest plan": [
                                  _number(v) for v in document["cost_quantiles"].values()]})
        blocks.append(Table(costs, "Cost of the cheapest plan, rows with a plan"))
    if document["main_changes"]:
        main = pd.DataFrame(document["main_changes"])
        blocks.append(Table(pd.DataFrame({
            "feature": main["feature"], "rows": main["rows"],
            "share": [_share(v) for v in main["share"]]}),
            "The change that costs most in each cheapest plan"))
    if document["binding_rules"]:
        rules = pd.DataFrame(document["binding_rules"])
        blocks.append(Table(pd.DataFrame({
            "rule": rules["rule"], "rows": rules["rows"],
            "share": [_share(v) for v in rules["share"]]}),
            "Rows without a plan: the rule that binds most"))
    if document["groups"]:
        blocks.append(Paragraph(
            "By group: the share of declined rows with a plan, and its ratio to the "
            "best-served group's share; a ratio below 0.8 is flagged, after the four-fifths "
            "rule of the US Uniform Guidelines, 29 CFR 1607.4(D), a customary screen, not a "
            f"legal finding: local law decides. {size_note(min_group)}"))
    for column, records in document["groups"].items():
        table = pd.DataFrame(records)
        judged = compare_groups(pd.DataFrame({"rows": table["declined"],
                                              "favourable_rows": table["with_plan"]}),
                                min_rows=min_group)
        caption = f"{column}: " + flag_caption(table["group"], judged["flagged"],
                                               judged["small"], min_group)
        blocks.append(Table(pd.DataFrame({
            "group": table["group"], "declined": table["declined"],
            "with a plan": table["with_plan"],
            "share with a plan": [_share(v) for v in table["share_with_plan"]],
            "median cost": [_number(v) for v in table["median_cost"]],
            "ratio to best": [_number(v) for v in judged["impact_ratio"]],
            "below 0.8": flag_words(judged["flagged"], judged["small"])}), caption))
    return Section(TITLE, tuple(blocks))
