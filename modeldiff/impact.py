"""Derived changes and impacts: what two revisions' graphs say about numbers and visible rows.

`analyse(old, new)` runs the structural diff, compares the filter graphs of
both revisions around what changed, and lists the measures, roles and reports
that could return different numbers, each with reasons naming the change, the
source table and the paths added and removed, or a route through the changed
edge (changes.md, "Impact"; docs/impact.md).

Impact is decided by reach, not by simple paths: a changed edge U -> W of a
computation's setting (in one graph only, or its link's columns switched)
moves every table reachable from W under a filter on any table reaching U,
old graph or new. Work goes outward from the changed edges: they are found
once per distinct setting, and only reach sets of their ends are computed.
The old graph is first read in the new revision's names, so a renamed table
or link is the same node or edge in both graphs and changes nothing.

Settings (DEVELOPERS.md, "Decisions where the spec is silent"): a measure on
its own is evaluated in the model plus every variant's default option plus
its own overrides (a derived measure's, outermost first, before those of the
base measures it reaches); inside a report, the variant options the report
chooses (the default for the others), the report's overrides, then the
measures'.

Further decisions:
- A report without a role is evaluated with no role: what a role may see
  moves it only through a report that has that role. A measure on its own
  counts every role.
- A derived measure whose own overrides changed is listed ("any override on
  the way changed"); a base measure's overrides act through the edges they
  change.
- A changed edge is blamed on its link's own change when the new model alone,
  read in the old setting, moves it (the key switch for a switched edge);
  else on the setting change naming the link (or a link joining the same
  tables); else a change of a link joining the same tables; else the removal
  or addition of one of its tables.
- A measure or report that did not exist before has no impact: no number of
  it moved. A model added or removed whole lists its ambiguities, not every
  path.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping

from modeldiff import conditions
from modeldiff.changes import EXIT_CODES, Change, id_order, subject_item, subject_member, worst
from modeldiff.renames import Renames
from modeldiff.model import NO_OVERRIDES, Finding, Measure, Model, Overrides, Report, VariantOption, layers_key

PATH_LIMIT = 64  # paths listed per pair when telling what was added or removed
PATH_BUDGET = 200_000  # search steps per pair listing; beyond it the pair counts as changed (conservative)
CHAIN_LIMIT = 10_000  # ways from one derived measure down to its base measures that are followed

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
    route: tuple[str, ...] = ()  # tables of a short route through the changed edge, where no simple path changed


@dataclass(frozen=True)
class Impact:
    """One impacted measure, role or report, with its severity and reasons."""

    name: str
    severity: str
    reasons: tuple[Reason, ...]
    exposed: tuple[str, ...] = ()  # roles only
    tightened: tuple[str, ...] = ()
    rerouted: tuple[str, ...] = ()
    # what the summary by cause counts, kept here so a cached comparison need not read the model again:
    home: str | None = None  # a measure's table ("" for a derived measure, and for a report); None: not recorded
    owner: str | None = None  # a measure's or report's owner
    home_kind: str | None = None  # the kind of a measure's table (fact, dimension, ...)


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

    edges = [graph.Edge(renames.link_name(e.link), renames.table_name(e.src), renames.table_name(e.dst)) for e in g.edges]
    return graph.FilterGraph({renames.table_name(t) for t in g.tables}, edges,
                             {renames.link_name(link) for link in g.both_ways})


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


class _Analysis:
    """Holds both revisions, their graphs per setting, and the path comparisons done so far."""

    def __init__(self, old: Model, new: Model, structural: list[Change]):
        self.old, self.new = old, new
        self.structural = structural
        self.renames = Renames.of(structural)
        self._graphs: dict[tuple, Any] = {}
        self._renamed: dict[int, Any] = {}
        self._pairs: dict[tuple, dict] = {}
        self._security: tuple[Any, Any] | None = None

    def graph(self, model: Model, layers: tuple[Overrides, ...] = ()):
        """The flow graph of `model` in the setting of `layers`, shared by every computation with that setting."""
        from modeldiff import graph

        graph_key = (id(model), layers_key(layers))
        found = self._graphs.get(graph_key)
        if found is None:
            setting = graph.resolve_setting(model, *layers)
            key = (id(model), frozenset(setting.flows.items()))
            found = self._graphs.get(key)
            if found is None:
                found = self._graphs[key] = graph.flow_graph(model, setting)
            self._graphs[graph_key] = found
        return found

    def security_graphs(self):
        """The old (in the new revision's names) and new security graphs."""
        from modeldiff import graph

        if self._security is None:
            self._security = (in_new_names(graph.security_graph(self.old), self.renames), graph.security_graph(self.new))
        return self._security

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
    changes: list[Change] = []
    old_roles = {a.renames.roles.get(name, name): role for name, role in a.old.roles.items()}
    s_old, s_new = a.security_graphs()
    same_edges = set(s_old.edges) == set(s_new.edges)
    same_graph = same_edges and s_old.tables == s_new.tables
    for name in sorted(set(old_roles) & set(a.new.roles)):
        old_filters = sorted(a.renames.table_name(t) for t in old_roles[name].filters)
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


def _changed_edges(g_old, g_new, switched: frozenset[str]) -> tuple[tuple[Any, Any, bool, bool], ...]:
    """Every edge that changed between two graphs (the old one in new names): (edge, its graph, came, both).

    An edge is its two tables and their columns (changes.md, "Impact"): it
    changes when it is in one graph only (`came`: it is in the new one), or
    when its link's columns changed (`switched` links; `both`: then it is
    listed once per graph). A self-link's two directions share one
    (table, table) edge: when its second direction comes or goes
    (`FilterGraph.both_ways`), the edge counts as come or gone.
    """
    old, new = set(g_old.edges), set(g_new.edges)
    out = [(e, g_old, False, False) for e in sorted(old - new)] + [(e, g_new, True, False) for e in sorted(new - old)]
    if g_old.both_ways != g_new.both_ways:  # a self-link's second direction came or went: its one edge stays
        turned = g_old.both_ways ^ g_new.both_ways
        out += [(e, g_new, True, False) if e.link in g_new.both_ways else (e, g_old, False, False)
                for e in sorted(old & new) if e.link in turned and e.src == e.dst]
    if switched:
        for e in sorted(e for e in old & new if e.link in switched):
            out += [(e, g_old, False, True), (e, g_new, True, True)]
    return tuple(out)


def _route_text(route: tuple[str, ...] | None, source: str, target: str) -> str:
    return " -> ".join(route) if route else f"{source} -> ... -> {target}"


def _route_message(source: str, edge, came: bool, both: bool, route: tuple[str, ...] | None, home: str) -> str:
    """Why a filter on `source` moves `home` across one changed edge, with the route it takes."""
    text = _route_text(route, source, home)
    crossed = route.index(edge.src) if route and edge.src in route else -1
    returns = crossed > 0 and edge.dst in route[:crossed]
    if both:
        how = f"link {edge.link} ({edge.src} -> {edge.dst}) now matches rows on other columns"
    elif returns:
        how = (f"a filter on {source} {'now comes' if came else 'no longer comes'} back to {edge.dst} across link "
               f"{edge.link}, so filtering or grouping by {source} {'now keeps' if came else 'no longer keeps'} only "
               f"{edge.dst} rows with matching {edge.src} rows")
    else:
        how = f"a filter on {source} {'now crosses' if came else 'no longer crosses'} link {edge.link} from {edge.src} to {edge.dst}"
    return f"{text}: {how}; numbers on {home} move when filtered or grouped by {source}."


class _Impacts:
    """Builds the impact lists once every change has its id.

    changes.md, "Impact": a changed edge U -> W of a computation's setting
    moves every table reachable from W under a filter on any table that
    reaches U (old or new graph); a role's visible rows move below a changed
    security edge its filters reach and below a changed filter. Work goes
    outward from the changed edges: reach sets of their ends, shared by every
    computation with the same setting.
    """

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
        self._own_cache: dict[str, list[Reason]] = {}
        # links whose columns changed: their edges change though they join the same tables
        self.switched = frozenset(c.subject.split(".", 1)[1] for c in changes if c.kind == "link.key_switched")
        # changes of a table itself or of its columns that can move a measure living on it, by table
        self.table_changes: dict[str, list[Change]] = {}
        for change in changes:
            parts = change.subject.split(".")
            if (change.kind.startswith("column.") and change.severity != "safe" and len(parts) == 4) or \
                    (change.kind in ("table.key_changed", "table.history_changed", "table.kind_changed") and len(parts) == 2):
                self.table_changes.setdefault(parts[1], []).append(change)
        self._link_edges: dict[int, tuple[Any, dict[str, list]]] = {}
        self._plain_computations: dict[str | None, _Computation] = {}
        self._computations: dict[tuple, _Computation] = {}  # one record per distinct setting: caches key on it
        # measures with a change of their own setting (`computation` cannot share the plain setting with them)
        self._own_setting_changes = {c.subject.split(".", 1)[1] for c in changes if c.kind == "measure.overrides_changed"}
        self._changed: dict[tuple[int, int], tuple] = {}
        self._reach_cache: dict[tuple, list[Reason]] = {}
        self._role_cache: dict[tuple, list[Reason]] = {}
        self._role_rows: dict[str, dict[str, tuple[str, str]]] | None = None
        self._role_origins: dict[tuple, tuple[Any, dict[str, str]]] = {}
        self._chains: dict[str, list[tuple[str, ...]]] = {}

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
            name = renames.link_name(old_name)
            if new_links.get(name) is link and not renames.tables:
                continue  # the very record under the same name: counted above
            key = frozenset((renames.table_name(link.from_table), renames.table_name(link.to_table)))
            by_tables.setdefault(key, set()).add(name)
            ends.setdefault(name, set()).add(key)
        return by_tables, ends

    def _link_ends(self, link: str) -> set[str]:
        out: set[str] = set()
        if link in self.a.new.links:
            out |= self.a.new.links[link].tables
        old = self.a.old.links.get(next((o for o, n in self.a.renames.links.items() if n == link), link))
        if old is not None:
            out |= {self.a.renames.table_name(t) for t in old.tables}
        return out

    def edge_cause(self, edge, came: bool, comp: "_Computation | None") -> tuple[int, str] | None:
        """(rank, change id) of the change that made `edge` appear (`came`) or vanish in one setting.

        A lower rank is more telling.
        """
        setting_changes = comp.setting_changes if comp is not None else ()
        key = (edge, came, tuple(c.id for c in setting_changes), layers_key(comp.old_layers) if setting_changes else ())
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

    def edge_change(self, edges: tuple, came: bool, both: bool, comp: "_Computation | None", pair: tuple[str, str]) -> str:
        """The change id to blame for a changed edge: its link's key switch when it joins other columns."""
        if both:
            for change in self.by_subject.get(f"links.{edges[0].link}", ()):
                if change.kind == "link.key_switched":
                    return change.id
        return self.cause(edges, came or both, comp, pair)

    # -- reasons that do not depend on the setting: definition, columns and tables read

    def own_reasons(self, name: str) -> list[Reason]:
        if name not in self._own_cache:
            self._own_cache[name] = self._own_reasons(name)
        return self._own_cache[name]

    def _own_reasons(self, name: str) -> list[Reason]:
        m = self.a.new.measures[name]
        reasons = []
        for change in self.by_subject.get(f"measures.{name}", ()):
            # `via`/`flow` act through the edges they change: see reach_reasons (a derived measure's: chain_reasons)
            if change.kind in ("measure.logic_changed", "reference.broken"):
                reasons.append(Reason(change.id, change.message))
        if m.table is None:
            return reasons
        homes = {m.table, self.old_name("tables", m.table)}
        nearby = [c for home in sorted(homes) for c in self.table_changes.get(home, ())]
        read = self._columns_read(m) if nearby else set()
        for change in nearby:
            if change.kind.startswith("column."):
                column = subject_member(change.subject)
                if {column.lower(), str(change.after).lower(), str(change.before).lower()} & read:
                    reasons.append(Reason(change.id, change.message))
            else:
                reasons.append(Reason(change.id, change.message))
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

    # -- reach through the changed edges of one setting

    def graphs(self, comp: _Computation) -> tuple[Any, Any]:
        """The old (in new names) and new flow graphs of one computation's setting."""
        return self.a.old_graph(comp.old_layers), self.a.graph(self.a.new, comp.new_layers)

    def changed_edges(self, comp: _Computation) -> tuple[tuple[Any, Any, bool, bool], ...]:
        g_old, g_new = self.graphs(comp)
        key = (id(g_old), id(g_new))  # (both graphs are kept by the analysis: ids stay unique)
        found = self._changed.get(key)
        if found is None:
            found = self._changed[key] = _changed_edges(g_old, g_new, self.switched)
        return found

    def reach_reasons(self, home: str, comp: _Computation) -> list[Reason]:
        """Reasons `home`'s rows move under some filter in the setting of `comp` (shared by measures with both)."""
        key = (home, id(comp))
        found = self._reach_cache.get(key)
        if found is None:
            hits = [h for h in self.changed_edges(comp) if home in h[1].reach(h[0].dst)]
            found = self._reach_cache[key] = (self._hit_reasons(home, comp, hits) if hits else []) + \
                self.where_reasons(home, comp)
        return list(found)

    def _hit_reasons(self, home: str, comp: _Computation, hits: list) -> list[Reason]:
        """One reason per (change, source table): the simple paths it added or removed, else a route through it."""
        a = self.a
        sources: set[str] = set()
        for edge, g, _, _ in hits:
            sources |= g.reaching(edge.src)
        targets = None if not comp.new_layers and not comp.old_layers else {home}
        pairs = a.pairs(comp.old_layers, comp.new_layers, targets=targets)
        listed: dict[tuple[str, str], tuple[list[Path], list[Path]]] = {}
        for source in sorted(sources):
            pc = pairs.get((source, home))
            if pc is None:
                continue
            for p in pc.added:
                listed.setdefault((self.cause(pc.added_by.get(p, ()), True, comp, (source, home)), source),
                                  ([], []))[0].append(p)
            for p in pc.removed:
                listed.setdefault((self.cause(pc.removed_by.get(p, ()), False, comp, (source, home)), source),
                                  ([], []))[1].append(p)
            if not pc.added and not pc.removed:  # the listing was cut short before a difference showed
                near = [e for link in sorted(pc.links) for e in self._edges_of(a.graph(a.new, comp.new_layers), link)]
                listed.setdefault((self.cause(near, True, comp, (source, home)), source), ([], []))
        routes: dict[tuple[str, str], Reason] = {}
        for edge, g, came, both in hits:
            for source in sorted(g.reaching(edge.src)):
                key = (self.edge_change((edge,), came, both, comp, (source, home)), source)
                if key not in listed and key not in routes:
                    route = g.route_through(source, edge, home)
                    routes[key] = Reason(key[0], _route_message(source, edge, came, both, route, home), source=source,
                                         route=route or ())
        reasons = [Reason(change_id, f"Paths from {source} into {home} changed: numbers move when filtered or "
                                     f"grouped by {source}.", source=source, paths_added=tuple(added),
                          paths_removed=tuple(removed))
                   for (change_id, source), (added, removed) in listed.items()]
        return sorted(reasons + list(routes.values()), key=lambda r: (id_order(r.change), r.source or ""))

    def where_reasons(self, home: str, comp: _Computation) -> list[Reason]:
        """A variant option's `where` in force changed on a table whose filter reaches `home`."""
        return [Reason(change_id, f"The variant option's `where` on {table} in force changed: numbers on "
                                  f"{home} move.", source=table)
                for table, change_id in self._changed_wheres(comp, (home,))]

    def _changed_wheres(self, comp: _Computation, targets: Iterable[str]) -> list[tuple[str, str]]:
        """(table, change id) for each variant `where` in force that changed and whose filter reaches a target.

        Reach is taken in either revision: the filter counts where it used to
        reach as much as where it reaches now.
        """
        from modeldiff import sql

        found = []
        g_old, g_new = self.graphs(comp)
        targets = set(targets)
        for table in sorted(set(comp.old_wheres) | set(comp.new_wheres)):
            before, after = comp.old_wheres.get(table, ()), comp.new_wheres.get(table, ())
            if len(before) == len(after) and all(sql.same_logic(x, y, table) if x != y else True
                                                 for x, y in zip(before, after)):
                continue
            reached = sorted(targets & (g_new.reach(table) | g_old.reach(table)))
            if not reached:
                continue
            change_id = next((c.id for c in comp.setting_changes if c.kind != "measure.overrides_changed"),
                             comp.setting_changes[0].id if comp.setting_changes else self.cause((), True, None, (table, reached[0])))
            found.append((table, change_id))
        return found

    def group_reasons(self, comp: _Computation, where_tables: Iterable[str], by_tables: Iterable[str]) -> list[Reason]:
        """A report's groups (the `by` values visible under its `where`) move across a changed edge."""
        reasons = []
        for edge, g, came, both in self.changed_edges(comp):
            for where in sorted(where_tables):
                if edge.src not in g.reach(where):
                    continue
                for by in sorted(b for b in by_tables if b in g.reach(edge.dst)):
                    route = g.route_through(where, edge, by)
                    reasons.append(Reason(
                        self.edge_change((edge,), came, both, comp, (where, by)),
                        f"{_route_text(route, where, by)}: the groups by {by} are the {by} rows visible under the "
                        f"filter on {where}, and the filter {'now crosses' if came and not both else 'no longer crosses' if not both else 'crosses'} "
                        f"link {edge.link} ({edge.src} -> {edge.dst}) on the way: which groups show can change.",
                        source=where, route=route or ()))
        for where, change_id in self._changed_wheres(comp, by_tables):
            g_old, g_new = self.graphs(comp)
            shown = sorted(b for b in by_tables if b in g_old.reach(where) | g_new.reach(where))
            reasons.append(Reason(change_id, f"The variant option's `where` on {where} in force changed, and its filter "
                                             f"reaches {_and(shown)}: which groups by {_and(shown)} show can change.",
                                  source=where))
        return reasons

    # -- role rows

    def role_rows(self) -> dict[str, dict[str, dict[str, str]]]:
        """Role (new name) -> each table whose rows its members may see can change -> change id -> filtered table."""
        if self._role_rows is None:
            self._role_rows = self._find_role_rows()
        return self._role_rows

    def _find_role_rows(self) -> dict[str, dict[str, dict[str, str]]]:
        a = self.a
        s_old, s_new = a.security_graphs()
        changed = _changed_edges(s_old, s_new, self.switched)
        upstream = {id(g): set() for g in (s_old, s_new)}  # tables whose filter reaches a changed edge
        for edge, g, _, _ in changed:
            upstream[id(g)] |= g.reaching(edge.src)
        old_roles = {a.renames.roles.get(name, name): role for name, role in a.old.roles.items()}
        out: dict[str, dict[str, dict[str, str]]] = {}
        for name in sorted(set(old_roles) & set(a.new.roles)):
            rows: dict[str, dict[str, str]] = {}
            filters = ((s_old, sorted(a.renames.table_name(t) for t in old_roles[name].filters)),
                       (s_new, sorted(a.new.roles[name].filters)))
            for g, filtered in filters:
                if not upstream[id(g)] & set(filtered):
                    continue
                origins = g.reach_origins(filtered)
                for edge, eg, came, both in changed:
                    if eg is g and edge.src in origins:
                        change_id = self.edge_change((edge,), came, both, None, (origins[edge.src], edge.dst))
                        for table in sorted(g.reach(edge.dst)):
                            rows.setdefault(table, {}).setdefault(change_id, origins[edge.src])
            for change in self.by_subject.get(f"roles.{name}", ()):
                if change.kind == "role.filter_changed":
                    tables = sorted(set(change.details.get("tables") or ()) | set(change.before or {}) |
                                    set(change.after or {}))
                    for table in tables:
                        for g, _ in filters:
                            for reached in sorted(g.reach(a.renames.table_name(table))):
                                rows.setdefault(reached, {}).setdefault(change.id, table)
            for change in self.kinds("security."):
                if subject_item(change.subject) == name:
                    table = subject_member(change.subject)
                    rows.setdefault(table, {}).setdefault(change.id, change.details.get("source") or table)
            if rows:
                out[name] = rows
        return out

    def _role_reach(self, role: str, change_id: str, g) -> dict[str, str]:
        """Tables a filter on the tables whose rows `role` sees differently (because of `change_id`) reaches in `g`."""
        key = (role, change_id, id(g))
        found = self._role_origins.get(key)
        if found is None:
            tables = [t for t, causes in self.role_rows()[role].items() if change_id in causes]
            found = self._role_origins[key] = (g, g.reach_origins(tables))
        return found[1]

    def role_reasons(self, home: str, comp: _Computation, roles: Iterable[str] | None = None) -> list[Reason]:
        """The rows a role (any role when `roles` is None) may see of `home` or of a table reaching it can change."""
        rows = self.role_rows()
        if not rows:
            return []
        names = sorted(rows) if roles is None else sorted(set(roles) & set(rows))
        key = (home, id(comp), tuple(names))
        found = self._role_cache.get(key)
        if found is None:
            found = self._role_cache[key] = []
            for role in names:
                for change_id in sorted({c for causes in rows[role].values() for c in causes}, key=id_order):
                    for g in self.graphs(comp):
                        origins = self._role_reach(role, change_id, g)
                        if home in origins:
                            table = origins[home]
                            found.append(Reason(change_id, f"The rows role {role} may see of {table} can change"
                                                           + ("" if table == home else f", and a filter on {table} reaches {home}")
                                                           + f": numbers on {home} seen as {role} move.",
                                                source=rows[role][table][change_id]))
                            break
        return list(found)

    # -- computations: a measure (through the derived measures naming it) in one setting

    def chains(self, name: str) -> list[tuple[str, ...]]:
        """Each way from measure `name` down to a base measure it reaches: (name, ..., base), new names."""
        found = self._chains.get(name)
        if found is None:
            found = self._chains[name] = []
            measures, todo = self.a.new.measures, [(name,)]
            while todo and len(found) < CHAIN_LIMIT:
                chain = todo.pop()
                m = measures.get(chain[-1])
                if m is None:
                    continue
                if m.table is not None:
                    found.append(chain)
                    continue
                todo.extend(chain + (dep,) for dep in sorted(self.measure_deps.get(chain[-1], ()), reverse=True)
                            if dep not in chain)
        return found

    def computation(self, chain: tuple[str, ...], report: Report | None = None) -> _Computation | None:
        """The old and new settings of the base measure at the end of `chain` (inside `report` when given).

        None when the measure or its base is new: no number of it moved.
        """
        a = self.a
        news = [a.new.measures[n] for n in chain]
        olds = [a.old.measures.get(self.old_name("measures", n)) for n in chain]
        if olds[0] is None or olds[-1] is None:
            return None
        old_report = None
        if report is not None:
            old_report = a.old.reports.get(self.old_name("reports", report.name))
            if old_report is None:
                return None
        own = [n for n in chain if n in self._own_setting_changes]
        if not own and all(m.overrides is NO_OVERRIDES or not m.overrides for m in news) and \
                all(m is None or not m.overrides for m in olds):
            key = None if report is None else report.name
            found = self._plain_computations.get(key)
            if found is None:
                found = self._plain_computations[key] = self._computation((), (), report, old_report, [])
            return found
        changes = [c for n in own for c in self.by_subject.get(f"measures.{n}", ()) if c.kind == "measure.overrides_changed"]
        return self._computation(tuple(m.overrides for m in news),
                                 tuple(m.overrides for m in olds if m is not None), report, old_report, changes)

    def _computation(self, new_overrides: tuple[Overrides, ...], old_overrides: tuple[Overrides, ...],
                     report: Report | None, old_report: Report | None, changes: list[Change]) -> _Computation:
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
        old_layers = tuple(layer for layer in setting_layers(a.old, None, old_report) + old_overrides if layer)
        new_layers = tuple(layer for layer in setting_layers(a.new, None, report) + new_overrides if layer)
        setting_changes = tuple(sorted({c.id: c for c in changes}.values(), key=lambda c: id_order(c.id)))
        old_wheres, new_wheres = _wheres(old_options, a.renames), _wheres(new_options, None)
        key = (layers_key(old_layers), layers_key(new_layers), tuple(c.id for c in setting_changes),
               tuple(sorted(old_wheres.items())), tuple(sorted(new_wheres.items())))
        found = self._computations.get(key)
        if found is None:
            found = self._computations[key] = _Computation(old_layers, new_layers, setting_changes, old_wheres, new_wheres)
        return found

    def _options(self, model: Model, report: Report | None, old: bool) -> dict[str, tuple[str, VariantOption]]:
        """Variant (new name) -> (option name, option) in force."""
        out = {}
        for name in model.variants:
            found = _option_in_force(model, name, report)
            if found is not None:
                out[self.a.renames.variants.get(name, name) if old else name] = found
        return out

    def chain_reasons(self, chain: tuple[str, ...], comp: _Computation) -> list[Reason]:
        """Why the value of `chain[0]` moves through the base measure `chain[-1]` in the setting of `comp`.

        Roles aside: the caller adds the roles that apply (any role for a
        measure on its own, the report's role inside a report).
        """
        base = chain[-1]
        reasons = [_via(r, n) if n != chain[0] else r for n in chain for r in self.own_reasons(n)]
        for n in chain[:-1]:  # a derived measure's overrides on the way (the base's act through the edges)
            for change in self.by_subject.get(f"measures.{n}", ()):
                if change.kind == "measure.overrides_changed":
                    reasons.append(_via(Reason(change.id, change.message), n) if n != chain[0] else Reason(change.id, change.message))
        home = self.a.new.measures[base].table
        reasons += [_via(r, base) if base != chain[0] else r for r in self.reach_reasons(home, comp)]
        return reasons

    # -- the three lists

    def measures(self) -> list[Impact]:
        a = self.a
        result: dict[str, list[Reason]] = {}
        named = {c.subject.split(".")[1] for c in self.changes if c.subject.startswith("measures.")}
        loud = set(self.table_changes)
        back_measures, old_measures, own_settings = self.back.measures, a.old.measures, self._own_setting_changes
        by_table: dict[str, list[Reason]] = {}  # reasons of a plain base measure's table (the common case)
        for name, m in a.new.measures.items():
            table = m.table
            if table is not None and m.overrides is NO_OVERRIDES and name not in own_settings:
                # as below without the per-measure steps: the plain setting, shared by every such measure of a table
                old_measure = old_measures.get(back_measures.get(name, name) if back_measures else name)
                if old_measure is None:
                    continue  # a new measure had no numbers to move
                if old_measure.overrides is NO_OVERRIDES:
                    found = by_table.get(table)
                    if found is None:
                        plain = self.computation((name,))
                        found = by_table[table] = self.reach_reasons(table, plain) + self.role_reasons(table, plain)
                    own = self.own_reasons(name) if name in named or table in loud or \
                        self.old_name("tables", table) in loud else []
                    if own or found:
                        result[name] = own + found
                    continue
            reasons: list[Reason] = []
            chains = self.chains(name)
            if not chains and m.table is None and self.computation((name,)) is not None:
                reasons += self.own_reasons(name)  # a derived measure naming no measure: its expression alone
            for chain in chains:
                comp = self.computation(chain)
                if comp is None:
                    continue  # a new measure (or one reaching only new measures) had no numbers to move
                reasons += self.chain_reasons(chain, comp)
                base = chain[-1]
                reasons += [_via(r, base) if base != name else r
                            for r in self.role_reasons(a.new.measures[base].table, comp)]
            if reasons:
                result[name] = reasons
        return [self._impact(name, reasons, self._record("measures", name), measure=True)
                for name, reasons in sorted(result.items())]

    def roles(self) -> list[Impact]:
        rows = self.role_rows()
        out = []
        for name in sorted(set(self.a.new.roles) | {self.a.renames.roles.get(n, n) for n in self.a.old.roles}):
            reasons, exposed, tightened, rerouted = [], [], [], []
            for change in self.by_subject.get(f"roles.{name}", ()):
                if change.severity != "safe" and change.kind != "role.added":
                    reasons.append(Reason(change.id, change.message))
            for change in self.kinds("security."):
                if subject_item(change.subject) != name:
                    continue
                table = subject_member(change.subject)
                {"security.exposed": exposed, "security.tightened": tightened, "security.rerouted": rerouted}[change.kind].append(table)
                reasons.append(Reason(change.id, change.message, source=change.details.get("source")))
            named = {r.change for r in reasons}
            moved: dict[tuple[str, str], list[str]] = {}
            for table, causes in sorted(rows.get(name, {}).items()):
                for change_id, source in causes.items():
                    if change_id not in named:
                        moved.setdefault((change_id, source), []).append(table)
            for (change_id, source), tables in sorted(moved.items(), key=lambda kv: (id_order(kv[0][0]), kv[0][1])):
                reasons.append(Reason(change_id, f"A filter of role {name} on {source} reaches what changed: the rows "
                                                 f"its members may see of {_and(tables)} can change.", source=source))
            if reasons:
                severity = worst(self.by_id[r.change].severity for r in reasons)
                out.append(Impact(name, "numbers" if severity == "safe" else severity, tuple(reasons),
                                  tuple(exposed), tuple(tightened), tuple(rerouted)))
        return out

    def reports(self) -> list[Impact]:
        a = self.a
        out = []
        rows = self.role_rows()
        for name, report in sorted(a.new.reports.items()):
            old_report = a.old.reports.get(self.old_name("reports", name))
            if old_report is None:
                continue  # a new report had no numbers to move
            reasons: list[Reason] = []
            for change in self.by_subject.get(f"reports.{name}", ()):
                if change.severity == "safe" or change.kind in ("report.added", "report.renamed"):
                    continue
                if change.kind == "report.changed" and set(change.before or {}) <= _SETTING_FIELDS:
                    continue  # only its setting changed: see the edges below
                reasons.append(Reason(change.id, change.message))
            named = set(report.measures) | conditions.names_written(report)  # shown, or read by its condition
            for change in self.kinds("measure."):  # a measure it shows or its condition reads was removed or renamed
                shown = change.subject.split(".", 1)[1]
                if change.kind == "measure.removed" and shown in named:
                    reasons.append(Reason(change.id, change.message))
                elif change.kind == "measure.renamed" and change.severity != "safe" and shown in named:
                    reasons.append(Reason(change.id, change.message))
            by_tables = {item.partition(".")[0] for item in report.by}
            where_tables = set(report.where)
            for _, (_, option) in self._options(a.new, report, old=False).items():
                where_tables |= set(option.where)
            filters = {t for t in by_tables | where_tables if t in a.new.tables}
            read: set[str] = set()
            # a measure named only in its condition moves its groups: it counts like a measure it shows
            for measure_name in report.measures + conditions.extra_measures(report, a.new.measures):
                if measure_name not in a.new.measures:
                    continue
                for chain in self.chains(measure_name):
                    comp = self.computation(chain, report)
                    if comp is None:
                        continue
                    base = chain[-1]
                    reasons += [_via(r, base) for r in self.chain_reasons(chain, comp)]
                    reasons += [_via(r, base) for r in self.group_reasons(comp, where_tables & filters, by_tables & filters)]
                    if report.role in rows:
                        read |= self._tables_read(a.new.measures[base].table, comp, filters)
            if report.role in rows:
                for table, change_id in sorted((t, c) for t in read & set(rows[report.role]) for c in rows[report.role][t]):
                    source = rows[report.role][table][change_id]
                    reasons.append(Reason(change_id, f"The rows role {report.role} may see of {table} can change, and "
                                                     f"this report, seen as {report.role}, reads {table}.", source=source))
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
                out.append(self._impact(name, reasons, report))
        return out

    def _tables_read(self, home: str, comp: _Computation, filters: set[str]) -> set[str]:
        """A report's tables for one measure: its home, the filtered tables, and what lies between them."""
        read = {home} | filters
        for g in self.graphs(comp):
            above = g.reaching(home)
            for table in filters:
                read |= g.reach(table) & above
        return read

    def _record(self, section: str, name: str):
        """An item of the new revision, else of the old (by the same name), else None."""
        for model in (self.a.new, self.a.old):
            found = getattr(model, section).get(name)
            if found is not None:
                return found
        return None

    def _impact(self, name: str, reasons: list[Reason], record=None, measure: bool = False) -> Impact:
        reasons = sorted(_dedupe(reasons), key=lambda r: (id_order(r.change), r.source or "", r.paths_added,
                                                          r.paths_removed, r.route))
        severity = worst(self.by_id[r.change].severity for r in reasons if r.change in self.by_id)
        home = ((record.table or "") if measure else "") if record is not None else None
        owner = record.owner if record is not None else None
        table = self.a.new.tables.get(home) or self.a.old.tables.get(home) if home else None
        return Impact(name, "numbers" if severity == "safe" else severity, tuple(reasons), home=home, owner=owner,
                      home_kind=table.kind if table is not None else None)


def _and(names: list[str]) -> str:
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _wheres(options: Mapping[str, tuple[str, VariantOption]], renames: Renames | None) -> dict[str, tuple[str, ...]]:
    out: dict[str, list[str]] = {}
    for variant in sorted(options):
        for table, predicate in sorted(options[variant][1].where.items()):
            out.setdefault(renames.table_name(table) if renames else table, []).append(predicate)
    return {t: tuple(p) for t, p in out.items()}


def _via(reason: Reason, measure: str) -> Reason:
    return reason if reason.via is not None else replace(reason, via=measure)


def _dedupe(reasons: list[Reason]) -> list[Reason]:
    seen, out = set(), []
    for reason in reasons:
        key = (reason.change, reason.source, reason.paths_added, reason.paths_removed, reason.route)
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
    from modeldiff.util import paused_gc

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
