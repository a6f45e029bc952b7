"""A small scanner for the common shapes of derived measures: the names they use, without parsing."""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

from modeldiff.sql.reading import _quoted_body
from modeldiff.sql.words import _SIMPLE_KEYWORDS, _known_functions, _reserved_words

if TYPE_CHECKING:  # pragma: no cover
    from sqlglot import exp


@dataclass(frozen=True)
class _Scan:
    """The scanner's tokens of a text, and whether it left the scanner's small grammar."""

    tokens: tuple[tuple[str, str], ...]  # (kind, text); kinds: word quoted param number string op ( ) , .
    unsure: bool = False  # something outside the scanner's small grammar


_TOKEN = re.compile(  # spaces before a token are passed over in the same match; `end` only after the last token
    r"""
    \s*
    (?:
        (?P<word>[A-Za-z_][A-Za-z0-9_]*)
      | (?P<punct>[(),.])
      | (?P<line_comment>--[^\n\r]*)
      | (?P<block_comment>/\*)
      | (?P<op>[-+*/%=<>!]+)
      | (?P<number>\d+(?:\.\d*)?(?:[eE][+-]?\d+)?)
      | (?P<string>')
      | (?P<quoted>")
      | (?P<param>:[A-Za-z_][A-Za-z0-9_]*)
      | (?P<end>\Z)
    )
    """,
    re.VERBOSE,
)


_SIMPLE_OPS = frozenset({"+", "-", "*", "/", "%", "=", "<", ">", "<=", ">=", "<>", "!="})


_SIMPLE_FUNCTIONS = frozenset(
    {"nullif", "coalesce", "ifnull", "round", "abs", "greatest", "least", "sqrt", "power",
     "sign", "ln", "exp", "log"}
)  # fmt: skip


def _scan(text: str) -> _Scan:
    tokens: list[tuple[str, str]] = []
    append, match_at = tokens.append, _TOKEN.match
    pos, end = 0, len(text)
    while True:
        match = match_at(text, pos)
        if match is None:
            return _Scan(tuple(tokens), unsure=True)
        kind = match.lastgroup
        pos = match.end()
        if kind == "word" or kind == "param":
            if pos < end and not (text[pos].isspace() or text[pos] in "()+-*/%=<>!,."):
                return _Scan(tuple(tokens), unsure=True)  # e'..', x'..', a$b, café ...
            append((kind, match.group(kind)))
        elif kind == "punct":
            value = match.group(kind)
            append((value, value))
        elif kind == "end":
            return _Scan(tuple(tokens))
        elif kind == "op":
            value = match.group(kind)
            if value not in _SIMPLE_OPS:
                return _Scan(tuple(tokens), unsure=True)
            append((kind, value))
        elif kind == "number":
            value = match.group(kind)
            if pos < end and (text[pos].isalnum() or text[pos] in "_."):
                return _Scan(tuple(tokens), unsure=True)
            if pos < end and text[pos] in "+-" and value[-1:].isdigit() and "e" in value.lower():
                return _Scan(tuple(tokens), unsure=True)  # sqlglot reads `1e3+1` as one number
            append((kind, value))
        elif kind == "line_comment":
            continue
        elif kind == "block_comment":
            close = text.find("*/", pos)
            if close < 0:
                return _Scan(tuple(tokens), unsure=True)
            if "/*" in text[pos:close]:
                return _Scan(tuple(tokens), unsure=True)  # nested comments
            pos = close + 2
        else:  # string or quoted
            closing = match.group(kind)
            value, pos = _quoted_body(text, pos, closing)
            if value is None:
                return _Scan(tuple(tokens), unsure=True)
            if kind == "quoted" and (closing in value or not value):
                return _Scan(tuple(tokens), unsure=True)
            if kind == "string" and "\\" in value:
                return _Scan(tuple(tokens), unsure=True)
            tokens.append((kind, value))


@functools.lru_cache(maxsize=1 << 16)
def _fast_names(text: str) -> tuple[frozenset[str], frozenset[str]] | None:
    """(column names, keywords seen) by scanning, or None when the scanner is not sure.

    sqlglot reads some keywords as names where they fit no grammar (`end`
    alone is a column): the caller falls back when a keyword seen is a measure.
    """
    scan = _scan(text)
    if scan.unsure:
        return None
    reserved = _reserved_words()
    tokens = scan.tokens
    found: set[str] = set()
    keywords: set[str] = set()
    for index, (kind, value) in enumerate(tokens):
        after = tokens[index + 1][0] if index + 1 < len(tokens) else None
        if kind == "." and (after not in ("word", "quoted") or index == 0 or not _names_something(tokens[index - 1])):
            return None  # `.5`, `t.*`, `null.x`
        if kind == "param" and (after in ("(", ".") or (index > 0 and _ends_a_value(tokens[index - 1]))):
            return None  # `:user(`, `:user.x`, `x :user`
        if kind not in ("word", "quoted"):
            continue
        before = tokens[index - 1][0] if index > 0 else None
        if kind == "word":
            lowered = value.lower()
            if lowered in _SIMPLE_KEYWORDS:
                keywords.add(value)
                continue
            if lowered in reserved:
                return None
        if after == "(":
            plain = value.lower() in _SIMPLE_FUNCTIONS or value.upper() not in _known_functions()
            if kind == "word" and before != "." and plain:
                continue  # a function's name is not a column
            return None
        if after in ("string", "word", "quoted", "number"):
            return None  # typed literals, aliases: not the scanner's business
        if after == ".":
            continue  # a qualifier
        found.add(value)
    return frozenset(found), frozenset(keywords)


def _ends_a_value(token: tuple[str, str]) -> bool:
    """Whether a token can end an operand (so a parameter right after it is no operand)."""
    kind, value = token
    return kind in ("quoted", "param", "number", "string", ")") or _names_something(token)


def _names_something(token: tuple[str, str]) -> bool:
    """Whether a token can be a table or column name: a quoted name or a plain word."""
    kind, value = token
    return kind == "quoted" or (kind == "word" and value.lower() not in _SIMPLE_KEYWORDS)
