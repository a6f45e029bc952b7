"""Parquet data is read where it lies (a view), CSV data is copied in; both evaluate alike.

A view keeps data larger than memory out of memory (benchmarks/tpch_engine.py
measures it at TPC-H scale factor 10); `_row` then comes from the file's row
numbers, and a file with a column of that option's name is copied in instead.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest

from modeldiff.data import NO_MATCH, Database, evaluate_report
from modeldiff.load import load_path

MODEL = """\
model: bikeshare
format: 1
tables:
  stations:
    kind: dimension
    key: station_key
    columns: {station_key: integer, name: text}
  trips:
    kind: fact
    key: trip_key
    columns: {trip_key: integer, station_key: integer, fare: decimal}
links:
  trips_station: {from: trips.station_key, to: stations.station_key}
measures:
  trip_count: {table: trips, expr: count(*)}
  fare_revenue: {table: trips, expr: sum(fare)}
reports:
  by_station: {measures: [trip_count, fare_revenue], by: [stations.name]}
"""

STATIONS = "SELECT * FROM (VALUES (1, 'Quay'), (2, 'Mill')) AS t(station_key, name)"
TRIPS = ("SELECT * FROM (VALUES (1, 1, 2.50), (2, 1, 1.25), (3, 2, 4.00), (4, 7, 1.00)) "
         "AS t(trip_key, station_key, fare)")


@pytest.fixture(scope="module")
def bikeshare(tmp_path_factory):
    path = tmp_path_factory.mktemp("model") / "bikeshare.model.yaml"
    path.write_text(MODEL, encoding="utf-8")
    result = load_path(path)
    assert result.model is not None and result.findings == ()
    return result.model


def write(folder: Path, kind: str, trips_sql: str = TRIPS) -> Path:
    con = duckdb.connect()
    for name, sql in (("stations", STATIONS), ("trips", trips_sql)):
        options = "FORMAT parquet" if kind == "parquet" else "FORMAT csv, HEADER"
        con.execute(f"COPY ({sql}) TO '{folder / f'{name}.{kind}'}' ({options})")
    con.close()
    return folder


def kind_of(db: Database, table: str) -> str:
    return db.connection.execute("SELECT table_type FROM information_schema.tables WHERE table_name = ?",
                                 [table]).fetchone()[0]


@pytest.mark.parametrize("kind", ["parquet", "csv"])
def test_both_formats_give_the_same_report(tmp_path, kind, bikeshare):
    with Database.open(bikeshare, data_dir=str(write(tmp_path, kind))) as db:
        rows = evaluate_report(bikeshare, "by_station", db).rows
    assert [(r[0], r[1], float(r[2])) for r in rows] == [("Mill", 1, 4.0), ("Quay", 2, 3.75), (NO_MATCH, 1, 1.0)]


def test_a_parquet_table_is_read_in_place(tmp_path, bikeshare):
    with Database.open(bikeshare, data_dir=str(write(tmp_path, "parquet"))) as db:
        assert kind_of(db, "trips") == "VIEW"
        rows = db.connection.execute("SELECT _row, trip_key FROM trips ORDER BY _row").fetchall()
    assert rows == [(1, 1), (2, 2), (3, 3), (4, 4)]  # the file's row numbers, from 1


def test_a_csv_table_is_copied_in(tmp_path, bikeshare):
    # The twin: CSV data is converted and copied, not read in place.
    with Database.open(bikeshare, data_dir=str(write(tmp_path, "csv"))) as db:
        assert kind_of(db, "trips") == "BASE TABLE"


def test_a_parquet_file_with_a_file_row_number_column_is_copied_in(tmp_path, bikeshare):
    trips = TRIPS.replace("SELECT *", "SELECT *, trip_key * 10 AS file_row_number")
    with Database.open(bikeshare, data_dir=str(write(tmp_path, "parquet", trips))) as db:
        assert kind_of(db, "trips") == "BASE TABLE"
        assert kind_of(db, "stations") == "VIEW"
        rows = db.connection.execute("SELECT count(DISTINCT _row), count(*) FROM trips").fetchone()
        assert rows == (4, 4)
        assert [r[1] for r in evaluate_report(bikeshare, "by_station", db).rows] == [1, 2, 1]
