"""Counts in plain words for what lagfield prints: "1 particle", "2 particles"."""

from __future__ import annotations


def plural(count: int, noun: str, plural_noun: str | None = None) -> str:
    """`count` and `noun`, the noun in the plural unless count is 1 (plural_noun when the
    plural is not noun + "s")."""
    return f"{count} {noun if count == 1 else plural_noun or noun + 's'}"
