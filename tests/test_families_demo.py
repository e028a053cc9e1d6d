"""All three families on the invented loan data, against the generator's known truth.

The demo data is drawn from a documented additive truth (demo_data/README.md), so
these checks are constructed truth, not outside references.
"""

from __future__ import annotations

import runpy

import numpy as np
import pytest

from glassbox import fit_model, shapes

from .conftest import DEMO

TRUE_EFFECTS = {
    "late_payments_24m": "late_payments_effect", "years_trading": "years_trading_effect",
    "credit_utilisation": "credit_utilisation_effect",
    "debt_to_revenue": "debt_to_revenue_effect", "annual_revenue": "annual_revenue_effect",
    "amount_requested": "amount_requested_effect", "sector": "sector_effect",
    "premises_owned": "premises_owned_effect",
}


@pytest.fixture(scope="module")
def true_importance(loans):
    generator = runpy.run_path(str(DEMO / "make_demo.py"))
    importance = {}
    for feature, function in TRUE_EFFECTS.items():
        effect = np.asarray(generator[function](loans[feature]), dtype=float)
        importance[feature] = float(np.mean(np.abs(effect - effect.mean())))
    return importance


@pytest.mark.parametrize("family", ["sparse", "spline", "boosted"])
def test_importance_ranking_recovers_the_strongest_true_feature(family, loans, loans_schema,
                                                                 true_importance):
    model = fit_model(loans, loans_schema, family)
    ranking = list(shapes.summary(model)["feature"])
    strongest = max(true_importance, key=true_importance.get)
    assert ranking[0] == strongest
    assert "owner_age_band" not in ranking  # protected: never an input


@pytest.mark.parametrize("family", ["spline", "boosted"])
def test_flexible_families_find_the_u_shape_and_the_threshold(family, loans, loans_schema):
    model = fit_model(loans, loans_schema, family)
    utilisation = model.term("credit_utilisation")
    low, middle, high = utilisation.evaluate(np.array([0.02, 0.3, 0.95]))
    assert low > middle < high  # truth: minimum at 0.3, both ends riskier
    late = model.term("late_payments_24m")
    steps = np.diff(late.evaluate(np.arange(0.0, 6.0)))
    # truth: +0.3 at one late payment, a jump to +2.0 at two, flat after: the largest
    # rise is from one to two (a spline smooths the jump but keeps where it is)
    assert int(np.argmax(steps)) == 1
