"""Pairwise terms for the boosted family: trees restricted to chosen pairs, after the mains.

With the `pairs` setting K > 0 the boosted family fits in two stages on one scikit-learn
model, so the result is still one exact scikit-learn model that the tables reproduce:

1. the main effects, as without pairs (one feature per tree, early stopping as set);
2. the pairs: the K best pairs are ranked (`rank_pairs`, Lou, Caruana, Gehrke & Hooker
   2013) on the stage-1 model's scores over every training row, then boosting continues
   on the same model (scikit-learn's warm start: same validation part, same bins) with the
   interaction constraint groups = the K pairs, plus every other feature on its own
   (scikit-learn puts a feature no group names into one shared group, which would let
   those features interact, so each gets a group of its own). Stage 2 has its own budget
   of `max_iter` iterations and its own early stopping, started afresh at the stage-1
   model's last score (`fresh_stopping`; the fitted model's `validation_score_` then
   holds stage 2's scores only).

Rules this module follows:

- A stage-2 tree is made of the features of one group along each path from its root, so
  it splits either on one feature outside the pairs (it adds to that feature's main term)
  or on features of the pairs only. Each leaf of such a tree is given to the first chosen
  pair (in ranking order) that holds every feature on the leaf's path; a pair's table is
  the sum, over the stage-2 trees, of its leaves' values on the grid. A tree whose root
  splits on a feature shared by two pairs can have its two sides in two pairs; the leaf
  split keeps the sum exact. A leaf whose path uses one feature only goes to the first
  pair with that feature too (purifying moves it into the main term).
- Axes: a number's axis is `edges`, the union of the thresholds of every stage-2 tree on
  it, with a missing entry when the training column had missing numbers (read as
  scikit-learn routes NaN); a category's axis is `levels`, its training levels (a missing
  category is the level "(missing)", which fitting turns into the missing entry).
- PAIR_UNSEEN_RULE: a level never seen in training adds nothing in a pair (the table has
  no entry for it). scikit-learn routes such a level as missing; the main term still
  follows scikit-learn (see boosted.UNSEEN_RULE), the pair does not.
- `ensemble` > 1 with pairs is refused (each seed could choose different pairs).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import OptionError
from glassbox.core.pairs import Axis, PairTerm, table_tuple
from glassbox.core.schema import Schema
from glassbox.fitting.pair_ranking import PairRank, rank_pairs

PAIR_UNSEEN_RULE = ("a level never seen in training adds nothing in a pair (its table has no "
                    "entry for it), where scikit-learn would route it as a missing value; "
                    "its main term follows scikit-learn")
PAIR_STAGE_RULE = ("after the main effects stop, boosting continues on the same model with "
                   "trees restricted to one chosen pair each (or one other feature each)")
RANKING_SHOWN = 20  # pairs of the ranking kept in the fit's details


def check_pairs(settings: dict[str, Any]) -> None:
    """Refuse settings that do not go with pairs."""
    if settings["pairs"] > 0 and settings["ensemble"] > 1:
        raise OptionError(f"boosted option pairs ({settings['pairs']}) cannot be combined "
                          f"with ensemble {settings['ensemble']}: each seed could choose "
                          "different pairs; set ensemble to 1 or pairs to 0")


def choose_pairs(estimator: Any, matrix: np.ndarray, features: pd.DataFrame, target: np.ndarray,
                 schema: Schema, columns: tuple[str, ...], task: str, count: int,
                 ) -> tuple[tuple[PairRank, ...], tuple[tuple[int, int], ...]]:
    """The ranking on the stage-1 model's training scores and the best `count` pairs, as
    positions in `columns` (the first feature first, in ranking order)."""
    from glassbox.fitting.families.boosted import _raw_score

    scores = _raw_score(estimator, matrix)
    ranking = rank_pairs(features, schema, target, scores,
                         "logit" if task == "classification" else "identity",
                         among=[c for c in features.columns])
    position = {name: i for i, name in enumerate(columns)}
    chosen = tuple((position[r.feature_a], position[r.feature_b]) for r in ranking[:count])
    return ranking, chosen


def constraint_groups(chosen: tuple[tuple[int, int], ...], width: int) -> list[list[int]]:
    """Stage 2's interaction groups: the pairs, then every other feature alone."""
    inside = {i for pair in chosen for i in pair}
    return [list(pair) for pair in chosen] + [[i] for i in range(width) if i not in inside]


def fresh_stopping(estimator: Any) -> None:
    """Start the pair stage's early stopping afresh: scikit-learn's record of scores is
    cut to the stage-1 model's last one, so the pair stage stops when n_iter_no_change of
    its own iterations do not improve on where the main effects ended (otherwise stage 1's
    last, often overfitted, iterations would be the reference and stop it at once)."""
    if getattr(estimator, "do_early_stopping_", False):
        estimator.train_score_ = estimator.train_score_[-1:]
        estimator.validation_score_ = estimator.validation_score_[-1:]


def tree_features(nodes: np.ndarray) -> set[int]:
    return set(nodes["feature_idx"][nodes["is_leaf"] == 0].tolist())


def leaf_paths(nodes: np.ndarray) -> dict[int, frozenset[int]]:
    """Each leaf's node index and the features on the path from the root to it."""
    paths: dict[int, frozenset[int]] = {}
    stack = [(0, frozenset())]
    while stack:
        at, seen = stack.pop()
        node = nodes[at]
        if node["is_leaf"]:
            paths[at] = seen
            continue
        inner = seen | {int(node["feature_idx"])}
        stack.extend([(int(node["left"]), inner), (int(node["right"]), inner)])
    return paths


def _owner(path: frozenset[int], chosen: tuple[tuple[int, int], ...]) -> int:
    for k, pair in enumerate(chosen):
        if path <= set(pair):
            return k
    raise RuntimeError("a pair-stage tree has a path outside every chosen pair; the "
                       "interaction constraint failed, so the trees cannot be read back")


def _walk(predictor: Any, inputs: dict[int, tuple[np.ndarray, bool]],
          keep: np.ndarray) -> np.ndarray:
    """Leaf values of one tree on rows given for some features only (a NaN is a missing
    number; a category is its level code); 0 where the path leaves those features or ends
    in a leaf not in `keep` (a boolean per node). Mirrors scikit-learn's prediction."""
    nodes = predictor.nodes
    rows = len(next(iter(inputs.values()))[0])
    at = np.zeros(rows, dtype=np.intp)
    alive = np.ones(rows, dtype=bool)
    while True:
        leaf = nodes["is_leaf"][at].astype(bool)
        moving = ~leaf & alive
        if not moving.any():
            return np.where(alive & keep[at], nodes["value"][at], 0.0)
        node = nodes[at]
        left = np.zeros(rows, dtype=bool)
        known = np.zeros(rows, dtype=bool)
        for feature, (values, categorical) in inputs.items():
            on = moving & (node["feature_idx"] == feature)
            if not on.any():
                continue
            known |= on
            split = node[on]
            if categorical:
                codes = values[on].astype(np.intp)
                bitsets = predictor.raw_left_cat_bitsets[split["bitset_idx"].astype(np.intp)]
                words = bitsets[np.arange(len(codes)), codes // 32]
                left[on] = ((words >> (codes % 32).astype(np.uint32)) & 1).astype(bool)
            else:
                x = values[on]
                left[on] = np.where(np.isnan(x), split["missing_go_to_left"].astype(bool),
                                    x <= split["num_threshold"])
        alive &= ~(moving & ~known)
        step = np.where(left, node["left"], node["right"]).astype(np.intp)
        at = np.where(moving & alive, step, at)


def compile_pairs(fitted: Any, features: pd.DataFrame
                  ) -> tuple[tuple[PairTerm, ...], list[int]]:
    """One uncentred table per chosen pair from the stage-2 trees on pair features, and the
    number of trees that put something in each pair."""
    estimator = fitted.estimators[0]
    chosen = fitted.pairs
    inside = {i for pair in chosen for i in pair}
    trees = [predictor for iteration in estimator._predictors[fitted.main_iterations[0]:]
             for predictor in iteration
             if tree_features(predictor.nodes) and tree_features(predictor.nodes) <= inside]
    owners = []
    for tree in trees:
        paths = leaf_paths(tree.nodes)
        owners.append({leaf: _owner(path, chosen) for leaf, path in paths.items()})
    pairs, counts = [], []
    for k, pair in enumerate(chosen):
        axes, grids = [], []
        for index in pair:
            axis, grid = _axis(fitted, features, index, trees)
            axes.append(axis)
            grids.append(grid)
        first, second = np.meshgrid(grids[0], grids[1], indexing="ij")
        inputs = {pair[0]: (first.ravel(), fitted.columns[pair[0]] in fitted.levels),
                  pair[1]: (second.ravel(), fitted.columns[pair[1]] in fitted.levels)}
        table = np.zeros(first.size)
        used = 0
        for tree, owner in zip(trees, owners, strict=True):
            keep = np.zeros(len(tree.nodes), dtype=bool)
            keep[[leaf for leaf, o in owner.items() if o == k]] = True
            if keep.any():
                used += 1
                table += _walk(tree, inputs, keep)
        pairs.append(PairTerm(axes[0], axes[1], table_tuple(table.reshape(first.shape))))
        counts.append(used)
    return tuple(pairs), counts


def _axis(fitted: Any, features: pd.DataFrame, index: int,
          trees: list[Any]) -> tuple[Axis, np.ndarray]:
    """A pair axis for one feature and the points its entries are read at."""
    name = fitted.columns[index]
    if name in fitted.levels:
        levels = fitted.levels[name]
        return Axis(name, "levels", tuple(levels)), np.arange(len(levels), dtype=float)
    thresholds = [t.nodes["num_threshold"][(t.nodes["is_leaf"] == 0)
                                           & (t.nodes["feature_idx"] == index)] for t in trees]
    found = np.concatenate(thresholds) if thresholds else np.zeros(0)
    edges = np.unique(found[np.isfinite(found)])
    missing = bool(features[name].isna().any())
    # entry i is (edges[i-1], edges[i]]: its right end represents it; the last runs to inf
    grid = np.append(edges, [np.inf, np.nan] if missing else [np.inf])
    return Axis(name, "edges", tuple(float(e) for e in edges), missing), grid


def pair_details(fitted: Any, pairs: tuple[PairTerm, ...], counts: list[int],
                 asked: int) -> dict[str, Any]:
    """What the fit records about its pairs."""
    estimator = fitted.estimators[0]
    main = fitted.main_iterations[0]
    details: dict[str, Any] = {
        "pairs_asked": asked,
        "pairs": [list(p.features) for p in pairs],
        "pair_ranking": [r.to_dict() for r in fitted.ranking[:RANKING_SHOWN]],
        "pair_ranking_size": len(fitted.ranking),
        "pair_trees": {p.name: n for p, n in zip(pairs, counts, strict=True)},
        "iterations_main": main,
        "iterations_pairs": int(estimator.n_iter_) - main,
        "pair_stage_rule": PAIR_STAGE_RULE,
        "pair_unseen_rule": PAIR_UNSEEN_RULE,
    }
    if len(pairs) < asked:
        details["pairs_note"] = (f"{asked} pairs were asked for but only {len(pairs)} pairs "
                                 "of features can be cut (a feature with one value takes "
                                 "part in none)")
    return details
