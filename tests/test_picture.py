"""The filter-graph picture: Mermaid source (nodes, arrows, linkStyle indices), neighbourhood cut, dot/text/SVG, `modeldiff graph`.

Mermaid facts used here (ECOSYSTEM.md, "Mermaid"): `linkStyle <index>` counts edges in definition order from 0;
`classDef` + `class A,B name` style nodes.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest

from modeldiff import cli, impact, picture
from modeldiff.load import load_path
from modelkit import bikeshare, drop, edit, link, model, table
from toolkit import needs

ROOT = Path(__file__).parent.parent
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"

EDGE = re.compile(r'^  (\w+) (-->|<-->|-\.->)\|"(\w+(?: \(removed\))?)(?: \((?:both ways|standby|no filter here)\))?"\| (\w+)$')
NODE = re.compile(r'^  (t_\w+)(\[/|\[|\(|\{\{)"([^"]*)"')


def edges(source: str) -> list[tuple[str, str, str, str]]:
    """(from id, arrow, link name, to id) in definition order: the order Mermaid's linkStyle counts.

    The name keeps " (removed)"; the words that say what the arrow shows ("both ways", "standby", "no filter
    here") are dropped (test_arrow_labels_say_in_words_what_the_arrow_shows checks them).
    """
    return [m.groups() for m in map(EDGE.match, source.splitlines()) if m]


def nodes(source: str) -> dict[str, str]:
    return {m.group(3): m.group(1) for m in map(NODE.match, source.splitlines()) if m}


def link_styles(source: str) -> list[int]:
    return [int(m.group(1)) for m in re.finditer(r"^  linkStyle (\d+) ", source, re.M)]


def styled_links(source: str) -> list[str]:
    found = edges(source)
    return [found[i][2] for i in link_styles(source)]


def classes(source: str, name: str) -> set[str]:
    ids = set()
    for m in re.finditer(rf"^  class ([\w,]+) {name}$", source, re.M):
        ids |= set(m.group(1).split(","))
    return ids


def diff_of(old, new):
    return impact.analyse(old, new, (), ())


# --- one model ------------------------------------------------------------------------------------


def test_one_node_per_table_and_one_edge_per_link_of_the_example():
    m = load_path(str(EXAMPLE)).model
    source = picture.mermaid(m)
    assert source.startswith("graph LR\n")
    assert sorted(nodes(source)) == sorted(m.tables)
    assert sorted(label for _, _, label, _ in edges(source)) == sorted(m.links)


def test_edges_point_the_way_a_filter_travels():
    m = bikeshare()
    ids = picture.node_ids(m.tables)
    by_label = {label: (src, arrow, dst) for src, arrow, label, dst in edges(picture.mermaid(m))}
    # one-way: a filter on the `to` table (calendar) restricts the `from` table (trips)
    assert by_label["trips_start_day"] == (ids["calendar"], "-->", ids["trips"])
    assert by_label["district_access_district"] == (ids["districts"], "<-->", ids["district_access"])  # two-way
    assert by_label["trips_end_day"] == (ids["calendar"], "-.->", ids["trips"])  # standby: dotted


def test_a_one_to_one_link_is_drawn_both_ways_and_its_many_to_one_twin_is_not():
    m = bikeshare()
    one = edit(m, link("trips_bike", "trips.bike_key", "bikes.bike_key", cardinality="one-to-one"))
    arrow = {label: a for _, a, label, _ in edges(picture.mermaid(one))}["trips_bike"]
    twin = {label: a for _, a, label, _ in edges(picture.mermaid(m))}["trips_bike"]
    assert (arrow, twin) == ("<-->", "-->")


def test_table_kinds_get_their_own_shape_and_class():
    m = edit(bikeshare(), table("rider_groups", "bridge", columns={"group_key": "integer"}))
    source = picture.mermaid(m)
    ids = picture.node_ids(m.tables)
    assert f'  {ids["rider_groups"]}{{{{"rider_groups"}}}}' in source  # hexagon
    assert classes(source, "fact") == {ids["trips"], ids["repairs"]}
    assert classes(source, "access") == {ids["district_access"]}
    assert classes(source, "bridge") == {ids["rider_groups"]}
    assert "classDef bridge " in source
    assert "classDef bridge " not in picture.mermaid(bikeshare())  # only the kinds present are defined


def test_node_ids_are_sanitised_unique_and_clear_of_keywords():
    ids = picture.node_ids(["end", "a-b", "a_b", "graph", "é"])
    assert ids["end"] == "t_end" and ids["graph"] == "t_graph"
    assert len(set(ids.values())) == 5
    assert all(re.fullmatch(r"t_\w+", i, re.ASCII) for i in ids.values())


def test_labels_never_carry_a_quote_or_markup():
    assert picture.mermaid_label('a"b<c>&d') == "a#34;b#60;c#62;#38;d"
    assert picture.mermaid_label("trips_bike (removed)") == "trips_bike (removed)"


def test_a_model_without_changes_has_no_link_style():
    assert link_styles(picture.mermaid(bikeshare())) == []
    assert "newpath" not in picture.mermaid(bikeshare())


def test_highlight_points_at_the_named_link():
    source = picture.mermaid(bikeshare(), highlight_links=["trips_bike", "not_a_link"])
    assert styled_links(source) == ["trips_bike"]


def test_tables_on_new_paths_get_the_newpath_class():
    m = bikeshare()
    ids = picture.node_ids(m.tables)
    source = picture.mermaid(m, new_paths=[("trips_bike", "trips_start_station")])
    assert classes(source, "newpath") == {ids["bikes"], ids["trips"], ids["stations"]}


def test_a_setting_draws_what_its_measure_follows():
    m = bikeshare()
    pic = picture.picture(m, setting=picture.resolve(m, "measure:trips_by_end_day")[0])
    styles = {a.link: a.style for a in pic.arrows}
    assert (styles["trips_end_day"], styles["trips_start_day"]) == ("one-way", "standby")
    default = {a.link: a.style for a in picture.picture(m).arrows}
    assert (default["trips_end_day"], default["trips_start_day"]) == ("standby", "one-way")


# --- a diff ---------------------------------------------------------------------------------------


def test_link_style_index_points_at_the_changed_link_of_revision_2():
    old, new = load_path(str(EXAMPLE)).model, load_path(str(REVISION_2)).model
    pic = picture.diff_picture(diff_of(old, new))
    source = picture.mermaid_of(pic)
    assert styled_links(source) == ["trips_start_station"]
    assert {label: a for _, a, label, _ in edges(source)}["trips_start_station"] == "<-->"
    ids = picture.node_ids(new.tables)
    # the tables a filter now reaches along a path added by the flip (the ends of the path.added pairs: a
    # filter on calendar, bikes or riders reaches stations and stock_levels), not every table those paths pass
    assert classes(source, "newpath") == {ids["stations"], ids["stock_levels"]}


def test_an_unchanged_twin_has_no_picture():
    old = load_path(str(EXAMPLE)).model
    assert picture.diff_picture(diff_of(old, old)) is None


def test_a_removed_link_is_drawn_red_and_dotted_after_the_others():
    old = bikeshare()
    new = drop(old, "links", "trips_bike")
    source = picture.mermaid_of(picture.diff_picture(diff_of(old, new)))
    found = edges(source)
    assert found[-1][1:3] == ("-.->", "trips_bike (removed)")
    assert styled_links(source) == ["trips_bike (removed)"]


def test_a_measure_only_change_draws_no_picture():
    old = bikeshare()
    new = edit(old, old.measures["trip_count"].__class__("trip_count", "count(distinct trip_key)", "trips"))
    assert picture.diff_picture(diff_of(old, new)) is None


def chain_model(n: int):
    """A fact with n-1 dimensions, each with its own link: n tables."""
    items = [table("trips", "fact", columns={"trip_key": "integer", **{f"d{i}_key": "integer" for i in range(1, n)}})]
    for i in range(1, n):
        items.append(table(f"d{i}", columns={f"d{i}_key": "integer"}))
        items.append(link(f"trips_d{i}", f"trips.d{i}_key", f"d{i}.d{i}_key"))
    # a snowflake arm: d1 refers to an outrigger, two links from the fact
    items.append(table("outrigger", columns={"o_key": "integer"}))
    items[1] = table("d1", columns={"d1_key": "integer", "o_key": "integer"})
    items.append(link("d1_outrigger", "d1.o_key", "outrigger.o_key"))
    return model(*items)


def test_a_large_model_is_cut_to_the_neighbourhood_of_the_change():
    old = chain_model(80)
    new = edit(old, link("d1_outrigger", "d1.o_key", "outrigger.o_key", flow="two-way"))
    pic = picture.diff_picture(diff_of(old, new))
    assert {n.table for n in pic.nodes} == {"d1", "outrigger", "trips"}  # the link's tables and one link further
    assert {a.link for a in pic.arrows} == {"d1_outrigger", "trips_d1"}
    assert pic.caption and "81 tables" in pic.caption and "3 within one link" in pic.caption
    assert "%% " + pic.caption in picture.mermaid_of(pic)


def test_a_model_under_the_limit_is_drawn_whole():
    old = chain_model(40)
    new = edit(old, link("d1_outrigger", "d1.o_key", "outrigger.o_key", flow="two-way"))
    pic = picture.diff_picture(diff_of(old, new))
    assert len(pic.nodes) == 41 and pic.caption is None


# --- other formats ----------------------------------------------------------------------------------


def test_dot_marks_two_way_standby_and_changed_links():
    source = picture.dot_of(picture.picture(bikeshare(), highlight_links=["trips_bike"]))
    assert source.startswith('digraph "bikeshare" {') and source.rstrip().endswith("}")
    lines = {re.search(r'label="(\w+)', l).group(1): l for l in source.splitlines() if " -> " in l}
    assert "dir=both" in lines["district_access_district"] and "dir=both" not in lines["trips_bike"]
    assert "style=dashed" in lines["trips_end_day"] and "style=dashed" not in lines["trips_start_day"]
    assert "#d33" in lines["trips_bike"] and "#d33" not in lines["trips_start_day"]


def test_svg_has_one_group_per_table_and_link_and_reds_only_the_change():
    from modeldiff.render.svg import svg_of

    svg = svg_of(picture.picture(bikeshare(), highlight_links=["trips_bike"]))
    assert svg.count('<g class="node') == len(bikeshare().tables)
    assert svg.count('<g class="edge') == len(bikeshare().links)
    assert re.findall(r'<g class="edge changed" data-link="(\w+)"', svg) == ["trips_bike"]


ENGINES = [pytest.param("builtin", id="builtin"),
           pytest.param("dot", id="dot", marks=needs("dot"))]


@pytest.mark.parametrize("engine", ENGINES)
def test_svg_layout_puts_dimensions_left_of_their_facts(engine):
    from modeldiff.render.svg import layout

    lay = layout(picture.picture(bikeshare()), engine)
    assert lay.engine == engine and lay.note is None
    for name, l in bikeshare().links.items():
        if l.from_table != l.to_table:
            assert lay.boxes[l.to_table].x < lay.boxes[l.from_table].x, name


# --- the command --------------------------------------------------------------------------------------


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    return cli.main(list(argv), stdout=out, stderr=err), out.getvalue(), err.getvalue()


def test_graph_command_draws_the_example():
    code, out, err = run("graph", str(EXAMPLE))
    assert (code, err) == (0, "")
    assert out.startswith("graph LR\n") and len(edges(out)) == 15


@pytest.mark.parametrize("fmt, start", [("dot", "digraph "), ("text", "bikeshare: 11 tables, 15 links"),
                                        ("svg", "<?xml"), ("mermaid", "graph LR")])
def test_graph_command_formats(fmt, start):
    code, out, err = run("graph", str(EXAMPLE), "--format", fmt, "--setting", "report:repair_costs_current")
    assert (code, err) == (0, "")
    assert out.startswith(start)


def test_graph_setting_of_a_report_follows_its_variant():
    _, out, _ = run("graph", str(EXAMPLE), "--format", "text", "--setting", "report:repair_costs_current")
    assert "(setting of report repair_costs_current)" in out
    assert re.search(r"mechanics --> repairs\s+repairs_current_mechanic", out)
    assert re.search(r"mechanics \.\.> repairs\s+repairs_mechanic", out)


@pytest.mark.parametrize("setting, words", [("report:nope", ["no report 'nope'", "weekly_fares"]),
                                            ("table:trips", ["expected measure:NAME or report:NAME"])])
def test_graph_bad_setting_is_one_line(setting, words):
    code, out, err = run("graph", str(EXAMPLE), "--setting", setting)
    assert code == 2 and out == "" and err.count("\n") == 1
    for word in words:
        assert word in err


@pytest.mark.parametrize("engine", ENGINES)
def test_svg_layout_survives_cycles_and_self_links(engine):
    from modeldiff.render.svg import layout, layers, svg_of

    m = model(table("a", columns={"k": "integer", "b": "integer", "up": "integer"}),
              table("b", columns={"k": "integer", "a": "integer"}),
              link("a_b", "a.b", "b.k"), link("b_a", "b.a", "a.k"), link("a_up", "a.up", "a.k"))
    pic = picture.picture(m)
    assert set(layout(pic, engine).boxes) == {"a", "b"}
    assert sorted(layers(["a", "b"], [("a", "b"), ("b", "a")]).values()) == [0, 1]  # one edge of the cycle dropped
    assert svg_of(pic, engine=engine).count('<g class="edge') == 3


def test_svg_arrow_skipping_a_column_passes_through_a_slot():  # the layout used when dot is absent
    from modeldiff.render.svg import builtin_layout as layout

    # region <- districts <- stations and region <- stations: the direct link skips the middle column
    m = model(table("region", columns={"k": "integer"}), table("districts", columns={"k": "integer", "r": "integer"}),
              table("stations", "fact", columns={"k": "integer", "d": "integer", "r": "integer"}),
              link("d_r", "districts.r", "region.k"), link("s_d", "stations.d", "districts.k"),
              link("s_r", "stations.r", "region.k"))
    pic = picture.picture(m)
    lay = layout(pic)
    skip = next(a for a in pic.arrows if a.link == "s_r")
    (bend,) = lay.bends[skip.index]
    assert bend.x == lay.boxes["districts"].x and bend.y != lay.boxes["districts"].y
    assert all(lay.bends[a.index] == () for a in pic.arrows if a.link != "s_r")


# --- in the Markdown report -----------------------------------------------------------------------------


def markdown_of(*argv: str) -> str:
    out = io.StringIO()
    cli.main(["diff", *argv, "--format", "markdown"], stdout=out, stderr=io.StringIO())
    return out.getvalue()


def test_markdown_carries_the_diagram_after_the_summary_table():
    out = markdown_of(str(EXAMPLE), str(REVISION_2))
    fence = out.index("```mermaid\ngraph LR\n")
    assert out.index("| `bikeshare` |") < fence < out.index("### `bikeshare`")
    source = out[fence + len("```mermaid\n"):out.index("```", fence + 3)]
    assert styled_links(source) == ["trips_start_station"]


def test_markdown_has_no_diagram_when_no_link_or_path_changed():
    scenario = Path(__file__).parent / "impact_scenarios" / "description_only"
    out = markdown_of(str(scenario / "old.model.yaml"), str(scenario / "new.model.yaml"))
    assert "## modeldiff" in out and "mermaid" not in out
