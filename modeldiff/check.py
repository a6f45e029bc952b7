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
from modeldiff.model import NO_OVERRIDES, Finding, Measure, Model, Overrides, Table

if TYPE_CHECKING:  # pragma: no cover
    from modeldiff.graph import Setting

ERROR = "error"
WARNING = "warning"

RULES = {
    "invalid-model": ERROR,
    "broken-reference": ERROR,
    "duplicate-active-link": ERROR,
    "key-not-unique": ERROR,
    "type-mismatch": ERROR,
    "measure-cycle": ERROR,
    "history-incomplete": ERROR,
    "ambiguous-paths": WARNING,
    "security-stops": WARNING,
    "role-reaches-no-fact": WARNING,
    "standby-unused": WARNING,
    "use-not-standby": WARNING,
}


@dataclass
class _Context:
    """One revision being checked, with the memos its rules share."""

    model: Model
    _clean: dict = field(default_factory=dict, repr=False)

    def finding(self, rule: str, subject: str, message: str, paths=(), at: str | None = None) -> Finding:
        return Finding(rule, RULES[rule], subject, message, tuple(tuple(p) for p in paths),
                       self.model.pos(at or subject))

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
    for link in overrides.use:
        if link not in ctx.model.links:
            yield ctx.finding("broken-reference", subject,
                              f"{subject} uses link '{link}', which does not exist; name an existing standby link or remove it from `use`.",
                              at=f"{subject}.use")
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
                              f"{label} uses the aggregate {', '.join(found.aggregates)}; a filter tests one row at a time, so compare columns with values.",
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
                              f"Measure {measure.name}: home table '{measure.table}' does not exist; fix `table`.", at=f"{subject}.table")
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
                          f"{what} has a `where`; a row condition needs a home `table`.", at=f"{subject}.where")
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
                          f"{what} uses the aggregate {', '.join(found.aggregates)}, but combines measures that are already aggregated; "
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


# --- links ---------------------------------------------------------------------------


def rule_duplicate_active_link(ctx: _Context) -> Iterator[Finding]:
    by_pair: dict[frozenset[str], list[str]] = {}
    for link in ctx.model.links.values():
        if not link.standby:
            by_pair.setdefault(link.tables, []).append(link.name)
    shared = [(pair, sorted(names)) for pair, names in by_pair.items() if len(names) > 1]
    for pair, names in sorted(shared, key=lambda item: item[1]):
        tables = " and ".join(sorted(pair))
        for extra in names[1:]:
            yield ctx.finding("duplicate-active-link", f"links.{extra}",
                              f"Links {', '.join(names)} all join {tables} and none is on standby; set `standby: true` on all but one and name the others in `use` where needed.")


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
                              f"Table {table.name} keeps type-2 history but lacks {', '.join(missing)}; without them the versions of one member cannot be told apart in time. Add {' and '.join(missing)}.",
                              at=f"tables.{table.name}.history")


# --- graph rules ------------------------------------------------------------------------


def _default_options(model: Model) -> tuple[Overrides, ...]:
    """The overrides of each variant's default option, in variant-name order."""

    return graph.setting_layers(model, variant_defaults=True)


def _settings(model: Model):
    """Every distinct setting the model can be evaluated in, with a label for messages.

    Yields (label, Setting): the default setting (the model's own links), then
    each variant option's, measure's and report's (and each report measure's)
    own, skipping repeats. A measure is checked alone and after the variants'
    default options; a report with the options it picks or defaults to.
    """

    resolver = graph.SettingResolver(model)
    defaults = _default_options(model)
    candidates: list[tuple[str, tuple[Overrides, ...]]] = [("the default setting", ())]
    for variant in model.variants.values():
        for option in variant.options.values():
            if option.overrides:
                candidates.append((f"option {option.name} of variant {variant.name}", (option.overrides,)))
    for measure in model.measures.values():
        if measure.overrides:
            label = f"measure {measure.name}'s setting"
            candidates += [(label, (measure.overrides,)), (label, defaults + (measure.overrides,))]
    for report in model.reports.values():
        candidates.append((f"report {report.name}'s setting",
                           graph.setting_layers(model, report=report, variant_defaults=True)))
        for name in report.measures:
            measure = model.measures.get(name)
            if measure is not None and measure.overrides:
                candidates.append((f"measure {name} in report {report.name}",
                                   graph.setting_layers(model, measure=measure, report=report, variant_defaults=True)))
    seen: set[Setting] = set()
    for label, layers in candidates:
        setting = resolver.resolve(*layers)
        if setting not in seen:
            seen.add(setting)
            yield label, setting


def rule_ambiguous_paths(ctx: _Context) -> Iterator[Finding]:

    reported: set[tuple[str, str]] = set()
    default = None
    for label, setting in _settings(ctx.model):  # the default setting first
        fg = graph.flow_graph(ctx.model, setting)
        sources = None
        if default is None:
            default = fg
        else:
            sources = _sources_of_new_routes(default, fg)
            if not sources:
                continue
        for source, target, first, second in fg.ambiguous_pairs(sources=sources):
            if (source, target) in reported:
                continue
            reported.add((source, target))
            where = "" if label == "the default setting" else f" in {label}"
            yield ctx.finding("ambiguous-paths", f"paths.{source}->{target}",
                              f"A filter on {source} reaches {target} along more than one route{where} "
                              f"({' / '.join(first)} and {' / '.join(second)}); numbers on {target} then depend on the data along each route. "
                              f"Put one of the links on standby, or make the flow one-way, so one route remains.",
                              paths=(first, second), at=f"tables.{target}")


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


def rule_standby(ctx: _Context) -> Iterator[Finding]:
    model = ctx.model
    users: dict[str, list[str]] = {}
    holders = [(f"measures.{m.name}", m.overrides) for m in model.measures.values() if m.overrides.use]
    holders += [(f"variants.{v.name}.options.{o.name}", o.overrides) for v in model.variants.values() for o in v.options.values()]
    holders += [(f"reports.{r.name}", r.overrides) for r in model.reports.values()]
    for subject, overrides in holders:
        for link in overrides.use:
            users.setdefault(link, []).append(subject)
            target = model.links.get(link)
            if target is not None and not target.standby:
                yield ctx.finding("use-not-standby", subject,
                                  f"{subject} names link {link} in `use`, but {link} is not on standby and carries filters anyway; "
                                  f"remove it from `use`, or set `standby: true` on {link} if only some measures should follow it.",
                                  at=f"{subject}.use")
    for link in model.links.values():
        if link.standby and link.name not in users:
            yield ctx.finding("standby-unused", f"links.{link.name}",
                              f"Standby link {link.name} is used by no measure, variant option or report, so it never carries a filter; name it in a `use` or remove it.")


# Rules that need only the model's own records; every error rule is among them.
RECORD_RULES: tuple[Callable[[_Context], Iterable[Finding]], ...] = (
    rule_table_references, rule_link_references, rule_measure_references, rule_variant_references,
    rule_role_references, rule_report_references, rule_duplicate_active_link, rule_key_not_unique,
    rule_type_mismatch, rule_measure_cycle, rule_history_incomplete, rule_standby,
)
# Rules that walk the flow and security graphs (warnings only).
GRAPH_RULES: tuple[Callable[[_Context], Iterable[Finding]], ...] = (rule_ambiguous_paths, rule_security)


# What each record rule reads: a section's records, or only the names in it. A rule whose inputs are
# equal in two revisions gives the same findings in both, but for their positions.
RULE_INPUTS: dict[Callable[[_Context], Iterable[Finding]], tuple[str, ...]] = {
    rule_table_references: ("tables",),
    rule_link_references: ("links", "tables"),
    rule_measure_references: ("measures", "tables", "link names"),
    rule_variant_references: ("variants", "tables", "link names"),
    rule_role_references: ("roles", "tables"),
    rule_report_references: ("reports", "measure names", "tables", "variants", "role names", "link names"),
    rule_duplicate_active_link: ("links",),
    rule_key_not_unique: ("links", "tables"),
    rule_type_mismatch: ("links", "tables"),
    rule_measure_cycle: ("measures",),
    rule_history_incomplete: ("tables",),
    rule_standby: ("measures", "variants", "reports", "links"),
}


def check_model(model: Model, load_findings: Iterable[Finding] = (), graph_rules: bool = True) -> list[Finding]:
    """All findings for one revision, sorted errors first, then by rule and subject.

    `graph_rules=False` skips the graph walks, which raise only warnings: the
    diff uses it to learn a revision's errors cheaply.
    """
    from modeldiff.load import paused_gc

    ctx = _Context(model)
    findings = list(load_findings)
    with paused_gc():  # many small records, no cycles: the collector would only walk the model again and again
        for rule in RECORD_RULES + (GRAPH_RULES if graph_rules else ()):
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
    from modeldiff.load import paused_gc

    old_ctx, new_ctx = _Context(old), _Context(new)
    old_found, new_found = list(old_load_findings), list(new_load_findings)
    same: dict[str, bool] = {}
    with paused_gc():
        for rule in RECORD_RULES:
            found = list(rule(old_ctx))
            old_found += found
            if found or not all(_same_input(old, new, what, same) for what in RULE_INPUTS[rule]):
                new_found.extend(rule(new_ctx))
    return _sorted_unique(old_found), _sorted_unique(new_found)


def check_new_side(old: Model, old_load_findings: Iterable[Finding], new: Model,
                   new_load_findings: Iterable[Finding]) -> tuple[list[Finding], list[Finding]]:
    """(the old revision's findings as far as a diff reads them, `check_model(new, ..., graph_rules=False)`).

    Without a cache, a diff reads the old revision's findings only to tell
    which of the new revision's broken references are new
    (`impact._reference_changes`: their rule, subject and message). So every
    record rule runs on the new revision; on the old one a rule runs only when
    it found a broken reference in the new revision and what it reads
    (RULE_INPUTS) differs. When its inputs are equal, its findings in the new
    revision stand for those of the old one (equal but for their positions).
    The first list holds the old load findings and these; the second list is
    exactly `check_model`'s.
    """
    from modeldiff.load import paused_gc

    old_ctx, new_ctx = _Context(old), _Context(new)
    old_found, new_found = list(old_load_findings), list(new_load_findings)
    same: dict[str, bool] = {}
    with paused_gc():
        for rule in RECORD_RULES:
            found = list(rule(new_ctx))
            new_found += found
            if not any(f.rule == "broken-reference" for f in found):
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


def _sorted_unique(findings: list[Finding]) -> list[Finding]:
    unique = {(f.rule, f.subject, f.message): f for f in findings}
    return sorted(unique.values(), key=lambda f: (f.severity != ERROR, f.rule, f.subject, f.message))


def exit_code(findings: Iterable[Finding], strict: bool = False) -> int:
    """0 no error; 3 errors; 1 warnings with --strict only (changes.md)."""
    severities = {f.severity for f in findings}
    if ERROR in severities:
        return 3
    if strict and WARNING in severities:
        return 1
    return 0
