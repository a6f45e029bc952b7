"""`modeldiff check`: every rule of semantics.md section 7, each with a twin that must stay silent.

Every test loads a small bike-share model written as YAML (BASE below, edited
one line at a time) and asserts the COMPLETE list of (rule, subject) findings,
not a fragment. BASE itself checks clean, so every finding a case lists comes
from its edit.

Outside sources:
- Kimball & Ross, The Data Warehouse Toolkit, 3rd ed., ch. 5 (slowly changing
  dimension type 2), from memory: a type-2 change adds a row with a new
  surrogate key, so the natural key repeats once per version; facts that
  reference the surrogate key stay with the version valid when they happened.
  A type-2 table needs its natural key and the row's validity dates to tell
  the versions of one member apart.
- Common practice (no single source; semantics.md sections 2-3 write it down):
  filters flow from the referenced table to the referencing one; one-to-one
  links carry filters both ways; row security does not cross the reverse of a
  two-way link unless the link says `security_flow: two-way`.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from modeldiff.check import RULES, check_model, exit_code
from modeldiff.load import load_files, load_path
from modeldiff.model import Finding

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
NAME = "bikes.model.yaml"

BASE = """\
model: bikeshare
format: 1
tables:
  calendar:
    kind: dimension
    key: day_key
    columns: {day_key: integer, year: integer}
  districts:
    kind: dimension
    key: district_key
    columns: {district_key: integer, region: text}
  stations:
    kind: dimension
    key: station_key
    columns: {station_key: integer, district_key: integer, name: text}
  bikes:
    kind: dimension
    key: bike_key
    columns:
      bike_key: integer
      serial_number: {type: text, unique: true}
      bike_type: text
  parts:
    kind: dimension
    key: part_key
    columns: {part_key: integer, category: text}
  mechanics:
    kind: dimension
    key: mechanic_key
    natural_key: mechanic_code
    history: {type: 2, valid_from: valid_from, valid_to: valid_to}
    columns:
      mechanic_key: integer
      mechanic_code: text
      depot_district_key: integer
      valid_from: date
      valid_to: date
  trips:
    kind: fact
    key: trip_key
    columns:
      trip_key: integer
      start_day_key: integer
      end_day_key: integer
      station_key: integer
      bike_key: integer
      bike_serial: text
      fare: decimal
      status: text
  repairs:
    kind: fact
    key: repair_key
    columns:
      repair_key: integer
      day_key: integer
      bike_key: integer
      mechanic_key: integer
      current_mechanic_key: integer
      mechanic_code: text
      station_key: integer
      cost: decimal
  district_access:
    kind: access
    key: [staff_email, district_key]
    columns: {staff_email: text, district_key: integer}
links:
  stations_district: {from: stations.district_key, to: districts.district_key}
  mechanics_depot: {from: mechanics.depot_district_key, to: districts.district_key}
  trips_start_day: {from: trips.start_day_key, to: calendar.day_key}
  trips_end_day: {from: trips.end_day_key, to: calendar.day_key, standby: true}
  trips_station: {from: trips.station_key, to: stations.station_key}
  trips_bike: {from: trips.bike_key, to: bikes.bike_key}
  repairs_day: {from: repairs.day_key, to: calendar.day_key}
  repairs_bike: {from: repairs.bike_key, to: bikes.bike_key}
  repairs_mechanic: {from: repairs.mechanic_key, to: mechanics.mechanic_key}
  repairs_current_mechanic: {from: repairs.current_mechanic_key, to: mechanics.mechanic_key, standby: true}
  district_access_district:
    from: district_access.district_key
    to: districts.district_key
    flow: two-way
    security_flow: two-way
measures:
  fare_revenue: {table: trips, expr: sum(fare), where: "status = 'completed'"}
  trip_count: {table: trips, expr: count(*)}
  trips_by_end_day: {table: trips, expr: count(*), via: [trips_end_day]}
  revenue_per_trip: {expr: "fare_revenue / nullif(trip_count, 0)"}
  repair_cost: {table: repairs, expr: sum(cost)}
variants:
  attribution:
    default: historical
    options:
      historical: {}
      current: {via: [repairs_current_mechanic]}
roles:
  east_lead: {filters: {districts: "region = 'East'"}}
  depot_staff: {filters: {district_access: "staff_email = :user"}}
reports:
  weekly_fares: {measures: [fare_revenue, trip_count], by: [calendar.year, stations.name]}
  repair_costs:
    measures: [repair_cost]
    by: [districts.region]
    variant: {attribution: current}
    role: east_lead
"""

SECTIONS = ("tables", "links", "measures", "variants", "roles", "reports")


def edited(*edits: tuple[str, str], text: str = BASE) -> str:
    """Apply (old, new) replacements; each `old` must occur exactly once, so no edit misses silently."""
    for old, new in edits:
        assert text.count(old) == 1, f"edit target occurs {text.count(old)} times: {old!r}"
        text = text.replace(old, new)
    return text


def add(section: str, yaml: str) -> tuple[str, str]:
    """An edit that adds items at the top of a section; `yaml` is written at the items' indentation."""
    assert section in SECTIONS
    body = "".join(f"  {line}\n" for line in yaml.strip("\n").splitlines())
    return f"\n{section}:\n", f"\n{section}:\n{body}"


def findings_of(text: str) -> list[Finding]:
    result = load_files([(NAME, text)])
    return check_model(result.model, result.findings)


def pairs(text: str) -> list[tuple[str, str]]:
    return [(f.rule, f.subject) for f in findings_of(text)]


def expect(*edits: tuple[str, str]):
    """Shorthand for the (rule, subject) list of BASE after `edits`."""
    return pairs(edited(*edits))


# --- the base model ---------------------------------------------------------------------


def test_base_model_has_no_findings():
    assert pairs(BASE) == []


def test_every_rule_of_section_7_has_its_severity():
    errors = {"invalid-model", "broken-reference", "duplicate-live-link", "key-not-unique", "type-mismatch",
              "measure-cycle", "history-incomplete"}
    warnings = {"ambiguous-paths", "security-stops", "role-reaches-no-fact", "standby-unused", "via-not-standby"}
    extensions = {"deprecated-key": "warning",  # ours (docs/model-format-extensions.md): `use` read as `via`
                  "two-way-drops-unmatched": "warning",  # beyond section 7: docs/check-rules.md
                  # report conditions (`having`, issue 13): docs/check-rules.md
                  "condition-unknown-measure": "error", "condition-not-boolean": "error",
                  "condition-aggregate": "error", "condition-without-groups": "warning"}
    assert RULES == {**{r: "error" for r in errors}, **{r: "warning" for r in warnings}, **extensions}


# --- invalid-model ----------------------------------------------------------------------

INVALID_CASES = [
    pytest.param([("fare: decimal", "fare: money")], [("invalid-model", "tables.trips.columns.fare")],
                 id="unknown-column-type"),
    pytest.param([("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_key, to: bikes.bike_key, colour: red}")],
                 [("invalid-model", "links.trips_bike.colour")], id="unknown-key"),
    pytest.param([("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_key, to: bikes.bike_key, standby: 3}")],
                 [("invalid-model", "links.trips_bike.standby")], id="wrong-type"),
    pytest.param([("trip_count: {table: trips, expr: count(*)}", "trip_count: {table: trips, expr: fare + 1}")],
                 [("invalid-model", "measures.trip_count")], id="base-measure-without-aggregate"),
    pytest.param([("expr: sum(fare), where: \"status = 'completed'\"", "expr: sum(fare), where: \"sum(fare) > 0\"")],
                 [("invalid-model", "measures.fare_revenue")], id="aggregate-in-where"),
    pytest.param([("expr: sum(cost)}", "expr: sum(cost}")], [("invalid-model", "measures.repair_cost")],
                 id="measure-sql-does-not-parse"),
    pytest.param([("region = 'East'", "region = = 'East'")], [("invalid-model", "roles.east_lead")],
                 id="role-filter-sql-does-not-parse"),
    pytest.param([("revenue_per_trip: {expr: \"fare_revenue / nullif(trip_count, 0)\"}",
                   "revenue_per_trip: {expr: \"fare_revenue / nullif(trip_count, 0)\", where: \"fare > 0\"}")],
                 [("invalid-model", "measures.revenue_per_trip")], id="derived-measure-with-where"),
    pytest.param([("expr: sum(cost)}", "expr: sum(cost) + cost}")], [("invalid-model", "measures.repair_cost")],
                 id="column-outside-aggregate"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "sum(fare_revenue) / nullif(trip_count, 0)")],
                 [("invalid-model", "measures.revenue_per_trip")], id="derived-measure-aggregates"),
    pytest.param([("region = 'East'", "sum(district_key) > 3")], [("invalid-model", "roles.east_lead")],
                 id="role-filter-aggregates"),
    pytest.param([("region = 'East'", "district_key + 1")], [("invalid-model", "roles.east_lead")],
                 id="role-filter-is-a-value"),
    pytest.param([("region = 'East'", "district_key in (select 1)")], [("invalid-model", "roles.east_lead")],
                 id="role-filter-subquery"),
    pytest.param([("staff_email = :user", "staff_email = :viewer")], [("invalid-model", "roles.depot_staff")],
                 id="role-filter-unknown-parameter"),
    pytest.param([("where: \"status = 'completed'\"", "where: \"status = :user\"")],
                 [("invalid-model", "measures.fare_revenue")], id="measure-depends-on-viewer"),
    pytest.param([("by: [districts.region]", "by: [districts.region]\n    where: {districts: \"region = :user\"}")],
                 [("invalid-model", "reports.repair_costs")], id="report-where-depends-on-viewer"),
]

INVALID_TWINS = [
    pytest.param([("fare: decimal", "fare: float")], id="known-column-type"),
    pytest.param([("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_key, to: bikes.bike_key, description: the bike}")], id="known-key"),
    pytest.param([("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_key, to: bikes.bike_key, standby: false}")], id="right-type"),
    pytest.param([("trip_count: {table: trips, expr: count(*)}", "trip_count: {table: trips, expr: sum(fare + 1)}")],
                 id="aggregate-present"),
    pytest.param([("expr: sum(fare), where: \"status = 'completed'\"", "expr: sum(fare), where: \"fare > 0\"")],
                 id="row-condition-in-where"),
    pytest.param([("expr: sum(cost)}", "expr: SUM( cost )}")], id="measure-sql-parses"),
    pytest.param([("region = 'East'", "region IN ('East', 'North')")], id="role-filter-sql-parses"),
    pytest.param([("revenue_per_trip: {expr: \"fare_revenue / nullif(trip_count, 0)\"}",
                   "revenue_per_trip: {expr: \"fare_revenue / nullif(trip_count, 0)\", unit: EUR}")],
                 id="derived-measure-without-where"),
    pytest.param([("expr: sum(cost)}", "expr: sum(cost) + count(*)}")], id="columns-inside-aggregates"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "coalesce(fare_revenue, 0) / nullif(trip_count, 0)")],
                 id="derived-measure-plain-functions"),
    pytest.param([("region = 'East'", "district_key > 3")], id="role-filter-compares"),
    pytest.param([("region = 'East'", "district_key in (1, 2)")], id="role-filter-list"),
    pytest.param([("staff_email = :user", "lower(staff_email) = lower(:user)")], id="role-filter-viewer"),
    pytest.param([("by: [districts.region]", "by: [districts.region]\n    where: {districts: \"region = 'East'\"}")],
                 id="report-where-fixed-value"),
]


@pytest.mark.parametrize("edits, expected", INVALID_CASES)
def test_invalid_model_detected(edits, expected):
    assert expect(*edits) == expected


@pytest.mark.parametrize("edits", INVALID_TWINS)
def test_invalid_model_not_reported_when_valid(edits):
    assert expect(*edits) == []


def test_invalid_model_findings_point_at_the_line():
    found = findings_of(edited(("fare: decimal", "fare: money")))
    assert [(f.pos.file, f.pos.line) for f in found] == [(NAME, BASE.splitlines().index("      fare: decimal") + 1)]


# --- broken-reference -------------------------------------------------------------------

BROKEN_CASES = [
    # tables
    pytest.param([add("links", "trips_rider: {from: trips.bike_key, to: riders.rider_key}")],
                 [("broken-reference", "links.trips_rider")], id="link-to-missing-table"),
    pytest.param([("repair_cost: {table: repairs,", "repair_cost: {table: repair,")],
                 [("broken-reference", "measures.repair_cost")], id="measure-table-missing"),
    pytest.param([("east_lead: {filters: {districts:", "east_lead: {filters: {district:")],
                 [("broken-reference", "roles.east_lead")], id="role-filters-missing-table"),
    pytest.param([("by: [calendar.year, stations.name]", "by: [calendar.year, station.name]")],
                 [("broken-reference", "reports.weekly_fares")], id="report-by-missing-table"),
    # columns
    pytest.param([("to: bikes.bike_key}\n  repairs_day", "to: bikes.bike_id}\n  repairs_day")],
                 [("broken-reference", "links.trips_bike")], id="link-to-missing-column"),
    pytest.param([("natural_key: mechanic_code", "natural_key: mechanic_id")],
                 [("broken-reference", "tables.mechanics")], id="natural-key-missing-column"),
    pytest.param([("valid_to: valid_to}", "valid_to: valid_until}")],
                 [("broken-reference", "tables.mechanics")], id="history-missing-column"),
    pytest.param([("key: part_key", "key: part_id")], [("broken-reference", "tables.parts")],
                 id="key-missing-column"),
    pytest.param([("expr: sum(cost)}", "expr: sum(costs)}")], [("broken-reference", "measures.repair_cost")],
                 id="measure-reads-missing-column"),
    pytest.param([("expr: sum(cost)}", "expr: sum(trips.fare)}")], [("broken-reference", "measures.repair_cost")],
                 id="measure-reads-another-table"),
    pytest.param([("where: \"status = 'completed'\"", "where: \"state = 'completed'\"")],
                 [("broken-reference", "measures.fare_revenue")], id="measure-where-missing-column"),
    pytest.param([("region = 'East'", "area = 'East'")], [("broken-reference", "roles.east_lead")],
                 id="role-filter-missing-column"),
    pytest.param([("by: [districts.region]", "by: [districts.name]")], [("broken-reference", "reports.repair_costs")],
                 id="report-by-missing-column"),
    pytest.param([("by: [districts.region]", "by: [districts.region]\n    where: {districts: \"area = 'E'\"}")],
                 [("broken-reference", "reports.repair_costs")], id="report-where-missing-column"),
    # links named in use / flow, on measures, variant options and reports
    pytest.param([("via: [trips_end_day]", "via: [trips_end_date]")],
                 [("broken-reference", "measures.trips_by_end_day"), ("standby-unused", "links.trips_end_day")],
                 id="measure-via-missing-link"),
    pytest.param([("trip_count: {table: trips, expr: count(*)}",
                   "trip_count: {table: trips, expr: count(*), flow: {trip_bike: two-way}}")],
                 [("broken-reference", "measures.trip_count")], id="measure-flow-missing-link"),
    pytest.param([("current: {via: [repairs_current_mechanic]}", "current: {via: [repairs_current_mech]}")],
                 [("broken-reference", "variants.attribution.options.current"),
                  ("standby-unused", "links.repairs_current_mechanic")], id="option-via-missing-link"),
    pytest.param([("historical: {}", "historical: {flow: {repairs_mech: off}}")],
                 [("broken-reference", "variants.attribution.options.historical")], id="option-flow-missing-link"),
    pytest.param([("role: east_lead\n", "role: east_lead\n    via: [no_such_link]\n")],
                 [("broken-reference", "reports.repair_costs")], id="report-via-missing-link"),
    pytest.param([("role: east_lead\n", "role: east_lead\n    flow: {no_such_link: off}\n")],
                 [("broken-reference", "reports.repair_costs")], id="report-flow-missing-link"),
    # measures
    pytest.param([("measures: [fare_revenue, trip_count]", "measures: [fare_revenue, trips_count]")],
                 [("broken-reference", "reports.weekly_fares")], id="report-shows-missing-measure"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "fare_revenue / nullif(trips_count, 0)")],
                 [("broken-reference", "measures.revenue_per_trip")], id="derived-names-missing-measure"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "fare_revenue / nullif(fare, 0)")],
                 [("broken-reference", "measures.revenue_per_trip")], id="derived-names-a-column"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "fare_revenue / nullif(trips.trip_count, 0)")],
                 [("broken-reference", "measures.revenue_per_trip")], id="derived-names-a-qualified-column"),
    # variants
    pytest.param([("default: historical", "default: history")], [("broken-reference", "variants.attribution")],
                 id="variant-default-not-an-option"),
    pytest.param([("variant: {attribution: current}", "variant: {attribution: now}")],
                 [("broken-reference", "reports.repair_costs")], id="report-picks-missing-option"),
    pytest.param([("variant: {attribution: current}", "variant: {attributions: current}")],
                 [("broken-reference", "reports.repair_costs")], id="report-picks-missing-variant"),
    pytest.param([("historical: {}", "historical: {where: {mechanic: \"grade = 'x'\"}}")],
                 [("broken-reference", "variants.attribution.options.historical")], id="option-where-missing-table"),
    # roles
    pytest.param([("role: east_lead", "role: east_leads")], [("broken-reference", "reports.repair_costs")],
                 id="report-seen-as-missing-role"),
]

BROKEN_TWINS = [
    pytest.param([add("tables", "riders: {kind: dimension, key: rider_key, columns: {rider_key: integer}}"),
                  add("links", "trips_rider: {from: trips.bike_key, to: riders.rider_key}")], id="link-table-exists"),
    pytest.param([("repair_cost: {table: repairs,", "repair_cost: {table: trips,"),
                  ("expr: sum(cost)}", "expr: sum(fare)}")], id="measure-table-exists"),
    pytest.param([("east_lead: {filters: {districts: \"region = 'East'\"}}",
                   "east_lead: {filters: {stations: \"name = 'East'\"}}")], id="role-filters-existing-table"),
    pytest.param([("by: [calendar.year, stations.name]", "by: [calendar.year, districts.region]")],
                 id="report-by-existing-table"),
    pytest.param([("to: bikes.bike_key}\n  repairs_day", "to: bikes.serial_number}\n  repairs_day"),
                  ("trips_bike: {from: trips.bike_key", "trips_bike: {from: trips.bike_serial")],
                 id="link-to-existing-column"),
    pytest.param([("natural_key: mechanic_code", "natural_key: [mechanic_code]")], id="natural-key-as-list"),
    pytest.param([("expr: sum(cost)}", "expr: sum(repairs.cost)}")], id="measure-reads-own-table-qualified"),
    pytest.param([("region = 'East'", "REGION = 'East'")], id="role-filter-column-case"),
    pytest.param([("by: [districts.region]", "by: [mechanics.mechanic_code]")], id="report-by-existing-column"),
    pytest.param([("by: [districts.region]", "by: [districts.region]\n    where: {districts: \"region = 'E'\"}")],
                 id="report-where-existing-column"),
    pytest.param([("trip_count: {table: trips, expr: count(*)}",
                   "trip_count: {table: trips, expr: count(*), flow: {trips_bike: one-way}}")],
                 id="measure-flow-existing-link"),
    pytest.param([("historical: {}", "historical: {flow: {repairs_mechanic: one-way}}")],
                 id="option-flow-existing-link"),
    pytest.param([("role: east_lead\n", "role: east_lead\n    flow: {trips_bike: off}\n")],
                 id="report-flow-existing-link"),
    pytest.param([("role: east_lead\n", "role: east_lead\n    via: [repairs_current_mechanic]\n")],
                 id="report-via-existing-link"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "fare_revenue / nullif(repair_cost, 0)")],
                 id="derived-names-existing-measures"),
    pytest.param([("fare_revenue / nullif(trip_count, 0)", "Fare_Revenue / nullif(\\\"TRIP_COUNT\\\", 0)")],
                 id="derived-names-measures-in-another-case"),
    pytest.param([("default: historical", "default: current")], id="variant-default-is-an-option"),
    pytest.param([("variant: {attribution: current}", "variant: {attribution: historical}")],
                 id="report-picks-existing-option"),
    pytest.param([("historical: {}", "historical: {where: {mechanics: \"mechanic_code = 'x'\"}}")],
                 id="option-where-existing-table"),
    pytest.param([("role: east_lead", "role: depot_staff")], id="report-seen-as-existing-role"),
]


@pytest.mark.parametrize("edits, expected", BROKEN_CASES)
def test_broken_reference_detected(edits, expected):
    assert expect(*edits) == expected


@pytest.mark.parametrize("edits", BROKEN_TWINS)
def test_broken_reference_not_reported_when_names_exist(edits):
    assert expect(*edits) == []


def test_broken_reference_message_names_the_missing_thing():
    [finding] = findings_of(edited(("fare_revenue / nullif(trip_count, 0)", "fare_revenue / nullif(trips_count, 0)")))
    assert "trips_count" in finding.message and "not a measure" in finding.message


# --- duplicate-live-link --------------------------------------------------------------


def test_duplicate_live_link_detected():
    # Both calendar links live: calendar reaches trips twice, and the measure's
    # `via` names a link that is no longer on standby.
    assert expect(("to: calendar.day_key, standby: true}", "to: calendar.day_key}")) == [
        ("duplicate-live-link", "links.trips_start_day"),
        ("ambiguous-paths", "paths.calendar->trips"),
        ("via-not-standby", "measures.trips_by_end_day"),
    ]


def test_duplicate_live_link_detected_in_either_direction():
    # A link the other way round between the same two tables is a second join too.
    link = "calendar_first_trip: {from: calendar.year, to: trips.trip_key, cardinality: many-to-many}"
    # It also lets a filter on trips reach calendar, and from there repairs: bikes and
    # districts now reach repairs along two routes.
    assert expect(add("links", link)) == [
        ("duplicate-live-link", "links.trips_start_day"),
        ("ambiguous-paths", "paths.bikes->repairs"),
        ("ambiguous-paths", "paths.district_access->repairs"),
        ("ambiguous-paths", "paths.districts->repairs"),
    ]


def test_duplicate_live_link_not_reported_when_one_is_standby():
    link = "calendar_first_trip: {from: calendar.year, to: trips.trip_key, cardinality: many-to-many, standby: true}"
    assert expect(add("links", link)) == [("standby-unused", "links.calendar_first_trip")]


def test_duplicate_live_link_not_reported_for_links_to_different_tables():
    assert pairs(BASE) == []  # trips meets calendar, stations and bikes once each


# --- key-not-unique (Kimball ch. 5 for the type-2 cases) --------------------------------

BIKE_DOCS = add("tables", "bike_docs: {kind: dimension, key: bike_key, columns: {bike_key: integer, "
                          "insurer: text}}")


def test_link_to_a_column_that_is_not_a_key_is_key_not_unique():
    assert expect(("to: stations.station_key}", "to: stations.district_key}")) == [
        ("key-not-unique", "links.trips_station")]


def test_link_to_the_key_is_not_key_not_unique():
    assert pairs(BASE) == []  # every link of BASE points at its `to` table's key


def test_link_to_a_column_declared_unique_is_not_key_not_unique():
    assert expect(("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_serial, to: bikes.serial_number}")) == []


def test_one_to_one_link_to_a_non_unique_column_is_key_not_unique():
    assert expect(BIKE_DOCS, add("links", "bike_docs_bike: {from: bike_docs.insurer, to: bikes.bike_type, "
                                          "cardinality: one-to-one}")) == [("key-not-unique", "links.bike_docs_bike")]


def test_one_to_one_link_to_a_unique_column_is_not_key_not_unique():
    assert expect(BIKE_DOCS, add("links", "bike_docs_bike: {from: bike_docs.insurer, to: bikes.serial_number, "
                                          "cardinality: one-to-one}")) == []


def test_many_to_many_link_to_a_non_unique_column_is_not_key_not_unique():
    assert expect(("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_serial, to: bikes.bike_type, cardinality: many-to-many}")) == []


# Kimball, ch. 5, type 2 (from memory): one row per version, each with a new
# surrogate key; the natural key repeats across the versions of one member.
def test_many_to_one_link_to_a_type_2_natural_key_is_key_not_unique():
    assert expect(("repairs_mechanic: {from: repairs.mechanic_key, to: mechanics.mechanic_key}",
                   "repairs_mechanic: {from: repairs.mechanic_code, to: mechanics.mechanic_code}")) == [
        ("key-not-unique", "links.repairs_mechanic")]


def test_type_2_natural_key_is_not_unique_even_when_the_column_says_unique():
    found = findings_of(edited(
        ("mechanic_code: text\n      depot", "mechanic_code: {type: text, unique: true}\n      depot"),
        ("repairs_mechanic: {from: repairs.mechanic_key, to: mechanics.mechanic_key}",
         "repairs_mechanic: {from: repairs.mechanic_code, to: mechanics.mechanic_code}")))
    assert [(f.rule, f.subject) for f in found] == [("key-not-unique", "links.repairs_mechanic")]
    assert "type-2" in found[0].message


def test_many_to_one_link_to_a_type_2_surrogate_key_is_not_key_not_unique():
    # BASE's repairs_mechanic already points at the surrogate key; say so explicitly.
    text = edited(("mechanic_code: text\n      depot", "mechanic_code: {type: text, unique: true}\n      depot"))
    assert "to: mechanics.mechanic_key" in text and pairs(text) == []


def test_many_to_many_link_to_a_type_2_natural_key_is_not_key_not_unique():
    # semantics.md section 6: a link to a type-2 natural key is many-to-many.
    assert expect(("repairs_mechanic: {from: repairs.mechanic_key, to: mechanics.mechanic_key}",
                   "repairs_mechanic: {from: repairs.mechanic_code, to: mechanics.mechanic_code, "
                   "cardinality: many-to-many}")) == []


def test_natural_key_of_a_type_1_table_declared_unique_is_not_key_not_unique():
    # Without type-2 history the natural key names one row per member.
    assert expect(("history: {type: 2, valid_from: valid_from, valid_to: valid_to}", "history: {type: 1}"),
                  ("mechanic_code: text\n      depot", "mechanic_code: {type: text, unique: true}\n      depot"),
                  ("repairs_mechanic: {from: repairs.mechanic_key, to: mechanics.mechanic_key}",
                   "repairs_mechanic: {from: repairs.mechanic_code, to: mechanics.mechanic_code}")) == []


VISITS = add("tables", "visits: {kind: fact, key: visit_key, columns: {visit_key: integer, email: text, "
                       "district_key: integer}}")


def test_link_to_part_of_a_composite_key_is_key_not_unique():
    # district_access is keyed by (staff_email, district_key): one e-mail has many rows.
    assert expect(VISITS, add("links", "visits_staff: {from: visits.email, to: district_access.staff_email}")) == [
        ("key-not-unique", "links.visits_staff")]


def test_link_to_the_whole_composite_key_in_any_order_is_not_key_not_unique():
    assert expect(VISITS, add("links", "visits_access: {from: [visits.district_key, visits.email], "
                                       "to: [district_access.district_key, district_access.staff_email]}")) == []


def test_link_to_columns_that_hold_the_key_is_not_key_not_unique():
    text = edited(add("tables", "station_visits: {kind: fact, key: visit_key, columns: {visit_key: integer, "
                                "station_key: integer, district_key: integer}}"),
                  add("links", "visits_station: {from: [station_visits.station_key, station_visits.district_key], "
                               "to: [stations.station_key, stations.district_key]}"))
    assert pairs(text) == []


def test_link_to_a_unique_column_that_is_part_of_a_type_2_natural_key_is_key_not_unique():
    # Kimball: every column of a type-2 natural key repeats per version.
    assert expect(("natural_key: mechanic_code", "natural_key: [mechanic_code, depot_district_key]"),
                  ("mechanic_code: text\n      depot", "mechanic_code: {type: text, unique: true}\n      depot"),
                  ("repairs_mechanic: {from: repairs.mechanic_key, to: mechanics.mechanic_key}",
                   "repairs_mechanic: {from: repairs.mechanic_code, to: mechanics.mechanic_code}")) == [
        ("key-not-unique", "links.repairs_mechanic")]


# --- type-mismatch ----------------------------------------------------------------------


def test_type_mismatch_detected():
    assert expect(("current_mechanic_key: integer", "current_mechanic_key: text")) == [
        ("type-mismatch", "links.repairs_current_mechanic")]


def test_type_mismatch_not_reported_when_types_agree():
    assert expect(("current_mechanic_key: integer", "current_mechanic_key: {type: integer, description: now}")) == []


def test_type_mismatch_message_names_both_types():
    [finding] = findings_of(edited(("current_mechanic_key: integer", "current_mechanic_key: text")))
    assert "(text)" in finding.message and "(integer)" in finding.message


# --- measure-cycle ----------------------------------------------------------------------


def test_measure_cycle_detected():
    assert expect(add("measures", "a: {expr: b * 2}\nb: {expr: c + fare_revenue}\nc: {expr: a / 2}")) == [
        ("measure-cycle", "measures.a")]


def test_measure_referring_to_itself_is_a_cycle():
    assert expect(add("measures", "growth: {expr: growth + 1}")) == [("measure-cycle", "measures.growth")]


def test_measure_cycle_not_reported_for_a_chain():
    assert expect(add("measures", "a: {expr: b * 2}\nb: {expr: c + fare_revenue}\nc: {expr: revenue_per_trip / 2}")) == []


def test_measure_cycle_message_shows_the_cycle():
    [finding] = findings_of(edited(add("measures", "a: {expr: b * 2}\nb: {expr: a / 2}")))
    assert "a -> b -> a" in finding.message


# --- history-incomplete (Kimball ch. 5, type 2) -----------------------------------------


@pytest.mark.parametrize("old, new", [
    ("    natural_key: mechanic_code\n", ""),
    ("valid_from: valid_from, ", ""),
    (", valid_to: valid_to}", "}"),
], ids=["no-natural-key", "no-valid-from", "no-valid-to"])
def test_type_2_table_without_natural_key_or_validity_is_history_incomplete(old, new):
    assert expect((old, new)) == [("history-incomplete", "tables.mechanics")]


def test_history_incomplete_names_every_missing_field():
    [finding] = findings_of(edited(("    natural_key: mechanic_code\n", ""),
                                   ("history: {type: 2, valid_from: valid_from, valid_to: valid_to}",
                                    "history: {type: 2}")))
    assert ("history-incomplete", "tables.mechanics") == (finding.rule, finding.subject)
    assert all(word in finding.message for word in ("natural_key", "valid_from", "valid_to"))


@pytest.mark.parametrize("history", ["{type: 0}", "{type: 1}", "{type: 3}"])
def test_other_history_types_need_no_natural_key_nor_validity(history):
    assert expect(("    natural_key: mechanic_code\n", ""),
                  ("{type: 2, valid_from: valid_from, valid_to: valid_to}", history)) == []


def test_complete_type_2_table_is_not_history_incomplete():
    assert pairs(BASE) == []  # mechanics has natural_key, valid_from and valid_to


# --- ambiguous-paths --------------------------------------------------------------------

# A second route from districts to repairs: through stations (new link) and through mechanics.
REPAIRS_STATION = add("links", "repairs_station: {from: repairs.station_key, to: stations.station_key}")


def test_ambiguous_paths_detected_in_the_default_setting():
    found = findings_of(edited(REPAIRS_STATION))
    assert [(f.rule, f.subject) for f in found] == [
        ("ambiguous-paths", "paths.district_access->repairs"),
        ("ambiguous-paths", "paths.districts->repairs"),
    ]
    witnesses = {f.subject: set(f.paths) for f in found}
    assert witnesses["paths.districts->repairs"] == {("mechanics_depot", "repairs_mechanic"),
                                                      ("stations_district", "repairs_station")}
    assert all(f.severity == "warning" for f in found)


def test_ambiguous_paths_not_reported_when_the_second_route_is_standby():
    # (Any `via` of it would make that setting ambiguous; unused, it is only unused.)
    assert expect(add("links", "repairs_station: {from: repairs.station_key, to: stations.station_key, "
                               "standby: true}")) == [("standby-unused", "links.repairs_station")]


def test_two_way_link_makes_new_routes():
    # trips_bike two-way: calendar and districts reach repairs through trips and bikes as well.
    # The roles filtering districts now stop at trips_bike (row security stays one-way there).
    assert expect(("trips_bike: {from: trips.bike_key, to: bikes.bike_key}",
                   "trips_bike: {from: trips.bike_key, to: bikes.bike_key, flow: two-way}")) == [
        ("ambiguous-paths", "paths.calendar->repairs"),
        ("ambiguous-paths", "paths.district_access->repairs"),
        ("ambiguous-paths", "paths.districts->repairs"),
        ("security-stops", "roles.depot_staff"),
        ("security-stops", "roles.east_lead"),
    ]


SETTING_ONLY = {  # holder -> (edit with FLOW to fill in, the setting the message names)
    "measure": (("repair_cost: {table: repairs, expr: sum(cost)}",
                 "repair_cost: {table: repairs, expr: sum(cost), flow: {trips_bike: FLOW}}"),
                "measure repair_cost's setting"),
    "variant-option": (("historical: {}", "historical: {flow: {trips_bike: FLOW}}"),
                       "option historical of variant attribution"),
    "report": (("role: east_lead\n", "role: east_lead\n    flow: {trips_bike: FLOW}\n"),
               "report repair_costs's setting"),
}
TRIPS_BIKE_PAIRS = [
    ("ambiguous-paths", "paths.calendar->repairs"),
    ("ambiguous-paths", "paths.district_access->repairs"),
    ("ambiguous-paths", "paths.districts->repairs"),
]


@pytest.mark.parametrize("holder", sorted(SETTING_ONLY))
def test_ambiguous_paths_in_one_setting_only_are_detected(holder):
    (old, new), label = SETTING_ONLY[holder]
    found = findings_of(edited((old, new.replace("FLOW", "two-way"))))
    # Overrides never change row security (semantics.md section 3): no security-stops here.
    assert [(f.rule, f.subject) for f in found] == TRIPS_BIKE_PAIRS
    assert all(f"more than one route in {label} (" in f.message for f in found)


@pytest.mark.parametrize("holder", sorted(SETTING_ONLY))
@pytest.mark.parametrize("flow", ["one-way", "off"])
def test_ambiguous_paths_not_reported_when_the_setting_keeps_one_route(holder, flow):
    (old, new), _ = SETTING_ONLY[holder]
    assert expect((old, new.replace("FLOW", flow))) == []


# An option that widens trips_bike but turns off the other routes into repairs:
# alone it leaves one route from each table into repairs.
NARROW = "narrow: {flow: {trips_bike: two-way, repairs_day: off, mechanics_depot: off}}"


def test_option_alone_with_one_route_is_not_ambiguous():
    assert expect(("historical: {}", "historical: {}\n      " + NARROW)) == []


def test_ambiguous_paths_in_a_report_with_its_variant_option():
    # The report picks `narrow` and brings repairs_day back (the report's layer comes
    # after the option's): calendar reaches repairs directly and through trips and bikes.
    # Neither the option nor the report's own overrides are ambiguous alone.
    found = findings_of(edited(("historical: {}", "historical: {}\n      " + NARROW),
                               ("variant: {attribution: current}", "variant: {attribution: narrow}"),
                               ("role: east_lead\n", "role: east_lead\n    flow: {repairs_day: one-way}\n")))
    assert [(f.rule, f.subject) for f in found] == [("ambiguous-paths", "paths.calendar->repairs")]
    assert "report repair_costs's setting" in found[0].message


def test_report_with_its_variant_option_keeping_one_route_is_not_ambiguous():
    assert expect(("historical: {}", "historical: {}\n      " + NARROW),
                  ("variant: {attribution: current}", "variant: {attribution: narrow}"),
                  ("role: east_lead\n", "role: east_lead\n    flow: {repairs_bike: one-way}\n")) == []


# A variant's default option applies wherever no option is chosen: to a measure outside
# any report and in a report that does not name the variant (DEVELOPERS.md).
NARROW_BY_DEFAULT = (("historical: {}", "historical: {}\n      " + NARROW), ("default: historical", "default: narrow"))


def test_default_option_applies_to_measures_outside_reports():
    found = findings_of(edited(*NARROW_BY_DEFAULT, (
        "repair_cost: {table: repairs, expr: sum(cost)}",
        "repair_cost: {table: repairs, expr: sum(cost), flow: {repairs_day: one-way}}")))
    assert [(f.rule, f.subject) for f in found] == [("ambiguous-paths", "paths.calendar->repairs")]
    assert "measure repair_cost's setting" in found[0].message


def test_default_option_applies_to_reports_that_do_not_choose():
    found = findings_of(edited(*NARROW_BY_DEFAULT, (
        "weekly_fares: {measures: [fare_revenue, trip_count], by: [calendar.year, stations.name]}",
        "weekly_fares: {measures: [repair_cost], by: [calendar.year], flow: {repairs_day: one-way}}")))
    assert [(f.rule, f.subject) for f in found] == [("ambiguous-paths", "paths.calendar->repairs")]
    assert "report weekly_fares's setting" in found[0].message


def test_default_option_does_not_apply_to_reports_that_choose_another():
    assert expect(*NARROW_BY_DEFAULT, (
        "weekly_fares: {measures: [fare_revenue, trip_count], by: [calendar.year, stations.name]}",
        "weekly_fares: {measures: [repair_cost], by: [calendar.year], flow: {repairs_day: one-way}, "
        "variant: {attribution: historical}}")) == []


def test_measure_overrides_apply_after_the_reports():
    # In report repair_costs the measure's own `repairs_day: off` wins over the report's
    # `repairs_day: one-way`, so the measure keeps one route (semantics.md section 1).
    assert expect(("repair_cost: {table: repairs, expr: sum(cost)}",
                   "repair_cost: {table: repairs, expr: sum(cost), flow: "
                   "{trips_bike: two-way, repairs_day: off, mechanics_depot: off}}"),
                  ("role: east_lead\n", "role: east_lead\n    flow: {repairs_day: one-way}\n")) == []


def test_ambiguous_pair_is_reported_once_across_settings():
    text = edited(REPAIRS_STATION, ("repair_cost: {table: repairs, expr: sum(cost)}",
                                    "repair_cost: {table: repairs, expr: sum(cost), flow: {trips_bike: two-way}}"))
    subjects = [s for r, s in pairs(text) if r == "ambiguous-paths"]
    assert len(subjects) == len(set(subjects))
    assert "paths.calendar->repairs" in subjects and "paths.districts->repairs" in subjects


def test_ambiguous_paths_witnesses_are_real_distinct_paths():
    from modeldiff import graph

    result = load_files([(NAME, edited(REPAIRS_STATION))])
    fg = graph.flow_graph(result.model)
    for f in check_model(result.model):
        source, target = f.subject.removeprefix("paths.").split("->")
        first, second = f.paths
        assert first != second
        assert fg.is_path(source, first, target) and fg.is_path(source, second, target)


# --- security-stops and role-reaches-no-fact (common practice, semantics.md section 3) ----

CLASSIC_BIKES = add("roles", "classic_bikes: {filters: {bikes: \"bike_type = 'classic'\"}}")
TRIPS_STATION_TWO_WAY = ("trips_station: {from: trips.station_key, to: stations.station_key}",
                         "trips_station: {from: trips.station_key, to: stations.station_key, flow: two-way}")


def test_security_stops_at_a_two_way_link_with_one_way_security():
    # Filters on bikes reach stations through trips (two-way), row security does not.
    found = findings_of(edited(CLASSIC_BIKES, TRIPS_STATION_TWO_WAY))
    assert [(f.rule, f.subject) for f in found] == [("security-stops", "roles.classic_bikes")]
    assert "trips_station" in found[0].message and "stations" in found[0].message


def test_security_does_not_stop_when_security_flow_is_two_way():
    assert expect(CLASSIC_BIKES, ("trips_station: {from: trips.station_key, to: stations.station_key}",
                                  "trips_station: {from: trips.station_key, to: stations.station_key, "
                                  "flow: two-way, security_flow: two-way}")) == []


def test_security_does_not_stop_at_one_way_links():
    assert expect(CLASSIC_BIKES) == []


def test_security_does_not_stop_where_the_role_restricts_the_far_side_anyway():
    # east_lead filters districts, so it restricts stations already: nothing stops.
    assert expect(TRIPS_STATION_TWO_WAY) == []


def test_row_security_does_not_cross_the_reverse_of_a_two_way_link_by_default():
    # depot_staff filters district_access; with security_flow one-way its filter
    # stays there and restricts no fact at all. The link then flows both ways out of the access table for
    # filters only, so report repair_costs (grouped by districts) loses districts without an access row.
    assert expect(("    flow: two-way\n    security_flow: two-way\n", "    flow: two-way\n")) == [
        ("role-reaches-no-fact", "roles.depot_staff"),
        ("security-stops", "roles.depot_staff"),
        ("two-way-drops-unmatched", "links.district_access_district"),
    ]


def test_role_reaches_no_fact_detected():
    assert expect(add("roles", "parts_clerk: {filters: {parts: \"category = 'brakes'\"}}")) == [
        ("role-reaches-no-fact", "roles.parts_clerk")]


def test_role_reaching_a_fact_is_not_reported():
    assert expect(add("roles", "parts_clerk: {filters: {mechanics: \"mechanic_code = 'x'\"}}")) == []


def test_role_filtering_a_fact_directly_is_not_reported():
    assert expect(add("roles", "completed_only: {filters: {trips: \"status = 'completed'\"}}")) == []


DOCS_CLERK = add("roles", "docs_clerk: {filters: {bike_docs: \"insurer = 'x'\"}}")


def test_filters_flow_from_the_referenced_table_to_the_referencing_one():
    # bike_docs references bikes (many-to-one): a filter on bike_docs does not reach
    # bikes, so the role filtering it restricts no fact.
    assert expect(BIKE_DOCS, DOCS_CLERK, add("links", "bike_docs_bike: {from: bike_docs.bike_key, "
                                                      "to: bikes.bike_key}")) == [
        ("role-reaches-no-fact", "roles.docs_clerk")]


def test_one_to_one_links_carry_filters_both_ways():
    # The same link declared one-to-one carries filters (and row security) both ways:
    # bike_docs reaches bikes, and through it trips and repairs.
    assert expect(BIKE_DOCS, DOCS_CLERK, add("links", "bike_docs_bike: {from: bike_docs.bike_key, "
                                                      "to: bikes.bike_key, cardinality: one-to-one}")) == []


def test_one_to_one_link_does_not_stop_security():
    # One-to-one always crosses for security: no security-stops even with security_flow one-way.
    assert expect(BIKE_DOCS, DOCS_CLERK, add("links", "bike_docs_bike: {from: bike_docs.bike_key, "
                                                      "to: bikes.bike_key, cardinality: one-to-one, "
                                                      "flow: two-way, security_flow: one-way}")) == []


def test_roles_ignore_measure_overrides():
    # A measure's `flow` never widens what a role restricts (semantics.md section 3).
    assert expect(DOCS_CLERK, BIKE_DOCS,
                  add("links", "bike_docs_bike: {from: bike_docs.bike_key, to: bikes.bike_key}"),
                  ("trip_count: {table: trips, expr: count(*)}",
                   "trip_count: {table: trips, expr: count(*), flow: {bike_docs_bike: two-way}}")) == [
        ("role-reaches-no-fact", "roles.docs_clerk")]


# --- standby-unused and via-not-standby -------------------------------------------------


def test_standby_unused_detected():
    assert expect(("  trips_by_end_day: {table: trips, expr: count(*), via: [trips_end_day]}\n", "")) == [
        ("standby-unused", "links.trips_end_day")]


def test_standby_link_named_only_in_flow_is_still_unused():
    assert expect(("via: [trips_end_day]", "flow: {trips_end_day: two-way}")) == [
        ("standby-unused", "links.trips_end_day")]


@pytest.mark.parametrize("holder", ["measure", "variant-option", "report"])
def test_standby_used_by_any_holder_is_not_unused(holder):
    drop_measure = ("  trips_by_end_day: {table: trips, expr: count(*), via: [trips_end_day]}\n", "")
    use_it = {
        "measure": ("trip_count: {table: trips, expr: count(*)}",
                    "trip_count: {table: trips, expr: count(*), via: [trips_end_day]}"),
        "variant-option": ("historical: {}", "historical: {via: [trips_end_day]}"),
        "report": ("role: east_lead\n", "role: east_lead\n    via: [trips_end_day]\n"),
    }[holder]
    assert expect(drop_measure, use_it) == []


@pytest.mark.parametrize("holder, subject", [
    ("measure", "measures.trip_count"),
    ("variant-option", "variants.attribution.options.historical"),
    ("report", "reports.repair_costs"),
])
def test_via_not_standby_detected(holder, subject):
    use_it = {
        "measure": ("trip_count: {table: trips, expr: count(*)}",
                    "trip_count: {table: trips, expr: count(*), via: [trips_bike]}"),
        "variant-option": ("historical: {}", "historical: {via: [trips_bike]}"),
        "report": ("role: east_lead\n", "role: east_lead\n    via: [trips_bike]\n"),
    }[holder]
    assert expect(use_it) == [("via-not-standby", subject)]


@pytest.mark.parametrize("holder", ["measure", "variant-option", "report"])
def test_via_not_standby_not_reported_for_standby_links(holder):
    use_it = {
        "measure": ("trip_count: {table: trips, expr: count(*)}",
                    "trip_count: {table: trips, expr: count(*), via: [trips_end_day]}"),
        "variant-option": ("historical: {}", "historical: {via: [repairs_current_mechanic]}"),
        "report": ("role: east_lead\n", "role: east_lead\n    via: [trips_end_day]\n"),
    }[holder]
    assert expect(use_it) == []


# --- the whole check --------------------------------------------------------------------


def test_findings_are_sorted_errors_first_then_rule_and_subject():
    found = findings_of(edited(("fare: decimal", "fare: money"), REPAIRS_STATION,
                               ("current_mechanic_key: integer", "current_mechanic_key: text")))
    keys = [(f.severity != "error", f.rule, f.subject) for f in found]
    assert keys == sorted(keys)
    assert [f.severity for f in found] == ["error", "error", "warning", "warning"]


def test_check_is_deterministic():
    text = edited(REPAIRS_STATION, CLASSIC_BIKES, TRIPS_STATION_TWO_WAY)
    assert findings_of(text) == findings_of(text)


def test_graph_rules_can_be_skipped_and_errors_remain():
    result = load_files([(NAME, edited(REPAIRS_STATION, ("current_mechanic_key: integer",
                                                          "current_mechanic_key: text")))])
    cheap = check_model(result.model, result.findings, graph_rules=False)
    assert [(f.rule, f.subject) for f in cheap] == [("type-mismatch", "links.repairs_current_mechanic")]
    full = check_model(result.model, result.findings)
    assert [f for f in full if f.severity == "error"] == cheap


def test_findings_carry_positions():
    [finding] = findings_of(edited(("to: stations.station_key}", "to: stations.district_key}")))
    assert finding.pos is not None and finding.pos.file == NAME
    line = next(i for i, text in enumerate(edited(("to: stations.station_key}", "to: stations.district_key}"))
                                              .splitlines(), 1) if text.startswith("  trips_station:"))
    assert finding.pos.line == line


@pytest.mark.parametrize("findings, strict, code", [
    ([], False, 0),
    ([], True, 0),
    ([Finding("standby-unused", "warning", "links.x", "m")], False, 0),
    ([Finding("standby-unused", "warning", "links.x", "m")], True, 1),
    ([Finding("type-mismatch", "error", "links.x", "m")], False, 3),
    ([Finding("type-mismatch", "error", "links.x", "m"), Finding("standby-unused", "warning", "links.x", "m")],
     True, 3),
])
def test_exit_code(findings, strict, code):
    assert exit_code(findings, strict) == code


# --- the bike-share example -------------------------------------------------------------


def test_bikeshare_example_checks_clean():
    result = load_path(EXAMPLES / "bikeshare.model.yaml")
    assert check_model(result.model, result.findings) == []


def test_bikeshare_revision_2_gives_exactly_its_two_warnings():
    result = load_path(EXAMPLES / "revision-2" / "bikeshare.model.yaml")
    found = check_model(result.model, result.findings)
    assert [(f.rule, f.severity, f.subject) for f in found] == [
        ("ambiguous-paths", "warning", "paths.calendar->stock_levels"),
        ("security-stops", "warning", "roles.student_programme_analyst"),
    ]
    assert set(found[0].paths) == {("stock_levels_day",),
                                   ("trips_start_day", "trips_start_station", "stock_levels_station")}
    assert "trips_start_station" in found[1].message and "stations" in found[1].message
