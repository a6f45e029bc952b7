"""The demo data generator and the example model it serves.

The model files are read with yaml.safe_load on purpose: these tests check the
data against the model's declared keys and links without depending on the
loader. Rules checked here (unique keys, referential integrity of every link,
non-overlapping type-2 validity with one current row per natural key) are the
usual warehouse integrity checks: common practice.
"""

from __future__ import annotations

import csv
import io
from datetime import date
from decimal import Decimal
from pathlib import Path

import pytest
import yaml

from modeldiff import demo_data
from modeldiff.errors import ModeldiffError

ROOT = Path(__file__).resolve().parent.parent
MODEL = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"


# --- helpers ------------------------------------------------------------------------


def load_yaml(path: Path) -> dict:
    return yaml.safe_load(path.read_text(encoding="utf-8"))


def as_list(value) -> list[str]:
    return [value] if isinstance(value, str) else list(value)


def column_type(spec) -> str:
    return spec["type"] if isinstance(spec, dict) else spec


def read_tables(folder: Path) -> dict[str, list[dict[str, str]]]:
    tables = {}
    for path in sorted(folder.glob("*.csv")):
        with path.open(encoding="utf-8", newline="") as handle:
            tables[path.stem] = list(csv.DictReader(handle))
    return tables


def header(path: Path) -> list[str]:
    with path.open(encoding="utf-8", newline="") as handle:
        return next(csv.reader(handle))


def duplicate_keys(rows: list[dict[str, str]], key: list[str]) -> list[tuple[str, ...]]:
    seen, duplicates = set(), []
    for row in rows:
        value = tuple(row[c] for c in key)
        if value in seen:
            duplicates.append(value)
        seen.add(value)
    return sorted(duplicates)


def split_ref(ref) -> tuple[str, list[str]]:
    """`table.col` or a list of them -> (table, [cols])."""
    refs = as_list(ref)
    return refs[0].split(".")[0], [r.split(".")[1] for r in refs]


def dangling(tables: dict[str, list[dict[str, str]]], link: dict) -> list[tuple[str, ...]]:
    """Values of the link's `from` columns that do not exist among its `to` columns."""
    from_table, from_cols = split_ref(link["from"])
    to_table, to_cols = split_ref(link["to"])
    targets = {tuple(row[c] for c in to_cols) for row in tables[to_table]}
    return sorted({tuple(row[c] for c in from_cols) for row in tables[from_table]} - targets)


def overlaps(rows: list[dict[str, str]], natural_key: str, valid_from: str, valid_to: str) -> list[str]:
    """Natural keys whose versions' [valid_from, valid_to) ranges overlap (empty valid_to = open)."""
    found = set()
    by_code: dict[str, list[dict[str, str]]] = {}
    for row in rows:
        by_code.setdefault(row[natural_key], []).append(row)
    for code, versions in by_code.items():
        versions.sort(key=lambda r: r[valid_from])
        for earlier, later in zip(versions, versions[1:]):
            if earlier[valid_to] == "" or earlier[valid_to] > later[valid_from]:
                found.add(code)
    return sorted(found)


def current_counts(rows: list[dict[str, str]], natural_key: str, current: str) -> dict[str, int]:
    counts: dict[str, int] = {}
    for row in rows:
        counts[row[natural_key]] = counts.get(row[natural_key], 0) + (row[current] == "true")
    return counts


def parses_as(value: str, type_name: str) -> bool:
    parsers = {
        "integer": int,
        "decimal": Decimal,
        "float": float,
        "text": str,
        "date": date.fromisoformat,
        "boolean": lambda v: {"true": True, "false": False}[v],
    }
    try:
        parsers[type_name](value)
    except (ValueError, KeyError, ArithmeticError):
        return False
    return True


@pytest.fixture(scope="module")
def model() -> dict:
    return load_yaml(MODEL)


@pytest.fixture(scope="module")
def data_dir(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    demo_data.write_demo_data(folder)
    return folder


@pytest.fixture(scope="module")
def tables(data_dir) -> dict[str, list[dict[str, str]]]:
    return read_tables(data_dir)


# --- files and determinism -----------------------------------------------------------


def test_same_seed_gives_the_same_bytes(tmp_path):
    first = demo_data.write_demo_data(tmp_path / "a", seed=11)
    second = demo_data.write_demo_data(tmp_path / "b", seed=11)
    assert [p.name for p in first] == [p.name for p in second]
    assert all(a.read_bytes() == b.read_bytes() for a, b in zip(first, second))


def test_another_seed_gives_other_trips(tmp_path):
    demo_data.write_demo_data(tmp_path / "a", seed=1)
    demo_data.write_demo_data(tmp_path / "b", seed=2)
    assert (tmp_path / "a" / "trips.csv").read_bytes() != (tmp_path / "b" / "trips.csv").read_bytes()


def test_returns_the_written_paths_sorted(tmp_path):
    paths = demo_data.write_demo_data(tmp_path)
    assert paths == sorted(tmp_path.glob("*.csv"))


def test_every_table_of_the_model_has_a_file_with_exactly_its_columns(model, data_dir):
    assert sorted(p.stem for p in data_dir.glob("*.csv")) == sorted(model["tables"])
    for name, table in model["tables"].items():
        assert header(data_dir / f"{name}.csv") == list(table["columns"]), name


def test_generator_columns_match_the_model(model):
    assert {name: list(cols) for name, cols in demo_data.TABLE_COLUMNS.items()} == {
        name: list(table["columns"]) for name, table in model["tables"].items()
    }


def test_values_parse_as_their_declared_types(model, tables):
    for name, table in model["tables"].items():
        for column, spec in table["columns"].items():
            values = [row[column] for row in tables[name] if row[column] != ""]
            bad = [v for v in values if not parses_as(v, column_type(spec))]
            assert bad == [], f"{name}.{column}: {bad[:3]}"


def test_only_open_validity_is_left_empty(model, tables):
    empty = sorted(
        f"{name}.{column}"
        for name, table in model["tables"].items()
        for column in table["columns"]
        if any(row[column] == "" for row in tables[name])
    )
    assert empty == ["mechanics.valid_to"]


def test_csv_uses_iso_dates_and_lowercase_booleans():
    text = demo_data.csv_text(("d", "b", "n", "x"), [(date(2025, 4, 7), True, None, Decimal("2.5"))])
    assert text == "d,b,n,x\n2025-04-07,true,,2.50\n"


# --- keys and links ---------------------------------------------------------------


def test_keys_are_unique(model, tables):
    for name, table in model["tables"].items():
        assert duplicate_keys(tables[name], as_list(table["key"])) == [], name


def test_duplicate_keys_are_detected():
    rows = [{"k": "1"}, {"k": "2"}, {"k": "1"}]
    assert duplicate_keys(rows, ["k"]) == [("1",)]
    assert duplicate_keys(rows[:2], ["k"]) == []


@pytest.mark.parametrize("model_file", [MODEL, REVISION_2], ids=["revision-1", "revision-2"])
def test_every_link_of_the_model_holds_in_the_data(model_file, tables):
    links = load_yaml(model_file)["links"]
    assert links  # the model has links to check
    broken = {name: dangling(tables, link) for name, link in links.items()}
    assert {name: values for name, values in broken.items() if values} == {}


def test_a_dangling_reference_is_detected(tables):
    link = {"from": "trips.bike_key", "to": "bikes.bike_key"}
    assert dangling(tables, link) == []
    damaged = dict(tables, trips=tables["trips"] + [dict(tables["trips"][0], bike_key="999")])
    assert dangling(damaged, link) == [("999",)]


def test_composite_links_compare_whole_tuples():
    tables = {
        "f": [{"a": "1", "b": "2"}],
        "t": [{"a": "1", "b": "1"}, {"a": "2", "b": "2"}],
    }
    link = {"from": ["f.a", "f.b"], "to": ["t.a", "t.b"]}
    assert dangling(tables, link) == [("1", "2")]
    assert dangling(dict(tables, f=[{"a": "2", "b": "2"}]), link) == []


# --- type-2 history of the mechanics ----------------------------------------------------


def test_mechanic_versions_do_not_overlap(model, tables):
    history = model["tables"]["mechanics"]["history"]
    natural_key = model["tables"]["mechanics"]["natural_key"]
    assert overlaps(tables["mechanics"], natural_key, history["valid_from"], history["valid_to"]) == []


def test_overlapping_versions_are_detected():
    rows = [
        {"code": "A", "from": "2025-01-01", "to": "2025-03-01"},
        {"code": "A", "from": "2025-02-01", "to": ""},
        {"code": "B", "from": "2025-01-01", "to": ""},
        {"code": "B", "from": "2025-02-01", "to": ""},
        {"code": "C", "from": "2025-01-01", "to": "2025-02-01"},
        {"code": "C", "from": "2025-02-01", "to": ""},
    ]
    assert overlaps(rows, "code", "from", "to") == ["A", "B"]


def test_each_mechanic_has_exactly_one_current_version(model, tables):
    history = model["tables"]["mechanics"]["history"]
    counts = current_counts(tables["mechanics"], model["tables"]["mechanics"]["natural_key"], history["current"])
    assert set(counts.values()) == {1}
    for row in tables["mechanics"]:
        assert (row["valid_to"] == "") == (row["is_current"] == "true"), row


def test_a_second_current_version_is_detected():
    rows = [{"code": "A", "cur": "true"}, {"code": "A", "cur": "true"}, {"code": "B", "cur": "true"}]
    assert current_counts(rows, "code", "cur") == {"A": 2, "B": 1}
    assert current_counts(rows[1:], "code", "cur") == {"A": 1, "B": 1}


def test_some_mechanics_have_several_versions_and_changed_depot(tables):
    depots: dict[str, set[str]] = {}
    for row in tables["mechanics"]:
        depots.setdefault(row["mechanic_code"], set()).add(row["depot_district_key"])
    assert len(depots) == 6
    assert len(tables["mechanics"]) > len(depots)
    assert sum(len(d) > 1 for d in depots.values()) >= 2


def test_repairs_reference_the_version_valid_that_day_and_the_current_version(tables):
    versions = {row["mechanic_key"]: row for row in tables["mechanics"]}
    for repair in tables["repairs"]:
        then = versions[repair["mechanic_key"]]
        now = versions[repair["current_mechanic_key"]]
        day = date(int(repair["day_key"][:4]), int(repair["day_key"][4:6]), int(repair["day_key"][6:]))
        assert then["valid_from"] <= day.isoformat(), repair
        assert then["valid_to"] == "" or day.isoformat() < then["valid_to"], repair
        assert now["is_current"] == "true" and now["mechanic_code"] == then["mechanic_code"], repair


# --- the data makes the demo's differences visible ----------------------------------------


def test_volumes_are_small_and_realistic(tables):
    assert len(tables["calendar"]) == 60
    assert len(tables["districts"]) == 4
    assert len(tables["stations"]) == 12
    assert len(tables["bikes"]) == 40
    assert 200 <= len(tables["trips"]) <= 800
    assert {row["staff_email"] for row in tables["district_access"]} >= {"ana@example.org"}


def test_some_repairs_count_for_another_depot_today(tables):
    """The `attribution` variant changes numbers only if some mechanic moved depot after a repair."""
    depot = {row["mechanic_key"]: row["depot_district_key"] for row in tables["mechanics"]}
    moved = [r for r in tables["repairs"] if depot[r["mechanic_key"]] != depot[r["current_mechanic_key"]]]
    assert moved


def test_some_station_days_have_stock_but_no_trip(tables):
    """Revision 2 moves station_stock only where a station held stock on a day without a trip start."""
    trip_days = {(row["start_day_key"], row["start_station_key"]) for row in tables["trips"]}
    stock_days = {(row["day_key"], row["station_key"]) for row in tables["stock_levels"]}
    assert stock_days - trip_days
    assert stock_days & trip_days


def test_some_trips_end_on_a_later_day(tables):
    """trips_by_end_day differs from trip_count by day only if some trips cross midnight."""
    assert any(row["end_day_key"] != row["start_day_key"] for row in tables["trips"])


def test_cancelled_trips_exist_so_the_fare_condition_matters(tables):
    assert {row["status"] for row in tables["trips"]} == {"completed", "cancelled", "disputed"}


# --- the two revisions of the example ------------------------------------------------------


def test_revision_2_differs_only_in_the_flow_of_trips_start_station():
    before, after = load_yaml(MODEL), load_yaml(REVISION_2)
    assert "flow" not in before["links"]["trips_start_station"]
    assert after["links"]["trips_start_station"].pop("flow") == "two-way"
    assert after == before


def test_example_files_start_with_the_schema_modeline():
    assert MODEL.read_text(encoding="utf-8").splitlines()[0] == "# yaml-language-server: $schema=../modeldiff/schema.json"
    first = REVISION_2.read_text(encoding="utf-8").splitlines()[0]
    assert first == "# yaml-language-server: $schema=../../modeldiff/schema.json"


# --- command line ------------------------------------------------------------------------


def test_command_line_writes_the_files(tmp_path):
    out, err = io.StringIO(), io.StringIO()
    assert demo_data.main([str(tmp_path / "out"), "--seed", "3"], stdout=out, stderr=err) == 0
    assert len(list((tmp_path / "out").glob("*.csv"))) == len(demo_data.TABLE_COLUMNS)
    assert out.getvalue() == f"wrote {len(demo_data.TABLE_COLUMNS)} tables to {tmp_path / 'out'}\n"
    assert err.getvalue() == ""


def test_command_line_refuses_a_file_as_folder(tmp_path):
    target = tmp_path / "taken"
    target.write_text("x")
    out, err = io.StringIO(), io.StringIO()
    assert demo_data.main([str(target)], stdout=out, stderr=err) == 2
    assert err.getvalue().count("\n") == 1 and "not a folder" in err.getvalue()
    assert target.read_text() == "x"


def test_writing_into_a_file_raises_one_clear_error(tmp_path):
    target = tmp_path / "taken"
    target.write_text("x")
    with pytest.raises(ModeldiffError, match="not a folder"):
        demo_data.write_demo_data(target)
