"""Questions asked of one expression through its tree: the normal form, the facts, references, and SQL for the engine."""

from __future__ import annotations

import functools
from collections.abc import Iterable, Mapping, Set
from typing import TYPE_CHECKING

from modeldiff import sqlguard
from modeldiff.sql.reading import (
    EXTRA_AGGREGATES,
    Facts,
    SqlError,
    USER_PARAMETER,
    _Failure,
    _describe,
    _parse_outcome,
    parse,
)
from modeldiff.sql.scan import _fast_names
from modeldiff.sql.shapes import _fast_facts

if TYPE_CHECKING:  # pragma: no cover
    from sqlglot import exp


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
