"""Reading one SQL expression: the dialect, parameters put aside and back, sqlglot's tree, and errors in plain words."""

from __future__ import annotations

import contextlib
import functools
import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover
    from sqlglot import exp


DIALECT = "duckdb"


USER_PARAMETER = "user"


# DuckDB aggregate functions (duckdb 2.0.1, `duckdb_functions()` where
# function_type = 'aggregate') that sqlglot 30 parses as plain, unknown
# functions instead of aggregates.
EXTRA_AGGREGATES = frozenset(
    {
        "arbitrary", "arg_max_null", "arg_max_nulls_last", "arg_min_null",
        "arg_min_nulls_last", "bitstring_agg", "count_star", "entropy", "favg",
        "fsum", "histogram", "histogram_exact", "kahan_sum", "kurtosis_pop", "mad",
        "mean", "product", "reservoir_quantile", "sem", "sum_no_overflow", "sumkahan",
    }
)  # fmt: skip


_MAX_SHOWN = 80


REFUSED_ADVICE = ("which a model's SQL may not use; write a plain expression over the table's columns "
                  "(the functions and constructs allowed are listed in docs/security.md)")


class SqlError(ValueError):
    """SQL text that cannot be read as one expression.

    `str(error)` is one sentence that quotes the text and says what is wrong.
    """

    def __init__(self, message: str, text: str | None = None) -> None:
        super().__init__(message)
        self.text = text


def parse(text: str) -> "exp.Expression":
    """The sqlglot tree of one SQL expression; raises SqlError.

    Memoised by text: the same tree object comes back for the same text, so
    never change it (call `.copy()` first).
    """
    if not isinstance(text, str):
        raise SqlError(f"expected SQL text, got {type(text).__name__} {text!r}")
    outcome = _parse_outcome(text)
    if isinstance(outcome, _Failure):
        raise SqlError(outcome.message, text)
    return outcome


@dataclass(frozen=True)
class _Failure:
    """A text that is not SQL the model accepts, with the reason (memoised like a success)."""

    message: str


@functools.lru_cache(maxsize=4096)
def _parse_outcome(text: str) -> "exp.Expression | _Failure":
    if not text.strip():
        return _Failure(f"{_describe(text)} is empty; write an SQL expression")
    protected = _protect_parameters(text)
    outcome = _read(protected, text)
    if isinstance(outcome, _Failure):
        if protected != text:
            as_written = _read(text, text)  # explain the error in the text the person wrote
            if isinstance(as_written, _Failure):
                return as_written
            return _Failure(_PARAMETER_NAME.sub(r":\1", outcome.message))
        return outcome
    return _restore_parameters(outcome)


def _read(text: str, original: str) -> "exp.Expression | _Failure":
    """sqlglot's tree of `text`, or a failure that quotes `original`."""
    import sqlglot
    from sqlglot import exp
    from sqlglot.errors import ParseError, TokenError

    try:
        with _quiet_sqlglot():
            tree = sqlglot.parse_one(text, read=DIALECT, into=exp.Condition)
    except ParseError as error:
        return _Failure(_parse_error_message(original, error))
    except TokenError:
        return _Failure(f"{_describe(original)} cannot be read: {_token_problem(original)}")
    except RecursionError:
        return _Failure(f"{_describe(original)} is nested too deeply to read")
    except Exception as error:  # noqa: BLE001 - sqlglot must never leak a traceback
        first = str(error).splitlines()[0] if str(error) else type(error).__name__
        return _Failure(f"{_describe(original)} cannot be read: {_strip_ansi(first)}")
    if tree is None:
        return _Failure(f"{_describe(original)} is empty; write an SQL expression")
    if isinstance(tree, exp.Block):
        return _Failure(f"{_describe(original)} holds several statements; write one expression without ';'")
    if isinstance(tree, exp.Command) or tree.find(exp.Command) is not None:
        return _Failure(f"{_describe(original)} cannot be read as an expression")
    return tree


# `:name` parameters. sqlglot reads `:user` as a placeholder, but not the same
# way in every position (`(- :user)` comes back as an alias), so each one is
# read as a plain name and turned back into a placeholder in the tree.
_PARAMETER_PREFIX = "__modeldiff_parameter__"


_PARAMETER_NAME = re.compile(_PARAMETER_PREFIX + r"([A-Za-z_][A-Za-z0-9_]*)")


# A `--` comment ends at "\n" or "\r" in sqlglot (COMMENTS_TERMINATE_AT_NEWLINE_ONLY is off for DuckDB)
# and in DuckDB (the PostgreSQL scanner's `non_newline [^\n\r]`); every other line break is inside it.
_LINE_END = re.compile(r"[\n\r]")


_SKIPPED = re.compile(r"--|/\*|'|\"|\$(?:[A-Za-z_][A-Za-z0-9_]*)?\$|:[A-Za-z_][A-Za-z0-9_]*")


_NO_OPERAND_BEFORE = frozenset(":_\"')]}") | frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789")


def _protect_parameters(text: str) -> str:
    """`text` with each `:name` that starts an operand written as a plain name.

    Strings, quoted names, comments and dollar-quoted strings are left alone,
    and so are `::type` casts and a `:name` right after a name or a value.
    """
    if ":" not in text:
        return text
    out: list[str] = []
    pos = 0
    while True:
        match = _SKIPPED.search(text, pos)
        if match is None:
            out.append(text[pos:])
            return "".join(out)
        start, token = match.start(), match.group()
        if token.startswith(":"):
            if start > 0 and text[start - 1] in _NO_OPERAND_BEFORE:
                out.append(text[pos : match.end()])
            else:
                out.append(text[pos:start] + _PARAMETER_PREFIX + token[1:])
            pos = match.end()
            continue
        end = _skip_from(text, start, token)
        out.append(text[pos:end])
        pos = end
        if pos >= len(text):
            return "".join(out)


def _skip_from(text: str, start: int, token: str) -> int:
    """Where a comment, string or quoted name that begins at `start` ends (or the text ends)."""
    if token == "--":
        newline = _LINE_END.search(text, start)
        return len(text) if newline is None else newline.end()
    if token == "/*":
        depth, pos = 0, start
        while pos < len(text):
            if text.startswith("/*", pos):
                depth, pos = depth + 1, pos + 2
            elif text.startswith("*/", pos):
                depth, pos = depth - 1, pos + 2
                if depth == 0:
                    return pos
            else:
                pos += 1
        return len(text)
    if token.startswith("$"):
        close = text.find(token, start + len(token))
        return len(text) if close < 0 else close + len(token)
    e_string = start > 0 and text[start - 1] in "eE" and (start < 2 or not _is_name_char(text[start - 2]))
    escaped = token == "'" and e_string  # e'...' strings take backslash escapes
    pos = start + 1
    while pos < len(text):
        char = text[pos]
        if escaped and char == "\\":
            pos += 2
            continue
        if char == token:
            if text.startswith(token * 2, pos):
                pos += 2
                continue
            return pos + 1
        pos += 1
    return len(text)


def _is_name_char(char: str) -> bool:
    return char.isalnum() or char == "_"


def _restore_parameters(tree: "exp.Expression") -> "exp.Expression":
    """Turn the plain names `_protect_parameters` wrote back into placeholders."""
    from sqlglot import exp

    for column in list(tree.find_all(exp.Column)):
        if column.args.get("table") or not isinstance(column.this, exp.Identifier):
            continue
        match = _PARAMETER_NAME.fullmatch(column.this.this)
        if match is None:
            continue
        placeholder = exp.Placeholder(this=match.group(1))
        if column is tree:
            return placeholder
        column.replace(placeholder)
    return tree


@contextlib.contextmanager
def _quiet_sqlglot() -> Iterator[None]:
    """sqlglot logs a warning when it falls back to a raw command; we report it ourselves."""
    import logging  # sqlglot imports it too: only paid when sqlglot is

    logger = logging.getLogger("sqlglot")
    level = logger.level
    logger.setLevel(logging.ERROR)
    try:
        yield
    finally:
        logger.setLevel(level)


def _describe(text: str) -> str:
    """`the SQL `...`` with the text shortened to one readable line."""
    shown = " ".join(text.split())
    if len(shown) > _MAX_SHOWN:
        shown = shown[: _MAX_SHOWN - 3] + "..."
    return f"the SQL `{shown}`"


_ANSI = re.compile(r"\x1b\[[0-9;]*m")


_MISSING = re.compile(r"Required keyword: '\w+' missing for <class '[\w.]*?(\w+)'>")


def _strip_ansi(message: str) -> str:
    return _ANSI.sub("", message)


def _parse_error_message(text: str, error: Exception) -> str:
    details = getattr(error, "errors", None) or []
    if not details:
        first = _strip_ansi(str(error)).splitlines()[0] if str(error) else "it is not an expression"
        if first.startswith("No expression was parsed"):
            return f"{_describe(text)} is not an expression"
        return f"{_describe(text)} cannot be read: {first}"
    detail = details[0]
    description = _strip_ansi(str(detail.get("description") or "")).strip()
    near = _strip_ansi(str(detail.get("highlight") or "")).strip()
    before = _strip_ansi(str(detail.get("start_context") or "") + str(detail.get("highlight") or ""))
    before = " ".join(before.split())[-24:]
    if description.startswith("Invalid expression / Unexpected token"):
        problem = f"unexpected `{near}`" if near else "unexpected end"
    elif description.startswith("Expecting )"):
        problem = "a closing `)` is missing"
    elif _MISSING.match(description):
        problem = f"something is missing after `{before}`"
    else:
        problem = description.rstrip(".")
    col = detail.get("col")
    if isinstance(col, int) and near:
        col = max(1, col - len(near) + 1)  # sqlglot gives the column where the token ends
    where = _where(text, detail.get("line"), col)
    return f"{_describe(text)} cannot be read: {problem}{where}"


def _where(text: str, line: object, col: object) -> str:
    if not isinstance(line, int) or not isinstance(col, int):
        return ""
    if "\n" in text.strip():
        return f" (line {line}, column {col})"
    return f" (column {col})"


def _token_problem(text: str) -> str:
    """Why the tokenizer gave up: usually a string, quoted name or comment left open."""
    unclosed = _unterminated(text)
    if unclosed:
        return f"a {unclosed} is not closed"
    return "it holds a character that SQL does not allow here"


_OPENERS = re.compile(r"--|/\*|'|\"")


def _unterminated(text: str) -> str | None:
    """"string", "quoted name" or "comment" when one is left open, else None."""
    pos = 0
    while True:
        match = _OPENERS.search(text, pos)
        if match is None:
            return None
        opener = match.group()
        if opener == "--":
            newline = _LINE_END.search(text, match.end())
            if newline is None:
                return None
            pos = newline.end()
        elif opener == "/*":
            close = text.find("*/", match.end())
            if close < 0:
                return "comment"
            pos = close + 2
        else:
            body, pos = _quoted_body(text, match.end(), opener)
            if body is None:
                return "string" if opener == "'" else "quoted name"


@dataclass(frozen=True)
class Facts:
    """What one expression reads and does, found in one walk over its tree."""

    columns: frozenset[tuple[str | None, str]]  # (qualifier or None, name) as written
    outside_aggregate: frozenset[tuple[str | None, str]]  # columns read outside any aggregate
    aggregates: tuple[str, ...]  # aggregate function names, sorted, lower case
    parameters: frozenset[str]  # parameter names, lower case; "?" for an anonymous one
    subquery: bool
    condition_like: bool  # False when the top node is plainly a value (number, arithmetic)
    refused: tuple[str, ...] = ()  # constructs outside the allow-list (modeldiff.sqlguard), in reading order


def _quoted_body(text: str, start: int, closing: str) -> tuple[str | None, int]:
    """The body of a quoted string or name, with doubled quotes kept doubled."""
    pos = start
    while True:
        found = text.find(closing, pos)
        if found < 0:
            return None, len(text)
        if text.startswith(closing * 2, found):
            pos = found + 2
            continue
        return text[start:found], found + 1
