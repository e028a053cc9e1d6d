"""Reasons for one row's score: the terms that hold it furthest below the best the model allows.

For each term the gap is the distance between the row's contribution and the most favourable
contribution the term's table gives ("points below the maximum", the usual way adverse-action
reason codes are ranked; common practice, no source), sought over the levels seen in training
and, for numeric features, over the central 98% of training values: a curve's far tail, set by
a handful of rows, would otherwise be every row's first reason. Gaps are on the score scale
(log-odds for classification) and never negative (a row beyond the central range may already
score better than the bar). Which way is favourable comes from
the schema's `[target] better`. Protected columns are never model inputs and never reasons.

A row with no value for a feature gets the term's missing-value entry, and its gap is
measured from the same best (which is sought over values only, never over "missing"); such a
reason reads "FEATURE not provided".

A pairwise table is a reason like a term (`pair_best`): its gap is the distance between the
row's value of the table and the most favourable value the table gives over the levels seen
in training and the central 98% of each numeric feature's training values, together (the
corners of the cells inside that box: a table read on straight lines between knots is
largest at one of them). Its reason names both features and both values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm, Term
from glassbox.core.errors import OptionError

NOTHING = 1e-12  # a gap this small is no reason
CENTRAL = (1, 99)  # numeric features: the best is sought between these training percentiles


@dataclass(frozen=True)
class Reason:
    """One term's pull on a row's score, with a plain sentence."""

    feature: str  # a feature, or a pair's name ("A & B")
    value: Any  # the row's value as the model reads it (a pair: the two values)
    gap: float  # how far below its best the term leaves the score (score scale, >= 0)
    text: str
    contribution: float | None = None  # what the term (or pair) adds to the row's score


@dataclass(frozen=True)
class Best:
    """Where a term's table is most favourable: the contribution and where it is reached."""

    contribution: float
    spans: tuple[tuple[float, float], ...] = ()  # numeric terms: the intervals reaching it
    level: str | None = None  # levels terms: the (first) best level
    at: tuple[Any, Any] | None = None  # pairs: the (first) two values reaching it


def central_range(model: AdditiveModel, feature: str) -> tuple[float, float]:
    """The values the central 98% of training rows take (1st to 99th percentile), or the
    whole line when the model keeps no profile of the feature."""
    try:
        table = model.profile(feature).percentiles
    except OptionError:
        return -math.inf, math.inf
    if len(table) < 100:
        return -math.inf, math.inf
    return float(table[CENTRAL[0]]), float(table[CENTRAL[1]])


def central_words(model: AdditiveModel, feature: str) -> str:
    """Where `best_of` looks, in words: the levels seen in training, the central range
    with its values, or the whole table when the model keeps no profile of the feature."""
    if isinstance(model.term(feature), LevelsTerm):
        return "over the levels seen in training"
    low, high = central_range(model, feature)
    if not (math.isfinite(low) and math.isfinite(high)):
        return "anywhere in its table (the model keeps no training profile of it)"
    if model.schema.feature(feature).kind == "flag":
        seen = " and ".join(dict.fromkeys(_value_text(model, feature, v) for v in (low, high)))
        return (f"over the values of the central {CENTRAL[1] - CENTRAL[0]}% of training rows "
                f"({seen})")
    # both ends in one style: whole numbers with separators when the larger reaches
    # 1,000, else 4 significant digits
    large = max(abs(low), abs(high)) >= 1000
    ends = [f"{value:,.0f}" if large else f"{value:.4g}" for value in (low, high)]
    return (f"within the central {CENTRAL[1] - CENTRAL[0]}% of training values (percentiles "
            f"{CENTRAL[0]} to {CENTRAL[1]}: {ends[0]} to {ends[1]})")


def best_of(model: AdditiveModel, term: Term, sign: int | None = None) -> Best:
    """The most favourable contribution a term's table gives, over the levels seen in
    training, or over the central 98% of training values for a numeric feature (so that a
    handful of extreme rows does not set the bar for everyone). Favourable is higher when
    `sign` is +1, lower when -1; by default, the way the schema's `[target] better` says."""
    sign = model.schema.target.good_sign if sign is None else sign
    if isinstance(term, LevelsTerm):
        values = np.asarray(term.values, dtype=float)
        top = int(np.argmax(sign * values))
        return Best(float(values[top]), level=term.levels[top])
    low, high = central_range(model, term.feature)
    if isinstance(term, CurveTerm):
        knots = np.asarray(term.knots, dtype=float)
        points = knots[(knots >= low) & (knots <= high)]
        points = np.unique(np.r_[points, [v for v in (low, high) if math.isfinite(v)]])
        if not len(points):
            points = knots
        values = term.evaluate(points)
        winners = np.flatnonzero(sign * values >= (sign * values).max() - NOTHING)
        # beyond the outer knots the table is flat, so an end knot reaches out to infinity
        spans = tuple((-math.inf if p <= knots[0] else float(p),
                       math.inf if p >= knots[-1] else float(p)) for p in points[winners])
        return Best(float(values[winners[0]]), spans=spans)
    if isinstance(term, StepTerm):
        edges = np.r_[-math.inf, np.asarray(term.edges, dtype=float), math.inf]
        reach = (edges[:-1] < high) & (edges[1:] >= low)  # bin (e_i, e_i+1] meets [low, high]
        if not reach.any():
            reach[:] = True
        values = np.asarray(term.values, dtype=float)
        favour = np.where(reach, sign * values, -np.inf)
        winners = np.flatnonzero(favour >= favour.max() - NOTHING)
        return Best(float(values[winners[0]]), spans=tuple(
            (float(edges[w]), float(edges[w + 1])) for w in winners))
    raise TypeError(f"unknown term type {type(term).__name__}")


def axis_candidates(model: AdditiveModel, axis: Any) -> list[Any]:
    """Values of a pair's axis where its table can be most favourable inside the central
    box: every level; a value in each bin meeting the central range; the knots inside
    the central range and its two ends."""
    if axis.kind == "levels":
        return list(axis.points)
    low, high = central_range(model, axis.feature)
    points = np.asarray(axis.points, dtype=float)
    if axis.kind == "edges":
        bounds = np.r_[-math.inf, points, math.inf]
        meets = (bounds[:-1] < high) & (bounds[1:] >= low)
        if not meets.any():
            meets[:] = True
        # the bin's upper edge, or the central range's top when that comes first: inside both
        return [float(min(upper, high)) if math.isfinite(min(upper, high)) else
                float(bounds[i] + 1.0) for i, upper in enumerate(bounds[1:]) if meets[i]]
    inside = points[(points >= low) & (points <= high)]
    chosen = np.unique(np.r_[inside, [v for v in (low, high) if math.isfinite(v)]])
    return [float(v) for v in (chosen if len(chosen) else points)]


def pair_best(model: AdditiveModel, pair: Any, sign: int | None = None) -> Best:
    """The most favourable value a pair's table gives inside the central box (see the
    module docstring), and the first two values reaching it."""
    sign = model.schema.target.good_sign if sign is None else sign
    firsts, seconds = axis_candidates(model, pair.first), axis_candidates(model, pair.second)
    grid_a = np.repeat(np.asarray(firsts, dtype=object), len(seconds))
    grid_b = np.tile(np.asarray(seconds, dtype=object), len(firsts))
    values = pair.evaluate(grid_a if pair.first.kind == "levels" else grid_a.astype(float),
                           grid_b if pair.second.kind == "levels" else grid_b.astype(float))
    top = int(np.argmax(sign * values))
    return Best(float(values[top]), at=(grid_a[top], grid_b[top]))


def bests(model: AdditiveModel) -> dict[str, Best]:
    """Each term's best, in the model's order, then each pair's (by its name); protected
    columns never have one."""
    protected = {f.name for f in model.schema.protected_features}
    found = {t.feature: best_of(model, t) for t in model.terms if t.feature not in protected}
    found.update({p.name: pair_best(model, p) for p in model.pairs
                  if not protected.intersection(p.features)})
    return found


def part_values(model: AdditiveModel, name: str, encoded: pd.DataFrame) -> np.ndarray:
    """What a term or a pair (by its name) adds to each row of an encoded frame."""
    for pair in model.pairs:
        if pair.name == name:
            return pair.evaluate_frame(encoded)
    return np.asarray(model.term(name).evaluate(encoded[name].to_numpy()), dtype=float)


def gaps(model: AdditiveModel, encoded: pd.DataFrame,
         best: dict[str, Best] | None = None,
         parts: dict[str, np.ndarray] | None = None) -> pd.DataFrame:
    """Per row and term (and pair): how far the row's contribution sits below the best."""
    sign = model.schema.target.good_sign
    best = bests(model) if best is None else best
    parts = parts or {name: part_values(model, name, encoded) for name in best}
    columns = {name: np.maximum(0.0, sign * (found.contribution - parts[name]))
               for name, found in best.items()}
    return pd.DataFrame(columns, index=encoded.index)


def _label(feature: str) -> str:
    return feature.replace("_", " ")


def _value_text(model: AdditiveModel, feature: str, value: Any) -> str:
    kind = model.schema.feature(feature).kind
    if kind == "flag":
        return "yes" if float(value) else "no"
    if kind == "category":
        return f"'{value}'"
    number = float(value)
    return f"{number:,.0f}" if number == round(number) and abs(number) >= 1000 else f"{number:g}"


def sentence(model: AdditiveModel, feature: str, value: Any, best: Best | None = None) -> str:
    """The schema's reason text for the feature, else one made from its name and value
    (`best`: the term's `best_of`, when the caller has it); for a missing value, always
    "FEATURE not provided" (the schema's text speaks of values)."""
    spec = model.schema.feature(feature)
    if is_missing(value):
        return f"{_label(feature)} not provided"
    if spec.reason:
        return spec.reason
    term, label = model.term(feature), _label(feature)
    best = best_of(model, term) if best is None else best
    shown = _value_text(model, feature, value)
    if isinstance(term, LevelsTerm):
        return f"{label} is {shown}; '{best.level}' scores best"
    if spec.kind == "flag":
        wanted = "yes" if _flag_best(term, model) else "no"
        return f"{label} is {shown}; '{wanted}' scores better"
    number = float(value)
    nearest = min(best.spans, key=lambda span: max(span[0] - number, number - span[1], 0.0))
    way = "lower" if number > nearest[1] else "higher"
    return f"{label} of {shown}; {way} values score better"


def is_missing(value: Any) -> bool:
    """Whether one value, as `AdditiveModel.encode` types it, is missing (NaN or None)."""
    return value is None or (isinstance(value, float | np.floating) and math.isnan(value))


def _flag_best(term: Term, model: AdditiveModel) -> bool:
    """Whether a flag scores better at 1 (yes) than at 0 (no)."""
    sign = model.schema.target.good_sign
    yes, no = term.evaluate(np.array([1.0, 0.0]))
    return bool(sign * (yes - no) > 0)


def row_reasons(model: AdditiveModel, encoded: pd.DataFrame, top: int = 4) -> list[list[Reason]]:
    """Up to `top` reasons per row of a frame typed by `AdditiveModel.encode`, largest first."""
    if top < 1:
        raise OptionError(f"--top must be at least 1, not {top}")
    best = bests(model)
    parts = {name: part_values(model, name, encoded) for name in best}
    table = gaps(model, encoded, best, parts)
    names = list(table.columns)
    pairs = {p.name: p for p in model.pairs}
    values = table.to_numpy()
    out = []
    for row in range(len(table)):
        order = sorted(range(len(names)), key=lambda j, r=row: (-values[r, j], j))
        reasons = []
        for j in order[:top]:
            if values[row, j] <= NOTHING:
                break
            name = names[j]
            if name in pairs:
                value: Any = tuple(encoded[f].iloc[row] for f in pairs[name].features)
                text = pair_sentence(model, pairs[name], value)
            else:
                value = encoded[name].iloc[row]
                text = sentence(model, name, value, best[name])
            reasons.append(Reason(name, value, float(values[row, j]), text,
                                  float(parts[name][row])))
        out.append(reasons)
    return out


def _part_words(model: AdditiveModel, feature: str, value: Any) -> str:
    if is_missing(value):
        return f"{_label(feature)} not provided"
    if model.schema.feature(feature).kind == "category":
        return f"{_label(feature)} {_value_text(model, feature, value)}"
    return f"{_label(feature)} of {_value_text(model, feature, value)}"


def pair_sentence(model: AdditiveModel, pair: Any, values: tuple[Any, Any]) -> str:
    """A pair's reason, worded for both features: "Income of 80 together with Seniority of
    2; other combinations of the two score better", with the schema's reason texts of the
    two features after it when it has them."""
    first, second = (_part_words(model, f, v) for f, v in zip(pair.features, values,
                                                                 strict=True))
    own = [model.schema.feature(f).reason for f in pair.features
           if model.schema.feature(f).reason]
    words = f"{first} together with {second}; other combinations of the two score better"
    return f"{words} ({'; '.join(own)})" if own else words


def checked_cutoff(model: AdditiveModel, cutoff: float | None) -> float:
    """The cut-off to use: a probability for classification (default 0.5), a predicted
    value for regression (which must be given)."""
    if model.link == "logit":
        cutoff = 0.5 if cutoff is None else cutoff
        if not 0 < cutoff < 1:
            raise OptionError(f"--cutoff is a probability between 0 and 1, not {cutoff}")
    elif cutoff is None:
        raise OptionError("a regression model needs --cutoff VALUE (a predicted value)")
    return float(cutoff)


def unfavourable(model: AdditiveModel, score: np.ndarray, cutoff: float | None) -> np.ndarray:
    """Rows on the unfavourable side of the cut-off (a probability for classification,
    default 0.5; a predicted value for regression, which must be given)."""
    cutoff = checked_cutoff(model, cutoff)
    outcome = model.inverse_link(np.asarray(score))
    return outcome > cutoff if model.schema.target.better == "lower" else outcome < cutoff


def reasons_table(model: AdditiveModel, frame: pd.DataFrame, top: int = 4,
                  source: str | None = None) -> pd.DataFrame:
    """One row per input row: id, score, outcome and the ranked reasons (text, feature, gap)."""
    return explain(model, frame, top, source)[0]


def explain(model: AdditiveModel, frame: pd.DataFrame, top: int = 4,
            source: str | None = None) -> tuple[pd.DataFrame, list[list[Reason]]]:
    """`reasons_table`, and the `Reason` records it was made from (one list per row)."""
    encoded = model.encode(frame, source)
    score = model.score_encoded(encoded)
    out = pd.DataFrame(index=range(len(frame)))
    id_column = model.schema.id_column
    if id_column and id_column in frame:
        out[id_column] = frame[id_column].to_numpy()
    out["score"] = score
    out["probability" if model.link == "logit" else "prediction"] = model.inverse_link(score)
    found = row_reasons(model, encoded, top)
    for k in range(top):
        out[f"reason_{k + 1}"] = [r[k].text if len(r) > k else "" for r in found]
        out[f"feature_{k + 1}"] = [r[k].feature if len(r) > k else "" for r in found]
        out[f"gap_{k + 1}"] = [r[k].gap if len(r) > k else np.nan for r in found]
    return out, found


def principal_reasons(model: AdditiveModel, frame: pd.DataFrame, cutoff: float | None = None,
                      source: str | None = None) -> pd.DataFrame:
    """How often each feature is the first reason among rows on the unfavourable side."""
    return principal_of(model, reasons_table(model, frame, top=1, source=source), cutoff)


def principal_of(model: AdditiveModel, table: pd.DataFrame,
                 cutoff: float | None = None) -> pd.DataFrame:
    """The same, from a `reasons_table` already made (its score and first reason)."""
    below = unfavourable(model, table["score"].to_numpy(), cutoff)
    columns = ["feature", "reason", "rows", "share"]
    if not below.any():
        return pd.DataFrame(columns=columns)
    first = table.loc[below, ["feature_1", "reason_1"]]
    first = first[first["feature_1"] != ""]
    # a blank is its own reason ("FEATURE not provided"), counted apart from the values
    pairs = {p.name for p in model.pairs}
    keys = list(zip(first["feature_1"], first["reason_1"] == first["feature_1"].map(
        lambda name: None if name in pairs else sentence(model, name, None)), strict=True))
    counts = pd.Series(keys, dtype=object).value_counts(sort=False)
    order = sorted(counts.index, key=lambda key: (-counts[key], model.parts.index(key[0]),
                                                  key[1]))
    rows = [{"feature": name,
             "reason": (sentence(model, name, None) if blank else
                        f"{name} together (a pairwise table)" if name in pairs
                        else model.schema.feature(name).reason or _label(name)),
             "rows": int(counts[(name, blank)]),
             "share": float(counts[(name, blank)] / below.sum())}
            for name, blank in order]
    return pd.DataFrame(rows, columns=columns)
