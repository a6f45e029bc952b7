"""The evaluation engine on hand-made data: each rule of semantics.md section 5 with its twin.

A small bike-share model: trips start at stations, stations lie in districts,
trips use bikes; district_access lists who may see which district. Every
expected number below is counted by hand from the rows in `ROWS`.
"""

from __future__ import annotations

import subprocess
import sys
from decimal import Decimal

import pytest

from modeldiff import engine
from modeldiff.data import NO_MATCH, Database, evaluate_report
from modeldiff.errors import ModeldiffError
from tests.modelkit import edit, link, measure, model, ov, report, role, table, variant

MINI = model(
    table("districts", columns={"district_key": "integer", "name": "text", "region": "text"}),
    table("stations", columns={"station_key": "integer", "name": "text", "district_key": "integer"}),
    table("bikes", columns={"bike_key": "integer", "bike_type": "text"}),
    table("trips", "fact", columns={"trip_key": "integer", "station_key": "integer", "bike_key": "integer",
                                    "fare": "decimal", "status": "text"}),
    table("district_access", "access", key=("staff_email", "district_key"),
          columns={"staff_email": "text", "district_key": "integer"}),
    link("stations_district", "stations.district_key", "districts.district_key"),
    link("trips_station", "trips.station_key", "stations.station_key"),
    link("trips_bike", "trips.bike_key", "bikes.bike_key"),
    link("district_access_district", "district_access.district_key", "districts.district_key",
         flow="two-way", security_flow="two-way"),
    measure("trip_count", "count(*)", "trips"),
    measure("fare_revenue", "sum(fare)", "trips", "status = 'completed'"),
    measure("revenue_per_trip", "fare_revenue / nullif(trip_count, 0)"),
    measure("bike_count", "count(*)", "bikes"),
    measure("station_count", "count(*)", "stations"),
    name="mini",
)

ROWS = {
    "districts": [(1, "Harbour", "East"), (2, "Old Town", "West"), (3, "Hillside", "West")],  # Hillside: no station
    "stations": [(10, "Quay", 1), (11, "Mill", 1), (20, "Square", 2), (30, "Orphan", 9)],  # district 9 is missing
    "bikes": [(100, "classic"), (101, "electric"), (102, "classic")],  # bike 102 was never ridden
    "trips": [
        (1, 10, 100, Decimal("2.00"), "completed"),
        (2, 11, 101, Decimal("3.00"), "completed"),
        (3, 20, 100, Decimal("1.50"), "cancelled"),
        (4, 30, 101, Decimal("4.00"), "completed"),  # its station's district does not exist
        (5, None, 100, Decimal("1.00"), "completed"),  # no station at all
    ],
    "district_access": [("ana@example.org", 1), ("bo@example.org", 2), ("cy@example.org", 1)],
}


def rows_of(m, report_name, user=None, rows=ROWS):
    with Database.from_rows(m, rows) as db:
        result = evaluate_report(m, report_name, db, user=user)
    return result


def run(m, query, rows=ROWS):
    with Database.from_rows(m, rows) as db:
        return db.run(query)


def with_report(*args, **kwargs):
    return edit(MINI, report("r", *args, **kwargs))


# --- grouping ---------------------------------------------------------------------------


def test_groups_with_data_and_the_no_match_row():
    result = rows_of(with_report(["trip_count", "fare_revenue", "revenue_per_trip"], "districts.name"), "r")
    assert result.columns == ("districts.name", "trip_count", "fare_revenue", "revenue_per_trip")
    assert result.rows == (
        ("Harbour", 2, Decimal("5.00"), 2.5),
        ("Old Town", 1, None, None),  # only a cancelled trip: the measure's where leaves no row
        (NO_MATCH, 2, Decimal("5.00"), 2.5),  # trip 4 (missing district) and trip 5 (no station)
    )  # Hillside has no trip: a group without data is not a row


def test_measures_of_one_pass_are_read_straight_from_it_with_the_no_match_row():
    # trip_count and fare_revenue2 (no where) on trips: one pass grouped by district, read once; by hand:
    # Harbour trips 1, 2 (fares 2.00 + 3.00); Old Town trip 3 (1.50); (no match) trips 4 and 5 (4.00 + 1.00)
    m = edit(MINI, measure("fare_total", "sum(fare)", "trips"),
             report("r", ["trip_count", "fare_total"], "districts.name"))
    query = engine.report_query(m, "r")
    assert '"_combos"' not in query.sql and query.sql.count('FROM "_a0"') == 1
    assert rows_of(m, "r").rows == (("Harbour", 2, Decimal("5.00")), ("Old Town", 1, Decimal("1.50")),
                                    (NO_MATCH, 2, Decimal("5.00")))


def test_measures_of_two_passes_are_assembled_from_their_groups():
    # trip_count on trips and station_count on stations: two passes, so the groups are put together
    # (_combos); by hand: Harbour 2 trips, 2 stations; Old Town 1 trip, 1 station; (no match): trips 4, 5
    # and station 30 (its district 9 is missing)
    m = with_report(["trip_count", "station_count"], "districts.name")
    assert '"_combos"' in engine.report_query(m, "r").sql
    assert rows_of(m, "r").rows == (("Harbour", 2, 2), ("Old Town", 1, 1), (NO_MATCH, 2, 1))


def test_a_route_whose_tagged_rows_are_a_key_join_is_followed_as_a_join():
    # trips reach a district through their station and through their bike's home district (two routes that
    # must agree). The engine tags trips through one route (bikes) and tests the other: stations' tagged
    # rows are a key join on districts, so the test LEFT JOINs stations' untagged rows on the station key
    # and probes the small tagged districts once.
    m = edit(MINI, table("bikes", columns={"bike_key": "integer", "bike_type": "text", "home_district": "integer"}),
             link("bikes_home_district", "bikes.home_district", "districts.district_key"),
             report("r", "trip_count", "districts.name"))
    rows = dict(ROWS, bikes=[(100, "classic", 1), (101, "electric", 2), (102, "classic", 1)])
    sql = engine.report_query(m, "r").sql
    assert 'LEFT JOIN (SELECT _c0."station_key" AS "_o0", _c0."district_key" AS "_i0"' in sql
    # by hand: trip 1 (station Quay in Harbour, bike 100 at home in Harbour) -> Harbour; trip 2 (Mill in
    # Harbour, bike 101 at home in Old Town) -> no group; trip 3 (Square in Old Town, bike 100 in Harbour)
    # -> no group; trips 4 (station 30, district 9 missing) and 5 (no station) -> no group
    assert rows_of(m, "r", rows=rows).rows == (("Harbour", 1), (NO_MATCH, 4))


def test_no_no_match_row_when_every_visible_row_is_in_a_group():
    m = with_report("trip_count", "districts.name", where={"trips": "trip_key <= 3"})
    assert rows_of(m, "r").rows == (("Harbour", 2), ("Old Town", 1))


def test_null_is_a_group_like_any_other():
    result = rows_of(with_report("trip_count", "trips.station_key"), "r")
    assert result.rows == ((10, 1), (11, 1), (20, 1), (30, 1), (None, 1))


def test_no_null_group_when_no_row_holds_null():
    m = with_report("trip_count", "trips.station_key", where={"trips": "station_key IS NOT NULL"})
    assert [row[0] for row in rows_of(m, "r").rows] == [10, 11, 20, 30]


def test_a_null_link_value_matches_nothing_not_even_null():
    # many-to-many on a column that holds NULL on both sides: NULL never meets NULL
    m = edit(MINI, table("zones", columns={"zone": "integer", "label": "text"}),
             link("stations_zone", "stations.district_key", "zones.zone", cardinality="many-to-many"),
             measure("zone_stations", "count(*)", "stations"),
             report("r", "zone_stations", "zones.label"))
    rows = dict(ROWS, zones=[(None, "none"), (1, "one")],
                stations=[(10, "Quay", 1), (11, "Mill", None)])
    assert rows_of(m, "r", rows=rows).rows == (("one", 1), (NO_MATCH, 1))


def test_several_by_columns_give_only_combinations_with_data():
    result = rows_of(with_report("trip_count", ["districts.name", "bikes.bike_type"]), "r")
    assert result.rows == (
        ("Harbour", "classic", 1), ("Harbour", "electric", 1), ("Old Town", "classic", 1),
        (NO_MATCH, NO_MATCH, 2),
    )  # no (Old Town, electric) row, and no Hillside row


def test_a_grouping_column_that_does_not_reach_the_measure_repeats_its_total():
    # districts -> stations -> trips, never to bikes (one-way links): every district shows all bikes
    result = rows_of(with_report("bike_count", "districts.name"), "r")
    assert result.rows == (("Harbour", 3), ("Hillside", 3), ("Old Town", 3))


def test_a_grouping_column_that_reaches_the_measure_splits_it():
    m = edit(MINI, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"),
             report("r", "bike_count", "districts.name"))
    # Harbour: trips 1, 2 -> bikes 100, 101; Old Town: trip 3 -> bike 100; bike 102: no trip, no group
    assert rows_of(m, "r").rows == (("Harbour", 2), ("Old Town", 1), (NO_MATCH, 1))


def test_groups_need_not_add_up_with_a_many_to_many_route_and_the_note_says_so():
    m = edit(MINI, link("district_access_district", "district_access.district_key", "districts.district_key",
                        flow="two-way"),
             report("r", "trip_count", "district_access.staff_email"))
    result = rows_of(m, "r")
    # ana and cy both see district 1: trips 1 and 2 count in both groups
    assert result.rows == (("ana@example.org", 2), ("bo@example.org", 1), ("cy@example.org", 2), (NO_MATCH, 2))
    assert any("need not add up" in note for note in result.notes)


def test_no_add_up_note_when_groups_partition_the_rows():
    assert not any("need not add up" in n for n in rows_of(with_report("trip_count", "districts.name"), "r").notes)


def test_report_notes_follow_the_measure_setting():
    m = edit(MINI, report("r", ["bike_count"], "trips.status"))
    assert engine.report_notes(m, "r") == ()  # trips do not reach bikes: the total repeats, nothing is split
    m2 = edit(m, measure("bike_count", "count(*)", "bikes", overrides=ov(trips_bike="two-way")))
    assert engine.report_notes(m2, "r") != ()


# --- filters, flow and constrained tables ----------------------------------------------


def test_a_filter_does_not_travel_against_a_one_way_link():
    m = with_report("bike_count", where={"trips": "status = 'completed'"})
    assert rows_of(m, "r").rows == ((3,),)


def test_a_filter_travels_back_along_a_two_way_link():
    m = edit(MINI, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"),
             report("r", "bike_count", where={"trips": "status = 'cancelled'"}))
    assert rows_of(m, "r").rows == ((1,),)  # trip 3 rode bike 100


def test_an_unfiltered_fact_on_a_two_way_link_hides_no_dimension_row():
    m = edit(MINI, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"),
             report("r", "bike_count"))
    assert rows_of(m, "r").rows == ((3,),)  # bike 102 has no trip and still counts


def test_a_filter_reaches_the_fact_through_a_chain():
    m = with_report(["trip_count", "station_count"], where={"districts": "region = 'East'"})
    assert rows_of(m, "r").rows == ((2, 2),)


def test_a_measure_turning_a_link_off_is_not_filtered_through_it():
    m = edit(MINI, measure("all_trips", "count(*)", "trips", overrides=ov(trips_station="off")),
             report("r", ["trip_count", "all_trips"], where={"districts": "region = 'East'"}))
    assert rows_of(m, "r").rows == ((2, 5),)


def test_a_chain_around_a_cycle_loses_one_row_per_pass_until_none_is_left():
    # legs.next_leg -> legs.leg: leg k needs leg k+1 (mod 5) visible; dropping one leg drops them all
    m = model(table("legs", columns={"leg": "integer", "next_leg": "integer"}),
              link("legs_next", "legs.next_leg", "legs.leg"),
              measure("leg_count", "count(*)", "legs"),
              report("all_but_four", "leg_count", where={"legs": "leg <> 4"}),
              report("all_but_nine", "leg_count", where={"legs": "leg <> 9"}))
    rows = {"legs": [(k, (k + 1) % 5) for k in range(5)]}
    assert rows_of(m, "all_but_four", rows=rows).rows == ((0,),)
    assert rows_of(m, "all_but_nine", rows=rows).rows == ((5,),)
    assert engine.report_query(m, "all_but_four").steps  # computed by a loop of semi-joins


def test_an_acyclic_report_is_one_statement():
    # bikes -> trips only; districts would meet district_access's two-way link, a cycle
    query = engine.report_query(with_report("trip_count", "bikes.bike_type"), "r")
    assert query.steps == () and query.cleanup == ()


def test_a_two_way_link_between_two_tables_settles_in_one_pass_and_keeps_null_groups():
    # the cycle is one link's two directions: no loop, no temporary table
    m = edit(MINI, link("trips_station", "trips.station_key", "stations.station_key", flow="two-way"),
             report("r", "station_count", "trips.status"))
    query = engine.report_query(m, "r")
    assert query.steps == ()
    rows = dict(ROWS, trips=ROWS["trips"] + [(6, 20, 100, Decimal("1.00"), None)])
    # completed: stations 10, 11, 30; cancelled: 20; NULL status: 20; station without trips: none
    assert rows_of(m, "r", rows=rows).rows == (("cancelled", 1), ("completed", 3), (None, 1))


def test_two_way_links_forming_a_tree_settle_without_a_loop():
    # trips <-> stations and trips <-> bikes: links' two directions forming a tree, reduced in two passes.
    # By hand: classic = bikes 100, 102 -> trips 1, 3, 5 -> stations 10, 20 -> trips 1, 3 (trip 5 has no
    # station) -> bike 100 -> stations 10, 20: 2; electric = bike 101 -> trips 2, 4 -> stations 11, 30: 2;
    # every station is in a group, so no (no match) row.
    m = edit(MINI, link("trips_station", "trips.station_key", "stations.station_key", flow="two-way"),
             link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"),
             report("r", "station_count", "bikes.bike_type"))
    assert engine.report_query(m, "r").steps == ()
    assert rows_of(m, "r").rows == (("classic", 2), ("electric", 2))


def test_a_cycle_of_one_way_links_is_computed_by_a_loop():
    # trips -> districts (districts.district_key references trips.trip_key) -> stations -> trips.
    # By hand: completed trips 1, 2, 4, 5 -> districts 1, 2 -> stations 10, 11, 20 -> trips 1, 2 (trip 4's
    # station 30 and trip 5's missing station drop out) -> districts 1, 2 again: 2 trips.
    m = edit(MINI, link("districts_trip", "districts.district_key", "trips.trip_key"),
             report("r", "trip_count", where={"trips": "status = 'completed'"}))
    assert any(isinstance(step, engine.Loop) for step in engine.report_query(m, "r").steps)
    assert rows_of(m, "r").rows == ((2,),)


# --- measures and settings --------------------------------------------------------------


def test_a_derived_measure_passes_its_overrides_to_the_measures_it_names():
    m = edit(MINI, measure("ridden", "bike_count", overrides=ov(trips_bike="two-way")),
             report("r", ["bike_count", "ridden"], where={"trips": "status = 'cancelled'"}))
    assert rows_of(m, "r").rows == ((3, 1),)


def test_a_variant_option_where_filters_the_report_that_picks_it():
    m = edit(MINI, variant("scope", "everything", {"everything": ov(),
                                                  "completed": (ov(), {"trips": "status = 'completed'"})}),
             report("picked", "trip_count", variant={"scope": "completed"}),
             report("default", "trip_count"))
    assert rows_of(m, "picked").rows == ((4,),)
    assert rows_of(m, "default").rows == ((5,),)


def test_a_variant_option_via_changes_the_route():
    m = edit(MINI, table("trips", "fact", columns={"trip_key": "integer", "station_key": "integer",
                                                   "end_station_key": "integer", "bike_key": "integer",
                                                   "fare": "decimal", "status": "text"}),
             link("trips_end_station", "trips.end_station_key", "stations.station_key", standby=True),
             variant("ends", "start", {"start": ov(), "end": ov("trips_end_station")}),
             report("by_start", "trip_count", "stations.name"),
             report("by_end", "trip_count", "stations.name", variant={"ends": "end"}))
    rows = dict(ROWS, trips=[(1, 10, 11, 100, Decimal("1"), "completed"), (2, 10, 20, 100, Decimal("1"), "completed")])
    assert rows_of(m, "by_start", rows=rows).rows == (("Quay", 2),)
    assert rows_of(m, "by_end", rows=rows).rows == (("Mill", 1), ("Square", 1))


def test_a_derived_measure_over_no_measure_is_its_constant_and_has_no_groups():
    m = edit(MINI, measure("one", "1 + 1"), report("total", "one"), report("grouped", "one", "districts.name"))
    assert rows_of(m, "total").rows == ((2,),)
    assert rows_of(m, "grouped").rows == ()


# --- roles ------------------------------------------------------------------------------


def test_a_role_cuts_the_rows_before_the_report_filters():
    m = edit(MINI, role("east", {"districts": "region = 'East'"}),
             report("r", ["trip_count", "station_count"], "bikes.bike_type", role="east"))
    result = rows_of(m, "r")
    assert result.rows == (("classic", 1, 2), ("electric", 1, 2))  # trips 1 and 2 only; stations 10, 11
    assert result.notes[0].startswith("As role east sees it")


def test_without_the_role_the_same_report_sees_every_row():
    m = edit(MINI, report("r", ["trip_count", "station_count"], "bikes.bike_type"))
    assert rows_of(m, "r").rows == (("classic", 3, 4), ("electric", 2, 4))


def test_a_role_follows_the_security_graph_not_the_flow_graph():
    # trips_bike flows two-way for filters, but security flows one-way: a role on trips keeps every bike
    m = edit(MINI, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"),
             role("cancelled_only", {"trips": "status = 'cancelled'"}),
             report("r", "bike_count", role="cancelled_only"))
    assert rows_of(m, "r").rows == ((3,),)
    m2 = edit(m, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way", security_flow="two-way"))
    assert rows_of(m2, "r").rows == ((1,),)


def test_user_binds_the_role_filter():
    m = edit(MINI, role("staff", {"district_access": "staff_email = :user"}),
             report("r", "trip_count", role="staff"))
    assert rows_of(m, "r", user="bo@example.org").rows == ((1,),)
    assert rows_of(m, "r", user="ana@example.org").rows == ((2,),)
    assert rows_of(m, "r", user="nobody@example.org").rows == ((0,),)
    assert engine.report_query(m, "r", user="x").params == (("user", "x"),)


def test_a_role_using_user_needs_one():
    m = edit(MINI, role("staff", {"district_access": "staff_email = :user"}),
             report("r", "trip_count", role="staff"))
    with pytest.raises(ModeldiffError, match="--user"):
        engine.report_query(m, "r")


def test_a_report_without_a_role_takes_no_parameters():
    assert engine.report_query(with_report("trip_count"), "r", user="bo@example.org").params == ()


# --- the other queries ------------------------------------------------------------------


def test_measure_query_groups_by_any_column_with_filters_and_a_role():
    m = edit(MINI, role("east", {"districts": "region = 'East'"}))
    query = engine.measure_query(m, "trip_count", by=["bikes.bike_type"], where={"trips": "trip_key <> 2"})
    assert query.columns == ("bikes.bike_type", "trip_count", engine.NO_MATCH_COLUMN)
    assert run(m, query) == [("classic", 3, False), ("electric", 1, False)]  # trips 1, 3, 5 and 4
    assert run(m, engine.measure_query(m, "trip_count", role="east")) == [(2,)]


def test_measure_query_layers_apply_before_the_measure():
    query = engine.measure_query(MINI, "bike_count", where={"trips": "status = 'cancelled'"},
                                 layers=[ov(trips_bike="two-way")])
    assert run(MINI, query) == [(1,)]
    assert run(MINI, engine.measure_query(MINI, "bike_count", where={"trips": "status = 'cancelled'"})) == [(3,)]


def test_visible_rows_query_counts_what_a_role_sees():
    m = edit(MINI, role("staff", {"district_access": "staff_email = :user"}))
    assert run(m, engine.visible_rows_query(m, "stations", "staff", user="ana@example.org")) == [(2,)]
    assert run(m, engine.visible_rows_query(m, "stations")) == [(4,)]
    assert run(m, engine.visible_rows_query(m, "trips", where={"bikes": "bike_type = 'electric'"})) == [(2,)]
    assert engine.visible_rows_query(m, "stations").columns == ("rows",)


@pytest.mark.parametrize("call, message", [
    (lambda: engine.report_query(MINI, "nope"), "no report nope"),
    (lambda: engine.measure_query(MINI, "nope"), "no measure nope"),
    (lambda: engine.measure_query(MINI, "trip_count", by=["trips.nope"]), "trips.nope"),
    (lambda: engine.measure_query(MINI, "trip_count", where={"nope": "x = 1"}), "table nope"),
    (lambda: engine.measure_query(MINI, "trip_count", role="nope"), "no role nope"),
    (lambda: engine.visible_rows_query(MINI, "nope"), "no table nope"),
    (lambda: engine.measure_query(MINI, "trip_count", where={"trips": "x = :other"}), ":other"),
])
def test_bad_names_are_one_clear_error(call, message):
    with pytest.raises(ModeldiffError, match=message):
        call()


def test_engine_imports_no_duckdb():
    code = "import sys, modeldiff.engine; print('duckdb' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
