"""Errors a user can cause in the planner: a bad mutability file or a bad request."""

from __future__ import annotations

from glassbox.errors import GlassboxError


class MutabilityError(GlassboxError, ValueError):
    """A mutability file is malformed or contradicts the model or the row."""


class PlanningError(GlassboxError, ValueError):
    """A planning request cannot be carried out (bad row, unknown id, ...)."""
