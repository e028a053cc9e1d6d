"""Counted words for messages and screens: "1 row", "2 rows", never "row(s)"."""

from __future__ import annotations


def noun(count: int, word: str, many: str | None = None) -> str:
    """The word in the form its count takes: "row" for 1, "rows" otherwise."""
    return word if count == 1 else (many or word + "s")


def plural(count: int, word: str, many: str | None = None) -> str:
    """"1 change", "2 changes", "1,000 rows" (thousands separated)."""
    return f"{count:,} {noun(count, word, many)}"


def verb(count: int, one: str, many: str) -> str:
    """The verb that agrees with a count: verb(1, "has", "have") is "has"."""
    return one if count == 1 else many
