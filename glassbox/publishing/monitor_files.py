"""A monitoring result as files: one JSON document (every table) and one CSV (the features
with their period's summary beside them).

The JSON document starts with `"format": "glassbox-monitoring"` so `files.file_kind`
recognises it and no command writes over it unasked. Nothing in either file depends on
the engine, the chunk size or the time of day: the same inputs give the same bytes.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import pandas as pd

from glassbox.core.formats import _json_value, to_csv
from glassbox.publishing.monitor_view import CAUTION

if TYPE_CHECKING:
    from glassbox.explaining.monitor import Monitoring

FORMAT = "glassbox-monitoring"
VERSION = 1
TABLES = ("summary", "features", "bins", "score_bins", "new_levels", "outcomes", "pairs")
# the period summary's columns that go beside each feature row in the CSV, renamed so a
# column of the period never reads as one of the feature
PERIOD_COLUMNS = {"rows": "period_rows", "scored_rows": "period_scored_rows",
                  "unscored_rows": "period_unscored_rows", "score_change": "score_change",
                  "score_psi": "score_psi", "score_p_value": "score_p_value",
                  "score_flag": "score_flag", "score_rule": "score_rule"}


def records(table: pd.DataFrame | None) -> list[dict[str, Any]] | None:
    """A table as JSON records: NaN as null, numpy numbers as plain ones."""
    if table is None:
        return None
    return [{str(key): _json_value(value) for key, value in row.items()}
            for row in table.to_dict(orient="records")]


def to_document(monitoring: Monitoring, context: Mapping[str, Any] | None = None
                ) -> dict[str, Any]:
    """The JSON document: format and version first, then what was compared, the tables."""
    document: dict[str, Any] = {
        "format": FORMAT, "version": VERSION,
        "context": dict(context or {}),
        "model_checksum": monitoring.model_checksum,
        "baseline_source": monitoring.baseline_source,
        "development_rows": int(monitoring.development_rows),
        "periods": [str(period) for period in monitoring.periods],
        "caution": CAUTION,
    }
    for name in TABLES:
        if name == "pairs" and monitoring.pairs is None:
            continue  # a model without pairs: the document as before
        document[name] = records(getattr(monitoring, name, None))
    return document


def to_json(monitoring: Monitoring, context: Mapping[str, Any] | None = None) -> str:
    return json.dumps(to_document(monitoring, context), indent=1, ensure_ascii=False,
                      allow_nan=False) + "\n"


def features_with_periods(monitoring: Monitoring) -> pd.DataFrame:
    """The features table, each row with its period's rows, score PSI, flag and change."""
    wanted = [name for name in PERIOD_COLUMNS if name in monitoring.summary.columns]
    periods = monitoring.summary[["period", *wanted]].rename(columns=PERIOD_COLUMNS)
    features = monitoring.features
    joined = features.merge(periods, on="period", how="left", validate="many_to_one")
    first = ["period", *PERIOD_COLUMNS.values()]
    first = [name for name in first if name in joined.columns]
    return joined[first + [c for c in features.columns if c not in first]]


def to_monitoring_csv(monitoring: Monitoring) -> str:
    return to_csv(features_with_periods(monitoring))
