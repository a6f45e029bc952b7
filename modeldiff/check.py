"""Rules for one revision of a model (semantics.md section 7).

Each rule is a small function `rule_x(ctx) -> Iterable[Finding]`; `check_model`
runs them all and returns the findings sorted. Findings carry a stable rule id,
a severity, a subject path and a message that says what to do.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Callable, Iterable, Iterator

from modeldiff import graph, sql  # both light: sqlglot is imported on first use
from modeldiff.changes import subject_item, subject_member
from modeldiff.model import NO_OVERRIDES, Finding, Measure, Model, Overrides, Table
from modeldiff.util import paused_gc
from modeldiff.words import agree, and_list, named

if TYPE_CHECKING:  # pragma: no cover
    from modeldiff.graph import Setting

ERROR = "error"
WARNING = "warning"

RULES = {
    "invalid-model": ERROR,
    "broken-reference": ERROR,
    "duplicate-live-link": ERROR,
    "key-not-unique": ERROR,
    "type-mismatch": ERROR,
    "measure-cycle": ERROR,
    "history-incomplete": ERROR,
    "ambiguous-paths": WARNING,
    "security-stops": WARNING,
    "role-reaches-no-fact": WARNING,
    "standby-unused": WARNING,
    "via-not-standby": WARNING,
    "deprecated-key": WARNING,  # ours: a key in its first spelling (load.DEPRECATED_KEYS), read as the new one
    "two-way-drops-unmatched": WARNING,  # extension (docs/check-rules.md)
    # report conditions (`having`), extension (docs/check-rules.md)
    "condition-unknown-measure": ERROR,
    "condition-not-boolean": ERROR,
    "condition-aggregate": ERROR,
    "condition-without-groups": WARNING,
}


@dataclass
class _Context:
    """One revision being checked, with the memos its rules share."""

    model: Model
    warning_positions: bool = True  # False: warnings carry no position (reading positions costs a second pass)
    _clean: dict = field(default_factory=dict, repr=False)

    def finding(self, rule: str, subject: str, message: str, paths=(), at: str | None = None) -> Finding:
        severity = RULES[rule]
        pos = self.model.pos(at or subject) if self.warning_positions or severity == ERROR else None
        return Finding(rule, severity, subject, message, tuple(tuple(p) for p in paths), pos)

    @cached_property
    def measures_by_home(self) -> dict[str, list[str]]:
        """Home table -> the base measures on it."""
        out: dict[str, list[str]] = {}
        for measure in self.model.measures.values():
            if measure.table is not None:
                out.setdefault(measure.table, []).append(measure.name)
        return out

    @cached_property
    def measure_names_lower(self) -> frozenset[str]:
        return frozenset(name.lower() for name in self.model.measures)

    def clean_base_text(self, field_name: str, text: str, table: Table) -> bool:
        """Whether a base measure's `expr` or `where` on `table` raises no finding (memoised by text and table).

        Most measures of a large model share a handful of texts (`sum(amount)`,
        `count(*)`): each text is judged once per table, and only texts with a
        problem go through the rules that word the findings.
        """
        key = (field_name, text, table.name)
        found = self._clean.get(key)
        if found is None:
            found = self._clean[key] = _is_clean_base_text(field_name, text, table)
        return found

    def column_exists(self, table: str, column: str) -> bool:
        t = self.model.tables.get(table)
        return t is not None and _column(t, column) is not None


def _column(table: Table, name: str):
    found = table.columns.get(name)
    if found is not None:
        return found
    lowered = name.lower()
    for column in table.columns.values():
        if column.name.lower() == lowered:
            return column
    return None


# --- references -------------------------------------------------------------------


def _overrides_refs(ctx: _Context, subject: str, overrides: Overrides) -> Iterator[Finding]:
    for link in overrides.via:
        if link not in ctx.model.links:
            yield ctx.finding("broken-reference", subject,
                              f"{subject} uses link '{link}', which does not exist; name an existing standby link or remove it from `via`.",
                              at=f"{subject}.via")
    for link in overrides.flow:
        if link not in ctx.model.links:
            yield ctx.finding("broken-reference", subject,
                              f"{subject} sets the flow of link '{link}', which does not exist; fix the name or remove it from `flow`.",
                              at=f"{subject}.flow")


def _sql_facts(ctx: _Context, subject: str, text: str, what: str, at: str):
    """(Facts, None) for readable SQL, else (None, an invalid-model finding)."""

    try:
        return sql.facts(text), None
    except sql.SqlError as exc:
        return None, ctx.finding("invalid-model", subject, f"{what} is not valid SQL: {exc}", at=at)


def _shape_problems(ctx: _Context, subject: str, found, what: str, at: str, allow_user: bool) -> Iterator[Finding]:
    """Constructs outside the allow-list, subqueries and parameters: shapes no model expression may take."""
    for construct in found.refused:
        yield ctx.finding("invalid-model", subject, f"{what} uses {construct}, {sql.REFUSED_ADVICE}.", at=at)
    if found.subquery:
        yield ctx.finding("invalid-model", subject,
                          f"{what} holds a subquery; write a condition on columns and let links carry filters.", at=at)
    for parameter in sorted(found.parameters):
        if parameter == "user" and allow_user:
            continue
        shown = "?" if parameter == "?" else f":{parameter}"
        why = "only a role's filters may depend on the person viewing" if parameter == "user" \
            else "the only parameter is :user, the person viewing, in a role's filters"
        yield ctx.finding("invalid-model", subject, f"{what} uses the parameter {shown}; {why}.", at=at)


def _column_problems(ctx: _Context, subject: str, found, table: Table, what: str, at: str,
                     advice: str) -> Iterator[Finding]:
    """Columns that are not `table`'s own: qualified by another table, or missing."""
    for qualifier, column in sorted(found.columns, key=lambda r: (r[0] or "", r[1])):
        if qualifier is not None and qualifier.lower() != table.name.lower():
            yield ctx.finding("broken-reference", subject,
                              f"{what} reads {qualifier}.{column}, but may read only columns of {table.name}; {advice}", at=at)
        elif _column(table, column) is None:
            yield ctx.finding("broken-reference", subject,
                              f"{what} reads column '{column}', which {table.name} does not have; fix the column name.", at=at)


def _predicate_refs(ctx: _Context, subject: str, filters, what: str, allow_user: bool) -> Iterator[Finding]:
    """Predicates keyed by table (role filters, report/option `where`)."""
    for table_name, text in filters.items():
        at = f"{subject}.{what}.{table_name}"
        table = ctx.model.tables.get(table_name)
        if table is None:
            yield ctx.finding("broken-reference", subject,
                              f"{subject} filters table '{table_name}', which does not exist; name an existing table.", at=at)
            continue
        label = f"{subject}: the filter on {table_name}"
        found, bad = _sql_facts(ctx, subject, text, label, at)
        if bad is not None:
            yield bad
            continue
        if found.aggregates:
            yield ctx.finding("invalid-model", subject,
                              f"{label} uses the {named('aggregate', found.aggregates)}; a filter tests one row at a time, so compare columns with values.",
                              at=at)
        if not found.condition_like:
            yield ctx.finding("invalid-model", subject,
                              f"{label} is a value, not a condition; compare it, for example `... = 1`.", at=at)
        yield from _shape_problems(ctx, subject, found, label, at, allow_user)
        yield from _column_problems(ctx, subject, found, table, label, at,
                                    "filters reach other tables through links.")


def rule_table_references(ctx: _Context) -> Iterator[Finding]:
    for table in ctx.model.tables.values():
        subject = f"tables.{table.name}"
        named = [("key", c) for c in table.key] + [("natural_key", c) for c in table.natural_key]
        if table.history is not None:
            h = table.history
            named += [(f, c) for f, c in (("history.valid_from", h.valid_from), ("history.valid_to", h.valid_to),
                                          ("history.current", h.current), ("history.previous", h.previous)) if c is not None]
        for field_name, column in named:
            if _column(table, column) is None:
                yield ctx.finding("broken-reference", subject,
                                  f"Table {table.name}: {field_name} names column '{column}', which is not among its columns; add the column or fix the name.",
                                  at=f"{subject}.{field_name.split('.')[0]}")


def rule_link_references(ctx: _Context) -> Iterator[Finding]:
    tables = ctx.model.tables
    for link in ctx.model.links.values():
        start, end = tables.get(link.from_table), tables.get(link.to_table)
        if start is not None and end is not None and all(c in start.columns for c in link.from_columns) \
                and all(c in end.columns for c in link.to_columns):
            continue  # the common case: every name written exactly as defined
        subject = f"links.{link.name}"
        for end, table, columns in (("from", link.from_table, link.from_columns), ("to", link.to_table, link.to_columns)):
            if table not in ctx.model.tables:
                yield ctx.finding("broken-reference", subject,
                                  f"Link {link.name}: its `{end}` table '{table}' does not exist; fix the name or add the table.", at=f"{subject}.{end}")
                continue
            for column in columns:
                if not ctx.column_exists(table, column):
                    yield ctx.finding("broken-reference", subject,
                                      f"Link {link.name}: its `{end}` column '{table}.{column}' does not exist; fix the name or add the column.",
                                      at=f"{subject}.{end}")


def rule_measure_references(ctx: _Context) -> Iterator[Finding]:
    tables = ctx.model.tables
    clean: dict[tuple[str, str | None, str], bool] = {}  # (expr, where, table) of plain base measures -> no finding
    for measure in ctx.model.measures.values():
        home = measure.table
        if home is not None and (measure.overrides is NO_OVERRIDES or not measure.overrides):
            # the common case, settled without generators, once per (expr, where, table)
            key = (measure.expr, measure.where, home)
            found = clean.get(key)
            if found is None:
                table = tables.get(home)
                found = clean[key] = table is not None and ctx.clean_base_text("expr", measure.expr, table) and (
                    measure.where is None or ctx.clean_base_text("where", measure.where, table))
            if found:
                continue
        elif home is None and measure.where is None and (measure.overrides is NO_OVERRIDES or not measure.overrides) \
                and _is_clean_derived_text(ctx, measure.expr):
            continue
        subject = f"measures.{measure.name}"
        yield from _overrides_refs(ctx, subject, measure.overrides)
        if measure.table is None:
            yield from _derived_measure(ctx, measure, subject)
            continue
        table = ctx.model.tables.get(measure.table)
        if table is None:
            yield ctx.finding("broken-reference", subject,
                              f"Measure {measure.name}: its table '{measure.table}' does not exist; fix `table`.", at=f"{subject}.table")
            continue
        yield from _base_measure(ctx, measure, table, subject)


def _base_measure(ctx: _Context, measure: Measure, table: Table, subject: str) -> Iterator[Finding]:
    advice = "make it a derived measure over a measure of that table."
    for field_name, text in (("expr", measure.expr), ("where", measure.where)):
        if text is None or ctx.clean_base_text(field_name, text, table):
            continue
        at, what = f"{subject}.{field_name}", f"Measure {measure.name}: `{field_name}`"
        found, bad = _sql_facts(ctx, subject, text, what, at)
        if bad is not None:
            yield bad
            continue
        if field_name == "expr" and not found.aggregates:
            yield ctx.finding("invalid-model", subject,
                              f"{what} has no aggregate function; wrap it in sum(), count(), avg(), min() or max().", at=at)
        elif field_name == "expr" and found.outside_aggregate:
            shown = ", ".join(sorted(c for _, c in found.outside_aggregate))
            yield ctx.finding("invalid-model", subject,
                              f"{what} reads {shown} outside any aggregate function; put every column inside one, for example sum(...).",
                              at=at)
        if field_name == "where" and found.aggregates:
            yield ctx.finding("invalid-model", subject,
                              f"{what} is a row condition and may not aggregate; move the aggregate into `expr`.", at=at)
        yield from _shape_problems(ctx, subject, found, what, at, allow_user=False)
        yield from _column_problems(ctx, subject, found, table, what, at, advice)


def _is_clean_base_text(field_name: str, text: str, table: Table) -> bool:
    """The conditions under which `_base_measure` words no finding for one field, checked on their own."""

    try:
        found = sql.facts(text)
    except sql.SqlError:
        return False
    if field_name == "expr" and (not found.aggregates or found.outside_aggregate):
        return False
    if field_name == "where" and found.aggregates:
        return False
    if found.subquery or found.parameters or found.refused:
        return False
    return all((qualifier is None or qualifier.lower() == table.name.lower()) and _column(table, column) is not None
               for qualifier, column in found.columns)


def _is_clean_derived_text(ctx: _Context, text: str) -> bool:
    """The conditions under which `_derived_measure` words no finding for a measure without `where`, on their own."""
    try:
        found = sql.facts(text)
    except sql.SqlError:
        return False
    if found.aggregates or found.subquery or found.parameters or found.refused:
        return False
    measures = ctx.model.measures
    return all(qualifier is None and (name in measures or name.lower() in ctx.measure_names_lower)
               for qualifier, name in found.columns)


def _derived_measure(ctx: _Context, measure: Measure, subject: str) -> Iterator[Finding]:
    at, what = f"{subject}.expr", f"Derived measure {measure.name}"
    if measure.where is not None:
        yield ctx.finding("invalid-model", subject,
                          f"{what} has a `where`; a row condition needs the measure's own `table`.", at=f"{subject}.where")
    found, bad = _sql_facts(ctx, subject, measure.expr, f"{what}: `expr`", at)
    if bad is not None:
        yield bad
        return
    for qualifier, name in sorted(found.columns, key=lambda r: (r[0] or "", r[1])):
        shown = f"{qualifier}.{name}" if qualifier else name
        if qualifier is not None or (name not in ctx.model.measures
                                     and name.lower() not in ctx.measure_names_lower):  # SQL names ignore case
            yield ctx.finding("broken-reference", subject,
                              f"{what} names '{shown}', which is not a measure; fix the name, or give the measure a `table` if it aggregates columns.",
                              at=at)
    if found.aggregates:
        yield ctx.finding("invalid-model", subject,
                          f"{what} uses the {named('aggregate', found.aggregates)}, but combines measures that are already aggregated; "
                          f"give it a `table` to make it a base measure.", at=at)
    yield from _shape_problems(ctx, subject, found, f"{what}: `expr`", at, allow_user=False)


def rule_variant_references(ctx: _Context) -> Iterator[Finding]:
    for variant in ctx.model.variants.values():
        subject = f"variants.{variant.name}"
        if variant.default not in variant.options:
            yield ctx.finding("broken-reference", subject,
                              f"Variant {variant.name}: default '{variant.default}' is not one of its options ({', '.join(sorted(variant.options)) or 'none'}).",
                              at=f"{subject}.default")
        for option in variant.options.values():
            option_subject = f"{subject}.options.{option.name}"
            yield from _overrides_refs(ctx, option_subject, option.overrides)
            yield from _predicate_refs(ctx, option_subject, option.where, "where", allow_user=False)


def rule_role_references(ctx: _Context) -> Iterator[Finding]:
    for role in ctx.model.roles.values():
        yield from _predicate_refs(ctx, f"roles.{role.name}", role.filters, "filters", allow_user=True)


def rule_report_references(ctx: _Context) -> Iterator[Finding]:
    model = ctx.model
    for report in model.reports.values():
        subject = f"reports.{report.name}"
        for name in report.measures:
            if name not in model.measures:
                yield ctx.finding("broken-reference", subject,
                                  f"Report {report.name} shows measure '{name}', which does not exist; fix the name or remove it.", at=f"{subject}.measures")
        for item in report.by:
            table, _, column = item.partition(".")
            if not column or not ctx.column_exists(table, column):
                yield ctx.finding("broken-reference", subject,
                                  f"Report {report.name} groups by '{item}', which is not an existing table.column.", at=f"{subject}.by")
        yield from _predicate_refs(ctx, subject, report.where, "where", allow_user=False)
        for variant, option in report.variant.items():
            if variant not in model.variants:
                yield ctx.finding("broken-reference", subject,
                                  f"Report {report.name} picks variant '{variant}', which does not exist.", at=f"{subject}.variant")
            elif option not in model.variants[variant].options:
                yield ctx.finding("broken-reference", subject,
                                  f"Report {report.name} picks option '{option}' of variant {variant}, which has no such option.", at=f"{subject}.variant")
        if report.role is not None and report.role not in model.roles:
            yield ctx.finding("broken-reference", subject,
                              f"Report {report.name} is seen as role '{report.role}', which does not exist.", at=f"{subject}.role")
        yield from _overrides_refs(ctx, subject, report.overrides)


def rule_report_condition(ctx: _Context) -> Iterator[Finding]:
    """A report's `having` (modeldiff.conditions): measure names only, no aggregate, a true-or-false test."""
    from modeldiff import conditions

    for report in ctx.model.reports.values():
        if report.having is None:
            continue
        subject = f"reports.{report.name}"
        at, what = f"{subject}.having", f"Report {report.name}: `having`"
        found, bad = _sql_facts(ctx, subject, report.having, what, at)
        if bad is not None:
            yield bad
            continue
        yield from _shape_problems(ctx, subject, found, what, at, allow_user=False)
        read = found.outside_aggregate if found.aggregates else found.columns  # inside an aggregate: said below
        for qualifier, name in sorted(read, key=lambda r: (r[0] or "", r[1])):
            if qualifier is not None or (name not in ctx.model.measures and name.lower() not in ctx.measure_names_lower):
                shown = f"{qualifier}.{name}" if qualifier else name
                yield ctx.finding("condition-unknown-measure", subject,
                                  f"{what} names '{shown}', which is not a measure; a condition reads measures only "
                                  f"(filter rows with `where`), so fix the name or add the measure.", at=at)
        if found.aggregates:
            yield ctx.finding("condition-aggregate", subject,
                              f"{what} uses the {named('aggregate', found.aggregates)}; a condition compares measures, "
                              f"which are already aggregated: name a measure (add one for the aggregate) instead.", at=at)
        why = conditions.not_a_test(report.having, ctx.model)
        if why is not None:
            yield ctx.finding("condition-not-boolean", subject,
                              f"{what} is not true or false for a group ({why}); write a test such as "
                              f"`trip_count > 0` or `revenue is not null`.", at=at)
        if not report.by:
            yield ctx.finding("condition-without-groups", subject,
                              f"{what} has no effect: the report has no `by`, so its one row is its total, which a "
                              f"condition does not touch; group the report or remove `having`.", at=at)


# --- links ---------------------------------------------------------------------------


def rule_duplicate_live_link(ctx: _Context) -> Iterator[Finding]:
    by_pair: dict[frozenset[str], list[str]] = {}
    for link in ctx.model.links.values():
        if not link.standby:
            by_pair.setdefault(link.tables, []).append(link.name)
    shared = [(pair, sorted(names)) for pair, names in by_pair.items() if len(names) > 1]
    for pair, names in sorted(shared, key=lambda item: item[1]):
        tables = " and ".join(sorted(pair))
        for extra in names[1:]:
            yield ctx.finding("duplicate-live-link", f"links.{extra}",
                              f"Links {and_list(names)} {agree(len(names) - 1, 'both', 'all')} join {tables} and {agree(len(names) - 1, 'neither', 'none')} is on standby; "
                              f"set `standby: true` on {agree(len(names) - 1, 'one of them', 'all but one')} and name {agree(len(names) - 1, 'it', 'them')} in `via` where needed.")


def _type_2_natural_key(table: Table) -> frozenset[str]:
    """The lower-cased natural key of a type-2 table, else empty."""
    if table.history is not None and table.history.type == 2:
        return frozenset(c.lower() for c in table.natural_key)
    return frozenset()


def _is_unique_target(table: Table, columns: tuple[str, ...]) -> bool:
    """Whether `columns` name at most one row: they hold the key or a column declared unique.

    Kimball (type 2): the natural key repeats once per version, so on a type-2
    table it is never unique, whatever its columns declare.
    """
    wanted = {c.lower() for c in columns}
    natural = _type_2_natural_key(table)
    if natural and wanted == natural:
        return False
    key = {c.lower() for c in table.key}
    if key and key <= wanted:
        return True
    for name in columns:
        column = _column(table, name)
        if column is not None and column.unique and name.lower() not in natural:
            return True
    return False


def rule_key_not_unique(ctx: _Context) -> Iterator[Finding]:
    for link in ctx.model.links.values():
        if link.cardinality == "many-to-many":
            continue
        table = ctx.model.tables.get(link.to_table)
        if table is None or (link.to_columns == table.key and (table.history is None or table.history.type != 2)):
            continue  # no table: reported as broken-reference; its key, written as declared: unique
        if not all(_column(table, c) for c in link.to_columns):
            continue  # reported as broken-reference
        if _is_unique_target(table, link.to_columns):
            continue
        target = ", ".join(f"{link.to_table}.{c}" for c in link.to_columns)
        why = ""
        if _type_2_natural_key(table) & {c.lower() for c in link.to_columns}:
            why = f" ({link.to_table} keeps type-2 history, so its natural key repeats once per version)"
        yield ctx.finding("key-not-unique", f"links.{link.name}",
                          f"Link {link.name} is {link.cardinality} but points at {target}, which is not unique{why}; point it at the key {', '.join(table.key)}, declare the column `unique: true`, or make the link many-to-many.",
                          at=f"links.{link.name}.to")


def rule_type_mismatch(ctx: _Context) -> Iterator[Finding]:
    for link in ctx.model.links.values():
        source, target = ctx.model.tables.get(link.from_table), ctx.model.tables.get(link.to_table)
        if source is None or target is None:
            continue
        for a, b in zip(link.from_columns, link.to_columns):
            ca, cb = _column(source, a), _column(target, b)
            if ca is not None and cb is not None and ca.type != cb.type:
                yield ctx.finding("type-mismatch", f"links.{link.name}",
                                  f"Link {link.name} joins {link.from_table}.{a} ({ca.type}) to {link.to_table}.{b} ({cb.type}); make both columns the same type.")


# --- measures, history -----------------------------------------------------------------


def rule_measure_cycle(ctx: _Context) -> Iterator[Finding]:

    # unreadable expressions name nothing here (reported as invalid-model)
    deps = {name: sorted(refs) for name, refs in sql.derived_measure_refs(ctx.model.measures).items()}
    for cycle in _cycles(deps):
        shown = " -> ".join(cycle + [cycle[0]])
        yield ctx.finding("measure-cycle", f"measures.{cycle[0]}",
                          f"Derived measures refer to each other in a cycle ({shown}); break the cycle so each measure can be computed.")


def _cycles(deps: dict[str, list[str]]) -> list[list[str]]:
    """One readable cycle per strongly connected group of measures, found with an explicit work list."""
    color: dict[str, int] = {}
    found: list[list[str]] = []
    seen_groups: set[frozenset[str]] = set()
    for root in sorted(deps):
        if root in color:
            continue
        stack: list[tuple[str, Iterator[str]]] = [(root, iter(deps.get(root, ())))]
        trail = [root]
        color[root] = 1
        while stack:
            node, children = stack[-1]
            child = next(children, None)
            if child is None:
                stack.pop()
                trail.pop()
                color[node] = 2
            elif color.get(child) == 1:
                cycle = trail[trail.index(child):]
                group = frozenset(cycle)
                if group not in seen_groups:
                    seen_groups.add(group)
                    start = cycle.index(min(cycle))
                    found.append(cycle[start:] + cycle[:start])
            elif child not in color and child in deps:
                color[child] = 1
                trail.append(child)
                stack.append((child, iter(deps.get(child, ()))))
    return found


def rule_history_incomplete(ctx: _Context) -> Iterator[Finding]:
    for table in ctx.model.tables.values():
        h = table.history
        if h is None or h.type != 2:
            continue
        missing = [name for name, value in (("natural_key", table.natural_key), ("valid_from", h.valid_from), ("valid_to", h.valid_to)) if not value]
        if missing:
            yield ctx.finding("history-incomplete", f"tables.{table.name}",
                              f"Table {table.name} keeps type-2 history but lacks {and_list(missing)}; without {agree(len(missing), 'it', 'them')} the versions of one member cannot be told apart in time. Add {agree(len(missing), 'it', 'them')}.",
                              at=f"tables.{table.name}.history")


# --- graph rules ------------------------------------------------------------------------


def _default_options(model: Model) -> tuple[Overrides, ...]:
    """The overrides of each variant's default option, in variant-name order."""

    return graph.setting_layers(model, variant_defaults=True)


@dataclass(frozen=True)
class _Candidate:
    """One setting the ambiguity rule looks at: whose it is, and the tables its measures read."""

    label: str  # for messages: "the default setting", "measure m's setting", ...
    layers: tuple[Overrides, ...]
    item: str | None  # the subject whose overrides make this setting (None: the model's own links)
    own: Overrides  # that item's overrides: where a fix can go
    homes: frozenset[str]  # home tables of the base measures computed in this setting
    readers: frozenset[str] | None = None  # those base measures (None: every measure)


def _bases(model: Model, name: str) -> frozenset[str]:
    """The base measures a measure reaches (itself when it is one); names that do not exist are left out."""
    refs = sql.derived_measure_refs(model.measures)
    found: set[str] = set()
    todo, seen = [name], set()
    while todo:
        current = todo.pop()
        measure = model.measures.get(current)
        if measure is None or current in seen:
            continue
        seen.add(current)
        if measure.table is not None:
            found.add(current)
        else:
            todo.extend(refs.get(current, ()))
    return frozenset(found)


def _all_bases(model: Model, names: Iterable[str]) -> frozenset[str]:
    """The base measures that `names` reach."""
    return frozenset(b for name in names for b in _bases(model, name))


def _homes(model: Model, names: Iterable[str]) -> frozenset[str]:
    measures = model.measures
    return frozenset(measures[b].table for name in names for b in _bases(model, name))


def _settings(model: Model):
    """Every distinct setting the model can be evaluated in, with whose it is and what is read in it.

    Yields (_Candidate, Setting): the default setting (the model's own links,
    read by every measure), then each variant option's, measure's and
    report's (and each report measure's) own, skipping repeats. A measure is
    checked alone and after the variants' default options; a report with the
    options it picks or defaults to. An option's setting is read by the
    measures of the reports that pick it (every measure, for a default
    option); a measure's by that measure; a report's by its measures.
    """

    resolver = graph.SettingResolver(model)
    defaults = _default_options(model)
    every = frozenset(m.table for m in model.measures.values() if m.table is not None)
    candidates: list[_Candidate] = [_Candidate("the default setting", (), None, NO_OVERRIDES, every)]
    for variant in model.variants.values():
        for option in variant.options.values():
            if option.overrides:
                readers = [m for r in model.reports.values()
                           if r.variant.get(variant.name, variant.default) == option.name for m in r.measures]
                homes = every if option.name == variant.default else _homes(model, readers)
                bases = None if option.name == variant.default else _all_bases(model, readers)
                candidates.append(_Candidate(f"option {option.name} of variant {variant.name}", (option.overrides,),
                                             f"variants.{variant.name}.options.{option.name}", option.overrides, homes,
                                             bases))
    for measure in model.measures.values():
        if measure.overrides:
            label, homes = f"measure {measure.name}'s setting", _homes(model, [measure.name])
            for layers in ((measure.overrides,), defaults + (measure.overrides,)):
                candidates.append(_Candidate(label, layers, f"measures.{measure.name}", measure.overrides, homes,
                                             _all_bases(model, [measure.name])))
    for report in model.reports.values():
        candidates.append(_Candidate(f"report {report.name}'s setting",
                                     graph.setting_layers(model, report=report, variant_defaults=True),
                                     f"reports.{report.name}", report.overrides, _homes(model, report.measures),
                                     _all_bases(model, report.measures)))
        for name in report.measures:
            measure = model.measures.get(name)
            if measure is not None and measure.overrides:
                candidates.append(_Candidate(
                    f"measure {name} in report {report.name}",
                    graph.setting_layers(model, measure=measure, report=report, variant_defaults=True),
                    f"measures.{name}", measure.overrides, _homes(model, [name]), _all_bases(model, [name])))
    seen: set[Setting] = set()
    for candidate in candidates:
        setting = resolver.resolve(*candidate.layers)
        if setting not in seen:
            seen.add(setting)
            yield candidate, setting


def _steps(fg, source: str, path) -> list:
    """The edges a witness path crosses from `source`."""
    out, here = [], source
    for link in path:
        edge = next((e for e in fg.out_edges(here) if e.link == link and e.dst != here), None)
        if edge is None:
            break
        out.append(edge)
        here = edge.dst
    return out


def _fix_link(model: Model, fg, default_edges: frozenset | None, source: str, first, second,
              wanted: Iterable[str]) -> tuple[str, bool]:
    """(link, whether a route crosses it against its declared direction): the link the fix names.

    A link on one witness route only; preferably one whose edge this setting
    brought (absent from the default setting's graph) and that the item does
    not ask for in `via`.
    """
    crossed = {e.link: e for e in _steps(fg, source, first) + _steps(fg, source, second)}

    def against(link: str) -> bool:
        edge, declared = crossed.get(link), model.links.get(link)
        return (edge is not None and declared is not None and edge.src == declared.from_table
                and declared.cardinality != "one-to-one")

    only = [x for x in second if x not in first] + [x for x in first if x not in second]
    wanted = set(wanted)
    if default_edges is None:  # the default setting: a link crossed against its direction opens the extra route
        brought = {x for x in only if against(x)}
    else:
        brought = {x for x in only if x in crossed and crossed[x] not in default_edges}
    pool = ([x for x in only if x in brought and x not in wanted] or [x for x in only if x not in wanted] or only
            or list(second))
    return pool[0], against(pool[0])


def _readers(ctx: _Context, fg, target: str, homes: frozenset[str], readers: frozenset[str] | None) -> str:
    """"measure a reads it", "measures a, b and 3 more read it": the measures computed in the setting (all of
    them, or `readers`) whose table `target` reaches."""
    by_home = ctx.measures_by_home
    names = sorted(name for home in fg.reach(target) if home in homes for name in by_home.get(home, ())
                   if readers is None or name in readers)
    if not names:
        return "no measure computed in this setting reads it yet (it matters once one does)"
    if len(names) == 1:
        return f"measure {names[0]} reads it"
    shown = ", ".join(names[:3]) + (f" and {len(names) - 3} more" if len(names) > 3 else "")
    return f"measures {shown} read it"


def _item_words(item: str) -> str:
    section = item.partition(".")[0]
    if section == "variants":
        return f"option {subject_member(item)} of variant {subject_item(item)}"
    return f"{section[:-1]} {subject_item(item)}"


def rule_ambiguous_paths(ctx: _Context) -> Iterator[Finding]:
    """Ambiguous pairs of every setting, placed at the item whose setting it is (a link, for the default
    setting), naming the measures that read the target (or saying that none does yet) and the fix that applies
    there. Each pair once, in the first setting that shows it."""

    model = ctx.model
    reported: set[tuple[str, str]] = set()
    default = default_edges = None
    for candidate, setting in _settings(model):  # the default setting first
        fg = graph.flow_graph(model, setting)
        sources = None
        if default is None:
            default, default_edges = fg, frozenset(fg.edges)
        else:
            sources = _sources_of_new_routes(default, fg)
            if not sources:
                continue
        # Every ambiguous pair is reported, as the format's contract asks (docs/meaning.md, check rules); the
        # message says which measures read the target, or that none does yet in this setting.
        for source, target, first, second in fg.ambiguous_pairs(sources=sources):
            if (source, target) in reported:
                continue
            reported.add((source, target))
            yield _ambiguity_finding(ctx, candidate, fg, None if fg is default else default_edges, source, target,
                                     first, second)


def _ambiguity_finding(ctx: _Context, candidate: _Candidate, fg, default_edges, source: str, target: str,
                       first, second) -> Finding:
    model = ctx.model
    link, against = _fix_link(model, fg, default_edges, source, first, second, candidate.own.via)
    where = "" if candidate.item is None else f" in {candidate.label}"
    head = (f"A filter on {source} reaches {target} along more than one route{where} "
            f"({' / '.join(first)} and {' / '.join(second)}); numbers on {target} then depend on the data along each "
            f"route, and {_readers(ctx, fg, target, candidate.homes, candidate.readers)}. ")
    if candidate.item is None:
        at = f"links.{link}"
        fix = (f"Make link {link} one-way, or put it on standby (naming it in `via` where it is needed), so one "
               f"route remains." if against else
               f"Put link {link} on standby (naming it in `via` where it is needed), or turn it off where it is not "
               f"wanted (`flow: {{{link}: off}}`), so one route remains.")
    else:
        at = candidate.item
        also = f" (or `one-way`: the route crosses {link} against its declared direction)" if against else ""
        fix = f"Set `flow: {{{link}: off}}` on {_item_words(candidate.item)}{also}, so one route remains there."
    return ctx.finding("ambiguous-paths", f"paths.{source}->{target}", head + fix, paths=(first, second), at=at)


def _sources_of_new_routes(default, fg) -> set[str]:
    """Sources that reach an edge `fg` has and the default setting's graph lacks.

    Any other source has, in `fg`, only routes it also has in the default
    setting, so each pair of it ambiguous in `fg` was ambiguous (and reported)
    there already: a setting's analysis need only start from these.
    """
    sources: set[str] = set()
    for edge in set(fg.edges) - set(default.edges):
        sources |= fg.reaching(edge.src)
    return sources


def rule_security(ctx: _Context) -> Iterator[Finding]:

    model = ctx.model
    security = None
    for role in model.roles.values():
        subject = f"roles.{role.name}"
        if not all(t in model.tables for t in role.filters):
            continue  # broken-reference says it
        if security is None:
            security = graph.security_graph(model)  # one graph for every role
        for link, table in graph.security_stops(model, role, security):
            yield ctx.finding("security-stops", subject,
                              f"Role {role.name}'s filter stops at two-way link {link}: filters cross it into {table}, but row security does not (its security_flow is one-way), "
                              f"so members of {role.name} see every row of {table} the link would otherwise restrict. Set `security_flow: two-way` on {link} if that was intended, "
                              f"and have the organisation's own security review decide.")
        restricted = graph.role_restricted(model, role, security)
        if not any(model.tables[t].kind == "fact" for t in restricted if t in model.tables):
            yield ctx.finding("role-reaches-no-fact", subject,
                              f"Role {role.name}'s filters restrict no fact table (they reach only {', '.join(sorted(restricted)) or 'nothing'}); "
                              f"its members see every fact row. Filter a table whose links lead to the facts, or check the links' flow.")


_DROPPING_KINDS = ("bridge", "access")


def rule_two_way_drops_unmatched(ctx: _Context) -> Iterator[Finding]:
    """A link that flows both ways out of a bridge or access table (its `from` side) into table T: once a
    report's filter or grouping reaches that table, T keeps only the rows that have a row there, so every
    measure whose table T reaches loses the rows without one from each group (they fall into `(no match)`).
    Said once per link, naming the reports and measures that lose rows (extension; docs/check-rules.md).

    An access table's link that carries row security (`security_flow: two-way`, which needs the flow both
    ways) is the row-security pattern itself: it is left out (docs/check-rules.md says why)."""
    model = ctx.model
    links = [link for link in model.links.values()
             if link.from_table in model.tables and link.to_table in model.tables
             and model.tables[link.from_table].kind in _DROPPING_KINDS
             and model.tables[link.to_table].kind not in _DROPPING_KINDS
             and not (model.tables[link.from_table].kind == "access" and link.security_flow == "two-way")]
    if not links or not model.reports:
        return
    resolver = graph.SettingResolver(model)
    graphs: dict[Setting, object] = {}
    losses: dict[str, dict[str, list[str]]] = {link.name: {} for link in links}  # link -> report -> measures
    for report in model.reports.values():
        filtered = {item.partition(".")[0] for item in report.by} | set(report.where)
        filtered |= {t for v, o in report.variant.items() if v in model.variants
                     for t in getattr(model.variants[v].options.get(o), "where", {})}
        filtered = {t for t in filtered if t in model.tables}
        if not filtered:
            continue  # no group and no condition: nothing is constrained, nothing drops
        for base in sorted({b for name in report.measures for b in _bases(model, name)}):
            measure = model.measures[base]
            setting = resolver.resolve(*graph.setting_layers(model, measure=measure, report=report,
                                                             variant_defaults=True))
            fg = graphs.get(setting)
            if fg is None:
                fg = graphs[setting] = graph.flow_graph(model, setting)
            reached = set().union(*(fg.reach(t) for t in filtered))
            for link in links:
                both_ways = setting.flows.get(link.name) == "two-way" or (
                    link.name in setting.flows and link.cardinality == "one-to-one")
                if both_ways and link.from_table in reached and measure.table != link.from_table \
                        and measure.table in fg.reach(link.to_table):
                    losses[link.name].setdefault(report.name, []).append(base)
    for link in links:
        found = losses[link.name]
        if found:
            yield _drops_finding(ctx, link, found)


def _drops_finding(ctx: _Context, link, found: dict[str, list[str]]) -> Finding:
    bridge, target = link.from_table, link.to_table
    kind = ctx.model.tables[bridge].kind
    names = sorted(found)
    shown = "; ".join(f"report {r} ({', '.join(found[r])})" for r in names[:4])
    if len(names) > 4:
        shown += f"; and {len(names) - 4} more reports"
    message = (f"Link {link.name} flows both ways out of {kind} table {bridge} into {target}: once a report's grouping "
               f"or filter reaches {bridge}, {target} keeps only the rows that have a row in {bridge}, so the "
               f"rows without one leave every group and fall into `(no match)`. Measures that lose rows: {shown}. ")
    message += (f"Keep {link.name} one-way if {bridge} should not filter {target}, or set "
                f"`flow: {{{link.name}: one-way}}` on the reports that must keep every row.")
    return ctx.finding("two-way-drops-unmatched", f"links.{link.name}", message)


def rule_standby(ctx: _Context) -> Iterator[Finding]:
    model = ctx.model
    users: dict[str, list[str]] = {}
    holders = [(f"measures.{m.name}", m.overrides) for m in model.measures.values() if m.overrides.via]
    holders += [(f"variants.{v.name}.options.{o.name}", o.overrides) for v in model.variants.values() for o in v.options.values()]
    holders += [(f"reports.{r.name}", r.overrides) for r in model.reports.values()]
    for subject, overrides in holders:
        for link in overrides.via:
            users.setdefault(link, []).append(subject)
            target = model.links.get(link)
            if target is not None and not target.standby:
                yield ctx.finding("via-not-standby", subject,
                                  f"{subject} names link {link} in `via`, but {link} is not on standby and carries filters anyway; "
                                  f"remove it from `via`, or set `standby: true` on {link} if only some measures should follow it.",
                                  at=f"{subject}.via")
    for link in model.links.values():
        if link.standby and link.name not in users:
            yield ctx.finding("standby-unused", f"links.{link.name}",
                              f"Standby link {link.name} is used by no measure, variant option or report, so it never carries a filter; name it in the `via` of a measure, variant option or report, or remove it.")


# Rules that need only the model's own records; every error rule is among them.
RECORD_RULES: tuple[Callable[[_Context], Iterable[Finding]], ...] = (
    rule_table_references, rule_link_references, rule_measure_references, rule_variant_references,
    rule_role_references, rule_report_references, rule_duplicate_live_link, rule_key_not_unique,
    rule_type_mismatch, rule_measure_cycle, rule_history_incomplete, rule_standby, rule_report_condition,
)
# Rules that walk the flow and security graphs (warnings only).
GRAPH_RULES: tuple[Callable[[_Context], Iterable[Finding]], ...] = (rule_ambiguous_paths, rule_security,
                                                                    rule_two_way_drops_unmatched)
# The rules whose findings a diff reads: errors (which make it breaking) and warnings new in the new revision
# (shown as `warning.added`). The ambiguity walk is left out: a new ambiguous pair is an `ambiguity.introduced`
# change of the diff already, and the walk over every setting is the check's most costly part.
DIFF_RULES: tuple[Callable[[_Context], Iterable[Finding]], ...] = RECORD_RULES + (rule_security,
                                                                                  rule_two_way_drops_unmatched)


# What each record rule reads: a section's records, or only the names in it. A rule whose inputs are
# equal in two revisions gives the same findings in both, but for their positions.
RULE_INPUTS: dict[Callable[[_Context], Iterable[Finding]], tuple[str, ...]] = {
    rule_table_references: ("tables",),
    rule_link_references: ("links", "tables"),
    rule_measure_references: ("measures", "tables", "link names"),
    rule_variant_references: ("variants", "tables", "link names"),
    rule_role_references: ("roles", "tables"),
    rule_report_references: ("reports", "measure names", "tables", "variants", "role names", "link names"),
    rule_duplicate_live_link: ("links",),
    rule_key_not_unique: ("links", "tables"),
    rule_type_mismatch: ("links", "tables"),
    rule_measure_cycle: ("measures",),
    rule_history_incomplete: ("tables",),
    rule_standby: ("measures", "variants", "reports", "links"),
    rule_security: ("roles", "links", "tables"),
    rule_two_way_drops_unmatched: ("links", "tables", "reports", "measures", "variants"),
    rule_report_condition: ("reports", "measures"),
}


def check_model(model: Model, load_findings: Iterable[Finding] = (), graph_rules: bool = True) -> list[Finding]:
    """All findings for one revision, sorted errors first, root causes first (`_CAUSE_ORDER`), then by rule and subject.

    `graph_rules=False` runs only DIFF_RULES (it skips the ambiguity walk,
    which raises only warnings): the diff uses it to learn a revision's errors
    and the warnings it compares cheaply. Its warnings carry no position (a
    model's positions are read in a second pass over its text, which a diff
    pays only when it shows one: `diff.warning_changes` asks the model for
    the few warnings that are new).
    """
    ctx = _Context(model, warning_positions=graph_rules)
    findings = list(load_findings)
    with paused_gc():  # many small records, no cycles: the collector would only walk the model again and again
        for rule in (RECORD_RULES + GRAPH_RULES) if graph_rules else DIFF_RULES:
            findings.extend(rule(ctx))
    return _sorted_unique(findings)


def check_pair(old: Model, old_load_findings: Iterable[Finding], new: Model,
               new_load_findings: Iterable[Finding]) -> tuple[list[Finding], list[Finding]]:
    """`check_model(m, findings, graph_rules=False)` of two revisions, for a diff.

    A record rule that finds nothing in `old` is not run again on `new` when
    everything it reads (RULE_INPUTS) is equal in both: it would find nothing
    there either. A rule with findings in `old` runs again, since findings
    carry the revision's positions.
    """
    old_ctx, new_ctx = _Context(old, False), _Context(new, False)
    old_found, new_found = list(old_load_findings), list(new_load_findings)
    same: dict[str, bool] = {}
    with paused_gc():
        for rule in DIFF_RULES:
            found = list(rule(old_ctx))
            old_found += found
            if found or not all(_same_input(old, new, what, same) for what in RULE_INPUTS[rule]):
                new_found.extend(rule(new_ctx))
    return _sorted_unique(old_found), _sorted_unique(new_found)


def check_new_side(old: Model, old_load_findings: Iterable[Finding], new: Model,
                   new_load_findings: Iterable[Finding]) -> tuple[list[Finding], list[Finding]]:
    """(the old revision's findings as far as a diff reads them, `check_model(new, ..., graph_rules=False)`).

    Without a cache, a diff reads the old revision's findings only to tell
    which of the new revision's broken references and warnings are new
    (`impact._reference_changes`, `diff.warning_changes`: their rule, subject
    and message). So every rule of DIFF_RULES runs on the new revision; on the
    old one a rule runs only when it found a broken reference or a warning in
    the new revision and what it reads (RULE_INPUTS) differs. When its inputs are equal, its findings in the new
    revision stand for those of the old one (equal but for their positions).
    The first list holds the old load findings and these; the second list is
    exactly `check_model`'s.
    """
    old_ctx, new_ctx = _Context(old, False), _Context(new, False)
    old_found, new_found = list(old_load_findings), list(new_load_findings)
    same: dict[str, bool] = {}
    with paused_gc():
        for rule in DIFF_RULES:
            found = list(rule(new_ctx))
            new_found += found
            if not any(f.rule == "broken-reference" or f.severity == WARNING for f in found):
                continue
            if all(_same_input(old, new, what, same) for what in RULE_INPUTS[rule]):
                old_found += found
            else:
                old_found.extend(rule(old_ctx))
    return _sorted_unique(old_found), _sorted_unique(new_found)


def _same_input(old: Model, new: Model, what: str, memo: dict[str, bool]) -> bool:
    """Whether one input of a rule ("measures", or "measure names": the names only) is equal in two revisions."""
    found = memo.get(what)
    if found is None:
        section, _, names = what.partition(" ")
        if names:
            found = getattr(old, section + "s").keys() == getattr(new, section + "s").keys()
        else:
            found = getattr(old, section) == getattr(new, section)  # records often shared: compared by identity first
        memo[what] = found
    return found


# Root causes first: a value the reader could not take (`standby: yes`, read as text, hence false) comes
# before a name that points nowhere, and both before what follows from them (a duplicate live link, an
# ambiguity); then by rule. Errors before warnings throughout.
_CAUSE_ORDER = {"invalid-model": 0, "broken-reference": 1}


def _sorted_unique(findings: list[Finding]) -> list[Finding]:
    unique = {(f.rule, f.subject, f.message): f for f in findings}
    return sorted(unique.values(), key=lambda f: (f.severity != ERROR, _CAUSE_ORDER.get(f.rule, 2), f.rule,
                                                  f.subject, f.message))


def exit_code(findings: Iterable[Finding], strict: bool = False) -> int:
    """0 no error; 3 errors; 1 warnings with --strict only (changes.md)."""
    severities = {f.severity for f in findings}
    if ERROR in severities:
        return 3
    if strict and WARNING in severities:
        return 1
    return 0
