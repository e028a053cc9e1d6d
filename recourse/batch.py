"""Plans for every row that misses the goal, one output row per plan, and a summary."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from glassbox.additive import AdditiveModel
from recourse.errors import MutabilityError, PlanningError
from recourse.mutability import Mutability
from recourse.planner import PlanResult, find_plans


def declined_rows(model: AdditiveModel, frame: pd.DataFrame, mutability: Mutability,
                  source: str | None = None) -> np.ndarray:
    """Positions of the rows whose score misses the goal (margin included)."""
    score = model.score(frame, source)
    threshold = mutability.goal.threshold(model.link)
    if mutability.goal.direction == "at-least":
        return np.flatnonzero(score < threshold)
    return np.flatnonzero(score > threshold)


def _plan_one(model: AdditiveModel, row: pd.Series, row_id: Any, mutability: Mutability,
              n_plans: int, solver: str) -> PlanResult:
    """One row's plans; a row the rules do not fit (say, a value outside a declared
    bound) is reported with status "error" instead of stopping the batch."""
    try:
        return find_plans(model, row, mutability, n_plans=n_plans, solver=solver,
                          row_id=row_id)
    except MutabilityError as exc:
        score = float(model.score(pd.DataFrame([row]))[0])
        return PlanResult("error", score, float(model.inverse_link(np.array([score]))[0]),
                          mutability.goal.target, mutability.goal.direction, row_id=row_id,
                          message=str(exc))


def _plan_chunk(model: AdditiveModel, rows: pd.DataFrame, ids: list, mutability: Mutability,
                n_plans: int, solver: str) -> list[PlanResult]:
    return [_plan_one(model, rows.iloc[i], ids[i], mutability, n_plans, solver)
            for i in range(len(rows))]


def plan_many(model: AdditiveModel, frame: pd.DataFrame | None, mutability: Mutability, *,
              n_plans: int = 3, solver: str = "cbc", jobs: int = 1,
              progress: Callable[[int, int], None] | bool | None = None,
              source: str | None = None) -> list[PlanResult]:
    """Plan for every declined row of `frame`, in row order."""
    if frame is None:
        raise PlanningError("--declined needs --data FILE")
    positions = declined_rows(model, frame, mutability, source)
    id_column = model.schema.id_column
    ids = [frame.iloc[p][id_column] if id_column in frame else int(p) + 1 for p in positions]
    rows = frame.iloc[positions]
    chunks = [range(start, min(start + 25, len(rows))) for start in range(0, len(rows), 25)]
    report = _progress_bar(len(rows)) if progress is True else (progress or None)
    results: list[PlanResult] = []
    done = 0
    if jobs == 1:
        pieces = (_plan_chunk(model, rows.iloc[list(c)], [ids[i] for i in c], mutability,
                              n_plans, solver) for c in chunks)
    else:
        from joblib import Parallel, delayed

        pieces = Parallel(n_jobs=jobs, return_as="generator")(
            delayed(_plan_chunk)(model, rows.iloc[list(c)], [ids[i] for i in c], mutability,
                                 n_plans, solver) for c in chunks)
    try:
        for piece in pieces:
            results += piece
            done += len(piece)
            if report:
                report(done, len(rows))
    finally:
        if progress is True and report is not None:
            report(-1, len(rows))
    return results


def _progress_bar(total: int) -> Callable[[int, int], None]:
    """A rich progress bar on standard error (nothing shows when not a terminal)."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn

    bar = Progress("planning declined rows", BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=Console(stderr=True), transient=True)
    task = bar.add_task("plans", total=total)
    bar.start()

    def update(done: int, _: int) -> None:
        if done < 0:
            bar.stop()
            return
        bar.update(task, completed=done)

    return update


def _describe(change, model: AdditiveModel) -> str:
    kind = model.schema.feature(change.feature).kind
    if kind == "flag":
        return f"{change.feature}: {'yes' if change.current else 'no'} -> " \
               f"{'yes' if change.proposed else 'no'}"
    return f"{change.feature}: {change.current:g} -> {change.proposed:g}" if kind != "category" \
        else f"{change.feature}: {change.current} -> {change.proposed}"


def plans_frame(results: list[PlanResult], model: AdditiveModel) -> pd.DataFrame:
    """One row per plan (and one per row without a plan)."""
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
                         "new_outcome": plan.outcome, "best_outcome": None})
    return pd.DataFrame(rows, columns=["id", "status", "score", "outcome", "plan", "changes",
                                       "total_cost", "new_score", "new_outcome",
                                       "best_outcome"])


def summary_frame(results: list[PlanResult]) -> pd.DataFrame:
    """How many declined rows got a plan, and the quantiles of the cheapest plan's cost."""
    with_plan = [r for r in results if r.plans]
    costs = np.array([r.plans[0].total_cost for r in with_plan])
    misfits = sum(r.status == "error" for r in results)
    rows = [{"measure": "declined rows", "value": float(len(results))},
            {"measure": "with a plan", "value": float(len(with_plan))},
            {"measure": "no plan within the rules",
             "value": float(sum(r.status == "none" for r in results))},
            {"measure": "rules do not fit the row", "value": float(misfits)}]
    if len(costs):
        for label, q in (("cheapest plan cost, 10%", 10), ("median", 50), ("90%", 90)):
            rows.append({"measure": label, "value": float(np.percentile(costs, q))})
    return pd.DataFrame(rows)
