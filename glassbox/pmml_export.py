"""A model or a points card as a PMML 4.4 document.

(Being written: see issue 15.)
"""

from __future__ import annotations

from glassbox.additive import AdditiveModel
from glassbox.cards import PointsCard


def model_pmml(model: AdditiveModel) -> str:
    """The additive model as a PMML regression over derived fields."""
    raise NotImplementedError("the PMML export is being written")


def card_pmml(card: PointsCard) -> str:
    """The points card as a PMML Scorecard."""
    raise NotImplementedError("the PMML export is being written")
