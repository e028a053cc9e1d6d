"""Fit any family on a raw frame and finish it into an `AdditiveModel`.

The finishing steps are shared by every family: validate and type the data,
fit, centre each term on the training rows (the intercept absorbs the means),
keep training profiles and the development baseline monitoring compares periods with
(`glassbox.explaining.baseline`), and record provenance.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from glassbox import __version__
from glassbox.core.additive import AdditiveModel, LevelsTerm, Term, centre_terms, profile_features
from glassbox.core.cells import summarise_term
from glassbox.core.columns import MANY_LEVELS, OTHER_LEVEL
from glassbox.core.errors import DataError, OptionError
from glassbox.core.pairs import missing_level_to_entry, purify
from glassbox.core.provenance import fit_day, frame_fingerprint, library_versions
from glassbox.core.schema import (
    MISSING_LEVEL,
    FeatureSpec,
    Schema,
    missing_mask,
    pool_levels,
    prepare,
    rows_text,
)
from glassbox.core.wording import noun, plural
from glassbox.explaining.baseline import TRAINING_ROWS, build_baseline
from glassbox.fitting.families import get_family
from glassbox.fitting.families.base import FamilyFit
from glassbox.fitting.metrics import classification_metrics, regression_metrics


def fit_model(
    frame: pd.DataFrame,
    schema: Schema,
    family: str = "sparse",
    *,
    source: str | None = None,
    drop_missing_target: bool = False,
    **options: Any,
) -> AdditiveModel:
    """Fit `family` on a raw frame described by `schema`; options go to the family.

    Missing values the schema lets the model learn reach the family as NaN in numeric
    columns; a missing category is fitted as one more level and then kept as the term's
    missing-value entry, apart from its levels. A category's rare levels are pooled by its
    `pool_below` rule (the model's schema lists them, so scoring pools them too); one with
    more than MANY_LEVELS levels and no rule is refused. Rows with no target are an error,
    or dropped with a warning that counts them when `drop_missing_target` is set.
    """
    schema.require_better()
    check_options(family, options)
    where = source or frame.attrs.get("source") or "the data"
    if drop_missing_target:
        frame = rows_with_target(frame, schema, where)
    prepared = prepare(frame, unpooled(schema), source=where)
    return fit_typed(prepared.features, prepared.target, schema, family, where=where,
                     **options)


def unpooled(schema: Schema) -> Schema:
    """The schema without pooled levels where a `pool_below` rule works them out afresh
    on the training rows: what a frame is typed with before `fit_typed`."""
    return replace(schema, features=tuple(
        replace(f, pooled=()) if f.pool_below is not None else f for f in schema.features))


def check_options(family: str, options: dict[str, Any]) -> None:
    """Refuse options the family does not take, naming those it does."""
    unknown = set(options) - set(get_family(family).DEFAULTS)
    if unknown:
        raise OptionError(f"family '{family}' has no {noun(len(unknown), 'option')} "
                          f"{', '.join(sorted(unknown))} "
                          f"(it takes: {', '.join(get_family(family).DEFAULTS)})")


def fit_typed(
    features: pd.DataFrame,
    target: np.ndarray,
    schema: Schema,
    family: str = "sparse",
    *,
    where: str = "the data",
    summaries: bool = True,
    **options: Any,
) -> AdditiveModel:
    """`fit_model` on a frame already typed by `prepare(frame, unpooled(schema))`.

    `summaries=False` is for a model that only scores and is then thrown away (a fold of
    a comparison): it keeps no training profiles, cells, development baseline or data
    fingerprint, which cost time at scale and which nothing that scores reads; its terms,
    intercept and so its scores are the same as with them.
    """
    schema = unpooled(schema)
    check_options(family, options)
    module = get_family(family)
    features, schema = ready(features, target, schema, where)
    settings = {**module.DEFAULTS, **options}
    with threadpool_limits(limits=1, user_api="blas"):  # see DEVELOPERS.md: one thread
        fitted = module.fit(_missing_as_level(features, schema), target, schema,
                            task=schema.target.task, **settings)
    return finished(fitted, features, target, schema, family, summaries)


def ready(features: pd.DataFrame, target: np.ndarray, schema: Schema,
          where: str) -> tuple[pd.DataFrame, Schema]:
    """The checks before a family fit, and the rare levels pooled (`pool_rare_levels`)."""
    _check_gaps(features, where)
    features, schema = pool_rare_levels(features, schema, where)
    if schema.target.task == "classification":
        positives = int(target.sum())
        if positives in (0, len(target)):
            raise DataError(f"{where}: target '{schema.target.column}' has one class only "
                            f"({'all positive' if positives else 'no positive rows'}); "
                            "a classifier needs both")
    return features, schema


def finished(fitted: FamilyFit, features: pd.DataFrame, target: np.ndarray, schema: Schema,
             family: str, summaries: bool = True) -> AdditiveModel:
    """A family's fit on the rows `ready` gave, as the model: terms centred on those rows,
    metadata and (with `summaries`) the training profiles, cells and baseline."""
    task = schema.target.task
    terms, pairs, moved = purify(tuple(_level_to_missing(t) for t in fitted.terms),
                                 tuple(missing_level_to_entry(p, MISSING_LEVEL)
                                       for p in fitted.pairs), features)
    terms, shift = centre_terms(terms, features)
    shift += moved
    used = [t.feature for t in terms]
    # each term (and pair, keyed by its name) over its training rows, once: importance and
    # the baseline read it
    contributions = {t.feature: np.asarray(t.evaluate(features[t.feature].to_numpy()),
                                           dtype=float) for t in terms}
    contributions.update({p.name: p.evaluate_frame(features) for p in pairs})
    importance = {name: float(np.mean(np.abs(values)))
                  for name, values in contributions.items()}
    metadata = {
        "family": family,
        "parameters": fitted.parameters,
        "details": fitted.details,
        "rows": int(len(features)),
        "positive_rate": float(np.mean(target)) if task == "classification" else None,
        "target_mean": float(np.mean(target)),
        "data_sha256": frame_fingerprint(features.assign(__target__=target))
        if summaries else None,
        "features_used": used,
        "importance": importance,
        "glassbox_version": __version__,
        "versions": library_versions(),
        "fit_date": fit_day(),
    }
    pooled = {f.name: len(f.pooled) for f in schema.used_features if f.pooled}
    if pooled:
        metadata["pooled_levels"] = pooled
    link = "logit" if task == "classification" else "identity"
    intercept = float(fitted.intercept + shift)
    if not summaries:
        return AdditiveModel(link, intercept, terms, schema, (), metadata, pairs=pairs)
    runs: dict[str, tuple[np.ndarray, np.ndarray]] = {}  # one sort per column, shared
    profiles = profile_features(features, schema, runs)
    # exact training summaries under numeric terms (rows with no value counted apart),
    # for points cards (classification)
    cells = tuple(summarise_term(t, features[t.feature].to_numpy(dtype=float),
                                 runs=runs[t.feature]) for t in terms
                  if task == "classification" and not isinstance(t, LevelsTerm))
    model = AdditiveModel(link, intercept, terms, schema, profiles, metadata, cells,
                          pairs=pairs)
    return replace(model, baseline=build_baseline(model, features, TRAINING_ROWS,
                                                  contributions, runs))


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


def rows_with_target(frame: pd.DataFrame, schema: Schema, where: str) -> pd.DataFrame:
    """The rows that have a target value. Dropped rows are counted in a warning; the
    features of every row are checked first, so data errors name their true rows."""
    name = schema.target.column
    if name not in frame.columns:
        return frame  # prepare names the missing column
    absent = missing_mask(frame[name], FeatureSpec(name, "category"))
    if not absent.any():
        return frame
    prepare(frame, schema, require_target=False, source=where)
    warnings.warn(f"{where}: dropped {plural(int(absent.sum()), 'row')} with no value in the "
                  f"target "
                  f"'{name}' ({rows_text(absent)}); {int((~absent).sum()):,} rows remain",
                  UserWarning, stacklevel=2)
    kept = frame.loc[~absent].reset_index(drop=True)
    kept.attrs = dict(frame.attrs)
    # the file's data row numbers (from 1) of the rows kept, for outputs that number rows
    numbers = np.asarray(frame.attrs.get("row_numbers", np.arange(1, len(frame) + 1)))
    kept.attrs["row_numbers"] = numbers[~np.asarray(absent)].tolist()
    return kept


def pool_rare_levels(features: pd.DataFrame, schema: Schema,
                     where: str) -> tuple[pd.DataFrame, Schema]:
    """Each category's rare levels pooled into OTHER_LEVEL by its `pool_below` rule, the
    pooled levels written into the schema; a category with more than MANY_LEVELS levels
    and no rule is refused, naming what to write."""
    features, specs = features.copy(deep=False), []  # copy-on-write: columns replaced, not written
    for spec in schema.features:
        if spec.kind != "category" or spec.name not in features.columns:
            specs.append(spec)
            continue
        counts = features[spec.name].value_counts()
        if spec.pool_below is None:
            if len(counts) > MANY_LEVELS:
                raise DataError(
                    f"{where}: column '{spec.name}' has {len(counts):,} levels, more than "
                    f"{MANY_LEVELS}; write pool_below = 0.01 under [feature.{spec.name}] to "
                    f"pool levels under 1% of its rows into {OTHER_LEVEL!r} (pool_below = 0 "
                    "keeps every level), or ignore = true")
            specs.append(spec)
            continue
        if OTHER_LEVEL in counts.index:
            raise DataError(f"{where}: column '{spec.name}' has the level {OTHER_LEVEL!r}, "
                            "which glassbox keeps for pooled levels; rename that level")
        limit = spec.pool_below * counts.sum() if spec.pool_below < 1 else spec.pool_below
        rare = tuple(sorted(str(level) for level, count in counts.items() if count < limit))
        if rare and len(rare) == len(counts):
            raise DataError(f"{where}: pool_below = {spec.pool_below} pools every level of "
                            f"'{spec.name}' (the largest has {int(counts.max()):,} rows); "
                            "lower it")
        features[spec.name] = pool_levels(features[spec.name], rare)
        specs.append(replace(spec, pooled=rare))
    return features, replace(schema, features=tuple(specs))


def _missing_as_level(features: pd.DataFrame, schema: Schema) -> pd.DataFrame:
    """Missing categories as the level MISSING_LEVEL, so every family fits them as a level."""
    gaps = {name: features[name].fillna(MISSING_LEVEL) for name in features.columns
            if schema.feature(name).kind == "category" and features[name].isna().any()}
    return features.assign(**gaps) if gaps else features


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
