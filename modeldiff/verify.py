"""Verify a change on data: which numbers really move, and whether the data meets the migration's preconditions.

`modeldiff verify OLD NEW --data DIR` reads both revisions (as `modeldiff
diff` does), loads the data once per revision (modeldiff.data) and, for what
the diff says is impacted, evaluates both revisions on the same rows
(modeldiff.engine, semantics.md section 5):

- every impacted report: its groups, before and after;
- every impacted measure, once per reason: grouped by the default attribute
  of the reason's source table (`default_attribute`), or under the role whose
  visible rows changed, or as a total when the reason names no table;
- every impacted role: the rows it may see of each table it restricts in
  either revision;
- the data preconditions of the migration: the `check-data` steps that
  `modeldiff plan` gives for the same change, run on the new revision's data.

Exit codes: 0 no number moved and every precondition holds; 1 numbers moved
(or the rows a role sees changed); 3 a precondition fails or a role now sees
more rows of some table; 2 bad input (one line on stderr, nothing printed).
docs/verify.md says more.
"""

from __future__ import annotations

import math
import re
import sys
from dataclasses import dataclass, field, replace
from datetime import date, datetime
from decimal import Decimal
from typing import Any, Callable, Iterable, Mapping, Sequence, TextIO

from modeldiff.errors import ModeldiffError
from modeldiff.util import is_number, same_value

FORMATS = ("text", "json", "markdown")
DEFAULT_LIMIT = 10  # differences listed per report or measure (0: all)
VIEWER_CAP = 5  # viewers tried for a role filtering on :user when --user is not given
EXAMPLES = 3  # offending rows shown per failed precondition
TEXT_TYPES = ("text", "date")  # types a default grouping attribute may have
# What `offending` counts, per precondition check.
OFFENDING_UNITS = {"unique": "rows", "not-null": "rows", "referential-integrity": "rows",
                   "no-overlapping-versions": "pairs of versions", "one-current-row": "members"}
_ORDERING = re.compile(r"^s\d+ done \(")  # a plan step's "after step N" precondition, not about data


# --- records ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Difference:
    """One group's value of one measure that differs between the revisions.

    `group` pairs each grouping column with its value; on the `(no match)`
    group (rows in no group, semantics.md section 5) the values are
    `data.NO_MATCH` and `no_match` is true. `present`: `both`, or the only
    side (`before`, `after`) that has the group; the other side's value is None.
    """

    group: tuple[tuple[str, Any], ...]
    measure: str
    before: Any
    after: Any
    present: str = "both"
    user: str | None = None
    no_match: bool = False

    @property
    def delta(self) -> Any:
        if not (is_number(self.before) and is_number(self.after)):
            return None
        if isinstance(self.before, float) or isinstance(self.after, float):
            return float(self.after) - float(self.before)
        return self.after - self.before

    @property
    def relative(self) -> float | None:
        delta = self.delta
        if delta is None or self.before == 0:
            return None
        return float(delta) / abs(float(self.before))


@dataclass(frozen=True)
class Comparison:
    """One report, or one measure in one grouping, evaluated under both revisions.

    `differences` holds every differing (group, measure), largest absolute
    change first. A measure's `source` is the table it is grouped by (None for
    a total); `role` the role it is evaluated under (security reasons).
    """

    kind: str  # report | measure
    name: str
    by: tuple[str, ...] = ()
    source: str | None = None
    role: str | None = None
    differences: tuple[Difference, ...] = ()
    groups_before: int | None = 0  # None: not run, both revisions give the same query on the same data
    groups_after: int | None = 0
    notes: tuple[str, ...] = ()

    @property
    def moved(self) -> bool:
        return bool(self.differences)


@dataclass(frozen=True)
class RoleRows:
    """The rows of `table` the role may see, before and after (None: not evaluated on that side).

    `before`/`after` count them; `gained`/`lost` count the rows (by row
    identity, the fingerprint of the visible keys) seen only after / only
    before, so swapping visible rows for as many others is a change too.
    """

    table: str
    before: int | None
    after: int | None
    user: str | None = None
    gained: int | None = None
    lost: int | None = None

    @property
    def changed(self) -> bool:
        return self.before != self.after or bool(self.gained) or bool(self.lost)

    @property
    def exposed(self) -> bool:
        if self.gained is not None:
            return self.gained > 0
        return self.before is not None and self.after is not None and self.after > self.before


@dataclass(frozen=True)
class RoleCheck:
    """The rows one role may see per table, before and after."""

    name: str
    tables: tuple[RoleRows, ...]
    notes: tuple[str, ...] = ()

    @property
    def changed(self) -> bool:
        return any(t.changed for t in self.tables)

    @property
    def exposed(self) -> bool:
        return any(t.exposed for t in self.tables)


@dataclass(frozen=True)
class Precondition:
    """One data precondition of the migration, run on the new revision's data.

    `offending` counts what breaks it: rows holding a duplicated value
    (`unique`), rows without the key (`not-null`), rows whose key has no
    target (`referential-integrity`), pairs of overlapping versions
    (`no-overlapping-versions`), members without exactly one current version
    (`one-current-row`). `examples`: a few of them, as column -> value.
    """

    check: str
    subject: str
    passed: bool
    offending: int
    examples: tuple[Mapping[str, Any], ...] = ()
    why: str = ""
    sql: str = ""


@dataclass(frozen=True)
class Missed:
    """Something that moved on the data although the diff did not list it: a defect of the tool.

    `kind`: report | measure | role; `name`: its name in the new revision;
    `evidence`: what moved, for people.
    """

    kind: str
    name: str
    evidence: str


@dataclass(frozen=True)
class Verification:
    """What `verify` found: numbers that moved, role rows, and the data's preconditions.

    With `everything` (`verify --all`), every report, measure and role was
    evaluated, listed by the diff or not; `missed` holds what moved without
    the diff listing it.
    """

    diff: Any  # compare.ModelDiff
    data: str  # where the rows came from, for people
    reports: tuple[Comparison, ...] = ()
    measures: tuple[Comparison, ...] = ()
    roles: tuple[RoleCheck, ...] = ()
    preconditions: tuple[Precondition, ...] = ()
    everything: bool = False
    missed: tuple[Missed, ...] = ()
    proposals: tuple = ()  # modeldiff.proposal.ProposalOnData: instead of a link made two-way, side by side

    @property
    def exit_code(self) -> int:
        if self.missed or any(not p.passed for p in self.preconditions) or any(r.exposed for r in self.roles):
            return 3
        if any(c.moved for c in self.reports + self.measures) or any(r.changed for r in self.roles):
            return 1
        return 0


# --- values -------------------------------------------------------------------------------------------


def _order_value(value: Any) -> tuple:
    """A sort key for any grouping value (NULL last, types kept apart)."""
    from modeldiff.data import NO_MATCH

    if value is NO_MATCH:
        return (2, "", "")
    if value is None:
        return (1, "", "")
    if is_number(value):
        return (0, "0", float(value))
    return (0, type(value).__name__, str(value))


def _magnitude(d: Difference) -> float | None:
    """How much a difference moved: |delta|, or the size of the one value present; None if not a number."""
    delta = d.delta
    if delta is not None:
        return abs(float(delta))
    present = d.after if d.present == "after" else d.before if d.present == "before" else None
    return abs(float(present)) if is_number(present) else None


def sort_differences(differences: Iterable[Difference]) -> tuple[Difference, ...]:
    """Largest absolute change first (a group on one side only counts its value); then by group and measure."""
    def key(d: Difference):
        size = _magnitude(d)
        return (size is None, -(size or 0.0), tuple(_order_value(v) for _, v in d.group), d.measure, d.user or "")
    return tuple(sorted(differences, key=key))


def json_value(value: Any) -> Any:
    """A JSON-ready value: decimals as numbers, dates as ISO text."""
    if isinstance(value, Decimal):
        if not value.is_finite():
            return str(value)
        return int(value) if value == value.to_integral_value() and abs(value) < 2 ** 53 else float(value)
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    if isinstance(value, (date, datetime)):
        return value.isoformat()
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


# --- comparing rows of two evaluations -----------------------------------------------------------------


@dataclass(frozen=True)
class _Rows:
    """One evaluation: grouping column labels, and {group values: {measure: value}}."""

    labels: tuple[str, ...]
    groups: Mapping[tuple, Mapping[str, Any]]


def _rows_of(columns: Sequence[str], rows: Iterable[Sequence[Any]], groups: int) -> _Rows:
    out: dict[tuple, dict[str, Any]] = {}
    measures = columns[groups:]
    for row in rows:
        out[tuple(row[:groups])] = dict(zip(measures, row[groups:]))
    return _Rows(tuple(columns[:groups]), out)


def compare_rows(before: _Rows, after: _Rows, measures: Sequence[tuple[str, str | None, str | None]],
                 user: str | None = None) -> list[Difference]:
    """Differences between two evaluations.

    `measures`: (name shown, column in `before` or None, column in `after` or
    None). Groups match by their values when both sides group by as many
    columns; otherwise no group matches and each is shown on its side only.
    """
    from modeldiff.data import NO_MATCH

    comparable = len(before.labels) == len(after.labels)
    labels = after.labels if comparable else None

    def keyed(rows: _Rows, side: str) -> dict[tuple, tuple[tuple, Mapping[str, Any]]]:
        own = labels or rows.labels
        return {(values if comparable else (side, values)): (tuple(zip(own, values)), by_measure)
                for values, by_measure in rows.groups.items()}

    old, new = keyed(before, "before"), keyed(after, "after")
    out = []
    for key in sorted(set(old) | set(new), key=lambda k: repr(k)):
        group = (new.get(key) or old.get(key))[0]
        no_match = any(v is NO_MATCH for _, v in group)
        present = "both" if key in old and key in new else ("before" if key in old else "after")
        for shown, old_col, new_col in measures:
            b = old[key][1].get(old_col) if key in old and old_col is not None else None
            a = new[key][1].get(new_col) if key in new and new_col is not None else None
            if present == "both" and old_col is not None and new_col is not None and same_value(b, a):
                continue
            out.append(Difference(group, shown, b, a, present, user, no_match))
    return out


# --- what to evaluate ---------------------------------------------------------------------------------


def default_attribute(table) -> tuple[str, ...]:
    """The column(s) a measure is grouped by to show what a filter on `table` does (without data).

    The first column, in the model's order, that is not part of the table's
    key and holds text or dates; else, for a key of several columns (a
    bridge, a snapshot), its first column alone: one side, not the cross
    product of the key's columns; else the key.
    """
    for name, column in table.columns.items():
        if name not in table.key and column.type in TEXT_TYPES:
            return (name,)
    if len(table.key) > 1:
        return (table.key[0],)
    return tuple(table.key) or tuple(table.columns)[:1]


def _history_columns(table) -> set[str]:
    h = table.history
    return {c for c in (h.valid_from, h.valid_to, h.current, h.previous) if c} if h is not None else set()


def grouping_columns(table, db=None) -> tuple[str, ...]:
    """The column(s) to group by so that what a filter on `table` does can show (docs/verify.md).

    A type-2 table: an attribute whose value differs between the versions
    of one member on the data (`db`), else its first attribute, else its
    surrogate key; never the natural key alone, which a switch between the
    surrogate and the natural key cannot move. Any other table: its
    `default_attribute`.
    """
    h = table.history
    if h is None or h.type != 2:
        return default_attribute(table)
    skip = set(table.key) | set(table.natural_key) | _history_columns(table)
    attributes = [c for c in table.columns if c not in skip]
    if db is not None and table.natural_key:
        for column in attributes:
            if _varies_within_member(db, table, column):
                return (column,)
    return tuple(attributes[:1]) or tuple(table.key) or tuple(table.columns)[:1]


def _varies_within_member(db, table, column: str) -> bool:
    """Whether some member (natural key) of a type-2 table holds two values of `column` across its versions."""
    from modeldiff.engine import q

    members = ", ".join(q(c) for c in table.natural_key)
    value = f"coalesce(CAST({q(column)} AS VARCHAR), chr(0))"
    import duckdb

    try:
        found = db.connection.execute(
            f"SELECT 1 FROM {q(table.name)} GROUP BY {members} HAVING count(DISTINCT {value}) > 1 LIMIT 1").fetchone()
    except duckdb.Error:  # a table the database does not hold as the model says: fall back to the model's choice
        return False
    return found is not None


@dataclass(frozen=True)
class _Item:
    """One measure evaluation to make: grouped by `source`'s default attribute, under `role`, or a total."""

    measure: str
    source: str | None = None
    role: str | None = None

    def sort_key(self) -> tuple:
        return (self.measure, self.role or "", self.source or "")


def measure_items(result, impact) -> list[_Item]:
    """The evaluations that show an impacted measure's reasons, one per distinct reason."""
    changes = {c.id: c for c in result.changes}
    items: set[_Item] = set()
    for reason in impact.reasons:
        change = changes.get(reason.change)
        if change is not None and change.kind.startswith("security.") and change.subject.startswith("roles."):
            items.add(_Item(impact.name, role=change.subject.split(".")[1]))
        elif reason.source is not None:
            items.add(_Item(impact.name, source=reason.source))
        else:
            items.add(_Item(impact.name))
    return sorted(items, key=_Item.sort_key) or [_Item(impact.name)]


def all_measure_items(result) -> list[_Item]:
    """`verify --all`: every measure of both revisions, as a total, grouped by every table reaching its table(s)
    (its setting, old or new graph), and under every role of both revisions."""
    names = _old_names(result)
    roles = sorted(r for r in result.new.roles if names.roles.get(r, r) in result.old.roles)
    items: list[_Item] = []
    for name in result.new.measures:
        old_name = names.measures.get(name, name)
        if old_name not in result.old.measures:
            continue
        sources = set(_reaching(result.new, name))
        to_new = {old: new for new, old in names.tables.items()}
        sources |= {to_new.get(t, t) for t in _reaching(result.old, old_name)}
        items.append(_Item(name))
        items += [_Item(name, source=t) for t in sorted(sources) if t in result.new.tables]
        items += [_Item(name, role=r) for r in roles]
    return items


def _reaching(model, measure: str) -> set[str]:
    """Tables whose filter reaches the home table of a base measure `measure` reaches, in its setting."""
    from modeldiff import graph

    defaults = graph.setting_layers(model, None, None, variant_defaults=True)
    out: set[str] = set()

    def visit(name: str, layers: tuple, path: tuple) -> None:
        m = model.measures.get(name)
        if m is None or name in path:
            return
        own = layers + (m.overrides,)
        if m.is_base:
            setting = graph.resolve_setting(model, *defaults, *own)
            out.update(graph.flow_graph(model, setting).reaching(m.table))
            return
        from modeldiff import sql

        for ref in sorted(sql.measure_refs(m.expr, model.measures)):
            visit(ref, own, path + (name,))

    visit(measure, (), ())
    return out


def _old_names(result):
    """New name -> old name of what the change renamed (tables, links, measures, roles, reports, variants)."""
    from modeldiff.impact import Renames

    return Renames.of(result.changes).inverse()


# --- the data -------------------------------------------------------------------------------------------


@dataclass
class _Data:
    """The databases holding each revision's data (one, when both read the same)."""

    old: Any  # data.Database
    new: Any
    label: str

    def close(self) -> None:
        self.old.close()
        if self.new is not self.old:
            self.new.close()


def loading_model(result):
    """The new model as the data is loaded for it: keys and `unique` it newly declares are left to the preconditions.

    Loading stops at data breaking a declared key (exit 2). What the change
    itself newly declares is a precondition of the migration instead, so it
    is checked there and reported with examples.
    """
    names = _old_names(result)
    tables = {}
    for name, table in result.new.tables.items():
        old = result.old.tables.get(names.tables.get(name, name))
        if old is None:
            tables[name] = table
            continue
        columns = {c: (replace(col, unique=False) if col.unique and not (c in old.columns and old.columns[c].unique)
                       else col) for c, col in table.columns.items()}
        key = table.key if tuple(table.key) == tuple(old.key) else ()
        tables[name] = replace(table, columns=columns, key=key)
    return replace(result.new, tables=tables)


def open_data(md, data_dir: str | None, db_file: str | None, allow_outside: bool = False,
              db_url: str | None = None, timeout: float | None = None) -> _Data:
    """Both revisions' databases; one shared database when both read the same place with the same tables."""
    from modeldiff.backends import open_database

    result = md.result
    where = dict(data_dir=data_dir, db_file=db_file, allow_outside=allow_outside, db_url=db_url, timeout=timeout)
    if db_url is not None:
        from modeldiff.backends import parse_url

        label = f"database {parse_url(db_url).shown}"
    elif db_file is not None:
        label = f"database {db_file}"
    elif data_dir is not None:
        label = f"folder {data_dir}"
    else:
        label = "the source: files named in the models"
    for_new = loading_model(result)
    shared = (data_dir is not None or db_file is not None or db_url is not None) and \
        result.old.tables == result.new.tables
    new = open_database(for_new, md.new.path, **where)
    if shared:
        return _Data(new, new, label)
    try:
        old = open_database(result.old, md.old.path, **where)
    except BaseException:
        new.close()
        raise
    return _Data(old, new, label)


# --- viewers of a role filtering on :user ---------------------------------------------------------------


def _user_predicates(role) -> list[tuple[str, str]]:
    from modeldiff import sql

    out = []
    for table, predicate in sorted(role.filters.items()):
        try:
            if sql.uses_user_parameter(predicate):
                out.append((table, predicate))
        except sql.SqlError:
            continue
    return out


def viewers(roles: Sequence[Any], db, user: str | None) -> tuple[tuple[str | None, ...], str | None]:
    """The values of :user to evaluate `roles` (the same role in each revision) for, and a note for people.

    No role uses :user: (None,). --user given: that one. Otherwise the
    distinct values of the column the filter compares with :user, in order,
    at most VIEWER_CAP of them.
    """
    predicates = [p for role in roles if role is not None for p in _user_predicates(role)]
    if not predicates:
        return (None,), None
    if user is not None:
        return (user,), f"as seen by {user} (--user)"
    from modeldiff import sql

    table, predicate = predicates[-1]  # the new revision's, when it has one
    columns = sorted({name for _, name in sql.column_refs(predicate)})
    role_name = next(r.name for r in reversed(roles) if r is not None)
    model_table = db.model.tables.get(table)
    if len(columns) != 1 or model_table is None or columns[0] not in model_table.columns:
        raise ModeldiffError(f"role {role_name} filters {table} on :user ({predicate}) in a way verify cannot list "
                             "the viewers of; give one with --user EMAIL")
    column = columns[0]
    from modeldiff.engine import q

    rows = db.connection.execute(f"SELECT DISTINCT {q(column)} FROM {q(table)} WHERE {q(column)} IS NOT NULL "
                                 f"ORDER BY 1").fetchall()
    values = tuple(str(r[0]) for r in rows)
    shown = values[:VIEWER_CAP]
    if not shown:
        return (), (f"depends on the person viewing; {table}.{column} holds no value, so nobody sees anything "
                    "(give --user EMAIL)")
    extra = f" (the first {len(shown)} of {len(values)})" if len(values) > len(shown) else ""
    return shown, (f"depends on the person viewing: evaluated for each value of {table}.{column}{extra}; "
                   "give --user EMAIL for one person")


# --- the evaluations ------------------------------------------------------------------------------------


def _same_query(a, b) -> bool:
    """Whether two engine queries are the same text with the same parameters (so, on the same data, the same rows)."""
    return (a.sql, a.params, a.steps, a.columns) == (b.sql, b.params, b.steps, b.columns)


def compare_report(result, name: str, data: _Data, user: str | None) -> Comparison:
    from modeldiff.data import evaluate_report
    from modeldiff.engine import report_query

    names = _old_names(result)
    old_name = names.reports.get(name, name)
    new_report, old_report = result.new.reports.get(name), result.old.reports.get(old_name)
    if new_report is None or old_report is None:
        side = "new" if new_report is None else "old"
        return Comparison("report", name, notes=(f"report {name} is not in the {side} revision: nothing to compare",))
    old_role = result.old.roles.get(old_report.role) if old_report.role else None
    new_role = result.new.roles.get(new_report.role) if new_report.role else None
    who, note = viewers([old_role, new_role], data.new, user)
    measures = [(m, names.measures.get(m, m) if names.measures.get(m, m) in old_report.measures else None, m)
                for m in new_report.measures]
    measures += [(m, m, None) for m in old_report.measures
                 if m not in {names.measures.get(n, n) for n in new_report.measures}]
    if data.old is data.new and all(_same_query(report_query(result.old, old_name, user=viewer),
                                                report_query(result.new, name, user=viewer)) for viewer in who):
        return Comparison("report", name, tuple(new_report.by), groups_before=None, groups_after=None,
                          notes=(note,) if note else ())
    differences: list[Difference] = []
    groups_before = groups_after = 0
    for viewer in who:
        before = evaluate_report(result.old, old_name, data.old, viewer)
        after = evaluate_report(result.new, name, data.new, viewer)
        groups_before += len(before.rows)
        groups_after += len(after.rows)
        differences += compare_rows(_rows_of(before.columns, before.rows, before.groups),
                                    _rows_of(after.columns, after.rows, after.groups), measures,
                                    viewer if viewer is not None and user is None else None)
    return Comparison("report", name, tuple(new_report.by), differences=sort_differences(differences),
                      groups_before=groups_before, groups_after=groups_after, notes=(note,) if note else ())


def _measure_rows(query, measure: str, by: Sequence[str], db) -> _Rows:
    from modeldiff.data import NO_MATCH
    from modeldiff.engine import NO_MATCH_COLUMN

    rows = db.run(query, f"measure {measure}")
    columns = list(query.columns)
    groups = len(by)
    if columns and columns[-1] == NO_MATCH_COLUMN:
        columns = columns[:-1]
        rows = [((NO_MATCH,) * groups + tuple(r[groups:-1])) if r[-1] else tuple(r[:-1]) for r in rows]
    return _rows_of(columns, rows, groups)


def compare_measure(result, item: _Item, data: _Data, user: str | None) -> Comparison:
    names = _old_names(result)
    name = item.measure
    old_name = names.measures.get(name, name)
    missing = [side for side, model, n in (("new", result.new, name), ("old", result.old, old_name))
               if n not in model.measures]
    base = Comparison("measure", name, source=item.source, role=item.role)
    if missing:
        return replace(base, notes=(f"measure {name} is not in the {missing[0]} revision: nothing to compare",))
    by_new: tuple[str, ...] = ()
    by_old: tuple[str, ...] = ()
    if item.source is not None:
        table = result.new.tables.get(item.source)
        old_table = result.old.tables.get(names.tables.get(item.source, item.source))
        if table is None or old_table is None:
            return replace(base, notes=(f"table {item.source} is not in both revisions: measure {name} cannot be "
                                        "grouped by it on both sides",))
        attribute = grouping_columns(table, data.new)
        if not all(c in old_table.columns for c in attribute):
            return replace(base, notes=(f"{item.source}.{'/'.join(attribute)} is not in the old revision: measure "
                                        f"{name} cannot be grouped by it on both sides",))
        by_new = tuple(f"{item.source}.{c}" for c in attribute)
        by_old = tuple(f"{old_table.name}.{c}" for c in attribute)
    who, note = ((None,), None)
    old_role = names.roles.get(item.role, item.role) if item.role else None
    if item.role is not None:
        roles = [result.old.roles.get(old_role), result.new.roles.get(item.role)]
        if None in roles:
            return replace(base, notes=(f"role {item.role} is not in both revisions: measure {name} cannot be "
                                        "compared under it",))
        who, note = viewers(roles, data.new, user)
    from modeldiff.engine import measure_query

    differences: list[Difference] = []
    groups_before = groups_after = 0
    same = 0
    for viewer in who:
        old_query = measure_query(result.old, old_name, by=by_old, role=old_role, user=viewer or user)
        new_query = measure_query(result.new, name, by=by_new, role=item.role, user=viewer or user)
        if data.old is data.new and _same_query(old_query, new_query):
            same += 1
            continue
        before = _measure_rows(old_query, old_name, by_old, data.old)
        after = _measure_rows(new_query, name, by_new, data.new)
        groups_before += len(before.groups)
        groups_after += len(after.groups)
        differences += compare_rows(before, after, [(name, old_name, name)],
                                    viewer if viewer is not None and user is None else None)
    if who and same == len(who):
        groups_before = groups_after = None
    return replace(base, by=by_new, differences=sort_differences(differences), groups_before=groups_before,
                   groups_after=groups_after, notes=(note,) if note else ())


def role_tables(result, name: str, everything: bool = False) -> list[str]:
    """Tables (new names) a role restricts in either revision, or that the diff names for it.

    With `everything` (`verify --all`): every table of the new revision that the old one has too.
    """
    from modeldiff import graph

    names = _old_names(result)
    if everything:
        return sorted(t for t in result.new.tables if names.tables.get(t, t) in result.old.tables)
    to_new = {old: new for new, old in names.tables.items()}
    tables: set[str] = set()
    new_role = result.new.roles.get(name)
    old_role = result.old.roles.get(names.roles.get(name, name))
    if new_role is not None:
        tables |= set(graph.role_restricted(result.new, new_role))
    if old_role is not None:
        tables |= {to_new.get(t, t) for t in graph.role_restricted(result.old, old_role)}
    impact = next((i for i in result.roles if i.name == name), None)
    if impact is not None:
        tables |= set(impact.exposed) | set(impact.tightened) | set(impact.rerouted)
    return sorted(tables)


def _visible_ids(model, role: str, db, viewer: str | None) -> dict[str, set[int]]:
    """Table -> row numbers the role may see (every table, one query)."""
    from modeldiff.engine import role_rows_query

    out: dict[str, set[int]] = {t: set() for t in model.tables}
    for table, row in db.run(role_rows_query(model, role, viewer), f"role {role}"):
        out[table].add(row)
    return out


def check_role(result, name: str, data: _Data, user: str | None, everything: bool = False) -> RoleCheck:
    """The rows a role may see of each table, before and after: how many, and which (by row identity)."""
    from modeldiff.engine import role_rows_query, visible_rows_query

    names = _old_names(result)
    old_name = names.roles.get(name, name)
    new_role, old_role = result.new.roles.get(name), result.old.roles.get(old_name)
    who, note = viewers([old_role, new_role], data.new, user)
    notes = [note] if note else []
    rows: list[RoleRows] = []
    both = old_role is not None and new_role is not None
    ids = {}
    for viewer in who if both else ():
        before_ids = _visible_ids(result.old, old_name, data.old, viewer)
        same = data.old is data.new and _same_query(role_rows_query(result.old, old_name, viewer),
                                                    role_rows_query(result.new, name, viewer))
        after_ids = before_ids if same else _visible_ids(result.new, name, data.new, viewer)
        ids[viewer] = (before_ids, after_ids)
    for table in role_tables(result, name, everything):
        old_table = names.tables.get(table, table)
        for viewer in who:
            shown = viewer if user is None else None
            has_old = old_role is not None and old_table in result.old.tables
            has_new = new_role is not None and table in result.new.tables
            if has_old and has_new:
                before_ids, after_ids = ids[viewer][0][old_table], ids[viewer][1][table]
                rows.append(RoleRows(table, len(before_ids), len(after_ids), shown, len(after_ids - before_ids),
                                     len(before_ids - after_ids)))
                continue
            before = after = None
            if has_old:
                before = data.old.run(visible_rows_query(result.old, old_table, old_name, user=viewer),
                                      f"role {old_name} on {old_table}")[0][0]
            if has_new:
                after = data.new.run(visible_rows_query(result.new, table, name, user=viewer),
                                     f"role {name} on {table}")[0][0]
            rows.append(RoleRows(table, before, after, shown))
    if new_role is None or old_role is None:
        notes.append(f"role {name} is not in the {'new' if new_role is None else 'old'} revision")
    return RoleCheck(name, tuple(rows), tuple(notes))


# --- preconditions (the check-data steps of modeldiff plan) --------------------------------------------


@dataclass(frozen=True)
class _Test:
    """One data precondition: the SQL that counts and shows the rows breaking it."""

    check: str
    subject: str
    why: str
    sql: str  # the builder's SQL, for people
    count: str  # SQL returning the number of offending rows
    examples: str | None  # SQL returning a few offending rows


def _rows_test(check: str, subject: str, why: str, text: str, total: str | None = None) -> _Test:
    """A test whose SQL returns the offending rows (or groups)."""
    count = total or f"SELECT count(*) FROM ({text}) AS _q"
    return _Test(check, subject, why, text, count, f"SELECT * FROM ({text}) AS _q ORDER BY ALL LIMIT {EXAMPLES}")


def _count_test(check: str, subject: str, why: str, text: str, shown: Sequence[str]) -> _Test:
    """A test whose SQL counts the offending rows; examples show `shown` columns of them."""
    prefix = "select count(*) from "
    examples = None
    if text.startswith(prefix):
        examples = f"SELECT DISTINCT {', '.join(shown)} FROM {text[len(prefix):]} ORDER BY ALL LIMIT {EXAMPLES}"
    return _Test(check, subject, why, text, text, examples)


def precondition_tests(md) -> list[_Test]:
    """The data checks `modeldiff plan` lists for this change, as runnable tests."""
    from modeldiff import plan

    new = md.result.new
    tests: list[_Test] = []
    for step in plan.build_plan(md).steps:
        if step.kind != "check-data":
            continue
        why = "; ".join(p for p in step.preconditions if not _ORDERING.match(p)) or step.title
        parts = step.subject.split(".")
        if parts[0] == "tables" and len(parts) >= 4 and parts[2] == "unique" and parts[1] in new.tables:
            table, columns = parts[1], parts[3:]
            text = plan.sql_duplicates(table, columns)
            alias = ", ".join([f'"{c}"' for c in columns] + ['"rows"'])
            total = f'SELECT coalesce(sum("rows"), 0) FROM ({text}) AS _d({alias})'
            test = _rows_test("unique", f"tables.{table}.columns.{'.'.join(columns)}", why, text, total)
            tests.append(replace(test, examples=f"SELECT * FROM ({text}) AS _d({alias}) ORDER BY ALL LIMIT {EXAMPLES}"))
        elif parts[0] == "links" and parts[-1] == "carries" and parts[1] in new.links:
            link = new.links[parts[1]]
            table = new.tables.get(link.from_table)
            key = [c for c in (table.key if table else ()) if c not in link.from_columns]
            shown = key + list(link.from_columns)
            tests.append(_count_test("not-null", f"links.{link.name}", why,
                                     plan.sql_nulls(link.from_table, link.from_columns), shown))
            tests.append(_count_test("referential-integrity", f"links.{link.name}", why,
                                     plan.sql_orphans(link.from_table, link.from_columns, link.to_table,
                                                      link.to_columns), [f"f.{c}" for c in shown]))
        elif parts[0] == "tables" and parts[-1] == "history" and parts[1] in new.tables:
            table = new.tables[parts[1]]
            h = table.history
            if h is None or not table.natural_key or not table.key or h.valid_from is None or h.valid_to is None:
                continue
            tests.append(_rows_test("no-overlapping-versions", f"tables.{table.name}", why,
                                    plan.sql_overlapping_versions(table.name, table.natural_key, table.key,
                                                                  h.valid_from, h.valid_to)))
            tests.append(_rows_test("one-current-row", f"tables.{table.name}", why,
                                    plan.sql_current_rows(table.name, table.natural_key, h.current, h.valid_to)))
    return tests


def run_test(test: _Test, db) -> Precondition:
    import duckdb

    try:
        offending = int(db.connection.execute(test.count).fetchone()[0] or 0)
        examples: list[dict] = []
        if offending and test.examples:
            cursor = db.connection.execute(test.examples)
            names = [d[0] for d in cursor.description]
            examples = [dict(zip(names, row)) for row in cursor.fetchall()]
    except duckdb.Error as error:
        first = (str(error).strip().splitlines() or [type(error).__name__])[0]
        raise ModeldiffError(f"cannot check {test.check} of {test.subject} on the data: {first}") from None
    return Precondition(test.check, test.subject, offending == 0, offending, tuple(examples), test.why, test.sql)


# --- the whole verification -------------------------------------------------------------------------------


class _Progress:
    """A progress bar on stderr when it is a terminal; nothing otherwise."""

    def __init__(self, total: int, stream: TextIO | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.bar = None
        if total > 1 and hasattr(self.stream, "isatty") and self.stream.isatty():
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

            self.bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                                console=Console(file=self.stream), transient=True)
            self.task = self.bar.add_task("verifying", total=total)
            self.bar.start()

    def __call__(self, label: str, work: Callable[[], Any]) -> Any:
        if self.bar is not None:
            self.bar.update(self.task, description=label)
        try:
            return work()
        finally:
            if self.bar is not None:
                self.bar.advance(self.task)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()


def verify(md, data_dir: str | None = None, db_file: str | None = None, user: str | None = None,
           progress_stream: TextIO | None = None, allow_outside: bool = False,
           everything: bool = False, db_url: str | None = None, timeout: float | None = None) -> Verification:
    """Evaluate what `md` (a compare.ModelDiff) says is impacted, on the data; raises ModeldiffError on bad input.

    `everything` (`verify --all`): every report, measure and role, listed by the diff or not. `db_url`: a
    server to evaluate in (modeldiff.backends), `timeout` its limit in seconds.
    """
    result = md.result
    data = open_data(md, data_dir, db_file, allow_outside, db_url, timeout)
    try:
        return verify_on(md, data, user, progress_stream, everything)
    finally:
        data.close()


def verify_on(md, data: _Data, user: str | None = None, progress_stream: TextIO | None = None,
              everything: bool = False) -> Verification:
    """`verify` on databases already open (`data.old`, `data.new`: one object when both read the same rows)."""
    result = md.result
    names = _old_names(result)
    if everything:
        report_names = [r for r in result.new.reports if names.reports.get(r, r) in result.old.reports]
        items = all_measure_items(result)
        role_names = [r for r in result.new.roles if names.roles.get(r, r) in result.old.roles]
    else:
        report_names = [i.name for i in result.reports]
        items = [item for impact in result.measures for item in measure_items(result, impact)]
        role_names = [i.name for i in result.roles]
    tests = precondition_tests(md)
    total = len(report_names) + len(items) + len(role_names) + len(tests)
    step = _Progress(total, progress_stream)
    try:
        reports = tuple(step(f"report {n}", lambda n=n: compare_report(result, n, data, user)) for n in report_names)
        measures = tuple(step(f"measure {it.measure}", lambda it=it: compare_measure(result, it, data, user))
                         for it in items)
        roles = tuple(step(f"role {n}", lambda n=n: check_role(result, n, data, user, everything))
                      for n in role_names)
        preconditions = tuple(step(f"{t.check} {t.subject}", lambda t=t: run_test(t, data.new)) for t in tests)
    finally:
        step.close()
    missed = missed_by_the_diff(result, reports, measures, roles)
    return Verification(md, data.label, reports, measures, roles, preconditions, everything, missed,
                        () if everything else proposals_on(md, data, user, {c.name for c in measures if c.moved}))


def proposals_on(md, data: _Data, user: str | None = None, moved_measures=()) -> tuple:
    """Each proposal in place of a link made two-way (modeldiff.proposal), evaluated beside the two-way revision."""
    from modeldiff import proposal

    return tuple(proposal.on_data(md, data, p, user, moved_measures) for p in proposal.proposals(md))


def missed_by_the_diff(result, reports, measures, roles) -> tuple[Missed, ...]:
    """What moved on the data although the diff does not list it as impacted (a defect of the tool)."""
    listed = {"report": {i.name for i in result.reports}, "measure": {i.name for i in result.measures},
              "role": {i.name for i in result.roles}}
    out: dict[tuple[str, str], Missed] = {}
    for c in reports + measures:
        if c.moved and c.name not in listed[c.kind] and (c.kind, c.name) not in out:
            d = c.differences[0]
            where = ("(no match)" if d.no_match else ", ".join(f"{k} = {v}" for k, v in d.group)) or "total"
            scope = f" by {', '.join(c.by)}" if c.kind == "measure" and c.by else ""
            scope += f" under role {c.role}" if c.kind == "measure" and c.role else ""
            out[(c.kind, c.name)] = Missed(c.kind, c.name, f"{len(c.differences)} value(s) moved{scope}; e.g. "
                                                           f"{d.measure} at {where}: {d.before} -> {d.after}")
    for r in roles:
        if r.changed and r.name not in listed["role"]:
            t = next(t for t in r.tables if t.changed)
            viewer = f" (user {t.user})" if t.user else ""
            out[("role", r.name)] = Missed("role", r.name, f"its visible rows of {t.table}{viewer} changed: "
                                                           f"{t.gained or 0} gained, {t.lost or 0} lost")
    return tuple(out[k] for k in sorted(out))
