"""A model or a points card as one SQL SELECT that scores the rows of a table.

(Being written: see issue 15.)
"""

from __future__ import annotations

from glassbox.additive import AdditiveModel
from glassbox.cards import PointsCard


def model_sql(model: AdditiveModel, *, table: str = "applications", id_column: str | None = None,
              contributions: bool = False, reasons: int = 0) -> str:
    """One SELECT scoring `table` as `glassbox score` does."""
    raise NotImplementedError("the SQL export is being written")


def card_sql(card: PointsCard, *, table: str = "applications", id_column: str | None = None,
             contributions: bool = False, reasons: int = 0) -> str:
    """One SELECT giving each row of `table` its points as `glassbox score --points` does."""
    raise NotImplementedError("the SQL export is being written")
