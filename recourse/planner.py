"""Plans for one row: several distinct cheapest plans, each re-scored by the model.

A plan is a set of changes to a row's changeable features that moves the
model's score past the goal. Plans come from the integer program over the
model's own tables; every plan is re-scored through `AdditiveModel` before it is
returned, and one that misses the goal is a bug (it raises). When no plan exists
within the rules, the result says how close the rules allow and which rules bind.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel
from glassbox.core.wording import plural
from glassbox.explaining.reasons import best_of, central_words
from recourse.candidates import Candidate, FeatureCandidates, encoded_candidates, is_missing
from recourse.choices import MOST_PLANS
from recourse.errors import OutsideError, PlanningError
from recourse.mutability import Goal, Mutability
from recourse.pair_rules import pair_matrices, row_rules, rules_kept
from recourse.pair_terms import folded_at, pair_shares, program_tables, row_pairs
from recourse.program import (
    BUFFER,
    DEFAULT_SOLVER,
    Program,
    Solution,
    best_reachable,
    gain_needed,
    solve,
)
from recourse.supply import Stretch, accepted, least_first
from recourse.tails import TailWarning, tail_warning

SHOWN_FINDINGS = 6  # "no plan": the most limiting rules listed (the summary says when more)
CAUTION = ("These plans are what-ifs computed from a statistical model, not advice and not a "
           "promise of any decision. Real decisions follow the lender's or marketplace's "
           "policy and local law; protected characteristics are never levers.")


@dataclass(frozen=True)
class Change:
    """One feature's move: from the row's value to the proposed one, at a cost."""

    feature: str
    current: float | str | None  # NaN or None: the row has no value (see `supplied`)
    proposed: float | str
    difference: float | None  # proposed - current, numeric features with a value only
    cost: float
    supplied: bool = False  # the row had no value: the plan states one (supply_cost)
    accepted: tuple[Stretch, ...] | tuple[str, ...] = ()  # supplied: the values that would do
    tail: TailWarning | None = None  # the proposed value is in a sparse, uncertain tail


@dataclass(frozen=True)
class Plan:
    """A set of changes and what the model says after them."""

    changes: tuple[Change, ...]
    score: float
    outcome: float  # probability (classification) or predicted value (regression)
    total_cost: float
    largest_cost: float
    # the model's pairwise terms the plan moves: (pair name, value before, value after)
    pairs: tuple[tuple[str, float, float], ...] = ()

    @property
    def count(self) -> int:
        return len(self.changes)

    @property
    def tail_warnings(self) -> int:
        """How many of its changes propose a value in a sparse, uncertain tail."""
        return sum(c.tail is not None for c in self.changes)


@dataclass(frozen=True)
class PlanResult:
    """What the planner found for one row."""

    status: str  # "plans" | "already" | "none" | "error" (the rules do not fit the row) |
    # "outside" (a value the planner cannot place steps around exactly, see candidates)
    score: float
    outcome: float
    target: float
    direction: str
    plans: tuple[Plan, ...] = ()
    best_score: float | None = None  # "none": the best the rules allow
    best_outcome: float | None = None
    binding: tuple[str, ...] = ()  # "none": the rules that bind, most limiting first
    binding_rules: tuple[str, ...] = ()  # the same as short names ("bounds on x", "x fixed")
    row_id: Any = None
    message: str = ""  # "error", "outside": why the rules cannot be applied to this row
    # why the fast exact solver handed the row to the general integer program ("pairwise
    # terms", "linked rules"); empty when it did not (summaries count these rows)
    handed_off: str = ""


def _reaches(score: float, threshold: float, direction: str) -> bool:
    return score >= threshold if direction == "at-least" else score <= threshold


def _favourable(direction: str) -> int:
    return 1 if direction == "at-least" else -1


def find_plans(model: AdditiveModel, row: pd.Series, mutability: Mutability,
               n_plans: int = 3, solver: str = DEFAULT_SOLVER, row_id: Any = None) -> PlanResult:
    """Up to `n_plans` distinct cheapest plans for one raw row (a Series of its values)."""
    return plan_encoded(model, model.encode(pd.DataFrame([row])), mutability, n_plans=n_plans,
                        solver=solver, row_id=row_id)


def plan_encoded(model: AdditiveModel, encoded: pd.DataFrame, mutability: Mutability,
                 n_plans: int = 3, solver: str = DEFAULT_SOLVER, row_id: Any = None,
                 parts: pd.Series | None = None) -> PlanResult:
    """The same for one row already typed by `AdditiveModel.encode` (a one-row frame);
    `parts` may carry its contributions when the caller scored many rows at once."""
    check_plan_count(n_plans)
    goal = mutability.goal
    if parts is None:
        parts = model.contributions_encoded(encoded).iloc[0]
    score = float(total_scores(model, parts.to_numpy(dtype=float)[None, :])[0])
    outcome = float(model.inverse_link(np.array([score]))[0])
    threshold = goal.threshold(model.link)
    common = {"score": score, "outcome": outcome, "target": goal.target,
              "direction": goal.direction, "row_id": row_id}
    if not goal.missed(np.array([score]), model.link)[0]:  # the margin is for plans only
        return PlanResult("already", **common)
    need = gain_needed(score, threshold, goal.direction)
    try:
        candidates = encoded_candidates(model, encoded.iloc[0], mutability, need)
    except OutsideError as exc:
        return PlanResult("outside", message=str(exc), **common)
    names = tuple(candidates)
    program = row_program(candidates, score, parts, goal, threshold, mutability,
                          model=model, values=encoded.iloc[0])
    solutions: list[Solution] = []
    forbidden: list[frozenset[int]] = []
    for _ in range(n_plans):
        solution = solve(replace(program, forbidden=tuple(forbidden)), solver)
        if solution.status != "optimal":
            break
        solutions.append(solution)
        forbidden.append(frozenset(g for g, pick in enumerate(solution.choice) if pick != 0))
    if solutions:
        plans = _plans(model, encoded, names, candidates, solutions, threshold, mutability)
        return PlanResult("plans", plans=plans, handed_off=_handed_off(solutions[0]), **common)
    best = best_reachable(program)
    blank = {name for name in model.features if is_missing(encoded.iloc[0][name])}
    # kept only so a blank may be stated: where the row has a value, the feature is fixed
    stated_only = {name for name, rule in mutability.rules.items()
                   if rule.change == "fixed" and name not in blank}
    summary, findings = _diagnosis(model, parts, {n: c for n, c in candidates.items()
                                                  if n not in stated_only}, program, blank,
                                   encoded.iloc[0])
    return PlanResult("none", best_score=best, handed_off=_handed_off(solution),
                      best_outcome=float(model.inverse_link(np.array([best]))[0]),
                      binding=(summary, *(text for _, text in findings)),
                      binding_rules=tuple(rule for rule, _ in findings), **common)


def _handed_off(solution: Solution) -> str:
    """Why the fast solver handed a program on (its message says), or ""."""
    from recourse.solver import HANDED_OFF

    text = solution.message
    return text[text.index(HANDED_OFF) + len(HANDED_OFF):].strip(" )") if (
        HANDED_OFF in text) else ""


def total_scores(model: AdditiveModel, parts: np.ndarray) -> np.ndarray:
    """Each row's score from its contributions ([rows, features]): the intercept plus the
    row's sum, added the same way whatever the batch (numpy sums a contiguous row pairwise;
    pandas may sum a frame's columns one after another), so a row's plans never depend on
    the rows planned with it."""
    return model.intercept + np.ascontiguousarray(parts, dtype=float).sum(axis=1)


def check_plan_count(n_plans: int) -> None:
    """Refuse a number of plans per row below 1 or above MOST_PLANS."""
    if not 1 <= n_plans <= MOST_PLANS:
        raise PlanningError(f"--plans must be a whole number from 1 to {MOST_PLANS}, "
                            f"not {n_plans}")


def row_program(candidates: Mapping[str, FeatureCandidates], score: float, parts: pd.Series,
                goal: Goal, threshold: float, mutability: Mutability | None = None, *,
                model: AdditiveModel | None = None, values: Any = None) -> Program:
    """One row's integer program: its candidates (current value first) and the goal; the
    base is the score less the changeable features' current contributions. The links and
    level bounds of `mutability` between two of its features become pair rules.

    A model with pairwise terms needs `model` and the row's typed `values`: a pair one of
    whose features stays is already in the other's candidates (recourse.pair_terms), one
    whose two features move becomes a table of the program; both leave the base."""
    names = tuple(candidates)
    pairs = () if mutability is None else pair_matrices(
        mutability, {n: candidates[n].values for n in names}, names)
    contributions = {n: candidates[n].contributions for n in names}
    base = score - float(sum(parts[name] for name in names))
    tables: list = []
    if model is not None and model.pairs and mutability is not None:
        split = row_pairs(model, row_rules(model, mutability, values)[0], values)
        tables, added, constant = program_tables(split.joint, candidates, names)
        contributions.update({n: contributions[n] + extra for n, extra in added.items()})
        base += constant - float(sum(parts[p.name] for p in split.joint + split.folded))
    return Program(
        base=base, contributions=tuple(contributions[n] for n in names),
        costs=tuple(candidates[n].costs for n in names),
        current=tuple(0 for _ in names), threshold=threshold, direction=goal.direction,
        objective=goal.objective, max_changes=goal.max_changes, names=names, pairs=pairs,
        tables=tuple(tables))


def _plans(model: AdditiveModel, encoded: pd.DataFrame, names: Sequence[str],
           candidates: Mapping[str, FeatureCandidates], solutions: Sequence[Solution],
           threshold: float, mutability: Mutability) -> tuple[Plan, ...]:
    """Build the plans and re-score every changed row through the model itself; a stated
    value comes with every value the rules allow that would reach the goal as well."""
    direction = mutability.goal.direction
    changed_rows = pd.concat([encoded] * len(solutions), ignore_index=True)
    every = []
    for number, solution in enumerate(solutions):
        changes = []
        for group, pick in enumerate(solution.choice):
            if pick == 0:
                continue
            name = names[group]
            now, new = candidates[name][0], candidates[name][pick]
            changed_rows.loc[number, name] = new.value
            supplied = is_missing(now.value)
            numeric = not isinstance(new.value, str) and not supplied
            changes.append(Change(name, now.value, new.value,
                                  float(new.value) - float(now.value) if numeric else None,
                                  float(new.cost), supplied))
        every.append(changes)
    rescored = model.score_encoded(changed_rows)
    plans = []
    for number, (changes, solution, score) in enumerate(zip(every, solutions, rescored,
                                                          strict=True)):
        score = float(score)
        if not _reaches(score, threshold, direction) or not math.isclose(
                score, solution.score, rel_tol=0, abs_tol=1e-9):
            raise RuntimeError(f"planner bug: a plan re-scores to {score!r}, the program said "
                               f"{solution.score!r}; threshold {threshold!r} ({direction})")
        if not rules_kept(mutability, encoded.iloc[0], changed_rows.iloc[number]):
            raise RuntimeError("planner bug: a plan breaks a link or level_bound")
        after = changed_rows.iloc[number]
        changes = [replace(c, accepted=_accepted(model, mutability, c, after, score, threshold))
                   if c.supplied else c for c in changes]
        if any(c.supplied for c in changes):  # only then is the row needed again
            changes, score = _least_stated(model, changed_rows.iloc[[number]].copy(), changes,
                                           score, threshold, mutability, encoded.iloc[0])
        changes = [replace(c, tail=tail_warning(model, c.feature, c.proposed)) for c in changes]
        costs = [c.cost for c in changes]
        final = changed_rows.iloc[[number]].copy()
        for c in changes:  # a stated value may have been lowered
            final[c.feature] = pd.Series([c.proposed], index=final.index,
                                         dtype=final[c.feature].dtype)
        moved = pair_shares(model, encoded, final) if model.pairs else ()
        plans.append(Plan(tuple(changes), score, float(model.inverse_link(np.array([score]))[0]),
                          float(sum(costs)), float(max(costs, default=0.0)), moved))
    return tuple(plans)


def _accepted(model: AdditiveModel, mutability: Mutability, change: Change, after: pd.Series,
              score: float, threshold: float) -> tuple:
    """The values a stated feature could take instead, the plan's other values held: with
    pairwise terms, its pairs are read at the other features' planned values."""
    own = folded_at(model, change.feature, after)
    term = own.term(change.feature)
    value = np.array([change.proposed], dtype=object if isinstance(change.proposed, str)
                     else float)
    contribution = float(term.evaluate(value)[0])
    return accepted(own, mutability.rules[change.feature], threshold - (score - contribution),
                    mutability.goal.direction)


def _least_stated(model: AdditiveModel, row: pd.DataFrame, changes: list[Change], score: float,
                  threshold: float, mutability: Mutability, before: pd.Series
                  ) -> tuple[list[Change], float]:
    """Each stated value lowered to the least the model needs: of the values that would do,
    the one it scores least favourably that still passes the goal by the program's BUFFER
    when the row is re-scored and keeps every link and level bound (against the row
    `before` the plan). Stating costs the same whatever the value, so the plan's cost is
    unchanged."""
    direction = mutability.goal.direction
    passed = threshold + _favourable(direction) * BUFFER  # passed by as much as the program
    out = []
    for change in changes:
        if change.supplied and change.accepted:
            own = folded_at(model, change.feature, row.iloc[0])  # its pairs at the plan
            term, rule = own.term(change.feature), mutability.rules[change.feature]
            now = float(term.evaluate(row[change.feature].to_numpy())[0])
            floor = passed - (score - now)
            values = least_first(own, rule, accepted(own, rule, floor, direction), floor,
                                 direction)
            if values:  # every value tried at once, the least favourable first
                trials = row.iloc[np.zeros(len(values), dtype=np.int64)].reset_index(drop=True)
                trials[change.feature] = pd.Series(values, dtype=row[change.feature].dtype)
                moved = model.score_encoded(trials)
                for k, value in enumerate(values):
                    if _reaches(float(moved[k]), threshold, direction) and rules_kept(
                            mutability, before, trials.iloc[k]):
                        row, score = trials.iloc[[k]].reset_index(drop=True), float(moved[k])
                        change = replace(change, proposed=value)
                        break
        out.append(change)
    return out, score


def _is_category(model: AdditiveModel, name: str) -> bool:
    return model.schema.feature(name).kind == "category"


def _own_table(model: AdditiveModel, name: str, values: Mapping[str, Any] | None
               ) -> tuple[AdditiveModel, str]:
    """The model whose term for `name` is what the feature's own values do to the score:
    its main table, plus its pairwise terms read at the row's other values (the other
    features held as they are), and words saying so ("" when it has no pairs)."""
    names = [p.name for p in model.pairs if name in p.features]
    if not names or values is None:
        return model, ""
    return folded_at(model, name, values), (
        f", with its pairwise {'term' if len(names) == 1 else 'terms'} "
        f"({', '.join(names)}) read at the row's other values,")


def _diagnosis(model: AdditiveModel, parts: pd.Series,
               candidates: Mapping[str, list[Candidate]], program: Program,
               blank: set[str] = frozenset(), values: Mapping[str, Any] | None = None
               ) -> tuple[str, list[tuple[str, str]]]:
    """A summary line, and up to six (rule, sentence) pairs, the most limiting first (the
    summary line says how many there were when there were more). `blank`: the features
    the row has no value for; `values`: the row (typed), which a feature's pairwise terms
    are read at (see `_own_table`)."""
    sign = _favourable(program.direction)
    gap = abs(program.threshold - best_reachable(program))
    findings: list[tuple[float, str, str]] = []
    if program.max_changes is not None:
        unlimited = best_reachable(replace(program, max_changes=None))
        if _reaches(unlimited, program.threshold, program.direction):
            findings.append((math.inf, "limit on changes",
                             f"the limit of {plural(program.max_changes, 'change')} binds: "
                             "with no limit the rules would allow a plan"))
    # A table is sized where training rows lie, as reasons size it: a far tail or a level
    # never seen in training would promise what almost no applicant could reach.
    for name, options in candidates.items():
        own, paired = _own_table(model, name, values)
        term = own.term(name)
        listed = np.array([c.value for c in options],
                          dtype=object if _is_category(model, name) else float)
        best_here = float(np.max(sign * term.evaluate(listed)))
        beyond = sign * best_of(own, term, sign).contribution - best_here
        if beyond > 1e-9 and name in blank and len(options) == 1:
            findings.append((beyond, f"{name} not stated", _unstated(own, name, beyond,
                                                                     paired)))
        elif beyond > 1e-9:
            findings.append((beyond, f"bounds on {name}",
                             f"the bounds, direction, step or largest change on {name} "
                             f"bind: {central_words(own, name)} its table{paired} offers "
                             f"{beyond:.3g} more ({scale(model)}) beyond them"))
    protected = {f.name for f in model.schema.protected_features}
    for name in model.features:
        if name in candidates or name in protected:
            continue
        own, paired = _own_table(model, name, values)
        term = own.term(name)
        now = float(parts[name]) if not paired else float(term.evaluate(np.array(
            [values[name]], dtype=object if _is_category(model, name) else float))[0])
        potential = sign * best_of(own, term, sign).contribution - sign * now
        if potential > 1e-9 and name in blank:
            findings.append((potential, f"{name} not stated",
                             _unstated(own, name, potential, paired)))
        elif potential > 1e-9:
            findings.append((potential, f"{name} fixed",
                             f"{name} is fixed by the rules; {central_words(own, name)} "
                             f"its table{paired} could move the score by up to "
                             f"{potential:.3g} ({scale(model)})"))
    if program.pairs:  # the rules between two features bind when dropping them helps
        lost = sign * (best_reachable(replace(program, pairs=())) - best_reachable(program))
        if lost > 1e-9:
            findings.append((lost, "links", "the links and level bounds between features "
                             f"bind: without them the rules would allow {lost:.3g} more "
                             f"({scale(model)})"))
    findings.sort(key=lambda item: -item[0])
    best = float(model.inverse_link(np.array([best_reachable(program)]))[0])
    needed = float(model.inverse_link(np.array([program.threshold]))[0])
    what = "probability" if model.link == "logit" else "prediction"
    bound = "at least" if program.direction == "at-least" else "at most"
    summary = (f"the rules allow a {what} of {best:.3g} at best; a plan must reach {bound} "
               f"{needed:.3g} (short by {gap:.3g} on the {scale(model)} scale)")
    if len(findings) > SHOWN_FINDINGS:
        summary += (f"; the {SHOWN_FINDINGS} most limiting of {len(findings)} findings "
                    "follow")
    return summary, [(rule, text) for _, rule, text in findings[:SHOWN_FINDINGS]]


def _unstated(model: AdditiveModel, name: str, potential: float, paired: str = "") -> str:
    return (f"{name} has no value and the rules do not let one be stated (no supply_cost, or "
            f"no allowed value scores better than its missing-value entry); "
            f"{central_words(model, name)} a stated value{paired} could move the score by up "
            f"to {potential:.3g} ({scale(model)})")


def scale(model: AdditiveModel) -> str:
    return "log-odds" if model.link == "logit" else "prediction"


def _accepted_record(value: Stretch | str) -> Any:
    """A level as itself; a stretch as from / to (null: no end) and whether `from` is left
    out (a step table's bin starts just past its edge)."""
    if isinstance(value, str):
        return value
    return {"from": value.low if math.isfinite(value.low) else None,
            "to": value.high if math.isfinite(value.high) else None,
            "from_excluded": value.low_open}


def _tail_record(tail: TailWarning | None) -> dict[str, Any] | None:
    """A tail warning as plain data; band widths null when the term has no band."""
    if tail is None:
        return None
    return {"text": tail.text(), "side": tail.side, "edge": tail.edge,
            "band_width": tail.width, "median_band_width": tail.typical}


PLANS_FORMAT = "recourse-plans"  # the kind of one row's plans as a JSON file
PLANS_VERSION = 1


def plan_json(result: PlanResult) -> str:
    """One row's plans as the JSON text `recourse plan --format json` writes."""
    return json.dumps(plan_records(result), indent=1, ensure_ascii=False) + "\n"


def plan_records(result: PlanResult) -> dict[str, Any]:
    """The result as plain data (the planner's JSON output)."""
    def number(value: Any) -> Any:
        if isinstance(value, float | np.floating):
            return None if not math.isfinite(value) else float(value)
        return value

    return {
        "format": PLANS_FORMAT, "version": PLANS_VERSION,
        "status": result.status, "id": result.row_id,
        "score": result.score, "outcome": result.outcome,
        "goal": {"target": result.target, "direction": result.direction},
        "plans": [{
            "total_cost": plan.total_cost, "largest_cost": plan.largest_cost,
            "score": plan.score, "outcome": plan.outcome,
            "changes": [{"feature": c.feature, "from": number(c.current),
                         "to": number(c.proposed), "difference": number(c.difference),
                         "cost": c.cost, "supplied": c.supplied,
                         "would_also_do": [_accepted_record(v) for v in c.accepted],
                         "tail_warning": _tail_record(c.tail)}
                        for c in plan.changes],
            "pairs": [{"pair": name, "before": before, "after": after}
                      for name, before, after in plan.pairs],
        } for plan in result.plans],
        "best_score": result.best_score, "best_outcome": result.best_outcome,
        "binding": list(result.binding), "message": result.message, "caution": CAUTION,
    }
