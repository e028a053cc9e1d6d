"""The audit report's recourse section, from a `recourse audit --format json` file.

glassbox does not import the planner: it reads the audit's JSON document (format
"recourse-audit", version 1) and lays its tables out as report blocks.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import pandas as pd

from glassbox.errors import DataError
from glassbox.files import read_json
from glassbox.groups import MIN_GROUP, compare_groups, flag_caption, flag_words, size_note
from glassbox.provenance import file_sha256
from glassbox.report import Paragraph, Section, Table

FORMAT = "recourse-audit"
VERSION = 1
TITLE = "Recourse for the declined rows"


def read_audit(path: str | Path) -> dict[str, Any]:
    """Read and check a recourse audit file; a clear one-line error if it is not one."""
    document = read_json(path, "recourse audit file", DataError)
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        raise DataError(f"{path} is not a recourse audit file (write one with "
                        "`recourse audit ... --format json --out FILE`)")
    if document.get("version") != VERSION:
        raise DataError(f"{path}: recourse audit version {document.get('version')!r}; this "
                        f"glassbox reads version {VERSION}")
    for key in ("summary", "cost_quantiles", "main_changes", "binding_rules", "groups"):
        if key not in document:
            raise DataError(f"{path}: recourse audit file lacks '{key}'")
    return document


def check_same_model(document: dict[str, Any], model_file: str | Path | None,
                     audit_name: str) -> None:
    """The audit must have planned with this very model file (both record its SHA-256)."""
    planned_with = document.get("context", {}).get("model_file_sha256")
    if model_file is None or planned_with is None:
        return
    if planned_with != file_sha256(model_file):
        raise DataError(f"{audit_name} was made with another model than model file "
                        f"{Path(model_file).name} (their SHA-256 differ)")


def _share(value: Any) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    return f"{100 * float(value):.1f}%"


def _number(value: Any) -> str:
    return "" if value is None or not math.isfinite(float(value)) else f"{float(value):.3g}"


def recourse_section(document: dict[str, Any], min_group: int = MIN_GROUP) -> Section:
    """Shares with a plan, cost quantiles, main changes, binding rules and groups; groups of
    fewer than `min_group` declined rows are judged as the report's own group tables are
    (shown, not flagged), from the audit's counts."""
    summary = document["summary"]
    context = document.get("context", {})
    goal = context.get("goal", "the goal of the mutability file")
    intro = (f"For each of the {summary['declined']:,} declined rows the planner looked for "
             f"the cheapest changes, within the rules of the mutability file, that reach "
             f"{goal}. {summary['with_plan']:,} rows ({_share(summary['share_with_plan'])}) "
             f"have a plan; {summary['no_plan']:,} have none within the rules"
             + (f"; the rules do not fit {summary['misfits']:,}" if summary.get("misfits")
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
