"""Parsing, normalising and inspecting the SQL expressions of a model.

A model holds SQL in four places: a measure's `expr` and `where`, a role's
filters, a report's `where` and a variant option's `where`. Each is one plain
SQL expression, read in DuckDB's dialect (the engine that data verification
runs on). `:user` is a parameter, the person viewing; DuckDB also spells it
`$user`, and both mean the same. sqlglot reads `:user` differently in some
positions, so each `:name` is read as a plain name and put back as a
placeholder in the tree.

Names are compared the way DuckDB compares them: case-insensitively, quoted or
not. Functions here return names as they were written; compare them with
`.lower()`.

A model's SQL is untrusted: it may hold only what the allow-list of
modeldiff.sqlguard allows (`Facts.refused` names the rest), and it reaches the
engine only through `engine_tree` / `engine_text`, never as the text written.

Every answer is memoised by the text, so a model with tens of thousands of
measures parses each distinct text once. sqlglot is imported on first use:
importing this module is cheap.
"""

from __future__ import annotations

import contextlib
import functools
import re
from collections.abc import Iterable, Iterator, Mapping, Set
from dataclasses import dataclass
from typing import TYPE_CHECKING

from modeldiff import sqlguard  # light: its sqlglot imports are inside functions

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


# ---------------------------------------------------------------- parsing


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


# ---------------------------------------------------------------- normal form


def normal_form(text: str, table: str | None = None) -> str:
    """A canonical string of the expression's logic.

    Case of keywords, names and function names, spaces, newlines, comments,
    quoting of names and redundant parentheses never count; the case of string
    literals does, and so does the grouping that parentheses force. `a AND
    (b AND c)` equals `a AND b AND c` (AND and OR are associative); operands are
    never reordered. With `table`, a column qualified with that table equals the
    bare column (a base measure may write `trips.fare` for `fare`).
    Raises SqlError.
    """
    parse(text)  # raises a fresh SqlError for bad text
    return _normal_form(text, table.lower() if table else None)


def same_logic(a: str | None, b: str | None, table: str | None = None) -> bool:
    """Whether two optional expressions have the same normal form.

    None equals only None. Identical texts are equal without parsing.
    Raises SqlError when a text cannot be read.
    """
    if a is None or b is None:
        return a is b
    if a == b:
        return True
    return normal_form(a, table) == normal_form(b, table)


@functools.lru_cache(maxsize=1 << 16)
def _normal_form(text: str, table: str | None) -> str:
    return _canonical(parse(text), table)


def _canonical(root: "exp.Expression", table: str | None) -> str:
    """An s-expression of node types and normalised arguments, without Paren nodes.

    Iterative (reverse pre-order computes children first), so deep trees such
    as a 3,000-term OR chain do not exhaust Python's recursion limit.
    """
    from sqlglot import exp

    order = []
    stack = [root]
    while stack:
        node = stack.pop()
        order.append(node)
        stack.extend(node.iter_expressions())
    form: dict[int, str] = {}
    chain: dict[int, tuple[type, list[str]]] = {}  # AND/OR operands, flattened
    bound = _lambda_bound(root)
    for node in reversed(order):
        key = id(node)
        if key in bound:
            form[key] = form[id(node.this)]  # a lambda's variable, written in another case
        elif _is_wrapper(node, exp):
            form[key] = form[id(node.this)]
            if id(node.this) in chain:
                chain[key] = chain[id(node.this)]
        elif isinstance(node, (exp.And, exp.Or)):
            items: list[str] = []
            for side in (node.this, node.expression):
                joined = chain.get(id(side))
                if joined is not None and joined[0] is type(node):
                    items.extend(joined[1])
                else:
                    items.append(form[id(side)])
            chain[key] = (type(node), items)
            form[key] = f"({type(node).__name__.lower()} {' '.join(items)})"
        else:
            form[key] = _node_form(node, form, table, exp)
    return form[id(root)]


def _is_wrapper(node: "exp.Expression", exp) -> bool:  # noqa: ANN001
    """Parentheses, and the nodes sqlglot makes of redundant ones."""
    if isinstance(node, exp.Paren):
        return True
    if isinstance(node, exp.Alias):
        return not node.args.get("alias")  # `((x))` in some positions
    if isinstance(node, exp.Subquery) and isinstance(node.this, exp.Subquery):
        return not any(value for key, value in node.args.items() if key != "this")  # `((select ...))`
    return False


def _node_form(node: "exp.Expression", form: dict[int, str], table: str | None, exp) -> str:  # noqa: ANN001
    if isinstance(node, exp.Column) and table is not None:
        qualifier = node.args.get("table")
        if (
            isinstance(qualifier, exp.Identifier)
            and qualifier.this.lower() == table
            and not node.args.get("db")
            and not node.args.get("catalog")
        ):
            return f"(column this={form[id(node.this)]})"
    caseless = _caseless_strings(node, exp)
    parts = [type(node).__name__.lower()]
    for name in sorted(node.args):
        if name in ("comments", "quoted"):
            continue
        value = node.args[name]
        if value is None or (isinstance(value, list) and not value):
            continue
        parts.append(f"{name}={_value_form(value, form, caseless, exp)}")
    return "(" + " ".join(parts) + ")"


def _caseless_strings(node: "exp.Expression", exp) -> bool:  # noqa: ANN001
    """Whether the plain-text arguments of this node ignore case in SQL."""
    if isinstance(node, exp.Literal):
        return not node.is_string  # 1E3 == 1e3, 'East' != 'east'
    return isinstance(node, _caseless_types(exp))


@functools.lru_cache(maxsize=1)
def _caseless_types(exp) -> tuple[type, ...]:  # noqa: ANN001
    """Nodes whose text arguments are names or keywords, never data."""
    return (exp.Identifier, exp.Var, exp.Anonymous, exp.Placeholder, exp.Window, exp.Trim, exp.DataType)


def _value_form(value: object, form: dict[int, str], caseless: bool, exp) -> str:  # noqa: ANN001
    import json  # (only normal forms need it: a command that reads no SQL does not pay for it)

    if isinstance(value, exp.Expression):
        return form[id(value)]
    if isinstance(value, list):
        return "[" + " ".join(_value_form(item, form, caseless, exp) for item in value) + "]"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value.lower() if caseless else value, ensure_ascii=False)
    return json.dumps(str(value), ensure_ascii=False)


# ---------------------------------------------------------------- facts about one text


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


def facts(text: str) -> Facts:
    """Everything the checks need about one expression; raises SqlError.

    Common shapes (`sum(fare)`, `count(*)`, `region = 'East'`, `a / nullif(b, 0)`)
    are read by a small exact parser of our own; anything else by sqlglot.
    The tests hold both to the same answer.
    """
    if not isinstance(text, str):
        parse(text)  # raises
    found = _facts(text)
    if isinstance(found, _Failure):
        raise SqlError(found.message, text)
    return found


@functools.lru_cache(maxsize=1 << 16)
def _facts(text: str) -> Facts | _Failure:
    quick = _fast_facts(text)
    if quick is not None:
        return quick
    outcome = _parse_outcome(text)
    if isinstance(outcome, _Failure):
        return outcome
    return _tree_facts(outcome)


def _tree_facts(tree: "exp.Expression") -> Facts:
    """Facts from sqlglot's tree: one iterative walk, and the allow-list's walk."""
    from sqlglot import exp

    from modeldiff import sqlguard

    columns: set[tuple[str | None, str]] = set()
    outside: set[tuple[str | None, str]] = set()
    aggregates: set[str] = set()
    parameters: set[str] = set()
    subquery = False
    bound = _lambda_bound(tree)
    stack: list[tuple[exp.Expression, bool]] = [(tree, False)]
    while stack:
        node, inside = stack.pop()
        name = _aggregate_name(node)
        if name is not None:
            aggregates.add(name)
            inside = True
        elif isinstance(node, exp.Window):
            inside = True
        if isinstance(node, exp.Column) and isinstance(node.this, exp.Identifier) and id(node) not in bound:
            ref = (_qualifier(node), node.this.this)
            columns.add(ref)
            if not inside:
                outside.add(ref)
        elif isinstance(node, exp.Placeholder):
            parameters.add(str(node.this).lower() if node.this is not None else "?")
        elif isinstance(node, (exp.Query, exp.Subquery, exp.Exists)):
            subquery = True
        stack.extend((child, inside) for child in node.iter_expressions())
    return Facts(
        columns=frozenset(columns),
        outside_aggregate=frozenset(outside),
        aggregates=tuple(sorted(aggregates)),
        parameters=frozenset(parameters),
        subquery=subquery,
        condition_like=not _plainly_a_value(tree),
        refused=sqlguard.refusals(tree),
    )


def _lambda_bound(tree: "exp.Expression") -> frozenset[int]:
    """Ids of Column nodes that are really a lambda's variable.

    sqlglot binds `x -> x + 1` case-sensitively, so `x -> X + 1` leaves `X` as
    a column; SQL names ignore case, so it is the variable.
    """
    from sqlglot import exp

    bound: set[int] = set()
    for lam in tree.find_all(exp.Lambda):
        variables = {
            variable.name.lower() for variable in lam.expressions if isinstance(variable, (exp.Identifier, exp.Column))
        }
        for column in lam.this.find_all(exp.Column):
            if not column.args.get("table") and isinstance(column.this, exp.Identifier):
                if column.this.this.lower() in variables:
                    bound.add(id(column))
    return frozenset(bound)


def _aggregate_name(node: "exp.Expression") -> str | None:
    from sqlglot import exp

    if isinstance(node, exp.AggFunc):
        return node.sql_name().lower() if hasattr(node, "sql_name") else type(node).__name__.lower()
    if isinstance(node, exp.Anonymous) and isinstance(node.this, str):
        if node.this.lower() in EXTRA_AGGREGATES:
            return node.this.lower()
    return None


def _qualifier(column: "exp.Column") -> str | None:
    from sqlglot import exp

    parts = [column.args.get(key) for key in ("catalog", "db", "table")]
    names = [part.this if isinstance(part, exp.Identifier) else str(part) for part in parts if part]
    return ".".join(names) if names else None


def _plainly_a_value(tree: "exp.Expression") -> bool:
    from sqlglot import exp

    node = tree
    while isinstance(node, exp.Paren):
        node = node.this
    if isinstance(node, exp.Literal):
        return True
    arithmetic = (exp.Add, exp.Sub, exp.Mul, exp.Div, exp.Mod, exp.Neg, exp.DPipe, exp.IntDiv, exp.Pow)
    return isinstance(node, arithmetic)


# ---------------------------------------------------------------- small questions


def column_refs(text: str) -> frozenset[tuple[str | None, str]]:
    """The columns an expression reads, as (qualifier or None, name).

    Names keep the case they were written in; compare them case-insensitively.
    `count(*)` reads no column. Lambda parameters and struct keys are not
    columns. A three-part name gives the qualifier `db.table`.
    """
    return facts(text).columns


def has_aggregate(text: str) -> bool:
    """Whether an aggregate function (sum, count, avg, min, max, median, ...) occurs anywhere."""
    return bool(facts(text).aggregates)


def names(text: str) -> frozenset[str]:
    """The names of all columns an expression reads, qualified or not, as written.

    In a derived measure these are the measures it names; function names are
    never among them.
    """
    if not isinstance(text, str):
        facts(text)  # raises SqlError, as for any text that is not SQL
    return _names(text)


@functools.lru_cache(maxsize=1 << 16)
def _names(text: str) -> frozenset[str]:
    return frozenset([name for _, name in facts(text).columns])


def measure_refs(expr: str, measure_names: Iterable[str]) -> frozenset[str]:
    """Which of `measure_names` a derived measure's expression names.

    A name written exactly as a measure is spelled means that measure;
    otherwise case is ignored (`Fare_Revenue` finds `fare_revenue`). The answer
    spells names as `measure_names` does. Pass a set, frozenset or mapping
    keyed by name: each lookup is then constant time (a frozenset's
    case-insensitive index is also cached), where a list costs a pass per call.
    """
    return _match_names(names(expr), measure_names)


_LAST_DERIVED_REFS: list[tuple[Mapping, dict[str, frozenset[str]]]] = []  # (measures, answer) last asked


def derived_measure_refs(measures: Mapping[str, "Measure"]) -> Mapping[str, frozenset[str]]:  # noqa: F821
    """Each derived measure (no `table`) -> the measures its expression names (none when unreadable).

    The answer for the last mapping asked is kept (by identity: a model's
    sections are not changed once read): the check and the impact analysis of
    a diff both ask it of the new revision. Do not change the answer.
    """
    for seen, answer in _LAST_DERIVED_REFS:
        if seen is measures:
            return answer
    names = frozenset(measures)
    answer: dict[str, frozenset[str]] = {}
    for measure in measures.values():
        if measure.table is None:
            try:
                answer[measure.name] = measure_refs(measure.expr, names)
            except SqlError:
                answer[measure.name] = frozenset()
    _LAST_DERIVED_REFS[:] = [(measures, answer)]
    return answer


def _match_names(used: Iterable[str], measure_names: Iterable[str]) -> frozenset[str]:
    if measure_names.__class__ not in _PLAIN_LOOKUPS and not isinstance(measure_names, (Set, Mapping)):  # (ABC checks are slow)
        measure_names = frozenset(measure_names)
    found: set[str] = set()
    missing: list[str] = []
    for name in used:
        if name in measure_names:
            found.add(name)
        else:
            missing.append(name.lower())
    if missing:
        if isinstance(measure_names, frozenset):
            index = _lower_index(measure_names)
        else:
            index = _lower_index.__wrapped__(measure_names)
        for name in missing:
            found.update(index.get(name, ()))
    return frozenset(found)


_PLAIN_LOOKUPS = (frozenset, set, dict)


@functools.lru_cache(maxsize=8)
def _lower_index(measure_names: Iterable[str]) -> dict[str, tuple[str, ...]]:
    index: dict[str, list[str]] = {}
    for name in measure_names:
        index.setdefault(name.lower(), []).append(name)
    return {key: tuple(sorted(value)) for key, value in index.items()}


def uses_user_parameter(text: str) -> bool:
    """Whether the expression depends on `:user`, the person viewing."""
    return USER_PARAMETER in facts(text).parameters


# ---------------------------------------------------------------- SQL for the engine


def engine_tree(text: str, columns: Iterable[str] | None = None, table: str | None = None) -> "exp.Expression":
    """A fresh copy of the tree of `text`, refused (SqlError naming the construct) unless it is allowed.

    Allowed: one expression inside the allow-list (modeldiff.sqlguard), no
    subquery, no parameter but `:user`; with `columns`, reading only those
    columns (case-insensitively), unqualified or qualified by `table`.
    Always parsed by sqlglot (never the fast reader): the engine runs what
    sqlglot read.
    """
    from sqlglot import exp

    tree = parse(text)
    found = _tree_facts(tree)
    if found.refused:
        raise SqlError(f"{_describe(text)} uses {found.refused[0]}, which a model's SQL may not use", text)
    if found.subquery:
        raise SqlError(f"{_describe(text)} holds a subquery, which a model's SQL may not use", text)
    others = sorted(found.parameters - {USER_PARAMETER})
    if others:
        shown = "?" if others[0] == "?" else f":{others[0]}"
        raise SqlError(f"{_describe(text)} uses the parameter {shown}; the only parameter is :user", text)
    if columns is not None:
        allowed = frozenset(column.lower() for column in columns)
        bound = _lambda_bound(tree)
        for column in tree.find_all(exp.Column):
            if id(column) in bound:
                continue
            qualifier = _qualifier(column)
            name = column.name
            outside = qualifier is not None and (table is None or qualifier.lower() != table.lower())
            if outside or name.lower() not in allowed:
                shown = f"{qualifier}.{name}" if qualifier else name
                raise SqlError(f"{_describe(text)} reads {shown}, which it may not read (only its own table's "
                               "columns; in a derived measure, measures)", text)
    return tree.copy()


def render_for_engine(tree: "exp.Expression") -> str:
    """The DuckDB text of a tree from `engine_tree` (or built from such trees), without comments.

    `:user` becomes DuckDB's `$user`. Raises SqlError when sqlglot's text does
    not read back as the same allowed expression (modeldiff.sqlguard.render).
    """
    try:
        return sqlguard.render(tree)
    except sqlguard.RenderError as error:
        raise SqlError(f"the SQL cannot be handed to the engine safely: {error}") from None


def engine_text(text: str, columns: Iterable[str] | None = None, table: str | None = None) -> str:
    """`render_for_engine(engine_tree(text, columns, table))`: the only text of a model's SQL the engine uses."""
    return render_for_engine(engine_tree(text, columns, table))


# ---------------------------------------------------------------- fast path for derived measures


def derived_refs_fast(expr: str, measure_names: Iterable[str]) -> frozenset[str]:
    """The same answer as `measure_refs` for every text that parses, usually without parsing.

    A small scanner handles the common shapes of derived measures (names,
    numbers, strings, comments, + - * / %, comparisons, CASE, AND/OR/NOT and a
    few plain functions such as nullif and coalesce). Anything else falls back
    to `measure_refs`. On text that does not parse it may return names where
    `measure_refs` raises SqlError; the check reports such text.
    """
    scanned = _fast_names(expr)
    if scanned is None:
        return measure_refs(expr, measure_names)
    used, keywords = scanned
    if keywords and _match_names(keywords, measure_names):
        return measure_refs(expr, measure_names)  # a measure named like a keyword: `end`, `in`
    return _match_names(used, measure_names)


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
_SIMPLE_KEYWORDS = frozenset(
    {"and", "or", "not", "case", "when", "then", "else", "end", "is", "null", "true", "false",
     "in", "between", "like", "ilike"}
)  # fmt: skip
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


@functools.lru_cache(maxsize=1)
def _reserved_words() -> frozenset[str]:
    """Every word that sqlglot's DuckDB tokenizer or parser treats specially, lower case."""
    snapshot = _word_snapshot()
    return snapshot[0] if snapshot is not None else _live_reserved_words()


@functools.lru_cache(maxsize=1)
def _known_functions() -> frozenset[str]:
    """Function names the DuckDB parser builds special nodes for (upper case)."""
    snapshot = _word_snapshot()
    return snapshot[1] if snapshot is not None else _live_known_functions()


def _live_reserved_words() -> frozenset[str]:
    from sqlglot.dialects.duckdb import DuckDB

    words: set[str] = set()
    keys = list(DuckDB.tokenizer_class.KEYWORDS) + list(DuckDB.parser_class.NO_PAREN_FUNCTION_PARSERS)
    for key in keys:
        words.update(part.lower() for part in re.findall(r"[A-Za-z_][A-Za-z0-9_]*", key))
    return frozenset(words - _SIMPLE_KEYWORDS)


def _live_known_functions() -> frozenset[str]:
    from sqlglot.dialects.duckdb import DuckDB

    parser = DuckDB.parser_class
    return frozenset(parser.FUNCTIONS) | frozenset(parser.FUNCTION_PARSERS)


# The two word lists above, as sqlglot of one version gives them (modeldiff/_sqlwords.py), so
# that reading the common shapes of SQL does not import sqlglot (a fifth of a second): used
# only when the installed sqlglot is that version, which is found without importing it.
_VERSION_LINE = re.compile(r"""^__version__\s*=\s*(?:version\s*=\s*)?['"]([^'"]+)['"]""", re.MULTILINE)


def installed_sqlglot_version() -> str | None:
    """The installed sqlglot's version, read from its `_version.py` without importing it."""
    import importlib.util
    import os

    try:
        spec = importlib.util.find_spec("sqlglot")
    except (ImportError, ValueError):
        return None
    folders = list(spec.submodule_search_locations or ()) if spec is not None else []
    for folder in folders:
        try:
            with open(os.path.join(folder, "_version.py"), encoding="utf-8") as handle:
                found = _VERSION_LINE.search(handle.read())
        except OSError:
            continue
        if found:
            return found.group(1)
    return None


@functools.lru_cache(maxsize=1)
def _word_snapshot() -> tuple[frozenset[str], frozenset[str]] | None:
    from modeldiff import _sqlwords

    if installed_sqlglot_version() != _sqlwords.SQLGLOT_VERSION:
        return None
    return _sqlwords.RESERVED, _sqlwords.FUNCTIONS


def word_snapshot_text() -> str:
    """The text of modeldiff/_sqlwords.py for the installed sqlglot (imports it)."""
    import sqlglot

    def words(values: frozenset[str]) -> str:
        ordered = sorted(values)
        lines = [" ".join(ordered[i : i + 8]) for i in range(0, len(ordered), 8)]
        return "frozenset(\"\"\"\n" + "\n".join(lines) + "\n\"\"\".split())"

    return (
        '"""sqlglot\'s DuckDB word lists for sql.py\'s fast reader, written by `sql.word_snapshot_text()`.\n\n'
        "Used only when the installed sqlglot is SQLGLOT_VERSION; otherwise sql.py asks sqlglot itself.\n"
        'Regenerate after changing the sqlglot version: see docs/performance.md.\n"""\n\n'
        f'SQLGLOT_VERSION = "{sqlglot.__version__}"\n\n'
        f"RESERVED = {words(_live_reserved_words())}\n\n"
        f"FUNCTIONS = {words(_live_known_functions())}\n"
    )


# ---------------------------------------------------------------- fast facts for common shapes

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
