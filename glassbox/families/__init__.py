"""Fitting families: each turns typed data into term tables (a `FamilyFit`)."""

from __future__ import annotations

from types import ModuleType

from glassbox.errors import OptionError
from glassbox.families import sparse

FAMILIES: dict[str, ModuleType] = {sparse.NAME: sparse}


def get_family(name: str) -> ModuleType:
    """The module of a family by name, or an error listing the known ones."""
    try:
        return FAMILIES[name]
    except KeyError:
        raise OptionError(f"unknown family {name!r} (known: {', '.join(FAMILIES)})") from None
