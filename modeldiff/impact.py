"""Derived changes and impacts: what two revisions' graphs say about numbers and visible rows.

`analyse(old, new)` runs the structural diff, compares the filter graphs of
both revisions around what changed, and lists the measures, roles and reports
that could return different numbers, each with reasons naming the change, the
source table and the paths added and removed (changes.md, "Impact").

Work goes outward from the changed edges: only pairs (S, X) with S upstream
of a changed edge and X downstream of it are compared, never all pairs.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Mapping

from modeldiff.changes import EXIT_CODES, Change, worst
from modeldiff.model import Finding, Model, Overrides

PATH_LIMIT = 64  # paths enumerated per pair when listing what was added or removed

Path = tuple[str, ...]


@dataclass(frozen=True)
class Reason:
    change: str  # id of the change it comes from
    message: str
    source: str | None = None  # "numbers move when filtered or grouped by" this table
    paths_added: tuple[Path, ...] = ()
    paths_removed: tuple[Path, ...] = ()
    via: str | None = None  # the measure through which a derived measure or report is reached


@dataclass(frozen=True)
class Impact:
    name: str
    severity: str
    reasons: tuple[Reason, ...]
    exposed: tuple[str, ...] = ()  # roles only
    tightened: tuple[str, ...] = ()
    rerouted: tuple[str, ...] = ()


@dataclass(frozen=True)
class DiffResult:
    old: Model
    new: Model
    changes: tuple[Change, ...]
    measures: tuple[Impact, ...]
    roles: tuple[Impact, ...]
    reports: tuple[Impact, ...]
    new_errors: tuple[Finding, ...] = ()

    @property
    def verdict(self) -> str:
        severities = [c.severity for c in self.changes]
        if self.new_errors:
            severities.append("breaking")
        return worst(severities)

    @property
    def exit_code(self) -> int:
        return EXIT_CODES[self.verdict]

    def counts(self) -> dict[str, int]:
        out = {"breaking": 0, "numbers": 0, "safe": 0}
        for change in self.changes:
            out[change.severity] += 1
        return out


# --- renames ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Renames:
    """Old name -> new name, per section, taken from the structural `*.renamed` changes."""

    tables: Mapping[str, str] = field(default_factory=dict)
    links: Mapping[str, str] = field(default_factory=dict)
    measures: Mapping[str, str] = field(default_factory=dict)
    roles: Mapping[str, str] = field(default_factory=dict)
    reports: Mapping[str, str] = field(default_factory=dict)

    @classmethod
    def of(cls, changes: Iterable[Change]) -> "Renames":
        maps: dict[str, dict[str, str]] = {"table": {}, "link": {}, "measure": {}, "role": {}, "report": {}}
        for change in changes:
            section, _, what = change.kind.partition(".")
            if what == "renamed" and section in maps:
                maps[section][change.before] = change.after
        return cls(maps["table"], maps["link"], maps["measure"], maps["role"], maps["report"])

    def table(self, name: str) -> str:
        return self.tables.get(name, name)

    def path(self, path: Path) -> Path:
        return tuple(self.links.get(link, link) for link in path)


# --- comparing two graphs around their changed edges ------------------------------------


@dataclass(frozen=True)
class PairChange:
    source: str
    target: str
    added: tuple[Path, ...]
    removed: tuple[Path, ...]
    links: frozenset[str]  # links whose edges changed and that lie on an added or removed path


def _edge_set(graph, renames: Renames | None) -> set[tuple[str, str, str]]:
    if renames is None:
        return {(e.link, e.src, e.dst) for e in graph.edges}
    return {(renames.links.get(e.link, e.link), renames.table(e.src), renames.table(e.dst)) for e in graph.edges}


def changed_pairs(g_old, g_new, renames: Renames, sources: Iterable[str] | None = None,
                  targets: Iterable[str] | None = None) -> dict[tuple[str, str], PairChange]:
    """Pairs (S, X) whose sets of simple paths differ between the two graphs.

    Paths of the old graph are named in the new revision's names. Only pairs
    upstream/downstream of an edge present in one graph and not the other can
    differ, so only those are compared.
    """
    old_edges, new_edges = _edge_set(g_old, renames), _edge_set(g_new, None)
    gone, came = old_edges - new_edges, new_edges - old_edges
    if not gone and not came:
        return {}
    changed_links = {link for link, _, _ in gone | came}
    back = {new: old for old, new in renames.tables.items()}
    src_filter = set(sources) if sources is not None else None
    tgt_filter = set(targets) if targets is not None else None

    candidates: set[tuple[str, str]] = set()
    for graph, edges, to_new in ((g_old, gone, renames.table), (g_new, came, lambda t: t)):
        for _, src, dst in edges:
            here_src = back.get(src, src) if graph is g_old else src
            here_dst = back.get(dst, dst) if graph is g_old else dst
            ups = [to_new(t) for t in graph.reaching(here_src)]
            downs = [to_new(t) for t in graph.reach(here_dst)]
            if src_filter is not None:
                ups = [t for t in ups if t in src_filter]
            if tgt_filter is not None:
                downs = [t for t in downs if t in tgt_filter]
            candidates.update((s, x) for s in ups for x in downs if s != x)

    result: dict[tuple[str, str], PairChange] = {}
    for source, target in sorted(candidates):
        old_paths = set()
        os_, ot = back.get(source, source), back.get(target, target)
        if os_ in g_old.tables and ot in g_old.tables:
            old_paths = {renames.path(p) for p in g_old.paths(os_, ot, limit=PATH_LIMIT)}
        new_paths = set()
        if source in g_new.tables and target in g_new.tables:
            new_paths = set(g_new.paths(source, target, limit=PATH_LIMIT))
        if old_paths == new_paths:
            continue
        added, removed = tuple(sorted(new_paths - old_paths)), tuple(sorted(old_paths - new_paths))
        on_paths = {link for path in added + removed for link in path} & changed_links
        result[(source, target)] = PairChange(source, target, added, removed, frozenset(on_paths or changed_links))
    return result


# --- the analysis ------------------------------------------------------------------------


class _Analysis:
    """Holds both revisions, their graphs per setting, and the changes found so far."""

    def __init__(self, old: Model, new: Model, structural: list[Change]):
        self.old, self.new = old, new
        self.structural = structural
        self.renames = Renames.of(structural)
        self._graphs: dict[tuple, object] = {}
        self._pairs: dict[tuple, dict] = {}

    # graphs per setting, cached by the setting's flows
    def graph(self, model: Model, layers: tuple[Overrides, ...] = ()):
        from modeldiff import graph

        setting = graph.resolve_setting(model, *layers)
        key = (id(model), frozenset(setting.flows.items()))
        if key not in self._graphs:
            self._graphs[key] = graph.flow_graph(model, setting)
        return self._graphs[key]

    def pairs(self, old_layers=(), new_layers=(), sources=None, targets=None) -> dict[tuple[str, str], PairChange]:
        g_old, g_new = self.graph(self.old, old_layers), self.graph(self.new, new_layers)
        key = (id(g_old), id(g_new), frozenset(sources) if sources is not None else None,
               frozenset(targets) if targets is not None else None)
        if key not in self._pairs:
            self._pairs[key] = changed_pairs(g_old, g_new, self.renames, sources, targets)
        return self._pairs[key]


def _derived_graph_changes(a: _Analysis) -> list[Change]:
    """path.added / path.removed and ambiguity.* in the default setting."""
    changes: list[Change] = []
    g_old, g_new = a.graph(a.old), a.graph(a.new)
    back = {new: old for old, new in a.renames.tables.items()}
    for (source, target), pc in sorted(a.pairs().items()):
        subject = f"paths.{source}->{target}"
        links = sorted(pc.links)
        if pc.added:
            changes.append(Change(
                "path.added", subject, "numbers",
                f"A filter on {source} now reaches {target} along {_plural(len(pc.added), 'new path')} "
                f"({'; '.join(' / '.join(p) for p in pc.added)}): numbers on {target} move when filtered or grouped by {source}.",
                before=None, after=[list(p) for p in pc.added], details={"links": links}))
        if pc.removed:
            changes.append(Change(
                "path.removed", subject, "numbers",
                f"A filter on {source} no longer reaches {target} along "
                f"{'; '.join(' / '.join(p) for p in pc.removed)}: numbers on {target} move when filtered or grouped by {source}.",
                before=[list(p) for p in pc.removed], after=None, details={"links": links}))
        os_, ot = back.get(source, source), back.get(target, target)
        was = g_old.witness(os_, ot) if os_ in g_old.tables and ot in g_old.tables else None
        now = g_new.witness(source, target) if source in g_new.tables and target in g_new.tables else None
        if now and not was:
            changes.append(Change(
                "ambiguity.introduced", subject, "breaking",
                f"{source} now reaches {target} along more than one route ({' / '.join(now[0])} and {' / '.join(now[1])}); "
                f"what {target} shows under a filter on {source} then depends on the data along each route. "
                f"Put one link on standby or make a flow one-way so a single route remains.",
                before=None, after=[list(p) for p in now], details={"links": links}))
        elif was and not now:
            was = tuple(a.renames.path(p) for p in was)
            changes.append(Change(
                "ambiguity.resolved", subject, "numbers",
                f"{source} reaches {target} along a single route again (it had {' / '.join(was[0])} and {' / '.join(was[1])}).",
                before=[list(p) for p in was], after=None, details={"links": links}))
    return changes


def _security_changes(a: _Analysis) -> list[Change]:
    from modeldiff import graph

    changes: list[Change] = []
    old_roles = {a.renames.roles.get(name, name): role for name, role in a.old.roles.items()}
    s_old, s_new = graph.security_graph(a.old), graph.security_graph(a.new)
    same_edges = _edge_set(s_old, a.renames) == _edge_set(s_new, None)
    back = {new: old for old, new in a.renames.tables.items()}
    for name in sorted(set(old_roles) & set(a.new.roles)):
        before_role, after_role = old_roles[name], a.new.roles[name]
        if not all(t in a.old.tables for t in before_role.filters) or not all(t in a.new.tables for t in after_role.filters):
            continue  # a broken reference says it
        before = {a.renames.table(t): p for t, p in graph.role_restricted(a.old, before_role, s_old).items()}
        after = graph.role_restricted(a.new, after_role, s_new)
        for table in sorted(set(before) - set(after)):
            changes.append(Change(
                "security.exposed", f"roles.{name}.tables.{table}", "breaking",
                f"SECURITY: role {name} no longer restricts {table}: rows of {table} that were hidden from its members become visible "
                f"(it was restricted via {' / '.join(before[table]) or 'its own filter'}). This can expose data a role must never see; "
                f"the organisation's own security review decides whether it is acceptable.",
                before=list(before[table]), after=None))
        for table in sorted(set(after) - set(before)):
            changes.append(Change(
                "security.tightened", f"roles.{name}.tables.{table}", "numbers",
                f"Role {name} now restricts {table} (via {' / '.join(after[table]) or 'its own filter'}): its members see fewer rows of {table}.",
                before=None, after=list(after[table])))
        same_filters = {a.renames.table(t) for t in before_role.filters} == set(after_role.filters)
        if same_edges and same_filters:
            continue  # the same filtered tables over the same graph reach along the same paths
        for table in sorted(set(before) & set(after)):
            old_paths = _role_paths(s_old, list(before_role.filters), back.get(table, table), a.renames)
            new_paths = _role_paths(s_new, list(after_role.filters), table, None)
            if old_paths != new_paths:
                changes.append(Change(
                    "security.rerouted", f"roles.{name}.tables.{table}", "numbers",
                    f"Role {name} still restricts {table}, but along different paths "
                    f"(before: {_paths_text(old_paths)}; after: {_paths_text(new_paths)}); which rows its members see may change.",
                    before=[list(p) for p in sorted(old_paths)], after=[list(p) for p in sorted(new_paths)]))
    return changes


def _role_paths(sec, filtered: list[str], table: str, renames: Renames | None) -> frozenset[Path]:
    out: set[Path] = set()
    for source in filtered:
        if source == table:
            out.add(())
        elif source in sec.tables and table in sec.tables:
            out.update(sec.paths(source, table, limit=PATH_LIMIT))
    if renames is not None:
        out = {renames.path(p) for p in out}
    return frozenset(out)


def _paths_text(paths) -> str:
    return "; ".join(" / ".join(p) or "own filter" for p in sorted(paths)) or "none"


def _reference_changes(old_findings: Iterable[Finding], new_findings: Iterable[Finding]) -> list[Change]:
    before = {(f.subject, f.message) for f in old_findings if f.rule == "broken-reference"}
    changes = []
    for f in new_findings:
        if f.rule == "broken-reference" and (f.subject, f.message) not in before:
            changes.append(Change("reference.broken", f.subject, "breaking", f.message,
                                  details={"location": str(f.pos)} if f.pos else {}))
    return changes


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


# --- impacts ------------------------------------------------------------------------------


class _Impacts:
    """Builds the impact lists once every change has its id."""

    def __init__(self, a: _Analysis, changes: list[Change]):
        from modeldiff import sql

        self.a = a
        self.changes = changes
        self.by_subject: dict[str, list[Change]] = {}
        for change in changes:
            self.by_subject.setdefault(change.subject, []).append(change)
        self.measure_deps: dict[str, frozenset[str]] = {}
        names = frozenset(a.new.measures)
        for m in a.new.measures.values():
            if m.table is None:
                try:
                    self.measure_deps[m.name] = frozenset(sql.measure_refs(m.expr, names))
                except sql.SqlError:
                    self.measure_deps[m.name] = frozenset()

    # helpers
    def link_change_id(self, links: Iterable[str]) -> str | None:
        for link in sorted(links):
            for change in self.by_subject.get(f"links.{link}", ()):
                return change.id
            old = {v: k for k, v in self.a.renames.links.items()}.get(link)
            if old:
                for change in self.by_subject.get(f"links.{old}", ()):
                    return change.id
        return None

    def kinds(self, prefix: str) -> list[Change]:
        return [c for c in self.changes if c.kind.startswith(prefix)]

    def homes(self, name: str, seen=None) -> set[str]:
        """Home tables a measure reads, through derived measures."""
        m = self.a.new.measures.get(name)
        if m is None:
            return set()
        if m.table is not None:
            return {m.table}
        seen = seen or set()
        out: set[str] = set()
        for dep in self.measure_deps.get(name, ()):
            if dep not in seen:
                seen.add(dep)
                out |= self.homes(dep, seen)
        return out

    def base_measures(self, name: str) -> list[str]:
        out, todo, seen = [], [name], set()
        while todo:
            current = todo.pop()
            if current in seen or current not in self.a.new.measures:
                continue
            seen.add(current)
            if self.a.new.measures[current].table is not None:
                out.append(current)
            else:
                todo.extend(sorted(self.measure_deps.get(current, ())))
        return sorted(out)

    def old_measure(self, name: str):
        back = {v: k for k, v in self.a.renames.measures.items()}
        return self.a.old.measures.get(back.get(name, name))

    # reasons that do not depend on the setting: definition, columns and tables read, role rows
    def own_reasons(self, name: str) -> list[Reason]:
        from modeldiff import sql

        m = self.a.new.measures[name]
        reasons = []
        for change in self.by_subject.get(f"measures.{name}", ()):
            if change.kind in ("measure.logic_changed", "measure.overrides_changed"):
                reasons.append(Reason(change.id, change.message))
        if m.table is None:
            return reasons
        try:
            read = {c.lower() for _, c in sql.column_refs(m.expr)}
            if m.where:
                read |= {c.lower() for _, c in sql.column_refs(m.where)}
        except sql.SqlError:
            read = set()
        old_home = {v: k for k, v in self.a.renames.tables.items()}.get(m.table, m.table)
        for change in self.changes:
            parts = change.subject.split(".")
            if change.kind.startswith("column.") and change.severity != "safe" and len(parts) == 4 \
                    and parts[1] in (m.table, old_home) and (parts[3].lower() in read
                                                             or str(change.after).lower() in read):
                reasons.append(Reason(change.id, change.message))
            elif change.kind in ("table.key_changed", "table.history_changed", "table.kind_changed") \
                    and change.subject in (f"tables.{m.table}", f"tables.{old_home}"):
                reasons.append(Reason(change.id, change.message))
        for change in self.kinds("security."):
            if change.subject.endswith(f".tables.{m.table}"):
                role = change.subject.split(".")[1]
                reasons.append(Reason(change.id, f"The rows role {role} may see of {m.table} changed: {change.message}",
                                      source=self._first_filter(role)))
        for change in self.kinds("role.filter_changed"):
            role = change.subject.split(".")[1]
            if role in self.a.new.roles and m.table in self._restricted(role):
                reasons.append(Reason(change.id, f"Role {role}'s filter changed, so the rows its members see of {m.table} may change.",
                                      source=self._first_filter(role)))
        return reasons

    def _first_filter(self, role: str) -> str | None:
        r = self.a.new.roles.get(role)
        return sorted(r.filters)[0] if r and r.filters else None

    def _restricted(self, role: str) -> set[str]:
        from modeldiff import graph

        if not hasattr(self, "_restricted_cache"):
            self._restricted_cache = {}
            self._security = graph.security_graph(self.a.new)
        if role not in self._restricted_cache:
            r = self.a.new.roles[role]
            ok = all(t in self.a.new.tables for t in r.filters)
            self._restricted_cache[role] = set(graph.role_restricted(self.a.new, r, self._security)) if ok else set()
        return self._restricted_cache[role]

    def path_reasons(self, home: str, old_layers, new_layers, sources=None) -> list[Reason]:
        """Reasons from paths into `home` that changed in one setting, and from key/cardinality changes on them."""
        a = self.a
        reasons = []
        pairs = a.pairs(old_layers, new_layers, sources=sources)
        for (source, target), pc in sorted(pairs.items()):
            if target != home:
                continue
            change_id = self.link_change_id(pc.links) or self._setting_change_id() or self._path_change_id(source, target)
            reasons.append(Reason(change_id, f"Paths from {source} into {home} changed: numbers move when filtered or grouped by {source}.",
                                  source=source, paths_added=pc.added, paths_removed=pc.removed))
        g_new = a.graph(a.new, new_layers)
        for change in self.changes:
            if change.kind not in ("link.key_switched", "link.cardinality_changed"):
                continue
            link = change.subject.split(".", 1)[1]
            for edge in (e for e in g_new.edges if e.link == link):
                if home in g_new.reach(edge.dst) and (sources is None or any(edge.src in g_new.reach(s) for s in sources if s in g_new.tables)):
                    reasons.append(Reason(change.id, f"Link {link} lies on a path from {edge.src} into {home} and {change.message[0].lower()}{change.message[1:]}",
                                          source=edge.src, paths_added=(), paths_removed=()))
                    break
        return reasons

    def _setting_change_id(self) -> str | None:
        for change in self.changes:
            if change.kind in ("measure.overrides_changed", "variant.changed", "report.changed"):
                return change.id
        return None

    def _path_change_id(self, source: str, target: str) -> str:
        for change in self.by_subject.get(f"paths.{source}->{target}", ()):
            return change.id
        return self.changes[0].id if self.changes else ""

    # the three lists
    def measures(self) -> list[Impact]:
        from modeldiff import graph

        a = self.a
        direct: dict[str, list[Reason]] = {}
        for name, m in a.new.measures.items():
            reasons = self.own_reasons(name)
            if m.table is not None:
                old = self.old_measure(name)
                old_layers = graph.setting_layers(a.old, measure=old) if old is not None else ()
                new_layers = graph.setting_layers(a.new, measure=m)
                reasons += self.path_reasons(m.table, old_layers, new_layers)
            if reasons:
                direct[name] = reasons
        # derived measures inherit the reasons of the measures they use
        result: dict[str, list[Reason]] = {k: list(v) for k, v in direct.items()}
        for name in a.new.measures:
            if a.new.measures[name].table is not None:
                continue
            for base in self.dependencies(name):
                for reason in direct.get(base, ()):
                    result.setdefault(name, []).append(_via(reason, base))
        return [self._impact(name, reasons) for name, reasons in sorted(result.items())]

    def dependencies(self, name: str) -> list[str]:
        out, todo, seen = [], list(self.measure_deps.get(name, ())), {name}
        while todo:
            dep = todo.pop()
            if dep in seen:
                continue
            seen.add(dep)
            out.append(dep)
            todo.extend(self.measure_deps.get(dep, ()))
        return sorted(out)

    def roles(self) -> list[Impact]:
        out = []
        for name in sorted(set(self.a.new.roles) | {self.a.renames.roles.get(n, n) for n in self.a.old.roles}):
            reasons, exposed, tightened, rerouted = [], [], [], []
            for change in self.by_subject.get(f"roles.{name}", ()):
                if change.kind not in ("role.metadata_changed", "role.added"):
                    reasons.append(Reason(change.id, change.message))
            for change in self.kinds("security."):
                parts = change.subject.split(".")
                if parts[1] != name:
                    continue
                table = parts[3]
                {"security.exposed": exposed, "security.tightened": tightened, "security.rerouted": rerouted}[change.kind].append(table)
                reasons.append(Reason(change.id, change.message))
            if reasons:
                severity = worst(self._change(r.change).severity for r in reasons)
                out.append(Impact(name, severity, tuple(reasons), tuple(exposed), tuple(tightened), tuple(rerouted)))
        return out

    def reports(self) -> list[Impact]:
        from modeldiff import graph

        a = self.a
        back = {v: k for k, v in a.renames.reports.items()}
        out = []
        for name, report in sorted(a.new.reports.items()):
            reasons: list[Reason] = []
            old_report = a.old.reports.get(back.get(name, name))
            for change in self.by_subject.get(f"reports.{name}", ()):
                if change.kind not in ("report.metadata_changed", "report.added", "report.renamed"):
                    reasons.append(Reason(change.id, change.message))
            for change in self.changes:  # a measure it shows was removed or renamed away
                if change.kind in ("measure.removed", "measure.renamed") and (change.before in report.measures or change.subject.split(".")[-1] in report.measures) \
                        and change.after not in report.measures:
                    reasons.append(Reason(change.id, change.message))
            sources = self.report_sources(report)
            for measure_name in report.measures:
                m = a.new.measures.get(measure_name)
                if m is None:
                    continue
                for base in [measure_name] + self.dependencies(measure_name):
                    bm = a.new.measures.get(base)
                    if bm is None:
                        continue
                    for reason in self.own_reasons(base):
                        if reason.source is not None and report.role is None:
                            continue  # role rows matter only to a report seen as that role
                        if reason.source is not None and self.a.new.roles.get(report.role) is not None \
                                and not self._reason_is_role(reason, report.role):
                            continue
                        reasons.append(_via(reason, base))
                    if bm.table is None or not sources:
                        continue
                    old_bm = self.old_measure(base)
                    old_layers = graph.setting_layers(a.old, measure=old_bm, report=old_report) if old_report is not None else \
                        (graph.setting_layers(a.old, measure=old_bm) if old_bm is not None else ())
                    new_layers = graph.setting_layers(a.new, measure=bm, report=report)
                    old_sources = sources
                    for reason in self.path_reasons(bm.table, old_layers, new_layers, sources=old_sources):
                        reasons.append(_via(reason, base))
            for item in report.by + tuple(report.where):
                table, _, column = item.partition(".")
                for change in self.changes:
                    if change.kind.startswith(("column.", "table.")) and change.severity != "safe" and \
                            (change.subject == f"tables.{table}.columns.{column}" or change.subject == f"tables.{table}" and change.kind != "table.metadata_changed"):
                        reasons.append(Reason(change.id, change.message))
            for variant, option in _chosen_options(a.new, report).items():
                for change in self.by_subject.get(f"variants.{variant}", []) + self.by_subject.get(f"variants.{variant}.options.{option}", []):
                    if change.severity != "safe":
                        reasons.append(Reason(change.id, change.message))
            if reasons:
                out.append(self._impact(name, _dedupe(reasons)))
        return out

    def _reason_is_role(self, reason: Reason, role: str) -> bool:
        change = self._change(reason.change)
        return change.subject.startswith(f"roles.{role}.") or change.subject == f"roles.{role}"

    def report_sources(self, report) -> set[str]:
        tables = {item.partition(".")[0] for item in report.by} | set(report.where)
        for variant, option in _chosen_options(self.a.new, report).items():
            tables |= set(self.a.new.variants[variant].options[option].where)
        return {t for t in tables if t in self.a.new.tables}

    def _change(self, change_id: str) -> Change:
        for change in self.changes:
            if change.id == change_id:
                return change
        raise KeyError(change_id)

    def _impact(self, name: str, reasons: list[Reason]) -> Impact:
        reasons = _dedupe(reasons)
        severity = worst(self._change(r.change).severity for r in reasons if r.change) if reasons else "numbers"
        return Impact(name, "numbers" if severity == "safe" else severity, tuple(reasons))


def _chosen_options(model: Model, report) -> dict[str, str]:
    """Each variant's option in force for a report: the one it picks, else the default."""
    out = {}
    for name, variant in model.variants.items():
        option = report.variant.get(name, variant.default)
        if option in variant.options:
            out[name] = option
    return out


def _via(reason: Reason, measure: str) -> Reason:
    return reason if reason.via is not None else Reason(reason.change, reason.message, reason.source,
                                                        reason.paths_added, reason.paths_removed, via=measure)


def _dedupe(reasons: list[Reason]) -> list[Reason]:
    seen, out = set(), []
    for reason in reasons:
        key = (reason.change, reason.source, reason.paths_added, reason.paths_removed)
        if key not in seen:
            seen.add(key)
            out.append(reason)
    return out


# --- entry point ------------------------------------------------------------------------------


def analyse(old: Model, new: Model, old_findings: Iterable[Finding] = (), new_findings: Iterable[Finding] = ()) -> DiffResult:
    """Everything `modeldiff diff` reports about two revisions."""
    from modeldiff import check, diff

    structural = diff.diff_models(old, new)
    a = _Analysis(old, new, structural)
    old_checked = check.check_model(old, old_findings, graph_rules=False)
    new_checked = check.check_model(new, new_findings, graph_rules=False)
    derived = _derived_graph_changes(a) + _security_changes(a) + _reference_changes(old_checked, new_checked)
    changes = sorted(structural + derived, key=Change.sort_key)
    changes = [_with_id(c, f"c{i}") for i, c in enumerate(changes, 1)]
    impacts = _Impacts(a, changes)
    new_errors = tuple(f for f in new_checked if f.severity == "error")
    return DiffResult(old, new, tuple(changes), tuple(impacts.measures()), tuple(impacts.roles()),
                      tuple(impacts.reports()), new_errors)


def _with_id(change: Change, change_id: str) -> Change:
    from dataclasses import replace

    return replace(change, id=change_id)
