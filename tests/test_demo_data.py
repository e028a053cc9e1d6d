"""The bundled demo data: regenerated deterministically, valid against its schemas.

The demo data is invented; nothing here is an outside check of the method.
"""

from __future__ import annotations

import runpy
import sys

import pytest

from glassbox import fit_model
from glassbox.schema import load_schema, prepare, read_table

from .conftest import DEMO


def generate(folder):
    saved = sys.argv
    try:
        module = runpy.run_path(str(DEMO / "make_demo.py"))
        assert module["main"](["--out", str(folder)]) in (0, None)
    finally:
        sys.argv = saved


def test_same_seed_gives_byte_identical_files(tmp_path):
    generate(tmp_path / "a")
    generate(tmp_path / "b")
    for name in ("loans.csv", "listings.csv", "loans.schema.toml", "listings.schema.toml"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


@pytest.mark.parametrize("name, target_rate", [("loans", 0.148), ("listings", 0.305)])
def test_committed_files_validate_and_have_documented_rates(name, target_rate):
    frame = read_table(DEMO / f"{name}.csv")
    schema = load_schema(DEMO / f"{name}.schema.toml")
    prepared = prepare(frame, schema)
    assert prepared.target.mean() == pytest.approx(target_rate, abs=0.001)  # demo_data/README.md
    model = fit_model(frame, schema, "sparse")
    assert len(model.terms) == len(schema.used_features)
