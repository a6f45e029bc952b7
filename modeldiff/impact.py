"""Derived changes and impacts: what two revisions' graphs say about numbers and visible rows.

`analyse(old, new)` runs the structural diff, compares the filter graphs of
both revisions around what changed, and lists the measures, roles and reports
that could return different numbers, each with reasons naming the change, the
source table and the paths added and removed (changes.md, "Impact").

Work goes outward from the changed edges: only pairs (S, X) with S upstream
of a changed edge and X downstream of it are compared, never all pairs. The
old graph is first read in the new revision's names, so a renamed table or
link is the same node or edge in both graphs and changes no path.

Settings (DEVELOPERS.md, "Decisions where the spec is silent"): a measure on
its own is evaluated in the model plus every variant's default option plus its
own overrides; inside a report, the variant options the report chooses (the
default for the others), the report's overrides, then the measure's. A
report's numbers move through path changes only from the tables it places
filters on (`by`, `where`, and its variant options' `where`).

Further decisions:
- `via` and `flow` (of a measure, a report or a variant option) act only
  through the filter paths they open or close, so their changes impact a
  measure or report only where its paths changed; a variant option's `where`
  in force that changed impacts what its table's filter reaches.
- A path that appeared or disappeared is blamed on the change that moved one
  of its new or gone edges: the link's own change when the new model alone,
  read in the old setting, moves that edge; else the setting change naming
  the link (or a link joining the same tables); else a change of a link
  joining the same tables; else the removal or addition of one of its tables.
- A measure or report that did not exist before has no impact: no number of
  it moved. A model added or removed whole lists its ambiguities, not every
  path.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping

from modeldiff.changes import EXIT_CODES, Change, worst
from modeldiff.model import NO_OVERRIDES, Finding, Measure, Model, Overrides, Report, VariantOption

PATH_LIMIT = 64  # paths listed per pair when telling what was added or removed
PATH_BUDGET = 200_000  # search steps per pair listing; beyond it the pair counts as changed (conservative)

Path = tuple[str, ...]

# Link change kinds that move a link's edges, most telling first: a path that appeared or
# disappeared because of a link names the first of these that the link has.
EDGE_KINDS = ("link.added", "link.removed", "link.standby_set", "link.standby_cleared", "link.flow_widened",
              "link.flow_narrowed", "link.cardinality_changed", "link.key_switched")
# Changes to a computation's setting (which links carry filters for it).
SETTING_KINDS = ("measure.overrides_changed", "variant.changed", "variant.added", "variant.removed",
                 "variant.renamed", "report.changed")
# Report fields whose change moves numbers only through the setting (paths) or the variant options' `where`.
_SETTING_FIELDS = frozenset({"overrides", "variant"})


@dataclass(frozen=True)
class Reason:
    """Why one measure, role or report is impacted: the change, and the paths it added or removed."""

    change: str  # id of the change it comes from
    message: str
    source: str | None = None  # "numbers move when filtered or grouped by" this table
    paths_added: tuple[Path, ...] = ()
    paths_removed: tuple[Path, ...] = ()
    via: str | None = None  # the measure through which a derived measure or report is reached


@dataclass(frozen=True)
class Impact:
    """One impacted measure, role or report, with its severity and reasons."""

    name: str
    severity: str
    reasons: tuple[Reason, ...]
    exposed: tuple[str, ...] = ()  # roles only
    tightened: tuple[str, ...] = ()
    rerouted: tuple[str, ...] = ()


@dataclass(frozen=True)
class DiffResult:
    """The comparison of two revisions: changes, impacted measures, roles and reports, new errors."""

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
    variants: Mapping[str, str] = field(default_factory=dict)

    @classmethod
    def of(cls, changes: Iterable[Change]) -> "Renames":
        maps: dict[str, dict[str, str]] = {s: {} for s in ("table", "link", "measure", "role", "report", "variant")}
        for change in changes:
            section, _, what = change.kind.partition(".")
            if what == "renamed" and section in maps:
                maps[section][change.before] = change.after
        return cls(maps["table"], maps["link"], maps["measure"], maps["role"], maps["report"], maps["variant"])

    def table(self, name: str) -> str:
        return self.tables.get(name, name)

    def link(self, name: str) -> str:
        return self.links.get(name, name)

    def path(self, path: Path) -> Path:
        return tuple(self.links.get(link, link) for link in path)

    def __bool__(self) -> bool:
        return bool(self.tables or self.links)

    def inverse(self) -> "Renames":
        """New name -> old name, per section."""
        def flip(m: Mapping[str, str]) -> dict[str, str]:
            return {new: old for old, new in m.items()}

        return Renames(flip(self.tables), flip(self.links), flip(self.measures), flip(self.roles),
                       flip(self.reports), flip(self.variants))


# --- comparing two graphs around their changed edges ------------------------------------


@dataclass(frozen=True)
class PairChange:
    """How the paths from `source` to `target` differ; `complete` is False when listing stopped early."""

    source: str
    target: str
    added: tuple[Path, ...]
    removed: tuple[Path, ...]
    links: frozenset[str]  # links with a changed edge on an added or removed path
    complete: bool = True
    # per added/removed path: its edges that are new/gone (graph.Edge records: what made the path appear/vanish)
    added_by: Mapping[Path, tuple[Any, ...]] = field(default_factory=dict, compare=False, repr=False)
    removed_by: Mapping[Path, tuple[Any, ...]] = field(default_factory=dict, compare=False, repr=False)


def in_new_names(g, renames: Renames):
    """`g` (a graph of the old revision) with its tables and links spelled by their new names."""
    from modeldiff import graph

    if not renames:
        return g

    edges = [graph.Edge(renames.link(e.link), renames.table(e.src), renames.table(e.dst)) for e in g.edges]
    return graph.FilterGraph({renames.table(t) for t in g.tables}, edges)


def _walk(g, source: str, path: Path):
    """The edges of `g` a path of link names crosses from `source` (None if it is not a path of `g`)."""
    edges, here = [], source
    for link in path:
        step = next((e for e in g.out_edges(here) if e.link == link and e.dst != here), None)
        if step is None:
            return None
        edges.append(step)
        here = step.dst
    return edges


def changed_pairs(g_old, g_new, renames: Renames | None = None, sources: Iterable[str] | None = None,
                  targets: Iterable[str] | None = None) -> dict[tuple[str, str], PairChange]:
    """Pairs (S, X), S != X, whose sets of simple paths differ between the two graphs.

    Paths are named in the new revision's names. A pair can differ only when
    one of its paths crosses an edge present in one graph and not the other,
    so only pairs upstream/downstream of such an edge are compared; each is
    settled by `graph.path_delta` (equal path signatures answer at once).
    """
    from modeldiff import graph

    old = in_new_names(g_old, renames or Renames())
    gone, came = set(old.edges) - set(g_new.edges), set(g_new.edges) - set(old.edges)
    if not gone and not came:
        return {}
    src_filter = None if sources is None else set(sources)
    tgt_filter = None if targets is None else set(targets)
    candidates: set[tuple[str, str]] = set()
    for g, edges in ((old, gone), (g_new, came)):
        for edge in edges:
            ups = g.reaching(edge.src) if src_filter is None else g.reaching(edge.src) & src_filter
            downs = g.reach(edge.dst) if tgt_filter is None else g.reach(edge.dst) & tgt_filter
            candidates.update((s, x) for s in ups for x in downs if s != x)

    result: dict[tuple[str, str], PairChange] = {}
    for source, target in sorted(candidates):
        delta = graph.path_delta(old, g_new, source, target, limit=PATH_LIMIT, budget=PATH_BUDGET)
        if not delta.changed:
            continue
        added_by = {p: _culprits(g_new, source, p, came) for p in delta.added}
        removed_by = {p: _culprits(old, source, p, gone) for p in delta.removed}
        on_paths = frozenset(e.link for edges in (*added_by.values(), *removed_by.values()) for e in edges)
        if not on_paths:  # listing cut short: every changed link near the pair may be the cause
            on_paths = frozenset(e.link for e in gone | came
                                 if source in (old if e in gone else g_new).reaching(e.src))
        result[(source, target)] = PairChange(source, target, delta.added, delta.removed, on_paths, delta.complete,
                                              added_by, removed_by)
    return result


def _culprits(g, source: str, path: Path, changed_edges: set) -> tuple[Any, ...]:
    edges = _walk(g, source, path) or []
    return tuple(sorted({e for e in edges if e in changed_edges}))


# --- the analysis ------------------------------------------------------------------------


def _option_in_force(model: Model, variant: str, report: Report | None) -> tuple[str, VariantOption] | None:
    """(name, option) a computation gets from a variant: the report's choice, else the default."""
    v = model.variants.get(variant)
    if v is None:
        return None
    name = report.variant.get(variant, v.default) if report is not None else v.default
    option = v.options.get(name)
    return None if option is None else (name, option)


def setting_layers(model: Model, measure: Measure | None = None, report: Report | None = None) -> tuple[Overrides, ...]:
    """Override layers of one computation: each variant's option in force, the report's, the measure's."""
    from modeldiff import graph

    return graph.setting_layers(model, measure, report, variant_defaults=True)


def _layers_key(layers: tuple[Overrides, ...]) -> tuple:
    return tuple((o.via, tuple(sorted(o.flow.items()))) for o in layers)


class _Analysis:
    """Holds both revisions, their graphs per setting, and the path comparisons done so far."""

    def __init__(self, old: Model, new: Model, structural: list[Change]):
        self.old, self.new = old, new
        self.structural = structural
        self.renames = Renames.of(structural)
        self._graphs: dict[tuple, Any] = {}
        self._renamed: dict[int, Any] = {}
        self._pairs: dict[tuple, dict] = {}

    def graph(self, model: Model, layers: tuple[Overrides, ...] = ()):
        """The flow graph of `model` in the setting of `layers`, shared by every computation with that setting."""
        from modeldiff import graph

        layers_key = (id(model), _layers_key(layers))
        found = self._graphs.get(layers_key)
        if found is None:
            setting = graph.resolve_setting(model, *layers)
            key = (id(model), frozenset(setting.flows.items()))
            found = self._graphs.get(key)
            if found is None:
                found = self._graphs[key] = graph.flow_graph(model, setting)
            self._graphs[layers_key] = found
        return found

    def old_graph(self, layers: tuple[Overrides, ...] = ()):
        """The old revision's flow graph, in the new revision's names."""
        g = self.graph(self.old, layers)
        if id(g) not in self._renamed:
            self._renamed[id(g)] = (g, in_new_names(g, self.renames))  # keep g alive: ids stay unique
        return self._renamed[id(g)][1]

    def pairs(self, old_layers=(), new_layers=(), sources=None, targets=None) -> dict[tuple[str, str], PairChange]:
        g_old, g_new = self.old_graph(old_layers), self.graph(self.new, new_layers)
        everything = self._pairs.get((id(g_old), id(g_new), None, None))
        if everything is not None:  # filter what is known rather than walk again
            return {k: v for k, v in everything.items()
                    if (sources is None or k[0] in sources) and (targets is None or k[1] in targets)}
        key = (id(g_old), id(g_new), None if sources is None else frozenset(sources),
               None if targets is None else frozenset(targets))
        if key not in self._pairs:
            self._pairs[key] = changed_pairs(g_old, g_new, None, sources, targets)
        return self._pairs[key]


def _path_text(paths: Iterable[Path]) -> str:
    return "; ".join(" / ".join(p) for p in paths)


def _derived_graph_changes(a: _Analysis) -> list[Change]:
    """path.added / path.removed and ambiguity.* in the default setting (the model's own links)."""
    changes: list[Change] = []
    g_old, g_new = a.old_graph(), a.graph(a.new)
    if not a.old.tables or not a.new.tables:
        return _whole_model_ambiguities(g_new)
    for (source, target), pc in sorted(a.pairs().items()):
        subject = f"paths.{source}->{target}"
        details = {"links": sorted(pc.links)} | ({} if pc.complete else {"complete": False})
        if pc.added:
            changes.append(Change(
                "path.added", subject, "numbers",
                f"A filter on {source} now reaches {target} along {_plural(len(pc.added), 'new path')} "
                f"({_path_text(pc.added)}): numbers on {target} move when filtered or grouped by {source}.",
                before=None, after=[list(p) for p in pc.added], details=details))
        if pc.removed:
            changes.append(Change(
                "path.removed", subject, "numbers",
                f"A filter on {source} no longer reaches {target} along {_path_text(pc.removed)}: "
                f"numbers on {target} move when filtered or grouped by {source}.",
                before=[list(p) for p in pc.removed], after=None, details=details))
        was, now = g_old.witness(source, target), g_new.witness(source, target)
        if now and not was:
            changes.append(Change(
                "ambiguity.introduced", subject, "breaking",
                f"{source} now reaches {target} along more than one route ({' / '.join(now[0])} and {' / '.join(now[1])}); "
                f"what {target} shows under a filter on {source} then depends on the data along each route. "
                f"Put one link on standby or make a flow one-way so a single route remains.",
                before=None, after=[list(p) for p in now], details=details))
        elif was and not now:
            changes.append(Change(
                "ambiguity.resolved", subject, "numbers",
                f"{source} reaches {target} along a single route again (it had {' / '.join(was[0])} and {' / '.join(was[1])}).",
                before=[list(p) for p in was], after=None, details=details))
    return changes


def _whole_model_ambiguities(g_new) -> list[Change]:
    """A model added (or removed) whole: every path is new (or gone), so listing them tells nothing.

    Only the new model's ambiguous pairs are reported, found without listing paths.
    """
    changes = []
    for source, target, first, second in g_new.ambiguous_pairs():
        changes.append(Change(
            "ambiguity.introduced", f"paths.{source}->{target}", "breaking",
            f"{source} reaches {target} along more than one route ({' / '.join(first)} and {' / '.join(second)}) in "
            f"this new model; what {target} shows under a filter on {source} then depends on the data along each "
            f"route. Put one link on standby or make a flow one-way so a single route remains.",
            before=None, after=[list(first), list(second)], details={"whole_model": True}))
    return changes


# --- security -------------------------------------------------------------------------------


def _path_start(sec, filtered: Iterable[str], path: Path, table: str) -> str:
    """The filtered table a role's restriction of `table` starts from (along `path`)."""
    if not path:
        return table
    for source in sorted(filtered):
        if sec.is_path(source, path, table):
            return source
    return table


def _security_changes(a: _Analysis) -> list[Change]:
    """security.exposed / tightened / rerouted, per role and table, over the default setting's security graph."""
    from modeldiff import graph

    changes: list[Change] = []
    old_roles = {a.renames.roles.get(name, name): role for name, role in a.old.roles.items()}
    s_old, s_new = in_new_names(graph.security_graph(a.old), a.renames), graph.security_graph(a.new)
    same_edges = set(s_old.edges) == set(s_new.edges)
    same_graph = same_edges and s_old.tables == s_new.tables
    for name in sorted(set(old_roles) & set(a.new.roles)):
        old_filters = sorted(a.renames.table(t) for t in old_roles[name].filters)
        new_filters = sorted(a.new.roles[name].filters)
        if same_graph and old_filters == new_filters:
            continue  # the same filtered tables over the same graph: the same rows restricted, along the same paths
        # filters on tables that do not exist are ignored (a broken reference says it)
        before = _restricted(s_old, old_filters)
        after = _restricted(s_new, new_filters)
        for table in sorted(set(before) - set(after)):
            if table not in a.new.tables:
                continue  # the table itself is gone: nothing of it can be seen
            start = _path_start(s_old, old_filters, before[table], table)
            changes.append(Change(
                "security.exposed", f"roles.{name}.tables.{table}", "breaking",
                f"SECURITY: role {name} no longer restricts {table}: rows of {table} that were hidden from its members "
                f"become visible (it was restricted {_restriction_text(before[table], start)}). "
                f"This can expose data a role must never see; the organisation's own security review decides whether "
                f"it is acceptable.",
                before=list(before[table]), after=None, details={"source": start}))
        for table in sorted(set(after) - set(before)):
            start = _path_start(s_new, new_filters, after[table], table)
            changes.append(Change(
                "security.tightened", f"roles.{name}.tables.{table}", "numbers",
                f"Role {name} now restricts {table} ({_restriction_text(after[table], start)}): "
                f"its members see fewer rows of {table}.",
                before=None, after=list(after[table]), details={"source": start}))
        if same_edges and old_filters == new_filters:
            continue  # the same filtered tables over the same graph reach along the same paths
        for table in sorted(set(before) & set(after)):
            old_paths = _role_paths(s_old, old_filters, table)
            new_paths = _role_paths(s_new, new_filters, table)
            if old_paths != new_paths:
                start = _path_start(s_new, new_filters, after[table], table)
                changes.append(Change(
                    "security.rerouted", f"roles.{name}.tables.{table}", "numbers",
                    f"Role {name} still restricts {table}, but along different paths "
                    f"(before: {_role_paths_text(old_paths)}; after: {_role_paths_text(new_paths)}); "
                    f"which rows its members see may change.",
                    before=[list(p) for p in sorted(old_paths)], after=[list(p) for p in sorted(new_paths)],
                    details={"source": start}))
    return changes


def _restriction_text(path: Path, start: str) -> str:
    return f"via {' / '.join(path)} from its filter on {start}" if path else "by its own filter on it"


def _restricted(sec, filtered: list[str]) -> dict[str, Path]:
    from modeldiff import graph
    from modeldiff.model import Role

    return graph.role_restricted(Model("", {}), Role("", {t: "" for t in filtered}), sec)


def _role_paths(sec, filtered: list[str], table: str) -> frozenset[Path]:
    out: set[Path] = set()
    for source in filtered:
        if source == table:
            out.add(())
        elif source in sec.tables and table in sec.tables:
            out.update(sec.paths(source, table, limit=PATH_LIMIT))
    return frozenset(out)


def _role_paths_text(paths) -> str:
    return "; ".join(" / ".join(p) or "own filter" for p in sorted(paths)) or "none"


def _reference_changes(old_findings: Iterable[Finding], new_findings: Iterable[Finding],
                       structural: Iterable[Change] = ()) -> list[Change]:
    from modeldiff import diff

    return diff.reference_changes(old_findings, new_findings, structural)


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _mentions(value: Any, names: frozenset[str]) -> bool:
    """Whether a JSON-ready before/after value names any of `names` (as a string or a key)."""
    if isinstance(value, str):
        return value in names
    if isinstance(value, Mapping):
        return any(k in names or _mentions(v, names) for k, v in value.items())
    if isinstance(value, (list, tuple)):
        return any(_mentions(v, names) for v in value)
    return False


# --- impacts ------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Computation:
    """One evaluation of a measure: its old and new override layers and the changes to its setting."""

    old_layers: tuple[Overrides, ...]
    new_layers: tuple[Overrides, ...]
    setting_changes: tuple[Change, ...]
    old_wheres: Mapping[str, tuple[str, ...]]  # variant options' `where` in force, by table (new names)
    new_wheres: Mapping[str, tuple[str, ...]]


class _Impacts:
    """Builds the impact lists once every change has its id."""

    def __init__(self, a: _Analysis, changes: list[Change]):
        from modeldiff import sql

        self.a = a
        self.changes = changes
        self.by_id = {c.id: c for c in changes}
        self.by_subject: dict[str, list[Change]] = {}
        for change in changes:
            self.by_subject.setdefault(change.subject, []).append(change)
        self.measure_deps: Mapping[str, frozenset[str]] = sql.derived_measure_refs(a.new.measures)
        self.back = a.renames.inverse()
        self._twin_index: tuple[dict, dict] | None = None  # see _twins_of
        self._cause_cache: dict[tuple, tuple[int, str] | None] = {}
        self._security = None
        self._own_cache: dict[str, list[Reason]] = {}
        self.key_changes = [c for c in changes if c.kind in ("link.key_switched", "link.cardinality_changed")]
        self.filter_changes = [c for c in changes if c.kind == "role.filter_changed"]
        self._reach_cache: dict[str, dict[str, list[str]]] = {}
        # changes of a table itself or of its columns that can move a measure living on it, by table
        self.table_changes: dict[str, list[Change]] = {}
        self.security_by_table: dict[str, list[Change]] = {}
        for change in changes:
            parts = change.subject.split(".")
            if (change.kind.startswith("column.") and change.severity != "safe" and len(parts) == 4) or \
                    (change.kind in ("table.key_changed", "table.history_changed", "table.kind_changed") and len(parts) == 2):
                self.table_changes.setdefault(parts[1], []).append(change)
            elif change.kind.startswith("security."):
                self.security_by_table.setdefault(parts[3], []).append(change)
        self._link_edges: dict[int, tuple[Any, dict[str, list]]] = {}
        self._plain_computations: dict[str | None, _Computation] = {}
        # measures with a change of their own setting (`computation` cannot share the plain setting with them)
        self._own_setting_changes = {c.subject.split(".", 1)[1] for c in changes if c.kind == "measure.overrides_changed"}
        self._path_cache: dict[tuple, tuple[_Computation, list[Reason]]] = {}

    # -- helpers

    def _edges_of(self, g, link: str) -> list:
        if id(g) not in self._link_edges:
            by_link: dict[str, list] = {}
            for edge in g.edges:
                by_link.setdefault(edge.link, []).append(edge)
            self._link_edges[id(g)] = (g, by_link)
        return self._link_edges[id(g)][1].get(link, [])

    def old_name(self, section: str, name: str) -> str:
        return getattr(self.back, section).get(name, name)

    def kinds(self, prefix: str) -> list[Change]:
        return [c for c in self.changes if c.kind.startswith(prefix)]

    def _twins_of(self, link: str) -> frozenset[str]:
        """The links (new names) joining the same two tables as `link` in either revision, `link` included."""
        if self._twin_index is None:
            self._twin_index = self._twin_links()
        by_tables, ends = self._twin_index
        keys = ends.get(link)
        return frozenset(t for key in keys for t in by_tables[key]) if keys else frozenset({link})

    def _twin_links(self) -> tuple[dict[frozenset[str], set[str]], dict[str, set[frozenset[str]]]]:
        """(the links (new names) by the pair of tables they join, the pairs each link joins), over both revisions."""
        by_tables: dict[frozenset[str], set[str]] = {}
        ends: dict[str, set[frozenset[str]]] = {}
        renames, new_links = self.a.renames, self.a.new.links
        for name, link in new_links.items():
            key = frozenset((link.from_table, link.to_table))
            by_tables.setdefault(key, set()).add(name)
            ends[name] = {key}
        for old_name, link in self.a.old.links.items():
            name = renames.link(old_name)
            if new_links.get(name) is link and not renames.tables:
                continue  # the very record under the same name: counted above
            key = frozenset((renames.table(link.from_table), renames.table(link.to_table)))
            by_tables.setdefault(key, set()).add(name)
            ends.setdefault(name, set()).add(key)
        return by_tables, ends

    def _link_ends(self, link: str) -> set[str]:
        out: set[str] = set()
        if link in self.a.new.links:
            out |= self.a.new.links[link].tables
        old = self.a.old.links.get(next((o for o, n in self.a.renames.links.items() if n == link), link))
        if old is not None:
            out |= {self.a.renames.table(t) for t in old.tables}
        return out

    def edge_cause(self, edge, came: bool, comp: "_Computation | None") -> tuple[int, str] | None:
        """(rank, change id) of the change that made `edge` appear (`came`) or vanish in one setting.

        A lower rank is more telling.
        """
        setting_changes = comp.setting_changes if comp is not None else ()
        key = (edge, came, tuple(c.id for c in setting_changes), _layers_key(comp.old_layers) if setting_changes else ())
        if key not in self._cause_cache:
            self._cause_cache[key] = self._edge_cause(edge, came, comp)
        return self._cause_cache[key]

    def _moved_by_model(self, edge, came: bool, comp: _Computation) -> bool:
        """Whether the new model alone, read in the old setting, adds (`came`) or drops the edge."""
        a = self.a
        present = edge in set(self._edges_of(a.graph(a.new, comp.old_layers), edge.link))
        return present if came else not present

    def _edge_cause(self, edge, came: bool, comp: "_Computation | None") -> tuple[int, str] | None:
        link = edge.link
        setting_changes = comp.setting_changes if comp is not None else ()
        own = self.by_subject.get(f"links.{link}", [])
        edge_changes = sorted((c for c in own if c.kind in EDGE_KINDS), key=lambda c: EDGE_KINDS.index(c.kind))
        if edge_changes and (not setting_changes or self._moved_by_model(edge, came, comp)):
            return 0, edge_changes[0].id
        twins = self._twins_of(link)
        for change in setting_changes:
            if _mentions(change.before, twins) or _mentions(change.after, twins):
                return 1, change.id
        for twin in sorted(twins - {link}):
            for change in self.by_subject.get(f"links.{twin}", []):
                if change.kind in EDGE_KINDS:
                    return 2, change.id
        for table in sorted(self._link_ends(link)):
            for change in self.by_subject.get(f"tables.{table}", []) + self.by_subject.get(
                    f"tables.{self.old_name('tables', table)}", []):
                if change.kind in ("table.added", "table.removed"):
                    return 3, change.id
        for change in own:
            if change.severity != "safe":
                return 4, change.id
        if setting_changes:
            return 5, setting_changes[0].id
        return None

    def cause(self, edges: Iterable, came: bool, comp: "_Computation | None", pair: tuple[str, str]) -> str:
        """The change id to blame for paths whose new (`came`) or gone edges are `edges`, in the setting of `comp`."""
        found = [c for c in (self.edge_cause(e, came, comp) for e in sorted(edges)) if c is not None]
        if found:
            return min(found)[1]
        for change in self.by_subject.get(f"paths.{pair[0]}->{pair[1]}", ()):
            return change.id
        return next((c.id for c in self.changes if c.severity != "safe"), self.changes[0].id if self.changes else "")

    # -- reasons that do not depend on the setting: definition, columns and tables read, role rows

    def own_reasons(self, name: str) -> list[Reason]:
        if name not in self._own_cache:
            self._own_cache[name] = self._own_reasons(name)
        return self._own_cache[name]

    def _own_reasons(self, name: str) -> list[Reason]:
        m = self.a.new.measures[name]
        reasons = []
        for change in self.by_subject.get(f"measures.{name}", ()):
            # `via`/`flow` act only through the paths they open or close: see path_reasons
            if change.kind in ("measure.logic_changed", "reference.broken"):
                reasons.append(Reason(change.id, change.message))
        if m.table is None:
            return reasons
        homes = {m.table, self.old_name("tables", m.table)}
        nearby = [c for home in sorted(homes) for c in self.table_changes.get(home, ())]
        read = self._columns_read(m) if nearby else set()
        for change in nearby:
            parts = change.subject.split(".")
            if change.kind.startswith("column."):
                if {parts[3].lower(), str(change.after).lower(), str(change.before).lower()} & read:
                    reasons.append(Reason(change.id, change.message))
            else:
                reasons.append(Reason(change.id, change.message))
        for change in self.security_by_table.get(m.table, ()):
            role = change.subject.split(".")[1]
            reasons.append(Reason(change.id, f"The rows role {role} may see of {m.table} changed: {change.message}",
                                  source=change.details.get("source")))
        for change in self.filter_changes:
            role = change.subject.split(".")[1]
            tables = self._filter_reach(change)
            if m.table in tables:
                reasons.append(Reason(change.id, f"Role {role}'s filter on {', '.join(tables[m.table])} changed, so the "
                                                 f"rows its members see of {m.table} may change.",
                                      source=tables[m.table][0]))
        return reasons

    @staticmethod
    def _columns_read(m: Measure) -> set[str]:
        from modeldiff import sql

        try:
            read = {c.lower() for _, c in sql.column_refs(m.expr)}
            if m.where:
                read |= {c.lower() for _, c in sql.column_refs(m.where)}
        except sql.SqlError:
            return set()
        return read

    def _filter_reach(self, change: Change) -> dict[str, list[str]]:
        """Tables (new names) that the changed filters of a role restrict in either revision -> those filters."""
        from modeldiff import graph

        if change.id in self._reach_cache:
            return self._reach_cache[change.id]
        if self._security is None:
            self._security = (in_new_names(graph.security_graph(self.a.old), self.a.renames),
                              graph.security_graph(self.a.new))
        changed = sorted(change.details.get("tables") or set(change.before or {}) | set(change.after or {}))
        out: dict[str, list[str]] = {}
        for table in changed:
            for sec in self._security:
                for reached in sec.reach(self.a.renames.table(table)):
                    if table not in out.setdefault(reached, []):
                        out[reached].append(table)
        self._reach_cache[change.id] = out
        return out

    # -- reasons that depend on the setting: paths into the measure's table, keys on them, options' `where`

    def path_reasons(self, home: str, comp: _Computation, sources: set[str] | None = None) -> list[Reason]:
        """Reasons from the paths into `home` in the setting of `comp` (shared by the measures with both)."""
        key = (home, id(comp), None if sources is None else frozenset(sources))
        found = self._path_cache.get(key)
        if found is None:
            found = self._path_cache[key] = (comp, self._path_reasons(home, comp, sources))  # comp kept: ids stay unique
        return list(found[1])

    def _path_reasons(self, home: str, comp: _Computation, sources: set[str] | None = None) -> list[Reason]:
        a = self.a
        reasons = []
        targets = None if not comp.new_layers and not comp.old_layers else {home}
        pairs = a.pairs(comp.old_layers, comp.new_layers, sources=sources, targets=targets)
        for (source, target), pc in sorted(pairs.items()):
            if target != home:
                continue
            groups: dict[str, tuple[list[Path], list[Path]]] = {}
            for p in pc.added:
                groups.setdefault(self.cause(pc.added_by.get(p, ()), True, comp, (source, target)),
                                  ([], []))[0].append(p)
            for p in pc.removed:
                groups.setdefault(self.cause(pc.removed_by.get(p, ()), False, comp, (source, target)),
                                  ([], []))[1].append(p)
            if not groups:  # the listing was cut short before a difference showed
                near = [e for link in sorted(pc.links) for e in self._edges_of(a.graph(a.new, comp.new_layers), link)]
                groups[self.cause(near, True, comp, (source, target))] = ([], [])
            for change_id, (added, removed) in sorted(groups.items(), key=lambda kv: _id_order(kv[0])):
                reasons.append(Reason(change_id, f"Paths from {source} into {home} changed: numbers move when "
                                                 f"filtered or grouped by {source}.",
                                      source=source, paths_added=tuple(added), paths_removed=tuple(removed)))
        g_new = a.graph(a.new, comp.new_layers)
        for change in self.key_changes:
            link = change.subject.split(".", 1)[1]
            for edge in self._edges_of(g_new, link):
                if home not in g_new.reach(edge.dst):
                    continue
                starts = [edge.src] if sources is None else sorted(s for s in sources if edge.src in g_new.reach(s))
                if starts:
                    reasons.append(Reason(change.id, f"Link {link} lies on a path from {starts[0]} into {home} and "
                                                     f"{change.message[0].lower()}{change.message[1:]}",
                                          source=starts[0]))
                    break
        reasons += self.where_reasons(home, comp)
        return reasons

    def where_reasons(self, home: str, comp: _Computation) -> list[Reason]:
        """A variant option's `where` in force changed on a table whose filter reaches `home`."""
        from modeldiff import sql

        reasons = []
        g_old, g_new = self.a.old_graph(comp.old_layers), self.a.graph(self.a.new, comp.new_layers)
        for table in sorted(set(comp.old_wheres) | set(comp.new_wheres)):
            before, after = comp.old_wheres.get(table, ()), comp.new_wheres.get(table, ())
            if len(before) == len(after) and all(sql.same_logic(x, y, table) if x != y else True
                                                 for x, y in zip(before, after)):
                continue
            if home not in g_new.reach(table) and home not in g_old.reach(table):
                continue
            change_id = next((c.id for c in comp.setting_changes if c.kind != "measure.overrides_changed"),
                             comp.setting_changes[0].id if comp.setting_changes else self.cause((), True, None, (table, home)))
            reasons.append(Reason(change_id, f"The variant option's `where` on {table} in force changed: numbers on "
                                             f"{home} move.", source=table))
        return reasons

    def computation(self, measure: Measure, report: Report | None = None) -> _Computation | None:
        """The old and new settings of a measure (inside `report` when given), or None when it is new."""
        a = self.a
        if report is None and measure.overrides is NO_OVERRIDES:  # the common case, without the general path's lists
            plain = self._plain_computations.get(None)
            if plain is not None and measure.name not in self._own_setting_changes:
                old_measure = a.old.measures.get(self.back.measures.get(measure.name, measure.name))
                if old_measure is None:
                    return None
                if old_measure.overrides is NO_OVERRIDES:
                    return plain
        old_measure = a.old.measures.get(self.old_name("measures", measure.name))
        old_report = None
        if report is not None:
            old_report = a.old.reports.get(self.old_name("reports", report.name))
            if old_report is None:
                return None
        if old_measure is None:
            return None
        changes: list[Change] = [c for c in self.by_subject.get(f"measures.{measure.name}", ())
                                 if c.kind == "measure.overrides_changed"]
        plain = not changes and not measure.overrides and not old_measure.overrides
        if plain:  # no overrides of its own: the setting of every such measure (in this report) is the same
            key = None if report is None else report.name
            found = self._plain_computations.get(key)
            if found is None:
                found = self._plain_computations[key] = self._computation(measure, report, old_measure, old_report, [])
            return found
        return self._computation(measure, report, old_measure, old_report, changes)

    def _computation(self, measure: Measure, report: Report | None, old_measure: Measure, old_report: Report | None,
                     changes: list[Change]) -> _Computation:
        a = self.a
        if report is not None:
            changes += [c for c in self.by_subject.get(f"reports.{report.name}", ()) if c.kind == "report.changed"]
        old_options = self._options(a.old, old_report, old=True)
        new_options = self._options(a.new, report, old=False)
        chosen = set(report.variant) if report is not None else set()
        if old_report is not None:
            chosen |= {a.renames.variants.get(v, v) for v in old_report.variant}
        old_variants = {a.renames.variants.get(v, v) for v in a.old.variants}
        for variant in sorted(old_variants | set(a.new.variants)):
            in_force = {old_options.get(variant, ("",))[0], new_options.get(variant, ("",))[0]} - {""}
            # the variant itself (default, added, removed) matters where no option is chosen
            subjects = [] if variant in chosen else [f"variants.{variant}"]
            subjects += [f"variants.{variant}.options.{o}" for o in sorted(in_force)]
            for subject in subjects:
                changes += [c for c in self.by_subject.get(subject, ()) if c.kind in SETTING_KINDS and c.severity != "safe"]
        return _Computation(setting_layers(a.old, old_measure, old_report), setting_layers(a.new, measure, report),
                            tuple(sorted({c.id: c for c in changes}.values(), key=lambda c: _id_order(c.id))),
                            _wheres(old_options, a.renames), _wheres(new_options, None))

    def _options(self, model: Model, report: Report | None, old: bool) -> dict[str, tuple[str, VariantOption]]:
        """Variant (new name) -> (option name, option) in force."""
        out = {}
        for name in model.variants:
            found = _option_in_force(model, name, report)
            if found is not None:
                out[self.a.renames.variants.get(name, name) if old else name] = found
        return out

    # -- the three lists

    def measures(self) -> list[Impact]:
        a = self.a
        direct: dict[str, list[Reason]] = {}
        named = {c.subject.split(".")[1] for c in self.changes if c.subject.startswith("measures.")}
        loud = self._loud_tables()
        back_measures, back_tables, old_measures = self.back.measures, self.back.tables, a.old.measures
        plain_paths: dict[str, list[Reason]] = {}  # measure's table -> its path reasons in the plain setting
        own = named | self._own_setting_changes
        quiet: dict[str, bool] = {}  # measure's table -> no change touches it (in either revision's name)
        for name, m in a.new.measures.items():
            table = m.table
            if table is not None and m.overrides is NO_OVERRIDES and name not in own and (
                    quiet[table] if table in quiet else
                    quiet.setdefault(table, table not in loud and back_tables.get(table, table) not in loud)):
                # the common case, as below without the per-measure steps: the plain setting, no reasons of its own
                old_measure = old_measures.get(back_measures.get(name, name) if back_measures else name)
                if old_measure is None:
                    continue  # a new measure had no numbers to move
                if old_measure.overrides is NO_OVERRIDES:
                    found = plain_paths.get(table)
                    if found is None:
                        found = plain_paths[table] = self.path_reasons(table, self.computation(m))
                    if found:
                        direct[name] = list(found)
                    continue
            comp = self.computation(m)
            if comp is None:
                continue  # a new measure had no numbers to move
            if name in named or m.table is None or m.table in loud or self.old_name("tables", m.table) in loud:
                reasons = list(self.own_reasons(name))
            else:
                reasons = []  # no change names it or touches its table: `own_reasons` would find nothing
            if m.table is not None:
                reasons += self.path_reasons(m.table, comp)
            if reasons:
                direct[name] = reasons
        # derived measures inherit the reasons of the measures they use: only those that use an impacted one
        result: dict[str, list[Reason]] = {k: list(v) for k, v in direct.items()}
        for name in sorted(self._users_of(direct)):
            m = a.new.measures[name]
            if m.table is not None or self.computation(m) is None:
                continue
            for dep in self.dependencies(name):
                for reason in direct.get(dep, ()):
                    result.setdefault(name, []).append(_via(reason, dep))
        return [self._impact(name, reasons) for name, reasons in sorted(result.items())]

    def _loud_tables(self) -> set[str]:
        """Tables whose measures `own_reasons` may give a reason: changed, re-secured or under a changed role filter."""
        loud = set(self.table_changes) | set(self.security_by_table)
        for change in self.filter_changes:
            loud |= set(self._filter_reach(change))
        return loud

    def _users_of(self, used: Iterable[str]) -> set[str]:
        """Derived measures that use any of `used`, directly or through other derived measures."""
        users: dict[str, list[str]] = {}
        for name, deps in self.measure_deps.items():
            for dep in deps:
                users.setdefault(dep, []).append(name)
        found: set[str] = set()
        todo = [user for name in used for user in users.get(name, ())]
        while todo:
            name = todo.pop()
            if name not in found:
                found.add(name)
                todo.extend(users.get(name, ()))
        return found

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
                if change.severity != "safe" and change.kind != "role.added":
                    reasons.append(Reason(change.id, change.message))
            for change in self.kinds("security."):
                parts = change.subject.split(".")
                if parts[1] != name:
                    continue
                table = parts[3]
                {"security.exposed": exposed, "security.tightened": tightened, "security.rerouted": rerouted}[change.kind].append(table)
                reasons.append(Reason(change.id, change.message, source=change.details.get("source")))
            if reasons:
                severity = worst(self.by_id[r.change].severity for r in reasons)
                out.append(Impact(name, severity, tuple(reasons), tuple(exposed), tuple(tightened), tuple(rerouted)))
        return out

    def reports(self) -> list[Impact]:
        a = self.a
        out = []
        for name, report in sorted(a.new.reports.items()):
            old_report = a.old.reports.get(self.old_name("reports", name))
            if old_report is None:
                continue  # a new report had no numbers to move
            reasons: list[Reason] = []
            for change in self.by_subject.get(f"reports.{name}", ()):
                if change.severity == "safe" or change.kind in ("report.added", "report.renamed"):
                    continue
                if change.kind == "report.changed" and set(change.before or {}) <= _SETTING_FIELDS:
                    continue  # only its setting changed: see the paths below
                reasons.append(Reason(change.id, change.message))
            for change in self.kinds("measure."):  # a measure it shows was removed or renamed
                shown = change.subject.split(".", 1)[1]
                if change.kind == "measure.removed" and shown in report.measures:
                    reasons.append(Reason(change.id, change.message))
                elif change.kind == "measure.renamed" and change.severity != "safe" and shown in report.measures:
                    reasons.append(Reason(change.id, change.message))
            sources = self.report_sources(report)
            for measure_name in report.measures:
                if measure_name not in a.new.measures:
                    continue
                for base in [measure_name] + self.dependencies(measure_name):
                    bm = a.new.measures.get(base)
                    if bm is None:
                        continue
                    for reason in self.own_reasons(base):
                        role = self._reason_role(reason)
                        if role is not None and role != report.role:
                            continue  # role rows matter only to a report seen as that role
                        reasons.append(_via(reason, base))
                    comp = self.computation(bm, report)
                    if bm.table is None or comp is None:
                        continue
                    if sources:
                        reasons += [_via(r, base) for r in self.path_reasons(bm.table, comp, sources)]
                    else:
                        reasons += [_via(r, base) for r in self.where_reasons(bm.table, comp)]
            for item in report.by + tuple(report.where):
                table, _, column = item.partition(".")
                for change in self.changes:
                    if change.kind.startswith(("column.", "table.")) and change.severity != "safe" and \
                            (change.subject == f"tables.{table}.columns.{column}" or change.subject == f"tables.{table}"):
                        reasons.append(Reason(change.id, change.message))
            for variant, (option, _) in self._options(a.new, report, old=False).items():
                for change in self.by_subject.get(f"variants.{variant}", []) + \
                        self.by_subject.get(f"variants.{variant}.options.{option}", []):
                    if change.severity == "breaking":
                        reasons.append(Reason(change.id, change.message))
            if reasons:
                out.append(self._impact(name, reasons))
        return out

    def _reason_role(self, reason: Reason) -> str | None:
        change = self.by_id.get(reason.change)
        if change is None or not (change.kind.startswith("security.") or change.kind == "role.filter_changed"):
            return None
        return change.subject.split(".")[1]

    def report_sources(self, report: Report) -> set[str]:
        tables = {item.partition(".")[0] for item in report.by} | set(report.where)
        for _, (_, option) in self._options(self.a.new, report, old=False).items():
            tables |= set(option.where)
        return {t for t in tables if t in self.a.new.tables}

    def _impact(self, name: str, reasons: list[Reason]) -> Impact:
        reasons = sorted(_dedupe(reasons), key=lambda r: (_id_order(r.change), r.source or "", r.paths_added,
                                                          r.paths_removed))
        severity = worst(self.by_id[r.change].severity for r in reasons if r.change in self.by_id)
        return Impact(name, "numbers" if severity == "safe" else severity, tuple(reasons))


def _wheres(options: Mapping[str, tuple[str, VariantOption]], renames: Renames | None) -> dict[str, tuple[str, ...]]:
    out: dict[str, list[str]] = {}
    for variant in sorted(options):
        for table, predicate in sorted(options[variant][1].where.items()):
            out.setdefault(renames.table(table) if renames else table, []).append(predicate)
    return {t: tuple(p) for t, p in out.items()}


def _id_order(change_id: str) -> tuple[int, str]:
    digits = change_id[1:]
    return (int(digits), change_id) if digits.isdigit() else (0, change_id)


def _via(reason: Reason, measure: str) -> Reason:
    return reason if reason.via is not None else replace(reason, via=measure)


def _dedupe(reasons: list[Reason]) -> list[Reason]:
    seen, out = set(), []
    for reason in reasons:
        key = (reason.change, reason.source, reason.paths_added, reason.paths_removed)
        if key not in seen:
            seen.add(key)
            out.append(reason)
    return out


# --- entry point ------------------------------------------------------------------------------


def analyse(old: Model, new: Model, old_findings: Iterable[Finding] = (), new_findings: Iterable[Finding] = (), *,
            old_checked: Iterable[Finding] | None = None, new_checked: Iterable[Finding] | None = None) -> DiffResult:
    """Everything `modeldiff diff` reports about two revisions.

    `old_checked`/`new_checked`: the revisions' findings from
    `check.check_model(model, findings, graph_rules=False)` when already
    known (compare.py keeps them in its cache); computed here otherwise.
    """
    from modeldiff.load import paused_gc

    with paused_gc():  # many small records, no cycles: the collector would only walk both models again and again
        return _analyse(old, new, old_findings, new_findings, old_checked, new_checked)


def _analyse(old: Model, new: Model, old_findings: Iterable[Finding], new_findings: Iterable[Finding],
             old_checked: Iterable[Finding] | None, new_checked: Iterable[Finding] | None) -> DiffResult:
    from modeldiff import check, diff

    structural = diff.diff_models(old, new)
    a = _Analysis(old, new, structural)
    if old_checked is None and new_checked is None:  # only broken references are read from the old side
        old_checked, new_checked = check.check_new_side(old, old_findings, new, new_findings)
    if old_checked is None:
        old_checked = check.check_model(old, old_findings, graph_rules=False)
    if new_checked is None:
        new_checked = check.check_model(new, new_findings, graph_rules=False)
    derived = _derived_graph_changes(a) + _security_changes(a) + _reference_changes(old_checked, new_checked, structural)
    derived += diff.warning_changes(old_checked, new_checked, structural, new)
    changes = sorted(structural + derived, key=Change.sort_key)
    changes = [replace(c, id=f"c{i}") for i, c in enumerate(changes, 1)]
    impacts = _Impacts(a, changes)
    new_errors = tuple(f for f in new_checked if f.severity == "error")
    return DiffResult(old, new, tuple(changes), tuple(impacts.measures()), tuple(impacts.roles()),
                      tuple(impacts.reports()), new_errors)
