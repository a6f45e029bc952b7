"""The structural diff: keyed differ, predicates, renames, severities, and the scenario folders.

Scenario folders (tests/scenarios/<name>/) hold old.model.yaml, new.model.yaml and
expected.json, the complete list of [kind, subject] of the structural changes.
Rewrite expected.json files on purpose only, after reading the change:

    MODELDIFF_UPDATE_GOLDEN=1 .venv/bin/python -m pytest tests/test_diff.py
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
from pathlib import Path

import pytest

from modeldiff.changes import Change
from modeldiff.diff import (KINDS, diff_models, flow_narrowed, flow_widened, keyed_diff, moved_natural_to_surrogate,
                            moved_surrogate_to_natural, standby_cleared, standby_set)
from modeldiff.load import load_path
from modeldiff.model import History, Link
from tests.modelkit import (bikeshare, drop, edit, link, measure, ov, rename, report, role, table, variant)

HERE = Path(__file__).parent
ROOT = HERE.parent
SCENARIOS = HERE / "scenarios"
SCENARIO_NAMES = sorted(p.name for p in SCENARIOS.iterdir() if p.is_dir())
UPDATE = os.environ.get("MODELDIFF_UPDATE_GOLDEN") == "1"


def pairs(changes: list[Change]) -> list[tuple[str, str]]:
    return [(c.kind, c.subject) for c in changes]


def only(changes: list[Change], kind: str) -> Change:
    found = [c for c in changes if c.kind == kind]
    assert len(found) == 1, pairs(changes)
    return found[0]


BASE = bikeshare()


# --- the generic keyed differ ----------------------------------------------------------------------


def test_keyed_diff_splits_and_sorts_names():
    assert keyed_diff({"b": 1, "a": 2, "c": 3}, {"d": 1, "c": 9, "a": 2}) == (["d"], ["b"], ["a", "c"])


def test_keyed_diff_tests_membership_not_truthiness():
    # YAML values like 0, "", {} and None are real values: present means kept
    old = {"zero": 0, "empty": "", "blank": {}, "none": None}
    assert keyed_diff(old, dict(old)) == ([], [], ["blank", "empty", "none", "zero"])
    assert keyed_diff({}, old) == (["blank", "empty", "none", "zero"], [], [])


# --- small predicates, each with its twin --------------------------------------------------------------

ONE_WAY = Link("l", "trips", ("bike_key",), "bikes", ("bike_key",))
TWO_WAY = dataclasses.replace(ONE_WAY, flow="two-way")
STANDBY = dataclasses.replace(ONE_WAY, standby=True)


def test_flow_widened_and_narrowed_are_directional():
    assert flow_widened(ONE_WAY, TWO_WAY) and not flow_narrowed(ONE_WAY, TWO_WAY)
    assert flow_narrowed(TWO_WAY, ONE_WAY) and not flow_widened(TWO_WAY, ONE_WAY)
    assert not flow_widened(ONE_WAY, ONE_WAY) and not flow_narrowed(TWO_WAY, TWO_WAY)


def test_standby_set_and_cleared():
    assert standby_set(ONE_WAY, STANDBY) and not standby_cleared(ONE_WAY, STANDBY)
    assert standby_cleared(STANDBY, ONE_WAY) and not standby_set(STANDBY, ONE_WAY)
    assert not standby_set(STANDBY, STANDBY) and not standby_cleared(ONE_WAY, ONE_WAY)


MECHANICS = BASE.tables["mechanics"]
TO_SURROGATE = BASE.links["repairs_mechanic"]
TO_NATURAL = link("repairs_mechanic", "repairs.mechanic_code", "mechanics.mechanic_code", cardinality="many-to-many")


def test_surrogate_to_natural_predicate():
    assert moved_surrogate_to_natural(TO_SURROGATE, MECHANICS, TO_NATURAL, MECHANICS)
    assert not moved_natural_to_surrogate(TO_SURROGATE, MECHANICS, TO_NATURAL, MECHANICS)
    assert moved_natural_to_surrogate(TO_NATURAL, MECHANICS, TO_SURROGATE, MECHANICS)


def test_key_moves_on_a_table_without_type2_history_are_not_history_moves():
    type1 = dataclasses.replace(MECHANICS, history=History(1))
    assert not moved_surrogate_to_natural(TO_SURROGATE, type1, TO_NATURAL, type1)
    assert not moved_natural_to_surrogate(TO_NATURAL, type1, TO_SURROGATE, type1)


# --- whole models built in Python ------------------------------------------------------------------------


def test_a_model_compared_with_itself_reports_nothing():
    assert diff_models(BASE, BASE) == []
    example = load_path(ROOT / "examples" / "bikeshare.model.yaml").model
    assert diff_models(example, example) == []


def test_the_example_revision_changes_one_link_flow():
    old = load_path(ROOT / "examples" / "bikeshare.model.yaml").model
    new = load_path(ROOT / "examples" / "revision-2" / "bikeshare.model.yaml").model
    (change,) = diff_models(old, new)
    assert (change.kind, change.subject, change.severity, change.before, change.after) == \
        ("link.flow_widened", "links.trips_start_station", "numbers", "one-way", "two-way")
    assert change.message == ("Link trips_start_station now lets filters flow both ways (one-way -> two-way): "
                              "a filter on trips now also restricts stations.")
    assert change.id == ""  # the caller numbers the changes


def test_changes_are_sorted_and_independent_of_insertion_order():
    new = edit(BASE, dataclasses.replace(BASE.links["trips_bike"], flow="two-way"),
               measure("trip_count", "count(*)", "trips", "status <> 'cancelled'"))
    new = drop(new, "reports", "daily_returns")
    shuffled = dataclasses.replace(new, **{s: dict(reversed(list(getattr(new, s).items())))
                                           for s in ("tables", "links", "measures", "reports")})
    changes = diff_models(BASE, new)
    assert changes == sorted(changes, key=Change.sort_key)
    assert diff_models(BASE, shuffled) == changes
    assert pairs(changes) == [("link.flow_widened", "links.trips_bike"), ("measure.logic_changed", "measures.trip_count"),
                              ("report.removed", "reports.daily_returns")]


def test_swapping_the_revisions_swaps_the_direction_of_each_change():
    new = edit(BASE, dataclasses.replace(BASE.links["trips_bike"], flow="two-way"),
               table("parts", columns={"part_key": "integer"}))
    assert pairs(diff_models(BASE, new)) == [("link.flow_widened", "links.trips_bike"), ("table.added", "tables.parts")]
    assert pairs(diff_models(new, BASE)) == [("link.flow_narrowed", "links.trips_bike"), ("table.removed", "tables.parts")]


# --- renames ---------------------------------------------------------------------------------------------


def _rename_stations(m):
    """stations -> docks, with every reference following (link ends, report `by`, a role filter)."""
    m = rename(m, "tables", "stations", "docks")
    return edit(m, link("stations_district", "docks.district_key", "districts.district_key"),
                link("trips_start_station", "trips.start_station_key", "docks.station_key"),
                role("dock_staff", {"docks": "name = 'Harbour'"}),
                report("dock_trips", "trip_count", "docks.name"))


def test_a_table_rename_that_every_reference_follows_is_one_change():
    old = edit(BASE, role("dock_staff", {"stations": "name = 'Harbour'"}), report("dock_trips", "trip_count", "stations.name"))
    changes = diff_models(old, _rename_stations(BASE))
    assert pairs(changes) == [("table.renamed", "tables.docks")]
    assert (changes[0].before, changes[0].after, changes[0].severity) == ("stations", "docks", "safe")


def test_a_table_rename_that_a_reference_does_not_follow_is_a_breaking_rename_that_names_it():
    old = edit(BASE, role("dock_staff", {"stations": "name = 'Harbour'"}))
    new = edit(_rename_stations(BASE), role("dock_staff", {"stations": "name = 'Harbour'"}))
    changes = diff_models(old, new)
    assert pairs(changes) == [("report.added", "reports.dock_trips"), ("table.renamed", "tables.docks")]
    renamed = only(changes, "table.renamed")
    assert renamed.severity == "breaking" and renamed.details["left_behind"] == ["roles.dock_staff"]
    assert "role dock_staff still uses the old name" in renamed.message


def test_a_rename_with_a_new_description_reports_the_rename_and_the_metadata():
    new = rename(BASE, "roles", "east_district_lead", "east_lead")
    new = edit(new, dataclasses.replace(new.roles["east_lead"], description="East of the river."),
               dataclasses.replace(new.reports["east_overview"], role="east_lead"))
    assert pairs(diff_models(BASE, new)) == [("role.metadata_changed", "roles.east_lead"), ("role.renamed", "roles.east_lead")]


def test_a_rename_that_also_changes_the_definition_is_not_a_rename():
    new = rename(BASE, "roles", "east_district_lead", "east_lead")
    new = edit(new, role("east_lead", {"districts": "region = 'West'"}),
               dataclasses.replace(new.reports["east_overview"], role="east_lead"))
    kinds = [k for k, _ in pairs(diff_models(BASE, new))]
    assert "role.renamed" not in kinds and {"role.added", "role.removed"} <= set(kinds)


def _rename_fare(m, *, follow: bool):
    trips = m.tables["trips"]
    columns = {("fare_amount" if n == "fare" else n): (dataclasses.replace(c, name="fare_amount") if n == "fare" else c)
               for n, c in trips.columns.items()}
    m = edit(m, dataclasses.replace(trips, columns=columns))
    if follow:
        m = edit(m, measure("fare_revenue", "SUM(trips.fare_amount)", "trips", "status = 'completed'", unit="EUR", owner="finance"),
                 role("big_spender_desk", {"trips": "fare_amount > 100"}),
                 report("fares_by_amount", "trip_count", "trips.fare_amount"))
    return m


def test_a_column_rename_followed_by_sql_filters_and_by_is_one_change():
    old = edit(BASE, role("big_spender_desk", {"trips": "fare > 100"}), report("fares_by_amount", "trip_count", "trips.fare"))
    changes = diff_models(old, _rename_fare(old, follow=True))
    assert pairs(changes) == [("column.renamed", "tables.trips.columns.fare_amount")]
    assert (changes[0].before, changes[0].after) == ("fare", "fare_amount")


def test_a_column_rename_not_followed_by_the_sql_is_a_breaking_removal():
    changes = diff_models(BASE, _rename_fare(BASE, follow=False))
    assert pairs(changes) == [("column.removed", "tables.trips.columns.fare"),
                              ("column.added", "tables.trips.columns.fare_amount")]
    assert only(changes, "column.removed").severity == "breaking"


def test_a_column_whose_name_only_changes_case_is_renamed():
    old = edit(BASE, table("riders", columns={"rider_key": "integer", "Plan": "text"}), role("students", {"riders": "plan = 's'"}))
    new = edit(old, table("riders", columns={"rider_key": "integer", "plan": "text"}))
    (change,) = diff_models(old, new)
    assert (change.kind, change.subject, change.before, change.severity) == \
        ("column.renamed", "tables.riders.columns.plan", "Plan", "safe")


def test_ambiguous_column_renames_are_not_guessed():
    old = edit(BASE, table("riders", columns={"rider_key": "integer", "plan": "text", "age_band": "text"}))
    new = edit(BASE, table("riders", columns={"rider_key": "integer", "tier": "text", "age_group": "text"}))
    assert sorted(k for k, _ in pairs(diff_models(old, new))) == ["column.added"] * 2 + ["column.removed"] * 2


def test_references_tell_ambiguous_column_renames_apart():
    old = edit(BASE, table("riders", columns={"rider_key": "integer", "plan": "text", "age_band": "text"}),
               role("students", {"riders": "plan = 'student'"}), report("by_age", "trip_count", "riders.age_band"))
    new = edit(BASE, table("riders", columns={"rider_key": "integer", "tier": "text", "age_group": "text"}),
               role("students", {"riders": "tier = 'student'"}), report("by_age", "trip_count", "riders.age_group"))
    changes = diff_models(old, new)
    assert pairs(changes) == [("column.renamed", "tables.riders.columns.age_group"), ("column.renamed", "tables.riders.columns.tier")]
    assert {(c.before, c.after) for c in changes} == {("age_band", "age_group"), ("plan", "tier")}


def test_a_measure_rename_followed_by_a_derived_measure_only_is_safe():
    new = rename(BASE, "measures", "trip_count", "trips_made")
    new = edit(new, measure("revenue_per_trip", "fare_revenue / NULLIF(trips_made, 0)"))
    new = edit(new, *(dataclasses.replace(r, measures=tuple("trips_made" if m == "trip_count" else m for m in r.measures))
                      for r in new.reports.values()))
    old = drop(BASE, "reports", "weekly_fares")
    new = drop(new, "reports", "weekly_fares")
    change = only(diff_models(old, new), "measure.renamed")
    assert pairs(diff_models(old, new)) == [("measure.renamed", "measures.trips_made")]
    assert change.severity == "safe"


def test_a_measure_rename_shown_by_a_report_is_breaking():
    new = rename(BASE, "measures", "trip_count", "trips_made")
    new = edit(new, measure("revenue_per_trip", "fare_revenue / nullif(trips_made, 0)"),
               dataclasses.replace(new.reports["weekly_fares"], measures=("fare_revenue", "trips_made", "revenue_per_trip")))
    (change,) = diff_models(BASE, new)
    assert (change.kind, change.severity, change.before, change.after) == ("measure.renamed", "breaking", "trip_count", "trips_made")
    assert "reports.weekly_fares" in change.message


def test_a_link_rename_followed_by_every_via_and_flow_is_one_change():
    old = edit(BASE, report("returns_two_way", "trip_count", overrides=ov(trips_end_day="two-way")))
    new = rename(old, "links", "trips_end_day", "trips_return_day")
    new = edit(new, measure("trips_by_end_day", "count(*)", "trips", overrides=ov("trips_return_day")),
               report("returns_two_way", "trip_count", overrides=ov(trips_return_day="two-way")))
    assert pairs(diff_models(old, new)) == [("link.renamed", "links.trips_return_day")]


def test_renames_of_links_and_variants_followed_by_a_variant_option_and_a_report():
    new = rename(BASE, "links", "repairs_current_mechanic", "repairs_mechanic_now")
    new = rename(new, "variants", "attribution", "depot_attribution")
    new = edit(new, dataclasses.replace(new.variants["depot_attribution"], options={
        "historical": BASE.variants["attribution"].options["historical"],
        "current": dataclasses.replace(BASE.variants["attribution"].options["current"], overrides=ov("repairs_mechanic_now"))}),
        dataclasses.replace(new.reports["repair_costs_current"], variant={"depot_attribution": "current"}))
    assert pairs(diff_models(BASE, new)) == [("link.renamed", "links.repairs_mechanic_now"),
                                             ("variant.renamed", "variants.depot_attribution")]


# --- link key switches ---------------------------------------------------------------------------------------


def test_a_switch_to_a_type2_natural_key_says_what_happens_to_history():
    changes = diff_models(BASE, edit(BASE, TO_NATURAL))
    to_side = [c for c in changes if c.kind == "link.key_switched" and c.details.get("side") == "to"]
    (change,) = to_side
    assert (change.before, change.after) == ("mechanics.mechanic_key", "mechanics.mechanic_code")
    assert change.details["history"] == "surrogate->natural"
    assert "every version" in change.message and "no longer attributed" in change.message


def test_a_switch_back_to_the_surrogate_key_is_natural_to_surrogate():
    changes = diff_models(edit(BASE, TO_NATURAL), BASE)
    (change,) = [c for c in changes if c.kind == "link.key_switched" and c.details.get("side") == "to"]
    assert change.details["history"] == "natural->surrogate"


def test_a_key_switch_outside_a_type2_table_carries_no_history_detail():
    new = edit(BASE, link("trips_start_day", "trips.end_day_key", "calendar.day_key"))
    (change,) = diff_models(BASE, new)
    assert (change.kind, change.details) == ("link.key_switched", {"side": "from"})
    assert (change.before, change.after) == ("trips.start_day_key", "trips.end_day_key")


def test_a_key_switch_on_several_columns_gives_lists():
    old = edit(BASE, link("stock_part", "trips.bike_key,start_day_key", "bikes.bike_key,serial_number"))
    new = edit(BASE, link("stock_part", "trips.bike_key,end_day_key", "bikes.bike_key,serial_number"))
    (change,) = diff_models(old, new)
    assert (change.before, change.after) == (["trips.bike_key", "trips.start_day_key"], ["trips.bike_key", "trips.end_day_key"])


# --- SQL ----------------------------------------------------------------------------------------------------------


def test_respelled_sql_is_cosmetic_and_safe():
    new = edit(BASE, measure("fare_revenue", "SUM( Fare )  -- fares", "trips", "(status = 'completed')", unit="EUR", owner="finance"))
    (change,) = diff_models(BASE, new)
    assert (change.kind, change.severity) == ("measure.cosmetic_changed", "safe")


def test_sql_whose_logic_differs_is_a_logic_change():
    # the case of a string literal counts: 'Completed' is another value
    new = edit(BASE, measure("fare_revenue", "sum(fare)", "trips", "status = 'Completed'", unit="EUR", owner="finance"))
    (change,) = diff_models(BASE, new)
    assert (change.kind, change.severity, change.before, change.after) == \
        ("measure.logic_changed", "numbers", {"where": "status = 'completed'"}, {"where": "status = 'Completed'"})


def test_sql_that_cannot_be_parsed_counts_as_changed_only_when_its_text_changed():
    broken = edit(BASE, measure("trip_count", "count(* ", "trips"))
    assert diff_models(broken, broken) == []
    respelled = edit(BASE, measure("trip_count", "COUNT(* ", "trips"))
    (change,) = diff_models(broken, respelled)
    assert (change.kind, change.severity) == ("measure.logic_changed", "numbers")


def test_a_new_measure_table_is_a_logic_change():
    new = edit(BASE, measure("trip_count", "count(*)", "repairs"))
    (change,) = diff_models(BASE, new)
    assert (change.kind, change.before, change.after) == ("measure.logic_changed", {"table": "trips"}, {"table": "repairs"})


def test_unchanged_sql_is_never_normalised(monkeypatch):
    from modeldiff import sql

    seen = []
    real = sql.normal_form
    monkeypatch.setattr(sql, "normal_form", lambda text, table=None: seen.append(text) or real(text, table))
    new = edit(BASE, dataclasses.replace(BASE.measures["repair_cost"], description="Parts and labour."),
               dataclasses.replace(BASE.roles["depot_staff"], description="Depot staff."),
               dataclasses.replace(BASE.links["trips_bike"], flow="two-way"))
    assert [k for k, _ in pairs(diff_models(BASE, new))] == ["link.flow_widened", "measure.metadata_changed", "role.metadata_changed"]
    assert seen == []
    diff_models(BASE, edit(BASE, role("east_district_lead", {"districts": "REGION = 'East'"})))
    assert sorted(seen) == ["REGION = 'East'", "region = 'East'"]


# --- severities: each with its twin -------------------------------------------------------------------------------


def test_removing_a_measure_a_report_still_shows_is_breaking():
    changes = diff_models(BASE, drop(BASE, "measures", "trips_by_end_day"))
    assert only(changes, "measure.removed").severity == "breaking"


def test_removing_a_measure_nothing_uses_is_numbers():
    changes = diff_models(BASE, drop(drop(BASE, "measures", "trips_by_end_day"), "reports", "daily_returns"))
    assert only(changes, "measure.removed").severity == "numbers"


def test_removing_a_link_that_a_variant_option_uses_is_breaking_and_otherwise_numbers():
    assert only(diff_models(BASE, drop(BASE, "links", "repairs_current_mechanic")), "link.removed").severity == "breaking"
    assert only(diff_models(BASE, drop(BASE, "links", "repairs_bike")), "link.removed").severity == "numbers"


def test_adding_a_standby_link_nothing_uses_is_safe_but_a_live_one_is_numbers():
    standby = link("trips_bike_spare", "trips.bike_key", "bikes.serial_number", standby=True)
    assert only(diff_models(BASE, edit(BASE, standby)), "link.added").severity == "safe"
    live = dataclasses.replace(standby, standby=False)
    assert only(diff_models(BASE, edit(BASE, live)), "link.added").severity == "numbers"
    used = edit(BASE, standby, measure("spare_trips", "count(*)", "trips", overrides=ov("trips_bike_spare")))
    assert only(diff_models(BASE, used), "link.added").severity == "numbers"


def test_an_added_column_is_safe_until_something_reads_it():
    trips = BASE.tables["trips"]
    wider = table("trips", "fact", key="trip_key", columns={**{n: c.type for n, c in trips.columns.items()}, "minutes": "integer"})
    assert only(diff_models(BASE, edit(BASE, wider)), "column.added").severity == "safe"
    read = edit(BASE, wider, measure("ride_minutes", "sum(minutes)", "trips"))
    assert only(diff_models(BASE, read), "column.added").severity == "numbers"


def test_removing_a_role_a_report_is_seen_as_is_breaking_and_otherwise_numbers():
    assert only(diff_models(BASE, drop(BASE, "roles", "east_district_lead")), "role.removed").severity == "breaking"
    assert only(diff_models(BASE, drop(BASE, "roles", "depot_staff")), "role.removed").severity == "numbers"


def test_a_report_listing_its_measures_in_another_order_is_safe():
    weekly = BASE.reports["weekly_fares"]
    new = edit(BASE, dataclasses.replace(weekly, measures=tuple(reversed(weekly.measures))))
    assert only(diff_models(BASE, new), "report.changed").severity == "safe"
    new = edit(BASE, dataclasses.replace(weekly, measures=weekly.measures[:2]))
    assert only(diff_models(BASE, new), "report.changed").severity == "numbers"


def test_removing_a_variant_option_a_report_still_chooses_is_breaking():
    attribution = BASE.variants["attribution"]
    new = edit(BASE, variant("attribution", "historical", {"historical": ov()}, attribution.description))
    change = only(diff_models(BASE, new), "variant.changed")
    assert (change.subject, change.severity) == ("variants.attribution.options.current", "breaking")
    unused = edit(BASE, variant("attribution", "historical", {**{n: o.overrides for n, o in attribution.options.items()},
                                                               "spare": ov()}, attribution.description))
    assert only(diff_models(unused, BASE), "variant.changed").severity == "numbers"
    assert only(diff_models(BASE, unused), "variant.changed").severity == "safe"


# --- scenario folders ------------------------------------------------------------------------------------------


def _load(folder: Path, which: str):
    result = load_path(folder / f"{which}.model.yaml")
    assert result.findings == (), f"{folder.name}/{which}.model.yaml is not a valid model: {result.findings}"
    return result.model


def _expected(folder: Path) -> list[list[str]]:
    return json.loads((folder / "expected.json").read_text())


@pytest.mark.parametrize("name", SCENARIO_NAMES)
def test_scenario(name):
    folder = SCENARIOS / name
    got = [[c.kind, c.subject] for c in diff_models(_load(folder, "old"), _load(folder, "new"))]
    if UPDATE:
        (folder / "expected.json").write_text(json.dumps(got, indent=1) + "\n")
    assert got == _expected(folder)


# Each kind: a scenario that shows it, and a twin where something close changed but not that.
TWINS = {
    "table.added": ("table_added", "table_renamed"),
    "table.removed": ("table_removed", "table_renamed"),
    "table.renamed": ("table_renamed", "table_replaced"),
    "table.kind_changed": ("table_kind_changed", "table_description_changed"),
    "table.key_changed": ("table_key_changed", "column_renamed_key"),
    "table.natural_key_changed": ("table_natural_key_changed", "table_key_changed"),
    "table.history_changed": ("table_history_changed", "table_natural_key_changed"),
    "table.metadata_changed": ("table_source_changed", "table_kind_changed"),
    "column.added": ("column_added", "column_renamed"),
    "column.removed": ("column_removed", "column_renamed"),
    "column.renamed": ("column_renamed", "column_rename_not_followed"),
    "column.type_changed": ("column_type_changed", "column_description_changed"),
    "column.unique_changed": ("column_unique_changed", "column_description_changed"),
    "column.metadata_changed": ("column_description_changed", "column_type_changed"),
    "link.added": ("link_added", "link_renamed"),
    "link.removed": ("link_removed", "link_renamed"),
    "link.renamed": ("link_renamed", "link_removed"),
    "link.flow_widened": ("link_flow_widened", "link_flow_narrowed"),
    "link.flow_narrowed": ("link_flow_narrowed", "link_flow_widened"),
    "link.security_flow_changed": ("link_security_flow_changed", "link_flow_narrowed"),
    "link.cardinality_changed": ("link_cardinality_changed", "link_key_switched"),
    "link.key_switched": ("link_key_switched_surrogate_to_natural", "column_renamed_key"),
    "link.standby_set": ("link_standby_set", "link_standby_cleared"),
    "link.standby_cleared": ("link_standby_cleared", "link_standby_set"),
    "link.metadata_changed": ("link_description_changed", "link_flow_widened"),
    "measure.added": ("measure_added", "measure_renamed"),
    "measure.removed": ("measure_removed", "measure_renamed"),
    "measure.renamed": ("measure_renamed", "measure_removed"),
    "measure.logic_changed": ("measure_logic_changed", "measure_cosmetic_changed"),
    "measure.cosmetic_changed": ("measure_cosmetic_changed", "measure_logic_changed"),
    "measure.overrides_changed": ("measure_overrides_changed", "link_renamed"),
    "measure.metadata_changed": ("measure_metadata_changed", "measure_cosmetic_changed"),
    "variant.added": ("variant_added", "variant_renamed"),
    "variant.removed": ("variant_removed", "variant_renamed"),
    "variant.renamed": ("variant_renamed", "variant_removed"),
    "variant.changed": ("variant_option_changed", "variant_option_where_cosmetic"),
    "variant.cosmetic_changed": ("variant_option_where_cosmetic", "variant_option_changed"),
    "variant.metadata_changed": ("variant_description_changed", "variant_default_changed"),
    "role.added": ("role_added", "role_renamed"),
    "role.removed": ("role_removed", "role_renamed"),
    "role.renamed": ("role_renamed", "role_filter_changed"),
    "role.filter_changed": ("role_filter_changed", "role_filter_cosmetic"),
    "role.cosmetic_changed": ("role_filter_cosmetic", "role_filter_changed"),
    "role.metadata_changed": ("role_description_changed", "role_filter_cosmetic"),
    "report.added": ("report_added", "report_renamed"),
    "report.removed": ("report_removed", "report_renamed"),
    "report.renamed": ("report_renamed", "report_by_changed"),
    "report.changed": ("report_where_changed", "report_where_cosmetic"),
    "report.cosmetic_changed": ("report_where_cosmetic", "report_where_changed"),
    "report.metadata_changed": ("report_owner_changed", "report_by_changed"),
    "report.condition_changed": ("report_condition_changed", "report_condition_respelled"),
}


def test_every_kind_has_a_scenario_and_a_twin():
    assert sorted(TWINS) == sorted(KINDS)


@pytest.mark.parametrize("kind", sorted(TWINS))
def test_kind_is_detected_and_its_twin_is_clean(kind):
    shows, twin = TWINS[kind]
    assert kind in {k for k, _ in _expected(SCENARIOS / shows)}
    assert kind not in {k for k, _ in _expected(SCENARIOS / twin)}


def test_scenarios_emit_only_documented_kinds():
    documented = set(re.findall(r"^\| `([a-z_]+\.[a-z_]+)`", (ROOT / "docs" / "change-kinds.md").read_text(), re.M))
    assert documented == set(KINDS)
    emitted = {k for name in SCENARIO_NAMES for k, _ in _expected(SCENARIOS / name)}
    assert emitted <= set(KINDS)


def test_identical_and_respelled_models_report_nothing():
    assert _expected(SCENARIOS / "identical") == [] and _expected(SCENARIOS / "yaml_respelled") == []


def test_renamed_scenarios_report_only_the_rename():
    for name in SCENARIO_NAMES:
        if name.endswith("_renamed"):
            (only_change,) = _expected(SCENARIOS / name)
            assert only_change[0].endswith(".renamed"), name


# --- completeness against deepdiff ------------------------------------------------------------------------------
# deepdiff as completeness reference: every place where deepdiff sees the two revisions'
# records differ must fall under the subject of some emitted change.


def _record(model) -> dict:
    plain = dataclasses.asdict(model)
    plain.pop("positions")
    return plain


def _subject(path: list) -> str:
    if len(path) < 2:
        return str(path[0])  # the model's own name or format
    section, name, *rest = path
    if section == "tables" and len(rest) >= 2 and rest[0] == "columns":
        return f"tables.{name}.columns.{rest[1]}"
    if section == "variants" and len(rest) >= 2 and rest[0] == "options":
        return f"variants.{name}.options.{rest[1]}"
    return f"{section}.{name}"


def _uncovered(old, new, changes: list[Change]) -> list[str]:
    from deepdiff import DeepDiff

    found = DeepDiff(_record(old), _record(new), view="tree")
    subjects = {c.subject for c in changes}
    missing = []
    for levels in found.values():
        for level in levels:
            subject = _subject(level.path(output_format="list"))
            if not any(subject == s or subject.startswith(s + ".") for s in subjects):
                missing.append(subject)
    return sorted(set(missing))


CROSS_CHECKED = [n for n in SCENARIO_NAMES if not any(k.endswith(".renamed") for k, _ in _expected(SCENARIOS / n))]


@pytest.mark.parametrize("name", CROSS_CHECKED)
def test_deepdiff_finds_no_difference_the_diff_missed(name):
    folder = SCENARIOS / name
    old, new = _load(folder, "old"), _load(folder, "new")
    assert _uncovered(old, new, diff_models(old, new)) == []


def test_the_deepdiff_cross_check_can_fail():
    # a difference under no emitted subject is caught (here: no changes at all, or the wrong subject)
    new = edit(BASE, dataclasses.replace(BASE.links["trips_bike"], flow="two-way"),
               dataclasses.replace(BASE.tables["bikes"], description="Bikes."))
    changes = diff_models(BASE, new)
    assert _uncovered(BASE, new, changes) == []
    assert _uncovered(BASE, new, []) == ["links.trips_bike", "tables.bikes"]
    assert _uncovered(BASE, new, [c for c in changes if c.subject != "tables.bikes"]) == ["tables.bikes"]
