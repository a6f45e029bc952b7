"""Unit tests of modeldiff.graph on small hand-made bike-share models (semantics.md sections 1-4)."""

from __future__ import annotations

import pytest

from modeldiff import graph as g
from modeldiff.errors import ModeldiffError
from modeldiff.graph import Edge, FilterGraph, Setting
from tests.graphkit import build, measure, ov, report, role, variant


def edges(fg: FilterGraph) -> set[tuple[str, str, str]]:
    return {(e.link, e.src, e.dst) for e in fg.edges}


# --- edges of the flow graph (section 2) -------------------------------------------------


def test_one_way_link_lets_the_referenced_table_filter_the_referencing_one():
    fg = g.flow_graph(build({"trips_bike": "trips->bikes"}))
    assert edges(fg) == {("trips_bike", "bikes", "trips")}
    assert fg.reach("bikes") == {"bikes", "trips"}
    assert fg.reach("trips") == {"trips"}
    assert fg.reaching("trips") == {"trips", "bikes"}


def test_two_way_link_also_lets_the_referencing_table_filter_the_referenced_one():
    fg = g.flow_graph(build({"trips_bike": "trips->bikes two-way"}))
    assert edges(fg) == {("trips_bike", "bikes", "trips"), ("trips_bike", "trips", "bikes")}
    assert fg.reach("trips") == {"trips", "bikes"}


def test_one_to_one_link_flows_both_ways_even_when_declared_one_way():
    fg = g.flow_graph(build({"bikes_spec": "bikes->parts one-to-one"}))
    assert edges(fg) == {("bikes_spec", "parts", "bikes"), ("bikes_spec", "bikes", "parts")}


def test_many_to_many_one_way_link_flows_one_way():
    fg = g.flow_graph(build({"repairs_parts": "repairs->parts many-to-many"}))
    assert edges(fg) == {("repairs_parts", "parts", "repairs")}


def test_a_table_with_no_links_reaches_only_itself_and_unknown_tables_reach_nothing():
    fg = g.flow_graph(build({"trips_bike": "trips->bikes"}, tables="riders"))
    assert fg.reach("riders") == {"riders"}
    assert fg.reach("nowhere") == frozenset()
    assert fg.paths("nowhere", "trips") == []
    assert not fg.is_ambiguous("nowhere", "trips")
    assert fg.witness("bikes", "nowhere") is None
    assert fg.route("bikes", "trips") == ("trips_bike",)
    assert fg.route("trips", "bikes") is None


def test_edges_to_tables_that_do_not_exist_are_dropped():
    fg = FilterGraph({"trips", "bikes"}, [Edge("trips_bike", "bikes", "trips"), Edge("ghost", "depots", "trips")])
    assert edges(fg) == {("trips_bike", "bikes", "trips")}


# --- settings (section 1) ----------------------------------------------------------------

CALENDAR = {
    "trips_start_day": "trips->calendar",
    "trips_end_day": "trips->calendar standby",
    "trips_return_day": "trips->calendar standby",
    "calendar_first_trip": "calendar->trips standby",
    "trips_bike": "trips->bikes",
}


def test_standby_links_carry_nothing_unless_used():
    model = build(CALENDAR)
    assert g.resolve_setting(model) == Setting({"trips_start_day": "one-way", "trips_bike": "one-way"})
    assert "trips_end_day" not in {e.link for e in g.flow_graph(model).edges}


def test_via_makes_a_standby_link_carry_and_puts_its_twins_on_standby():
    model = build(CALENDAR)
    setting = g.resolve_setting(model, ov("trips_end_day"))
    assert setting == Setting({"trips_end_day": "one-way", "trips_bike": "one-way"})
    assert edges(g.flow_graph(model, setting)) == {
        ("trips_end_day", "calendar", "trips"), ("trips_bike", "bikes", "trips")}


def test_via_puts_a_twin_written_in_the_other_direction_on_standby_too():
    model = build({"trips_start_day": "trips->calendar", "calendar_first_trip": "calendar->trips standby"})
    setting = g.resolve_setting(model, ov("calendar_first_trip"))
    assert setting.links == {"calendar_first_trip"}


def test_via_of_a_link_that_is_not_on_standby_changes_nothing():
    model = build(CALENDAR)
    assert g.resolve_setting(model, ov("trips_start_day")) == g.resolve_setting(model)


def test_flow_off_removes_the_link_in_that_setting_only():
    model = build(CALENDAR, measures=[measure("trip_count", overrides=ov(trips_bike="off"))])
    layers = g.setting_layers(model, measure=model.measures["trip_count"])
    assert g.resolve_setting(model, *layers).links == {"trips_start_day"}
    assert g.resolve_setting(model).links == {"trips_start_day", "trips_bike"}


def test_flow_override_sets_the_flow_of_a_carrying_link():
    model = build({"trips_bike": "trips->bikes", "trips_start_station": "trips->stations two-way"})
    setting = g.resolve_setting(model, ov(trips_bike="two-way", trips_start_station="one-way"))
    assert setting.flows == {"trips_bike": "two-way", "trips_start_station": "one-way"}
    assert edges(g.flow_graph(model, setting)) == {
        ("trips_bike", "bikes", "trips"), ("trips_bike", "trips", "bikes"),
        ("trips_start_station", "stations", "trips")}


def test_flow_override_alone_does_not_make_a_standby_link_carry():
    model = build(CALENDAR)
    assert "trips_end_day" not in g.resolve_setting(model, ov(trips_end_day="two-way")).flows
    assert g.resolve_setting(model, ov("trips_end_day", trips_end_day="two-way")).flows["trips_end_day"] == "two-way"


def test_overrides_and_unknown_names_are_ignored_when_they_name_no_link():
    model = build(CALENDAR)
    assert g.resolve_setting(model, ov("ghost", ghost="off")) == g.resolve_setting(model)


def _layered_model():
    return build(
        CALENDAR,
        measures=[measure("trip_count", overrides=ov(trips_bike="one-way")),
                  measure("ride_count")],
        variants=[variant("attribution", "plain", plain=ov(), quiet=ov(trips_bike="off"),
                          ended=ov("trips_end_day"))],
        reports=[report("weekly", "trip_count", {"attribution": "quiet"}, ov(trips_bike="two-way")),
                 report("ended", "trip_count", {"attribution": "ended"}, ov("trips_return_day")),
                 report("plain", "trip_count")],
    )


def test_setting_layers_are_variant_option_then_report_then_measure():
    model = _layered_model()
    m, r = model.measures["trip_count"], model.reports["weekly"]
    assert g.setting_layers(model, measure=m, report=r) == (
        ov(trips_bike="off"), ov(trips_bike="two-way"), ov(trips_bike="one-way"))
    assert g.setting_layers(model, measure=m) == (ov(trips_bike="one-way"),)
    assert g.setting_layers(model, report=r) == (ov(trips_bike="off"), ov(trips_bike="two-way"))
    assert g.setting_layers(model) == ()


def test_later_layers_win_model_variant_report_measure():
    model = _layered_model()
    m, r = model.measures["trip_count"], model.reports["weekly"]
    variant_only = g.resolve_setting(model, *g.setting_layers(model, report=r)[:1])
    assert "trips_bike" not in variant_only.flows
    assert g.resolve_setting(model, *g.setting_layers(model, report=r)).flows["trips_bike"] == "two-way"
    assert g.measure_setting(model, m, r).flows["trips_bike"] == "one-way"
    # the same layers in the opposite order give the opposite answer
    assert "trips_bike" not in g.resolve_setting(model, *reversed(g.setting_layers(model, m, r))).flows


def test_a_later_via_replaces_an_earlier_one_between_the_same_tables():
    model = _layered_model()
    setting = g.resolve_setting(model, *g.setting_layers(model, report=model.reports["ended"]))
    assert setting.links == {"trips_return_day", "trips_bike"}


def test_a_later_via_brings_back_a_link_an_earlier_layer_turned_off():
    model = build(CALENDAR)
    setting = g.resolve_setting(model, ov(trips_end_day="off"), ov("trips_end_day"))
    assert setting.flows["trips_end_day"] == "one-way"


def test_variants_a_report_does_not_choose_add_nothing_unless_defaults_are_asked_for():
    model = build(CALENDAR, variants=[variant("attribution", "ended", plain=ov(), ended=ov("trips_end_day"))],
                  reports=[report("plain", "trip_count")])
    r = model.reports["plain"]
    assert g.setting_layers(model, report=r) == ()
    assert g.setting_layers(model, report=r, variant_defaults=True) == (ov("trips_end_day"),)


def test_a_report_choosing_an_unknown_variant_or_option_adds_nothing():
    model = build(CALENDAR, variants=[variant("attribution", "plain", plain=ov(), ended=ov("trips_end_day"))],
                  reports=[report("odd", "trip_count", {"attribution": "nope", "ghost": "x"})])
    assert g.setting_layers(model, report=model.reports["odd"]) == ()


def test_settings_compare_and_hash_by_their_flows():
    assert Setting({"b": "one-way", "a": "two-way"}) == Setting({"a": "two-way", "b": "one-way"})
    assert len({Setting({"b": "one-way", "a": "two-way"}), Setting({"a": "two-way", "b": "one-way"})}) == 1
    assert Setting({"a": "two-way"}) != Setting({"a": "one-way"})


# --- the security graph (section 3) ------------------------------------------------------


def test_security_graph_ignores_every_override():
    model = build(CALENDAR, measures=[measure("trip_count", overrides=ov("trips_end_day", trips_bike="off"))])
    assert edges(g.security_graph(model)) == {
        ("trips_start_day", "calendar", "trips"), ("trips_bike", "bikes", "trips")}


@pytest.mark.parametrize("words, reverse", [
    ("", False),
    ("two-way", False),
    ("secure", False),
    ("two-way secure", True),
    ("one-to-one", True),
    ("one-to-one secure", True),
])
def test_security_crosses_back_only_with_two_way_flow_and_two_way_security_flow(words, reverse):
    model = build({"trips_bike": f"trips->bikes {words}"})
    expected = {("trips_bike", "bikes", "trips")} | ({("trips_bike", "trips", "bikes")} if reverse else set())
    assert edges(g.security_graph(model)) == expected


def test_security_graph_leaves_out_standby_links():
    model = build({"trips_end_day": "trips->calendar standby"})
    assert g.security_graph(model).edges == ()


# --- roles -------------------------------------------------------------------------------

DEPOTS = {
    "stations_district": "stations->districts",
    "trips_start_station": "trips->stations",
    "trips_bike": "trips->bikes two-way",
    "district_access_district": "district_access->districts two-way secure",
}


def test_role_restricts_what_its_filters_reach_each_with_one_path():
    model = build(DEPOTS, roles=[role("east_lead", "districts")])
    assert g.role_restricted(model, "east_lead") == {
        "districts": (),
        "district_access": ("district_access_district",),
        "stations": ("stations_district",),
        "trips": ("stations_district", "trips_start_station"),
    }


def test_role_paths_start_from_the_nearest_filtered_table():
    model = build(DEPOTS, roles=[role("lead", "districts stations")])
    restricted = g.role_restricted(model, model.roles["lead"])
    assert restricted["stations"] == ()
    assert restricted["trips"] == ("trips_start_station",)


def test_role_filters_cross_a_two_way_link_only_when_its_security_flow_is_two_way():
    one_way = build(DEPOTS, roles=[role("lead", "stations")])
    assert "bikes" not in g.role_restricted(one_way, "lead")
    secure = build({**DEPOTS, "trips_bike": "trips->bikes two-way secure"}, roles=[role("lead", "stations")])
    assert g.role_restricted(secure, "lead")["bikes"] == ("trips_start_station", "trips_bike")


def test_role_filters_on_missing_tables_are_ignored_and_unknown_roles_are_an_error():
    model = build(DEPOTS, roles=[role("lead", "depots")])
    assert g.role_restricted(model, "lead") == {}
    with pytest.raises(ModeldiffError, match="no role"):
        g.role_restricted(model, "ghost")


def test_security_stops_detects_a_filter_stopped_by_one_way_security_flow():
    model = build(DEPOTS, roles=[role("lead", "stations")])
    assert g.security_stops(model, "lead") == [("trips_bike", "bikes")]
    assert "bikes" in g.flow_graph(model).reach("stations")


def test_security_stops_does_not_report_a_link_whose_security_flow_is_two_way():
    model = build({**DEPOTS, "trips_bike": "trips->bikes two-way secure"}, roles=[role("lead", "stations")])
    assert g.security_stops(model, "lead") == []


def test_security_stops_does_not_report_a_one_way_link():
    model = build({**DEPOTS, "trips_bike": "trips->bikes"}, roles=[role("lead", "stations")])
    assert g.security_stops(model, "lead") == []


def test_security_stops_does_not_report_a_table_the_role_restricts_another_way():
    model = build(DEPOTS, roles=[role("lead", "stations bikes")])
    assert g.security_stops(model, "lead") == []


def test_security_stops_does_not_report_links_the_role_never_reaches():
    model = build(DEPOTS, roles=[role("lead", "bikes")])
    assert g.security_stops(model, "lead") == []


# --- paths and ambiguity (section 4) -----------------------------------------------------

STOCK = {
    "stock_day": "stock_levels->calendar",
    "trips_start_day": "trips->calendar",
    "trips_start_station": "trips->stations two-way",
    "stock_station": "stock_levels->stations",
}


def test_detects_a_filter_reaching_a_table_along_two_routes():
    fg = g.flow_graph(build(STOCK))
    route = ("trips_start_day", "trips_start_station", "stock_station")
    assert fg.paths("calendar", "stock_levels") == [("stock_day",), route]
    assert fg.is_ambiguous("calendar", "stock_levels")
    assert fg.witness("calendar", "stock_levels") == (("stock_day",), route)
    assert fg.ambiguous_pairs() == [("calendar", "stock_levels", ("stock_day",), route)]


def test_does_not_report_ambiguity_when_one_route_remains():
    fg = g.flow_graph(build({**STOCK, "trips_start_station": "trips->stations"}))
    assert fg.paths("calendar", "stock_levels") == [("stock_day",)]
    assert not fg.is_ambiguous("calendar", "stock_levels")
    assert fg.witness("calendar", "stock_levels") is None
    assert fg.ambiguous_pairs() == []


def test_two_links_between_the_same_tables_are_two_paths():
    fg = g.flow_graph(build({"trips_start_day": "trips->calendar", "trips_end_day": "trips->calendar"}))
    assert fg.paths("calendar", "trips") == [("trips_end_day",), ("trips_start_day",)]
    assert fg.witness("calendar", "trips") == (("trips_end_day",), ("trips_start_day",))


def test_a_two_way_cycle_alone_is_not_ambiguous():
    fg = g.flow_graph(build({"trips_start_day": "trips->calendar", "trips_start_station": "trips->stations two-way"}))
    assert fg.reach("calendar") == {"calendar", "trips", "stations"}
    assert fg.paths("calendar", "stations") == [("trips_start_day", "trips_start_station")]
    assert fg.ambiguous_pairs() == []


def _graph(*specs: str) -> FilterGraph:
    """Edges written `link:src->dst`."""
    found = []
    for spec in specs:
        link, ends = spec.split(":")
        src, dst = ends.split("->")
        found.append(Edge(link, src, dst))
    return FilterGraph({t for e in found for t in (e.src, e.dst)}, found)


def test_detects_a_second_path_that_comes_back_from_below_the_target():
    # the breadth-first tree reaches repairs below mechanics, and repairs -> mechanics
    # closes a second route that avoids mechanics: calendar -> parts -> repairs -> mechanics
    fg = _graph("a:calendar->mechanics", "b:calendar->parts", "c:mechanics->repairs",
                "d:parts->stock_levels", "e:stock_levels->repairs", "f:repairs->mechanics")
    assert fg.witness("calendar", "mechanics") == (("a",), ("b", "d", "e", "f"))
    assert fg.paths("calendar", "mechanics") == [("a",), ("b", "d", "e", "f")]


def test_does_not_report_a_way_back_that_only_passes_the_target_itself():
    fg = _graph("a:calendar->mechanics", "b:calendar->parts", "c:mechanics->repairs",
                "d:parts->stock_levels", "f:repairs->mechanics")
    assert not fg.is_ambiguous("calendar", "mechanics")
    assert fg.ambiguous_pairs() == []


def test_inherited_witness_cuts_a_path_that_already_passes_the_target():
    # calendar reaches stations two ways (x; y1..y5 around through trips), and trips
    # hangs below stations in the tree, but one of those ways already passes trips
    fg = _graph("x:calendar->stations", "y1:calendar->riders", "y2:riders->bikes", "y3:bikes->parts",
                "y4:parts->repairs", "y5:repairs->trips", "back:trips->stations", "down:stations->trips",
                "t:trips->repairs")
    assert fg.is_ambiguous("calendar", "stations")
    assert fg.witness("calendar", "stations") == (("x",), ("y1", "y2", "y3", "y4", "y5", "back"))
    assert fg.witness("calendar", "trips") == (("x", "down"), ("y1", "y2", "y3", "y4", "y5"))


def _ladder(rungs: int) -> FilterGraph:
    found = []
    for i in range(rungs):
        for a in "ab":
            for b in "ab":
                found.append(Edge(f"{a}{b}{i}", f"{a}{i}", f"{b}{i + 1}"))
    return FilterGraph({t for e in found for t in (e.src, e.dst)}, found)


def test_ambiguity_is_decided_without_listing_two_to_the_forty_paths():
    fg = _ladder(40)
    assert fg.is_ambiguous("a0", "a40")
    first, second = fg.witness("a0", "a40")
    assert fg.is_path("a0", first, "a40") and fg.is_path("a0", second, "a40") and first != second
    # a1 and b1 have one path each; every table from depth 2 on has two or more (b0 is out of reach)
    assert fg.ambiguous_targets("a0") == {f"{side}{i}" for side in "ab" for i in range(2, 41)}
    listed = fg.path_set("a0", "a40", limit=5)
    assert len(listed.paths) == 5 and not listed.complete


def test_paths_are_sorted_and_limited_in_that_order():
    fg = _ladder(2)
    assert fg.paths("a0", "a2") == [("aa0", "aa1"), ("ab0", "ba1")]
    assert fg.paths("a0", "a2", limit=1) == [("aa0", "aa1")]
    assert fg.path_set("a0", "a2", limit=2).complete
    assert not fg.path_set("a0", "a2", limit=1).complete


def test_a_listing_cut_short_by_its_step_budget_says_so():
    listed = _ladder(20).path_set("a0", "a20", limit=None, budget=1_000)
    assert not listed.complete and listed.paths
    assert _ladder(2).path_set("a0", "a2", limit=None, budget=1_000).complete


def test_ambiguous_pairs_can_be_narrowed_to_sources_and_targets():
    fg = _ladder(2)
    everything = fg.ambiguous_pairs()
    assert [(s, x) for s, x, _, _ in everything] == [("a0", "a2"), ("a0", "b2"), ("b0", "a2"), ("b0", "b2")]
    assert fg.ambiguous_pairs(sources=["a0"], targets=["b2"]) == [everything[1]]
    assert fg.ambiguous_pairs(sources=["a1", "ghost"]) == []
    assert fg.ambiguous_pairs(limit=3) == everything[:3]
    assert fg.ambiguous_count() == 4 and fg.ambiguous_count(targets=["a2"]) == 2


# --- comparing two revisions -------------------------------------------------------------


def test_path_delta_lists_the_path_a_widened_flow_adds():
    old = g.flow_graph(build({**STOCK, "trips_start_station": "trips->stations"}))
    new = g.flow_graph(build(STOCK))
    delta = g.path_delta(old, new, "calendar", "stock_levels")
    assert delta == g.PathDelta(added=(("trips_start_day", "trips_start_station", "stock_station"),))
    assert delta.changed
    assert g.path_delta(new, old, "calendar", "stock_levels").removed == delta.added


def test_path_delta_reports_nothing_when_a_change_does_not_touch_the_pair():
    old = g.flow_graph(build(STOCK))
    new = g.flow_graph(build({**STOCK, "trips_bike": "trips->bikes two-way"}))
    assert old.path_signature("calendar", "stock_levels") == new.path_signature("calendar", "stock_levels")
    assert not g.path_delta(old, new, "calendar", "stock_levels").changed
    assert not g.path_delta(old, old, "calendar", "stock_levels").changed


def test_path_delta_says_when_it_could_not_list_every_path():
    old = _ladder(30)
    new = FilterGraph(old.tables, old.edges + (Edge("skip", "a0", "a2"),))
    delta = g.path_delta(old, new, "a0", "a30", limit=3)
    assert not delta.complete and delta.changed
    # a table further down changes nothing on the way to a30: the signature says so at once
    assert not g.path_delta(old, _ladder(31), "a0", "a30", limit=3).changed


def test_graphs_compare_by_tables_and_edges():
    assert g.flow_graph(build(STOCK)) == g.flow_graph(build(dict(reversed(list(STOCK.items())))))
    assert g.flow_graph(build(STOCK)) != g.flow_graph(build({**STOCK, "trips_start_station": "trips->stations"}))
