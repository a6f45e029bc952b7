"""`modeldiff plan`: ordered migration steps with preconditions, checks (SQL for data) and rollbacks.

Synthetic pairs are built with tests/modelkit.py and planned through `plan.build_plan`; the command line is
run on the bike-share example and on the impact scenario folders. The data checks' SQL is run on small
DuckDB tables, each with a twin the query must pass.
"""

from __future__ import annotations

import io
import json
from dataclasses import replace
from pathlib import Path

import pytest

from modeldiff import cli, impact, plan
from modeldiff.compare import ModelDiff, Side
from modeldiff.model import History
from modelkit import bikeshare, drop, edit, link, measure, table

ROOT = Path(__file__).parent.parent
EXAMPLE_OLD = ROOT / "examples" / "bikeshare.model.yaml"
EXAMPLE_NEW = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"
SCENARIOS = Path(__file__).parent / "impact_scenarios"


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def plan_of(old, new) -> plan.Plan:
    return plan.build_plan(ModelDiff(Side(None, "old.model.yaml"), Side(None, "new.model.yaml"), impact.analyse(old, new)))


def kinds(p: plan.Plan) -> list[tuple[str, str]]:
    return [(s.kind, s.subject) for s in p.steps]


def index(p: plan.Plan, kind: str, subject: str) -> int:
    found = [i for i, s in enumerate(p.steps) if (s.kind, s.subject) == (kind, subject)]
    assert len(found) == 1, kinds(p)
    return found[0]


def step(p: plan.Plan, kind: str, subject: str) -> plan.Step:
    return p.steps[index(p, kind, subject)]


def assert_well_formed(p: plan.Plan, change_ids: set[str]) -> None:
    """Ids s1..sn in order; every dependency earlier; every change covered; a check and a rollback everywhere."""
    assert [s.id for s in p.steps] == [f"s{i}" for i in range(1, len(p.steps) + 1)]
    position = {s.id: i for i, s in enumerate(p.steps)}
    for i, s in enumerate(p.steps):
        assert all(position[a] < i for a in s.after), s
        assert s.rollback.strip() and s.checks and s.title.strip(), s
        assert set(s.changes) <= change_ids, s
    assert {c for s in p.steps for c in s.changes} == change_ids


def with_link(m, name: str, **fields):
    return edit(m, replace(m.links[name], **fields))


# --- the rules one by one ---------------------------------------------------------------


UNIQUE_BIKES = "select bike_key, count(*) from bikes group by 1 having count(*) > 1"


def test_a_link_becoming_many_to_one_needs_a_unique_target_first():
    base = bikeshare()
    p = plan_of(with_link(base, "trips_bike", cardinality="many-to-many"), base)
    check = step(p, "check-data", "tables.bikes.unique.bike_key")
    assert [c.sql for c in check.checks] == [UNIQUE_BIKES]
    assert check.checks[0].expect == "no rows"
    assert index(p, "check-data", "tables.bikes.unique.bike_key") < index(p, "change-link", "links.trips_bike")
    assert check.id in step(p, "change-link", "links.trips_bike").after


def test_no_uniqueness_step_when_the_cardinality_does_not_change():
    base = bikeshare()
    p = plan_of(with_link(base, "trips_bike", flow="two-way"), base)
    assert [k for k in kinds(p) if k[0] == "check-data"] == []
    assert ("change-link", "links.trips_bike") in kinds(p)


def test_a_link_becoming_one_to_one_needs_both_sides_unique():
    base = bikeshare()
    p = plan_of(with_link(base, "trips_bike", cardinality="many-to-many"),
                with_link(base, "trips_bike", cardinality="one-to-one"))
    assert {k for k in kinds(p) if k[0] == "check-data"} == {("check-data", "tables.bikes.unique.bike_key"),
                                                             ("check-data", "tables.trips.unique.bike_key")}


def test_many_to_one_becoming_one_to_one_checks_only_the_source_its_target_was_unique_already():
    base = bikeshare()
    p = plan_of(base, with_link(base, "trips_bike", cardinality="one-to-one"))
    assert [k for k in kinds(p) if k[0] == "check-data"] == [("check-data", "tables.trips.unique.bike_key")]


def test_no_uniqueness_step_when_a_link_becomes_many_to_many():
    base = bikeshare()
    p = plan_of(base, with_link(base, "trips_bike", cardinality="many-to-many"))
    assert [k for k in kinds(p) if k[0] == "check-data"] == []


def natural_link(m):
    """repairs -> mechanics on the type-2 table's natural key (so many-to-many)."""
    return with_link(m, "repairs_mechanic", from_columns=("mechanic_code",), to_columns=("mechanic_code",),
                     cardinality="many-to-many")


def test_switching_to_the_surrogate_key_needs_every_fact_row_to_carry_it():
    base = bikeshare()
    p = plan_of(natural_link(base), base)
    carries = step(p, "check-data", "links.repairs_mechanic.carries")
    assert "surrogate key mechanic_key" in carries.title
    assert [c.sql for c in carries.checks] == [
        "select count(*) from repairs where mechanic_key is null",
        "select count(*) from repairs f where f.mechanic_key is not null and not exists "
        "(select 1 from mechanics d where d.mechanic_key = f.mechanic_key)"]
    history = step(p, "check-data", "tables.mechanics.history")
    assert len(history.checks) == 2 and all(c.sql for c in history.checks)
    link_step = index(p, "change-link", "links.repairs_mechanic")
    assert index(p, "check-data", "links.repairs_mechanic.carries") < link_step
    assert index(p, "check-data", "tables.mechanics.history") < link_step
    assert index(p, "check-data", "tables.mechanics.unique.mechanic_key") < link_step  # many-to-one again
    assert_well_formed(p, {c.id for c in impact.analyse(natural_link(base), base).changes})


def test_no_carry_or_history_step_when_the_link_keeps_its_keys():
    base = bikeshare()
    p = plan_of(with_link(base, "repairs_mechanic", flow="two-way"), base)
    assert [k for k in kinds(p) if k[0] == "check-data"] == []


def test_switching_to_the_natural_key_checks_the_new_key_but_not_history_or_uniqueness():
    base = bikeshare()
    p = plan_of(base, natural_link(base))
    assert ("check-data", "links.repairs_mechanic.carries") in kinds(p)
    assert "surrogate" not in step(p, "check-data", "links.repairs_mechanic.carries").title
    assert ("check-data", "tables.mechanics.history") not in kinds(p)
    assert not [k for k in kinds(p) if k[1].startswith("tables.mechanics.unique")]


def without_revenue_per_trip(m):
    m = drop(m, "measures", "revenue_per_trip")
    return edit(m, replace(m.reports["weekly_fares"], measures=("fare_revenue", "trip_count")))


def test_reports_are_updated_before_a_measure_they_use_is_removed_and_their_owners_told_first():
    base = bikeshare()
    p = plan_of(base, without_revenue_per_trip(base))
    tell = index(p, "tell-owners", "owners.finance")
    update = index(p, "update-report", "reports.weekly_fares")
    remove = index(p, "remove-measure", "measures.revenue_per_trip")
    assert tell < update < remove
    assert "finance" in p.steps[tell].title and "weekly_fares" in p.steps[tell].title
    assert_well_formed(p, {c.id for c in impact.analyse(base, without_revenue_per_trip(base)).changes})


def test_a_measure_no_report_uses_is_removed_without_report_steps():
    base = edit(bikeshare(), measure("spare_count", "count(*)", "trips"))
    p = plan_of(base, drop(base, "measures", "spare_count"))
    assert kinds(p) == [("remove-measure", "measures.spare_count")]


def test_a_report_still_naming_a_removed_measure_gets_a_fix_step_before_the_removal():
    base = bikeshare()
    p = plan_of(base, drop(base, "measures", "revenue_per_trip"))
    assert index(p, "fix-reference", "reports.weekly_fares") < index(p, "remove-measure", "measures.revenue_per_trip")


def test_a_measure_renamed_while_a_report_shows_it_is_added_moved_then_removed():
    base = bikeshare()
    new = edit(drop(base, "measures", "trips_by_end_day"),
               replace(base.measures["trips_by_end_day"], name="trips_ended"),
               replace(base.reports["daily_returns"], measures=("trips_ended",)))
    p = plan_of(base, new)
    add = index(p, "add-measure", "measures.trips_ended")
    move = index(p, "update-report", "reports.daily_returns")
    remove = index(p, "remove-measure", "measures.trips_by_end_day")
    assert add < move < remove
    assert p.steps[move].rollback == "Point report daily_returns back at trips_by_end_day."


def test_a_measure_renamed_that_nothing_uses_is_one_rename_step():
    base = edit(bikeshare(), measure("spare_count", "count(*)", "trips"))
    new = edit(drop(base, "measures", "spare_count"), measure("spare_total", "count(*)", "trips"))
    p = plan_of(base, new)
    assert kinds(p) == [("change-measure", "measures.spare_total")]
    assert p.steps[0].rollback == "Rename measure spare_total back to spare_count."


def with_riders(m):
    """Adds a table, a column of an existing table, a link between them and a measure reading the column."""
    return edit(m, table("riders", columns={"rider_key": "integer", "plan": "text"}),
                replace(m.tables["trips"], columns={**m.tables["trips"].columns,
                                                    "rider_key": replace(m.tables["trips"].columns["bike_key"], name="rider_key")}),
                link("trips_rider", "trips.rider_key", "riders.rider_key"),
                measure("riders_seen", "count(distinct rider_key)", "trips"))


def test_tables_and_columns_are_added_before_the_links_and_measures_that_use_them():
    base = bikeshare()
    p = plan_of(base, with_riders(base))
    assert index(p, "add-table", "tables.riders") < index(p, "add-link", "links.trips_rider")
    assert index(p, "add-column", "tables.trips.columns.rider_key") < index(p, "add-link", "links.trips_rider")
    assert index(p, "add-column", "tables.trips.columns.rider_key") < index(p, "add-measure", "measures.riders_seen")
    assert index(p, "check-data", "tables.riders.unique.rider_key") < index(p, "add-link", "links.trips_rider")
    assert_well_formed(p, {c.id for c in impact.analyse(base, with_riders(base)).changes})


def test_links_and_measures_are_removed_before_the_tables_and_columns_they_use():
    base = bikeshare()
    p = plan_of(with_riders(base), base)
    assert index(p, "remove-link", "links.trips_rider") < index(p, "remove-table", "tables.riders")
    assert index(p, "remove-link", "links.trips_rider") < index(p, "remove-column", "tables.trips.columns.rider_key")
    assert index(p, "remove-measure", "measures.riders_seen") < index(p, "remove-column", "tables.trips.columns.rider_key")
    assert_well_formed(p, {c.id for c in impact.analyse(with_riders(base), base).changes})


def test_a_security_exposure_needs_sign_off_before_the_change_that_causes_it():
    base = bikeshare()
    new = with_link(base, "district_access_district", security_flow="one-way")
    p = plan_of(base, new)
    sign = index(p, "sign-off", "roles.depot_staff")
    assert sign == 0 and p.security
    assert sign < index(p, "change-link", "links.district_access_district")
    exposed = {c.id for c in impact.analyse(base, new).changes if c.kind == "security.exposed"}
    assert set(p.steps[sign].changes) == exposed and exposed
    doc = plan.plan_json(p)
    assert doc["security"] is True and "organisation's own security review decides" in doc["security_caution"]


def _security_ids(old, new) -> set[str]:
    return {c.id for c in impact.analyse(old, new).changes if c.kind.startswith("security.")}


def test_security_changes_are_credited_to_the_link_that_moved_them_not_to_another_link_on_their_paths():
    # issue 9, point 10: trips_bike made two-way for security reroutes depot_staff's and east_district_lead's
    # restriction of repairs over a new path that also crosses stations_district, whose description changed.
    base = bikeshare()
    new = edit(with_link(base, "trips_bike", flow="two-way", security_flow="two-way"),
               replace(base.links["stations_district"], description="Where a station is."))
    p = plan_of(base, new)
    security = _security_ids(base, new)
    assert len(security) == 4  # two tightened (bikes), two rerouted (repairs)
    assert security <= set(step(p, "change-link", "links.trips_bike").changes)
    assert not security & set(step(p, "change-link", "links.stations_district").changes)
    assert_well_formed(p, {c.id for c in impact.analyse(base, new).changes})


def test_a_link_whose_change_opens_the_new_path_is_credited_with_the_reroute():
    # twin: when stations_district's own change is the one that moves an edge on the new path, it is credited
    base = with_link(bikeshare(), "trips_bike", flow="two-way", security_flow="two-way")
    old = with_link(base, "stations_district", standby=True)
    p = plan_of(old, base)
    security = _security_ids(old, base)
    assert security and security <= set(step(p, "change-link", "links.stations_district").changes)


def test_a_role_whose_description_changed_is_not_credited_with_a_link_s_security_change():
    base = bikeshare()
    new = edit(with_link(base, "trips_bike", flow="two-way", security_flow="two-way"),
               replace(base.roles["east_district_lead"], description="East of the river."))
    p = plan_of(base, new)
    role_step = step(p, "change-role", "roles.east_district_lead")
    assert not _security_ids(base, new) & set(role_step.changes)


def test_a_role_whose_filter_changed_is_credited_with_its_security_changes():
    base = bikeshare()
    new = edit(base, replace(base.roles["east_district_lead"], filters={"districts": "region = 'East'",
                                                                          "bikes": "bike_type = 'cargo'"}))
    p = plan_of(base, new)
    security = _security_ids(base, new)
    assert security and security <= set(step(p, "change-role", "roles.east_district_lead").changes)


def test_a_security_exposure_waits_for_sign_off_only_in_the_step_that_causes_it():
    base = bikeshare()
    new = edit(with_link(base, "district_access_district", security_flow="one-way"),
               replace(base.links["stations_district"], description="Where a station is."))
    p = plan_of(base, new)
    sign = step(p, "sign-off", "roles.depot_staff")
    assert sign.id in step(p, "change-link", "links.district_access_district").after
    assert sign.id not in step(p, "change-link", "links.stations_district").after


def test_no_sign_off_without_an_exposure():
    base = bikeshare()
    p = plan_of(base, with_link(base, "trips_bike", flow="two-way"))
    assert not p.security and [k for k in kinds(p) if k[0] == "sign-off"] == []
    assert plan.plan_json(p)["security_caution"] is None


def test_a_report_without_an_owner_asks_who_uses_it():
    base = bikeshare()
    p = plan_of(base, edit(base, replace(base.reports["daily_returns"], by=("calendar.week_start",))))
    tell = step(p, "tell-owners", "owners.(none)")
    assert any("no `owner` field" in pre for pre in tell.preconditions)


def test_a_model_compared_with_itself_needs_no_step():
    p = plan_of(bikeshare(), bikeshare())
    assert p.steps == ()


def test_the_history_checks_need_declared_history_columns():
    t = table("mechanics", key="mechanic_key", natural_key="mechanic_code", history=History(2, None, None),
              columns={"mechanic_key": "integer", "mechanic_code": "text"})
    assert [c.sql for c in plan.history_checks(t)] == [None]


# --- the SQL, run -------------------------------------------------------------------------------------
# Read-only checks are right when they flag the bad data and pass its clean twin (DuckDB as the engine).


@pytest.fixture
def db():
    duckdb = pytest.importorskip("duckdb")
    con = duckdb.connect()
    yield con
    con.close()


def rows(db, sql: str) -> list:
    return db.execute(sql).fetchall()


def test_the_uniqueness_query_finds_a_duplicate_and_passes_unique_data(db):
    db.execute("create table bikes (bike_key integer); insert into bikes values (1), (2), (2)")
    assert rows(db, plan.sql_duplicates("bikes", ["bike_key"])) == [(2, 2)]
    db.execute("delete from bikes where bike_key = 2; insert into bikes values (2)")
    assert rows(db, plan.sql_duplicates("bikes", ["bike_key"])) == []


def test_the_carry_queries_count_missing_and_unknown_keys_and_pass_complete_data(db):
    db.execute("create table mechanics (mechanic_key integer); insert into mechanics values (1), (2)")
    db.execute("create table repairs (mechanic_key integer); insert into repairs values (1), (null), (7)")
    new = bikeshare().links["repairs_mechanic"]
    nulls, orphans = (c.sql for c in plan.carry_checks(new))
    assert rows(db, nulls) == [(1,)] and rows(db, orphans) == [(1,)]
    db.execute("delete from repairs where mechanic_key is null or mechanic_key = 7")
    assert rows(db, nulls) == [(0,)] and rows(db, orphans) == [(0,)]


def test_the_history_queries_find_overlaps_and_missing_current_rows_and_pass_clean_history(db):
    mechanics = bikeshare().tables["mechanics"]
    db.execute("create table mechanics (mechanic_key integer, mechanic_code text, valid_from date, valid_to date)")
    db.execute("insert into mechanics values (1, 'A', '2024-01-01', '2024-06-01'), (2, 'A', '2024-05-01', null),"
               " (3, 'B', '2024-01-01', '2024-03-01')")
    overlap, current = (c.sql for c in plan.history_checks(mechanics))
    assert rows(db, overlap) == [("A", 1, 2)]
    assert rows(db, current) == [("B", 0)]
    db.execute("update mechanics set valid_from = '2024-06-01' where mechanic_key = 2;"
               "update mechanics set valid_to = null where mechanic_key = 3")
    assert rows(db, overlap) == [] and rows(db, current) == []


# --- the command ----------------------------------------------------------------------------------------


def test_the_bike_share_example_tells_operations_then_widens_the_flow():
    code, out, err = run("plan", str(EXAMPLE_OLD), str(EXAMPLE_NEW), "--format", "json")
    assert (code, err) == (0, "")
    doc = json.loads(out)
    # the flip moves trip measures too (trips -> stations -> trips), so every owner of an impacted report is told
    assert [(s["kind"], s["subject"]) for s in doc["steps"]] == [
        ("tell-owners", "owners.east district office"), ("tell-owners", "owners.finance"),
        ("tell-owners", "owners.marketing"), ("tell-owners", "owners.operations"),
        ("change-link", "links.trips_start_station"),
        ("review", "roles.student_programme_analyst")]  # the new security-stops warning the widened flow raises
    assert doc["steps"][5]["title"].startswith("Review the new security-stops warning on student_programme_analyst")
    link_step = doc["steps"][4]
    assert link_step["after"] == ["s1", "s2", "s3", "s4"]
    assert any("decide which route" in p for p in link_step["preconditions"])
    assert link_step["rollback"].startswith("Set link trips_start_station's flow back to one-way")
    code, diff_out, _ = run("diff", str(EXAMPLE_OLD), str(EXAMPLE_NEW), "--format", "json")
    assert {c for s in doc["steps"] for c in s["changes"]} == {c["id"] for c in json.loads(diff_out)["changes"]}


@pytest.mark.parametrize("fmt", ["text", "markdown", "json"])
def test_the_same_input_gives_the_same_plan(fmt):
    first = run("plan", str(EXAMPLE_OLD), str(EXAMPLE_NEW), "--format", fmt)
    assert first == run("plan", str(EXAMPLE_OLD), str(EXAMPLE_NEW), "--format", fmt)
    assert first[1].strip()


def test_markdown_puts_data_checks_in_sql_fences(tmp_path):
    old, new = tmp_path / "old.model.yaml", tmp_path / "new.model.yaml"
    old.write_text(EXAMPLE_OLD.read_text().replace("    to: bikes.bike_key\n", "    to: bikes.bike_key\n    cardinality: many-to-many\n", 1))
    new.write_text(EXAMPLE_OLD.read_text())
    code, out, err = run("plan", str(old), str(new), "--format", "markdown")
    assert (code, err) == (0, "")
    assert f"```sql\n  {UNIQUE_BIKES}\n  ```" in out
    code, out, _ = run("plan", str(new), str(new), "--format", "markdown")
    assert "```sql" not in out and "No changes: nothing to migrate." in out


@pytest.mark.parametrize("name", sorted(p.name for p in SCENARIOS.iterdir() if (p / "old.model.yaml").exists()))
def test_every_scenario_plan_covers_every_change_in_dependency_order(name):
    code, out, err = run("plan", str(SCENARIOS / name / "old.model.yaml"), str(SCENARIOS / name / "new.model.yaml"),
                         "--format", "json")
    assert (code, err) == (0, "")
    doc = json.loads(out)
    _, diff_text, _ = run("diff", str(SCENARIOS / name / "old.model.yaml"), str(SCENARIOS / name / "new.model.yaml"),
                          "--format", "json")
    ids = {c["id"] for c in json.loads(diff_text)["changes"]}
    position = {s["id"]: i for i, s in enumerate(doc["steps"])}
    for i, s in enumerate(doc["steps"]):
        assert all(position[a] < i for a in s["after"])
        assert s["rollback"] and s["checks"]
    assert {c for s in doc["steps"] for c in s["changes"]} == ids


def assert_one_line_error(code: int, out: str, err: str) -> None:
    assert code == 2 and out == ""
    assert err.startswith("modeldiff: ") and err.count("\n") == 1 and "Traceback" not in err


def test_a_missing_model_exits_2_with_one_line(tmp_path):
    assert_one_line_error(*run("plan", str(tmp_path / "nowhere.model.yaml"), str(EXAMPLE_NEW)))


def test_a_missing_argument_exits_2_with_one_line():
    assert_one_line_error(*run("plan", str(EXAMPLE_OLD)))


def test_an_unknown_format_exits_2_with_one_line():
    assert_one_line_error(*run("plan", str(EXAMPLE_OLD), str(EXAMPLE_NEW), "--format", "yaml"))


def test_errors_in_the_new_revision_are_blockers_before_any_step():
    name = SCENARIOS / "measure_removed_used"
    code, out, _ = run("plan", str(name / "old.model.yaml"), str(name / "new.model.yaml"), "--format", "json")
    blockers = json.loads(out)["blockers"]
    assert code == 0 and len(blockers) == 1 and blockers[0].startswith("broken-reference reports.rider_trips: ")


def test_no_blockers_when_the_new_revision_is_clean():
    code, out, _ = run("plan", str(EXAMPLE_OLD), str(EXAMPLE_NEW), "--format", "json")
    assert json.loads(out)["blockers"] == []
