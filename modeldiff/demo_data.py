"""Seeded sample data for the bike-share example model (examples/bikeshare.model.yaml).

`write_demo_data(folder)` writes one `<table>.csv` per table of the example
model: header = the table's columns in the model's order, dates in ISO form,
booleans `true`/`false`, amounts with two decimals, and an empty field for a
missing value (the open `valid_to` of a current mechanic version). The same
seed always gives the same bytes. Only the standard library is used, so
`make demo` can call it from a fresh clone:

    python -m modeldiff.demo_data OUTDIR [--seed N]

The rows honour every key and link of the model, so verifying the model
against the data gives meaningful numbers. Mechanics keep type-2 history:
some changed depot or grade, each version has its own surrogate key, the
validity ranges of one mechanic do not overlap (`valid_to` is exclusive) and
exactly one version per mechanic is current. A repair references the version
valid on the repair day and, separately, the mechanic's current version.
All names, codes and e-mail addresses are invented.
"""

from __future__ import annotations

import argparse
import csv
import io
import random
import sys
from dataclasses import dataclass
from datetime import date, timedelta
from decimal import Decimal
from pathlib import Path
from typing import Sequence, TextIO

from modeldiff.errors import ModeldiffError

# Columns of every table, in the order of examples/bikeshare.model.yaml.
TABLE_COLUMNS: dict[str, tuple[str, ...]] = {
    "calendar": ("day_key", "date", "year", "month", "month_name", "week_start", "weekday", "is_weekend"),
    "districts": ("district_key", "name", "region"),
    "stations": ("station_key", "name", "district_key", "docks"),
    "bikes": ("bike_key", "serial_number", "bike_type", "commissioned_on"),
    "riders": ("rider_key", "plan", "age_band", "joined_on"),
    "parts": ("part_key", "part_code", "name", "category"),
    "mechanics": ("mechanic_key", "mechanic_code", "display_name", "grade", "depot_district_key",
                  "valid_from", "valid_to", "is_current"),
    "trips": ("trip_key", "start_day_key", "end_day_key", "start_station_key", "bike_key", "rider_key",
              "minutes", "fare", "status"),
    "stock_levels": ("day_key", "station_key", "part_key", "on_hand", "unit_cost"),
    "repairs": ("repair_key", "day_key", "bike_key", "mechanic_key", "current_mechanic_key", "repair_type", "cost"),
    "district_access": ("staff_email", "district_key"),
}

# The warehouse schema the demo data would live in: the tables of TABLE_COLUMNS with
# their SQL types, primary keys, unique business keys and foreign keys (parents
# first, so a database that enforces foreign keys can load the tables in this
# order). `modeldiff draft --ddl` reads it; tests/test_draft_bikeshare.py loads
# the generated CSV files into a DuckDB file created from it and drafts from that.
WAREHOUSE_DDL = """\
CREATE TABLE calendar (
  day_key INTEGER PRIMARY KEY, date DATE, year INTEGER, month INTEGER, month_name VARCHAR,
  week_start DATE, weekday VARCHAR, is_weekend BOOLEAN);
CREATE TABLE districts (district_key INTEGER PRIMARY KEY, name VARCHAR, region VARCHAR);
CREATE TABLE stations (
  station_key INTEGER PRIMARY KEY, name VARCHAR,
  district_key INTEGER REFERENCES districts (district_key), docks INTEGER);
CREATE TABLE bikes (bike_key INTEGER PRIMARY KEY, serial_number VARCHAR UNIQUE, bike_type VARCHAR, commissioned_on DATE);
CREATE TABLE riders (rider_key INTEGER PRIMARY KEY, plan VARCHAR, age_band VARCHAR, joined_on DATE);
CREATE TABLE parts (part_key INTEGER PRIMARY KEY, part_code VARCHAR UNIQUE, name VARCHAR, category VARCHAR);
CREATE TABLE mechanics (
  mechanic_key INTEGER PRIMARY KEY, mechanic_code VARCHAR, display_name VARCHAR, grade VARCHAR,
  depot_district_key INTEGER REFERENCES districts (district_key),
  valid_from DATE, valid_to DATE, is_current BOOLEAN);
CREATE TABLE trips (
  trip_key INTEGER PRIMARY KEY,
  start_day_key INTEGER REFERENCES calendar (day_key), end_day_key INTEGER REFERENCES calendar (day_key),
  start_station_key INTEGER REFERENCES stations (station_key), bike_key INTEGER REFERENCES bikes (bike_key),
  rider_key INTEGER REFERENCES riders (rider_key), minutes INTEGER, fare DECIMAL(10, 2), status VARCHAR);
CREATE TABLE stock_levels (
  day_key INTEGER REFERENCES calendar (day_key), station_key INTEGER REFERENCES stations (station_key),
  part_key INTEGER REFERENCES parts (part_key), on_hand INTEGER, unit_cost DECIMAL(10, 2),
  PRIMARY KEY (day_key, station_key, part_key));
CREATE TABLE repairs (
  repair_key INTEGER PRIMARY KEY, day_key INTEGER REFERENCES calendar (day_key),
  bike_key INTEGER REFERENCES bikes (bike_key), mechanic_key INTEGER REFERENCES mechanics (mechanic_key),
  current_mechanic_key INTEGER REFERENCES mechanics (mechanic_key), repair_type VARCHAR, cost DECIMAL(10, 2));
CREATE TABLE district_access (
  staff_email VARCHAR, district_key INTEGER REFERENCES districts (district_key),
  PRIMARY KEY (staff_email, district_key));
"""

FIRST_DAY = date(2025, 4, 7)  # a Monday
DAYS = 60
TRIPS = 420
REPAIRS = 90
RIDERS = 80
BIKES = 40

DISTRICTS = ((1, "Harbour", "East"), (2, "Riverside", "East"), (3, "Old Town", "West"), (4, "Hillside", "West"))

STATION_NAMES = {
    1: ("Harbour Quay", "Ferry Steps", "Dock Gate"),
    2: ("Riverside Park", "Mill Bridge", "Boathouse"),
    3: ("Market Square", "Clock Tower", "Cathedral Close"),
    4: ("Hillside Library", "Reservoir Gate", "Orchard Lane"),
}

# part_key, part_code, name, category, unit cost in cents
PARTS = (
    (1, "BRK-01", "Brake pads", "brakes", 650),
    (2, "CHN-01", "Chain", "drivetrain", 1890),
    (3, "TYR-01", "Tyre", "wheels", 2450),
    (4, "TUB-01", "Inner tube", "wheels", 590),
    (5, "LGT-01", "Light set", "electrics", 1575),
)
PRICE_RISE_DAY = 30  # from this day on, tyres cost 10% more

# Type-2 history of the mechanics, one tuple per version:
# (mechanic_code, display_name, grade, depot_district_key, valid_from).
# A version ends where the next version of the same mechanic starts.
MECHANIC_VERSIONS = (
    ("M01", "Ana", "senior", 1, date(2023, 2, 1)),
    ("M02", "Bo", "senior", 1, date(2023, 6, 12)),
    ("M02", "Bo", "senior", 3, date(2025, 5, 5)),     # moved depot during the period
    ("M03", "Cato", "junior", 2, date(2024, 3, 4)),
    ("M03", "Cato", "senior", 2, date(2025, 4, 21)),  # promoted ...
    ("M03", "Cato", "senior", 4, date(2025, 5, 19)),  # ... then moved depot
    ("M04", "Dara", "senior", 4, date(2022, 9, 5)),
    ("M05", "Eli", "junior", 3, date(2023, 11, 20)),
    ("M05", "Eli", "junior", 2, date(2024, 11, 1)),   # moved before the period
    ("M06", "Femi", "junior", 2, date(2025, 4, 14)),  # joined during the period
)

# (staff_email, district_key): who may see which district.
DISTRICT_ACCESS = (
    ("ana@example.org", 1),
    ("ana@example.org", 2),
    ("bo@example.org", 1),
    ("bo@example.org", 3),
    ("cato@example.org", 2),
    ("cato@example.org", 4),
    ("dara@example.org", 4),
    ("ops.manager@example.org", 1),
    ("ops.manager@example.org", 2),
    ("ops.manager@example.org", 3),
    ("ops.manager@example.org", 4),
)

# repair type, lowest and highest cost in cents
REPAIR_TYPES = (
    ("puncture", 800, 1500),
    ("brakes", 1500, 3500),
    ("chain", 2000, 4000),
    ("lights", 1200, 2600),
    ("wheel true", 1800, 3200),
    ("battery check", 2500, 6000),
)

MONTH_NAMES = ("January", "February", "March", "April", "May", "June", "July", "August",
               "September", "October", "November", "December")
WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")

Row = tuple  # one value per column of TABLE_COLUMNS[table]


@dataclass(frozen=True)
class MechanicVersion:
    """One version of a mechanic in the type-2 mechanic dimension of the demo data."""

    key: int
    code: str
    name: str
    grade: str
    depot: int
    valid_from: date
    valid_to: date | None

    def valid_on(self, day: date) -> bool:
        return self.valid_from <= day and (self.valid_to is None or day < self.valid_to)


def money(cents: int) -> Decimal:
    return Decimal(cents).scaleb(-2)


def day_key(day: date) -> int:
    return day.year * 10000 + day.month * 100 + day.day


def period() -> list[date]:
    return [FIRST_DAY + timedelta(days=i) for i in range(DAYS)]


def calendar_rows() -> list[Row]:
    return [
        (day_key(d), d, d.year, d.month, MONTH_NAMES[d.month - 1], d - timedelta(days=d.weekday()),
         WEEKDAYS[d.weekday()], d.weekday() >= 5)
        for d in period()
    ]


def district_rows() -> list[Row]:
    return list(DISTRICTS)


def station_rows(rng: random.Random) -> list[Row]:
    rows = []
    for district_key, _, _ in DISTRICTS:
        for name in STATION_NAMES[district_key]:
            rows.append((len(rows) + 1, name, district_key, rng.randrange(12, 31, 2)))
    return rows


def bike_rows(rng: random.Random) -> list[Row]:
    return [
        (key, f"BK-{1000 + key}", "electric" if rng.random() < 0.3 else "classic",
         date(2022, 3, 1) + timedelta(days=rng.randrange(0, 900)))
        for key in range(1, BIKES + 1)
    ]


def rider_rows(rng: random.Random) -> list[Row]:
    rows = []
    for key in range(1, RIDERS + 1):
        plan = rng.choices(("member", "casual", "student"), weights=(50, 35, 15))[0]
        age_band = "18-24" if plan == "student" else rng.choice(("18-24", "25-34", "35-49", "50-64", "65+"))
        rows.append((key, plan, age_band, date(2021, 1, 1) + timedelta(days=rng.randrange(0, 1550))))
    return rows


def part_rows() -> list[Row]:
    return [(key, code, name, category) for key, code, name, category, _ in PARTS]


def mechanic_versions() -> list[MechanicVersion]:
    """Versions with surrogate keys given in load order (by valid_from), as a warehouse would."""
    ordered = sorted(MECHANIC_VERSIONS, key=lambda v: (v[4], v[0]))
    versions = []
    for key, (code, name, grade, depot, valid_from) in enumerate(ordered, start=1):
        later = [v[4] for v in MECHANIC_VERSIONS if v[0] == code and v[4] > valid_from]
        versions.append(MechanicVersion(key, code, name, grade, depot, valid_from, min(later) if later else None))
    return versions


def mechanic_rows(versions: list[MechanicVersion]) -> list[Row]:
    return [
        (v.key, v.code, v.name, v.grade, v.depot, v.valid_from, v.valid_to, v.valid_to is None)
        for v in versions
    ]


def trip_rows(rng: random.Random, stations: list[Row], bikes: list[Row], riders: list[Row]) -> list[Row]:
    days = period()
    electric = {row[0] for row in bikes if row[2] == "electric"}
    plans = {row[0]: row[1] for row in riders}
    weights = [3 if d.weekday() >= 5 else 2 for d in days]  # busier at weekends
    trips = []
    for _ in range(TRIPS):
        index = rng.choices(range(DAYS), weights=weights)[0]
        start = days[index]
        overnight = index < DAYS - 1 and rng.random() < 0.06  # the last day's trips end in the period too
        end = start + timedelta(days=1) if overnight else start
        bike = rng.choice(bikes)[0]
        rider = rng.choice(riders)[0]
        minutes = rng.randint(45, 180) if overnight else max(3, int(rng.expovariate(1 / 18)))
        status = rng.choices(("completed", "cancelled", "disputed"), weights=(90, 6, 4))[0]
        fare = 0 if status == "cancelled" else fare_cents(minutes, bike in electric, plans[rider])
        trips.append((day_key(start), day_key(end), rng.choice(stations)[0], bike, rider,
                      minutes, money(fare), status))
    # Trip keys follow the order the trips started in, as the hire system numbers them.
    return [(key, *trip) for key, trip in enumerate(sorted(trips, key=lambda t: t[:6]), start=1)]


def fare_cents(minutes: int, electric: bool, plan: str) -> int:
    per_minute = 25 if electric else 15
    unlock = 0 if plan == "member" else 100
    cents = unlock + minutes * per_minute
    return cents // 2 if plan == "student" else cents


def stock_rows(rng: random.Random, stations: list[Row]) -> list[Row]:
    rows = []
    for station in stations:
        for part_key, _, _, _, cost in PARTS:
            on_hand = rng.randint(4, 12)
            for index, day in enumerate(period()):
                if rng.random() < 0.35:
                    on_hand -= rng.randint(1, 2)
                if on_hand < 2:
                    on_hand = rng.randint(8, 12)  # restocked overnight
                unit = cost * 11 // 10 if part_key == 3 and index >= PRICE_RISE_DAY else cost
                rows.append((day_key(day), station[0], part_key, on_hand, money(unit)))
    return sorted(rows, key=lambda r: (r[0], r[1], r[2]))


def repair_rows(rng: random.Random, bikes: list[Row], versions: list[MechanicVersion]) -> list[Row]:
    current = {v.code: v.key for v in versions if v.valid_to is None}
    rows = []
    for key in range(1, REPAIRS + 1):
        day = rng.choice(period())
        version = rng.choice([v for v in versions if v.valid_on(day)])
        repair_type, low, high = rng.choice(REPAIR_TYPES)
        rows.append((key, day_key(day), rng.choice(bikes)[0], version.key, current[version.code],
                     repair_type, money(rng.randint(low, high))))
    return sorted(rows, key=lambda r: (r[1], r[0]))


def district_access_rows() -> list[Row]:
    return list(DISTRICT_ACCESS)


def demo_rows(seed: int = 7) -> dict[str, list[Row]]:
    """Every table's rows as Python values (int, str, date, bool, Decimal, None)."""
    rng = random.Random(seed)
    stations = station_rows(rng)
    bikes = bike_rows(rng)
    riders = rider_rows(rng)
    versions = mechanic_versions()
    return {
        "calendar": calendar_rows(),
        "districts": district_rows(),
        "stations": stations,
        "bikes": bikes,
        "riders": riders,
        "parts": part_rows(),
        "mechanics": mechanic_rows(versions),
        "trips": trip_rows(rng, stations, bikes, riders),
        "stock_levels": stock_rows(rng, stations),
        "repairs": repair_rows(rng, bikes, versions),
        "district_access": district_access_rows(),
    }


def csv_value(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, Decimal):
        return f"{value:.2f}"
    return str(value)


def csv_text(columns: Sequence[str], rows: list[Row]) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(columns)
    writer.writerows([csv_value(v) for v in row] for row in rows)
    return out.getvalue()


def write_demo_data(folder: str | Path, seed: int = 7) -> list[Path]:
    """Write `<table>.csv` for every table of the example model into folder; return the paths, sorted."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ModeldiffError(f"{folder}: exists and is not a folder; give a folder to write the demo data into")
    written = []
    try:
        folder.mkdir(parents=True, exist_ok=True)
        for table, rows in demo_rows(seed).items():
            path = folder / f"{table}.csv"
            path.write_text(csv_text(TABLE_COLUMNS[table], rows), encoding="utf-8", newline="")
            written.append(path)
    except OSError as error:
        raise ModeldiffError(f"{folder}: cannot write the demo data ({error.strerror}); choose a writable folder") from None
    return sorted(written)


def main(argv: Sequence[str] | None = None, stdout: TextIO | None = None, stderr: TextIO | None = None) -> int:
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    parser = argparse.ArgumentParser(prog="python -m modeldiff.demo_data",
                                     description="Write seeded CSV sample data for examples/bikeshare.model.yaml.")
    parser.add_argument("outdir", metavar="OUTDIR", help="folder to write <table>.csv files into")
    parser.add_argument("--seed", type=int, default=7, help="random seed (default 7)")
    args = parser.parse_args(argv)
    try:
        paths = write_demo_data(args.outdir, seed=args.seed)
    except ModeldiffError as error:
        stderr.write(f"error: {error}\n")
        return error.exit_code
    stdout.write(f"wrote {len(paths)} tables to {args.outdir}\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
