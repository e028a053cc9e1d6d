"""The bundled demo data: regenerated deterministically, valid against its schemas.

The demo data is invented; nothing here is an outside check of the method.
"""

from __future__ import annotations

import runpy
import sys

import pytest

from glassbox import fit_model
from glassbox.core.schema import load_schema, prepare, read_table

from .conftest import DEMO


def generate(folder):
    saved = sys.argv
    try:
        module = runpy.run_path(str(DEMO / "make_demo.py"))
        assert module["main"](["--out", str(folder)]) in (0, None)
    finally:
        sys.argv = saved


FILES = ("loans.csv", "listings.csv", "loans.schema.toml", "listings.schema.toml",
         "loans_q2.csv", "loans_q3.csv", "loans_quarters.csv")


def test_same_seed_gives_byte_identical_files(tmp_path):
    generate(tmp_path / "a")
    generate(tmp_path / "b")
    for name in FILES:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


def test_committed_files_are_what_the_generator_writes(tmp_path):
    # adding the later quarters must not have changed a byte of the earlier files
    generate(tmp_path)
    for name in FILES:
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), name


def test_later_quarters_hold_the_changes_the_demo_describes():
    # constructed truth (demo_data/README.md): the downturn lowers revenue in both later
    # quarters, the feed fault zeroes late payments in the third, a new sector appears,
    # and the third quarter's outcomes have not arrived
    development = read_table(DEMO / "loans.csv")
    second, third = (read_table(DEMO / f"loans_q{q}.csv") for q in (2, 3))
    both = read_table(DEMO / "loans_quarters.csv")
    for quarter in (second, third):
        ratio = quarter["annual_revenue"].median() / development["annual_revenue"].median()
        assert 0.6 < ratio < 0.8
        assert set(quarter["sector"]) - set(development["sector"]) == {"care services"}
    assert (second["late_payments_24m"] > 0).mean() > 0.3
    assert (third["late_payments_24m"] == 0).all()
    assert "defaulted" in second.columns and "defaulted" not in third.columns
    assert list(both["quarter"].unique()) == ["2026-Q2", "2026-Q3"]
    assert both["defaulted"].isna().sum() == len(third)
    ids = set(development["application_id"])
    assert not ids & set(both["application_id"])
    columns = [c for c in both.columns if c != "quarter"]
    assert both.loc[both["quarter"] == "2026-Q2", columns].reset_index(drop=True).equals(second)


def test_later_quarters_validate_against_the_schema():
    schema = load_schema(DEMO / "loans.schema.toml")
    assert len(prepare(read_table(DEMO / "loans_q2.csv"), schema).target) == 2500
    third = prepare(read_table(DEMO / "loans_q3.csv"), schema, require_target=False)
    assert len(third.features) == 2500


@pytest.mark.parametrize("name, target_rate", [("loans", 0.148), ("listings", 0.312)])
def test_committed_files_validate_and_have_documented_rates(name, target_rate):
    frame = read_table(DEMO / f"{name}.csv")
    schema = load_schema(DEMO / f"{name}.schema.toml")
    prepared = prepare(frame, schema)
    assert prepared.target.mean() == pytest.approx(target_rate, abs=0.001)  # demo_data/README.md
    model = fit_model(frame, schema, "sparse")
    assert len(model.terms) == len(schema.used_features)
