"""`modeldiff eval` end to end: formats, where data comes from, and bad input (one line, exit 2).

The demo data (modeldiff.demo_data) for the example model is checked against
plain SQL written here over the same CSV files; small models written here
check each way of finding data and each kind of bad data, each with a twin
that is accepted.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest

from modeldiff.cli import main
from modeldiff.demo_data import write_demo_data

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"

SMALL = """\
model: small
format: 1
tables:
  stations:
    kind: dimension
    key: station_key
    columns: {station_key: integer, name: {type: text, unique: true}, opened: date}
    source: data/stations.csv
  trips:
    kind: fact
    key: trip_key
    columns: {trip_key: integer, station_key: integer, fare: decimal, status: text}
    source: data/trips.csv
links:
  trips_station: {from: trips.station_key, to: stations.station_key}
measures:
  trip_count: {table: trips, expr: count(*)}
  fare_revenue: {table: trips, expr: sum(fare), where: "status = 'completed'"}
roles:
  staff:
    filters: {stations: "name = :user"}
reports:
  by_station:
    measures: [trip_count, fare_revenue]
    by: [stations.name, stations.opened]
  seen_by_staff:
    measures: [trip_count]
    role: staff
"""

STATIONS = "station_key,name,opened\n1,Quay,2024-05-01\n2,Mill,\n"
TRIPS = "trip_key,station_key,fare,status\n1,1,2.50,completed\n2,1,1.25,cancelled\n3,2,4.00,completed\n4,7,1.00,completed\n"


def cli(*args: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main(["eval", *map(str, args)], stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture
def small(tmp_path) -> Path:
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "stations.csv").write_text(STATIONS)
    (tmp_path / "data" / "trips.csv").write_text(TRIPS)
    path = tmp_path / "small.model.yaml"
    path.write_text(SMALL)
    return path


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    write_demo_data(folder)
    return folder


def fails_cleanly(code: int, out: str, err: str, *words: str) -> None:
    assert code == 2 and out == ""
    assert err.startswith("modeldiff: ") and err.count("\n") == 1 and "Traceback" not in err
    for word in words:
        assert word in err, err


# --- formats ----------------------------------------------------------------------------


def test_json_of_one_report(small):
    code, out, err = cli(small, "--report", "by_station", "--format", "json")
    assert (code, err) == (0, "")
    assert json.loads(out) == {
        "report": "by_station",
        "columns": ["stations.name", "stations.opened", "trip_count", "fare_revenue"],
        "rows": [["Mill", None, 1, 4.0], ["Quay", "2024-05-01", 2, 2.5], ["(no match)", "(no match)", 1, 1.0]],
    }


def test_json_of_several_reports_is_a_list(small):
    code, out, _ = cli(small, "--format", "json", "--user", "Mill")
    docs = json.loads(out)
    assert code == 0 and [d["report"] for d in docs] == ["by_station", "seen_by_staff"]
    assert docs[1] == {"report": "seen_by_staff", "columns": ["trip_count"], "rows": [[1]]}


def test_csv_of_one_report(small):
    code, out, _ = cli(small, "--report", "by_station", "--format", "csv")
    assert code == 0
    assert out.splitlines() == ["stations.name,stations.opened,trip_count,fare_revenue", "Mill,,1,4.00",
                                "Quay,2024-05-01,2,2.50", "(no match),(no match),1,1.00"]


def test_csv_takes_one_report_only(small):
    fails_cleanly(*cli(small, "--format", "csv", "--user", "Mill"), "--report")


def test_text_shows_each_report_and_its_notes(small):
    code, out, _ = cli(small, "--user", "Quay")
    assert code == 0
    assert "report by_station" in out and "report seen_by_staff" in out
    assert "(no match)" in out and "As role staff sees it (user Quay)." in out
    assert "\x1b" not in out


def test_the_role_sees_its_own_rows_per_user(small):
    assert json.loads(cli(small, "--report", "seen_by_staff", "--format", "json", "--user", "Quay")[1])["rows"] == [[2]]
    assert json.loads(cli(small, "--report", "seen_by_staff", "--format", "json", "--user", "Mill")[1])["rows"] == [[1]]


def test_a_role_with_user_needs_user(small):
    fails_cleanly(*cli(small, "--report", "seen_by_staff"), ":user", "--user")


def test_unknown_report(small):
    fails_cleanly(*cli(small, "--report", "nope"), "no report nope", "by_station")


# --- where the data comes from ----------------------------------------------------------


def test_sources_are_relative_to_the_model_file(small, monkeypatch, tmp_path_factory):
    monkeypatch.chdir(tmp_path_factory.mktemp("elsewhere"))
    assert cli(small, "--report", "by_station", "--format", "json")[0] == 0


def test_data_folder_overrides_sources(small, tmp_path):
    other = tmp_path / "other"
    other.mkdir()
    (other / "stations.csv").write_text(STATIONS)
    (other / "trips.csv").write_text(TRIPS.splitlines()[0] + "\n1,1,9.00,completed\n")
    rows = json.loads(cli(small, "--data", other, "--report", "by_station", "--format", "json")[1])["rows"]
    assert rows == [["Quay", "2024-05-01", 1, 9.0]]


def test_parquet_and_duckdb_files(small, tmp_path):
    import duckdb

    folder = tmp_path / "pq"
    folder.mkdir()
    con = duckdb.connect(str(tmp_path / "small.duckdb"))
    for table, text in (("stations", STATIONS), ("trips", TRIPS)):
        csv = tmp_path / f"{table}.csv"
        csv.write_text(text)
        con.execute(f"CREATE TABLE {table} AS SELECT * FROM read_csv('{csv}')")
        con.execute(f"COPY {table} TO '{folder / (table + '.parquet')}' (FORMAT parquet)")
    con.close()
    expected = json.loads(cli(small, "--report", "by_station", "--format", "json")[1])
    assert json.loads(cli(small, "--data", folder, "--report", "by_station", "--format", "json")[1]) == expected
    db = tmp_path / "small.duckdb"
    assert json.loads(cli(small, "--data", db, "--report", "by_station", "--format", "json")[1]) == expected


def test_a_missing_data_file(small):
    (small.parent / "data" / "trips.csv").unlink()
    fails_cleanly(*cli(small), "trips.csv", "no such file")


def test_a_missing_data_folder_entry(small, tmp_path):
    other = tmp_path / "other"
    other.mkdir()
    (other / "stations.csv").write_text(STATIONS)
    fails_cleanly(*cli(small, "--data", other), "trips.parquet or trips.csv")


def test_no_data_at_all(tmp_path):
    model = tmp_path / "m.model.yaml"
    model.write_text(SMALL.replace("    source: data/stations.csv\n", ""))
    fails_cleanly(*cli(model), "table stations has no source")


# --- bad data, each with its accepted twin ----------------------------------------------


@pytest.mark.parametrize("table, text, words", [
    ("trips", TRIPS.replace("1,1,2.50", "1,1,two"), ["row 1", "'two'", "fare", "not a decimal"]),
    ("stations", STATIONS.replace("2024-05-01", "May 1st"), ["opened", "not a date"]),
    ("trips", TRIPS.replace("3,2,4.00", "1,2,4.00"), ["trip_key = 1", "2 rows", "the key"]),
    ("trips", TRIPS.replace("3,2,4.00", ",2,4.00"), ["no value in trip_key"]),
    ("stations", STATIONS.replace("Mill", "Quay"), ["name = 'Quay'", "declared unique"]),
    ("trips", TRIPS.replace("trip_key,", "id,"), ["no column trip_key"]),
])
def test_bad_data_is_one_line_and_exit_2(small, table, text, words):
    (small.parent / "data" / f"{table}.csv").write_text(text)
    fails_cleanly(*cli(small), *words)


def test_the_same_files_untouched_are_accepted(small):
    assert cli(small, "--user", "Quay")[0] == 0


def test_a_parquet_column_of_the_wrong_type(small, tmp_path):
    import duckdb

    folder = tmp_path / "pq"
    folder.mkdir()
    con = duckdb.connect()
    con.execute(f"COPY (SELECT 1 AS station_key, 'Quay' AS name, '2024-05-01' AS opened) "
                f"TO '{folder / 'stations.parquet'}' (FORMAT parquet)")
    con.execute(f"COPY (SELECT 1 AS trip_key, 1 AS station_key, 2.5 AS fare, 'completed' AS status) "
                f"TO '{folder / 'trips.parquet'}' (FORMAT parquet)")
    fails_cleanly(*cli(small, "--data", folder), "opened", "VARCHAR", "date")
    con.execute(f"COPY (SELECT 1 AS station_key, 'Quay' AS name, DATE '2024-05-01' AS opened) "
                f"TO '{folder / 'stations.parquet'}' (FORMAT parquet)")
    assert cli(small, "--data", folder, "--user", "Quay")[0] == 0


def test_a_model_with_errors_is_refused(small):
    small.write_text(SMALL.replace("trip_count: {table: trips, expr: count(*)}",
                                   "trip_count: {table: trips, expr: count(*) + nope}"))
    fails_cleanly(*cli(small), "fix the model first")


# --- the demo data against plain SQL ----------------------------------------------------


@pytest.fixture(scope="module")
def demo_reports(demo) -> dict[str, dict]:
    code, out, err = cli(EXAMPLE, "--data", demo, "--format", "json")
    assert (code, err) == (0, "")
    return {d["report"]: d for d in json.loads(out)}


def test_every_demo_report_evaluates(demo_reports):
    assert sorted(demo_reports) == sorted(["weekly_fares", "station_stock", "repair_costs_by_depot",
                                           "repair_costs_current", "rider_trips", "daily_returns", "east_overview"])
    assert all(doc["rows"] for doc in demo_reports.values())


def plain(demo: Path, sql: str) -> list[tuple]:
    import duckdb

    con = duckdb.connect()
    for path in demo.glob("*.csv"):
        con.execute(f"CREATE VIEW {path.stem} AS SELECT * FROM read_csv('{path}')")
    return con.execute(sql).fetchall()


def test_demo_rider_trips_equal_plain_sql(demo, demo_reports):
    rows = demo_reports["rider_trips"]["rows"]
    expected = plain(demo, """
        SELECT r.plan, count(*), sum(t.minutes), sum(t.minutes) / count(*)
        FROM trips t JOIN riders r ON t.rider_key = r.rider_key
        WHERE t.status <> 'cancelled' GROUP BY r.plan ORDER BY r.plan""")
    assert [tuple(r) for r in rows] == [(p, c, m, pytest.approx(a)) for p, c, m, a in expected]


def test_demo_daily_returns_follow_the_end_day(demo, demo_reports):
    rows = demo_reports["daily_returns"]["rows"]
    by_end = plain(demo, """SELECT c.date, count(*) FROM trips t JOIN calendar c ON t.end_day_key = c.day_key
                            GROUP BY c.date ORDER BY c.date""")
    by_start = plain(demo, """SELECT c.date, count(*) FROM trips t JOIN calendar c ON t.start_day_key = c.day_key
                              GROUP BY c.date ORDER BY c.date""")
    assert [tuple(r) for r in rows] == [(d.isoformat(), n) for d, n in by_end]
    assert by_end != by_start  # overnight trips: the standby link makes a difference here


def test_demo_current_attribution_moves_repairs_between_depots(demo, demo_reports):
    historical, current = ({row[0]: row[2] for row in demo_reports[name]["rows"]}
                           for name in ("repair_costs_by_depot", "repair_costs_current"))
    expected = dict(plain(demo, """
        SELECT d.name, count(*) FROM repairs r JOIN mechanics m ON r.current_mechanic_key = m.mechanic_key
        JOIN districts d ON m.depot_district_key = d.district_key GROUP BY d.name"""))
    assert current == expected and historical != current
    assert sum(historical.values()) == sum(current.values()) == 90
