"""Settings, the flow and security graphs, reach, paths and ambiguity.

This module is semantics.md sections 1-4 and nothing else:

- a `Setting` is the set of links carrying filters, each with its flow, after
  the overrides of a variant option, a report and a measure (in that order);
- `flow_graph` and `security_graph` turn a model into a `FilterGraph` whose
  edges point in the direction a filter travels;
- a `FilterGraph` answers reach, paths (sequences of link names) and
  ambiguity questions without ever handing out graph-library objects.

Ambiguity is decided per source in roughly linear time, never by listing
paths (see `_SourceAnalysis`). The algorithms run on a small integer-numbered
adjacency of their own (breadth-first trees, dominator trees, bounded
depth-first listing): importing this module loads no graph library, and the
property tests hold every answer against networkx as the reference.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass
from typing import Iterable, Mapping, NamedTuple

from modeldiff.errors import ModeldiffError
from modeldiff.model import Link, Measure, Model, Overrides, Report, Role

ONE_WAY = "one-way"
TWO_WAY = "two-way"
OFF = "off"
ONE_TO_ONE = "one-to-one"

Path = tuple[str, ...]  # link names, in the order a filter crosses them

DEFAULT_PATH_LIMIT = 50  # paths listed per pair when two revisions are compared
DEFAULT_STEP_BUDGET = 200_000  # search steps allowed to one bounded path listing
_CACHE_SIZE = 64  # per-source analyses kept by one graph
_CACHE_CELLS = 2_000_000  # reach sets and dominator trees kept by one graph, in table slots


# --- records ----------------------------------------------------------------------------


class Edge(NamedTuple):
    """A filter crossing `link` from table `src` to table `dst`.

    A named tuple: made, hashed and sorted (by link, src, dst) in C, which
    matters for graphs of thousands of links built several times per diff.
    """

    link: str
    src: str
    dst: str


@dataclass(frozen=True)
class Setting:
    """The links carrying filters in one computation, each with its effective flow."""

    flows: Mapping[str, str]  # link name -> "one-way" | "two-way", for every carrying link

    def __post_init__(self) -> None:
        object.__setattr__(self, "flows", dict(sorted(self.flows.items())))

    def __hash__(self) -> int:
        return hash(tuple(self.flows.items()))

    @property
    def links(self) -> frozenset[str]:
        """Names of the links that carry filters."""
        return frozenset(self.flows)

    def carries(self, link: str) -> bool:
        return link in self.flows


@dataclass(frozen=True)
class PathSet:
    """Simple paths of one pair in sorted order; `complete` is False when listing stopped early."""

    paths: tuple[Path, ...]
    complete: bool


@dataclass(frozen=True)
class PathDelta:
    """How the paths of one pair differ between an old and a new graph.

    `added` and `removed` are exact (each listed path really is new or gone) but
    may be partial when `complete` is False: too many paths to list them all.
    """

    added: tuple[Path, ...] = ()
    removed: tuple[Path, ...] = ()
    complete: bool = True

    @property
    def changed(self) -> bool:
        """True when the path sets differ, or may differ (listing was cut short)."""
        return bool(self.added or self.removed) or not self.complete


# --- settings ---------------------------------------------------------------------------


class SettingResolver:
    """Resolves many settings of one model without re-reading every link each time.

    Overrides naming links that do not exist are ignored here (the check's
    broken-reference rule reports them).
    """

    def __init__(self, model: Model) -> None:
        self.model = model
        self._twins: dict[frozenset[str], tuple[str, ...]] = {}
        for name in sorted(model.links):
            key = model.links[name].tables
            self._twins[key] = self._twins.get(key, ()) + (name,)
        self._default: Setting | None = None

    @property
    def default(self) -> Setting:
        """The model's own links: every non-standby link with its declared flow."""
        if self._default is None:
            self._default = Setting({n: l.flow for n, l in self.model.links.items() if not l.standby})
        return self._default

    def resolve(self, *layers: Overrides) -> Setting:
        """The model, then each layer in the order given (semantics.md section 1)."""
        if not any(layers):
            return self.default
        links = self.model.links
        standby = {name: link.standby for name, link in links.items()}
        flow = {name: link.flow for name, link in links.items()}
        for layer in layers:
            self._apply(layer, standby, flow)
        return Setting({n: flow[n] for n in links if not standby[n] and flow[n] != OFF})

    def _apply(self, layer: Overrides, standby: dict[str, bool], flow: dict[str, str]) -> None:
        links = self.model.links
        used = [name for name in layer.via if name in links]
        for name in used:
            standby[name] = False
            if flow[name] == OFF:  # a later `via` brings back a link an earlier layer turned off
                flow[name] = links[name].flow
        for name in used:
            for twin in self._twins[links[name].tables]:
                if twin not in used:
                    standby[twin] = True
        for name, value in layer.flow.items():
            if name in links and value in (ONE_WAY, TWO_WAY, OFF):
                flow[name] = value


def default_setting(model: Model) -> Setting:
    return SettingResolver(model).default


def resolve_setting(model: Model, *layers: Overrides) -> Setting:
    """The setting of the model after `layers`, applied in the order given.

    `via: [L]` makes L carry filters and puts every other link between the same
    two tables on standby; `flow: {L: off}` removes L; `flow: {L: one-way|two-way}`
    sets L's flow (a standby link still needs a `via` to carry filters). A later
    layer wins over an earlier one.
    """
    return SettingResolver(model).resolve(*layers)


def setting_layers(model: Model, measure: Measure | None = None, report: Report | None = None,
                   *, variant_defaults: bool = False) -> tuple[Overrides, ...]:
    """The override layers of one computation, in the spec's order.

    Variant options (by variant name), then the report's own overrides, then
    the measure's. Without `variant_defaults` only the options a report chooses
    apply; with it, every variant contributes its option in force: the one the
    report chooses, else its default, also for a measure outside any report
    (DEVELOPERS.md, "Decisions where the spec is silent"). Empty layers and
    names that do not exist are left out.
    """
    layers: list[Overrides] = []
    chosen = report.variant if report is not None else {}
    for variant_name in sorted(model.variants) if variant_defaults else sorted(chosen):
        variant = model.variants.get(variant_name)
        if variant is None:
            continue
        option = variant.options.get(chosen.get(variant_name, variant.default))
        if option is not None:
            layers.append(option.overrides)
    if report is not None:
        layers.append(report.overrides)
    if measure is not None:
        layers.append(measure.overrides)
    return tuple(layer for layer in layers if layer)


def measure_setting(model: Model, measure: Measure | None = None, report: Report | None = None,
                    *, variant_defaults: bool = False) -> Setting:
    """Shortcut: the setting a measure (inside a report, when given) is evaluated in."""
    layers = setting_layers(model, measure, report, variant_defaults=variant_defaults)
    return resolve_setting(model, *layers)


# --- building graphs --------------------------------------------------------------------


def flow_edges(link: Link, flow: str) -> tuple[Edge, ...]:
    """The flow-graph edges of one carrying link (semantics.md section 2)."""
    back = Edge(link.name, link.to_table, link.from_table)
    if flow == TWO_WAY or link.cardinality == ONE_TO_ONE:
        return (back, Edge(link.name, link.from_table, link.to_table))
    return (back,)


def security_edges(link: Link) -> tuple[Edge, ...]:
    """The security-graph edges of one non-standby link (semantics.md section 3)."""
    back = Edge(link.name, link.to_table, link.from_table)
    both = link.cardinality == ONE_TO_ONE or (link.flow == TWO_WAY and link.security_flow == TWO_WAY)
    return (back, Edge(link.name, link.from_table, link.to_table)) if both else (back,)


def flow_graph(model: Model, setting: Setting | None = None) -> FilterGraph:
    """The flow graph of `setting` (the model's default setting when None)."""
    if setting is None:
        setting = default_setting(model)
    edges: list[Edge] = []
    for name, flow in setting.flows.items():
        link = model.links.get(name)
        if link is not None:
            edges.extend(flow_edges(link, flow))
    return FilterGraph(model.tables, edges)


def security_graph(model: Model) -> FilterGraph:
    """The graph row security travels along: the default setting, no overrides ever."""
    edges: list[Edge] = []
    for link in model.links.values():
        if not link.standby:
            edges.extend(security_edges(link))
    return FilterGraph(model.tables, edges)


# --- the graph --------------------------------------------------------------------------


class _Lru(OrderedDict):
    def __init__(self, size: int = _CACHE_SIZE) -> None:
        super().__init__()
        self.size = size

    def remember(self, key, value):
        self[key] = value
        if len(self) > self.size:
            self.popitem(last=False)
        return value

    def recall(self, key):
        value = self.get(key)
        if value is not None:
            self.move_to_end(key)
        return value


_NUMBERINGS: "OrderedDict[frozenset[str], tuple[list[str], dict[str, int]]]" = OrderedDict()


def _numbering(tables: frozenset[str]) -> tuple[list[str], dict[str, int]]:
    """The tables in name order and each one's number, shared by graphs over the same tables (last 8 kept).

    Neither is changed after it is made.
    """
    found = _NUMBERINGS.get(tables)
    if found is None:
        names = sorted(tables)
        found = _NUMBERINGS[tables] = (names, {name: i for i, name in enumerate(names)})
        if len(_NUMBERINGS) > 8:
            _NUMBERINGS.popitem(last=False)
    return found


class FilterGraph:
    """Tables and the directed edges filters travel along; all answers are sorted.

    Edges naming a table that does not exist are dropped (the check reports the
    broken reference). Questions about such a table get empty answers.
    Out-edges are visited in link-name order, so every path and witness is
    deterministic. Internally tables and edges are numbered; nothing numbered
    leaves this module.
    """

    def __init__(self, tables: Iterable[str], edges: Iterable[Edge], both_ways: Iterable[str] | None = None) -> None:
        self.tables: frozenset[str] = frozenset(tables)
        tables = self.tables
        kept = [e for e in edges if e.src in tables and e.dst in tables]
        self.edges: tuple[Edge, ...] = tuple(sorted(set(kept)))
        if both_ways is None:  # a self-link's two directions are one Edge: count them before they merge
            selfs = [e.link for e in kept if e.src == e.dst]
            both_ways = {link for link in selfs if selfs.count(link) > 1} if len(selfs) > 1 else ()
        # self-links (from and to the same table) carrying filters both ways: the direction matters (which
        # columns match), though `edges` holds their one (table, table) edge once
        self.both_ways: frozenset[str] = frozenset(both_ways)
        self._names, self._index = _numbering(tables)  # (the two revisions of a diff mostly share their tables)
        links, sources, targets = zip(*self.edges) if self.edges else ((), (), ())
        self._link: list[str] = list(links)
        self._src: list[int] = list(map(self._index.__getitem__, sources))
        self._dst: list[int] = list(map(self._index.__getitem__, targets))
        # adjacency: (neighbour, edge number), in edge order, hence in link-name order
        self._out: list[list[tuple[int, int]]] = [[] for _ in self._names]
        self._in: list[list[tuple[int, int]]] = [[] for _ in self._names]
        for i, (u, v) in enumerate(zip(self._src, self._dst)):
            self._out[u].append((v, i))
            self._in[v].append((u, i))
        wide = max(_CACHE_SIZE, _CACHE_CELLS // max(1, len(self._names)))
        self._reach = _Lru(wide)
        self._reaching = _Lru(wide)
        self._analyses = _Lru()
        self._dominators = _Lru(wide // 2)
        self._routes = _Lru(wide // 2)  # breadth-first trees for `route_through`

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, FilterGraph):
            return NotImplemented
        return self.tables == other.tables and self.edges == other.edges and self.both_ways == other.both_ways

    def __hash__(self) -> int:
        return hash((self.tables, self.edges, self.both_ways))

    def __repr__(self) -> str:
        return f"FilterGraph({len(self.tables)} tables, {len(self.edges)} edges)"

    # -- neighbourhood

    def out_edges(self, table: str) -> tuple[Edge, ...]:
        i = self._index.get(table)
        return () if i is None else tuple(self.edges[e] for _, e in self._out[i])

    def in_edges(self, table: str) -> tuple[Edge, ...]:
        i = self._index.get(table)
        return () if i is None else tuple(self.edges[e] for _, e in self._in[i])

    # -- reach

    def reach(self, source: str) -> frozenset[str]:
        """Tables a filter on `source` reaches, `source` included (empty if unknown)."""
        found = self._reach.recall(source)
        if found is None:
            found = self._reach.remember(source, self._closure(source, self._out))
        return found

    def reaching(self, target: str) -> frozenset[str]:
        """Tables whose filter reaches `target`, `target` included (empty if unknown)."""
        found = self._reaching.recall(target)
        if found is None:
            found = self._reaching.remember(target, self._closure(target, self._in))
        return found

    def reaches(self, source: str, target: str) -> bool:
        return target in self.reach(source)

    def reach_all(self, starts: Iterable[str]) -> frozenset[str]:
        """Tables a filter on any of `starts` reaches, `starts` (those of this graph) included."""
        seen = {self._index[t] for t in starts if t in self._index}
        stack = list(seen)
        while stack:
            for v, _ in self._out[stack.pop()]:
                if v not in seen:
                    seen.add(v)
                    stack.append(v)
        return frozenset(self._names[v] for v in seen)

    def components(self) -> list[tuple[str, ...]]:
        """Strongly connected components, in topological order (a component before those it has edges into).

        Each is sorted by name. Tarjan's algorithm, iterative, over tables in
        name order and edges in link-name order, so the order is the same on
        every run. (The engine evaluates section 5's fixpoint one component at
        a time in this order.)
        """
        out = self._out
        index: list[int] = [-1] * len(self._names)
        low: list[int] = [0] * len(self._names)
        stack: list[int] = []
        on_stack = [False] * len(self._names)
        found: list[tuple[str, ...]] = []
        counter = 0
        for root in range(len(self._names)):
            if index[root] >= 0:
                continue
            index[root] = low[root] = counter
            counter += 1
            stack.append(root)
            on_stack[root] = True
            work = [(root, iter(out[root]))]
            while work:
                node, children = work[-1]
                step = next(children, None)
                if step is not None:
                    child = step[0]
                    if index[child] < 0:
                        index[child] = low[child] = counter
                        counter += 1
                        stack.append(child)
                        on_stack[child] = True
                        work.append((child, iter(out[child])))
                    elif on_stack[child]:
                        low[node] = min(low[node], index[child])
                    continue
                work.pop()
                if work:
                    parent = work[-1][0]
                    low[parent] = min(low[parent], low[node])
                if low[node] == index[node]:
                    members = []
                    while True:
                        member = stack.pop()
                        on_stack[member] = False
                        members.append(self._names[member])
                        if member == node:
                            break
                    found.append(tuple(sorted(members)))
        found.reverse()
        return found

    def route(self, source: str, target: str) -> Path | None:
        """One shortest path (fewest links, then by link name), or None when there is none."""
        s, x = self._index.get(source), self._index.get(target)
        if s is None or x is None:
            return None
        if s == x:
            return ()
        tree = _Tree(self, s)
        return self._path_names(tree.path(x)) if tree.seen[x] else None

    def reach_origins(self, starts: Iterable[str]) -> dict[str, str]:
        """Every table a filter on any of `starts` reaches -> the nearest of them (ties: the first in name order)."""
        firsts = sorted({self._index[t] for t in starts if t in self._index})
        if not firsts:
            return {}
        tree = _Tree(self, *firsts)
        names, src, edge = self._names, self._src, tree.edge
        origin: dict[int, int] = {}
        for v in tree.order:  # breadth-first: a table's tree parent comes before it
            e = edge[v]
            origin[v] = v if e < 0 else origin[src[e]]
        return {names[v]: names[o] for v, o in origin.items()}

    def route_through(self, source: str, edge: Edge, target: str) -> tuple[str, ...] | None:
        """Tables of a shortest route from `source` to `target` that crosses `edge` (an edge of this graph).

        The route may pass a table twice (a filter can come back to where it
        started, semantics.md section 5); None when `edge.src` is not reached
        from `source` or `target` not from `edge.dst`.
        """
        into, out_of = self._route_tree(edge.src, False), self._route_tree(edge.dst, True)
        s, x = self._index.get(source), self._index.get(target)
        if s is None or x is None or not into.seen[s] or not out_of.seen[x]:
            return None
        names, dst = self._names, self._dst
        head, here = [names[s]], s
        while into.edge[here] >= 0:  # the reverse tree's edge leads one step closer to edge.src
            here = dst[into.edge[here]]
            head.append(names[here])
        tail = [names[self._index[edge.dst]]] + [names[dst[e]] for e in out_of.path(x)]
        return tuple(head) + tuple(tail)

    def _route_tree(self, table: str, forward: bool) -> "_Tree":
        key = (table, forward)
        found = self._routes.recall(key)
        if found is None:
            found = self._routes.remember(key, _Tree(self, self._index[table], backward=not forward))
        return found

    # -- paths

    def paths(self, s: str, x: str, limit: int | None = None) -> list[Path]:
        """Simple paths from `s` to `x` as link-name tuples, sorted; at most `limit` of them.

        Without a limit every path is listed, which can take exponential time on
        a large, densely linked model: use `path_set`, `is_ambiguous` or
        `path_signature` for questions that do not need the full list.
        """
        return list(self.path_set(s, x, limit, budget=None).paths)

    def path_set(self, s: str, x: str, limit: int | None = DEFAULT_PATH_LIMIT,
                 budget: int | None = DEFAULT_STEP_BUDGET) -> PathSet:
        """The first `limit` simple paths in sorted order; stops early after `budget` search steps."""
        si, xi = self._index.get(s), self._index.get(x)
        if si is None or xi is None or si == xi:
            return PathSet((), True)
        return _list_paths(self, si, xi, limit, budget)

    def is_path(self, s: str, path: Iterable[str], x: str) -> bool:
        """Whether `path` (link names) is a simple path from `s` to `x` in this graph."""
        here = self._index.get(s)
        if here is None or x not in self._index:
            return False
        seen = {here}
        steps = 0
        for link in path:
            nxt = next((v for v, e in self._out[here] if self._link[e] == link and v != here), None)
            if nxt is None or nxt in seen:
                return False
            here = nxt
            seen.add(here)
            steps += 1
        return steps > 0 and here == self._index[x]

    def path_signature(self, s: str, x: str) -> frozenset[Edge]:
        """A cheap stand-in for the set of paths from `s` to `x`, to compare two revisions.

        It holds every edge that lies on some simple path from `s` to `x`, and
        leaves out most that cannot: an edge (u, v) counts when s reaches u, v
        reaches x, v is not s, u is not x, v does not dominate u (else a path
        would pass v twice) and u is not on every way from v to x (else it would
        pass u twice). So equal signatures mean equal path sets; unequal ones
        may still hide equal path sets (`path_delta` tells exactly).
        """
        si, xi = self._index.get(s), self._index.get(x)
        if si is None or xi is None or si == xi or x not in self.reach(s):
            return frozenset()
        ahead = {self._index[t] for t in self.reaching(x)}
        fore_pre, fore_size = self._dominator_tree(si, forward=True)
        back_pre, back_size = self._dominator_tree(xi, forward=False)
        found = []
        for u in (self._index[t] for t in self.reach(s)):
            if u == xi:
                continue
            for v, e in self._out[u]:
                if v not in ahead or v == si:
                    continue
                if fore_pre[v] <= fore_pre[u] < fore_pre[v] + fore_size[v]:
                    continue  # every way to u passes v
                if back_pre[u] <= back_pre[v] < back_pre[u] + back_size[u]:
                    continue  # every way from v to x passes u
                found.append(self.edges[e])
        return frozenset(found)

    # -- ambiguity

    def is_ambiguous(self, s: str, x: str) -> bool:
        """Two or more distinct simple paths from `s` to `x` (s != x)."""
        si, xi = self._index.get(s), self._index.get(x)
        if si is None or xi is None or si == xi:
            return False
        return bool(self._analysis(si).ambiguous[xi])

    def ambiguous_targets(self, s: str) -> frozenset[str]:
        """Tables that a filter on `s` reaches along two or more routes."""
        si = self._index.get(s)
        if si is None:
            return frozenset()
        return frozenset(self._names[t] for t in self._analysis(si).targets())

    def witness(self, s: str, x: str) -> tuple[Path, Path] | None:
        """Two distinct simple paths from `s` to `x` (shorter first), or None when there are not two."""
        if not self.is_ambiguous(s, x):
            return None
        return self._ordered(self._analysis(self._index[s]).witness(self._index[x]))

    def ambiguous_pairs(self, sources: Iterable[str] | None = None, targets: Iterable[str] | None = None,
                        limit: int | None = None) -> list[tuple[str, str, Path, Path]]:
        """Ambiguous pairs as (source, target, path1, path2), sorted; the first `limit` when given.

        A densely linked model can have a great many ambiguous pairs: count them
        with `ambiguous_count` and list a few, rather than build every witness.
        """
        result: list[tuple[str, str, Path, Path]] = []
        for s, analysis, found in self._ambiguous_by_source(sources, targets):
            for x in found:
                if limit is not None and len(result) >= limit:
                    return result
                first, second = self._ordered(analysis.witness(x))
                result.append((self._names[s], self._names[x], first, second))
        return result

    def ambiguous_count(self, sources: Iterable[str] | None = None, targets: Iterable[str] | None = None) -> int:
        """How many pairs `ambiguous_pairs` would list, without building witnesses."""
        return sum(len(found) for _, _, found in self._ambiguous_by_source(sources, targets))

    def _ambiguous_by_source(self, sources, targets):
        wanted = None if targets is None else {self._index[t] for t in targets if t in self._index}
        chosen = range(len(self._names)) if sources is None else sorted(
            self._index[s] for s in set(sources) if s in self._index)
        for s in chosen:
            analysis = self._analysis(s, keep=sources is not None)
            found = [x for x in analysis.targets() if wanted is None or x in wanted]
            if found:
                yield s, analysis, found

    # -- internals

    def _closure(self, start: str, adjacency: list[list[tuple[int, int]]]) -> frozenset[str]:
        i = self._index.get(start)
        if i is None:
            return frozenset()
        seen = {i}
        stack = [i]
        while stack:
            for v, _ in adjacency[stack.pop()]:
                if v not in seen:
                    seen.add(v)
                    stack.append(v)
        return frozenset(self._names[v] for v in seen)

    def _dominator_tree(self, root: int, forward: bool) -> tuple[list[int], list[int]]:
        """Pre-order numbers and sizes of the dominator tree from `root` (of the reversed graph when not forward)."""
        key = (root, forward)
        found = self._dominators.recall(key)
        if found is None:
            out, into = (self._out, self._in) if forward else (self._in, self._out)
            found = self._dominators.remember(key, _number(*_dominators(out, into, root)))
        return found

    def _analysis(self, s: int, keep: bool = True) -> _SourceAnalysis:
        found = self._analyses.recall(s)
        if found is None:
            found = _SourceAnalysis(self, s)
            if keep:
                self._analyses.remember(s, found)
        return found

    def _path_names(self, edges: Iterable[int]) -> Path:
        return tuple(map(self._link.__getitem__, edges))

    def _ordered(self, pair: tuple[tuple[int, ...], tuple[int, ...]]) -> tuple[Path, Path]:
        first, second = sorted(map(self._path_names, pair), key=lambda p: (len(p), p))
        return first, second


def path_delta(old: FilterGraph, new: FilterGraph, s: str, x: str,
               limit: int = DEFAULT_PATH_LIMIT, budget: int | None = DEFAULT_STEP_BUDGET) -> PathDelta:
    """Paths from `s` to `x` that `new` adds to and removes from `old`.

    Equal signatures answer at once; otherwise up to `limit` paths of each side
    are listed and each is checked exactly against the other graph.
    """
    if old.path_signature(s, x) == new.path_signature(s, x):
        return PathDelta()
    before = old.path_set(s, x, limit, budget)
    after = new.path_set(s, x, limit, budget)
    added = tuple(p for p in after.paths if not old.is_path(s, p, x))
    removed = tuple(p for p in before.paths if not new.is_path(s, p, x))
    return PathDelta(added, removed, before.complete and after.complete)


# --- roles ------------------------------------------------------------------------------


def role_restricted(model: Model, role: Role | str, graph: FilterGraph | None = None) -> dict[str, Path]:
    """Tables a role restricts, each with one path from one of its filtered tables.

    A filtered table maps to the empty path. The path is a shortest one from
    the nearest filtered table (ties broken by table name, then link name).
    Filters on tables that do not exist are ignored.
    """
    if isinstance(role, str):
        if role not in model.roles:
            raise ModeldiffError(f"Model {model.name} has no role {role}; name one of its roles.")
        role = model.roles[role]
    graph = security_graph(model) if graph is None else graph
    starts = sorted(graph._index[t] for t in role.filters if t in graph._index)
    tree = _Tree(graph, *starts)
    return {graph._names[v]: graph._path_names(tree.path(v)) for v in sorted(tree.order)}


def security_stops(model: Model, role: Role | str, graph: FilterGraph | None = None) -> list[tuple[str, str]]:
    """(link, table) pairs where a role's filter stops short of `table`.

    The link flows two-way for filters, but its `security_flow` is one-way, the
    role restricts the link's `from` table and restricts `table` (the link's
    `to` table) along no other route. Sorted.
    """
    restricted = role_restricted(model, role, graph)
    stops = []
    for name in sorted(model.links):
        link = model.links[name]
        if (not link.standby and link.flow == TWO_WAY and link.security_flow != TWO_WAY
                and link.cardinality != ONE_TO_ONE and link.from_table in restricted
                and link.to_table in model.tables and link.to_table not in restricted):
            stops.append((name, link.to_table))
    return stops


# --- algorithms -------------------------------------------------------------------------


class _Tree:
    """A breadth-first tree from one or more starts, out-edges in link-name order.

    `avoid` keeps one table out of the search; `backward` walks edges against
    their direction (a tree of the routes into the starts).
    """

    def __init__(self, graph: FilterGraph, *starts: int, avoid: int = -1, backward: bool = False) -> None:
        n = len(graph._names)
        self.graph = graph
        self.edge = [-1] * n  # tree edge into each table (out of it, toward the start, when `backward`)
        self.seen = bytearray(n)
        for s in starts:
            self.seen[s] = 1
        if avoid >= 0:
            self.seen[avoid] = 1
        order = list(dict.fromkeys(starts))
        out, seen, edge = graph._in if backward else graph._out, self.seen, self.edge
        for u in order:  # the list grows while it is walked: a queue
            for v, e in out[u]:
                if not seen[v]:
                    seen[v] = 1
                    edge[v] = e
                    order.append(v)
        if avoid >= 0 and avoid not in starts:
            self.seen[avoid] = 0
        self.order = order

    def path(self, v: int) -> tuple[int, ...]:
        edges = []
        edge, src = self.edge, self.graph._src
        e = edge[v]
        while e >= 0:
            edges.append(e)
            e = edge[src[e]]
        return tuple(reversed(edges))


def _list_paths(graph: FilterGraph, s: int, x: int, limit: int | None, budget: int | None) -> PathSet:
    """Depth-first listing in link-name order, which is sorted order: no path is a prefix of another."""
    useful = {graph._index[t] for t in graph.reaching(graph._names[x])}
    if s not in useful:
        return PathSet((), True)
    walk = _Walk(graph, s, x, useful, budget)
    found: list[Path] = []
    while limit is None or len(found) < limit:
        path = walk.next()
        if path is None:
            return PathSet(tuple(found), not walk.cut)
        found.append(graph._path_names(path))
    if budget is not None:
        walk.budget = walk.steps + budget  # a fresh allowance to look for one more path
    return PathSet(tuple(found), walk.next() is None and not walk.cut)


class _Walk:
    """Simple paths from s to x, depth first, pruned to tables that can reach x.

    `next()` returns the next path (edge numbers) or None; `cut` tells whether
    it stopped because the step budget ran out rather than because no path was
    left.
    """

    def __init__(self, graph: FilterGraph, s: int, x: int, useful: set[int], budget: int | None) -> None:
        self.graph, self.x, self.useful, self.budget = graph, x, useful, budget
        self.steps = 0
        self.cut = False
        self.on_path = {s}
        self.trail: list[int] = []
        self.stack = [iter(graph._out[s])]

    def next(self) -> tuple[int, ...] | None:
        dst, out, on_path, trail, stack = self.graph._dst, self.graph._out, self.on_path, self.trail, self.stack
        while stack:
            step = next(stack[-1], None)
            if step is None:
                stack.pop()
                if trail:
                    on_path.discard(dst[trail.pop()])
                continue
            self.steps += 1
            if self.budget is not None and self.steps > self.budget:
                self.cut = True
                return None
            v, e = step
            if v in on_path or v not in self.useful:
                continue
            if v == self.x:
                return tuple(trail) + (e,)
            trail.append(e)
            on_path.add(v)
            stack.append(iter(out[v]))
        return None


class _SourceAnalysis:
    """Which targets a filter on one source reaches along two or more simple paths.

    Let P(t) be t's path in a breadth-first tree from s and p its parent.
    Claim: (s, t) has exactly one simple path iff (s, p) does (or p = s) and
    every other edge (u, t) with u reachable from s has u dominated by t (every
    path from s to u passes through t; a self-loop counts as dominated).

    Proof. If t has a unique path it is P(t). If some table v on P(t) had two
    paths Q1, Q2, let y be the first table of Q1 on P(t)'s part from v to t;
    if y != v, Q1 up to y then P(t) from y is a second path to t (it avoids v,
    P(t) does not); if y = v for both Q1 and Q2, Q1 and Q2 each continued
    along P(t) are two paths. So a unique t has a unique parent. An edge (u, t)
    other than the tree edge with a path from s to u avoiding t gives a second
    path to t. Conversely, if p is unique and no such edge exists, any simple
    path to t ends with an edge (u, t) whose u is reached without t, so that
    edge is the tree edge, and the rest is p's unique path: the path is P(t).

    Cost: one breadth-first search, one tree numbering and, only when an
    extra in-edge comes from a table below t in the tree, one dominator tree
    (Cooper, Harvey and Kennedy's iterative algorithm). Witnesses follow the
    proof: "edge" (the tree path and a path ending with another in-edge),
    "detour" (the same, the other path found avoiding t) and "inherit" (the
    parent's two paths, extended).
    """

    EDGE, DETOUR, INHERIT = 1, 2, 3
    SEARCH_FACTOR = 1  # backward searches may cost this many times the graph's size

    def __init__(self, graph: FilterGraph, source: int) -> None:
        self.graph = graph
        self.source = source
        self.tree = _Tree(graph, source)
        n = len(graph._names)
        self.depth = depth = [0] * n
        parent = [-1] * n
        src, edge = graph._src, self.tree.edge
        for v in self.tree.order[1:]:  # the tables reached only: a source reaching few costs little
            p = parent[v] = src[edge[v]]
            depth[v] = depth[p] + 1
        self.pre, self.size = _number(self.tree.order, parent)
        self._dom: tuple[list[int], list[int]] | None = None
        self._budget = self.SEARCH_FACTOR * (n + len(graph.edges))  # backward searches before a dominator tree
        self.ambiguous = bytearray(n)
        self._marked: list[int] = []  # the ambiguous targets, so listing them costs their number, not n
        self.kind = bytearray(n)
        self.other = [-1] * n  # the in-edge giving the second path, for EDGE and DETOUR
        for t in self.tree.order[1:]:
            self._classify(t)
        self._witnesses: dict[int, tuple[tuple[int, ...], tuple[int, ...]]] = {}

    def targets(self) -> list[int]:
        return sorted(self._marked)

    def _classify(self, t: int) -> None:
        tree_edge = self.tree.edge[t]
        seen, pre, size, depth = self.tree.seen, self.pre, self.size, self.depth
        low, high = pre[t], pre[t] + size[t]
        best = None
        below = []
        for u, e in self.graph._in[t]:
            if e == tree_edge or u == t or not seen[u]:
                continue
            if low <= pre[u] < high:
                below.append((u, e))
            elif best is None or depth[u] < depth[self.graph._src[best]]:
                best = e  # in-edges come in link order: the first of the shallowest wins
        if best is not None:  # a tree path to u avoids t
            self._mark(t, self.EDGE, best)
        elif self.ambiguous[self.graph._src[tree_edge]]:
            self._mark(t, self.INHERIT, -1)
        else:
            for u, e in below:  # each from below t: does every path to u pass t?
                if not self._dominates(t, u):
                    self._mark(t, self.DETOUR, e)
                    break

    def _mark(self, t: int, kind: int, edge: int) -> None:
        if not self.ambiguous[t]:
            self._marked.append(t)
        self.ambiguous[t] = 1
        self.kind[t] = kind
        self.other[t] = edge

    def _dominates(self, t: int, u: int) -> bool:
        """Whether every path from the source to u (below t in the tree) passes through t.

        First a backward search from u that avoids t: meeting a table outside
        t's subtree means a path around t (the tree path to that table). Once
        these searches have cost as much as the graph's size, one dominator
        tree answers the rest.
        """
        if self._dom is None:
            found = self._search_back(t, u)
            if found is not None:
                return found
            self._dom = self.graph._dominator_tree(self.source, forward=True)
        pre, size = self._dom
        return pre[t] <= pre[u] < pre[t] + size[t]

    def _search_back(self, t: int, u: int) -> bool | None:
        into, seen, pre = self.graph._in, self.tree.seen, self.pre
        low, high = pre[t], pre[t] + self.size[t]
        budget = self._budget
        visited = {u}
        stack = [u]
        while stack:
            for w, _ in into[stack.pop()]:
                budget -= 1
                if w == t or w in visited or not seen[w]:
                    continue
                if not low <= pre[w] < high:
                    self._budget = budget
                    return False
                visited.add(w)
                stack.append(w)
            if budget < 0:
                self._budget = budget
                return None
        self._budget = budget
        return True

    def witness(self, t: int) -> tuple[tuple[int, ...], tuple[int, ...]]:
        """Two distinct simple paths (edge numbers) to an ambiguous t, built as in the proof."""
        memo = self._witnesses
        src = self.graph._src
        chain = []
        here = t
        while here not in memo and self.kind[here] == self.INHERIT:
            chain.append(here)
            here = src[self.tree.edge[here]]
        if here not in memo:
            memo[here] = self._root_witness(here)
        for child in reversed(chain):
            q1, q2 = memo[src[self.tree.edge[child]]]
            memo[child] = self._extend(q1, q2, child)
        return memo[t]

    def _root_witness(self, t: int) -> tuple[tuple[int, ...], tuple[int, ...]]:
        other = self.other[t]
        u = self.graph._src[other]
        if self.kind[t] == self.EDGE:
            return self.tree.path(t), self.tree.path(u) + (other,)
        around = _Tree(self.graph, self.source, avoid=t)
        return self.tree.path(t), around.path(u) + (other,)

    def _extend(self, q1, q2, child: int) -> tuple[tuple[int, ...], tuple[int, ...]]:
        dst = self.graph._dst
        for q in (q1, q2):
            for i, e in enumerate(q):
                if dst[e] == child:
                    return q[: i + 1], self.tree.path(child)
        step = self.tree.edge[child]
        return q1 + (step,), q2 + (step,)


def _number(order: list[int], parent: list[int]) -> tuple[list[int], list[int]]:
    """Pre-order numbers and subtree sizes of a tree; `order` lists parents before children.

    v lies below t (or is t) iff pre[t] <= pre[v] < pre[t] + size[t].
    """
    n = len(parent)
    size = [1] * n
    for v in reversed(order[1:]):
        size[parent[v]] += size[v]
    pre = [-1] * n
    free = [0] * n  # next pre-order number for a child of each table
    pre[order[0]] = 0
    free[order[0]] = 1
    for v in order[1:]:
        p = parent[v]
        pre[v] = free[p]
        free[p] += size[v]
        free[v] = pre[v] + 1
    return pre, size


def _dominators(out: list[list[tuple[int, int]]], into: list[list[tuple[int, int]]],
                source: int) -> tuple[list[int], list[int]]:
    """Immediate dominators from `source`, by Cooper, Harvey and Kennedy's iterative algorithm.

    Returns the reachable tables in reverse postorder (every dominator before
    what it dominates) and each one's immediate dominator (-1 for the source
    and unreachable tables).
    """
    n = len(out)
    post = [-1] * n
    order: list[int] = []
    seen = bytearray(n)
    seen[source] = 1
    stack = [(source, iter(out[source]))]
    while stack:
        u, it = stack[-1]
        for v, _ in it:
            if not seen[v]:
                seen[v] = 1
                stack.append((v, iter(out[v])))
                break
        else:
            stack.pop()
            post[u] = len(order)
            order.append(u)
    order.reverse()
    idom = [-1] * n
    idom[source] = source
    changed = True
    while changed:
        changed = False
        for b in order[1:]:
            new = -1
            for p, _ in into[b]:
                if idom[p] < 0:
                    continue
                if new < 0:
                    new = p
                    continue
                a = p
                while a != new:
                    while post[a] < post[new]:
                        a = idom[a]
                    while post[new] < post[a]:
                        new = idom[new]
            if idom[b] != new:
                idom[b] = new
                changed = True
    idom[source] = -1
    return order, idom
