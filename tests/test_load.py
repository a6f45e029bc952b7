"""The loader on valid input: records, folder merge, YAML 1.2 scalars, positions, schema agreement."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import jsonschema
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from modeldiff.errors import ModeldiffError
from modeldiff.load import LoadResult, load_files, load_path, read_yaml, schema_text
from modeldiff.model import Column, History, Link, Measure, Overrides, Pos, Report, Role, Variant, VariantOption

FIXTURES = Path(__file__).parent / "fixtures" / "load"
BIKE_SHARE = FIXTURES / "bike_share.model.yaml"


def load_text(text: str, name: str = "m.model.yaml") -> LoadResult:
    return load_files([(name, text)])


def position_of(path: Path, line_text: str, value: str) -> Pos:
    """Where `value` starts on the only line of the file that contains `line_text`."""
    lines = path.read_text(encoding="utf-8").split("\n")
    hits = [number for number, line in enumerate(lines, 1) if line_text in line]
    assert len(hits) == 1, f"{line_text!r} is on lines {hits}"
    line = lines[hits[0] - 1]
    return Pos(str(path), hits[0], line.index(value, line.index(line_text)) + 1)


# --------------------------------------------------------------------------
# One file -> records


@pytest.fixture(scope="module")
def bike_share() -> LoadResult:
    return load_path(BIKE_SHARE)


def test_valid_model_has_no_findings(bike_share):
    assert bike_share.findings == ()
    assert bike_share.model.name == "bike_share"
    assert bike_share.model.format == 1


def test_sections_keep_file_order(bike_share):
    model = bike_share.model
    assert list(model.tables) == ["calendar", "stations", "bikes", "mechanics", "trips", "district_access"]
    assert list(model.links) == ["trips_start_day", "trips_end_day", "trips_station", "trips_bike", "access_district"]
    assert list(model.measures) == ["fare_revenue", "trip_count", "revenue_per_trip", "trips_by_end_day"]


def test_tables_become_records(bike_share):
    tables = bike_share.model.tables
    bikes = tables["bikes"]
    assert (bikes.kind, bikes.key, bikes.natural_key) == ("dimension", ("bike_key",), ("bike_code",))
    assert bikes.history == History(type=2, valid_from="valid_from", valid_to="valid_to", current="is_current")
    assert bikes.columns["bike_code"] == Column("bike_code", "text", description="Frame number painted on the bike")
    assert bikes.source == "data/bikes.parquet"
    assert bikes.description == "One row per version of a bike's record."
    assert tables["mechanics"].key == ("mechanic_key",)
    assert tables["mechanics"].history == History(type=3, previous="prior_depot")
    assert tables["trips"].key == ()
    assert tables["trips"].columns["trip_key"] == Column("trip_key", "integer", unique=True)
    assert tables["district_access"].key == ("staff_email", "district")
    assert tables["district_access"].kind == "access"


def test_links_become_records(bike_share):
    links = bike_share.model.links
    assert links["trips_bike"] == Link("trips_bike", "trips", ("bike_key",), "bikes", ("bike_key",))
    assert links["trips_station"] == Link(
        "trips_station", "trips", ("station_key",), "stations", ("station_key",),
        cardinality="many-to-one", flow="two-way", security_flow="two-way",
    )  # fmt: skip
    end_day = links["trips_end_day"]
    assert (end_day.standby, end_day.description) == (True, "Counts a trip on the day it ended.")
    assert links["access_district"].cardinality == "many-to-many"


def test_measures_become_records(bike_share):
    measures = bike_share.model.measures
    assert measures["fare_revenue"] == Measure(
        "fare_revenue", "sum(fare)", table="trips", where="status = 'completed'",
        unit="EUR", owner="finance", folder="Revenue",
    )  # fmt: skip
    assert measures["revenue_per_trip"].table is None
    assert measures["revenue_per_trip"].description == "Average fare of a trip."
    assert measures["trips_by_end_day"].overrides == Overrides(
        via=("trips_end_day",), flow={"trips_bike": "two-way", "trips_station": "off"}
    )
    assert not measures["trip_count"].overrides


def test_variants_roles_reports_become_records(bike_share):
    model = bike_share.model
    assert model.variants["counting_day"] == Variant(
        "counting_day",
        "started",
        {
            "started": VariantOption("started"),
            "ended": VariantOption(
                "ended",
                Overrides(via=("trips_end_day",), flow={"trips_bike": "off"}),
                where={"trips": "status <> 'cancelled'"},
            ),
        },
        description="Which day a trip counts on.",
    )
    assert model.roles["east_lead"] == Role("east_lead", {"stations": "district = 'East'"})
    assert model.roles["station_staff"].description == "Staff see their own districts."
    assert model.reports["weekly_fares"] == Report(
        "weekly_fares",
        ("fare_revenue", "trip_count"),
        by=("calendar.year", "stations.district"),
        where={"calendar": "year >= 2025"},
        variant={"counting_day": "ended"},
        role="east_lead",
        owner="finance",
        overrides=Overrides(via=("trips_end_day",), flow={"trips_station": "one-way"}),
        description="The finance team's weekly export.",
    )


def test_load_files_gives_the_same_model_as_load_path(bike_share):
    again = load_files([(str(BIKE_SHARE), BIKE_SHARE.read_bytes())])
    assert again == bike_share
    as_text = load_files([(str(BIKE_SHARE), BIKE_SHARE.read_text(encoding="utf-8"))])
    assert as_text.model == bike_share.model


def test_byte_order_mark_and_modeline_are_accepted():
    text = "# yaml-language-server: $schema=./schema.json\nmodel: m\nformat: 1\ntables: {}\n"
    result = load_files([("m.model.yaml", b"\xef\xbb\xbf" + text.encode())])
    assert result.findings == ()
    assert result.model.name == "m"


# --------------------------------------------------------------------------
# Positions


def test_positions_point_at_names_and_values(bike_share):
    positions = bike_share.model.positions
    assert positions["model"] == position_of(BIKE_SHARE, "model: bike_share", "bike_share")
    assert positions["tables.bikes"] == position_of(BIKE_SHARE, "  bikes:", "bikes")
    assert positions["tables.bikes.columns.model_year"] == position_of(BIKE_SHARE, "model_year: integer", "model_year")
    assert positions["tables.bikes.key"] == position_of(BIKE_SHARE, "key: bike_key", "bike_key")
    assert positions["links.trips_bike"] == position_of(BIKE_SHARE, "  trips_bike:", "trips_bike")
    assert positions["links.trips_bike.to"] == position_of(BIKE_SHARE, "to: bikes.bike_key", "bikes.bike_key")
    assert positions["links.trips_station.from"] == position_of(BIKE_SHARE, "from: [trips.station_key]", "[")
    assert positions["measures.fare_revenue.expr"] == position_of(BIKE_SHARE, "expr: sum(fare)", "sum")
    assert positions["measures.trips_by_end_day.flow.trips_station"] == position_of(
        BIKE_SHARE, "flow: {trips_bike: two-way, trips_station: off}", "off"
    )
    assert positions["variants.counting_day.options.ended"] == position_of(BIKE_SHARE, "ended: {via:", "ended")
    assert positions["roles.east_lead.filters.stations"] == position_of(BIKE_SHARE, "district = 'East'", "district")
    assert positions["reports.weekly_fares.by"] == position_of(BIKE_SHARE, "by: [calendar.year", "[")


def test_model_pos_falls_back_to_the_enclosing_item(bike_share):
    model = bike_share.model
    assert model.pos("links.trips_bike.cardinality") == model.positions["links.trips_bike"]
    assert model.pos("nothing.here") is None


def test_positions_are_counted_in_characters_not_bytes():
    text = "model: m\nformat: 1\ntables:\n  t:\n    description: Größe\n    kind: fact\n    columns: {é: text, ok: text}\n"
    result = load_text(text)
    assert result.model.positions["tables.t.kind"] == Pos("m.model.yaml", 6, 11)
    bad = [f for f in result.findings if f.subject == "tables.t.columns.é"]
    assert [f.pos for f in bad] == [Pos("m.model.yaml", 7, 15)]
    assert result.model.positions["tables.t.columns.ok"] == Pos("m.model.yaml", 7, 24)


# --------------------------------------------------------------------------
# Folders


def test_folder_merges_sections_in_file_order():
    result = load_path(FIXTURES / "folder.model")
    assert result.findings == ()
    assert result.model.name == "bike_share"
    assert list(result.model.tables) == ["stations", "trips", "districts"]
    assert list(result.model.links) == ["trips_station"]
    assert list(result.model.measures) == ["fare_revenue"]
    folder = FIXTURES / "folder.model"
    assert result.model.positions["tables.districts"].file == str(folder / "20_measures.yaml")
    assert result.model.positions["links.trips_station"] == Pos(str(folder / "10_links.yml"), 3, 3)


def test_folder_reads_subfolders_like_git_does(tmp_path):
    folder = tmp_path / "bikes.model"
    shutil.copytree(FIXTURES / "folder.model", folder)
    (folder / "more").mkdir()
    (folder / "more" / "roles.yaml").write_text("roles:\n  east: {filters: {stations: \"district = 'East'\"}}\n")
    result = load_path(folder)
    assert list(result.model.roles) == ["east"]
    assert result.model.positions["roles.east"].file == str(folder / "more" / "roles.yaml")


def test_load_files_merges_several_files():
    files = [
        ("HEAD:m.model/a.yaml", "model: m\nformat: 1\ntables:\n  t: {kind: fact, columns: {a: text}}\n"),
        ("HEAD:m.model/b.yaml", "tables:\n  u: {kind: dimension, columns: {b: text}}\n"),
    ]
    result = load_files(files)
    assert list(result.model.tables) == ["t", "u"]
    assert result.model.positions["tables.u"] == Pos("HEAD:m.model/b.yaml", 2, 3)


def test_folder_files_may_repeat_agreeing_model_and_format():
    files = [
        ("a.yaml", "model: m\nformat: 1\ntables: {}\n"),
        ("b.yaml", "model: m\nformat: 1\nlinks: {}\n"),
    ]
    assert load_files(files).findings == ()


def test_folder_with_a_name_in_two_files_cannot_be_read():
    folder = FIXTURES / "conflict.model"
    with pytest.raises(ModeldiffError) as caught:
        load_path(folder)
    message = str(caught.value)
    assert message.startswith(f"{folder / 'b.yaml'}:5:3: table 'trips' is defined in both ")
    assert f"{folder / 'a.yaml'}:4" in message and f"{folder / 'b.yaml'}:5" in message


def test_same_name_in_different_sections_of_two_files_is_fine():
    files = [
        ("a.yaml", "model: m\nformat: 1\ntables:\n  trips: {kind: fact, columns: {fare: decimal}}\n"),
        ("b.yaml", "measures:\n  trips: {table: trips, expr: count(*)}\n"),
    ]
    result = load_files(files)
    assert (list(result.model.tables), list(result.model.measures)) == (["trips"], ["trips"])


def test_folder_files_that_disagree_on_the_model_name_cannot_be_read():
    folder = FIXTURES / "disagree.model"
    with pytest.raises(ModeldiffError) as caught:
        load_path(folder)
    assert str(caught.value).startswith(f"{folder / 'b.yaml'}:1:8: `model` is 'bike_rental' here but 'bike_share' in ")


# --------------------------------------------------------------------------
# YAML 1.2 core schema, anchors and merge keys


@pytest.mark.parametrize(
    "written, value",
    [
        ("on", "on"), ("off", "off"), ("yes", "yes"), ("no", "no"), ("y", "y"), ("n", "n"),
        ("2025-01-31", "2025-01-31"), ("12:30", "12:30"), ("1_000", "1_000"), ("0b101", "0b101"),
        ("true", True), ("False", False), ("TRUE", True),
        ("null", None), ("~", None), ("", None),
        ("12", 12), ("-3", -3), ("+7", 7), ("012", 12), ("0o17", 15), ("0x1F", 31),
        ("1.5", 1.5), ("1e3", 1000.0), (".5", 0.5), ("-.inf", float("-inf")),
        ("'true'", "true"), ('"12"', "12"), ("!!str 12", "12"), ("!!float 2", 2.0),
    ],
)  # fmt: skip
def test_plain_scalars_follow_yaml_1_2_core_schema(written, value):
    # The YAML 1.2.2 spec, section 10.3.2 "Tag Resolution" (core schema), from memory.
    data = read_yaml("s.yaml", f"key: {written}\n")
    assert data["key"] == value
    assert type(data["key"]) is type(value)


def test_nan_is_a_float():
    assert read_yaml("s.yaml", "key: .nan\n")["key"] != read_yaml("s.yaml", "key: .nan\n")["key"]


def test_on_and_yes_stay_strings_in_a_model():
    text = "model: m\nformat: 1\ntables:\n  t:\n    kind: fact\n    columns: {on: boolean, yes: text}\n"
    result = load_text(text)
    assert result.findings == ()
    assert list(result.model.tables["t"].columns) == ["on", "yes"]


def test_anchors_aliases_and_merge_keys():
    text = """model: m
format: 1
tables:
  trips: {kind: fact, columns: &cols {a: integer, b: text}}
  trips_archive: {kind: fact, columns: *cols}
links:
  base: &two_way {from: trips.a, to: trips_archive.a, flow: two-way, security_flow: two-way}
  other:
    <<: *two_way
    to: trips_archive.b
  both:
    <<: [{standby: true, flow: one-way}, *two_way]
"""
    result = load_text(text)
    assert result.findings == ()
    assert result.model.tables["trips_archive"].columns == result.model.tables["trips"].columns
    other = result.model.links["other"]
    assert (other.to_columns, other.flow, other.security_flow) == (("b",), "two-way", "two-way")
    both = result.model.links["both"]
    assert (both.standby, both.flow, both.from_columns) == (True, "one-way", ("a",))


# --------------------------------------------------------------------------
# JSON Schema: valid draft-07, and it agrees with the loader

MINIMAL = "model: m\nformat: 1\ntables:\n  trips:\n    kind: fact\n    columns: {fare: decimal}\n"

VALID_SAMPLES = {
    "minimal": MINIMAL,
    "empty sections": "model: m\nformat: 1\ntables: {}\nlinks: {}\nmeasures: {}\nvariants: {}\nroles: {}\nreports: {}\n",
    "key list": MINIMAL.replace("kind: fact", "kind: fact\n    key: [a, b]"),
    "long column": MINIMAL.replace("{fare: decimal}", "{fare: {type: decimal, unique: false, description: x}}"),
    "history 3": MINIMAL.replace("kind: fact", "kind: dimension\n    history: {type: 3, previous: {column: fare}}"),
    "history 0": MINIMAL.replace("kind: fact", "kind: dimension\n    history: {type: 0}"),
    "link lists": MINIMAL + "links:\n  l: {from: [trips.a, trips.b], to: [x.a, x.b], standby: false}\n",
    "derived measure": MINIMAL + "measures:\n  m: {expr: a / b, description: d, unit: u, owner: o, folder: f}\n",
    "measure flow": MINIMAL + "measures:\n  m: {table: trips, expr: count(*), via: [], flow: {l: off}}\n",
    "variant": MINIMAL + "variants:\n  v: {default: a, options: {a: {}, b: {where: {trips: fare > 0}}}}\n",
    "role": MINIMAL + "roles:\n  r: {filters: {}, description: nobody}\n",
    "report": MINIMAL + "reports:\n  p: {measures: [m], by: [], variant: {v: a}, via: [l], flow: {l: two-way}}\n",
}

INVALID_SAMPLES = {
    "no tables": "model: m\nformat: 1\n",
    "no format": "model: m\ntables: {}\n",
    "format 2": "model: m\nformat: 2\ntables: {}\n",
    "format text": "model: m\nformat: '1'\ntables: {}\n",
    "model list": "model: [m]\nformat: 1\ntables: {}\n",
    "unknown top key": MINIMAL + "dashboards: {}\n",
    "tables a list": "model: m\nformat: 1\ntables: [trips]\n",
    "table name": MINIMAL.replace("  trips:", "  2trips:"),
    "table not a mapping": "model: m\nformat: 1\ntables:\n  trips: fact\n",
    "unknown table key": MINIMAL.replace("kind: fact", "kind: fact\n    colour: red"),
    "no kind": MINIMAL.replace("kind: fact", "key: fare"),
    "bad kind": MINIMAL.replace("kind: fact", "kind: facts"),
    "no columns": "model: m\nformat: 1\ntables:\n  trips: {kind: fact}\n",
    "column name": MINIMAL.replace("{fare: decimal}", "{fare-amount: decimal}"),
    "column type": MINIMAL.replace("{fare: decimal}", "{fare: money}"),
    "column number": MINIMAL.replace("{fare: decimal}", "{fare: 1}"),
    "long column no type": MINIMAL.replace("{fare: decimal}", "{fare: {unique: true}}"),
    "unique not bool": MINIMAL.replace("{fare: decimal}", "{fare: {type: decimal, unique: 'yes'}}"),
    "empty key": MINIMAL.replace("kind: fact", "kind: fact\n    key: []"),
    "history type 4": MINIMAL.replace("kind: fact", "kind: fact\n    history: {type: 4}"),
    "history type text": MINIMAL.replace("kind: fact", "kind: fact\n    history: {type: '2'}"),
    "previous on type 2": MINIMAL.replace("kind: fact", "kind: fact\n    history: {type: 2, previous: {column: x}}"),
    "link no to": MINIMAL + "links:\n  l: {from: trips.a}\n",
    "link bare table": MINIMAL + "links:\n  l: {from: trips, to: x.a}\n",
    "link empty list": MINIMAL + "links:\n  l: {from: [], to: x.a}\n",
    "cardinality": MINIMAL + "links:\n  l: {from: trips.a, to: x.a, cardinality: one-to-many}\n",
    "flow": MINIMAL + "links:\n  l: {from: trips.a, to: x.a, flow: both}\n",
    "security flow": MINIMAL + "links:\n  l: {from: trips.a, to: x.a, security_flow: off}\n",
    "standby text": MINIMAL + "links:\n  l: {from: trips.a, to: x.a, standby: 'no'}\n",
    "no expr": MINIMAL + "measures:\n  m: {table: trips}\n",
    "empty expr": MINIMAL + "measures:\n  m: {table: trips, expr: '  '}\n",
    "via text": MINIMAL + "measures:\n  m: {expr: a, via: l}\n",
    "flow override": MINIMAL + "measures:\n  m: {expr: a, flow: {l: none}}\n",
    "unit number": MINIMAL + "measures:\n  m: {expr: a, unit: 1}\n",
    "variant no options": MINIMAL + "variants:\n  v: {default: a, options: {}}\n",
    "option null": MINIMAL + "variants:\n  v: {default: a, options: {a: }}\n",
    "option unknown key": MINIMAL + "variants:\n  v: {default: a, options: {a: {table: x}}}\n",
    "role no filters": MINIMAL + "roles:\n  r: {description: x}\n",
    "role filter number": MINIMAL + "roles:\n  r: {filters: {trips: 1}}\n",
    "report no measures": MINIMAL + "reports:\n  p: {measures: []}\n",
    "report by": MINIMAL + "reports:\n  p: {measures: [m], by: [year]}\n",
    "report variant": MINIMAL + "reports:\n  p: {measures: [m], variant: {v: [a]}}\n",
}


@pytest.fixture(scope="module")
def validator() -> jsonschema.Draft7Validator:
    schema = json.loads(schema_text())
    jsonschema.Draft7Validator.check_schema(schema)
    return jsonschema.Draft7Validator(schema)


def loader_accepts(text: str) -> bool:
    try:
        return load_text(text).findings == ()
    except ModeldiffError:
        return False


def test_schema_file_is_the_shipped_schema():
    shipped = Path(__file__).parent.parent / "modeldiff" / "schema.json"
    assert json.loads(schema_text()) == json.loads(shipped.read_text(encoding="utf-8"))
    assert json.loads(schema_text())["$schema"] == "http://json-schema.org/draft-07/schema#"


@pytest.mark.parametrize("name", sorted(VALID_SAMPLES))
def test_schema_and_loader_accept_valid_samples(validator, name):
    text = VALID_SAMPLES[name]
    assert loader_accepts(text)
    assert list(validator.iter_errors(read_yaml("s.yaml", text))) == []


@pytest.mark.parametrize("name", sorted(INVALID_SAMPLES))
def test_schema_and_loader_refuse_invalid_samples(validator, name):
    text = INVALID_SAMPLES[name]
    assert not loader_accepts(text)
    assert list(validator.iter_errors(read_yaml("s.yaml", text))) != []


def test_schema_accepts_the_bike_share_fixture(validator):
    assert list(validator.iter_errors(read_yaml("b.yaml", BIKE_SHARE.read_bytes()))) == []


def test_pure_python_parser_gives_the_same_model(monkeypatch, bike_share):
    import yaml

    monkeypatch.delattr(yaml, "CSafeLoader", raising=False)
    again = load_path(BIKE_SHARE)
    assert again == bike_share
    assert dict(again.model.positions) == dict(bike_share.model.positions)


# --------------------------------------------------------------------------
# The event-based reader builds the same values as PyYAML's own loader

# Strings start with a letter: PyYAML dumps by YAML 1.1 and quotes every string that 1.1 would
# read as something else (on, yes, null, true, ...); strings such as "0e0" or "0o17" are plain in
# 1.1 but numbers in 1.2, a difference the YAML 1.2 tests above pin down on purpose.
_strings = st.builds(
    lambda first, rest: first + rest,
    st.sampled_from("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"),
    st.text(alphabet="abcdefghijklmnopqrstuvwxyz _-:.#'\"0123456789", max_size=12),
)
_scalars = (
    st.none()
    | st.booleans()
    | st.integers(min_value=-(10**12), max_value=10**12)
    | st.floats(allow_nan=False)
    | _strings
    | st.just("")
)
_keys = st.text(alphabet="abcdefghijklmnopqrstuvwxyz_", min_size=1, max_size=8)
_values = st.recursive(
    _scalars,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(_keys, inner, max_size=4),
    max_leaves=25,
)


@settings(max_examples=200, deadline=None)
@given(data=st.dictionaries(_keys, _values, min_size=1, max_size=5), flow=st.sampled_from([False, True, None]))
def test_reader_matches_pyyaml_on_dumped_data(data, flow):
    import yaml

    text = yaml.safe_dump(data, default_flow_style=flow, sort_keys=False)
    assert read_yaml("d.yaml", text) == data == yaml.safe_load(text)


def test_decoding_remembers_the_last_contents_by_identity_only():
    from modeldiff import load

    first, second = b"model: a\n", b"model: b\n"
    assert load.text._decode("a.model.yaml", first) == "model: a\n"
    assert load.text._decode("b.model.yaml", second) == "model: b\n"
    assert load.text._decode("a.model.yaml", first) is load.text._decode("a.model.yaml", first)  # remembered
    # an equal but distinct object is decoded for itself, and a mutable buffer is never remembered
    assert load.text._decode("a.model.yaml", bytes(bytearray(first))) == "model: a\n"
    buffer = bytearray(b"model: c\n")
    assert load.text._decode("c.model.yaml", buffer) == "model: c\n"
    buffer[7:8] = b"d"
    assert load.text._decode("c.model.yaml", buffer) == "model: d\n"


def test_a_remembered_content_is_still_checked_under_another_name():
    # The twin of the test above: the memo is keyed by content and name, so an error names the file asked for.
    from modeldiff import load
    from modeldiff.errors import ModeldiffError

    bad = b"model: a\0\n"
    for name in ("one.model.yaml", "two.model.yaml"):
        with pytest.raises(ModeldiffError, match=name):
            load.text._decode(name, bad)
