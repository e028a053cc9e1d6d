"""Fit any family on a raw frame and finish it into an `AdditiveModel`.

The finishing steps are shared by every family: validate and type the data,
fit, centre each term on the training rows (the intercept absorbs the means),
keep training profiles, and record provenance.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from glassbox import __version__
from glassbox.additive import AdditiveModel, LevelsTerm, Term, centre_terms, profile_features
from glassbox.cells import summarise_term
from glassbox.errors import DataError, OptionError
from glassbox.families import get_family
from glassbox.metrics import classification_metrics, regression_metrics
from glassbox.provenance import frame_fingerprint, library_versions
from glassbox.schema import MISSING_LEVEL, Schema, prepare


def fit_model(
    frame: pd.DataFrame,
    schema: Schema,
    family: str = "sparse",
    *,
    source: str | None = None,
    **options: Any,
) -> AdditiveModel:
    """Fit `family` on a raw frame described by `schema`; options go to the family.

    Missing values the schema lets the model learn reach the family as NaN in numeric
    columns; a missing category is fitted as one more level and then kept as the term's
    missing-value entry, apart from its levels.
    """
    schema.require_better()
    module = get_family(family)
    unknown = set(options) - set(module.DEFAULTS)
    if unknown:
        raise OptionError(f"family '{family}' has no option(s) {', '.join(sorted(unknown))} "
                          f"(it takes: {', '.join(module.DEFAULTS)})")
    prepared = prepare(frame, schema, source=source)
    features, target = prepared.features, prepared.target
    where = source or frame.attrs.get("source") or "the data"
    _check_gaps(features, where)
    task = schema.target.task
    if task == "classification":
        positives = int(target.sum())
        if positives in (0, len(target)):
            raise DataError(f"{where}: target '{schema.target.column}' has one class only "
                            f"({'all positive' if positives else 'no positive rows'}); "
                            "a classifier needs both")
    settings = {**module.DEFAULTS, **options}
    fitted = module.fit(_missing_as_level(features, schema), target, schema, task=task,
                        **settings)
    terms, shift = centre_terms(tuple(_level_to_missing(t) for t in fitted.terms), features)
    used = [t.feature for t in terms]
    importance = {t.feature: float(np.mean(np.abs(t.evaluate(features[t.feature].to_numpy()))))
                  for t in terms}
    profiles = profile_features(features, schema)
    # exact training summaries under numeric terms (rows with no value counted apart),
    # for points cards (classification)
    cells = tuple(summarise_term(t, features[t.feature].to_numpy(dtype=float)) for t in terms
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


def _check_gaps(features: pd.DataFrame, where: str) -> None:
    """Refuse a feature column with no value at all, and a category holding the text that
    stands for a missing level."""
    for name in features.columns:
        column = features[name]
        if column.isna().all():
            raise DataError(f"{where}: column '{name}' has no values at all (every row is "
                            "missing); drop it or mark it ignore = true in the schema")
        if column.dtype == object and (column == MISSING_LEVEL).any():
            raise DataError(f"{where}: column '{name}' has the level {MISSING_LEVEL!r}, which "
                            "glassbox keeps for missing values; rename that level")


def _missing_as_level(features: pd.DataFrame, schema: Schema) -> pd.DataFrame:
    """Missing categories as the level MISSING_LEVEL, so every family fits them as a level."""
    out = features.copy()
    for name in features.columns:
        if schema.feature(name).kind == "category":
            out[name] = features[name].where(features[name].notna(), MISSING_LEVEL)
    return out


def _level_to_missing(term: Term) -> Term:
    """A levels term with the level MISSING_LEVEL turned into its missing-value entry."""
    if not isinstance(term, LevelsTerm) or MISSING_LEVEL not in term.levels:
        return term
    at = term.levels.index(MISSING_LEVEL)
    if len(term.levels) == 1:
        raise DataError(f"column '{term.feature}' has no values at all")
    keep = [i for i in range(len(term.levels)) if i != at]
    band = {name: tuple(getattr(term, name)[i] for i in keep) for name in ("lower", "upper")
            if getattr(term, name) is not None}
    missing_band = ((term.lower[at], term.upper[at])
                    if term.lower is not None and term.upper is not None else None)
    return replace(term, levels=tuple(term.levels[i] for i in keep),
                   values=tuple(term.values[i] for i in keep), **band,
                   missing=float(term.values[at]), missing_band=missing_band)


def training_fit(model: AdditiveModel, frame: pd.DataFrame,
                 source: str | None = None) -> dict[str, float]:
    """In-sample accuracy of a model on the frame it was fitted on (optimistic by nature)."""
    prepared = prepare(frame, model.schema, source=source, features=model.features)
    score = model.score_encoded(prepared.features)
    if model.task == "classification":
        return classification_metrics(prepared.target, model.inverse_link(score))
    return regression_metrics(prepared.target, score)
