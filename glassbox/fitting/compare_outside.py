"""Bring your own black box: a comparison's fold assignment written out, and out-of-fold
scores of an outside model read back in to take the benchmark's place on the same folds.

The fold file has one row per data row: the row's id (the schema's id column, else
`ROW_COLUMN`, the data row number counting from 1) and, per repeat r, `fold_r`, the fold
(from 1) whose models are scored on that row. The scores file has the same id column and
one score column per repeat, `score_r` (with one repeat `score` is accepted too): for each
row, the outside model's probability of the positive class (regression: its prediction)
from a fit on the rows of the other folds of that repeat.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.encoding import label_text
from glassbox.core.errors import DataError, value_text
from glassbox.core.schema import Schema
from glassbox.core.wording import plural
from glassbox.fitting.compare_folds import PREDICTIONS, fold_scores

ROW_COLUMN = "row"  # the id of a data row when the schema names no id column
OUTSIDE_NAME = "your scores"  # the benchmark is then "benchmark (your scores)"
LAYOUT = ("one row per data row: the id column (the schema's id, else \"row\", the data row "
          "number from 1) and one score column per repeat, score_1, score_2, ... (with one "
          "repeat \"score\" will do): each row's out-of-fold probability of the positive "
          "class (regression: prediction) from a model fitted on the other folds of that "
          "repeat, as the --folds-out file assigns them; the file's fold_1, fold_2, ... "
          "columns may be kept, and are then checked against the comparison's folds")
ORIGIN_BUILT_IN = ("fitted by glassbox on each fold's training rows and scored on its test "
                   "rows, like the glass-box models")
ORIGIN_OUTSIDE = ("out-of-fold scores of an outside model, read from the file {name} "
                  "(SHA-256 in provenance.benchmark_scores_sha256) and matched to the rows "
                  "by id; glassbox fitted no benchmark, and trusts that each score comes "
                  "from a model that did not see its row, on the folds the --folds-out file "
                  "gives")
SHOWN_IDS = 3  # how many ids a refusal names


def benchmark_label(benchmark: str, scores_file: str | None) -> str:
    """The benchmark's name in every table: its kind, or that the scores are the user's."""
    return f"benchmark ({OUTSIDE_NAME if scores_file else benchmark})"


def row_ids(frame: pd.DataFrame, schema: Schema, source: str = "the data"
            ) -> tuple[str, list[str]]:
    """(id column name, each row's id as text): the schema's id column, refused when a row
    has none or two rows share one, else the data row numbers counting from 1 (the file's
    rows, also when rows without a target were dropped: `frame.attrs["row_numbers"]`)."""
    name = schema.id_column
    if not name:
        numbers = frame.attrs.get("row_numbers")
        numbers = range(1, len(frame) + 1) if numbers is None else numbers
        return ROW_COLUMN, [str(int(n)) for n in numbers]
    if name not in frame:
        raise DataError(f"{source} has no id column '{name}' (the schema's id)")
    ids = [label_text(v) if not _blank(v) else "" for v in frame[name]]
    blank = [i for i, v in enumerate(ids) if v == ""]
    if blank:
        raise DataError(f"{source}: data row {blank[0] + 1} has no {name}; every row needs "
                        "an id to be matched to outside scores")
    seen: dict[str, int] = {}
    for position, value in enumerate(ids):
        if value in seen:
            raise DataError(f"{source}: data rows {seen[value] + 1} and {position + 1} both "
                            f"have {name} = {value_text(value)}; ids must be unique")
        seen[value] = position
    return name, ids


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, float) and np.isnan(value)) or \
        (isinstance(value, str) and not value.strip()) or value is pd.NA


def fold_table(folds, id_name: str, ids: list[str], repeats: int) -> pd.DataFrame:
    """The fold assignment: per row its id and, per repeat, the fold (from 1) that holds it
    out (every row is in exactly one fold's test rows per repeat)."""
    table = {id_name: ids}
    for repeat in range(repeats):
        column = np.zeros(len(ids), dtype=np.int64)
        for fold_repeat, fold, _, test in folds:
            if fold_repeat == repeat:
                column[test] = fold + 1
        table[f"fold_{repeat + 1}"] = column
    return pd.DataFrame(table)


@dataclass(frozen=True)
class OutsideScores:
    """An outside model's out-of-fold scores, one row per repeat in the data's row order."""

    scores: np.ndarray  # (repeats, rows); NaN only on rows no model is scored on
    file_name: str
    sha256: str


def score_columns(columns: list[str], repeats: int, source: str) -> list[str]:
    """The score column of each repeat, by the documented layout (see `LAYOUT`)."""
    numbered = {c for c in columns if c.startswith("score_")}
    beyond = sorted(c for c in numbered if c not in {f"score_{r}" for r in
                                                     range(1, repeats + 1)})
    if beyond:
        raise DataError(f"{source} has the column {beyond[0]}, but the comparison has "
                        f"{plural(repeats, 'repeat')}: name the score columns score_1 to "
                        f"score_{repeats}")
    if repeats == 1 and "score" in columns:
        if "score_1" in columns:
            raise DataError(f"{source} has both score and score_1; keep one")
        return ["score"]
    wanted = [f"score_{r}" for r in range(1, repeats + 1)]
    missing = [c for c in wanted if c not in columns]
    if missing:
        one = " (or score)" if repeats == 1 else ""
        raise DataError(f"{source} has no column {missing[0]}{one}: {LAYOUT}")
    return wanted


def read_outside_scores(path: str | Path, id_name: str, ids: list[str], task: str,
                        repeats: int, scored: np.ndarray,
                        folds: pd.DataFrame | None = None) -> OutsideScores:
    """Read and check an outside model's scores before any fitting: every data id present
    once and no other, every row a number (in [0, 1] for classification), except rows
    that `scored` (repeats x rows) marks as scored by no model, which may be blank. Fold
    columns kept from the --folds-out file must equal `folds` (`fold_table`)."""
    from glassbox.core.encoding import read_table
    from glassbox.core.formats import suffix_format
    from glassbox.core.provenance import file_sha256

    path = Path(path)
    suffix_format(path, ("csv", "parquet"), "--benchmark-scores", override=False)
    source = f"--benchmark-scores {path}"
    frame = read_table(path)
    columns = [str(c) for c in frame.columns]
    frame.columns = columns
    if id_name not in columns:
        raise DataError(f"{source} has no id column '{id_name}': {LAYOUT}")
    wanted = score_columns(columns, repeats, source)
    given = [label_text(v) if not _blank(v) else "" for v in frame[id_name]]
    position_of: dict[str, int] = {}
    for line, value in enumerate(given):
        if value == "":
            raise DataError(f"{source}: row {line + 1} has no {id_name}")
        if value in position_of:
            raise DataError(f"{source}: {id_name} {value_text(value)} is repeated (rows "
                            f"{position_of[value] + 1} and {line + 1})")
        position_of[value] = line
    known = set(ids)
    extra = [v for v in given if v not in known]
    if extra:
        raise DataError(f"{source}: {plural(len(extra), 'id')} not in the data "
                        f"({_some(extra)}); give scores for the data's rows only")
    missing = [v for v in ids if v not in position_of]
    if missing:
        raise DataError(f"{source}: no row for {plural(len(missing), 'id')} of the data "
                        f"({_some(missing)}); every data row needs a score")
    order = np.array([position_of[v] for v in ids], dtype=np.int64)
    if folds is not None:
        _same_folds(frame.iloc[order].reset_index(drop=True), folds, ids, id_name, source)
    scores = np.full((repeats, len(ids)), np.nan)
    for repeat, column in enumerate(wanted):
        raw = frame[column].iloc[order].reset_index(drop=True)
        scores[repeat] = _numbers(raw, column, ids, id_name, source)
        values = scores[repeat]
        empty = np.isnan(values) & scored[repeat]
        if empty.any():
            first = int(np.flatnonzero(empty)[0])
            raise DataError(f"{source}: {plural(int(empty.sum()), 'row')} without a score in "
                            f"{column} (first: {id_name} {value_text(ids[first])}); every "
                            "row needs one")
        if task == "classification":
            outside = ~np.isnan(values) & ((values < 0.0) | (values > 1.0))
            if outside.any():
                first = int(np.flatnonzero(outside)[0])
                raise DataError(f"{source}: {column} is {values[first]:g} for {id_name} "
                                f"{value_text(ids[first])}; a classification score is a "
                                "probability between 0 and 1")
    return OutsideScores(scores, path.name, file_sha256(path))


def _numbers(raw: pd.Series, column: str, ids: list[str], id_name: str,
             source: str) -> np.ndarray:
    """A score column as floats (blank as NaN); text or an infinity is refused."""
    if raw.dtype == bool:
        raise DataError(f"{source}: {column} holds true/false, not numbers")
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    given = ~np.array([_blank(v) for v in raw], dtype=bool)
    bad = (np.isnan(values) & given) | np.isinf(values)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise DataError(f"{source}: {column} is {value_text(raw.iloc[first])} for {id_name} "
                        f"{value_text(ids[first])}; scores must be finite numbers")
    return values


def _same_folds(frame: pd.DataFrame, folds: pd.DataFrame, ids: list[str], id_name: str,
                source: str) -> None:
    """Refuse fold columns (from a --folds-out file) that differ from the comparison's."""
    kept = [c for c in frame.columns if c.startswith("fold_")]
    for column in kept:
        if column not in folds:
            raise DataError(f"{source} has the column {column}, but the comparison has "
                            f"{plural(len(folds.columns) - 1, 'repeat')}: were the scores "
                            "made on other folds? Use the same --folds, --repeats and --seed")
        given = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)
        differ = given != folds[column].to_numpy(dtype=float)
        if differ.any():
            first = int(np.flatnonzero(differ)[0])
            raise DataError(f"{source}: {column} is {value_text(frame[column].iloc[first])} "
                            f"for {id_name} {value_text(ids[first])}, but this comparison "
                            f"holds that row out in fold {int(folds[column].iloc[first])}: "
                            "the scores were made on other folds; use the same --folds, "
                            "--repeats and --seed")


def _some(values: list[str]) -> str:
    shown = ", ".join(value_text(v) for v in values[:SHOWN_IDS])
    return shown + (", ..." if len(values) > SHOWN_IDS else "")


def scored_rows(folds, rows: int, repeats: int) -> np.ndarray:
    """(repeats, rows): True where some fold scores the row (its test rows, after rows no
    model could score were set aside)."""
    scored = np.zeros((repeats, rows), dtype=bool)
    for repeat, _, _, test in folds:
        scored[repeat, test] = True
    return scored


def outside_records(outside: OutsideScores, folds, target: np.ndarray, task: str,
                    cutoff: float, name: str) -> list[dict[str, Any]]:
    """Per fold, the outside scores of its test rows scored as a fitted benchmark's are."""
    records = []
    for repeat, fold, train, test in folds:
        prediction = outside.scores[repeat, test]
        records.append({"repeat": repeat, "fold": fold, "train_rows": len(train),
                        "test_rows": len(test), "model": name,
                        **fold_scores(task, target[test], prediction, cutoff),
                        PREDICTIONS: np.asarray(prediction, dtype=float)})
    return records
