"""The words of messages: lists joined with "and", nouns and verbs that agree with a count.

Plain functions, no imports: the light commands (check) use them too.
"""

from __future__ import annotations

from typing import Iterable


def and_list(items: Iterable[str]) -> str:
    """"", "a", "a and b", "a, b and c"."""
    items = list(items)
    if len(items) < 2:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def agree(count: int, one: str, many: str) -> str:
    """`one` for a count of 1, else `many`: agree(2, "explains", "explain")."""
    return one if count == 1 else many


def counted(count: int, noun: str, plural: str | None = None) -> str:
    """"1 error", "3 errors" (`plural` for nouns that do not take an s)."""
    return f"{count} {noun if count == 1 else plural or noun + 's'}"


def named(noun: str, items: Iterable[str]) -> str:
    """"aggregate sum", "aggregates sum and count": a noun that agrees with the names after it."""
    items = list(items)
    return f"{agree(len(items), noun, noun + 's')} {and_list(items)}"
