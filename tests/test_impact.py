"""Derived changes and impacts (modeldiff.impact): scenario folders, and the rules behind them one by one.

Each folder of tests/impact_scenarios holds old.model.yaml, new.model.yaml and expected.json: the complete
list of changes as [kind, subject], and every impacted measure, role and report with the [kind, subject] of
the changes its reasons name, plus the exit code. `MODELDIFF_UPDATE_GOLDEN=1` rewrites expected.json on
purpose; review the diff before committing it.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from modeldiff import impact, load
from modeldiff.impact import DiffResult

SCENARIOS = Path(__file__).parent / "impact_scenarios"
TPCDS = Path(__file__).parent / "fixtures" / "tpcds.model.yaml"
UPDATE = os.environ.get("MODELDIFF_UPDATE_GOLDEN") == "1"


def analyse_files(old: Path | str, new: Path | str) -> DiffResult:
    a, b = load.load_path(old), load.load_path(new)
    return impact.analyse(a.model, b.model, a.findings, b.findings)


def analyse_texts(old: str, new: str) -> DiffResult:
    a = load.load_files([("old.model.yaml", old)])
    b = load.load_files([("new.model.yaml", new)])
    return impact.analyse(a.model, b.model, a.findings, b.findings)


def scenario(name: str) -> DiffResult:
    return analyse_files(SCENARIOS / name / "old.model.yaml", SCENARIOS / name / "new.model.yaml")


def summary(r: DiffResult) -> dict:
    """What expected.json holds: complete lists, every impact with the changes its reasons name."""
    by_id = {c.id: c for c in r.changes}

    def blamed(i):
        return sorted({(by_id[x.change].kind, by_id[x.change].subject) for x in i.reasons})

    return {
        "exit_code": r.exit_code,
        "changes": [[c.kind, c.subject] for c in r.changes],
        "measures": {i.name: [list(k) for k in blamed(i)] for i in r.measures},
        "roles": {i.name: [list(k) for k in blamed(i)] for i in r.roles},
        "reports": {i.name: [list(k) for k in blamed(i)] for i in r.reports},
    }


def golden_text(d: dict) -> str:
    """expected.json, one change or impact per line so that a review reads like a list."""
    def block(opening: str, closing: str, rows: list[str]) -> str:
        if not rows:
            return opening + closing
        return opening + "\n" + ",\n".join(f"  {row}" for row in rows) + "\n " + closing

    parts = [f' "exit_code": {d["exit_code"]}',
             ' "changes": ' + block("[", "]", [json.dumps(c) for c in d["changes"]])]
    for section in ("measures", "roles", "reports"):
        rows = [f"{json.dumps(n)}: {json.dumps(b)}" for n, b in d[section].items()]
        parts.append(f' "{section}": ' + block("{", "}", rows))
    return "{\n" + ",\n".join(parts) + "\n}\n"


def change(r: DiffResult, kind: str, subject: str):
    found = [c for c in r.changes if c.kind == kind and c.subject == subject]
    assert len(found) == 1, f"{kind} {subject}: {[(c.kind, c.subject) for c in r.changes]}"
    return found[0]


def impact_of(items, name: str):
    found = [i for i in items if i.name == name]
    assert found, f"{name} not impacted: {[i.name for i in items]}"
    return found[0]


def names(items) -> list[str]:
    return [i.name for i in items]


# --- the scenario folders --------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(p.name for p in SCENARIOS.iterdir() if p.is_dir()))
def test_scenario(name: str):
    got = summary(scenario(name))
    expected_file = SCENARIOS / name / "expected.json"
    if UPDATE:
        expected_file.write_text(golden_text(got))
    assert got == json.loads(expected_file.read_text())


# --- paths, ambiguity and who is blamed ------------------------------------------------------

STATION_STOCK_FROM_CALENDAR = ("trips_start_day", "trips_start_station", "stock_levels_station")


def test_flow_widened_blames_the_link_with_source_and_new_path():
    r = scenario("flow_widened")
    widened = change(r, "link.flow_widened", "links.trips_start_station")
    stock = impact_of(r.measures, "stock_value")
    by_source = {x.source: x for x in stock.reasons}
    # every table whose filter reaches trips (the new edge's start) is a source (changes.md, Reasons)
    assert set(by_source) == {"bikes", "calendar", "riders", "trips", "stations", "districts", "district_access"}
    assert all(x.change == widened.id for x in stock.reasons)
    assert by_source["calendar"].paths_added == (STATION_STOCK_FROM_CALENDAR,)
    assert by_source["calendar"].paths_removed == ()
    # stations -> stock_levels kept its single simple path: the reason shows the route that comes back
    assert by_source["stations"].paths_added == () and by_source["stations"].route == (
        "stations", "trips", "stations", "stock_levels")
    assert "comes back to stations" in by_source["stations"].message


def test_flow_widened_moves_what_a_filter_comes_back_to_and_leaves_the_rest_alone():
    r = scenario("flow_widened")
    # trips -> stations -> trips: a filter reaching trips now keeps only trips with a matching station
    assert names(r.measures) == ["avg_unit_cost", "fare_revenue", "repair_cost_per_trip", "revenue_per_trip",
                                 "ride_minutes", "stock_on_hand", "stock_value", "trip_count", "trips_by_end_day"]
    reasons = {x.source: x for x in impact_of(r.measures, "trip_count").reasons}
    assert reasons["trips"].route == ("trips", "stations", "trips") and reasons["trips"].paths_added == ()
    # repairs are not reachable from stations: no repair measure moves
    assert not {"repair_cost", "repair_count", "cost_per_repair"} & set(names(r.measures))
    assert "repair_costs_by_depot" not in names(r.reports)


def test_ambiguity_introduced_names_two_witness_paths():
    r = scenario("flow_widened")
    found = change(r, "ambiguity.introduced", "paths.calendar->stock_levels")
    assert found.severity == "breaking"
    assert sorted(map(tuple, found.after)) == sorted([("stock_levels_day",), STATION_STOCK_FROM_CALENDAR])


def test_ambiguity_resolved_when_the_flip_is_undone():
    r = scenario("flow_narrowed")
    found = change(r, "ambiguity.resolved", "paths.calendar->stock_levels")
    assert found.severity == "numbers" and found.after is None
    assert not [c for c in r.changes if c.kind == "ambiguity.introduced"]
    assert r.exit_code == 1


def test_no_ambiguity_reported_when_one_route_replaces_another():
    r = scenario("standby_cleared")
    assert not [c for c in r.changes if c.kind.startswith("ambiguity.")]


def test_derived_measure_inherits_through_the_measures_it_uses():
    r = scenario("flow_widened")
    derived = impact_of(r.measures, "avg_unit_cost")
    assert {x.via for x in derived.reasons} <= {"stock_on_hand", "stock_value"}
    assert {x.source for x in derived.reasons} == {"bikes", "calendar", "riders", "trips", "stations", "districts",
                                                    "district_access"}
    # cost_per_repair uses only repair measures, which did not move
    assert "cost_per_repair" not in names(r.measures)


def test_derived_measure_of_a_derived_measure_inherits_transitively():
    base = (SCENARIOS / "flow_widened" / "old.model.yaml").read_text()
    extra = '  cost_share: {expr: "avg_unit_cost * 2"}\n'
    old = base.replace("  repair_cost:", extra + "  repair_cost:", 1)
    new = (SCENARIOS / "flow_widened" / "new.model.yaml").read_text().replace("  repair_cost:", extra + "  repair_cost:", 1)
    r = analyse_texts(old, new)
    assert "cost_share" in names(r.measures)
    same = analyse_texts(old, old)
    assert names(same.measures) == []


def test_standby_swap_splits_the_blame_between_the_two_links():
    r = scenario("standby_cleared")
    cleared = change(r, "link.standby_cleared", "links.trips_end_day")
    went = change(r, "link.standby_set", "links.trips_start_day")
    reasons = {x.change: x for x in impact_of(r.measures, "trip_count").reasons}
    assert set(reasons) == {cleared.id, went.id}
    assert reasons[cleared.id].paths_added == (("trips_end_day",),) and reasons[cleared.id].paths_removed == ()
    assert reasons[went.id].paths_removed == (("trips_start_day",),) and reasons[went.id].paths_added == ()


def test_standby_swap_spares_the_measure_that_followed_the_end_day_already():
    r = scenario("standby_cleared")
    assert "trips_by_end_day" not in names(r.measures)
    assert "daily_returns" not in names(r.reports)


def test_via_added_blames_the_measure_overrides_and_names_the_source():
    r = scenario("via_added")
    overrides = change(r, "measure.overrides_changed", "measures.ride_minutes")
    reasons = impact_of(r.measures, "ride_minutes").reasons
    assert [(x.change, x.source, x.paths_added, x.paths_removed) for x in reasons] == [
        (overrides.id, "calendar", (("trips_end_day",),), (("trips_start_day",),))]


def test_via_added_impacts_the_report_showing_the_measure_whatever_its_filters():
    # rider_trips shows ride_minutes by riders: riders -> trips did not change, but ride_minutes is impacted in the
    # report's setting (changes.md, Reports), so the report is listed; daily_returns does not show it
    r = scenario("via_added")
    overrides = change(r, "measure.overrides_changed", "measures.ride_minutes")
    assert names(r.reports) == ["rider_trips"]
    assert {x.change for x in impact_of(r.reports, "rider_trips").reasons} == {overrides.id}


def test_via_added_on_a_link_off_the_measure_paths_impacts_nothing():
    r = scenario("via_added_elsewhere")
    assert [c.kind for c in r.changes] == ["measure.overrides_changed"]
    assert (names(r.measures), names(r.reports)) == ([], [])


def test_paths_in_reasons_name_links_of_the_new_revision():
    r = scenario("link_removed_still_used")
    reasons = [x for i in r.measures for x in i.reasons]
    added = [link for x in reasons for p in x.paths_added for link in p]
    removed = [link for x in reasons for p in x.paths_removed for link in p]
    assert added == ["trips_start_day"] and all(link in r.new.links for link in added)
    assert removed == ["trips_end_day"] and "trips_end_day" not in r.new.links


def test_a_path_closed_by_a_measure_override_is_blamed_on_the_override_not_the_link():
    # trips_start_station turns two-way, and ride_minutes switches the link off for itself in the same revision:
    # for ride_minutes, the path stations -> trips disappears because of its own `flow`, not because of the flip
    old = (SCENARIOS / "flow_widened" / "old.model.yaml").read_text()
    new = (SCENARIOS / "flow_widened" / "new.model.yaml").read_text().replace(
        "ride_minutes: {table: trips, expr: sum(minutes)}",
        "ride_minutes: {table: trips, expr: sum(minutes), flow: {trips_start_station: off}}")
    r = analyse_texts(old, new)
    overrides = change(r, "measure.overrides_changed", "measures.ride_minutes")
    reasons = impact_of(r.measures, "ride_minutes").reasons
    assert {x.change for x in reasons} == {overrides.id}
    assert ("stations", (("trips_start_station",),)) in [(x.source, x.paths_removed) for x in reasons]
    # the other trip measures keep the link and move by the flip (a filter on trips comes back through stations)
    widened = change(r, "link.flow_widened", "links.trips_start_station")
    assert {x.change for x in impact_of(r.measures, "trip_count").reasons} == {widened.id}


# --- settings: variants and reports ------------------------------------------------------------


def test_variant_option_change_impacts_only_the_report_choosing_it():
    r = scenario("variant_option_changed")
    option = change(r, "variant.changed", "variants.attribution.options.current")
    assert names(r.measures) == []  # outside reports the default option (historical) applies
    assert names(r.reports) == ["repair_costs_current"]
    reasons = impact_of(r.reports, "repair_costs_current").reasons
    assert {x.change for x in reasons} == {option.id}
    # every source of the report's measure counts, not only its `by` table (issue 9, point 4)
    assert {"districts", "calendar", "trips"} <= {x.source for x in reasons}
    districts = next(x for x in reasons if x.source == "districts")
    assert (("stations_district", "trips_start_station", "trips_bike", "repairs_bike")) in districts.paths_added


def test_variant_option_change_that_opens_only_a_route_back_impacts_the_report_choosing_it():
    r = scenario("variant_option_changed_no_path")
    option = change(r, "variant.changed", "variants.attribution.options.current")
    assert [c.kind for c in r.changes] == ["variant.changed"]
    assert (names(r.measures), names(r.reports)) == ([], ["repair_costs_current"])
    districts = next(x for x in impact_of(r.reports, "repair_costs_current").reasons if x.source == "districts")
    assert districts.change == option.id and districts.paths_added == ()
    assert districts.route[:3] == ("districts", "mechanics", "districts")


def test_variant_default_change_moves_what_uses_the_default_only():
    r = scenario("variant_default_changed")
    default = change(r, "variant.changed", "variants.attribution")
    assert names(r.measures) == ["cost_per_repair", "repair_cost", "repair_cost_per_trip", "repair_count"]
    assert names(r.reports) == ["east_overview", "repair_costs_by_depot"]
    assert "repair_costs_current" not in names(r.reports)  # it chose `current` already
    assert all(x.change == default.id for i in r.measures + r.reports for x in i.reasons)


def test_variant_option_where_change_impacts_the_report_through_its_table():
    base = (SCENARIOS / "identical" / "old.model.yaml").read_text()
    old = base.replace("current: {via: [repairs_current_mechanic]}",
                       "current: {via: [repairs_current_mechanic], where: {calendar: \"month > 0\"}}")
    new = base.replace("current: {via: [repairs_current_mechanic]}",
                       "current: {via: [repairs_current_mechanic], where: {calendar: \"month > 6\"}}")
    r = analyse_texts(old, new)
    option = change(r, "variant.changed", "variants.attribution.options.current")
    assert names(r.reports) == ["repair_costs_current"]
    assert {(x.change, x.source) for x in impact_of(r.reports, "repair_costs_current").reasons} == {(option.id, "calendar")}
    assert names(r.measures) == []
    respelled = analyse_texts(old, old.replace("month > 0", "MONTH > 0"))
    assert names(respelled.reports) == []


def test_report_overrides_move_the_report_only_along_its_own_filters():
    base = (SCENARIOS / "identical" / "old.model.yaml").read_text()
    weekly = "weekly_fares: {measures: [fare_revenue, trip_count, revenue_per_trip], by: [calendar.week_start, districts.name]"
    riders = "rider_trips: {measures: [trip_count, ride_minutes], by: [riders.plan]"
    r = analyse_texts(base, base.replace(weekly, weekly + ", via: [trips_end_day]")
                      .replace(riders, riders + ", via: [trips_end_day]"))
    assert sorted(c.subject for c in r.changes if c.kind == "report.changed") == ["reports.rider_trips", "reports.weekly_fares"]
    # both reports' measures see calendar -> trips change in the report's setting, whatever the report groups by
    assert names(r.reports) == ["rider_trips", "weekly_fares"]
    weekly_change = change(r, "report.changed", "reports.weekly_fares")
    assert {(x.change, x.source) for x in impact_of(r.reports, "weekly_fares").reasons} == {(weekly_change.id, "calendar")}
    assert names(r.measures) == []  # outside the report nothing moved
    # daily_returns kept its setting: not listed (a change inside one report's setting impacts that report)
    assert "daily_returns" not in names(r.reports)


# --- row security ------------------------------------------------------------------------------


def test_security_flow_back_to_one_way_exposes_every_table_below():
    r = scenario("security_flow_one_way")
    role = impact_of(r.roles, "depot_staff")
    assert role.severity == "breaking"
    assert role.exposed == ("districts", "mechanics", "repairs", "station_parts", "stations", "stock_levels", "trips")
    assert role.tightened == () and role.rerouted == ()
    exposed = change(r, "security.exposed", "roles.depot_staff.tables.trips")
    assert exposed.message.startswith("SECURITY:")
    assert "security review" in exposed.message
    assert exposed.details["source"] == "district_access"
    assert r.exit_code == 3


def test_security_flow_change_on_a_one_way_link_exposes_nothing():
    r = scenario("security_flow_one_way_no_effect")
    assert [c.kind for c in r.changes] == ["link.security_flow_changed"]
    assert names(r.roles) == []


def test_security_flow_two_way_tightens():
    r = scenario("security_flow_two_way")
    role = impact_of(r.roles, "student_analyst")
    assert role.tightened == ("station_parts", "stations", "stock_levels")
    assert role.exposed == () and role.severity == "numbers"
    assert not [c for c in r.changes if c.kind == "security.exposed"]
    assert r.exit_code == 1


def test_role_filter_moved_exposes_what_fed_off_the_old_filter():
    r = scenario("role_filter_moved")
    role = impact_of(r.roles, "east_district_lead")
    assert role.exposed == ("district_access", "districts", "mechanics", "repairs")
    assert role.rerouted == ("station_parts", "stations", "stock_levels", "trips")
    assert change(r, "security.exposed", "roles.east_district_lead.tables.repairs").details["source"] == "districts"
    # the report seen as that role moves; reports seen without a role do not
    assert names(r.reports) == ["east_overview"]


def test_role_filter_dropped_where_another_filter_covers_it_exposes_nothing():
    r = scenario("role_filter_dropped_covered")
    assert not [c for c in r.changes if c.kind == "security.exposed"]
    assert impact_of(r.roles, "east_district_lead").exposed == ()
    assert r.exit_code == 1


def test_role_filter_change_impacts_the_role_its_tables_and_its_reports():
    r = scenario("role_filter_changed")
    assert names(r.roles) == ["east_district_lead"]
    assert names(r.reports) == ["east_overview"]
    assert {x.source for i in r.measures for x in i.reasons} == {"districts"}
    assert "weekly_fares" not in names(r.reports)  # it shows the same measures, but seen by no role


def test_respelled_role_filter_impacts_nothing():
    r = scenario("role_filter_respelled")
    assert [(c.kind, c.severity) for c in r.changes] == [("role.cosmetic_changed", "safe")]
    assert (names(r.measures), names(r.roles), names(r.reports), r.exit_code) == ([], [], [], 0)


def test_removed_link_exposes_rows_and_removes_paths():
    r = scenario("link_removed")
    assert impact_of(r.roles, "student_analyst").exposed == ("trips",)
    removed = change(r, "link.removed", "links.trips_rider")
    reasons = impact_of(r.measures, "trip_count").reasons
    assert (removed.id, "riders", (), (("trips_rider",),)) in [(x.change, x.source, x.paths_added, x.paths_removed)
                                                               for x in reasons]


def test_removed_leaf_link_exposes_nothing_and_impacts_nothing():
    r = scenario("link_removed_leaf")
    assert [c.kind for c in r.changes] == ["link.removed", "path.removed"]
    assert (names(r.measures), names(r.roles), names(r.reports)) == ([], [], [])


# --- keys, cardinality, history ------------------------------------------------------------------


def test_key_switch_to_the_natural_key_explains_history():
    r = scenario("key_switched_surrogate_to_natural")
    to_side = [c for c in r.changes if c.kind == "link.key_switched" and c.details.get("side") == "to"]
    assert len(to_side) == 1
    assert to_side[0].details["history"] == "surrogate->natural"
    assert "every version" in to_side[0].message and "history" in to_side[0].message
    # repairs move when filtered or grouped by mechanics (directly) or by every table reaching mechanics
    switched = next(c for c in r.changes if c.kind == "link.key_switched")
    reasons = [x for x in impact_of(r.measures, "repair_cost").reasons if x.change == switched.id and x.route]
    assert {x.source for x in reasons} == {"mechanics", "districts", "district_access"}
    assert {x.source for x in impact_of(r.reports, "repair_costs_by_depot").reasons} == {
        "mechanics", "districts", "district_access"}
    # the cardinality part of the switch (many-to-one -> many-to-many) adds or removes no edge: never a reason
    card = change(r, "link.cardinality_changed", "links.repairs_mechanic")
    assert card.id not in {x.change for i in r.measures + r.reports + r.roles for x in i.reasons}


def test_key_switch_on_a_standby_link_impacts_only_its_users():
    r = scenario("key_switched_standby_link")
    assert names(r.measures) == []
    assert names(r.reports) == ["repair_costs_current"]


def test_cardinality_many_to_one_to_many_to_many_is_reported_but_impacts_nothing():
    # issue 9, point 7: no edge appears or disappears, so no number moves (semantics.md section 5)
    r = scenario("cardinality_changed")
    card = change(r, "link.cardinality_changed", "links.trips_bike")
    assert "which data is valid" in card.message
    assert (names(r.measures), names(r.roles), names(r.reports)) == ([], [], [])
    assert names(scenario("cardinality_changed_leaf").measures) == []


# --- references, removals, renames ---------------------------------------------------------------


def test_measure_removed_while_a_report_shows_it_is_breaking():
    r = scenario("measure_removed_used")
    removed = change(r, "measure.removed", "measures.ride_minutes")
    assert removed.severity == "breaking"
    report = impact_of(r.reports, "rider_trips")
    assert report.severity == "breaking"
    assert removed.id in {x.change for x in report.reasons}
    assert r.exit_code == 3


def test_measure_removed_that_nothing_uses_breaks_nothing():
    r = scenario("measure_removed_unused")
    assert [(c.kind, c.severity) for c in r.changes] == [("measure.removed", "numbers")]
    assert names(r.reports) == [] and r.exit_code == 1


def test_reference_broken_when_the_new_revision_names_a_removed_link():
    r = scenario("link_removed_still_used")
    broken = change(r, "reference.broken", "measures.trips_by_end_day")
    assert broken.severity == "breaking"
    assert broken.id in {x.change for x in impact_of(r.measures, "trips_by_end_day").reasons}
    assert r.exit_code == 3


def test_reference_already_broken_in_the_old_revision_is_not_new():
    text = (SCENARIOS / "identical" / "old.model.yaml").read_text()
    broken = text.replace("via: [trips_end_day]", "via: [trips_finish_day]")
    r = analyse_texts(broken, broken)
    assert not [c for c in r.changes if c.kind == "reference.broken"]
    assert r.exit_code == 3  # the new revision still has an error finding


def test_measure_renamed_while_a_report_shows_it_breaks_that_report_only():
    r = scenario("measure_renamed_shown")
    renamed = change(r, "measure.renamed", "measures.riding_minutes")
    assert (renamed.before, renamed.after, renamed.severity) == ("ride_minutes", "riding_minutes", "breaking")
    assert names(r.measures) == []  # no number of it moves
    report = impact_of(r.reports, "rider_trips")
    assert report.severity == "breaking" and {x.change for x in report.reasons} == {renamed.id}


def test_measure_renamed_that_no_report_shows_is_safe():
    r = scenario("measure_renamed_unshown")
    assert [(c.kind, c.severity) for c in r.changes] == [("measure.renamed", "safe")]
    assert (names(r.measures), names(r.reports), r.exit_code) == ([], [], 0)


@pytest.mark.parametrize("name", ["link_renamed", "link_renamed_used", "table_renamed"])
def test_renames_produce_one_change_and_no_path_or_security_change(name):
    r = scenario(name)
    assert [c.kind for c in r.changes] == [name.replace("_used", "").replace("_", ".", 1)]
    assert (names(r.measures), names(r.roles), names(r.reports), r.exit_code) == ([], [], [], 0)


def test_description_only_is_safe():
    r = scenario("description_only")
    assert [c.severity for c in r.changes] == ["safe"]
    assert (names(r.measures), names(r.roles), names(r.reports), r.exit_code) == ([], [], [], 0)


@pytest.mark.parametrize("path", ["examples/bikeshare.model.yaml", "tests/fixtures/tpcds.model.yaml",
                                  "tests/fixtures/tpch.model.yaml"])
def test_a_model_compared_with_itself_reports_nothing(path):
    r = analyse_files(Path(__file__).parent.parent / path, Path(__file__).parent.parent / path)
    assert (r.changes, r.measures, r.roles, r.reports, r.exit_code) == ((), (), (), (), 0)


def test_example_revision_two():
    root = Path(__file__).parent.parent / "examples"
    r = analyse_files(root / "bikeshare.model.yaml", root / "revision-2" / "bikeshare.model.yaml")
    widened = change(r, "link.flow_widened", "links.trips_start_station")
    change(r, "ambiguity.introduced", "paths.calendar->stock_levels")
    assert {"avg_unit_cost", "stock_on_hand", "stock_value", "trip_count"} <= set(names(r.measures))
    assert "station_stock" in names(r.reports)
    assert {x.change for i in r.measures + r.reports for x in i.reasons} == {widened.id}
    assert names(r.roles) == []


# --- TPC-DS -------------------------------------------------------------------------------------
# The key graph is the TPC-DS specification's (clause 2), written from memory in the fixture; the link
# choices (one live link per dimension, the rest on standby) are the fixture's, common practice.


def tpcds_item_two_way() -> DiffResult:
    text = TPCDS.read_text()
    link = "  store_sales_item:\n    from: store_sales.ss_item_sk\n    to: item.i_item_sk\n"
    assert text.count(link) == 1
    return analyse_texts(text, text.replace(link, link + "    flow: two-way\n"))


def test_tpcds_store_sales_item_two_way_reaches_the_other_item_facts():
    r = tpcds_item_two_way()
    model = r.new
    homes = {i.name: model.measures[i.name].table for i in r.measures}
    assert {"inventory_on_hand", "catalog_sales_amount", "store_return_amount"} <= set(homes)
    assert set(homes.values()) == {"inventory", "catalog_sales", "store_returns", "promotion", "store_sales", None}
    # derived measures reach store_sales measures, but only through a moved one (returns)
    assert "store_return_rate" in homes
    inventory = impact_of(r.measures, "inventory_on_hand")
    assert "date_dim" in {x.source for x in inventory.reasons}
    date_reason = next(x for x in inventory.reasons if x.source == "date_dim")
    assert ("store_sales_sold_date", "store_sales_item", "inventory_item") in date_reason.paths_added


def test_tpcds_date_dim_to_inventory_becomes_ambiguous():
    r = tpcds_item_two_way()
    found = change(r, "ambiguity.introduced", "paths.date_dim->inventory")
    assert ["inventory_date"] in found.after
    assert r.exit_code == 3


def test_tpcds_store_sales_measures_move_through_the_route_back_from_item():
    # store_sales -> item -> store_sales: a filter reaching store_sales now keeps only sales of items it matches
    r = tpcds_item_two_way()
    store_sales = {n for n, m in r.new.measures.items() if m.table == "store_sales"}
    assert store_sales and store_sales <= set(names(r.measures))
    reason = next(x for x in impact_of(r.measures, sorted(store_sales)[0]).reasons if x.source == "store_sales")
    assert reason.route == ("store_sales", "item", "store_sales") and reason.paths_added == ()
    # a measure whose table item does not reach stays untouched
    customer = {n for n, m in r.new.measures.items() if m.table == "customer"}
    assert customer and not customer & set(names(r.measures))


# --- the graph comparison itself ------------------------------------------------------------------


def _graph(tables, edges):
    from modeldiff import graph

    return graph.FilterGraph(tables, [graph.Edge(*e) for e in edges])


def test_changed_pairs_reads_the_old_graph_in_new_names():
    old = _graph({"a", "b", "c"}, [("ab", "a", "b"), ("bc", "b", "c")])
    new = _graph({"a", "b2", "c"}, [("ab", "a", "b2"), ("b2c", "b2", "c")])
    renames = impact.Renames.named(tables={"b": "b2"}, links={"bc": "b2c"})
    assert impact.changed_pairs(old, new, renames) == {}
    assert impact.changed_pairs(old, new, impact.Renames()) != {}


def test_changed_pairs_lists_what_each_path_owes_to_the_changed_edges():
    old = _graph({"a", "b", "c"}, [("ab", "a", "b")])
    new = _graph({"a", "b", "c"}, [("ab", "a", "b"), ("bc", "b", "c")])
    pairs = impact.changed_pairs(old, new)
    assert sorted(pairs) == [("a", "c"), ("b", "c")]
    pc = pairs[("a", "c")]
    assert (pc.added, pc.removed, pc.links) == ((("ab", "bc"),), (), frozenset({"bc"}))
    assert [(e.link, e.src, e.dst) for e in pc.added_by[("ab", "bc")]] == [("bc", "b", "c")]
    # filters
    assert sorted(impact.changed_pairs(old, new, sources={"b"})) == [("b", "c")]
    assert sorted(impact.changed_pairs(old, new, targets={"b"})) == []


def test_changed_pairs_of_equal_graphs_is_empty():
    g = _graph({"a", "b"}, [("ab", "a", "b")])
    assert impact.changed_pairs(g, _graph({"a", "b"}, [("ab", "a", "b")])) == {}
