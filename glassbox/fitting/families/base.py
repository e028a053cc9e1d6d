"""What every fitting family returns before the shared finishing steps."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from glassbox.core.additive import Term


@dataclass(frozen=True)
class FamilyFit:
    """Raw terms and intercept of a fitted family, with its settings and choices.

    `fit_model` centres the terms, adds training profiles and provenance, and
    returns the `AdditiveModel`.
    """

    intercept: float
    terms: tuple[Term, ...]
    parameters: dict[str, Any]
    details: dict[str, Any] = field(default_factory=dict)
