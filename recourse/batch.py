"""Plans for every row that misses the goal, one output row per plan, and a summary."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel
from recourse.batch_plans import BLOCK, batch_covers, plan_batch
from recourse.candidates import OUTSIDE
from recourse.choices import HANDED_WORDS, MOST_JOBS
from recourse.errors import MutabilityError, PlanningError
from recourse.mutability import Mutability
from recourse.planner import PlanResult, check_plan_count, plan_encoded, total_scores
from recourse.program import DEFAULT_SOLVER
from recourse.tails import TAIL_WORDS


def declined_rows(model: AdditiveModel, frame: pd.DataFrame, mutability: Mutability,
                  source: str | None = None) -> np.ndarray:
    """Positions of the rows whose score misses the goal (the margin is not part of it)."""
    return np.flatnonzero(mutability.goal.missed(model.score(frame, source), model.link))


def typed_declined(model: AdditiveModel, frame: pd.DataFrame, mutability: Mutability,
                   source: str | None = None, numbers: np.ndarray | None = None
                   ) -> tuple[np.ndarray, pd.DataFrame, pd.DataFrame, list]:
    """Type `frame` once and keep its declined rows: their positions, typed values,
    contributions and ids (the id column, else `numbers` (default: positions) plus 1)."""
    encoded = model.encode(frame, source)
    parts = model.contributions_encoded(encoded)
    positions = np.flatnonzero(mutability.goal.missed(total_scores(model, parts.to_numpy()),
                                                      model.link))
    id_column = model.schema.id_column
    if id_column in frame:
        ids = frame[id_column].to_numpy()[positions].tolist()
    else:
        counted = np.arange(len(frame)) if numbers is None else np.asarray(numbers)
        ids = [int(number) + 1 for number in counted[positions]]
    return positions, encoded.iloc[positions], parts.iloc[positions], ids


def plan_typed_rows(model: AdditiveModel, encoded: pd.DataFrame, parts: pd.DataFrame, ids: list,
                    mutability: Mutability, n_plans: int, solver: str) -> list[PlanResult]:
    """Plans for typed rows: with the exact solver, a batch at a time (recourse.batch_plans),
    else row by row. A row the rules do not fit (say, a step grid that leaves it more
    undominated values than allowed) is reported with status "error" instead of stopping
    the batch."""
    def one_row(i: int) -> PlanResult:
        row_parts = parts.iloc[i]
        try:
            return plan_encoded(model, encoded.iloc[[i]], mutability, n_plans=n_plans,
                                solver=solver, row_id=ids[i], parts=row_parts)
        except MutabilityError as exc:
            score = float(total_scores(model, row_parts.to_numpy(dtype=float)[None, :])[0])
            return PlanResult("error", score, float(model.inverse_link(np.array([score]))[0]),
                              mutability.goal.target, mutability.goal.direction,
                              row_id=ids[i], message=str(exc))

    if solver == "exact" and batch_covers(mutability, n_plans) and not model.pairs:
        return plan_batch(model, encoded, parts, ids, mutability, n_plans, one_row)
    return [one_row(i) for i in range(len(encoded))]


def plan_many(model: AdditiveModel, frame: pd.DataFrame | None, mutability: Mutability, *,
              n_plans: int = 3, solver: str = DEFAULT_SOLVER, jobs: int = 1,
              progress: Callable[[int, int], None] | bool | None = None,
              source: str | None = None, chunk: int | None = None) -> list[PlanResult]:
    """Plan for every declined row of `frame`, in row order, `chunk` rows per task (default:
    a batch for the exact solver, 20 rows for the others)."""
    if frame is None:
        raise PlanningError("--declined needs --data FILE")
    check_plan_count(n_plans)
    if isinstance(jobs, bool) or not isinstance(jobs, int) or not 1 <= jobs <= MOST_JOBS:
        raise PlanningError(f"--jobs must be a whole number from 1 to {MOST_JOBS}, "
                            f"not {jobs!r}")
    positions, encoded, parts, ids = typed_declined(model, frame, mutability, source)
    if chunk is None:  # a batch; with several jobs, at least four tasks each where rows allow
        chunk = 20 if solver != "exact" else BLOCK if jobs == 1 else min(
            BLOCK, max(64, -(-len(positions) // (4 * jobs))))
    spans = [slice(start, min(start + chunk, len(positions)))
             for start in range(0, len(positions), chunk)]
    report = progress_bar(len(positions)) if progress is True else (progress or None)
    results: list[PlanResult] = []
    tasks = ((encoded.iloc[span], parts.iloc[span], ids[span]) for span in spans)
    if jobs == 1:
        pieces = (plan_typed_rows(model, *task, mutability, n_plans, solver) for task in tasks)
    else:
        from joblib import Parallel, delayed

        pieces = Parallel(n_jobs=jobs, return_as="generator")(
            delayed(plan_typed_rows)(model, *task, mutability, n_plans, solver) for task in tasks)
    try:
        for piece in pieces:
            results += piece
            if report:
                report(len(results), len(positions))
    finally:
        if progress is True and report is not None:
            report(-1, len(positions))
    return results


def progress_bar(total: int | None, label: str = "planning declined rows"
                  ) -> Callable[[int, int | None], None]:
    """A rich progress bar on standard error (nothing shows when not a terminal);
    `total` None while the count is not known yet."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn

    bar = Progress(label, BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=Console(stderr=True), transient=True)
    task = bar.add_task("plans", total=total)
    bar.start()

    def update(done: int, count: int | None = None) -> None:
        if done < 0:
            bar.stop()
            return
        bar.update(task, completed=done, total=count if count is not None else total)

    return update


NOT_STATED = "not stated"


def _describe(change, model: AdditiveModel) -> str:
    """One change in a few words: 'Income: 120 -> 150', 'Income: not stated -> 150'."""
    kind = model.schema.feature(change.feature).kind

    def text(value) -> str:
        if kind == "flag":
            return "yes" if value else "no"
        return str(value) if kind == "category" else f"{value:g}"

    start = NOT_STATED if change.supplied else text(change.current)
    return f"{change.feature}: {start} -> {text(change.proposed)}"


def plans_frame(results: list[PlanResult], model: AdditiveModel) -> pd.DataFrame:
    """One row per plan (and one per row without a plan). `pairs`: the model's pairwise
    terms the plan moves, each as 'a & b: before -> after' on the model's scale."""
    rows: list[dict[str, Any]] = []
    for result in results:
        base = {"id": result.row_id, "status": result.status, "score": result.score,
                "outcome": result.outcome}
        if not result.plans:
            rows.append({**base, "plan": None, "changes": result.message, "total_cost": None,
                         "new_score": None, "new_outcome": None,
                         "best_outcome": result.best_outcome})
        for number, plan in enumerate(result.plans, start=1):
            rows.append({**base, "plan": number,
                         "changes": "; ".join(_describe(c, model) for c in plan.changes),
                         "total_cost": plan.total_cost, "new_score": plan.score,
                         "new_outcome": plan.outcome, "best_outcome": None,
                         "tail_warnings": "; ".join(c.tail.text() for c in plan.changes
                                                    if c.tail is not None),
                         "pairs": "; ".join(f"{name}: {before:.6g} -> {after:.6g}"
                                            for name, before, after in plan.pairs)})
    return pd.DataFrame(rows, columns=["id", "status", "score", "outcome", "plan", "changes",
                                       "total_cost", "new_score", "new_outcome",
                                       "best_outcome", "tail_warnings", "pairs"])


OUTCOME_COLUMNS = ("id", "status", "score", "outcome", "plans", "total_cost", "largest_cost",
                   "changes", "main_change", "new_outcome", "best_outcome", "binding_rule",
                   "message", "tail_warnings", "handed_off")


def outcome_frame(results: list[PlanResult], model: AdditiveModel) -> pd.DataFrame:
    """One row per planned row: its status and its cheapest plan (the audit's raw material).

    `main_change` is the feature whose change costs most in the cheapest plan;
    `binding_rule` is the most limiting rule when no plan exists ("bounds on x", "x fixed",
    "limit on changes"); `tail_warnings` counts the cheapest plan's changes into a sparse,
    uncertain tail (`recourse.tails`).
    """
    rows: list[dict[str, Any]] = []
    for result in results:
        best = result.plans[0] if result.plans else None
        main = max(best.changes, key=lambda c: c.cost).feature if best and best.changes else ""
        rows.append({
            "id": result.row_id, "status": result.status, "score": result.score,
            "outcome": result.outcome, "plans": len(result.plans),
            "total_cost": best.total_cost if best else np.nan,
            "largest_cost": best.largest_cost if best else np.nan,
            "changes": "; ".join(_describe(c, model) for c in best.changes) if best else "",
            "main_change": main, "new_outcome": best.outcome if best else np.nan,
            "best_outcome": np.nan if result.best_outcome is None else result.best_outcome,
            "binding_rule": result.binding_rules[0] if result.binding_rules else "",
            "message": result.message,
            "tail_warnings": best.tail_warnings if best else 0,
            "handed_off": result.handed_off,
        })
    return pd.DataFrame(rows, columns=list(OUTCOME_COLUMNS))


def summary_frame(results: list[PlanResult]) -> pd.DataFrame:
    """How many declined rows got a plan, and the quantiles of the cheapest plan's cost."""
    with_plan = [r for r in results if r.plans]
    costs = np.array([r.plans[0].total_cost for r in with_plan])
    misfits = sum(r.status == "error" for r in results)
    outside = sum(r.status == "outside" for r in results)
    rows = [{"measure": "declined rows", "value": float(len(results))},
            {"measure": "with a plan", "value": float(len(with_plan))},
            {"measure": "no plan within the rules",
             "value": float(sum(r.status == "none" for r in results))},
            {"measure": "rules do not fit the row", "value": float(misfits)},
            {"measure": OUTSIDE, "value": float(outside)},
            {"measure": TAIL_WORDS,
             "value": float(sum(r.plans[0].tail_warnings > 0 for r in with_plan))}]
    handed = sum(bool(r.handed_off) for r in results)
    if handed:  # slower, still exact: said, not silent (shown only when it happened)
        rows.append({"measure": HANDED_WORDS, "value": float(handed)})
    if len(costs):
        for label, q in (("cheapest plan cost, 10%", 10), ("median", 50), ("90%", 90)):
            rows.append({"measure": label, "value": float(np.percentile(costs, q))})
    return pd.DataFrame(rows)
