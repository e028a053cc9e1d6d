"""The population audit of recourse.

Outside reference: a direct computation over the planner's own per-row results (counted here
with plain Python and numpy, independently of the audit's code), on the invented demo loans;
the four-fifths flag follows 29 CFR 1607.4(D) ("less than four-fifths").
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.errors import DataError
from recourse import audit
from recourse.batch import outcome_frame, plan_many
from recourse.mutability import load_mutability

from .conftest import DEMO


@pytest.fixture(scope="module")
def planned(loans, loans_schema):
    model = fit_model(loans, loans_schema, "sparse")
    rules = load_mutability(DEMO / "loans.mutability.toml", model)
    rows = loans.head(600)
    results = plan_many(model, rows, rules, n_plans=1)
    declined = np.flatnonzero(model.score(rows) > rules.goal.threshold(model.link))
    outcomes = outcome_frame(results, model)
    for column in ("owner_age_band", "sector"):
        outcomes[column] = rows[column].to_numpy()[declined]
    return model, rows.iloc[declined].reset_index(drop=True), results, outcomes


def test_shares_and_quantiles_equal_a_direct_count(planned):
    _, rows, results, outcomes = planned
    found = audit.audit(outcomes, by=["owner_age_band", "sector"])
    with_plan = [r for r in results if r.status == "plans"]
    assert found.declined == len(results) > 20
    assert found.with_plan == len(with_plan) and found.no_plan == sum(
        r.status == "none" for r in results)
    assert found.share_with_plan == pytest.approx(len(with_plan) / len(results))
    costs = np.array([r.plans[0].total_cost for r in with_plan])
    for q in audit.QUANTILES:
        assert found.cost_quantiles[f"{q}%"] == pytest.approx(np.percentile(costs, q))
    main = {}
    for result in with_plan:
        change = max(result.plans[0].changes, key=lambda c: c.cost).feature
        main[change] = main.get(change, 0) + 1
    assert dict(zip(found.main_changes["feature"], found.main_changes["rows"],
                    strict=True)) == main
    assert list(found.main_changes["rows"]) == sorted(main.values(), reverse=True)


def test_group_shares_ratios_and_flags_equal_a_direct_count(planned):
    _, rows, results, outcomes = planned
    found = audit.audit(outcomes, by=["sector"]).groups["sector"]
    shares, medians = {}, {}
    for sector in sorted(set(rows["sector"])):
        mine = [r for r, s in zip(results, rows["sector"], strict=True) if s == sector]
        planned_here = [r for r in mine if r.status == "plans"]
        shares[sector] = len(planned_here) / len(mine)
        medians[sector] = (np.median([r.plans[0].total_cost for r in planned_here])
                           if planned_here else np.nan)
    best = max(shares.values())
    assert list(found["group"]) == sorted(shares)
    for _, line in found.iterrows():
        assert line["share_with_plan"] == pytest.approx(shares[line["group"]])
        assert line["ratio_to_best"] == pytest.approx(shares[line["group"]] / best)
        assert line["flagged"] == (shares[line["group"]] / best < 0.8)
        assert line["median_cost"] == pytest.approx(medians[line["group"]], nan_ok=True)


def test_binding_rules_are_counted_among_rows_without_a_plan():
    # constructed truth: three rows without a plan, two bound by one rule
    outcomes = pd.DataFrame({
        "status": ["plans", "none", "none", "none", "error"],
        "total_cost": [3.0, np.nan, np.nan, np.nan, np.nan],
        "main_change": ["debt", "", "", "", ""],
        "binding_rule": ["", "bounds on debt", "limit on changes", "bounds on debt", ""],
        "region": ["north", "north", "south", "south", "south"],
    })
    found = audit.audit(outcomes, by=["region"])
    assert found.misfits == 1 and found.no_plan == 3
    assert found.binding_rules.to_dict(orient="list") == {
        "rule": ["bounds on debt", "limit on changes"], "rows": [2, 1],
        "share": [pytest.approx(2 / 3), pytest.approx(1 / 3)]}
    region = found.groups["region"].set_index("group")
    # by hand: north 1 of 2 with a plan (0.5), south 0 of 3 (0.0): ratio 0 / 0.5 = 0, flagged
    assert region.loc["north", "share_with_plan"] == 0.5
    assert region.loc["south", "ratio_to_best"] == 0.0 and region.loc["south", "flagged"]


def test_json_round_trip_and_markdown(planned):
    *_, outcomes = planned
    found = audit.audit(outcomes, by=["owner_age_band"], context={"model": "m.json"})
    document = json.loads(audit.to_json(found))
    assert document["format"] == audit.FORMAT and document["version"] == audit.VERSION
    assert document["summary"]["declined"] == found.declined
    assert len(document["groups"]["owner_age_band"]) == 4
    text = audit.to_markdown(found)
    assert "# Recourse across the declined rows" in text and "not advice" in text
    assert "## By owner_age_band" in text and "29 CFR 1607.4(D)" in text


def test_by_a_missing_column_is_a_clear_error(planned):
    *_, outcomes = planned
    with pytest.raises(DataError, match="--by region: no such column"):
        audit.audit(outcomes, by=["region"])


def test_the_report_carries_the_audit_and_refuses_another_models(planned, tmp_path):
    from glassbox import artifact, report
    from glassbox.provenance import file_sha256

    model, rows, _, outcomes = planned
    model_file = tmp_path / "model.json"
    artifact.save(model, model_file)
    data_file = tmp_path / "rows.csv"
    rows.to_csv(data_file, index=False)
    found = audit.audit(outcomes, by=["owner_age_band"],
                        context={"model_file_sha256": file_sha256(model_file),
                                 "data_file_sha256": file_sha256(data_file),
                                 "goal": "a probability of defaulted at most 0.3"})
    audit_file = tmp_path / "audit.json"
    audit_file.write_text(audit.to_json(found), encoding="utf-8")
    document = report.build_report(model, rows, model_file=model_file, cutoff=0.3,
                                   recourse_file=audit_file, source=str(data_file))
    assert document.headings[-1] == "Recourse for the declined rows"
    page = report.to_html(document)
    assert "share with a plan" in page and "29 CFR 1607.4(D)" in page
    other = tmp_path / "other.json"
    artifact.save(fit_model(rows.assign(defaulted=["yes", "no"] * (len(rows) // 2)
                                        + ["yes"] * (len(rows) % 2)),
                            model.schema, "sparse"), other)
    with pytest.raises(DataError, match="made with another model"):
        report.build_report(model, rows, model_file=other, recourse_file=audit_file,
                            source=str(data_file))
    (tmp_path / "plain.json").write_text('{"format": "something else"}', encoding="utf-8")
    with pytest.raises(DataError, match="not a recourse audit file"):
        report.build_report(model, rows, model_file=model_file,
                            recourse_file=tmp_path / "plain.json")


# ---------------------------------------------------------------- the command

def test_audit_command_writes_json_that_the_report_reads(tmp_path):
    import time

    from typer.testing import CliRunner

    from glassbox.cli import app as glassbox_app
    from recourse.cli import app

    runner = CliRunner()
    model_file = tmp_path / "loans.json"
    fitted = runner.invoke(glassbox_app, ["fit", str(DEMO / "loans.csv"), "--schema",
                                          str(DEMO / "loans.schema.toml"), "--out",
                                          str(model_file)])
    assert fitted.exit_code == 0, fitted.output
    rows = tmp_path / "rows.csv"
    pd.read_csv(DEMO / "loans.csv").head(800).to_csv(rows, index=False)
    common = [str(model_file), "--mutability", str(DEMO / "loans.mutability.toml"),
              "--data", str(rows)]
    out = tmp_path / "audit.json"
    result = runner.invoke(app, ["audit", *common, "--by", "owner_age_band", "--by",
                                 "sector", "--format", "json", "--out", str(out)])
    assert result.exit_code == 0, result.output
    document = json.loads(out.read_text(encoding="utf-8"))
    assert set(document["groups"]) == {"owner_age_band", "sector"}
    assert document["context"]["goal"] == "a probability of defaulted = yes at most 0.3"
    shown = runner.invoke(app, ["audit", *common, "--by", "sector"])
    assert shown.exit_code == 0 and "By sector" in shown.stdout and "not advice" in shown.stdout
    report = runner.invoke(glassbox_app, ["report", str(model_file), "--data", str(rows),
                                          "--cutoff", "0.3", "--recourse", str(out), "--out",
                                          str(tmp_path / "report")])
    assert report.exit_code == 0, report.output
    page = (tmp_path / "report" / "report.html").read_text(encoding="utf-8")
    assert "Recourse for the declined rows" in page
    # bad input: each one line and exit status 2
    missing = runner.invoke(app, ["audit", *common, "--by", "region"])
    assert missing.exit_code == 2 and "'region'" in missing.output
    assert len(missing.output.strip().splitlines()) == 1
    start = time.perf_counter()
    unreachable = runner.invoke(app, ["audit", *common, "--engine", "dask", "--scheduler",
                                      "tcp://127.0.0.1:1"])
    assert unreachable.exit_code == 2 and time.perf_counter() - start < 30
    assert "127.0.0.1:1" in unreachable.output
    other = tmp_path / "other.csv"
    pd.read_csv(DEMO / "listings.csv").head(50).to_csv(other, index=False)
    wrong = runner.invoke(app, ["audit", str(model_file), "--mutability",
                                str(DEMO / "loans.mutability.toml"), "--data", str(other)])
    assert wrong.exit_code == 2 and "annual_revenue" in wrong.output
