"""Errors a user can cause in the planner: a bad mutability file or a bad request."""

from __future__ import annotations

from glassbox.core.errors import GlassboxError


class MutabilityError(GlassboxError, ValueError):
    """A mutability file is malformed or contradicts the model or the row."""


class PlanningError(GlassboxError, ValueError):
    """A planning request cannot be carried out (bad row, unknown id, ...)."""


class OutsideError(PlanningError):
    """A row's value lies so far out that the planner cannot place its steps exactly: the row
    gets its own status ("outside"), never a hang or a plan that silently differs."""
