"""Comparison files: a `glassbox compare --format json` file read back into a `Comparison`,
checked against its declared structure and each metric's range (versions 1 to 3; what an
older file lacks stays None, and `Comparison.absent` names it)."""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Any

import pandas as pd

from glassbox.core import structure
from glassbox.core.errors import DataError, value_text
from glassbox.core.files import read_json
from glassbox.fitting.compare import (
    FORMAT,
    HIGHER_IS_BETTER,
    READ_VERSIONS,
    VERSION,
    Comparison,
    make_headline,
)
from glassbox.fitting.intervals import COST_RANGES, METRIC_RANGES, read_within_ranges

NUMBER_COLUMNS = ("mean", "cost", "lower", "upper", "t", "p_value", "no_skill", "slope",
                  "intercept", "mean_predicted", "observed_rate")


def _version_one_costs(differences: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Version 1 files kept glass-box minus benchmark for every metric: turn that into
    costs (`COST_CONVENTION`), flipping the metrics where higher is better."""
    costs = []
    for row in differences:
        flip = -1.0 if HIGHER_IS_BETTER.get(row.get("metric"), True) else 1.0
        ends = sorted(flip * float(v) if v is not None else math.nan
                      for v in (row.get("lower"), row.get("upper")))
        costs.append({"model": row.get("model"), "metric": row.get("metric"),
                      "cost": flip * float(row["mean"]), "lower": ends[0], "upper": ends[1],
                      "t": None if row.get("t") is None else flip * float(row["t"]),
                      "p_value": row.get("p_value"),
                      "distinguishable": row.get("distinguishable")})
    return costs


def check_tuning(rows: list[dict[str, Any]], source: str) -> None:
    """Each fold's search record adds up: the chosen candidate is one of those tried
    (chosen_candidate <= candidates_tried), no more were tried than the budget allows
    (candidates_tried <= budget), and the list of tried candidates has that length."""
    for number, row in enumerate(rows, start=1):
        where = (f"{source}: settings.benchmark_tuning entry {number} (repeat "
                 f"{value_text(row['repeat'])}, fold {value_text(row['fold'])})")
        chosen, tried, budget = (row["chosen_candidate"], row["candidates_tried"],
                                 row["budget"])
        if not chosen <= tried <= budget:
            raise DataError(f"{where} does not add up: chosen_candidate {value_text(chosen)} "
                            f"<= candidates_tried {value_text(tried)} <= budget "
                            f"{value_text(budget)} should hold")
        if "tried" in row and len(row["tried"]) != tried:
            raise DataError(f"{where} lists {len(row['tried'])} tried candidates but says "
                            f"candidates_tried {value_text(tried)}")


def comparison_from_dict(document: Any, source: str = "the comparison") -> Comparison:
    """Rebuild a `Comparison` from `Comparison.to_dict` output (a comparison JSON file).

    Version 1 files (without the schema, with differences signed glass-box minus
    benchmark) are read too: their differences become costs and their headline is
    written again in today's words from their numbers.
    """
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        raise DataError(f"{source} is not a glassbox comparison file (no \"format\": "
                        f"\"{FORMAT}\")")
    version = document.get("version")
    if version not in READ_VERSIONS or isinstance(version, bool):
        raise DataError(f"{source} is comparison format version {version!r}; this glassbox "
                        f"reads versions {', '.join(map(str, READ_VERSIONS[:-1]))} and "
                        f"{VERSION}")
    structure.check(structure.COMPARISON, document, source, DataError)
    check_tuning(document["settings"].get("benchmark_tuning") or [], source)

    def table(rows: Any) -> pd.DataFrame:
        frame = pd.DataFrame(rows or [])
        for column in NUMBER_COLUMNS:
            if column in frame:
                frame[column] = pd.to_numeric(frame[column], errors="coerce").astype(float)
        return frame

    def optional(key: str) -> pd.DataFrame | None:
        return None if document.get(key) is None else table(document[key])

    try:
        costs = read_within_ranges(_version_one_costs(document["differences"]) if version == 1
                                   else document["costs"], COST_RANGES, "cost", source, "costs")
        models = table(read_within_ranges(document["models"], METRIC_RANGES, "mean", source,
                                          "models")).drop(columns=["t", "p_value"],
                                                          errors="ignore")
        comparison = Comparison(
            task=str(document["task"]), primary=str(document["primary_metric"]),
            headline=str(document["headline"]), models=models, costs=table(costs),
            folds=table(document.get("folds")), sparsity=table(read_within_ranges(
                document.get("sparsity_curve") or [], METRIC_RANGES, "mean", source,
                "sparsity_curve")),
            settings=dict(document["settings"]), provenance=dict(document["provenance"]),
            schema=document.get("schema"), base_rate=document.get("base_rate"),
            flags=optional("no_skill_flags"), calibration=optional("calibration_deciles"),
            calibration_fit=optional("calibration_fit"),
            sparsity_steps=optional("sparsity_steps"),
            pair_curve=None if document.get("pair_curve") is None else table(
                read_within_ranges(document["pair_curve"], METRIC_RANGES, "mean", source,
                                   "pair_curve")),
            version=int(version))
        if version == 1:
            benchmark = f"benchmark ({comparison.settings['benchmark']})"
            comparison = replace(comparison, headline=make_headline(
                models, comparison.costs, comparison.primary, benchmark))
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        raise DataError(f"{source} is incomplete: {type(exc).__name__} {exc}") from None
    for name, frame, keys in (("models", comparison.models, ["model", "metric"]),
                              ("costs", comparison.costs, ["model", "metric"]),
                              ("sparsity_curve", comparison.sparsity, ["max_features", "metric"]),
                              ("pair_curve", comparison.pair_curve
                               if comparison.pair_curve is not None else pd.DataFrame(),
                               ["model", "pairs", "metric"])):
        twice = frame.duplicated(keys) if set(keys) <= set(frame.columns) else []
        if any(twice):
            first = frame[twice].iloc[0]
            raise DataError(f"{source}: {name} holds {keys[0]} {value_text(first[keys[0]])}, "
                            f"metric {value_text(first['metric'])} twice")
    return comparison


def read_comparison(path: str | Path) -> Comparison:
    """Read a comparison JSON file written by `glassbox compare --format json`."""
    document = read_json(path, "comparison file", DataError)
    return comparison_from_dict(document, f"comparison file {path}")
