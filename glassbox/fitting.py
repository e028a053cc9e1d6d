"""Fit any family on a raw frame and finish it into an `AdditiveModel`.

The finishing steps are shared by every family: validate and type the data,
fit, centre each term on the training rows (the intercept absorbs the means),
keep training profiles, and record provenance.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from glassbox import __version__
from glassbox.additive import AdditiveModel, LevelsTerm, centre_terms, profile_features
from glassbox.cells import summarise_term
from glassbox.errors import DataError, OptionError
from glassbox.families import get_family
from glassbox.metrics import classification_metrics, regression_metrics
from glassbox.provenance import frame_fingerprint, library_versions
from glassbox.schema import Schema, prepare


def fit_model(
    frame: pd.DataFrame,
    schema: Schema,
    family: str = "sparse",
    *,
    source: str | None = None,
    **options: Any,
) -> AdditiveModel:
    """Fit `family` on a raw frame described by `schema`; options go to the family."""
    module = get_family(family)
    unknown = set(options) - set(module.DEFAULTS)
    if unknown:
        raise OptionError(f"family '{family}' has no option(s) {', '.join(sorted(unknown))} "
                          f"(it takes: {', '.join(module.DEFAULTS)})")
    prepared = prepare(frame, schema, source=source)
    features, target = prepared.features, prepared.target
    task = schema.target.task
    if task == "classification":
        positives = int(target.sum())
        if positives in (0, len(target)):
            where = source or frame.attrs.get("source") or "the data"
            raise DataError(f"{where}: target '{schema.target.column}' has one class only "
                            f"({'all positive' if positives else 'no positive rows'}); "
                            "a classifier needs both")
    settings = {**module.DEFAULTS, **options}
    fitted = module.fit(features, target, schema, task=task, **settings)
    terms, shift = centre_terms(fitted.terms, features)
    used = [t.feature for t in terms]
    importance = {t.feature: float(np.mean(np.abs(t.evaluate(features[t.feature].to_numpy()))))
                  for t in terms}
    profiles = profile_features(features, schema)
    # exact training summaries under numeric terms, for points cards (classification)
    cells = tuple(summarise_term(t, features[t.feature].to_numpy()) for t in terms
                  if task == "classification" and not isinstance(t, LevelsTerm))
    metadata = {
        "family": family,
        "parameters": fitted.parameters,
        "details": fitted.details,
        "rows": int(len(features)),
        "positive_rate": float(np.mean(target)) if task == "classification" else None,
        "target_mean": float(np.mean(target)),
        "data_sha256": frame_fingerprint(pd.concat(
            [features, pd.Series(target, index=features.index, name="__target__")], axis=1)),
        "features_used": used,
        "importance": importance,
        "glassbox_version": __version__,
        "versions": library_versions(),
    }
    link = "logit" if task == "classification" else "identity"
    return AdditiveModel(link, float(fitted.intercept + shift), terms, schema, profiles, metadata,
                         cells)


def training_fit(model: AdditiveModel, frame: pd.DataFrame,
                 source: str | None = None) -> dict[str, float]:
    """In-sample accuracy of a model on the frame it was fitted on (optimistic by nature)."""
    prepared = prepare(frame, model.schema, source=source, features=model.features)
    score = model.score_encoded(prepared.features)
    if model.task == "classification":
        return classification_metrics(prepared.target, model.inverse_link(score))
    return regression_metrics(prepared.target, score)
