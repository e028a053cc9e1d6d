"""Fitting families: each turns typed data into term tables (a `FamilyFit`).

A family is a module `glassbox.fitting.families.NAME` with `NAME`, `DEFAULTS` (its
options and their defaults) and `fit(features, target, schema, *, task, **options)`.
"""

from __future__ import annotations

import importlib
from types import ModuleType

from glassbox.core.errors import OptionError

FAMILIES = ("sparse", "spline", "boosted")


def get_family(name: str) -> ModuleType:
    """The module of a family by name, or an error listing the known ones."""
    if name not in FAMILIES:
        raise OptionError(f"unknown family {name!r} (known: {', '.join(FAMILIES)})")
    return importlib.import_module(f"glassbox.fitting.families.{name}")
