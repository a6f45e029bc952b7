"""Report conditions (`having`, issue 13): loader, check rules, and the engine against hand-counted rows and SQL.

The outside check: a report with a condition gives exactly the rows of a
hand-written `GROUP BY ... HAVING` query over the same joins (ISO/IEC 9075,
<having clause>: a group is kept when the search condition is true, not when it
is false or unknown), run by DuckDB as the reference engine, on seeded random
data. Every "detects" test has an "absent" twin.
"""

from __future__ import annotations

import random
from decimal import Decimal

import pytest

from modeldiff import conditions
from modeldiff.check import check_model
from modeldiff.data import NO_MATCH, Database, evaluate_report
from modeldiff.load import load_files
from tests.modelkit import drop, edit, measure, report
from tests.test_engine import MINI, ROWS

CONDITION_RULES = ("condition-unknown-measure", "condition-not-boolean", "condition-aggregate",
                   "condition-without-groups")


def rows(m, name, data=ROWS):
    with Database.from_rows(m, data) as db:
        return list(evaluate_report(m, name, db).rows)


def condition_findings(m):
    return sorted((f.rule, f.subject) for f in check_model(m) if f.rule in CONDITION_RULES)


# --- loader -------------------------------------------------------------------------------

TEXT = """
model: m
format: 1
tables:
  f: {kind: fact, key: id, columns: {id: integer, x: decimal}}
measures:
  n: {table: f, expr: count(*)}
reports:
  r: {measures: [n], by: [f.x], having: n > 1}
  s: {measures: [n], by: [f.x]}
"""


def test_having_is_read_from_a_report():
    loaded = load_files([("m.model.yaml", TEXT)])
    assert loaded.model.reports["r"].having == "n > 1"
    assert [f for f in loaded.findings if f.severity == "error"] == []


def test_a_report_without_having_has_none():
    assert load_files([("m.model.yaml", TEXT)]).model.reports["s"].having is None


def test_having_that_is_not_text_is_an_invalid_model_error():
    loaded = load_files([("m.model.yaml", TEXT.replace("having: n > 1", "having: [n]"))])
    assert [(f.rule, f.subject) for f in loaded.findings] == [("invalid-model", "reports.r.having")]
    assert loaded.model.reports["r"].having is None


# --- check --------------------------------------------------------------------------------

GOOD = report("with_trips", "station_count", "districts.name", having="trip_count > 0")


@pytest.mark.parametrize("having, rule", [
    ("nope > 0", "condition-unknown-measure"),
    ("trips.fare > 0", "condition-unknown-measure"),
    ("sum(trip_count) > 0", "condition-aggregate"),
    ("trip_count + 1", "condition-not-boolean"),
    ("trip_count", "condition-not-boolean"),
    ("42", "condition-not-boolean"),
])
def test_check_detects_a_bad_condition(having, rule):
    m = edit(MINI, report("with_trips", "station_count", "districts.name", having=having))
    assert (rule, "reports.with_trips") in condition_findings(m)
    assert all(f.severity == "error" for f in check_model(m) if f.rule == rule)


@pytest.mark.parametrize("having", ["trip_count > 0", "fare_revenue is not null and trip_count >= 2",
                                    "revenue_per_trip between 1 and 3", "not (Trip_Count = 0)",
                                    "coalesce(fare_revenue, 0) > trip_count"])
def test_check_reports_nothing_for_a_good_condition(having):
    assert condition_findings(edit(MINI, report("with_trips", "station_count", "districts.name", having=having))) == []


def test_check_warns_of_a_condition_on_a_report_without_by():
    m = edit(MINI, report("total", "station_count", having="trip_count > 0"))
    assert condition_findings(m) == [("condition-without-groups", "reports.total")]


def test_no_condition_warning_on_a_grouped_report():
    assert condition_findings(edit(MINI, GOOD)) == []


def test_measures_named_and_the_extra_ones():
    r = report("r", ["trip_count"], "districts.name", having="Trip_Count > 0 and fare_revenue > 1")
    assert conditions.measures_named(r, MINI.measures) == ("fare_revenue", "trip_count")
    assert conditions.extra_measures(r, MINI.measures) == ("fare_revenue",)
    assert conditions.measures_named(report("s", ["trip_count"]), MINI.measures) == ()


# --- the engine, counted by hand (tests/test_engine.py's ROWS) --------------------------
# Trips per district: Harbour 2 (trips 1, 2), Old Town 1 (trip 3, cancelled); trips 4 (station in a missing
# district) and 5 (no station) are in no group: (no match) has 2 trips, fares 4.00 + 1.00.

BY_DISTRICT = report("by_district", ["trip_count"], "districts.name")


def test_without_condition_every_group_shows():
    assert rows(edit(MINI, BY_DISTRICT), "by_district") == [("Harbour", 2), ("Old Town", 1), (NO_MATCH, 2)]


def test_condition_drops_the_groups_failing_it_and_no_match_follows_it():
    kept = report("by_district", ["trip_count"], "districts.name", having="trip_count > 1")
    assert rows(edit(MINI, kept), "by_district") == [("Harbour", 2), (NO_MATCH, 2)]
    none = report("by_district", ["trip_count"], "districts.name", having="trip_count > 2")
    assert rows(edit(MINI, none), "by_district") == []


def test_condition_on_a_measure_the_report_does_not_show():
    r = report("fares", ["fare_revenue"], "districts.name", having="trip_count > 1")
    assert rows(edit(MINI, r), "fares") == [("Harbour", Decimal("5.00")), (NO_MATCH, Decimal("5.00"))]


def test_null_is_not_true():
    # Old Town's only trip was cancelled: fare_revenue is NULL there, so `fare_revenue >= 0` is unknown
    r = report("fares", ["trip_count"], "districts.name", having="fare_revenue >= 0")
    assert rows(edit(MINI, r), "fares") == [("Harbour", 2), (NO_MATCH, 2)]


def test_a_condition_measure_adds_no_group():
    cargo = {**ROWS, "bikes": ROWS["bikes"] + [(103, "cargo")]}  # a bike type no trip used
    only_condition = report("r", ["trip_count"], "bikes.bike_type", having="bike_count >= 0")
    assert rows(edit(MINI, only_condition), "r", cargo) == [("classic", 3), ("electric", 2)]
    shown = report("r", ["trip_count", "bike_count"], "bikes.bike_type", having="bike_count >= 0")
    assert ("cargo", 0, 1) in rows(edit(MINI, shown), "r", cargo)  # shown, it brings its group


def test_a_report_without_by_keeps_its_total():
    r = report("total", ["trip_count"], having="trip_count > 100")
    assert rows(edit(MINI, r), "total") == [(5,)]


def test_totals_do_not_move_with_a_condition():
    from modeldiff.engine import measure_query

    m = edit(MINI, report("by_district", ["trip_count"], "districts.name", having="trip_count > 1"))
    with Database.from_rows(m, ROWS) as db:
        assert db.run(measure_query(m, "trip_count"), "total") == [(5,)]


# --- outside check: GROUP BY ... HAVING on seeded random data (ISO/IEC 9075; DuckDB as reference) -------------

# (report condition, the same condition over the hand-written aggregates)
CONDITIONS = [
    ("trip_count > {k}", "count(*) > {k}"),
    ("fare_revenue >= {k}", "sum(t.fare) FILTER (WHERE t.status = 'completed') >= {k}"),
    ("revenue_per_trip > 1.5 or trip_count = {k}",
     "sum(t.fare) FILTER (WHERE t.status = 'completed') / nullif(count(*), 0) > 1.5 or count(*) = {k}"),
    ("fare_revenue is null", "sum(t.fare) FILTER (WHERE t.status = 'completed') is null"),
]
GROUPINGS = [
    (("districts.name",), "d.name",
     "FROM trips t JOIN stations s ON t.station_key = s.station_key JOIN districts d ON s.district_key = d.district_key"),
    (("stations.name", "bikes.bike_type"), "s.name, b.bike_type",
     "FROM trips t JOIN stations s ON t.station_key = s.station_key JOIN bikes b ON t.bike_key = b.bike_key"),
]


def _random_rows(rng: random.Random) -> dict[str, list[tuple]]:
    districts = [(d, rng.choice(["North", "South", "Docks", None]), "East") for d in range(1, rng.randint(2, 5))]
    stations = [(s, f"st{rng.randint(1, 6)}", rng.choice([d[0] for d in districts] + [99]))
                for s in range(1, rng.randint(3, 9))]
    bikes = [(b, rng.choice(["classic", "electric", None])) for b in range(1, rng.randint(2, 5))]
    trips = [(t, rng.choice([s[0] for s in stations] + [None, 77]), rng.choice([b[0] for b in bikes] + [None]),
              Decimal(rng.randint(0, 400)) / 100 if rng.random() > 0.1 else None,
              rng.choice(["completed", "completed", "cancelled"]))
             for t in range(1, rng.randint(1, 40))]
    return {"districts": districts, "stations": stations, "bikes": bikes, "trips": trips}


# The star of MINI without its access table (whose two-way link would keep only districts somebody may see).
STAR = drop(drop(MINI, "links", "district_access_district"), "tables", "district_access")


def _hand(data, sql):
    import duckdb

    con = duckdb.connect()
    try:
        for name, columns in (("districts", "district_key INTEGER, name TEXT, region TEXT"),
                              ("stations", "station_key INTEGER, name TEXT, district_key INTEGER"),
                              ("bikes", "bike_key INTEGER, bike_type TEXT"),
                              ("trips", "trip_key INTEGER, station_key INTEGER, bike_key INTEGER, fare DECIMAL(18,2), "
                                        "status TEXT")):
            con.execute(f"CREATE TABLE {name} ({columns})")
            for row in data[name]:
                con.execute(f"INSERT INTO {name} VALUES ({', '.join('?' for _ in row)})", list(row))
        return con.execute(sql).fetchall()
    finally:
        con.close()


def having_case(seed: int) -> list[str]:
    """One seeded case: the report's rows against GROUP BY ... HAVING; the differences found (none expected).

    benchmarks/campaigns/having_campaign.py runs thousands of these.
    """
    rng = random.Random(seed)
    data = _random_rows(rng)
    condition, hand_condition = CONDITIONS[seed % len(CONDITIONS)]
    by, hand_by, joins = GROUPINGS[(seed // len(CONDITIONS)) % len(GROUPINGS)]
    k = rng.randint(0, 3)
    r = report("r", ["trip_count"], by, having=condition.format(k=k))
    got_all = rows(edit(STAR, r), "r", data)
    got = [row for row in got_all if row[0] is not NO_MATCH]
    expected = _hand(data, f"SELECT {hand_by}, count(*) {joins} GROUP BY {hand_by} "
                           f"HAVING {hand_condition.format(k=k)} ORDER BY {hand_by} NULLS LAST")
    problems = []
    if sorted(got, key=repr) != sorted(expected, key=repr):
        problems.append(f"seed {seed}: groups {got} != GROUP BY ... HAVING {expected}")
    # the (no match) row: the trips in no group, kept by the same HAVING (no GROUP BY: one group)
    missing = " OR ".join(f"{c} IS NULL" for c in ("s.station_key", "d.district_key" if len(by) == 1 else "b.bike_key"))
    left = joins.replace(" JOIN ", " LEFT JOIN ")
    hand_no_match = _hand(data, f"SELECT count(*) {left} WHERE {missing} HAVING count(*) > 0 AND "
                                f"({hand_condition.format(k=k)})")
    no_match = [row[len(by):] for row in got_all if row[0] is NO_MATCH]
    if no_match != hand_no_match:
        problems.append(f"seed {seed}: (no match) {no_match} != {hand_no_match}")
    return problems


@pytest.mark.parametrize("seed", range(24))
def test_condition_gives_the_rows_of_group_by_having(seed):
    assert having_case(seed) == []


# --- diff and impact ------------------------------------------------------------------------------------

def _analyse(old, new):
    from modeldiff import impact

    return impact.analyse(old, new)


def _impacted_reports(old, new):
    return {i.name for i in _analyse(old, new).reports}


def _kinds(old, new):
    return [(c.kind, c.subject, c.severity) for c in _analyse(old, new).changes if c.kind.startswith("report.")]


from tests.modelkit import bikeshare, link  # noqa: E402

BIKES = bikeshare()
REPAIRS = report("repairs_by_district", ["repair_cost"], "districts.name")
REPAIRS_WITH_TRIPS = report("repairs_by_district", ["repair_cost"], "districts.name", having="trip_count > 0")


def test_diff_reports_a_condition_added_removed_and_changed():
    plain, kept = edit(BIKES, REPAIRS), edit(BIKES, REPAIRS_WITH_TRIPS)
    assert _kinds(plain, kept) == [("report.condition_changed", "reports.repairs_by_district", "numbers")]
    assert _kinds(kept, plain) == [("report.condition_changed", "reports.repairs_by_district", "numbers")]
    stricter = edit(BIKES, report("repairs_by_district", ["repair_cost"], "districts.name", having="trip_count > 5"))
    (change,) = [c for c in _analyse(kept, stricter).changes if c.kind == "report.condition_changed"]
    assert change.before == {"having": "trip_count > 0"} and change.after == {"having": "trip_count > 5"}
    assert "groups can appear or disappear" in change.message
    assert "repairs_by_district" in _impacted_reports(plain, kept)


def test_diff_reports_no_condition_change_for_the_same_condition():
    kept = edit(BIKES, REPAIRS_WITH_TRIPS)
    assert _kinds(kept, kept) == []
    respelled = edit(BIKES, report("repairs_by_district", ["repair_cost"], "districts.name", having="(TRIP_COUNT>0)"))
    assert _kinds(kept, respelled) == [("report.cosmetic_changed", "reports.repairs_by_district", "safe")]
    assert "repairs_by_district" not in _impacted_reports(kept, respelled)


def test_diff_follows_a_measure_rename_inside_the_condition():
    old = edit(BIKES, REPAIRS_WITH_TRIPS)
    renamed = edit(drop(BIKES, "measures", "trip_count"), measure("trips_made", "count(*)", "trips"),
                   measure("revenue_per_trip", "fare_revenue / nullif(trips_made, 0)"),
                   report("repairs_by_district", ["repair_cost"], "districts.name", having="trips_made > 0"))
    assert not any(k == "report.condition_changed" for k, _, _ in _kinds(old, renamed))


# A change that moves trip_count grouped by district but not repair_cost: trips no longer reach stations (the
# live link to stations goes on standby), so a district's trips are no longer its stations' trips.
def _trips_off_stations(m):
    return edit(m, link("trips_start_station", "trips.start_station_key", "stations.station_key", standby=True))


def test_a_measure_named_only_in_the_condition_impacts_the_report_by_reach():
    old = edit(BIKES, REPAIRS_WITH_TRIPS)
    assert "repairs_by_district" in _impacted_reports(old, _trips_off_stations(old))


def test_the_same_change_leaves_the_report_without_condition_alone():
    old = edit(BIKES, REPAIRS)
    assert "repairs_by_district" not in _impacted_reports(old, _trips_off_stations(old))


def test_a_condition_measure_changed_in_logic_impacts_the_report():
    old = edit(BIKES, REPAIRS_WITH_TRIPS)
    new = edit(old, measure("trip_count", "count(distinct bike_key)", "trips"))
    assert "repairs_by_district" in _impacted_reports(old, new)
    assert "repairs_by_district" not in _impacted_reports(edit(BIKES, REPAIRS), edit(new, REPAIRS))


# --- pictures -------------------------------------------------------------------------------------------------

def test_the_report_node_of_a_picture_shows_its_condition():
    from modeldiff import picture

    pic = picture.picture(edit(BIKES, REPAIRS_WITH_TRIPS), report=REPAIRS_WITH_TRIPS)
    (node,) = [n for n in pic.nodes if n.kind == "report"]
    assert node.table == "report repairs_by_district by districts.name, having trip_count > 0"
    assert "having trip_count #62; 0" in picture.mermaid_of(pic)
    assert 'having trip_count > 0", shape=note' in picture.dot_of(pic)
    assert "having trip_count > 0" in picture.text_of(pic)


def test_the_report_node_of_a_report_without_condition_says_no_having():
    from modeldiff import picture

    pic = picture.picture(edit(BIKES, REPAIRS), report=REPAIRS)
    (node,) = [n for n in pic.nodes if n.kind == "report"]
    assert node.table == "report repairs_by_district by districts.name"
    assert "having" not in picture.text_of(pic)
    assert not [n for n in picture.picture(edit(BIKES, REPAIRS)).nodes if n.kind == "report"]  # only when asked


# --- hostile conditions: the allow-list holds for `having` as for every model SQL text ----------------------

@pytest.mark.parametrize("having", ["(select count(*) from trips) > 0", "trip_count > :user",
                                    "read_csv('x.csv') is not null"])
def test_a_condition_outside_the_allow_list_is_an_error(having):
    m = edit(MINI, report("r", ["trip_count"], "districts.name", having=having))
    assert ("invalid-model", "reports.r") in [(f.rule, f.subject) for f in check_model(m) if f.severity == "error"]


def test_the_engine_refuses_a_condition_outside_the_allow_list_before_any_query():
    from modeldiff.engine import report_query
    from modeldiff.errors import ModeldiffError

    bad = edit(MINI, report("r", ["trip_count"], "districts.name", having="read_csv('x.csv') is not null"))
    with pytest.raises(ModeldiffError):
        report_query(bad, "r")
    good = edit(MINI, report("r", ["trip_count"], "districts.name", having="trip_count > 0"))
    assert "IS TRUE" in report_query(good, "r").sql
    assert [f for f in check_model(good) if f.severity == "error"] == []
