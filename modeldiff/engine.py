"""SQL that evaluates a model's measures on data (semantics.md section 5).

Pure SQL generation: this module builds text and never runs it
(modeldiff.data runs it on DuckDB). Every model table is read from a relation
of the same name holding the model's columns plus `_row`, a unique row number
(modeldiff.data provides them). Names the engine makes up start with `_`, so
they never clash with a model's names, which start with a letter.

Public API (kept stable: `modeldiff verify` builds on it):

- `Query`: the SQL of one evaluation, its parameters and its output columns;
- `report_query(model, report_name, user=None)`;
- `measure_query(model, measure_name, by=(), where={}, role=None, layers=(), user=None)`;
- `visible_rows_query(model, table, role=None, where={}, user=None)`;
- `report_notes(model, report_name)`: sentences to show beside a report.

How the visible rows are computed
---------------------------------
Given direct filters, a table is constrained when it has one or a constrained
table has a flow-graph edge into it; the others keep their rows and restrict
nothing. The constrained tables are taken one strongly connected component at
a time, in topological order (the arcs, reach and components come from
modeldiff.graph: `flow_edges`/`security_edges`, `FilterGraph.reach_all`,
`FilterGraph.components`). A component without a cycle needs one pass: a
table's visible rows are its rows that pass its own filters and semi-join
every constrained table with an edge into it, all final already. A component
whose cycles are only links' two directions, the links forming a tree (a
two-way link between two tables, or a star of them), needs two passes of
semi-joins and no iteration: up from the leaves, then down from the root,
each table cut again by its parent (the full semi-join reduction of an acyclic
join: every row of a child matches the parent row it came from, which the cut
keeps). Any other component with a cycle is materialised as temporary tables (a superset of the answer,
built the same way from what is known), then each table is cut again by
semi-joins against the others (`DELETE ... WHERE NOT EXISTS`) until a whole
pass removes nothing. Every pass keeps a superset of the largest solution and
stops at a solution, so it stops at the largest one; it stops because the sets
only shrink. (No bound on the passes holds in general: a chain of rows around
a cycle of links can lose one row per pass.)

Groups are carried as columns: the filter `S.c = g` of a group becomes a tag
column `_gI` holding g on every row of S (each row in its own group), and the
tags travel along the semi-joins, which match tags as well as link columns
(`IS NOT DISTINCT FROM`: NULL is a group like any other). So one query
evaluates every group at once, with rows of a table visible in several groups
present once per group. Link columns match with `=`: a NULL link value
matches nothing.

Role cuts are the same computation over the security graph with the role's
filters; its visible rows become the starting rows of every later step.

Measures of one table with the same `where`, in one setting, are
aggregated together in one pass over that table: each row visible in the
total comes once per group it is visible in (its tags), or once marked `_nm`
when it is in no group, and the pass groups by the tags, `_nm` and whether
the row passes the `where`; the groups, the `(no match)` row and each
measure's values are read from that small result. When the table gets its
tags through one join outside any cycle, the pass is its visible rows LEFT
JOINed to that join's relation (the shape of a hand-written star join);
otherwise its visible rows LEFT JOIN its grouped rows on `_row`. When that
one join leaves other routes to check as semi-joins that carry tags, a route
whose tagged relation is itself one key join (partsupp tagged through
supplier) is followed as a LEFT JOIN of untagged rows down to the first small
tagged relation, then one EXISTS there: a tagged relation can hold a big
table's rows once per group.

When every base measure of the answer was aggregated in that one pass (one
setting, one table, one `where`) and every grouping column reaches the table,
the pass's rows are the answer: its groups, and its `_nm` row as `(no
match)`; the final statement reads it once (the `_nm` and `_w` flags are
grouped as 0/1 integers, which DuckDB groups by direct indexing).

A measure's `(no match)` value, when every grouping column reaches its
table, is read from the same pass (the rows marked `_nm`: each tag set of a
row is then one of the measure's own groups, all in the answer); otherwise
the table's total rows are scanned again for rows whose tag sets project onto
no combination of the answer.

The data must honour each table's `key` and `unique` columns (modeldiff.data
checks both in `Database.open`): a join on a key or unique column reads the
source's (tags, key) pairs without DISTINCT, since a visible row carries each
tag set once. Relations the final statement does not read are left out.

Settings: a base measure used by a report is evaluated in the setting made of
the variant options in force (each variant's choice in the report, else its
default), the report's overrides, the overrides of each derived measure on the
way to it (outermost first) and its own. The `where` of the options in force
joins the report's `where` as direct filters.

Choices where section 5 is silent (written down in docs/evaluation.md):
- a grouping column's values are those of the rows of its table visible in
  the total (the report's filters and role, no group filter); this only
  matters for a measure whose table the grouping column does not reach,
  which repeats its total on every value;
- a measure "sees a row" of its table when the group's visible rows of
  that table are not empty, before the measure's own `where`;
- a base measure with no visible row in a group takes its aggregate over no
  rows (count 0, sum NULL).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterable, Mapping, Sequence

from modeldiff.errors import ModeldiffError
from modeldiff.model import Link, Measure, Model, Overrides, Report, layers_key

NO_MATCH_COLUMN = "_no_match"  # last column of a grouped query: true on the (no match) row
ROWS_COLUMN = "rows"
USER = "user"


@dataclass(frozen=True)
class Loop:
    """Statements run again and again, in order, until a whole pass changes nothing.

    `progress` is a query returning one number (the rows left in the tables
    the statements shrink); the loop stops when a pass leaves it unchanged.
    """

    statements: tuple[str, ...]
    progress: str


@dataclass(frozen=True)
class Query:
    """One evaluation: run `steps` in order, then `sql`; then run `cleanup`.

    `params` are (name, value) pairs for `$name` placeholders (the `:user` of
    role filters becomes `$user`); pass each statement only the names it uses.
    `columns` names the columns `sql` returns, in order. `steps` is empty
    unless a flow graph has a cycle among constrained tables: then the steps
    create temporary tables (`CREATE OR REPLACE TEMP TABLE`) and shrink them
    in a `Loop`, and `cleanup` drops them.
    """

    sql: str
    params: tuple[tuple[str, object], ...] = ()
    columns: tuple[str, ...] = ()
    steps: tuple[str | Loop, ...] = ()
    cleanup: tuple[str, ...] = ()


# --- public entry points ----------------------------------------------------------------


def report_query(model: Model, report_name: str, *, user: str | None = None) -> Query:
    """The numbers of one report: one row per group, grouping columns first.

    Columns: each `by` column as "table.column", then one column per measure
    of the report (named like the measure), then, when the report has `by`
    columns, `_no_match` (true only on the `(no match)` row, whose grouping
    columns are NULL). Rows are sorted by the grouping columns (NULLs last),
    the `(no match)` row last. `user` binds `:user` in the report's role.
    """
    report = model.reports.get(report_name)
    if report is None:
        raise _unknown("report", report_name, model, model.reports)
    from modeldiff import graph

    layers = graph.setting_layers(model, None, report, variant_defaults=True)
    having = report.having if report.by else None  # without `by` the one row is the total: a condition keeps it
    return _Compiler(model, user).grouped(report.measures, report.by, _report_filters(model, report),
                                          report.role, layers, f"report {report.name}", having)


def measure_query(model: Model, measure_name: str, by: Sequence[str] = (), where: Mapping[str, str] | None = None,
                  role: str | None = None, layers: Sequence[Overrides] = (), *, user: str | None = None) -> Query:
    """One measure grouped by any columns, as a report naming only it would show it.

    `by`: "table.column" names; `where`: {table: SQL predicate}; `role`: a role
    name whose filters cut each table's rows first. The setting is the model's
    links, then each variant's default option (its `via`/`flow`; its `where`
    joins `where`), then `layers` in order, then the measure's own overrides
    (and those of the measures a derived measure names). Columns as in
    `report_query`.
    """
    if measure_name not in model.measures:
        raise _unknown("measure", measure_name, model, model.measures)
    from modeldiff import graph

    report = Report(name="_query", measures=(measure_name,), by=tuple(by), where=dict(where or {}), role=role)
    base = graph.setting_layers(model, None, report, variant_defaults=True) + tuple(layers)
    return _Compiler(model, user).grouped(report.measures, report.by, _report_filters(model, report),
                                          role, base, f"measure {measure_name}")


def visible_rows_query(model: Model, table: str, role: str | None = None, where: Mapping[str, str] | None = None,
                       user: str | None = None) -> Query:
    """How many rows of `table` are visible: one row, one column `rows`.

    The model's default setting (no variant options), the role's filters
    cutting each table's rows first (over the security graph), then `where`
    as direct filters over the flow graph.
    """
    if table not in model.tables:
        raise _unknown("table", table, model, model.tables)
    filters = _filters_of(model, [("where", where or {})])
    compiler = _Compiler(model, user)
    return compiler.visible_rows(table, filters, role)


def role_rows_query(model: Model, role: str, user: str | None = None) -> Query:
    """Which rows of every table a role may see, in one query: columns `_table`, `_row` (row numbers).

    The role's cut over the security graph (semantics.md section 3), as
    `visible_rows_query(model, table, role)` counts them table by table.
    """
    compiler = _Compiler(model, user)
    base = compiler.role_base(role)
    # table names are plain names ([A-Za-z][A-Za-z0-9_]*, model-format.md): safe inside quotes
    parts = [f"SELECT '{t}' AS _table, _row FROM {q(base.get(t, t))}" for t in sorted(model.tables)]
    final = "\nUNION ALL\n".join(parts) + "\nORDER BY 1, 2"
    return compiler.plan.query(final, ("_table", "_row"), compiler.params)


def report_notes(model: Model, report_name: str) -> tuple[str, ...]:
    """Sentences to print beside a report's numbers (section 5: groups need not add up)."""
    from modeldiff import graph

    report = model.reports.get(report_name)
    if report is None:
        raise _unknown("report", report_name, model, model.reports)
    sources = [_by_column(model, text, f"report {report.name}") for text in report.by]
    if not sources:
        return ()
    report_layers = graph.setting_layers(model, None, report, variant_defaults=True)
    for term in _base_terms(model, report.measures, report_layers):
        arcs = _flow_arcs(model, graph.resolve_setting(model, *term.layers))
        home = model.measures[term.measure].table
        if any(_fans_out_between(arcs, table, home) for table, _ in sources):
            return ("A row can count in several groups here (a many-to-many link, or a two-way link against its "
                    "many-to-one direction, lies between a grouping column and a measure's table), so the groups "
                    "need not add up to the total.",)
    return ()


def _fans_out_between(arcs: Sequence[_Arc], source: str, home: str) -> bool:
    """Whether an arc where one value meets several rows can lie on a simple path from `source` to `home`.

    Tested arc by arc (u -> v): `source` reaches u without v, and v reaches
    `home` without `source` or u. A cheap test that may say yes for a path
    that would need to cross itself; it never says no when such a path exists
    with the two halves apart.
    """
    for arc in arcs:
        if not arc.fans_out or arc.dst == source or arc.src == arc.dst:
            continue
        before = [a for a in arcs if arc.dst not in (a.src, a.dst)]
        if arc.src not in _reach(before, [source]):
            continue
        after = [a for a in arcs if not {source, arc.src} & {a.src, a.dst}]
        if home in _reach(after, [arc.dst]):
            return True
    return False


# --- arcs: flow-graph edges with the columns they match ---------------------------------


@dataclass(frozen=True)
class _Arc:
    """A filter crossing `link` from `src` to `dst`: dst's `dst_columns` must appear among src's `src_columns`."""

    link: str
    src: str
    dst: str
    src_columns: tuple[str, ...]
    dst_columns: tuple[str, ...]
    fans_out: bool  # a src value can match several src rows (many-to-many, or against a many-to-one)


def _link_arcs(link: Link, edges: Sequence) -> list[_Arc]:
    """The arcs of `link`'s graph edges: modeldiff.graph decides which directions carry filters and gives the
    to -> from edge first, then from -> to when the link carries both ways (also for a link to its own table)."""
    both = [_Arc(link.name, link.to_table, link.from_table, link.to_columns, link.from_columns,
                 link.cardinality == "many-to-many"),
            _Arc(link.name, link.from_table, link.to_table, link.from_columns, link.to_columns,
                 link.cardinality != "one-to-one")]
    return both[:len(edges)]


def _flow_arcs(model: Model, setting) -> list[_Arc]:
    """semantics.md section 2, edge by edge (a link to its own table keeps both directions apart)."""
    from modeldiff import graph

    arcs = []
    for name, flow in setting.flows.items():
        link = model.links.get(name)
        if link is not None and link.tables <= set(model.tables):
            arcs += _link_arcs(link, graph.flow_edges(link, flow))
    return arcs


def _security_arcs(model: Model) -> list[_Arc]:
    """semantics.md section 3: the default setting's links, reversed only when security flows two-way."""
    from modeldiff import graph

    arcs = []
    for name in sorted(model.links):
        link = model.links[name]
        if not link.standby and link.tables <= set(model.tables):
            arcs += _link_arcs(link, graph.security_edges(link))
    return arcs


def _graph(arcs: Sequence[_Arc], tables: Iterable[str] = ()):
    """The `graph.FilterGraph` of `arcs` (over their tables and `tables`)."""
    from modeldiff import graph

    return graph.FilterGraph({*tables, *(a.src for a in arcs), *(a.dst for a in arcs)},
                             [graph.Edge(a.link, a.src, a.dst) for a in arcs])


def _reach(arcs: Sequence[_Arc], starts: Iterable[str]) -> set[str]:
    starts = list(starts)
    return set(_graph(arcs, starts).reach_all(starts))


def _components(nodes: Sequence[str], arcs: Sequence[_Arc]) -> list[list[str]]:
    """Strongly connected components of `nodes` (arcs among them) in topological order."""
    inside = set(nodes)
    return [list(c) for c in _graph([a for a in arcs if a.src in inside and a.dst in inside], nodes).components()]


# --- SQL text helpers -------------------------------------------------------------------


def q(name: str) -> str:
    """A quoted SQL identifier."""
    return '"' + name.replace('"', '""') + '"'


def _tag(i: int) -> str:
    return q(f"_g{i}")


def _and(parts: Sequence[str]) -> str:
    return " AND ".join(parts)


# --- the plan: named relations and loops, in order --------------------------------------


@dataclass
class _Plan:
    """The named SQL relations of one evaluation, in the order they are built."""

    items: list = field(default_factory=list)  # ("rel", name, sql) | ("loop", Loop, member names)
    names: set = field(default_factory=set)

    def relation(self, name: str, sql: str) -> str:
        base, n = name, 1
        while name in self.names:
            n += 1
            name = f"{base}_{n}"
        self.names.add(name)
        self.items.append(("rel", name, sql))
        return name

    def loop(self, members: Sequence[str], statements: Sequence[str], progress: str) -> None:
        self.items.append(("loop", Loop(tuple(statements), progress), tuple(members)))

    def query(self, final: str, columns: Sequence[str], params: tuple) -> Query:
        """One statement with CTEs when there is no loop; else temporary tables for what the loops need.

        A loop's tables, and every relation their first version is built from,
        become temporary tables; everything else stays a CTE of the final
        statement.
        """
        rels = [(item[1], item[2]) for item in self.items if item[0] == "rel"]
        tables = self._needed_by_loops(rels)
        used = _referenced(rels, [final])
        ctes = ",\n".join(f"{q(name)} AS (\n{sql}\n)" for name, sql in rels if name not in tables and name in used)
        final = (f"WITH {ctes}\n" if ctes else "") + final
        steps: list = []
        for item in self.items:
            if item[0] == "loop":
                steps.append(item[1])
            elif item[1] in tables:
                steps.append(f"CREATE OR REPLACE TEMP TABLE {q(item[1])} AS\n{item[2]}")
        cleanup = tuple(f"DROP TABLE IF EXISTS {q(name)}" for name, _ in reversed(rels) if name in tables)
        return Query(final, params, tuple(columns), tuple(steps), cleanup)

    def _needed_by_loops(self, rels: list[tuple[str, str]]) -> set[str]:
        sql_of = dict(rels)
        needed = {m for item in self.items if item[0] == "loop" for m in item[2]}
        todo = list(needed)
        while todo:
            text = sql_of[todo.pop()]
            for name in sql_of:
                if name not in needed and _reads(text, name):
                    needed.add(name)
                    todo.append(name)
        return needed


def _reads(text: str, name: str) -> bool:
    """Whether SQL `text` reads relation `name` (after FROM or JOIN; the same quoted name as a column alias is
    not a read, so a relation nothing reads is left out and DuckDB does not materialise what it reads)."""
    quoted = q(name)
    return quoted in text and (f"FROM {quoted}" in text or f"JOIN {quoted}" in text)


def _referenced(rels: list[tuple[str, str]], texts: Sequence[str]) -> set[str]:
    """Names of the relations `texts` read, directly or through other relations."""
    sql_of = dict(rels)
    found: set[str] = set()
    todo = list(texts)
    while todo:
        text = todo.pop()
        for name in sql_of:
            if name not in found and _reads(text, name):
                found.add(name)
                todo.append(sql_of[name])
    return found


@dataclass(frozen=True)
class _Rel:
    """A relation of visible rows: a table's columns, `_row`, and one `_gI` column per tag."""

    name: str
    tags: tuple[int, ...] = ()


@dataclass(frozen=True)
class _Source:
    """The I-th grouping column: a table and one of its columns."""

    index: int
    table: str
    column: str


class _Visibility:
    """Visible rows of every table for one set of direct filters over one graph."""

    def __init__(self, plan: _Plan, prefix: str, arcs: Sequence[_Arc], filters: Mapping[str, tuple[str, ...]],
                 base: Mapping[str, str], sources: Sequence[_Source] = (),
                 domain: Callable[[int], str] | None = None, reuse: Mapping[str, _Rel] | None = None,
                 unique_on: Callable[[str, tuple[str, ...]], bool] | None = None) -> None:
        self.plan, self.prefix, self.filters, self.base = plan, prefix, filters, base
        self.sources, self.domain, self.reuse = tuple(sources), domain, reuse or {}
        self.unique_on = unique_on or (lambda table, columns: False)
        self.cyclic: set[str] = set()
        filtered = {t for t, preds in filters.items() if preds} | {s.table for s in self.sources}
        self.constrained = _reach(arcs, filtered)
        self.arcs = [a for a in arcs if a.src in self.constrained]
        self.tags: dict[str, tuple[int, ...]] = {t: () for t in self.constrained}
        for s in self.sources:
            for t in _reach(arcs, [s.table]):
                self.tags[t] += (s.index,)
        self.rels: dict[str, _Rel] = {}
        self.built: dict[str, list[_Arc]] = {}  # table -> the arcs `_select` built its relation from (no loop)
        for component in _components(sorted(self.constrained), self.arcs):
            self._component(component)

    def rel(self, table: str) -> _Rel:
        """Visible rows of `table` (its starting rows when it is not constrained)."""
        return self.rels.get(table) or _Rel(self.base.get(table, table))

    def _into(self, table: str) -> list[_Arc]:
        return [a for a in self.arcs if a.dst == table]

    def _component(self, members: list[str]) -> None:
        if all(not self.tags[m] and m in self.reuse for m in members):
            for m in members:
                self.rels[m] = self.reuse[m]
            return
        inside = set(members)
        cyclic = len(members) > 1 or any(a.src == members[0] for a in self._into(members[0]))
        if not cyclic:
            table = members[0]
            self.rels[table] = _Rel(self.plan.relation(f"{self.prefix}_{table}", self._select(table, self._into(table))),
                                    self.tags[table])
            self.built[table] = self._into(table)
            return
        tree = self._two_way_tree(members)
        if tree is not None:
            # A cycle made only of links' two directions, the links forming a tree, settles in two passes
            # (the full semi-join reduction of an acyclic join): up from the leaves, each table from its
            # outside arcs and its children; then down from the root, each table cut again by its parent.
            # Each row of a child matches its parent's row it came from, which the cut keeps, so the
            # result is the largest fixpoint with no loop.
            root, parent = tree
            order = [root]
            for table in order:
                order += sorted(t for t, p in parent.items() if p == table)
            for table in reversed(order):
                below = [a for a in self._into(table) if a.src not in inside or parent.get(a.src) == table]
                self.rels[table] = _Rel(self.plan.relation(f"{self.prefix}{'_' if table == root else 'p_'}{table}",
                                                           self._select(table, below)), self.tags[table])
                self.built[table] = below
            for table in order[1:]:
                self.rels[table] = _Rel(self.plan.relation(f"{self.prefix}_{table}",
                                                           self._select(table, self._into(table))), self.tags[table])
                self.built[table] = self._into(table)
            return
        self.cyclic.update(members)
        for table in self._order(members):
            ready = [a for a in self._into(table) if a.src in self.rels]
            self.rels[table] = _Rel(self.plan.relation(f"{self.prefix}_{table}", self._select(table, ready)),
                                    self.tags[table])
        deletes = []
        for table in members:
            name = q(self.rels[table].name)
            for arc in self._into(table):
                if arc.src in inside:
                    deletes.append(f"DELETE FROM {name} WHERE NOT {self._exists(arc, name)}")
        progress = "SELECT " + " + ".join(f"(SELECT count(*) FROM {q(self.rels[m].name)})" for m in members)
        self.plan.loop([self.rels[m].name for m in members], deletes, progress)

    def _two_way_tree(self, members: list[str]) -> tuple[str, dict[str, str]] | None:
        """(root, parent of each other member) when the component's arcs are links' two directions forming a tree.

        None otherwise (a longer cycle, two links between the same tables, a link to its own table).
        """
        inside = [a for m in members for a in self._into(m) if a.src in members]
        if any(a.src == a.dst for a in inside) or len({self.tags[m] for m in members}) > 1:
            return None
        pairs: dict[frozenset, list[_Arc]] = {}
        for a in inside:
            pairs.setdefault(frozenset((a.src, a.dst)), []).append(a)
        if len(pairs) != len(members) - 1:
            return None
        for found in pairs.values():
            if len(found) != 2:
                return None
            x, y = found
            if not (x.link == y.link and (x.src_columns, x.dst_columns) == (y.dst_columns, y.src_columns)):
                return None
        sourced = [m for m in members if any(s.table == m for s in self.sources)]
        root = sorted(sourced)[0] if sourced else self._order(members)[-1]
        parent: dict[str, str] = {}
        todo = [root]
        while todo:
            table = todo.pop()
            for pair in pairs:
                if table in pair:
                    (other,) = pair - {table}
                    if other != root and other not in parent:
                        parent[other] = table
                        todo.append(other)
        return (root, parent) if len(parent) == len(members) - 1 else None

    def _functional(self, table: str, seen: frozenset = frozenset()) -> bool:
        """Whether each visible row of `table` carries one tag set: its tags are its own grouping columns or
        come through joins on a key from tables of which the same holds, outside any loop."""
        if not self.tags.get(table) or table not in self.rels:
            return True
        if table in self.cyclic or table in seen:
            return False
        _, joined, _ = self._split(table, self._into(table))
        return all(self.unique_on(a.src, a.src_columns) and self._functional(a.src, seen | {table})
                   for _, a in joined)

    def _order(self, members: list[str]) -> list[str]:
        """Members in an order where each finds most of its tags among those already built."""
        order: list[str] = []
        left = list(members)
        while left:
            def missing(table: str) -> int:
                known = {s.index for s in self.sources if s.table == table}
                for a in self._into(table):
                    if a.src in self.rels or a.src in order:
                        known.update(self.tags[a.src])
                return len(set(self.tags[table]) - known)
            best = min(left, key=lambda t: (missing(t), t))
            order.append(best)
            left.remove(best)
        return order

    def _exists(self, arc: _Arc, outer: str, tag_of: Mapping[int, str] | None = None) -> str:
        """`EXISTS (...)`: the row of `outer` matches a visible row of arc.src on the link (and its tags).

        `tag_of`: where each tag of the outer row is (default: the outer row's tag columns).
        """
        src = self.rel(arc.src)
        conds = [f"_u.{q(s)} = {outer}.{q(d)}" for s, d in zip(arc.src_columns, arc.dst_columns)]
        conds += [f"_u.{_tag(i)} IS NOT DISTINCT FROM {(tag_of or {}).get(i, f'{outer}.{_tag(i)}')}"
                  for i in src.tags]
        return f"EXISTS (SELECT 1 FROM {q(src.name)} AS _u WHERE {_and(conds)})"

    def _tag_test(self, arc: _Arc, outer: str, tag_of: Mapping[int, str], joins: list[str]) -> str:
        """Whether the row at `outer` matches a visible row of arc.src carrying the tags `tag_of`.

        `EXISTS` on arc.src's tagged rows, unless those rows are a join: when
        arc.src's relation was built by `_select` from one join on a tagged
        source and untagged semi-joins, and the arc's columns are unique in
        arc.src, the outer row meets at most one of its rows, which has the
        tags exactly when its row of the join's source has them. So the test
        follows such joins down (partsupp -> supplier) as one LEFT JOIN of
        the untagged rows, appended to `joins`, and ends with one `EXISTS` on
        the first tagged relation that is not such a join (nation). A tagged
        relation can hold a big table's rows once per group (partsupp once
        per market segment); the chain holds each row once.
        """
        chain: list[tuple[_Arc, list[_Arc]]] = []  # (arc leaving the table, its untagged semi-joins)
        step = arc
        while True:
            table = step.src
            arcs = self.built.get(table)
            if arcs is None or not self.unique_on(table, step.src_columns) or any(
                    s.table == table for s in self.sources):
                break
            _, joined, semi = self._split(table, arcs)
            if (len(joined) != 1 or any(self.rel(a.src).tags for a in semi)
                    or set(self.tags[table]) - set(self.rel(joined[0][1].src).tags)):
                break
            chain.append((step, semi))
            step = joined[0][1]
        if not chain:
            return self._exists(arc, outer, tag_of)
        alias = f"_f{len(joins)}"
        parts = []
        for n, (leaving, semi) in enumerate(chain):
            rows = f"({self._untagged(leaving.src, semi)}) AS _c{n}"
            if n == 0:
                parts.append(rows)
            else:
                on = [f"_c{n}.{q(s)} = _c{n - 1}.{q(d)}" for s, d in zip(leaving.src_columns, leaving.dst_columns)]
                parts.append(f"JOIN {rows} ON {_and(on)}")
        last = len(chain) - 1
        picks = [f"_c0.{q(c)} AS {q(f'_o{m}')}" for m, c in enumerate(arc.src_columns)]
        picks += [f"_c{last}.{q(c)} AS {q(f'_i{m}')}" for m, c in enumerate(step.dst_columns)]
        on = [f"{alias}.{q(f'_o{m}')} = {outer}.{q(d)}" for m, d in enumerate(arc.dst_columns)]
        joins.append(f"LEFT JOIN (SELECT {', '.join(picks)} FROM {' '.join(parts)}) AS {alias} ON {_and(on)}")
        src = self.rel(step.src)
        conds = [f"_u.{q(c)} = {alias}.{q(f'_i{m}')}" for m, c in enumerate(step.src_columns)]
        conds += [f"_u.{_tag(i)} IS NOT DISTINCT FROM {tag_of[i]}" for i in src.tags]
        return f"EXISTS (SELECT 1 FROM {q(src.name)} AS _u WHERE {_and(conds)})"

    def _filtered(self, table: str) -> str:
        """SELECT of the rows of `table` that pass its own filters."""
        preds = self.filters.get(table, ())
        inner = f"SELECT * FROM {q(self.base.get(table, table))} AS {q(table)}"
        if preds:
            inner += " WHERE " + _and([f"({p})" for p in preds])
        return inner

    def _untagged(self, table: str, semi: Sequence[_Arc]) -> str:
        """Rows of `table` passing its filters and semi-joined with the (untagged) visible rows of `semi`'s sources."""
        inner = self._filtered(table)
        if not semi:
            return inner
        return f"SELECT * FROM ({inner}) AS _c WHERE " + _and([self._exists(a, "_c") for a in semi])

    def _split(self, table: str, arcs: Sequence[_Arc]) -> tuple[dict[int, str], list[tuple[str, _Arc]], list[_Arc]]:
        """How `_select` meets `arcs`: tags `table` provides itself, arcs joined (with their alias), arcs semi-joined.

        An arc is joined when its source carries a tag not yet provided: the
        join brings that tag along; the other arcs are semi-joins.
        """
        provided: dict[int, str] = {s.index: f"_x.{q(s.column)}" for s in self.sources if s.table == table}
        joins: list[tuple[str, _Arc]] = []
        semi: list[_Arc] = []
        for n, arc in enumerate(arcs):
            src = self.rel(arc.src)
            if not set(src.tags) - set(provided):
                semi.append(arc)
                continue
            alias = f"_j{n}"
            joins.append((alias, arc))
            for i in src.tags:
                provided.setdefault(i, f"{alias}.{_tag(i)}")
        return provided, joins, semi

    def _join(self, alias: str, arc: _Arc, provided: Mapping[int, str], kind: str = "JOIN") -> str:
        """Join the distinct (tags, link columns) of arc.src's visible rows, matching link columns and known tags.

        When the link columns hold the source table's key (or a unique
        column), each visible row has one tag set, so the pairs are distinct
        already and DISTINCT is left out.
        """
        src = self.rel(arc.src)
        keys = [f"{q(c)} AS {q(f'_k{m}')}" for m, c in enumerate(arc.src_columns)]
        conds = [f"_x.{q(d)} = {alias}.{q(f'_k{m}')}" for m, d in enumerate(arc.dst_columns)]
        conds += [f"{alias}.{_tag(i)} IS NOT DISTINCT FROM {provided[i]}" for i in src.tags if i in provided]
        columns = ", ".join([_tag(i) for i in src.tags] + keys)
        distinct = "" if self.unique_on(arc.src, arc.src_columns) else "DISTINCT "
        return f"{kind} (SELECT {distinct}{columns} FROM {q(src.name)}) AS {alias} ON {_and(conds)}"

    def _select(self, table: str, arcs: Sequence[_Arc]) -> str:
        """Rows of `table` passing its filters, tagged, semi-joined with the visible rows of `arcs`' sources."""
        inner = self._filtered(table)
        own = {s.index: f"_x.{q(s.column)}" for s in self.sources if s.table == table}
        provided, joined, semi = self._split(table, arcs)
        joins = []
        known = dict(own)
        for alias, arc in joined:
            joins.append(self._join(alias, arc, known))
            for i in self.rel(arc.src).tags:
                known.setdefault(i, f"{alias}.{_tag(i)}")
        for i in self.tags[table]:
            if i not in provided:  # only in a cycle: every value of the grouping column, a superset
                joins.append(f"CROSS JOIN {q(self.domain(i))} AS _d{i}")
                provided[i] = f"_d{i}.{_tag(i)}"
        if not self.tags[table] and not semi:
            return inner
        tags = "".join(f", {provided[i]} AS {_tag(i)}" for i in self.tags[table])
        sql = f"SELECT _x.*{tags} FROM ({inner}) AS _x" + "".join(f"\n  {j}" for j in joins)
        if semi:
            sql = f"SELECT * FROM ({sql}) AS _c WHERE " + _and([self._exists(a, "_c") for a in semi])
        return sql

    def home_rows(self, table: str, total: "_Visibility") -> str | None:
        """Every row of `table` visible in `total`, with its tags and `_nm`, or None when no plain form exists.

        The plain form: `table` is built by `_select` outside any cycle with
        at most one join, and semi-joins only untagged relations (the very
        ones of `total`). Then its grouped rows are its total rows joined with
        that one relation, and a LEFT JOIN gives each total row its groups, or
        one row with NULL tags and `_nm` true when it is in no group. No tag
        at all: the total rows, `_nm` false.
        """
        tags = self.tags.get(table, ())
        rows = q(total.rel(table).name)
        if not tags:
            return f"SELECT _x.*, false AS _nm FROM {rows} AS _x"
        if table in self.cyclic:
            return None
        provided, joined, semi = self._split(table, self._into(table))
        tagged_semi = [a for a in semi if self.rel(a.src).tags]
        if len(joined) > 1 or set(tags) - set(provided):
            return None
        if tagged_semi:
            if not joined or not self._functional(joined[0][1].src) or not self.unique_on(
                    joined[0][1].src, joined[0][1].src_columns):
                return None
            # Each total row meets at most one row of the join (its source holds one tag set per row and
            # the link columns are its key): the row is in that group when the tagged semi-joins hold too.
            alias, arc = joined[0]
            unfolded: list[str] = []
            ok = _and([f"{alias}.{q('_k0')} IS NOT NULL"]
                      + [self._tag_test(a, "_x", provided, unfolded) for a in tagged_semi])
            raw = "".join(f", {provided[i]} AS {q(f'_t{i}')}" for i in tags)
            join = self._join(alias, arc, {i: provided[i] for i in provided if provided[i].startswith('_x.')},
                              "LEFT JOIN")
            picks = "".join(f", CASE WHEN _y._ok THEN _y.{q(f'_t{i}')} END AS {_tag(i)}" for i in tags)
            return (f"SELECT _y.*{picks}, NOT _y._ok AS _nm FROM (SELECT _x.*{raw}, {ok} AS _ok FROM {rows} AS _x"
                    f"\n  {join}" + "".join(f"\n  {j}" for j in unfolded) + ") AS _y")
        own = {s.index for s in self.sources if s.table == table}
        if not joined:
            picks = "".join(f", {provided[i]} AS {_tag(i)}" for i in tags)
            return f"SELECT _x.*{picks}, false AS _nm FROM {rows} AS _x"
        alias, arc = joined[0]
        missed = f"{alias}.{q('_k0')} IS NULL"
        picks = "".join(f", CASE WHEN {missed} THEN NULL ELSE {provided[i]} END AS {_tag(i)}" if i in own
                        else f", {provided[i]} AS {_tag(i)}" for i in tags)
        join = self._join(alias, arc, {i: provided[i] for i in own}, "LEFT JOIN")
        return f"SELECT _x.*{picks}, {missed} AS _nm FROM {rows} AS _x\n  {join}"


# --- measures ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Term:
    """A base measure in the setting it is evaluated in within one computation."""

    measure: str
    layers: tuple[Overrides, ...]


def _measure_refs(model: Model, measure: Measure) -> list[str]:
    from modeldiff import sql

    return sorted(sql.measure_refs(measure.expr, model.measures))


def _base_terms(model: Model, names: Sequence[str], base_layers: tuple[Overrides, ...]) -> list[_Term]:
    """Every base measure the named measures need, each in its setting, in first-use order."""
    out: dict[tuple, _Term] = {}

    def visit(name: str, layers: tuple[Overrides, ...], path: tuple[str, ...]) -> None:
        if name in path:
            raise ModeldiffError(f"measure {name} refers to itself through {' -> '.join(path + (name,))}; "
                                 "break the cycle (modeldiff check shows it)")
        measure = model.measures.get(name)
        if measure is None:
            raise _unknown("measure", name, model, model.measures)
        own = layers + ((measure.overrides,) if measure.overrides else ())
        if measure.is_base:
            out.setdefault((name, layers_key(own)), _Term(name, own))
            return
        for ref in _measure_refs(model, measure):
            visit(ref, own, path + (name,))

    for name in names:
        visit(name, tuple(base_layers), ())
    return list(out.values())


# --- the compiler -----------------------------------------------------------------------


class _Compiler:
    def __init__(self, model: Model, user: str | None) -> None:
        self.model = model
        self.user = user
        self.plan = _Plan()
        self.uses_user = False

    # -- parameters and filters

    def bind(self, text: str, where: str, table: str) -> str:
        """The engine's text of a model's SQL on `table`: never the text as written.

        sqlglot's tree of it, inside the allow-list and reading only `table`'s
        columns (modeldiff.sql.engine_tree), rendered again from the tree
        without comments, `:user` as DuckDB's `$user`. Other parameters and
        anything outside the allow-list are refused before any query runs.
        """
        from modeldiff import sql

        try:
            parameters = sql.facts(text).parameters
        except sql.SqlError as error:
            raise ModeldiffError(f"{where}: {error}") from None
        unknown = sorted(parameters - {USER})
        if unknown:
            raise ModeldiffError(f"{where} uses the parameter :{unknown[0]}; only :user can be given (--user)")
        if parameters and self.user is None:
            raise ModeldiffError(f"{where} uses :user; give the viewer's e-mail with --user")
        columns = self.model.tables[table].columns if table in self.model.tables else ()
        try:
            rendered = sql.engine_text(text, columns, table)
        except sql.SqlError as error:
            raise ModeldiffError(f"{where}: {error}; fix the model (modeldiff check shows each case)") from None
        if parameters:
            self.uses_user = True
        return rendered

    def bound_filters(self, filters: Mapping[str, Sequence[tuple[str, str]]]) -> dict[str, tuple[str, ...]]:
        return {t: tuple(self.bind(text, where, t) for where, text in preds) for t, preds in filters.items()}

    @property
    def params(self) -> tuple:
        return ((USER, self.user),) if self.uses_user else ()

    # -- role cut

    def role_base(self, role_name: str | None) -> dict[str, str]:
        """Table -> relation holding the rows the role may see (tables it does not cut are left out)."""
        if role_name is None:
            return {}
        role = self.model.roles.get(role_name)
        if role is None:
            raise _unknown("role", role_name, self.model, self.model.roles)
        for table in role.filters:
            if table not in self.model.tables:
                raise ModeldiffError(f"role {role.name} filters table {table}, which model {self.model.name} "
                                     "does not have; fix the role")
        filters = self.bound_filters({t: [(f"role {role.name}'s filter on {t}", p)] for t, p in role.filters.items()})
        cut = _Visibility(self.plan, "_r", _security_arcs(self.model), filters, {}, unique_on=self.unique_on)
        return {t: cut.rel(t).name for t in cut.constrained}

    # -- queries

    def visible_rows(self, table: str, filters: Mapping[str, Sequence[tuple[str, str]]], role: str | None) -> Query:
        from modeldiff import graph

        base = self.role_base(role)
        seen = _Visibility(self.plan, "_t", _flow_arcs(self.model, graph.default_setting(self.model)),
                           self.bound_filters(filters), base, unique_on=self.unique_on)
        final = f"SELECT count(*) AS {q(ROWS_COLUMN)} FROM {q(seen.rel(table).name)}"
        return self.plan.query(final, (ROWS_COLUMN,), self.params)

    def grouped(self, measure_names: Sequence[str], by: Sequence[str], filters, role: str | None,
                report_layers: tuple[Overrides, ...], label: str, having: str | None = None) -> Query:
        from modeldiff import graph

        model = self.model
        sources = [_Source(i, *_by_column(model, text, label)) for i, text in enumerate(by)]
        terms = _base_terms(model, measure_names, report_layers)
        shown = len(terms)  # the terms of the shown measures come first; a condition's own measures follow
        if having is not None:
            from modeldiff import conditions

            named = conditions.measures_named(Report("_", (), having=having), model.measures)
            terms = _base_terms(model, list(measure_names) + list(named), report_layers)
        bound = self.bound_filters(filters)
        base = self.role_base(role)
        settings: dict = {}
        for term in terms:
            settings.setdefault(graph.resolve_setting(model, *term.layers), []).append(term)
        values: dict[int, _Value] = {}
        for s, (setting, members) in enumerate(settings.items()):
            group = _SettingGroups(self.plan, f"_s{s}", _flow_arcs(model, setting), bound, base, sources,
                                   self.unique_on)
            batches: dict[tuple[str, str | None], list[_Bound]] = {}
            for term in members:
                b = self.bound_measure(model.measures[term.measure], terms.index(term))
                batches.setdefault((b.home, b.where), []).append(b)
            for batch in batches.values():
                values.update(group.measures(batch))
        return self._final(measure_names, by, sources, terms, values, report_layers, shown, having, label)

    def bound_measure(self, measure: Measure, k: int) -> _Bound:
        home = measure.table
        if home not in self.model.tables:
            raise ModeldiffError(f"measure {measure.name} is on table {home}, which model {self.model.name} "
                                 "does not have; fix the measure")
        where = self.bind(measure.where, f"measure {measure.name}'s where", home) if measure.where else None
        return _Bound(k, home, self.bind(measure.expr, f"measure {measure.name}", home), where)

    def unique_on(self, table: str, columns: tuple[str, ...]) -> bool:
        """Whether `columns` hold the table's key or a column declared unique (the data is checked for both)."""
        t = self.model.tables.get(table)
        if t is None:
            return False
        return bool(t.key) and set(t.key) <= set(columns) or any(
            c in t.columns and t.columns[c].unique for c in columns)

    def _final(self, measure_names, by, sources, terms, values, report_layers, shown=None, having=None,
               label="") -> Query:
        """The rows; `having` (SQL over measure names) keeps the groups, `(no match)` included, where it is true.

        Only the first `shown` terms (the shown measures') decide which groups
        exist and which rows fall in `(no match)`; the terms after them are the
        condition's own measures, evaluated over those groups.
        """
        shown = len(terms) if shown is None else shown
        columns = list(by) + list(measure_names)
        tag_cols = [_tag(s.index) for s in sources]
        outputs = [f"{t} AS {q(name)}" for t, name in zip(tag_cols, by)]
        outputs += [f"{self._measure_sql(name, report_layers, terms)} AS {q(name)}" for name in measure_names]
        if not sources:
            row = ", ".join(f"(SELECT {q('_value')} FROM {q(values[k].value)}) AS {q(f'_m{k}')}"
                            for k in range(len(terms))) or "1 AS _one"
            final = f"SELECT {', '.join(outputs)}\nFROM (SELECT {row}) AS _v"
            return self.plan.query(final, columns, self.params)
        if not terms:  # derived measures over no base measure see no row of any table: no group
            nothing = ", ".join([f"NULL AS {t}" for t in tag_cols] + [f"false AS {q(NO_MATCH_COLUMN)}"])
            final = f"SELECT {', '.join(outputs)}, {q(NO_MATCH_COLUMN)}\nFROM (SELECT {nothing}) AS _v WHERE false"
            return self.plan.query(final, columns + [NO_MATCH_COLUMN], self.params)
        # (a condition, or a measure only the condition names, needs the general assembly below)
        one_pass = None if having or shown < len(terms) else self._from_one_pass(values, len(terms), len(sources))
        if one_pass is not None:
            order = ", ".join([q(NO_MATCH_COLUMN)] + [f"{n} ASC NULLS LAST" for n in range(1, len(sources) + 1)])
            final = (f"SELECT {', '.join(outputs)}, {q(NO_MATCH_COLUMN)}\nFROM (\n{one_pass}\n) AS _v\n"
                     f"ORDER BY {order}")
            return self.plan.query(final, columns + [NO_MATCH_COLUMN], self.params)
        combos = self.plan.relation("_combos", "\nUNION\n".join(dict.fromkeys(values[k].combos
                                                                             for k in range(shown))))
        picks, joins = [], []
        for k in range(len(terms)):
            v = values[k]
            conds = [f"_m{k}.{_tag(i)} IS NOT DISTINCT FROM _c.{_tag(i)}" for i in v.tags] or ["true"]
            joins.append(f"LEFT JOIN {q(v.value)} AS _m{k} ON {_and(conds)}")
            picks.append(f"CASE WHEN _m{k}._seen THEN _m{k}._value ELSE (SELECT _value FROM {q(v.empty)}) END "
                         f"AS {q(f'_m{k}')}")
        groups = ", ".join(f"_c.{t}" for t in tag_cols)
        grouped_rows = (f"SELECT {groups}, {', '.join(picks)}, false AS {q(NO_MATCH_COLUMN)}\nFROM {q(combos)} AS _c"
                        + "".join(f"\n  {j}" for j in joins))
        nulls = ", ".join(f"NULL AS {t}" for t in tag_cols)
        no_match = [self._no_match(values[k], combos, len(sources), k < shown) for k in range(len(terms))]
        leftovers = ", ".join(f"(SELECT _value FROM {q(no_match[k])}) AS {q(f'_m{k}')}" for k in range(len(terms)))
        any_left = " OR ".join(f"(SELECT _rows FROM {q(no_match[k])}) > 0" for k in range(shown))
        no_match_row = f"SELECT {nulls}, {leftovers}, true AS {q(NO_MATCH_COLUMN)} WHERE {any_left}"
        order = ", ".join([q(NO_MATCH_COLUMN)] + [f"{n} ASC NULLS LAST" for n in range(1, len(sources) + 1)])
        kept = f"\nWHERE ({self._condition_sql(having, report_layers, terms, label)}) IS TRUE" if having else ""
        final = (f"SELECT {', '.join(outputs)}, {q(NO_MATCH_COLUMN)}\nFROM (\n{grouped_rows}\nUNION ALL\n"
                 f"{no_match_row}\n) AS _v{kept}\nORDER BY {order}")
        return self.plan.query(final, columns + [NO_MATCH_COLUMN], self.params)

    def _from_one_pass(self, values: Mapping[int, "_Value"], n_terms: int, n_sources: int) -> str | None:
        """The answer's rows read straight from the one pass that aggregated every measure, or None.

        When all the base measures were aggregated in one pass (one setting,
        one table, one `where`) and every grouping column reaches that table,
        the pass's rows are the answer: its groups (tags, `_nm` false) are the
        combinations in which a measure sees a row, and its `_nm` row is the
        `(no match)` row, present exactly when such rows exist. Without a
        `where` each row carries the values; with one, the group's values are
        those of its rows passing the `where`, else the aggregate over no rows.
        """
        passes = {values[k].agg for k in range(n_terms)}
        if len(passes) != 1 or "" in passes or any(set(values[k].tags) != set(range(n_sources))
                                                    for k in range(n_terms)):
            return None
        agg = q(passes.pop())
        tags = [_tag(i) for i in range(n_sources)]
        flag = f"_nm AS {q(NO_MATCH_COLUMN)}"
        if values[0].bound.where is None:
            picks = [f"{q(f'_v{values[k].bound.k}')} AS {q(f'_m{k}')}" for k in range(n_terms)]
            return f"SELECT {', '.join(tags + picks + [flag])} FROM {agg}"
        keys = [f"_a.{t}" for t in tags]
        conds = [f"_w.{t} IS NOT DISTINCT FROM _a.{t}" for t in tags] + ["_w._nm = _a._nm"]
        picks = [f"CASE WHEN _w._nm IS NULL THEN (SELECT _value FROM {q(values[k].empty)}) "
                 f"ELSE _w.{q(f'_v{values[k].bound.k}')} END AS {q(f'_m{k}')}" for k in range(n_terms)]
        return (f"SELECT {', '.join(keys + picks)}, _a._nm AS {q(NO_MATCH_COLUMN)}\n"
                f"FROM (SELECT DISTINCT {', '.join(tags)}, _nm FROM {agg}) AS _a\n"
                f"  LEFT JOIN (SELECT * FROM {agg} WHERE _w) AS _w ON {_and(conds)}")

    def _no_match(self, v: "_Value", combos: str, n_sources: int, own_groups: bool = True) -> str:
        """`_rows`, `_value`: one base measure's home rows visible in its total but in no group of the answer.

        Per measure, in its own setting (semantics.md section 5): a row is in
        a group when one of its tag sets (the grouping columns that reach its
        home table) is the projection of a combination of the answer, which
        may come from another measure's setting; with no tag, when the answer
        has any combination. So no row is both in a group and in `(no match)`.

        When every grouping column reaches the home table, each tag set of a
        row is one of the measure's own groups (`_pJ`), all in the answer: the
        rows in no group are exactly those marked `_nm`, already aggregated in
        `_aJ`, so nothing is scanned again. Not so for a measure that only a
        report's condition names (`own_groups` false): its groups need not be
        in the answer.
        """
        b = v.bound
        if own_groups and v.agg and set(v.tags) == set(range(n_sources)):
            passing = " AND _w" if b.where else ""
            value = (f"CASE WHEN EXISTS (SELECT 1 FROM {q(v.agg)} WHERE _nm{passing}) "
                     f"THEN (SELECT {q(f'_v{b.k}')} FROM {q(v.agg)} WHERE _nm{passing}) "
                     f"ELSE (SELECT _value FROM {q(v.empty)}) END")
            return self.plan.relation(f"_n{b.k}", f"SELECT (SELECT coalesce(sum(_n), 0) FROM {q(v.agg)} WHERE _nm) "
                                                  f"AS _rows, {value} AS _value")
        conds = [f"_c.{_tag(i)} IS NOT DISTINCT FROM _h.{_tag(i)}" for i in v.tags] or ["true"]
        matched = (f"SELECT _h._row FROM {q(v.rows)} AS _h WHERE NOT _h._nm AND EXISTS "
                   f"(SELECT 1 FROM {q(combos)} AS _c WHERE {_and(conds)})")
        left = self.plan.relation(f"_l{b.k}", f"SELECT * FROM {q(v.total)} WHERE _row NOT IN ({matched})")
        cond = f" WHERE ({b.where})" if b.where else ""
        value = f"(SELECT {b.expr} FROM (SELECT * FROM {q(left)} AS {q(b.home)}{cond}) AS {q(b.home)})"
        return self.plan.relation(f"_n{b.k}", f"SELECT (SELECT count(*) FROM {q(left)}) AS _rows, {value} AS _value")

    def _measure_sql(self, name: str, layers: tuple[Overrides, ...], terms: list[_Term]) -> str:
        """A measure's value from the `_mK` columns: a base one is its column, a derived one its expression."""
        measure = self.model.measures[name]
        own = layers + ((measure.overrides,) if measure.overrides else ())
        if measure.is_base:
            key = (name, layers_key(own))
            k = next(i for i, t in enumerate(terms) if (t.measure, layers_key(t.layers)) == key)
            return q(f"_m{k}")
        return self._over_measures(measure.expr, _measure_refs(self.model, measure), own, terms, f"measure {name}")

    def _condition_sql(self, having: str, layers: tuple[Overrides, ...], terms: list[_Term], label: str) -> str:
        """A report's condition over the `_mK` columns: each measure it names replaced by its value."""
        from modeldiff import sql

        try:
            refs = sorted(sql.measure_refs(having, self.model.measures))
        except sql.SqlError as error:
            raise ModeldiffError(f"{label}'s having: {error}; fix the model (modeldiff check shows each case)") from None
        return self._over_measures(having, refs, layers, terms, f"{label}'s having")

    def _over_measures(self, text: str, names: Iterable[str], own: tuple[Overrides, ...], terms: list[_Term],
                       label: str) -> str:
        """`text` (SQL over measure names) with each name replaced by that measure's value in setting `own`."""
        from sqlglot import exp

        from modeldiff import sql

        refs = {r.lower(): r for r in names}
        try:
            tree = sql.engine_tree(text, self.model.measures)
        except sql.SqlError as error:
            raise ModeldiffError(f"{label}: {error}; fix the model (modeldiff check shows each case)") from None
        for column in list(tree.find_all(exp.Column)):
            if column.args.get("table") or not isinstance(column.this, exp.Identifier):
                continue
            written = column.this.this
            ref = written if written in self.model.measures else refs.get(written.lower())
            if ref is None:
                continue
            replacement = sql.parse(self._measure_sql(ref, own, terms)).copy()
            replacement = exp.Paren(this=replacement)
            if column is tree:
                tree = replacement
            else:
                column.replace(replacement)
        try:
            return sql.render_for_engine(tree)
        except sql.SqlError as error:
            raise ModeldiffError(f"{label}: {error}") from None


@dataclass(frozen=True)
class _Value:
    """Relations of one base measure in one computation."""

    tags: tuple[int, ...]  # grouping columns that reach its table
    value: str  # tags..., _value, _seen: one row per group with visible rows of its table passing its where
    empty: str  # _value: the aggregate over no rows
    combos: str  # SELECT of every group (all tag columns) in which it sees a row of its table
    rows: str = ""  # the rows of its table visible in the total, once per tag set they are visible in, with `_nm`
    total: str = ""  # the rows of its table visible in the total
    bound: "_Bound | None" = None
    agg: str = ""  # `_aJ`: tags, `_nm`, `_w`, `_n` and `_vK`, the pass that aggregated it


@dataclass(frozen=True)
class _Bound:
    """A base measure ready to evaluate: its index among the terms, its table, SQL of its aggregate and its where."""

    k: int
    home: str
    expr: str
    where: str | None


class _SettingGroups:
    """The total and the per-group visible rows of one setting, and the measures evaluated in it."""

    def __init__(self, plan: _Plan, prefix: str, arcs: list[_Arc], filters: Mapping[str, tuple[str, ...]],
                 base: Mapping[str, str], sources: Sequence[_Source],
                 unique_on: Callable[[str, tuple[str, ...]], bool] | None = None) -> None:
        self.plan, self.prefix, self.base, self.sources = plan, prefix, base, tuple(sources)
        self.total = _Visibility(plan, f"{prefix}t", arcs, filters, base, unique_on=unique_on)
        self._domains: dict[int, str] = {}
        if sources:
            reuse = {t: self.total.rel(t) for t in self.total.constrained}
            self.grouped = _Visibility(plan, f"{prefix}v", arcs, filters, base, sources, self.domain, reuse,
                                       unique_on)
        else:
            self.grouped = self.total

    def domain(self, i: int) -> str:
        """`_gI`: the distinct values of the I-th grouping column among its table's rows visible in the total."""
        if i not in self._domains:
            s = self.sources[i]
            sql = f"SELECT DISTINCT {q(s.column)} AS {_tag(i)} FROM {q(self.total.rel(s.table).name)}"
            self._domains[i] = self.plan.relation(f"{self.prefix}d{i}", sql)
        return self._domains[i]

    def _home_rows(self, home: str) -> str:
        """Each row of `home` visible in the total, once per group it is visible in (tags), or once with `_nm`."""
        plain = self.grouped.home_rows(home, self.total)
        if plain is not None:
            return plain
        seen = self.grouped.rel(home)
        tags = "".join(f", _v.{_tag(i)}" for i in seen.tags)
        picks = ", ".join([q("_row")] + [_tag(i) for i in seen.tags])
        return (f"SELECT _x.*{tags}, _v._row IS NULL AS _nm FROM {q(self.total.rel(home).name)} AS _x\n"
                f"  LEFT JOIN (SELECT {picks} FROM {q(seen.name)}) AS _v ON _x._row = _v._row")

    def measures(self, batch: Sequence[_Bound]) -> dict[int, _Value]:
        """Base measures of one table and one where, aggregated in one pass over that table's rows.

        `_aJ` holds one row per group (tags, `_nm`, `_w`: the row passes the
        measures' where) with `_n`, the rows, and `_vK`, measure K's value.
        Without grouping columns it is one row over the visible rows.
        """
        first = batch[0]
        home, where = first.home, first.where
        values = ", ".join(f"{b.expr} AS {q(f'_v{b.k}')}" for b in batch)
        if not self.sources:
            cond = f" WHERE ({where})" if where else ""
            rows = f"(SELECT * FROM {q(self.total.rel(home).name)} AS {q(home)}{cond}) AS {q(home)}"
            agg = self.plan.relation(f"_a{first.k}", f"SELECT {values} FROM {rows}")
            out = {}
            for b in batch:
                value = self.plan.relation(f"_m{b.k}", f"SELECT {q(f'_v{b.k}')} AS _value, true AS _seen FROM {q(agg)}")
                out[b.k] = _Value((), value, self._empty(b), "")
            return out
        tags = tuple(self.grouped.rel(home).tags)
        tagged = self.plan.relation(f"_h{first.k}", self._home_rows(home))
        # `_nm` and `_w` are grouped as 0/1 integers (`_nf`, `_wf`): DuckDB groups small integer keys
        # by direct indexing (its perfect hash aggregate) and booleans not, about 3x slower on 6M rows
        flags = ", CASE WHEN _nm THEN 1 ELSE 0 END AS _nf"
        if where:
            flags += f", CASE WHEN ({where}) IS TRUE THEN 1 ELSE 0 END AS _wf"
        rows = f"SELECT *{flags} FROM {q(tagged)} AS {q(home)}"
        keys = ", ".join([_tag(i) for i in tags] + ["_nf"] + (["_wf"] if where else []))
        picks = ", ".join([_tag(i) for i in tags] + ["_nf = 1 AS _nm"] + (["_wf = 1 AS _w"] if where else []))
        agg = self.plan.relation(f"_a{first.k}", f"SELECT {picks}, count(*) AS _n, {values} FROM ({rows}) AS {q(home)} "
                                                 f"GROUP BY {keys}")
        passing = " AND _w" if where else ""
        tag_list = ", ".join(_tag(i) for i in tags)
        present_sql = (f"SELECT DISTINCT {tag_list} FROM {q(agg)} WHERE NOT _nm" if tags else
                       f"SELECT 1 AS _one WHERE EXISTS (SELECT 1 FROM {q(agg)} WHERE NOT _nm)")
        present = self.plan.relation(f"_p{first.k}", present_sql)
        unreached = [s.index for s in self.sources if s.index not in tags]
        picks = [f"_p.{_tag(i)}" if i in tags else f"_d{i}.{_tag(i)}" for i in range(len(self.sources))]
        combos = f"SELECT {', '.join(picks)} FROM {q(present)} AS _p" + "".join(
            f" CROSS JOIN {q(self.domain(i))} AS _d{i}" for i in unreached)
        out = {}
        for b in batch:
            value = self.plan.relation(
                f"_m{b.k}", f"SELECT {tag_list + ', ' if tags else ''}{q(f'_v{b.k}')} AS _value, true AS _seen "
                            f"FROM {q(agg)} WHERE NOT _nm{passing}")
            out[b.k] = _Value(tags, value, self._empty(b), combos, tagged, self.total.rel(home).name, b, agg)
        return out

    def _empty(self, b: _Bound) -> str:
        return self.plan.relation(f"_e{b.k}", f"SELECT {b.expr} AS _value FROM (SELECT * FROM {q(b.home)} "
                                              f"WHERE false) AS {q(b.home)}")


# --- reading a report's parts -----------------------------------------------------------


def _by_column(model: Model, text: str, label: str) -> tuple[str, str]:
    table, dot, column = text.partition(".")
    if not dot or table not in model.tables or column not in model.tables[table].columns:
        raise ModeldiffError(f"{label} groups by {text}, which is not a column of the model (write table.column)")
    return table, column


def _filters_of(model: Model, groups: Iterable[tuple[str, Mapping[str, str]]]) -> dict[str, list[tuple[str, str]]]:
    """{table: [(where it was written, predicate)]}, checking every table exists."""
    out: dict[str, list[tuple[str, str]]] = {}
    for label, filters in groups:
        for table, predicate in sorted(filters.items()):
            if table not in model.tables:
                raise ModeldiffError(f"{label} filters table {table}, which model {model.name} does not have; "
                                     "fix the name")
            out.setdefault(table, []).append((f"{label} on {table}", predicate))
    return out


def _report_filters(model: Model, report: Report) -> dict[str, list[tuple[str, str]]]:
    """The report's `where` and the `where` of each variant option in force."""
    groups = []
    label = "report" if report.name != "_query" else "the query"
    for variant_name in sorted(model.variants):
        variant = model.variants[variant_name]
        option_name = report.variant.get(variant_name, variant.default)
        option = variant.options.get(option_name)
        if option is not None and option.where:
            groups.append((f"option {option_name} of variant {variant_name}", option.where))
    groups.append((f"{label} {report.name}'s where" if report.name != "_query" else "the query's where", report.where))
    for variant_name in sorted(report.variant):
        if variant_name not in model.variants:
            raise _unknown("variant", variant_name, model, model.variants)
    return _filters_of(model, groups)


def _unknown(what: str, name: str, model: Model, known: Mapping) -> ModeldiffError:
    names = ", ".join(sorted(known)) or "none"
    return ModeldiffError(f"model {model.name} has no {what} {name}; its {what}s: {names}")
