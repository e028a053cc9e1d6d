"""Boosted family: histogram gradient boosting with one feature per tree, compiled to tables.

scikit-learn's histogram boosting is fitted with interaction constraints that keep
every tree to a single feature, so the model is exactly additive: the trees on a
feature add up to a step table (numbers, integers, flags) or a levels table
(categories). Monotone declarations become scikit-learn's monotonic constraints
(the direction of the score, i.e. of the log-odds of the positive class).

Rules this module follows:

- A feature no tree splits on gets no term: its contribution is a constant,
  already in the intercept.
- Missing numbers are passed to scikit-learn as NaN, with no imputation: each
  split learns which branch they take (`missing_go_to_left`), and following that
  branch in every tree of a feature gives the step table's `missing` entry. A
  feature whose training column had no missing value gets no entry (`missing` is
  None), and the model refuses a missing value there; scikit-learn would route it
  down the branch that held more training rows, which is a guess, not a lesson.
- With early stopping scikit-learn learns from its own training part only. If all
  of a feature's missing rows fell in the validation part, its trees never saw
  one and route missing values by the more-rows rule; the entry then reproduces
  scikit-learn but was not learned, and the fit's details list the feature.
- A missing category is the ordinary level "(missing)" here (fitting turns it into
  the term's missing entry afterwards).
- A category level never seen in training is scored as scikit-learn scores an
  unknown category: as a missing value, which (there being none in training, since
  a missing category is a level) goes down the branch of each split that held more
  training rows. That value is the term's `unseen` value.
- With `ensemble` = N > 1, N models are fitted with seeds seed, seed+1, ...
  (the seed changes the early-stopping validation split). Each seed's tables are
  centred on the training rows, then averaged; `lower` and `upper` hold the
  pointwise minimum and maximum over the seeds: the spread across seeds, not a
  confidence interval. Without early stopping the seeds give the same model.
- With `pairs` = K > 0 the main effects are fitted first, then boosting continues with
  trees restricted to the K best-ranked pairs: see `boosted_pairs` for its rules.
- scikit-learn fits with `threads` OpenMP threads, 1 by default: credit-sized data
  gains little from more, and on a busy machine two threads can be many times
  slower than one. The fitted trees do not depend on the thread count.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Any

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.model_selection import train_test_split
from threadpoolctl import threadpool_limits

from glassbox.core.additive import LevelsTerm, StepTerm, Term, centre_terms
from glassbox.core.errors import OptionError
from glassbox.core.schema import MISSING_LEVEL, Schema
from glassbox.core.wording import noun
from glassbox.fitting.families.base import FamilyFit
from glassbox.fitting.families.boosted_pairs import (
    check_pairs,
    choose_pairs,
    compile_pairs,
    constraint_groups,
    fresh_stopping,
    pair_details,
    tree_features,
)

NAME = "boosted"
DEFAULTS: dict[str, Any] = {
    "ensemble": 1,
    "seed": 0,
    "learning_rate": 0.05,
    "max_iter": 1000,
    "max_leaf_nodes": 4,
    "min_samples_leaf": 20,
    "l2_regularization": 1.0,
    "early_stopping": True,
    "validation_fraction": 0.1,
    "n_iter_no_change": 20,
    "threads": 1,
    "pairs": 0,
}
MAX_BINS = 255  # scikit-learn's largest max_bins, and so the most levels a category may have
STOPPING_TOLERANCE = 1e-7  # scikit-learn's default tol
MISSING_RULE = ("a missing number follows, in every tree on its feature, the branch scikit-learn "
                "learned for missing values; a feature with none in training has no entry")
NOT_LEARNED_RULE = ("these features had missing values, but with early stopping all of them "
                    "fell in the validation part of the listed seeds, so those seeds route a "
                    "missing value down the branch that held more training rows")
UNSEEN_RULE = ("a level never seen in training is scored as scikit-learn scores an unknown "
               "category: as missing, down the branch of each split that held more training rows")
BAND_RULE = "pointwise minimum and maximum over the seeds' centred tables (spread across seeds)"
Estimator = HistGradientBoostingClassifier | HistGradientBoostingRegressor


@dataclass(frozen=True)
class BoostedEstimators:
    """The fitted scikit-learn models (one per seed) and how frame columns feed them.

    Columns go to scikit-learn categories first, then the rest, both in frame
    order: the order scikit-learn itself moves categorical columns to, so its
    internal feature indices are positions in `columns`.
    """

    estimators: tuple[Estimator, ...]
    seeds: tuple[int, ...]
    columns: tuple[str, ...]
    levels: dict[str, tuple[str, ...]]
    # per seed, the numeric columns with a missing value in the rows scikit-learn learned from
    learned_missing: tuple[frozenset[str], ...] = ()
    # with pairs (one seed): stage-1 iterations, the chosen pairs (positions in `columns`)
    # and the whole ranking
    main_iterations: tuple[int, ...] = ()
    pairs: tuple[tuple[int, int], ...] = ()
    ranking: tuple[Any, ...] = ()

    def matrix(self, features: pd.DataFrame) -> np.ndarray:
        """The numeric matrix scikit-learn sees: level codes for categories.

        A missing category is the level "(missing)"; a level not seen in training
        gets the code len(levels), which scikit-learn never saw either and so treats
        as an unknown category. Missing numbers stay NaN.
        """
        blocks = []
        for name in self.columns:
            column = features[name].to_numpy()
            if name in self.levels:
                levels = self.levels[name]
                column = np.where(pd.isna(column), MISSING_LEVEL, column.astype(object))
                codes = pd.Index(levels).get_indexer(column).astype(float)
                codes[codes < 0] = len(levels)
                blocks.append(codes)
            else:
                blocks.append(column.astype(float))
        return np.column_stack(blocks)

    def scores(self, features: pd.DataFrame) -> np.ndarray:
        """The mean over seeds of decision_function (classifier) or predict (regressor)."""
        matrix = self.matrix(features)
        return np.mean([_raw_score(e, matrix) for e in self.estimators], axis=0)


def _raw_score(estimator: Estimator, matrix: np.ndarray) -> np.ndarray:
    if isinstance(estimator, HistGradientBoostingClassifier):
        return estimator.decision_function(matrix)
    return estimator.predict(matrix)


# ---------------------------------------------------------------- options


def _whole(name: str, value: Any, least: int) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral) or value < least:
        raise OptionError(f"boosted option {name} must be a whole number of at least {least}, "
                          f"not {value!r}")
    return int(value)


def _number(name: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, Real) or not math.isfinite(value):
        raise OptionError(f"boosted option {name} must be a finite number, not {value!r}")
    return float(value)


def check_options(options: dict[str, Any]) -> dict[str, Any]:
    """Every option checked and normalised, or an OptionError naming the option."""
    unknown = set(options) - set(DEFAULTS)
    if unknown:
        raise OptionError(f"boosted has no {noun(len(unknown), 'option')} "
                          f"{', '.join(sorted(unknown))} "
                          f"(it takes: {', '.join(DEFAULTS)})")
    settings = {**DEFAULTS, **options}
    checked: dict[str, Any] = {
        "ensemble": _whole("ensemble", settings["ensemble"], 1),
        "seed": _whole("seed", settings["seed"], 0),
        "max_iter": _whole("max_iter", settings["max_iter"], 1),
        "max_leaf_nodes": _whole("max_leaf_nodes", settings["max_leaf_nodes"], 2),
        "min_samples_leaf": _whole("min_samples_leaf", settings["min_samples_leaf"], 1),
        "n_iter_no_change": _whole("n_iter_no_change", settings["n_iter_no_change"], 1),
        "threads": _whole("threads", settings["threads"], 1),
        "pairs": _whole("pairs", settings["pairs"], 0),
    }
    if checked["seed"] + checked["ensemble"] > 2**32:
        raise OptionError("boosted option seed plus ensemble must stay below 2**32")
    rate = _number("learning_rate", settings["learning_rate"])
    if rate <= 0:
        raise OptionError(f"boosted option learning_rate must be above 0, not {rate!r}")
    l2 = _number("l2_regularization", settings["l2_regularization"])
    if l2 < 0:
        raise OptionError(f"boosted option l2_regularization must be 0 or more, not {l2!r}")
    fraction = _number("validation_fraction", settings["validation_fraction"])
    if not 0 < fraction < 1:
        raise OptionError("boosted option validation_fraction must lie strictly between 0 "
                          f"and 1, not {fraction!r}")
    if not isinstance(settings["early_stopping"], bool | np.bool_):
        raise OptionError("boosted option early_stopping must be true or false, not "
                          f"{settings['early_stopping']!r}")
    checked.update(learning_rate=rate, l2_regularization=l2, validation_fraction=fraction,
                   early_stopping=bool(settings["early_stopping"]))
    check_pairs(checked)
    return {name: checked[name] for name in DEFAULTS}


# ---------------------------------------------------------------- fitting


def fit_estimators(
    features: pd.DataFrame, target: np.ndarray, schema: Schema, *, task: str, **options: Any
) -> BoostedEstimators:
    """Fit one scikit-learn model per seed; `fit` compiles them, tests compare the two."""
    settings = check_options(options)
    specs = [schema.feature(name) for name in features.columns]
    for spec in specs:
        if spec.kind == "category" and spec.monotone is not None:
            raise OptionError(f"feature '{spec.name}' is a category, which has no order, so it "
                              "cannot be declared monotone")
    columns = [s.name for s in specs if s.kind == "category"]
    columns += [s.name for s in specs if s.kind != "category"]
    levels: dict[str, tuple[str, ...]] = {}
    for name in columns:
        if schema.feature(name).kind != "category":
            continue
        found = tuple(sorted({MISSING_LEVEL if pd.isna(v) else str(v) for v in features[name]}))
        if len(found) > MAX_BINS:
            raise OptionError(f"feature '{name}' has {len(found)} levels; the boosted family "
                              f"takes at most {MAX_BINS} per category (scikit-learn's native "
                              "categorical limit): group rare levels or ignore the feature")
        levels[name] = found
    direction = {"increasing": 1, "decreasing": -1, None: 0}
    common = dict(
        learning_rate=settings["learning_rate"], max_iter=settings["max_iter"],
        max_leaf_nodes=settings["max_leaf_nodes"], max_depth=None,
        min_samples_leaf=settings["min_samples_leaf"],
        l2_regularization=settings["l2_regularization"], max_features=1.0, max_bins=MAX_BINS,
        categorical_features=[name in levels for name in columns] if levels else None,
        monotonic_cst=[direction[schema.feature(name).monotone] for name in columns],
        interaction_cst=[[i] for i in range(len(columns))],
        early_stopping=settings["early_stopping"], scoring="loss",
        validation_fraction=settings["validation_fraction"],
        n_iter_no_change=settings["n_iter_no_change"], tol=STOPPING_TOLERANCE,
    )
    model_type = (HistGradientBoostingClassifier if task == "classification"
                  else HistGradientBoostingRegressor)
    seeds = tuple(settings["seed"] + i for i in range(settings["ensemble"]))
    fitted = BoostedEstimators((), seeds, tuple(columns), levels)
    matrix = fitted.matrix(features)
    estimators = []
    for seed in seeds:
        estimator = model_type(**common, random_state=seed)
        _fit_one(estimator, matrix, target, settings, seed)
        if levels and not np.array_equal(estimator._is_categorical_remapped,
                                         [name in levels for name in columns]):
            raise RuntimeError("scikit-learn reordered the columns unexpectedly; the trees "
                               "cannot be read back")
        estimators.append(estimator)
    learned = tuple(
        frozenset(name for name, gaps in zip(columns, np.isnan(
            learning_rows(e, matrix, target)).any(axis=0), strict=True) if gaps)
        for e in estimators)
    if not settings["pairs"]:
        return BoostedEstimators(tuple(estimators), seeds, tuple(columns), levels, learned)
    # the pair stage (one seed: check_pairs refuses an ensemble): same model, warm started
    estimator = estimators[0]
    main = int(estimator.n_iter_)
    ranking, chosen = choose_pairs(estimator, matrix, features, target, schema,
                                   tuple(columns), task, settings["pairs"])
    if chosen:
        estimator.set_params(warm_start=True, max_iter=main + settings["max_iter"],
                             interaction_cst=constraint_groups(chosen, len(columns)))
        fresh_stopping(estimator)
        _fit_one(estimator, matrix, target, settings, seeds[0])
        estimator.set_params(warm_start=False)
    return BoostedEstimators(tuple(estimators), seeds, tuple(columns), levels, learned,
                             (main,), chosen, ranking)


def _fit_one(estimator: Estimator, matrix: np.ndarray, target: np.ndarray,
             settings: dict[str, Any], seed: int) -> None:
    try:
        with threadpool_limits(limits=settings["threads"], user_api="openmp"):
            estimator.fit(matrix, target)
    except ValueError as exc:  # e.g. a validation part too small to stratify
        hint = (f"; early stopping sets aside validation_fraction "
                f"{settings['validation_fraction']} of {len(target)} rows: raise it or "
                "set early_stopping to false" if settings["early_stopping"] else "")
        raise OptionError(f"boosted: scikit-learn could not fit with these settings "
                          f"(seed {seed}): {exc}{hint}") from None


def learning_rows(estimator: Estimator, matrix: np.ndarray, target: np.ndarray) -> np.ndarray:
    """The rows of `matrix` a fitted model learned its trees from, in its order.

    With early stopping, scikit-learn sets aside a validation part drawn by
    train_test_split with the seed it keeps (stratified for a classifier); the same
    call gives the same rows. Without early stopping it learns from every row.
    """
    if not estimator.do_early_stopping_:
        return matrix
    stratify = target if isinstance(estimator, HistGradientBoostingClassifier) else None
    part, _ = train_test_split(matrix, test_size=estimator.validation_fraction,
                               stratify=stratify, random_state=estimator._random_seed)
    return part


# ---------------------------------------------------------------- compiling


def _tree_feature(nodes: np.ndarray) -> int | None:
    """The one feature a tree splits on, or None for a single-leaf tree."""
    split = nodes[nodes["is_leaf"] == 0]
    if len(split) == 0:
        return None
    used = set(split["feature_idx"].tolist())
    if len(used) != 1:
        raise RuntimeError(f"a boosted tree splits on {len(used)} features; the one-feature "
                           "constraint failed, so the model is not additive")
    return int(used.pop())


def _walk(predictor: Any, points: np.ndarray, unseen: np.ndarray | None) -> np.ndarray:
    """Leaf values of one tree at the points (level codes when `unseen` is given).

    Mirrors scikit-learn's prediction: a missing number (NaN) goes where the split
    sends missing values; any other number goes left when x <= threshold; a code
    goes left when its bit is set in the split's raw left-category bitset, and an
    unseen code goes where missing values go.
    """
    nodes = predictor.nodes
    at = np.zeros(len(points), dtype=np.intp)
    while True:
        leaf = nodes["is_leaf"][at].astype(bool)
        if leaf.all():
            return nodes["value"][at]
        node = nodes[at]
        if unseen is None:
            left = np.where(np.isnan(points), node["missing_go_to_left"].astype(bool),
                            points <= node["num_threshold"])
        else:
            codes = points.astype(np.intp)
            bitsets = predictor.raw_left_cat_bitsets[node["bitset_idx"].astype(np.intp)]
            words = bitsets[np.arange(len(codes)), codes // 32]
            left = ((words >> (codes % 32).astype(np.uint32)) & 1).astype(bool)
            left = np.where(unseen, node["missing_go_to_left"].astype(bool), left)
        step = np.where(left, node["left"], node["right"]).astype(np.intp)
        at = np.where(leaf, at, step)


def _trees_by_feature(estimator: Estimator, pair_stage: int | None = None,
                      inside: frozenset[int] = frozenset(),
                      ) -> tuple[float, dict[int, list[Any]], int]:
    """Baseline plus single-leaf trees, the trees of each feature, and the tree count
    (without the trees of the pair tables).

    Leaf values already include the learning rate (scikit-learn shrinks them once a
    tree is grown), so a score is the baseline plus the sum of one leaf per tree. Trees
    from iteration `pair_stage` on that split on features of the pairs (`inside`) belong
    to the pair tables (`boosted_pairs.compile_pairs`) and are left out here.
    """
    constant = float(np.ravel(estimator._baseline_prediction)[0])
    by_feature: dict[int, list[Any]] = {}
    count = 0
    for number, iteration in enumerate(estimator._predictors):
        for predictor in iteration:
            if pair_stage is not None and number >= pair_stage:
                used = tree_features(predictor.nodes)
                if used and used <= inside:
                    continue
            count += 1
            feature = _tree_feature(predictor.nodes)
            if feature is None:
                constant += float(predictor.nodes["value"][0])
            else:
                by_feature.setdefault(feature, []).append(predictor)
    return constant, by_feature, count


def _points(
    fitted: BoostedEstimators, name: str, trees: list[Any]
) -> tuple[np.ndarray, np.ndarray | None, tuple[float, ...]]:
    """Where to evaluate a feature's trees: one point per bin or level, then the unseen
    code (categories) or NaN (numbers, for the missing entry); whether each point is the
    unseen code (categories only); and the step edges."""
    if name in fitted.levels:
        count = len(fitted.levels[name])
        codes = np.arange(count + 1, dtype=float)
        return codes, codes == count, ()
    thresholds = np.concatenate([t.nodes["num_threshold"][t.nodes["is_leaf"] == 0]
                                 for t in trees])
    edges = np.unique(thresholds[np.isfinite(thresholds)])
    # bin i is (edges[i-1], edges[i]]: its right end represents it; the last bin runs to inf
    return np.append(edges, [np.inf, np.nan]), None, tuple(float(e) for e in edges)


def _floats(values: np.ndarray) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


def _table(trees: list[Any], points: np.ndarray, unseen: np.ndarray | None) -> np.ndarray:
    total = np.zeros(len(points))
    for tree in trees:
        total += _walk(tree, points, unseen)
    return total


def compile_estimators(
    fitted: BoostedEstimators, features: pd.DataFrame
) -> tuple[float, tuple[Term, ...], dict[str, Any]]:
    """The intercept and one term per split feature, averaged over seeds."""
    stage = fitted.main_iterations[0] if fitted.pairs else None
    inside = frozenset(i for pair in fitted.pairs for i in pair)
    compiled = [_trees_by_feature(e, stage, inside) for e in fitted.estimators]
    position = {name: i for i, name in enumerate(features.columns)}
    split = sorted({f for _, by_feature, _ in compiled for f in by_feature},
                   key=lambda f: position[fitted.columns[f]])  # terms in frame order
    per_seed: list[list[Term]] = [[] for _ in compiled]
    for index in split:
        name = fitted.columns[index]
        every_tree = [t for _, by_feature, _ in compiled for t in by_feature.get(index, [])]
        points, unseen, edges = _points(fitted, name, every_tree)
        had_missing = bool(features[name].isna().any())
        for seed_terms, (_, by_feature, _) in zip(per_seed, compiled, strict=True):
            values = _floats(_table(by_feature.get(index, []), points, unseen))
            if name in fitted.levels:
                seed_terms.append(LevelsTerm(name, fitted.levels[name], values[:-1], values[-1]))
            else:
                seed_terms.append(StepTerm(name, edges, values[:-1],
                                           missing=values[-1] if had_missing else None))
    intercepts = [constant for constant, _, _ in compiled]
    if len(compiled) == 1:
        terms: tuple[Term, ...] = tuple(per_seed[0])
    else:
        for i, seed_terms in enumerate(per_seed):
            centred, shift = centre_terms(seed_terms, features)
            per_seed[i], intercepts[i] = list(centred), intercepts[i] + shift
        terms = tuple(_average([seed_terms[j] for seed_terms in per_seed])
                      for j in range(len(split)))
    details = {
        "seeds": list(fitted.seeds),
        "iterations": [int(e.n_iter_) for e in fitted.estimators],
        "trees": [count for _, _, count in compiled],
        "single_leaf_trees": [count - sum(len(t) for t in by_feature.values())
                              for _, by_feature, count in compiled],
        "unsplit_features": [n for n in features.columns
                             if fitted.columns.index(n) not in split],
        "missing_rule": MISSING_RULE,
        "unseen_level_rule": UNSEEN_RULE,
    }
    not_learned = {name: [seed for seed, seen in zip(fitted.seeds, fitted.learned_missing,
                                                     strict=True) if name not in seen]
                   for name in (fitted.columns[i] for i in split)
                   if name not in fitted.levels and features[name].isna().any()}
    not_learned = {name: seeds for name, seeds in not_learned.items() if seeds}
    if not_learned:
        details["missing_not_learned"] = not_learned
        details["missing_not_learned_rule"] = NOT_LEARNED_RULE
    if len(compiled) > 1:
        details["band_rule"] = BAND_RULE
    return float(np.mean(intercepts)), terms, details


def _average(terms: list[Term]) -> Term:
    """The mean of one feature's tables over seeds, with their spread as the band."""
    stacked = np.array([t.values for t in terms])
    mean = stacked.mean(axis=0)
    # the mean may round one ulp outside the extremes; widen the band rather than move it
    lower = _floats(np.minimum(stacked.min(axis=0), mean))
    upper = _floats(np.maximum(stacked.max(axis=0), mean))
    first = terms[0]
    if isinstance(first, LevelsTerm):
        unseen = float(np.mean([t.unseen for t in terms]))
        return LevelsTerm(first.feature, first.levels, _floats(mean), unseen, lower, upper)
    if first.missing is None:
        return StepTerm(first.feature, first.edges, _floats(mean), lower, upper)
    missing = [t.missing for t in terms]
    average = float(np.mean(missing))
    band = (min(min(missing), average), max(max(missing), average))
    return StepTerm(first.feature, first.edges, _floats(mean), lower, upper, average, band)


def fit(
    features: pd.DataFrame, target: np.ndarray, schema: Schema, *, task: str, **options: Any
) -> FamilyFit:
    """Fit the boosted family and compile its trees into term tables."""
    settings = check_options(options)
    fitted = fit_estimators(features, target, schema, task=task, **settings)
    intercept, terms, details = compile_estimators(fitted, features)
    pairs: tuple[Any, ...] = ()
    if settings["pairs"]:
        pairs, counts = compile_pairs(fitted, features)
        details.update(pair_details(fitted, pairs, counts, settings["pairs"]))
    parameters = {
        **settings, "max_bins": MAX_BINS, "stopping_tolerance": STOPPING_TOLERANCE,
        "loss": "log_loss" if task == "classification" else "squared_error",
        "one_feature_per_tree": not settings["pairs"],
    }
    return FamilyFit(intercept, terms, parameters, details, pairs)
