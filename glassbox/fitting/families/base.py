"""What every fitting family returns before the shared finishing steps."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from glassbox.core.additive import Term
from glassbox.core.pairs import PairTerm


@dataclass(frozen=True)
class FamilyFit:
    """Raw terms and intercept of a fitted family, with its settings and choices.

    `fit_model` centres the terms (and the pairs along each axis, `purify`), adds training
    profiles and provenance, and returns the `AdditiveModel`. `pairs` are the pairwise
    tables of a family fitted with them, uncentred.
    """

    intercept: float
    terms: tuple[Term, ...]
    parameters: dict[str, Any]
    details: dict[str, Any] = field(default_factory=dict)
    pairs: tuple[PairTerm, ...] = ()
