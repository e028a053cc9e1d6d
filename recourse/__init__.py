"""recourse: the cheapest realistic changes that flip a glass-box model's outcome.

It consumes `glassbox` models through the `AdditiveModel` API only: every term
is a finite table, so an integer program over the tables is exact.
"""

from __future__ import annotations
