"""Facts of common shapes (`sum(fare)`, `region = 'East'`, `a / nullif(b, 0)`) read by a small exact parser of our own."""

from __future__ import annotations

import functools
import re

from modeldiff import sqlguard
from modeldiff.sql.reading import EXTRA_AGGREGATES, Facts
from modeldiff.sql.words import _SIMPLE_KEYWORDS, _known_functions, _reserved_words
from modeldiff.sql.scan import _names_something, _scan


_AGGREGATES = frozenset({"sum", "count", "avg", "min", "max"})


# Plain functions whose arguments sqlglot parses as ordinary expressions, with
# the number of arguments it accepts.
_PLAIN_ARITY: dict[str, tuple[int, int | None]] = {
    "nullif": (2, 2), "coalesce": (1, None), "round": (1, 2), "abs": (1, 1), "lower": (1, 1), "upper": (1, 1),
}  # fmt: skip


_COMPARISONS = frozenset({"=", "<>", "!=", "<", ">", "<=", ">="})


_NUMBER = re.compile(r"\d+(?:\.\d+)?(?:[eE][+-]?\d+)?\Z")


_MAX_DEPTH = 64


class _Unsure(Exception):
    """The text leaves the small grammar: let sqlglot read it."""


def _fast_facts(text: str) -> Facts | None:
    """Facts of a text in a small grammar, or None to let sqlglot decide.

    Accepts only shapes that sqlglot reads the same way (tested), so a text
    it accepts is never one sqlglot would refuse.
    """
    scan = _scan(text)
    if scan.unsure or not scan.tokens:
        return None
    shape, names = _shape(scan.tokens)
    if names is None:
        return _read_tokens(scan.tokens)
    found = _shape_facts(shape)
    if found is None:
        return None
    back = {f"\0{index}": (None, name) for index, name in enumerate(names)}
    return Facts(frozenset([back[name] for _, name in found.columns]),
                 frozenset([back[name] for _, name in found.outside_aggregate]) if found.outside_aggregate else frozenset(),
                 found.aggregates, found.parameters, found.subquery, found.condition_like)


def _shape(tokens: tuple[tuple[str, str], ...]) -> tuple[tuple[tuple[str, str], ...], list[str] | None]:
    """The tokens with each plain column name replaced by a stand-in, and the names in stand-in order.

    `a / nullif(b, 0)` and `c / nullif(d, 0)` have one shape, read once. A plain
    column name is a word that is no keyword, no reserved word, not `distinct`
    and not followed by `(`: `_FastReader` treats every such word alike,
    whatever its letters, so the facts of the text are those of its shape with
    the names put back. Texts with qualified or quoted names are read as they
    are (names: None).
    """
    names: dict[str, str] = {}
    out = []
    reserved = _reserved_words()
    last = len(tokens) - 1
    for index, token in enumerate(tokens):
        kind, value = token
        if kind == "." or kind == "quoted":
            return tokens, None
        if kind == "word":
            lower = value.lower()
            if (lower not in _SIMPLE_KEYWORDS and lower not in reserved and lower != "distinct"
                    and (index == last or tokens[index + 1][0] != "(")):
                stand_in = names.get(value)
                if stand_in is None:
                    stand_in = names[value] = f"\0{len(names)}"  # no word can hold a NUL
                token = ("word", stand_in)
        out.append(token)
    return tuple(out), list(names)


@functools.lru_cache(maxsize=1 << 12)
def _shape_facts(shape: tuple[tuple[str, str], ...]) -> Facts | None:
    return _read_tokens(shape)


def _read_tokens(tokens: tuple[tuple[str, str], ...]) -> Facts | None:
    reader = _FastReader(tokens)
    try:
        kind = reader.expression(False)
        if reader.pos != len(tokens):
            return None
    except _Unsure:
        return None
    return Facts(
        columns=frozenset(reader.columns),
        outside_aggregate=frozenset(reader.outside),
        aggregates=tuple(sorted(reader.aggregates)),
        parameters=frozenset(reader.parameters),
        subquery=False,
        condition_like=kind != "value",
    )


class _FastReader:
    """Recursive descent over `_scan` tokens; each method returns "value" or "other".

    "value" marks a literal or arithmetic at the top (not a condition), as
    `_plainly_a_value` does for sqlglot's tree; parentheses are transparent.
    """

    def __init__(self, tokens: tuple[tuple[str, str], ...]) -> None:
        self.tokens = tokens
        self.pos = 0
        self.depth = 0
        self.columns: set[tuple[str | None, str]] = set()
        self.outside: set[tuple[str | None, str]] = set()
        self.aggregates: set[str] = set()
        self.parameters: set[str] = set()

    # -- tokens
    def peek(self, offset: int = 0) -> tuple[str, str] | None:
        index = self.pos + offset
        return self.tokens[index] if index < len(self.tokens) else None

    def keyword(self, offset: int = 0) -> str | None:
        token = self.peek(offset)
        if token is not None and token[0] == "word" and token[1].lower() in _SIMPLE_KEYWORDS:
            return token[1].lower()
        return None

    def take_keyword(self, word: str) -> bool:
        if self.keyword() == word:
            self.pos += 1
            return True
        return False

    def take(self, kind: str, value: str | None = None) -> bool:
        token = self.peek()
        if token is not None and token[0] == kind and (value is None or token[1] == value):
            self.pos += 1
            return True
        return False

    def expect(self, kind: str, value: str | None = None) -> None:
        if not self.take(kind, value):
            raise _Unsure

    def expect_keyword(self, word: str) -> None:
        if not self.take_keyword(word):
            raise _Unsure

    # -- grammar, loosest binding first
    def expression(self, inside: bool) -> str:
        self.depth += 1
        if self.depth > _MAX_DEPTH:
            raise _Unsure
        kind = self.disjunction(inside)
        self.depth -= 1
        return kind

    def disjunction(self, inside: bool) -> str:
        kind = self.conjunction(inside)
        while self.take_keyword("or"):
            self.conjunction(inside)
            kind = "other"
        return kind

    def conjunction(self, inside: bool) -> str:
        kind = self.negation(inside)
        while self.take_keyword("and"):
            self.negation(inside)
            kind = "other"
        return kind

    def negation(self, inside: bool) -> str:
        if self.take_keyword("not"):
            self.depth += 1
            if self.depth > _MAX_DEPTH:
                raise _Unsure
            self.negation(inside)
            self.depth -= 1
            return "other"
        return self.comparison(inside)

    def comparison(self, inside: bool) -> str:
        kind = self.sum(inside)
        token = self.peek()
        if token is not None and token[0] == "op" and token[1] in _COMPARISONS:
            self.pos += 1
            self.sum(inside)
            return "other"
        word = self.keyword()
        if word == "is":
            self.pos += 1
            self.take_keyword("not")
            if self.keyword() not in ("null", "true", "false"):
                raise _Unsure
            self.pos += 1
            return "other"
        negated = word == "not" and self.keyword(1) in ("in", "between", "like", "ilike")
        if negated:
            self.pos += 1
            word = self.keyword()
        if word == "in":
            self.pos += 1
            self.expect("(")
            self.sum(inside)
            while self.take(","):
                self.sum(inside)
            self.expect(")")
            return "other"
        if word == "between":
            self.pos += 1
            self.sum(inside)
            self.expect_keyword("and")
            self.sum(inside)
            return "other"
        if word in ("like", "ilike"):
            self.pos += 1
            self.sum(inside)
            return "other"
        if negated:
            raise _Unsure
        return kind

    def sum(self, inside: bool) -> str:
        kind = self.product(inside)
        while self.take("op", "+") or self.take("op", "-"):
            self.product(inside)
            kind = "value"
        return kind

    def product(self, inside: bool) -> str:
        kind = self.unary(inside)
        while self.take("op", "*") or self.take("op", "/") or self.take("op", "%"):
            self.unary(inside)
            kind = "value"
        return kind

    def unary(self, inside: bool) -> str:
        if self.take("op", "-"):
            self.depth += 1
            if self.depth > _MAX_DEPTH:
                raise _Unsure
            self.unary(inside)
            self.depth -= 1
            return "value"
        return self.primary(inside)

    def primary(self, inside: bool) -> str:
        token = self.peek()
        if token is None:
            raise _Unsure
        kind, value = token
        if kind == "number":
            if not _NUMBER.match(value):
                raise _Unsure
            self.pos += 1
            return "value"
        if kind == "string":
            self.pos += 1
            return "value"
        if kind == "param":
            self.pos += 1
            self.parameters.add(value[1:].lower())
            return "other"
        if kind == "(":
            self.pos += 1
            inner = self.expression(inside)
            self.expect(")")
            return inner
        if kind == "quoted":
            return self.column(inside)
        if kind != "word":
            raise _Unsure
        word = value.lower()
        if word in ("null", "true", "false"):
            self.pos += 1
            return "other"
        if word == "case":
            self.pos += 1
            self.case(inside)
            return "other"
        if word in _SIMPLE_KEYWORDS:
            raise _Unsure
        following = self.peek(1)
        if following is not None and following[0] == "(":
            return self.function(inside)
        if word in _reserved_words():
            raise _Unsure
        return self.column(inside)

    def column(self, inside: bool) -> str:
        parts = [self.name()]
        while self.take("."):
            parts.append(self.name())
        if len(parts) > 3 or self.take("("):
            raise _Unsure
        ref = (".".join(parts[:-1]) or None, parts[-1])
        self.columns.add(ref)
        if not inside:
            self.outside.add(ref)
        return "other"

    def name(self) -> str:
        token = self.peek()
        if token is None or not _names_something(token):
            raise _Unsure
        if token[0] == "word" and token[1].lower() in _reserved_words():
            raise _Unsure
        self.pos += 1
        return token[1]

    def function(self, inside: bool) -> str:
        name = self.peek()[1]
        word = name.lower()
        self.pos += 2  # the name and "("
        if word in _AGGREGATES:
            if not (word == "count" and self.take("op", "*")):
                following = self.peek() or ("", "")
                if word == "count" and following[0] == "word" and following[1].lower() == "distinct":
                    self.pos += 1
                self.expression(True)
            self.expect(")")
            self.aggregates.add(word)
            return "other"
        if word in _PLAIN_ARITY:
            low, high = _PLAIN_ARITY[word]
            count = self.arguments(inside)
            if count < low or (high is not None and count > high):
                raise _Unsure
            return "other"
        if word in _reserved_words() or name.upper() in _known_functions() or word not in sqlguard.FUNCTIONS:
            raise _Unsure  # (a function outside the allow-list is sqlglot's to read and the check's to refuse)
        aggregate = word in EXTRA_AGGREGATES
        self.arguments(inside or aggregate)
        if aggregate:
            self.aggregates.add(word)
        return "other"

    def arguments(self, inside: bool) -> int:
        """Comma-separated expressions up to the closing parenthesis; their number."""
        if self.take(")"):
            return 0
        count = 1
        self.expression(inside)
        while self.take(","):
            self.expression(inside)
            count += 1
        self.expect(")")
        return count

    def case(self, inside: bool) -> None:
        if self.keyword() != "when":
            self.expression(inside)
        if self.keyword() != "when":
            raise _Unsure
        while self.take_keyword("when"):
            self.expression(inside)
            self.expect_keyword("then")
            self.expression(inside)
        if self.take_keyword("else"):
            self.expression(inside)
        self.expect_keyword("end")
