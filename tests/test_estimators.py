"""The estimators hold to scikit-learn's own estimator checks (the reference contract)."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.model_selection import cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils.estimator_checks import parametrize_with_checks

from glassbox.estimators import AdditiveClassifier, AdditiveRegressor

# No check is skipped. scikit-learn itself skips check_array_api_input unless
# SCIPY_ARRAY_API is set; that is its own rule, not ours.


@parametrize_with_checks([AdditiveClassifier(), AdditiveRegressor(),
                          AdditiveClassifier(max_features=1)])
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


def test_frame_with_schema_and_clone(loans, loans_schema):
    features = loans.drop(columns=["defaulted"])
    target = loans["defaulted"]
    estimator = AdditiveClassifier(schema=loans_schema, max_features=3)
    estimator.fit(features, target)
    assert list(estimator.classes_) == ["no", "yes"]
    assert len(estimator.model_.terms) == 3
    assert "owner_age_band" not in estimator.model_.features
    probability = estimator.predict_proba(features)[:, 1]
    # the estimator scores exactly as its AdditiveModel does
    np.testing.assert_allclose(probability, estimator.model_.probability(features))
    fresh = clone(estimator)
    assert not hasattr(fresh, "model_") and fresh.get_params()["max_features"] == 3


def test_works_inside_pipeline_and_cross_validation(mroz):
    columns = ["nwifeinc", "educ", "exper", "expersq", "age", "kidslt6", "kidsge6"]
    pipeline = make_pipeline(FunctionTransformer(), AdditiveClassifier())
    scores = cross_val_score(pipeline, mroz[columns].to_numpy(), mroz["inlf"].to_numpy(),
                             cv=3, scoring="roc_auc")
    # common practice, no source: this logit separates labour-force participation well
    assert scores.mean() > 0.7


def test_bad_family_is_a_value_error():
    X = np.random.default_rng(0).normal(size=(20, 2))
    with pytest.raises(ValueError, match="unknown family"):
        AdditiveRegressor(family="mystery").fit(X, X[:, 0])


@pytest.mark.parametrize("family, options", [("spline", {"splines": 8}),
                                             ("boosted", {"ensemble": 2})])
def test_every_family_through_the_estimator(family, options, loans, loans_schema):
    features = loans.drop(columns=["defaulted"]).head(2000)
    target = loans["defaulted"].head(2000)
    estimator = AdditiveClassifier(family=family, schema=loans_schema, options=options)
    estimator.fit(features, target)
    assert estimator.model_.metadata["family"] == family
    np.testing.assert_allclose(estimator.predict_proba(features)[:, 1],
                               estimator.model_.probability(features))
    regression = AdditiveRegressor(family=family, options=options)
    X = features[["annual_revenue", "years_trading"]].to_numpy()
    regression.fit(X, np.log(features["amount_requested"].to_numpy()))
    assert regression.model_.task == "regression" and regression.predict(X).shape == (2000,)
