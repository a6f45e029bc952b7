"""Structural comparison of two revisions: the Change records of changes.md's structural kinds.

Identity is the name. `keyed_diff` splits every section into added, removed and
kept names. A removed and an added item with the same definition (everything
but the name and metadata) become one `*.renamed` change; when something in the
new revision still names the old name, the rename is `breaking` and lists what
it left behind (`reference_changes` turns each into a `reference.broken`).
Before two items are compared, the old
one is translated into the new revision's names (renamed tables, columns,
links, measures, variants, roles), so a rename that every reference follows
yields that one change and nothing else.

Sections are compared in dependency order (tables with their columns, links,
measures, variants, roles, reports) through one dict of section specs; each
has a signature (its definition, for renames), a comparator, and messages for
added/removed items. Each semantic rule is a small named predicate. SQL text is
compared through `modeldiff.sql.normal_form`, and only where the text differs.

The full list of kinds, with default severities, is docs/change-kinds.md.
"""

from __future__ import annotations

import re
from collections import defaultdict
from dataclasses import asdict, dataclass, replace
from typing import Any, Callable, Hashable, Iterable, Iterator, Mapping, TypeVar

from modeldiff import conditions, sql  # sql is light: sqlglot is imported on first use
from modeldiff.changes import STRUCTURAL_KINDS, Change
from modeldiff.model import Column, History, Link, Measure, Model, Overrides, Report, Role, Table, Variant, VariantOption
from modeldiff.references import References, _words, sql_names_measure, sql_reads_column  # noqa: F401
from modeldiff.renames import Renames
from modeldiff.words import and_list

SAFE, NUMBERS, BREAKING = "safe", "numbers", "breaking"

# How two SQL texts compare.
SAME, COSMETIC, LOGIC = "same", "cosmetic", "logic"

T = TypeVar("T")

# Every kind this module emits (docs/change-kinds.md describes each, with its default severity).
KINDS = STRUCTURAL_KINDS  # the kinds this module makes (changes.KINDS holds them with their default severity)

# Above this many (removed x added) candidates of one type in one table, no column
# renames are guessed there: each is reported as a removal and an addition.
MAX_COLUMN_CANDIDATES = 400


# --- the generic keyed differ -------------------------------------------------------------


def keyed_diff(old: Mapping[str, T], new: Mapping[str, T]) -> tuple[list[str], list[str], list[str]]:
    """Added, removed and kept names, each sorted. Membership is tested with `in`."""
    if type(old) is dict and type(new) is dict and old.keys() == new.keys():
        return [], [], sorted(old)  # the common case: the same names (one set comparison, no passes)
    added = sorted(name for name in new if name not in old)
    removed = sorted(name for name in old if name not in new)
    kept = sorted(name for name in old if name in new)
    return added, removed, kept


# --- semantic predicates ------------------------------------------------------------------


def flow_widened(old: Link, new: Link) -> bool:
    return old.flow == "one-way" and new.flow == "two-way"


def flow_narrowed(old: Link, new: Link) -> bool:
    return old.flow == "two-way" and new.flow == "one-way"


def security_flow_changed(old: Link, new: Link) -> bool:
    return old.security_flow != new.security_flow


def cardinality_changed(old: Link, new: Link) -> bool:
    return old.cardinality != new.cardinality


def standby_set(old: Link, new: Link) -> bool:
    return not old.standby and new.standby


def standby_cleared(old: Link, new: Link) -> bool:
    return old.standby and not new.standby


def from_switched(old: Link, new: Link) -> bool:
    return (old.from_table, old.from_columns) != (new.from_table, new.from_columns)


def to_switched(old: Link, new: Link) -> bool:
    return (old.to_table, old.to_columns) != (new.to_table, new.to_columns)


def is_type2(table: Table | None) -> bool:
    return table is not None and table.history is not None and table.history.type == 2


def _same_columns(a: Iterable[str], b: Iterable[str]) -> bool:
    return [c.lower() for c in a] == [c.lower() for c in b]


def moved_surrogate_to_natural(old_link: Link, old_to: Table | None, new_link: Link, new_to: Table | None) -> bool:
    """The link left a type-2 table's surrogate key for its natural key: facts now reach every version."""
    return (is_type2(new_to) and old_to is not None and old_link.to_table == new_link.to_table
            and _same_columns(old_link.to_columns, old_to.key)
            and bool(new_to.natural_key) and _same_columns(new_link.to_columns, new_to.natural_key))


def moved_natural_to_surrogate(old_link: Link, old_to: Table | None, new_link: Link, new_to: Table | None) -> bool:
    """The link left a type-2 table's natural key for its surrogate key: facts reach one version again."""
    return (is_type2(old_to) and new_to is not None and old_link.to_table == new_link.to_table
            and bool(old_to.natural_key) and _same_columns(old_link.to_columns, old_to.natural_key)
            and _same_columns(new_link.to_columns, new_to.key))


def only_order_differs(a: tuple, b: tuple) -> bool:
    return a != b and sorted(a) == sorted(b)


# --- SQL ----------------------------------------------------------------------------------


def _normal_form(text: str, table: str | None = None) -> str | None:
    """modeldiff.sql's normal form (memoised there), or None when the text cannot be parsed."""
    try:
        return sql.normal_form(text, table)
    except sql.SqlError:
        return None


def sql_verdict(old: str | None, new: str | None, table: str | None = None) -> str:
    """SAME when the texts are equal, COSMETIC when only their spelling differs, else LOGIC.

    With `table`, a column qualified by that table equals the bare column. Text
    that cannot be parsed counts as LOGIC when it differs (conservative).
    """
    if old == new:
        return SAME
    if old is None or new is None:
        return LOGIC
    a, b = _normal_form(old, table), _normal_form(new, table)
    return COSMETIC if a is not None and a == b else LOGIC


def rename_in_sql(text: str, columns: Mapping[str, str], qualifiers: Mapping[str, str], scope: str | None) -> str | None:
    """`text` with renamed columns (and table qualifiers) spelled by their new names; None if unparsable.

    `columns` and `qualifiers` map lowercased old names to new names. A column is
    renamed when it is unqualified or qualified by the scope table (old or new name).
    """
    import sqlglot
    from sqlglot import exp

    try:
        tree = sql.parse(text).copy()  # parse() memoises its trees: never change them in place
    except sql.SqlError:
        return None
    scope_names = {scope.lower()} if scope else set()
    scope_names |= {old for old, new in qualifiers.items() if scope and new.lower() == scope.lower()}

    def rename(node):
        if isinstance(node, exp.Column):
            qualifier = node.table.lower() if node.table else ""
            if node.name.lower() in columns and (not qualifier or qualifier in scope_names):
                node.set("this", exp.to_identifier(columns[node.name.lower()]))
            if qualifier in qualifiers:
                node.set("table", exp.to_identifier(qualifiers[qualifier]))
        return node

    try:
        return tree.transform(rename).sql(dialect=sql.DIALECT)
    except sqlglot.errors.SqlglotError:
        return None


# --- JSON-ready values ----------------------------------------------------------------------


def _plain(value: Any) -> Any:
    if isinstance(value, Overrides):
        return {"via": list(value.via), "flow": dict(sorted(value.flow.items()))}
    if isinstance(value, History):
        return {k: v for k, v in asdict(value).items() if v is not None}
    if isinstance(value, VariantOption):
        return {"via": list(value.overrides.via), "flow": dict(sorted(value.overrides.flow.items())),
                "where": dict(sorted(value.where.items()))}
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in sorted(value.items())}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    return value


def _frozen(value: Any) -> Hashable:
    """A hashable, order-stable form of mappings and sequences (for signatures)."""
    if isinstance(value, Mapping):
        return tuple(sorted((k, _frozen(v)) for k, v in value.items()))
    if isinstance(value, (tuple, list)):
        return tuple(_frozen(v) for v in value)
    if isinstance(value, Overrides):
        return ("overrides", _frozen(value.via), _frozen(value.flow))
    return value


def _columns_text(table: str, columns: tuple[str, ...]) -> str | list[str]:
    names = [f"{table}.{c}" for c in columns]
    return names[0] if len(names) == 1 else names


def _list(items: Iterable[str], limit: int = 4) -> str:
    items = list(items)
    shown = ", ".join(items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")


_and = and_list  # "a", "a and b", "a, b and c"


def _was(items: Iterable[str]) -> str:
    return "was" if len(list(items)) == 1 else "were"


def _changed_fields(old: Any, new: Any, names: Iterable[str]) -> tuple[dict, dict]:
    before, after = {}, {}
    for name in names:
        a, b = getattr(old, name), getattr(new, name)
        if a != b:
            before[name], after[name] = _plain(a), _plain(b)
    return before, after


# --- the comparison context -------------------------------------------------------------------

DERIVED = object()  # SQL scope of a derived measure's expression: measure names


class DiffContext:
    def __init__(self, old: Model, new: Model):
        self.old, self.new = old, new
        self.renames = Renames()
        self.old_refs, self.new_refs = References(old), References(new)

    def change(self, kind: str, subject: str, severity: str, message: str, before=None, after=None, **details) -> Change:
        return Change(kind, subject, severity, message, before, after, details)

    # SQL seen through the renames

    def _sql_maps(self, scope, subject: str | None) -> tuple[dict[str, str], dict[str, str], str | None]:
        if scope is DERIVED:
            return {o.lower(): n for o, n in self.renames.followed("measures", subject).items()}, {}, None
        if scope is None:
            return {}, {}, None
        tables = {o.lower(): n for o, n in self.renames.followed("tables", subject).items()}
        return self.renames.columns.get(scope, {}), tables, scope

    def old_sql(self, text: str | None, scope, subject: str | None = None) -> str | None:
        """An old SQL text spelled in new names (rewritten only when it names something renamed).

        `subject`: the item (new names) the text belongs to; renames it left behind are not applied.
        """
        if text is None:
            return None
        columns, tables, table = self._sql_maps(scope, subject)
        if not columns and not tables:
            return text
        words = _words(text)
        if not any(w in words for w in (*columns, *tables)):
            return text
        rewritten = rename_in_sql(text, columns, tables, table)
        return text if rewritten is None else rewritten

    def compare_sql(self, old: str | None, new: str | None, scope, subject: str | None = None) -> str:
        """SAME, COSMETIC or LOGIC; a difference explained by renames alone counts as SAME."""
        if old == new:
            return SAME
        seen = self.old_sql(old, scope, subject)
        verdict = sql_verdict(seen, new, None if scope is DERIVED else scope)
        if seen is not old and verdict == COSMETIC:
            return SAME
        return verdict

    def sql_key(self, text: str | None, scope, old: bool, deep: bool, subject: str | None = None) -> Hashable:
        """A text's part of a signature: as written (old ones in new names), or its normal form."""
        if text is None:
            return None
        if old:
            text = self.old_sql(text, scope, subject)
        if deep:
            normal = _normal_form(text, None if scope is DERIVED else scope)
            return ("normal", normal) if normal is not None else ("text", text)
        return ("text", text)


# --- pairing renames ---------------------------------------------------------------------------


def pair_renames(removed: Mapping[str, Hashable], added: Mapping[str, Hashable],
                 confirm: Callable[[str, str], bool], limit: int | None = None) -> list[tuple[str, str]]:
    """Pairs (old, new) of equal signature that `confirm` accepts, where the match is one-to-one.

    Ambiguous matches (one old item fitting several new ones, or the reverse) are
    left unpaired: they are reported as removals and additions.
    """
    buckets: dict[Hashable, tuple[list[str], list[str]]] = {}
    for name, sig in sorted(removed.items()):
        buckets.setdefault(sig, ([], []))[0].append(name)
    for name, sig in sorted(added.items()):
        if sig in buckets:
            buckets[sig][1].append(name)
    pairs = []
    for olds, news in buckets.values():
        if not news or (limit is not None and len(olds) * len(news) > limit):
            continue
        candidates = [(o, n) for o in olds for n in news if confirm(o, n)]
        old_count: dict[str, int] = defaultdict(int)
        new_count: dict[str, int] = defaultdict(int)
        for o, n in candidates:
            old_count[o] += 1
            new_count[n] += 1
        pairs += [(o, n) for o, n in candidates if old_count[o] == 1 and new_count[n] == 1]
    return sorted(pairs)


def _references_follow(ctx: DiffContext, section: str) -> Callable[[str, str], bool]:
    """A rename only if nothing in the new revision still names the old name."""
    return lambda old, new: not ctx.new_refs.referrers(section, old)


# --- tables and columns ------------------------------------------------------------------------


def _table_signature(ctx: DiffContext, t: Table, old: bool, deep: bool) -> Hashable:
    columns = frozenset((n.lower(), c.type) for n, c in t.columns.items())
    return (t.kind, tuple(c.lower() for c in t.key), tuple(c.lower() for c in t.natural_key), columns)


def _table_added(ctx: DiffContext, t: Table) -> Change:
    users = ctx.new_refs.referrers("tables", t.name)
    severity = NUMBERS if users else SAFE
    tail = f"; it is already used by {_list(users)}" if users else "; nothing uses it yet"
    return ctx.change("table.added", f"tables.{t.name}", severity,
                      f"Table {t.name} was added (a {t.kind} with {len(t.columns)} columns){tail}.", None, t.name)


def _table_removed(ctx: DiffContext, t: Table) -> Change:
    users = ctx.new_refs.referrers("tables", t.name)
    if users:
        return ctx.change("table.removed", f"tables.{t.name}", BREAKING,
                          f"Table {t.name} was removed, but it is still named by {_list(users)}.", t.name, None,
                          referenced_by=list(users))
    return ctx.change("table.removed", f"tables.{t.name}", NUMBERS,
                      f"Table {t.name} was removed, with every number that read it.", t.name, None)


def _column_rename_ok(ctx: DiffContext, old_table: str, new_table: str, old_col: str, new_col: str) -> bool:
    """Every reference to the old column that survives now names the new one, and none names the old."""
    if old_col.lower() == new_col.lower():
        return True  # SQL and the checks read names case-insensitively: references cannot tell them apart
    if ctx.new_refs.column_referrers(new_table, old_col):
        return False
    now = set(ctx.new_refs.column_referrers(new_table, new_col))
    for subject in ctx.old_refs.column_referrers(old_table, old_col):
        if subject.startswith("tables."):
            subject = f"tables.{new_table}"
        section, _, name = subject.partition(".")
        if name in getattr(ctx.new, section) and subject not in now:
            return False
    return True


def find_column_renames(ctx: DiffContext, old_t: Table, new_t: Table) -> dict[str, str]:
    """Old column -> new column of one table (kept or renamed): same type, references follow."""
    added, removed, _ = keyed_diff(old_t.columns, new_t.columns)
    if not added or not removed:
        return {}
    pairs = pair_renames({c: old_t.columns[c].type for c in removed}, {c: new_t.columns[c].type for c in added},
                         lambda o, n: _column_rename_ok(ctx, old_t.name, new_t.name, o, n),
                         limit=MAX_COLUMN_CANDIDATES)
    return dict(pairs)


def compare_column(ctx: DiffContext, table: str, old: Column, new: Column) -> Iterator[Change]:
    subject = f"tables.{table}.columns.{new.name}"
    if old.type != new.type:
        yield ctx.change("column.type_changed", subject, NUMBERS,
                         f"Column {table}.{new.name} changed type ({old.type} -> {new.type}): values, joins and sums over it can change.",
                         old.type, new.type)
    if old.unique != new.unique:
        said = "now declared unique" if new.unique else "no longer declared unique"
        yield ctx.change("column.unique_changed", subject, NUMBERS,
                         f"Column {table}.{new.name} is {said}: links that point at it are checked for a unique key differently.",
                         old.unique, new.unique)
    if old.description != new.description:
        yield ctx.change("column.metadata_changed", subject, SAFE,
                         f"The description of column {table}.{new.name} changed; no number changes.",
                         {"description": old.description}, {"description": new.description})


def _column_added(ctx: DiffContext, table: str, c: Column) -> Change:
    users = ctx.new_refs.column_referrers(table, c.name)
    severity = NUMBERS if users else SAFE
    tail = f"; it is already read by {_list(users)}" if users else "; nothing reads it yet"
    return ctx.change("column.added", f"tables.{table}.columns.{c.name}", severity,
                      f"Column {table}.{c.name} ({c.type}) was added{tail}.", None, c.name)


def _column_removed(ctx: DiffContext, table: str, c: Column) -> Change:
    users = ctx.new_refs.column_referrers(table, c.name)
    subject = f"tables.{table}.columns.{c.name}"
    if users:
        return ctx.change("column.removed", subject, BREAKING,
                          f"Column {table}.{c.name} was removed, but it is still read by {_list(users)}.", c.name, None,
                          referenced_by=list(users))
    return ctx.change("column.removed", subject, NUMBERS, f"Column {table}.{c.name} was removed.", c.name, None)


def _diff_columns(ctx: DiffContext, old_t: Table, new_t: Table, renamed: Mapping[str, str]) -> Iterator[Change]:
    """`old_t` is already in new names; `renamed` maps old column names (as written) to new ones."""
    back = {new: old for old, new in renamed.items()}
    added, removed, kept = keyed_diff(old_t.columns, new_t.columns)
    for name in removed:
        yield _column_removed(ctx, new_t.name, old_t.columns[name])
    for name in added:
        yield _column_added(ctx, new_t.name, new_t.columns[name])
    for name in kept:
        old_c, new_c = old_t.columns[name], new_t.columns[name]
        if name in back:
            yield ctx.change("column.renamed", f"tables.{new_t.name}.columns.{name}", SAFE,
                             f"Column {new_t.name}.{back[name]} was renamed to {name}; every reference follows it.",
                             back[name], name)
        if old_c != new_c:
            yield from compare_column(ctx, new_t.name, old_c, new_c)


def key_changed(old: Table, new: Table) -> bool:
    return tuple(old.key) != tuple(new.key)


def natural_key_changed(old: Table, new: Table) -> bool:
    return tuple(old.natural_key) != tuple(new.natural_key)


def history_changed(old: Table, new: Table) -> bool:
    return old.history != new.history


def _history_text(h: History | None) -> str:
    return "no history handling" if h is None else f"history type {h.type}"


def compare_tables(ctx: DiffContext, old_raw: Table, new: Table) -> Iterator[Change]:
    renames = find_column_renames(ctx, old_raw, new)
    if renames:
        ctx.renames.columns[new.name] = {o.lower(): n for o, n in renames.items()}
    old = ctx.renames.table(old_raw)
    subject, name = f"tables.{new.name}", new.name
    if old.kind != new.kind:
        yield ctx.change("table.kind_changed", subject, NUMBERS,
                         f"Table {name} is now a {new.kind} (was a {old.kind}): checks and row-security rules treat it differently.",
                         old.kind, new.kind)
    if key_changed(old, new):
        yield ctx.change("table.key_changed", subject, NUMBERS,
                         f"The key of table {name} changed ({_and(old.key) if old.key else 'none'} -> {_and(new.key) if new.key else 'none'}): what counts as one row of it changed.",
                         list(old.key), list(new.key))
    if natural_key_changed(old, new):
        yield ctx.change("table.natural_key_changed", subject, NUMBERS,
                         f"The natural key of table {name} changed ({', '.join(old.natural_key) or 'none'} -> {', '.join(new.natural_key) or 'none'}): links to it and its history are matched differently.",
                         list(old.natural_key), list(new.natural_key))
    if history_changed(old, new):
        yield ctx.change("table.history_changed", subject, NUMBERS,
                         f"The history handling of table {name} changed ({_history_text(old.history)} -> {_history_text(new.history)}): which version of a member a fact counts for can change.",
                         _plain(old.history), _plain(new.history))
    before, after = _changed_fields(old, new, ("description", "source"))
    if before:
        yield ctx.change("table.metadata_changed", subject, SAFE,
                         f"The {_and(before)} of table {name} changed; no number changes.", before, after)
    if old.columns != new.columns or renames:
        yield from _diff_columns(ctx, old, new, renames)


# --- links ----------------------------------------------------------------------------------------


def _link_signature(ctx: DiffContext, link: Link, old: bool, deep: bool) -> Hashable:
    if old:
        link = ctx.renames.link(link)
    return (link.from_table, tuple(c.lower() for c in link.from_columns), link.to_table,
            tuple(c.lower() for c in link.to_columns), link.cardinality, link.flow, link.security_flow, link.standby)


def _link_used(ctx: DiffContext, link: Link) -> tuple[str, ...]:
    return ctx.new_refs.referrers("links", link.name)


def _link_added(ctx: DiffContext, link: Link) -> Change:
    users = _link_used(ctx, link)
    subject = f"links.{link.name}"
    if link.standby and not users:
        return ctx.change("link.added", subject, SAFE,
                          f"Standby link {link.name} ({link.from_table} -> {link.to_table}) was added; nothing uses it yet.", None, link.name)
    how = "on standby, used by " + _list(users) if link.standby else "carrying filters"
    return ctx.change("link.added", subject, NUMBERS,
                      f"Link {link.name} was added ({how}): filters on {link.to_table} now reach {link.from_table} through it.",
                      None, link.name)


def _link_removed(ctx: DiffContext, link: Link) -> Change:
    users = _link_used(ctx, link)
    subject = f"links.{link.name}"
    if users:
        return ctx.change("link.removed", subject, BREAKING,
                          f"Link {link.name} was removed, but it is still named by {_list(users)}.", link.name, None,
                          referenced_by=list(users))
    return ctx.change("link.removed", subject, NUMBERS,
                      f"Link {link.name} was removed: filters on {link.to_table} no longer reach {link.from_table} through it.",
                      link.name, None)


def _key_switch_message(link: Link, side: str, before, after, history: str | None) -> str:
    joined = lambda v: v if isinstance(v, str) else ", ".join(v)  # noqa: E731
    text = f"Link {link.name} now joins {'from' if side == 'from' else 'to'} {joined(after)} instead of {joined(before)}"
    if history == "surrogate->natural":
        return (text + f": it moved from the surrogate key to the natural key of type-2 table {link.to_table}, so each "
                f"{link.from_table} row now reaches every version of its member; history is no longer attributed to the "
                "version valid when the fact happened, and the link is effectively many-to-many.")
    if history == "natural->surrogate":
        return (text + f": it moved from the natural key to the surrogate key of type-2 table {link.to_table}, so each "
                f"{link.from_table} row now reaches only the version of its member valid when the fact happened, "
                "instead of every version.")
    return text + ": rows now match on different values, so totals across the link can change."


def compare_links(ctx: DiffContext, old_raw: Link, new: Link) -> Iterator[Change]:
    old = ctx.renames.link(old_raw)
    subject, name = f"links.{new.name}", new.name
    if from_switched(old, new):
        before, after = _columns_text(old.from_table, old.from_columns), _columns_text(new.from_table, new.from_columns)
        yield ctx.change("link.key_switched", subject, NUMBERS, _key_switch_message(new, "from", before, after, None),
                         before, after, side="from")
    if to_switched(old, new):
        before, after = _columns_text(old.to_table, old.to_columns), _columns_text(new.to_table, new.to_columns)
        old_to = ctx.old.tables.get(old_raw.to_table)
        old_to = ctx.renames.table(old_to) if old_to is not None else None
        new_to = ctx.new.tables.get(new.to_table)
        history = ("surrogate->natural" if moved_surrogate_to_natural(old, old_to, new, new_to)
                   else "natural->surrogate" if moved_natural_to_surrogate(old, old_to, new, new_to) else None)
        details = {"side": "to"} | ({"history": history} if history else {})
        yield ctx.change("link.key_switched", subject, NUMBERS, _key_switch_message(new, "to", before, after, history),
                         before, after, **details)
    if cardinality_changed(old, new):
        one_to_one = "one-to-one" in (old.cardinality, new.cardinality)
        effect = (f"a filter on {new.from_table} {'now' if new.cardinality == 'one-to-one' else 'no longer'} restricts "
                  f"{new.to_table} through it, so totals across the link can change" if one_to_one else
                  "no filter travels differently, so no number moves on its own; it changes which data is valid "
                  f"(whether a {new.to_table} key may repeat), so check the data before relying on it")
        yield ctx.change("link.cardinality_changed", subject, NUMBERS,
                         f"The cardinality of link {name} changed ({old.cardinality} -> {new.cardinality}): {effect}.",
                         old.cardinality, new.cardinality)
    if flow_widened(old, new):
        yield ctx.change("link.flow_widened", subject, NUMBERS,
                         f"Link {name} now lets filters flow both ways (one-way -> two-way): a filter on {new.from_table} now also restricts {new.to_table}.",
                         old.flow, new.flow)
    if flow_narrowed(old, new):
        yield ctx.change("link.flow_narrowed", subject, NUMBERS,
                         f"Link {name} now lets filters flow one way only (two-way -> one-way): a filter on {new.from_table} no longer restricts {new.to_table}.",
                         old.flow, new.flow)
    if security_flow_changed(old, new):
        effect = ("row security on {f} now also restricts {t} where the link flows both ways" if new.security_flow == "two-way"
                  else "row security on {f} no longer restricts {t}").format(f=new.from_table, t=new.to_table)
        yield ctx.change("link.security_flow_changed", subject, NUMBERS,
                         f"The security_flow of link {name} changed ({old.security_flow} -> {new.security_flow}): {effect}.",
                         old.security_flow, new.security_flow)
    if standby_set(old, new):
        yield ctx.change("link.standby_set", subject, NUMBERS,
                         f"Link {name} is now on standby: filters on {new.to_table} no longer reach {new.from_table} through it, "
                         "except where a measure, variant option or report names it in `via`.", False, True)
    if standby_cleared(old, new):
        yield ctx.change("link.standby_cleared", subject, NUMBERS,
                         f"Link {name} is no longer on standby: filters on {new.to_table} now reach {new.from_table} through it everywhere.",
                         True, False)
    if old.description != new.description:
        yield ctx.change("link.metadata_changed", subject, SAFE, f"The description of link {name} changed; no number changes.",
                         {"description": old.description}, {"description": new.description})


# --- measures -------------------------------------------------------------------------------------

_MEASURE_METADATA = ("description", "unit", "owner", "folder")


def _measure_scope(m: Measure):
    return DERIVED if m.table is None else m.table


def _measure_signature(ctx: DiffContext, m: Measure, old: bool, deep: bool) -> Hashable:
    if old:
        m = ctx.renames.measure(m)
    scope, subject = _measure_scope(m), f"measures.{m.name}"
    return (m.table, ctx.sql_key(m.expr, scope, old, deep, subject), ctx.sql_key(m.where, scope, old, deep, subject),
            _frozen(m.overrides))


def _measure_added(ctx: DiffContext, m: Measure) -> Change:
    users = ctx.new_refs.referrers("measures", m.name)
    severity = NUMBERS if users else SAFE
    tail = f"; it is already used by {_list(users)}" if users else "; nothing uses it yet"
    return ctx.change("measure.added", f"measures.{m.name}", severity, f"Measure {m.name} was added{tail}.", None, m.name)


def _measure_removed(ctx: DiffContext, m: Measure) -> Change:
    users = ctx.new_refs.referrers("measures", m.name)
    subject = f"measures.{m.name}"
    if users:
        return ctx.change("measure.removed", subject, BREAKING,
                          f"Measure {m.name} was removed, but it is still used by {_list(users)}.", m.name, None,
                          referenced_by=list(users))
    return ctx.change("measure.removed", subject, NUMBERS, f"Measure {m.name} was removed.", m.name, None)


def _measure_renamed(ctx: DiffContext, old: str, new: str) -> Change:
    reports = tuple(r for r in ctx.new_refs.referrers("measures", new) if r.startswith("reports."))
    if ctx.renames.stale["measures"].get(old):
        change = _renamed_change(ctx, "measures", "measure", old, new)
        return replace(change, details={**change.details, "used_by": list(reports)}) if reports else change
    if reports:
        return ctx.change("measure.renamed", f"measures.{new}", BREAKING,
                          f"Measure {old} was renamed to {new}, and it is shown by {_list(reports)}: their output now names a different measure.",
                          old, new, used_by=list(reports))
    return ctx.change("measure.renamed", f"measures.{new}", SAFE,
                      f"Measure {old} was renamed to {new}; its definition is unchanged and every reference follows it.", old, new)


def compare_measures(ctx: DiffContext, old_raw: Measure, new: Measure) -> Iterator[Change]:
    old = ctx.renames.measure(old_raw)
    subject, name = f"measures.{new.name}", new.name
    logic_before, logic_after, cosmetic_before, cosmetic_after = {}, {}, {}, {}
    if old.table != new.table:
        logic_before["table"], logic_after["table"] = old.table, new.table
    scope = _measure_scope(old)
    for fld in ("expr", "where"):
        a, b = getattr(old, fld), getattr(new, fld)
        verdict = ctx.compare_sql(a, b, scope, subject)
        if verdict == LOGIC:
            logic_before[fld], logic_after[fld] = a, b
        elif verdict == COSMETIC:
            cosmetic_before[fld], cosmetic_after[fld] = a, b
    if logic_before:
        yield ctx.change("measure.logic_changed", subject, NUMBERS,
                         f"The {_and(logic_before)} of measure {name} changed in meaning: its values can change.",
                         logic_before, logic_after)
    if cosmetic_before:
        yield ctx.change("measure.cosmetic_changed", subject, SAFE,
                         f"The {_and(cosmetic_before)} of measure {name} {_was(cosmetic_before)} respelled (same SQL after normalising); no number changes.",
                         cosmetic_before, cosmetic_after)
    if old.overrides != new.overrides:
        yield ctx.change("measure.overrides_changed", subject, NUMBERS,
                         f"Measure {name} follows different links now (`via`/`flow` changed): which filters reach its table can change.",
                         _plain(old.overrides), _plain(new.overrides))
    before, after = _changed_fields(old, new, _MEASURE_METADATA)
    if before:
        yield ctx.change("measure.metadata_changed", subject, SAFE,
                         f"The {_and(before)} of measure {name} changed; no number changes.", before, after)


# --- variants --------------------------------------------------------------------------------------


def _option_signature(ctx: DiffContext, o: VariantOption, old: bool, deep: bool, subject: str) -> Hashable:
    where = tuple(sorted((t, ctx.sql_key(text, t, old, deep, subject)) for t, text in o.where.items()))
    return (_frozen(o.overrides), where)


def _variant_signature(ctx: DiffContext, v: Variant, old: bool, deep: bool) -> Hashable:
    if old:
        v = ctx.renames.variant(v)
    subject = f"variants.{v.name}"
    return (v.default, tuple(sorted((n, _option_signature(ctx, o, old, deep, subject)) for n, o in v.options.items())))


def _variant_added(ctx: DiffContext, v: Variant) -> Change:
    users = ctx.new_refs.referrers("variants", v.name)
    severity = NUMBERS if users else SAFE
    tail = f"; it is already chosen by {_list(users)}" if users else "; no report chooses it yet"
    return ctx.change("variant.added", f"variants.{v.name}", severity,
                      f"Variant {v.name} was added with options {_list(sorted(v.options))}{tail}.", None, v.name)


def _variant_removed(ctx: DiffContext, v: Variant) -> Change:
    users = ctx.new_refs.referrers("variants", v.name)
    subject = f"variants.{v.name}"
    if users:
        return ctx.change("variant.removed", subject, BREAKING,
                          f"Variant {v.name} was removed, but it is still chosen by {_list(users)}.", v.name, None,
                          referenced_by=list(users))
    return ctx.change("variant.removed", subject, NUMBERS, f"Variant {v.name} was removed.", v.name, None)


def _where_verdicts(ctx: DiffContext, old: Mapping[str, str], new: Mapping[str, str],
                    subject: str) -> tuple[dict, dict, dict, dict]:
    """Predicates keyed by table: (logic before, logic after, cosmetic before, cosmetic after)."""
    lb, la, cb, ca = {}, {}, {}, {}
    for table in sorted(set(old) | set(new)):
        a, b = old.get(table), new.get(table)
        verdict = ctx.compare_sql(a, b, table, subject)
        if verdict == LOGIC:
            lb[table], la[table] = a, b
        elif verdict == COSMETIC:
            cb[table], ca[table] = a, b
    return lb, la, cb, ca


def compare_variants(ctx: DiffContext, old_raw: Variant, new: Variant) -> Iterator[Change]:
    old = ctx.renames.variant(old_raw)
    subject, name = f"variants.{new.name}", new.name
    if old.default != new.default:
        yield ctx.change("variant.changed", subject, NUMBERS,
                         f"The default option of variant {name} changed ({old.default} -> {new.default}): reports that do not choose an option now get {new.default}.",
                         {"default": old.default}, {"default": new.default})
    added, removed, kept = keyed_diff(old.options, new.options)
    for option in removed:
        if _option_chosen(ctx, name, option):
            yield ctx.change("variant.changed", f"{subject}.options.{option}", BREAKING,
                             f"Option {option} of variant {name} was removed, but it is still chosen (as the default or by a report).",
                             {"option": _plain(old.options[option])}, None, option=option)
        else:
            yield ctx.change("variant.changed", f"{subject}.options.{option}", NUMBERS,
                             f"Option {option} of variant {name} was removed.", {"option": _plain(old.options[option])}, None,
                             option=option)
    for option in added:
        yield ctx.change("variant.changed", f"{subject}.options.{option}", SAFE if not _option_chosen(ctx, name, option) else NUMBERS,
                         f"Option {option} was added to variant {name}.", None, {"option": _plain(new.options[option])},
                         option=option)
    for option in kept:
        a, b = old.options[option], new.options[option]
        if a == b:
            continue
        opt_subject = f"{subject}.options.{option}"
        before, after = {}, {}
        if a.overrides.via != b.overrides.via:
            before["via"], after["via"] = list(a.overrides.via), list(b.overrides.via)
        if a.overrides.flow != b.overrides.flow:
            before["flow"], after["flow"] = _plain(a.overrides.flow), _plain(b.overrides.flow)
        lb, la, cb, ca = _where_verdicts(ctx, a.where, b.where, subject)
        if lb:
            before["where"], after["where"] = lb, la
        if before:
            yield ctx.change("variant.changed", opt_subject, NUMBERS,
                             f"Option {option} of variant {name} changed its {_and(before)}: reports choosing it can show different numbers.",
                             before, after, option=option)
        if cb:
            yield ctx.change("variant.cosmetic_changed", opt_subject, SAFE,
                             f"A `where` of option {option} of variant {name} was respelled (same SQL after normalising); no number changes.",
                             {"where": cb}, {"where": ca}, option=option)
    if old.description != new.description:
        yield ctx.change("variant.metadata_changed", subject, SAFE, f"The description of variant {name} changed; no number changes.",
                         {"description": old.description}, {"description": new.description})


def _option_chosen(ctx: DiffContext, variant: str, option: str) -> bool:
    v = ctx.new.variants.get(variant)
    if v is not None and v.default == option:
        return True
    return any(r.variant.get(variant) == option for r in ctx.new.reports.values())


# --- roles -----------------------------------------------------------------------------------------


def _role_signature(ctx: DiffContext, r: Role, old: bool, deep: bool) -> Hashable:
    if old:
        r = ctx.renames.role(r)
    return tuple(sorted((t, ctx.sql_key(text, t, old, deep, f"roles.{r.name}")) for t, text in r.filters.items()))


def _role_added(ctx: DiffContext, r: Role) -> Change:
    users = ctx.new_refs.referrers("roles", r.name)
    severity = NUMBERS if users else SAFE
    tail = f"; {_list(users)} already show what it sees" if users else "; no report is seen as it yet"
    return ctx.change("role.added", f"roles.{r.name}", severity,
                      f"Role {r.name} was added, filtering {_list(sorted(r.filters)) or 'nothing'}{tail}.", None, r.name)


def _role_removed(ctx: DiffContext, r: Role) -> Change:
    users = ctx.new_refs.referrers("roles", r.name)
    subject = f"roles.{r.name}"
    if users:
        return ctx.change("role.removed", subject, BREAKING, f"Role {r.name} was removed, but {_list(users)} still name it as their role.",
                          r.name, None, referenced_by=list(users))
    return ctx.change("role.removed", subject, NUMBERS,
                      f"Role {r.name} was removed: its members no longer get its row filters.", r.name, None)


def compare_roles(ctx: DiffContext, old_raw: Role, new: Role) -> Iterator[Change]:
    old = ctx.renames.role(old_raw)
    subject, name = f"roles.{new.name}", new.name
    lb, la, cb, ca = _where_verdicts(ctx, old.filters, new.filters, subject)
    if lb:
        yield ctx.change("role.filter_changed", subject, NUMBERS,
                         f"The filter of role {name} on {_and(sorted(lb))} changed: the rows its members see can change.",
                         lb, la, tables=sorted(lb))
    if cb:
        yield ctx.change("role.cosmetic_changed", subject, SAFE,
                         f"The filter of role {name} on {_and(sorted(cb))} was respelled (same SQL after normalising); no visible row changes.",
                         cb, ca, tables=sorted(cb))
    if old.description != new.description:
        yield ctx.change("role.metadata_changed", subject, SAFE, f"The description of role {name} changed; no visible row changes.",
                         {"description": old.description}, {"description": new.description})


# --- reports ---------------------------------------------------------------------------------------

_REPORT_DEFINITION = ("measures", "by", "variant", "role")
_REPORT_FIELD_WORDS = {"measures": "measures", "by": "grouping (`by`)", "variant": "variant choice", "role": "role",
                       "overrides": "links followed (`via`/`flow`)", "where": "row filter (`where`)"}


def _report_signature(ctx: DiffContext, p: Report, old: bool, deep: bool) -> Hashable:
    if old:
        p = ctx.renames.report(p)
    where = tuple(sorted((t, ctx.sql_key(text, t, old, deep, f"reports.{p.name}")) for t, text in p.where.items()))
    return (p.measures, p.by, where, _frozen(p.variant), p.role, _frozen(p.overrides),
            ctx.sql_key(p.having, DERIVED, old, deep, f"reports.{p.name}"))


def _report_added(ctx: DiffContext, p: Report) -> Change:
    return ctx.change("report.added", f"reports.{p.name}", SAFE,
                      f"Report {p.name} was added, showing {_list(p.measures)}.", None, p.name)


def _report_removed(ctx: DiffContext, p: Report) -> Change:
    return ctx.change("report.removed", f"reports.{p.name}", NUMBERS,
                      f"Report {p.name} was removed: its consumers no longer get its numbers.", p.name, None)


def compare_reports(ctx: DiffContext, old_raw: Report, new: Report) -> Iterator[Change]:
    old = ctx.renames.report(old_raw)
    subject, name = f"reports.{new.name}", new.name
    before, after = _changed_fields(old, new, _REPORT_DEFINITION)
    if old.overrides != new.overrides:
        before["overrides"], after["overrides"] = _plain(old.overrides), _plain(new.overrides)
    lb, la, cb, ca = _where_verdicts(ctx, old.where, new.where, subject)
    if lb:
        before["where"], after["where"] = lb, la
    if before:
        order_only = set(before) <= {"measures", "by"} and all(only_order_differs(getattr(old, f), getattr(new, f)) for f in before)
        what = _and(_REPORT_FIELD_WORDS[f] for f in before)
        message = (f"Report {name} lists its {what} in a different order; the numbers stay the same but its layout changes."
                   if order_only else f"Report {name} changed its {what}: it can show different numbers.")
        yield ctx.change("report.changed", subject, SAFE if order_only else NUMBERS, message, before, after)
    if cb:
        yield ctx.change("report.cosmetic_changed", subject, SAFE,
                         f"The `where` of report {name} on {_and(sorted(cb))} was respelled (same SQL after normalising); no number changes.",
                         {"where": cb}, {"where": ca})
    yield from _condition_changes(ctx, old, new, subject)
    before, after = _changed_fields(old, new, ("owner", "description"))
    if before:
        yield ctx.change("report.metadata_changed", subject, SAFE,
                         f"The {_and(before)} of report {name} changed; no number changes.", before, after)


def _condition_changes(ctx: DiffContext, old: Report, new: Report, subject: str) -> Iterator[Change]:
    """`report.condition_changed` (which groups can appear or disappear), or a respelling (`report.cosmetic_changed`)."""
    verdict = ctx.compare_sql(old.having, new.having, DERIVED, subject)
    if verdict == SAME:
        return
    name, before, after = new.name, {"having": old.having}, {"having": new.having}
    if verdict == COSMETIC:
        yield ctx.change("report.cosmetic_changed", subject, SAFE,
                         f"The condition (`having`) of report {name} was respelled (same SQL after normalising); "
                         f"no group appears or disappears.", before, after)
    elif old.having is None:
        yield ctx.change("report.condition_changed", subject, NUMBERS,
                         f"Report {name} now keeps only the groups where {new.having}: the groups where it is not true "
                         f"disappear, the (no match) row included.", before, after)
    elif new.having is None:
        yield ctx.change("report.condition_changed", subject, NUMBERS,
                         f"Report {name} no longer keeps only the groups where {old.having}: the groups it dropped "
                         f"appear again.", before, after)
    else:
        yield ctx.change("report.condition_changed", subject, NUMBERS,
                         f"Report {name} changed its condition from {old.having} to {new.having}: groups can appear or "
                         f"disappear.", before, after)


# --- sections ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Section:
    """How one section of a model is compared."""

    noun: str  # kind prefix: "table"
    signature: Callable[[DiffContext, Any, bool, bool], Hashable]  # (ctx, item, old?, deep?) definition without name
    compare: Callable[[DiffContext, Any, Any], Iterator[Change]]  # (ctx, old item as written, new item)
    added: Callable[[DiffContext, Any], Change]
    removed: Callable[[DiffContext, Any], Change]
    has_sql: bool = False
    renamed: Callable[[DiffContext, str, str], Change] | None = None


_NOUNS = {"tables": "table", "links": "link", "measures": "measure", "variants": "variant", "roles": "role",
          "reports": "report"}


def readable(subject: str) -> str:
    """"reports.weekly_fares" -> "report weekly_fares" (other subjects as they are)."""
    section, dot, name = subject.partition(".")
    return f"{_NOUNS[section]} {name}" if dot and section in _NOUNS else subject


def left_behind_text(users: Iterable[str]) -> str:
    """"report r still uses the old name", "reports a and b still use the old name"."""
    users = sorted(users)
    return f"{_and([readable(u) for u in users])} still {'uses' if len(users) == 1 else 'use'} the old name"


def _renamed_change(ctx: DiffContext, section: str, noun: str, old: str, new: str) -> Change:
    left = sorted(ctx.renames.stale[section].get(old, ()))
    if left:
        return ctx.change(f"{noun}.renamed", f"{section}.{new}", BREAKING,
                          f"{noun.capitalize()} {old} was renamed to {new}, but {left_behind_text(left)}: "
                          f"name {new} there too (each is a broken reference until it does).",
                          old, new, left_behind=left)
    return ctx.change(f"{noun}.renamed", f"{section}.{new}", SAFE,
                      f"{noun.capitalize()} {old} was renamed to {new}; its definition is unchanged and every reference follows it.",
                      old, new)


# In dependency order: each section's renames are known before later sections are compared.
SECTIONS: dict[str, Section] = {
    "tables": Section("table", _table_signature, compare_tables, _table_added, _table_removed),
    "links": Section("link", _link_signature, compare_links, _link_added, _link_removed),
    "measures": Section("measure", _measure_signature, compare_measures, _measure_added, _measure_removed,
                        has_sql=True, renamed=_measure_renamed),
    "variants": Section("variant", _variant_signature, compare_variants, _variant_added, _variant_removed, has_sql=True),
    "roles": Section("role", _role_signature, compare_roles, _role_added, _role_removed, has_sql=True),
    "reports": Section("report", _report_signature, compare_reports, _report_added, _report_removed, has_sql=True),
}


def _pair_section(ctx: DiffContext, section: str, removed: list[str], added: list[str],
                  confirm: Callable[[str, str], bool]) -> list[tuple[str, str]]:
    """Removed/added pairs of one section with the same definition (as written, then normalised) that `confirm` accepts."""
    if not removed or not added:
        return []
    spec = SECTIONS[section]
    old_items, new_items = getattr(ctx.old, section), getattr(ctx.new, section)
    pairs = pair_renames({n: spec.signature(ctx, old_items[n], True, False) for n in removed},
                         {n: spec.signature(ctx, new_items[n], False, False) for n in added}, confirm)
    if spec.has_sql:  # second chance: SQL spelled differently but the same after normalising
        rest_old, rest_new = _unpaired(removed, added, pairs)
        if rest_old and rest_new:
            pairs += pair_renames({n: spec.signature(ctx, old_items[n], True, True) for n in rest_old},
                                  {n: spec.signature(ctx, new_items[n], False, True) for n in rest_new}, confirm)
    return pairs


def _unpaired(removed: list[str], added: list[str], pairs: list[tuple[str, str]]) -> tuple[list[str], list[str]]:
    paired_old, paired_new = {o for o, _ in pairs}, {n for _, n in pairs}
    return [n for n in removed if n not in paired_old], [n for n in added if n not in paired_new]


def find_renames(ctx: DiffContext, section: str, removed: list[str], added: list[str]) -> list[tuple[str, str]]:
    """Removed/added pairs of one section with the same definition, one-to-one.

    First the renames whose references all follow; then, among what is left,
    the half-followed ones: the same definition under a new name while
    something in the new revision still names the old one. Those are renames
    too (not a removal and an addition); each reference left behind is a
    `reference.broken` (see `rename_references`).
    """
    pairs = _pair_section(ctx, section, removed, added, _references_follow(ctx, section))
    rest_old, rest_new = _unpaired(removed, added, pairs)
    pairs += _pair_section(ctx, section, rest_old, rest_new, lambda old, new: True)
    return sorted(pairs)


def diff_section(ctx: DiffContext, section: str) -> Iterator[Change]:
    spec = SECTIONS[section]
    old_items, new_items = getattr(ctx.old, section), getattr(ctx.new, section)
    added, removed, kept = keyed_diff(old_items, new_items)
    pairs = find_renames(ctx, section, removed, added)
    ctx.renames.sections[section].update(pairs)
    for old, _ in pairs:
        left = ctx.new_refs.referrers(section, old)
        if left:
            ctx.renames.stale[section][old] = frozenset(left)
    paired_old, paired_new = {o for o, _ in pairs}, {n for _, n in pairs}
    for name in removed:
        if name not in paired_old:
            yield spec.removed(ctx, old_items[name])
    for name in added:
        if name not in paired_new:
            yield spec.added(ctx, new_items[name])
    for old, new in pairs:
        yield spec.renamed(ctx, old, new) if spec.renamed else _renamed_change(ctx, section, spec.noun, old, new)
        yield from spec.compare(ctx, old_items[old], new_items[new])
    for name in kept:
        old_item, new_item = old_items[name], new_items[name]
        if old_item is not new_item and old_item != new_item:  # a record shared by splicing equals itself
            yield from spec.compare(ctx, old_item, new_item)


# --- references a rename left behind -------------------------------------------------------------


def _names_quoted(message: str, name: str) -> bool:
    """Whether a broken-reference message quotes `name` (as 'name' or 'name.column'), case aside."""
    return re.search(rf"'{re.escape(name)}(\.[^']*)?'", message, re.IGNORECASE) is not None


def _left_behind_change(rename: Change, subject: str, pos) -> Change:
    noun = rename.kind.partition(".")[0]
    return Change("reference.broken", subject, BREAKING,
                  f"{noun.capitalize()} {rename.before} was renamed to {rename.after}; {left_behind_text([subject])}: "
                  f"write {rename.after} there.",
                  rename.before, None, {"renamed": rename.subject, "old_name": rename.before, "new_name": rename.after}
                  | ({"location": str(pos)} if pos else {}))


def reference_changes(old_findings: Iterable, new_findings: Iterable, structural: Iterable[Change] = ()) -> list[Change]:
    """The `reference.broken` changes: broken-reference findings new in the new revision.

    A reference that a rename left behind (its subject is in a `*.renamed`
    change's `left_behind`) is said as such: "Measure a was renamed to b;
    report r still uses the old name", one per (rename, subject), in place of
    the check's generic wording for that name.
    """
    left: dict[str, list[Change]] = defaultdict(list)
    for change in structural:
        for subject in change.details.get("left_behind", ()):
            left[subject].append(change)
    before = {(f.subject, f.message) for f in old_findings if f.rule == "broken-reference"}
    out: list[Change] = []
    told: set[tuple[str, str]] = set()
    for f in new_findings:
        if f.rule != "broken-reference" or (f.subject, f.message) in before:
            continue
        item = ".".join(f.subject.split(".")[:2])  # variants.V.options.O -> variants.V
        rename = next((c for c in left.get(item, ()) if _names_quoted(f.message, c.before)), None)
        if rename is None:
            out.append(Change("reference.broken", f.subject, BREAKING, f.message,
                              details={"location": str(f.pos)} if f.pos else {}))
        elif (item, rename.subject) not in told:
            told.add((item, rename.subject))
            out.append(_left_behind_change(rename, item, f.pos))
    for subject, renames in sorted(left.items()):
        out += [_left_behind_change(c, subject, None) for c in renames if (subject, c.subject) not in told]
    return out


# --- check warnings new in the new revision -------------------------------------------------------

# Rules whose subject alone says what a warning is about (their messages list what they reach, which can
# change while the warning stays the same one).
_WHOLE_SUBJECT_RULES = frozenset({"role-reaches-no-fact", "standby-unused", "two-way-drops-unmatched"})


def _renames_of(structural: Iterable[Change]) -> dict[str, dict[str, str]]:
    out: dict[str, dict[str, str]] = defaultdict(dict)
    for change in structural:
        noun, _, what = change.kind.partition(".")
        if what == "renamed" and f"{noun}s" in _NOUNS:
            out[f"{noun}s"][change.before] = change.after
    return out


def _subject_in_new_names(subject: str, renames: Mapping[str, Mapping[str, str]]) -> str:
    """A finding's subject of the old revision in new names (`paths.a->b` and `roles.R.tables.T` included)."""
    parts = subject.split(".")
    if len(parts) < 2:
        return subject
    section, name, rest = parts[0], parts[1], parts[2:]
    tables = renames.get("tables", {})
    if section == "paths":
        name = "->".join(tables.get(t, t) for t in name.split("->"))
    else:
        name = renames.get(section, {}).get(name, name)
    if section == "roles" and len(rest) == 2 and rest[0] == "tables":
        rest = ["tables", tables.get(rest[1], rest[1])]
    return ".".join([section, name, *rest])


def warning_changes(old_findings: Iterable, new_findings: Iterable, structural: Iterable[Change] = (),
                    new_model: Model | None = None) -> list[Change]:
    """One `warning.added` change (severity `safe`) per warning of the new revision that the old one lacks.

    A warning is the same one when the old revision has the same rule on the
    same subject (read in new names) with the same message; for rules whose
    subject alone says what they are about (_WHOLE_SUBJECT_RULES), and for an
    item that was renamed, the rule and subject suffice. Warnings alone move
    no number (DEVELOPERS.md, "New warnings in a diff"): the change that
    caused one carries its own severity. A finding without a position (the
    diff's checks read none) is placed at its subject in `new_model`.
    """
    renames = _renames_of(structural)
    seen: set[tuple] = set()
    for f in old_findings:
        if f.severity != "warning":
            continue
        subject = _subject_in_new_names(f.subject, renames)
        seen.add((f.rule, subject, f.message))
        if subject != f.subject or f.rule in _WHOLE_SUBJECT_RULES:
            seen.add((f.rule, subject))
    out = []
    for f in new_findings:
        if f.severity != "warning" or (f.rule, f.subject, f.message) in seen or (f.rule, f.subject) in seen:
            continue
        pos = f.pos if f.pos is not None or new_model is None else new_model.pos(f.subject)
        out.append(Change("warning.added", f.subject, SAFE, f"New check warning ({f.rule}): {f.message}",
                          details={"rule": f.rule} | ({"location": str(pos)} if pos else {})
                          | ({"paths": [list(p) for p in f.paths]} if f.paths else {})))
    return out


def diff_models(old: Model, new: Model) -> list[Change]:
    """Every structural change from `old` to `new`, sorted by Change.sort_key (ids not yet assigned)."""
    ctx = DiffContext(old, new)
    changes: list[Change] = []
    for section in SECTIONS:
        changes.extend(diff_section(ctx, section))
    return sorted(changes, key=Change.sort_key)
