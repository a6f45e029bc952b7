"""Property tests of modeldiff.graph against the networkx reference implementation.

Every reference answer here comes from networkx (descendants, ancestors,
all_simple_edge_paths) on a MultiDiGraph built straight from the edges, or
from the spec's text (semantics.md sections 2-3) rewritten independently in
this file. Sizes stay small so brute force is fast.
"""

from __future__ import annotations

import networkx as nx
from hypothesis import given, settings, strategies as st

from modeldiff import graph as g
from modeldiff.graph import Edge, FilterGraph
from tests.graphkit import build, ov, role

TABLES = ["calendar", "districts", "stations", "bikes", "trips", "repairs"]
WORDS = ["two-way", "one-to-one", "many-to-many", "standby", "secure"]

settings.register_profile("graph", max_examples=200, deadline=None)
settings.load_profile("graph")


@st.composite
def models(draw, max_tables=6, max_links=9):
    n = draw(st.integers(2, max_tables))
    tables = TABLES[:n]
    count = draw(st.integers(0, max_links))
    links = {}
    for i in range(count):
        src = draw(st.sampled_from(tables))
        dst = draw(st.sampled_from(tables))
        words = draw(st.lists(st.sampled_from(WORDS), unique=True, max_size=3))
        links[f"l{i}"] = " ".join([f"{src}->{dst}", *words])
    return build(links, tables=" ".join(tables))


@st.composite
def graphs(draw, max_tables=6, max_edges=10):
    """Raw multi-digraphs: parallel edges, self-loops, two-way pairs."""
    n = draw(st.integers(1, max_tables))
    tables = TABLES[:n]
    edges = []
    for i in range(draw(st.integers(0, max_edges))):
        src, dst = draw(st.sampled_from(tables)), draw(st.sampled_from(tables))
        edges.append(Edge(f"l{i}", src, dst))
        if draw(st.booleans()) and src != dst and draw(st.booleans()):
            edges.append(Edge(f"l{i}", dst, src))  # a link flowing both ways
    return FilterGraph(tables, edges)


def reference(fg: FilterGraph) -> nx.MultiDiGraph:
    ref = nx.MultiDiGraph()
    ref.add_nodes_from(fg.tables)
    ref.add_edges_from((e.src, e.dst, e.link) for e in fg.edges)
    return ref


def brute_paths(ref: nx.MultiDiGraph, s: str, x: str) -> set[tuple[str, ...]]:
    # networkx reference implementation: every simple edge path, as link names
    return {tuple(key for _, _, key in p) for p in nx.all_simple_edge_paths(ref, s, x)}


def walk(fg: FilterGraph, s: str, path: tuple[str, ...]) -> list[str]:
    """The tables a path visits, following edges independently of FilterGraph's own checks."""
    tables = [s]
    for name in path:
        steps = [e for e in fg.edges if e.src == tables[-1] and e.link == name]
        assert len(steps) == 1, (tables, name)
        tables.append(steps[0].dst)
    return tables


def pairs(fg: FilterGraph):
    return [(s, x) for s in sorted(fg.tables) for x in sorted(fg.tables) if s != x]


@given(graphs())
def test_reach_matches_networkx_descendants(fg):
    ref = reference(fg)
    for t in fg.tables:
        assert fg.reach(t) == frozenset(nx.descendants(ref, t)) | {t}
        assert fg.reaching(t) == frozenset(nx.ancestors(ref, t)) | {t}


@given(graphs(), st.lists(st.sampled_from(TABLES), max_size=3))
def test_reach_all_matches_networkx_descendants_of_each_start(fg, starts):
    ref = reference(fg)
    expected = set().union(*({t} | nx.descendants(ref, t) for t in starts if t in fg.tables))
    assert fg.reach_all(starts) == expected


@given(graphs())
def test_components_match_networkx_in_topological_order(fg):
    """networkx.strongly_connected_components and networkx.condensation are the reference."""
    ref = reference(fg)
    found = fg.components()
    assert sorted(found) == sorted(tuple(sorted(c)) for c in nx.strongly_connected_components(ref))
    position = {t: i for i, c in enumerate(found) for t in c}
    assert all(position[e.src] <= position[e.dst] for e in fg.edges)  # no edge goes back to an earlier component


def test_components_put_a_cycle_together_and_a_chain_apart():
    fg = FilterGraph(["a", "b", "c", "d"], [Edge("x", "a", "b"), Edge("y", "b", "a"), Edge("z", "b", "c")])
    assert fg.components() == [("d",), ("a", "b"), ("c",)]
    assert FilterGraph(["a", "b"], [Edge("x", "a", "b")]).components() == [("a",), ("b",)]


@given(graphs())
def test_ambiguity_and_paths_match_brute_force(fg):
    ref = reference(fg)
    expected_pairs = []
    for s, x in pairs(fg):
        every = brute_paths(ref, s, x)
        assert fg.paths(s, x) == sorted(every)
        assert fg.paths(s, x, limit=2) == sorted(every)[:2]
        assert fg.is_ambiguous(s, x) == (len(every) >= 2)
        assert (x in fg.ambiguous_targets(s)) == (len(every) >= 2)
        assert (fg.route(s, x) is None) == (not every)
        if every:
            assert fg.route(s, x) in every
            assert len(fg.route(s, x)) == min(len(p) for p in every)
        if len(every) >= 2:
            expected_pairs.append((s, x))
    assert [(s, x) for s, x, _, _ in fg.ambiguous_pairs()] == expected_pairs
    assert fg.ambiguous_count() == len(expected_pairs)


@given(graphs())
def test_ambiguity_is_the_same_when_only_dominator_trees_answer(fg):
    ref = reference(fg)
    saved = g._SourceAnalysis.SEARCH_FACTOR
    g._SourceAnalysis.SEARCH_FACTOR = 0  # skip the backward searches that normally answer first
    try:
        fresh = FilterGraph(fg.tables, fg.edges)
        for s, x in pairs(fg):
            assert fresh.is_ambiguous(s, x) == (len(brute_paths(ref, s, x)) >= 2)
            assert (fresh.witness(s, x) is None) == (fg.witness(s, x) is None)
    finally:
        g._SourceAnalysis.SEARCH_FACTOR = saved


@given(graphs())
def test_witnesses_are_two_real_distinct_simple_paths(fg):
    ref = reference(fg)
    for s, x in pairs(fg):
        found = fg.witness(s, x)
        if len(brute_paths(ref, s, x)) < 2:
            assert found is None
            continue
        first, second = found
        assert first != second
        for path in (first, second):
            tables = walk(fg, s, path)
            assert tables[0] == s and tables[-1] == x
            assert len(set(tables)) == len(tables)  # simple
            assert fg.is_path(s, path, x)
        assert (len(first), first) <= (len(second), second)
    for s, x, first, second in fg.ambiguous_pairs():
        assert (first, second) == fg.witness(s, x)


@given(graphs(), graphs())
def test_path_delta_matches_set_difference(old, new):
    old_ref, new_ref = reference(old), reference(new)
    for s in sorted(old.tables | new.tables):
        for x in sorted(old.tables | new.tables):
            if s == x:
                continue
            before = brute_paths(old_ref, s, x) if {s, x} <= old.tables else set()
            after = brute_paths(new_ref, s, x) if {s, x} <= new.tables else set()
            delta = g.path_delta(old, new, s, x)
            assert delta.complete
            assert set(delta.added) == after - before
            assert set(delta.removed) == before - after
            if old.path_signature(s, x) == new.path_signature(s, x):
                assert before == after


@given(graphs())
def test_signature_holds_every_edge_of_every_simple_path(fg):
    ref = reference(fg)
    for s, x in pairs(fg):
        used = {(u, v, key) for p in nx.all_simple_edge_paths(ref, s, x) for u, v, key in p}
        signature = {(e.src, e.dst, e.link) for e in fg.path_signature(s, x)}
        assert used <= signature


@given(graphs())
def test_dominators_match_networkx(fg):
    from modeldiff.graph import _dominators

    ref = reference(fg)
    for s in sorted(fg.tables):
        i = fg._index[s]
        _, idom = _dominators(fg._out, fg._in, i)
        ours = {fg._names[v]: fg._names[d] for v, d in enumerate(idom) if d >= 0}
        expected = nx.immediate_dominators(ref, s)  # networkx reference implementation
        expected.pop(s, None)  # networkx before 3.5 maps the start to itself
        assert ours == expected


@given(graphs(max_tables=5, max_edges=8), st.integers(1, 4))
def test_bounded_listing_says_whether_it_is_complete(fg, limit):
    ref = reference(fg)
    for s, x in pairs(fg):
        every = sorted(brute_paths(ref, s, x))
        listed = fg.path_set(s, x, limit=limit)
        assert list(listed.paths) == every[:limit]
        assert listed.complete == (len(every) <= limit)


def spec_flow_edges(model, flows):
    # semantics.md section 2, rewritten here: T -> F always; F -> T when two-way or one-to-one
    edges = set()
    for name, flow in flows.items():
        link = model.links[name]
        edges.add((name, link.to_table, link.from_table))
        if flow == "two-way" or link.cardinality == "one-to-one":
            edges.add((name, link.from_table, link.to_table))
    return edges


@given(models())
def test_flow_and_security_graphs_follow_the_spec(model):
    flow = g.flow_graph(model)
    default = {n: l.flow for n, l in model.links.items() if not l.standby}
    assert {(e.link, e.src, e.dst) for e in flow.edges} == spec_flow_edges(model, default)
    security = set()
    for name, link in model.links.items():
        if link.standby:
            continue
        security.add((name, link.to_table, link.from_table))
        if link.cardinality == "one-to-one" or (link.flow == "two-way" and link.security_flow == "two-way"):
            security.add((name, link.from_table, link.to_table))
    assert {(e.link, e.src, e.dst) for e in g.security_graph(model).edges} == security


@given(models(), st.lists(st.sampled_from(TABLES), min_size=1, max_size=3, unique=True))
def test_role_restricts_what_its_tables_reach_in_the_security_graph(model, filtered):
    filtered = [t for t in filtered if t in model.tables] or [sorted(model.tables)[0]]
    member = role("lead", " ".join(filtered))
    security = g.security_graph(model)
    ref = reference(security)
    expected = set(filtered).union(*(nx.descendants(ref, t) for t in filtered))
    restricted = g.role_restricted(model, member)
    assert set(restricted) == expected
    for table, path in restricted.items():
        start = next(t for t in sorted(filtered) if security.is_path(t, path, table) or (not path and t == table))
        assert walk(security, start, path)[-1] == table
    flow_reach = set().union(*(g.flow_graph(model).reach(t) for t in filtered))
    for name, table in g.security_stops(model, member):
        assert table not in restricted and table in flow_reach
        assert model.links[name].to_table == table


@given(models(), st.data())
def test_overrides_without_via_or_flow_change_nothing(model, data):
    names = sorted(model.links)
    assert g.resolve_setting(model, ov(), ov()) == g.resolve_setting(model)
    if not names:
        return
    name = data.draw(st.sampled_from(names))
    off = g.resolve_setting(model, ov(**{name: "off"}))
    assert name not in off.flows
    assert off.flows == {n: f for n, f in g.resolve_setting(model).flows.items() if n != name}
