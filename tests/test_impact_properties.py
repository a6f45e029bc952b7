"""Property tests of modeldiff.impact against a brute-force reference.

Reference: networkx all_simple_edge_paths and descendants as brute-force references, run over
every pair of tables of both revisions' flow graphs, which are rebuilt here
straight from semantics.md section 2 (edge T -> F for every non-standby link,
F -> T as well when it is two-way or one-to-one), and networkx descendants
over the security graph of section 3. Models are small and random: a few
tables, random links, and random flow / standby flips, removals, additions
and renames between the old and the new revision.
"""

from __future__ import annotations

from dataclasses import dataclass

import networkx as nx
from hypothesis import given, settings, strategies as st

from modeldiff import impact
from modeldiff.model import Column, Link, Measure, Model, Role, Table

TABLES = ["calendar", "districts", "stations", "bikes", "trips"]

settings.register_profile("impact", max_examples=150, deadline=None)
settings.load_profile("impact")


@dataclass(frozen=True)
class LinkSpec:
    index: int
    src: str
    dst: str
    cardinality: str
    old: tuple[bool, str, bool, str] | None  # (present, flow, standby, security_flow) or None when absent
    new: tuple[bool, str, bool, str] | None
    renamed: bool = False


@st.composite
def revisions(draw, max_tables=5, max_links=6):
    """Two revisions of one small model, and the role each filters by (table or None)."""
    tables = TABLES[:draw(st.integers(2, max_tables))]
    specs = []
    for i in range(draw(st.integers(1, max_links))):
        src = draw(st.sampled_from(tables))
        dst = draw(st.sampled_from([t for t in tables if t != src]))
        cardinality = draw(st.sampled_from(["many-to-one", "many-to-one", "one-to-one", "many-to-many"]))

        def side():
            if draw(st.integers(0, 5)) == 0:
                return None
            return (True, draw(st.sampled_from(["one-way", "two-way"])), draw(st.booleans()),
                    draw(st.sampled_from(["one-way", "two-way"])))

        old = side()
        new = old if old is not None and draw(st.booleans()) else side()
        renamed = old is not None and new == old and draw(st.integers(0, 4)) == 0
        specs.append(LinkSpec(i, src, dst, cardinality, old, new, renamed))
    role_table = draw(st.one_of(st.none(), st.sampled_from(tables)))
    return tables, specs, role_table


def build(tables, specs, role_table, side: str) -> Model:
    columns = {t: {"k": Column("k", "integer")} for t in tables}
    links = {}
    for spec in specs:
        state = getattr(spec, side)
        columns[spec.src][f"fk{spec.index}"] = Column(f"fk{spec.index}", "integer")
        if state is None:
            continue
        _, flow, standby, security = state
        name = f"l{spec.index}" + ("_r" if spec.renamed and side == "new" else "")
        links[name] = Link(name, spec.src, (f"fk{spec.index}",), spec.dst, ("k",), spec.cardinality, flow,
                           security, standby)
    model_tables = {t: Table(t, "fact", ("k",), columns[t]) for t in tables}
    measures = {f"m_{t}": Measure(f"m_{t}", "count(*)", t) for t in tables}
    roles = {"viewer": Role("viewer", {role_table: "k = 1"})} if role_table else {}
    return Model("random", model_tables, links, measures, {}, roles)


def old_to_new(specs) -> dict[str, str]:
    return {f"l{s.index}": f"l{s.index}_r" for s in specs if s.renamed}


def flow_reference(model: Model, rename: dict[str, str]) -> nx.MultiDiGraph:
    """semantics.md section 2, written again here; link names read in the new revision's names."""
    g = nx.MultiDiGraph()
    g.add_nodes_from(model.tables)
    for link in model.links.values():
        if link.standby:
            continue
        name = rename.get(link.name, link.name)
        g.add_edge(link.to_table, link.from_table, key=name)
        if link.flow == "two-way" or link.cardinality == "one-to-one":
            g.add_edge(link.from_table, link.to_table, key=name)
    return g


def security_reference(model: Model, rename: dict[str, str] | None = None) -> nx.MultiDiGraph:
    """semantics.md section 3: T -> F always, F -> T for one-to-one or two-way with two-way security."""
    g = nx.MultiDiGraph()
    g.add_nodes_from(model.tables)
    for link in model.links.values():
        if link.standby:
            continue
        name = (rename or {}).get(link.name, link.name)
        g.add_edge(link.to_table, link.from_table, key=name)
        if link.cardinality == "one-to-one" or (link.flow == "two-way" and link.security_flow == "two-way"):
            g.add_edge(link.from_table, link.to_table, key=name)
    return g


def all_paths(g: nx.MultiDiGraph) -> dict[tuple[str, str], set[tuple[str, ...]]]:
    out = {}
    for s in g.nodes:
        for x in g.nodes:
            if s != x:
                out[(s, x)] = {tuple(key for _, _, key in path) for path in nx.all_simple_edge_paths(g, s, x)}
    return out


def analyse(tables, specs, role_table):
    old, new = build(tables, specs, role_table, "old"), build(tables, specs, role_table, "new")
    return old, new, impact.analyse(old, new)


def subjects(result, kind: str) -> dict[str, object]:
    return {c.subject: c for c in result.changes if c.kind == kind}


@given(revisions())
def test_path_changes_are_exactly_the_pairs_whose_path_sets_differ(case):
    old, new, result = analyse(*case)
    before = all_paths(flow_reference(old, old_to_new(case[1])))
    after = all_paths(flow_reference(new, {}))
    expected_added = {f"paths.{s}->{x}": sorted(after[(s, x)] - before[(s, x)])
                      for (s, x) in after if after[(s, x)] - before[(s, x)]}
    expected_removed = {f"paths.{s}->{x}": sorted(before[(s, x)] - after[(s, x)])
                        for (s, x) in after if before[(s, x)] - after[(s, x)]}
    added, removed = subjects(result, "path.added"), subjects(result, "path.removed")
    assert {k: sorted(map(tuple, c.after)) for k, c in added.items()} == expected_added
    assert {k: sorted(map(tuple, c.before)) for k, c in removed.items()} == expected_removed


@given(revisions())
def test_ambiguity_changes_are_exactly_the_count_transitions(case):
    old, new, result = analyse(*case)
    before = all_paths(flow_reference(old, old_to_new(case[1])))
    after = all_paths(flow_reference(new, {}))
    introduced = {f"paths.{s}->{x}" for (s, x) in after if len(after[(s, x)]) >= 2 > len(before[(s, x)])}
    resolved = {f"paths.{s}->{x}" for (s, x) in after if len(before[(s, x)]) >= 2 > len(after[(s, x)])}
    assert set(subjects(result, "ambiguity.introduced")) == introduced
    assert set(subjects(result, "ambiguity.resolved")) == resolved
    for c in subjects(result, "ambiguity.introduced").values():  # two witnesses, both real new paths
        s, x = c.subject[len("paths."):].split("->")
        assert len({tuple(p) for p in c.after}) == 2 and {tuple(p) for p in c.after} <= after[(s, x)]


def changed_edges(before: nx.MultiDiGraph, after: nx.MultiDiGraph) -> list[tuple[nx.MultiDiGraph, str, str]]:
    """(graph, u, v) for each edge (u, v, link) in one graph and not the other (changes.md, Impact)."""
    b, a = set(before.edges(keys=True)), set(after.edges(keys=True))
    return [(before, u, v) for u, v, _ in b - a] + [(after, u, v) for u, v, _ in a - b]


def below(g: nx.MultiDiGraph, table: str) -> set[str]:
    return nx.descendants(g, table) | {table}


def above(g: nx.MultiDiGraph, table: str) -> set[str]:
    return nx.ancestors(g, table) | {table}


def reach_reference(before: nx.MultiDiGraph, after: nx.MultiDiGraph) -> dict[str, set[str]]:
    """Home table -> the sources from which a filter moves it: U reachable from S, H = W or reachable from W."""
    out: dict[str, set[str]] = {}
    for g, u, v in changed_edges(before, after):
        for home in below(g, v):
            out.setdefault(home, set()).update(above(g, u))
    return out


def role_rows_reference(old: Model, new: Model, rename: dict[str, str], role_table: str | None) -> set[str]:
    """Tables whose rows the role may see can change: below a changed security edge its filter reaches."""
    if role_table is None:
        return set()
    before, after = security_reference(old, rename), security_reference(new)
    rows: set[str] = set()
    for g, u, v in changed_edges(before, after):
        if u in below(g, role_table):
            rows |= below(g, v)
    return rows


@given(revisions())
def test_impacted_measures_are_the_tables_below_a_changed_edge_or_a_changed_role_row(case):
    old, new, result = analyse(*case)
    before, after = flow_reference(old, old_to_new(case[1])), flow_reference(new, {})
    expected = reach_reference(before, after)
    rows = role_rows_reference(old, new, old_to_new(case[1]), case[2])
    by_role = {x for table in rows for g in (before, after) for x in below(g, table)}
    assert {i.name for i in result.measures} == {f"m_{x}" for x in set(expected) | by_role}
    paths_before, paths_after = all_paths(before), all_paths(after)
    for i in result.measures:
        home = i.name[2:]
        edge_reasons = [r for r in i.reasons if r.paths_added or r.paths_removed or r.route]
        assert {r.source for r in edge_reasons} == expected.get(home, set())
        for r in i.reasons:
            if r.paths_added or r.paths_removed:
                assert set(r.paths_added) <= paths_after[(r.source, home)] - paths_before[(r.source, home)]
                assert set(r.paths_removed) <= paths_before[(r.source, home)] - paths_after[(r.source, home)]
            if r.route:  # a walk from the source to the home table
                assert (r.route[0], r.route[-1]) == (r.source, home)


@given(revisions())
def test_a_role_is_impacted_exactly_when_rows_it_may_see_can_change(case):
    old, new, result = analyse(*case)
    rows = role_rows_reference(old, new, old_to_new(case[1]), case[2])
    security = [c for c in result.changes if c.kind.startswith("security.")]
    assert bool([i for i in result.roles if i.name == "viewer"]) == bool(rows or security)


@given(revisions())
def test_every_path_reason_blames_a_change_of_a_link_on_its_paths(case):
    _, _, result = analyse(*case)
    by_id = {c.id: c for c in result.changes}
    for i in result.measures:
        for r in i.reasons:
            if not (r.paths_added or r.paths_removed):
                continue
            blamed = by_id[r.change]
            assert blamed.kind.startswith("link.")
            link = blamed.subject.split(".", 1)[1]
            assert all(link in p for p in r.paths_added + r.paths_removed)


@given(revisions())
def test_security_changes_match_reach_in_the_security_graphs(case):
    old, new, result = analyse(*case)
    role_table = case[2]
    exposed = {c.subject for c in result.changes if c.kind == "security.exposed"}
    tightened = {c.subject for c in result.changes if c.kind == "security.tightened"}
    if role_table is None:
        assert not exposed and not tightened
        return
    before = nx.descendants(security_reference(old), role_table) | {role_table}
    after = nx.descendants(security_reference(new), role_table) | {role_table}
    assert exposed == {f"roles.viewer.tables.{t}" for t in before - after}
    assert tightened == {f"roles.viewer.tables.{t}" for t in after - before}


@given(revisions())
def test_changed_pairs_filtered_by_source_or_target_is_the_unfiltered_answer_restricted(case):
    from modeldiff import graph

    old, new = build(*case, "old"), build(*case, "new")
    renames = impact.Renames.named(links=old_to_new(case[1]))
    g_old, g_new = graph.flow_graph(old), graph.flow_graph(new)
    everything = impact.changed_pairs(g_old, g_new, renames)
    some = set(case[0][::2])
    assert impact.changed_pairs(g_old, g_new, renames, sources=some) == {k: v for k, v in everything.items() if k[0] in some}
    assert impact.changed_pairs(g_old, g_new, renames, targets=some) == {k: v for k, v in everything.items() if k[1] in some}


@given(revisions())
def test_comparing_a_revision_with_itself_reports_nothing(case):
    old = build(*case, "old")
    result = impact.analyse(old, old)
    assert (result.changes, result.measures, result.roles, result.reports) == ((), (), (), ())


# --- measures with their own settings ---------------------------------------------------------------


def setting_reference(model: Model, via: tuple[str, ...], flow: dict[str, str]) -> nx.MultiDiGraph:
    """semantics.md sections 1-2 written again: `via` carries a link and benches its twins, `flow` sets or removes."""
    standby = {n: link.standby for n, link in model.links.items()}
    flows = {n: link.flow for n, link in model.links.items()}
    for name in via:
        standby[name] = False
    for name in via:
        for twin, link in model.links.items():
            if twin not in via and link.tables == model.links[name].tables:
                standby[twin] = True
    flows.update(flow)
    g = nx.MultiDiGraph()
    g.add_nodes_from(model.tables)
    for name, link in model.links.items():
        if standby[name] or flows[name] == "off":
            continue
        g.add_edge(link.to_table, link.from_table, key=name)
        if flows[name] == "two-way" or link.cardinality == "one-to-one":
            g.add_edge(link.from_table, link.to_table, key=name)
    return g


@st.composite
def revisions_with_overrides(draw):
    tables, specs, _ = draw(revisions())
    specs = [s for s in specs if s.old is not None and s.new is not None and not s.renamed]  # overrides name them
    names = [f"l{s.index}" for s in specs]

    def overrides():
        via = tuple(draw(st.lists(st.sampled_from(names), max_size=1))) if names else ()
        flow = dict(draw(st.lists(st.tuples(st.sampled_from(names), st.sampled_from(["one-way", "two-way", "off"])),
                                  max_size=1))) if names else {}
        return via, flow

    chosen = {t: (overrides(), overrides()) for t in tables}
    return tables, specs, chosen


def with_overrides(model: Model, chosen, side: int) -> Model:
    from dataclasses import replace

    from modeldiff.model import Overrides

    measures = {}
    for t, m in ((n[2:], m) for n, m in model.measures.items()):
        via, flow = chosen[t][side]
        measures[m.name] = replace(m, overrides=Overrides(via, flow))
    return replace(model, measures=measures)


@given(revisions_with_overrides())
def test_a_measure_with_overrides_is_impacted_exactly_when_a_changed_edge_of_its_setting_reaches_its_home(case):
    tables, specs, chosen = case
    old = with_overrides(build(tables, specs, None, "old"), chosen, 0)
    new = with_overrides(build(tables, specs, None, "new"), chosen, 1)
    result = impact.analyse(old, new)
    expected = {}
    for t in tables:
        sources = reach_reference(setting_reference(old, *chosen[t][0]), setting_reference(new, *chosen[t][1])).get(t)
        if sources:
            expected[f"m_{t}"] = sources
    got = {i.name: {r.source for r in i.reasons} for i in result.measures}
    assert got == expected
    by_id = {c.id: c for c in result.changes}
    for i in result.measures:
        t = i.name[2:]
        old_setting = setting_reference(old, *chosen[t][0])
        new_setting = setting_reference(new, *chosen[t][1])
        model_alone = setting_reference(new, *chosen[t][0])  # the new links read with the old overrides
        for r in i.reasons:
            blamed = by_id[r.change]
            assert blamed.kind.startswith("link.") or (blamed.kind, blamed.subject) == (
                "measure.overrides_changed", f"measures.{i.name}")
            # a path is blamed on a link's change when the new model alone moved one of its changed edges,
            # otherwise on the measure's own overrides
            for path, here, there, came in [(p, new_setting, old_setting, True) for p in r.paths_added] + \
                                           [(p, old_setting, new_setting, False) for p in r.paths_removed]:
                changed = [e for e in walk(here, r.source, path) if not there.has_edge(*e)]
                by_model = [e for e in changed if model_alone.has_edge(*e) == came]
                if by_model:
                    assert blamed.kind.startswith("link.") and blamed.subject[len("links."):] in {e[2] for e in by_model}
                else:
                    assert (blamed.kind, blamed.subject) == ("measure.overrides_changed", f"measures.{i.name}")


def walk(g: nx.MultiDiGraph, source: str, path: tuple[str, ...]) -> list[tuple[str, str, str]]:
    """The (u, v, link) edges a path of link names crosses from `source`."""
    edges, here = [], source
    for link in path:
        step = next((u, v, k) for u, v, k in g.out_edges(here, keys=True) if k == link and v != here)
        edges.append(step)
        here = step[1]
    return edges
