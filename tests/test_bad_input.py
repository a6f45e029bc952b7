"""Bad input: what cannot be read (ModeldiffError, one line) and what does not follow the format (findings).

Each "cannot be read" case has a twin that differs only in the fix and loads;
each finding case lists the complete findings, and the unchanged base model
has none.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

import modeldiff.load as load
from modeldiff.errors import ModeldiffError
from modeldiff.load import LoadResult, load_files, load_path

FIXTURES = Path(__file__).parent / "fixtures" / "load"
NAME = "bikes.model.yaml"

BASE = """\
model: bike_share
format: 1
tables:
  trips:
    kind: fact
    key: trip_key
    columns:
      trip_key: integer
      station_key: integer
      fare: decimal
  stations:
    kind: dimension
    key: station_key
    history: {type: 1}
    columns:
      station_key: integer
      district: text
links:
  trips_station:
    from: trips.station_key
    to: stations.station_key
measures:
  fare_revenue:
    table: trips
    expr: sum(fare)
    flow: {trips_station: two-way}
reports:
  weekly_fares:
    measures: [fare_revenue]
    by: [stations.district]
"""


def load_text(content: str | bytes, name: str = NAME) -> LoadResult:
    return load_files([(name, content)])


def edited(old: str, new: str, text: str = BASE) -> str:
    assert text.count(old) == 1, f"{old!r} must occur once in the base model"
    return text.replace(old, new)


def refusal(content: str | bytes, name: str = NAME) -> str:
    """The one-line message of a file that cannot be read."""
    with pytest.raises(ModeldiffError) as caught:
        load_text(content, name)
    message = str(caught.value)
    assert "\n" not in message
    assert "Traceback" not in message
    assert caught.value.exit_code == 2
    return message


def test_base_model_loads_without_findings():
    result = load_text(BASE)
    assert result.findings == ()
    assert list(result.model.tables) == ["trips", "stations"]


# --------------------------------------------------------------------------
# 1. Input that cannot be read: ModeldiffError "FILE:LINE:COL: what; what to do"

DEEP = "[" * 70 + "]" * 70
SHALLOW = "[" * 50 + "]" * 50


def alias_bomb(levels: int = 9) -> str:
    """The classic 'billion laughs': each level lists the previous one nine times."""
    lines = ['a0: &a0 "lol"']
    for level in range(1, levels + 1):
        lines.append(f"a{level}: &a{level} [" + ", ".join([f"*a{level - 1}"] * 9) + "]")
    return "\n".join(lines) + "\n"


# id -> (bad content, fixed twin, expected message start, words the message must contain)
UNREADABLE = {
    "empty file": ("", BASE, f"{NAME}:1:1: the file is empty", ["model", "format"]),
    "only comments": ("# nothing yet\n\n", BASE, f"{NAME}:1:1: the file is empty", []),
    "empty document": ("---\n", BASE, f"{NAME}:1:1: the file is empty", []),
    "NUL byte": (
        BASE.encode().replace(b"kind: fact", b"kind: f\0act"),
        BASE.encode(),
        f"{NAME}:5:12: binary content",
        ["UTF-8"],
    ),
    "invalid UTF-8": (
        BASE.encode().replace(b"fare: decimal", b"f\xe9re: decimal"),
        BASE.encode().replace(b"fare: decimal", "fére: decimal".encode()),
        f"{NAME}:10:8: not valid UTF-8",
        ["save the file as UTF-8"],
    ),
    "control character": (edited("sum(fare)", "sum(\x01fare)"), BASE, f"{NAME}:25:15: a control character", []),
    "unclosed bracket": (
        edited("by: [stations.district]", "by: [stations.district"),
        BASE,
        f"{NAME}:31:1: malformed YAML",
        ["fix the YAML syntax"],
    ),
    "bad indentation": (
        edited("    key: station_key\n", "    key: station_key\n   kind: x\n"),
        BASE,
        f"{NAME}:14:4: malformed YAML",
        [],
    ),
    "tab indentation": (
        edited("    kind: dimension", "\tkind: dimension"),
        edited("    kind: dimension", "    kind: dimension"),
        f"{NAME}:12:1: a tab is used for indentation",
        ["spaces"],
    ),
    "tab after spaces": (
        edited("      district: text", "    \t  district: text"),
        BASE,
        f"{NAME}:17:5: a tab is used for indentation",
        [],
    ),
    "top level is a list": ("- model: m\n- format: 1\n", BASE, f"{NAME}:1:1: the top level is a list, not a mapping", []),
    "top level is text": ("just some words\n", BASE, f"{NAME}:1:1: the top level is 'just some words'", []),
    "missing model": (edited("model: bike_share\n", ""), BASE, f"{NAME}:1:1: `model` is missing", ["add `model: NAME`"]),
    "model not text": (edited("model: bike_share", "model: [a]"), BASE, f"{NAME}:1:8: `model` must be", []),
    "missing format": (edited("format: 1\n", ""), BASE, f"{NAME}:1:1: `format` is missing", ["`format: 1`"]),
    "format 2": (edited("format: 1", "format: 2"), BASE, f"{NAME}:2:9: `format` is the number 2", ["format 1"]),
    "format as text": (edited("format: 1", "format: '1'"), BASE, f"{NAME}:2:9: `format` is '1'", []),
    "duplicate key": (
        edited("      fare: decimal\n", "      fare: decimal\n      fare: integer\n"),
        BASE,
        f"{NAME}:11:7: duplicate key 'fare' (first at line 10, again at line 11)",
        ["remove or rename"],
    ),
    "duplicate table": (
        BASE + "tables:\n  other: {kind: fact, columns: {}}\n",
        BASE,
        f"{NAME}:31:1: duplicate key 'tables' (first at line 3, again at line 31)",
        [],
    ),
    "too deep": (edited("sum(fare)", DEEP), edited("sum(fare)", SHALLOW.replace("[]", "[x]")), f"{NAME}:25:72: nesting is deeper than 64", []),
    "alias bomb": (alias_bomb(), "a0: &a0 x\na1: [*a0, *a0]\n" + BASE, f"{NAME}:", ["alias bomb"]),
    "undefined alias": (edited("sum(fare)", "*nowhere"), BASE, f"{NAME}:25:11: alias '*nowhere' has no matching anchor", []),
    "recursive alias": ("a: &x [1, *x]\n", BASE, f"{NAME}:1:11: alias '*x' refers to the collection it is in", []),
    "two documents": (BASE + "---\nmodel: other\n", BASE + "...\n", f"{NAME}:31:1: a second YAML document", []),
    "unknown tag": (edited("sum(fare)", "!!python/object:os.system x"), BASE, f"{NAME}:25:11: unsupported YAML tag '!!python/object:os.system'", []),
    "wrong standard tag": (edited("format: 1", "format: !!int one"), BASE, f"{NAME}:2:9: 'one' is not a valid !!int", []),
    "mapping as key": (edited("  trips:\n", "  ? [trips]\n  :\n"), BASE, f"{NAME}:4:5: a mapping key is a list or mapping", []),
    "bad merge key": (edited("    key: trip_key\n", "    key: trip_key\n    <<: 3\n"), BASE, f"{NAME}:7:9: a '<<' merge key", []),
}


@pytest.mark.parametrize("case", sorted(UNREADABLE))
def test_unreadable_input_gives_one_line(case):
    bad, _, start, words = UNREADABLE[case]
    message = refusal(bad)
    assert message.startswith(start), message
    for word in words:
        assert word in message, message


@pytest.mark.parametrize("case", sorted(UNREADABLE))
def test_fixed_twin_of_unreadable_input_loads(case):
    _, good, _, _ = UNREADABLE[case]
    load_text(good)  # does not raise


def test_tab_message_says_tab_not_just_syntax():
    message = refusal(edited("    kind: fact", "\tkind: fact"))
    assert "tab" in message and "malformed" not in message


def test_alias_bomb_is_refused_without_expanding():
    # No timing assertion: the test only shows it is refused, by count, not by running out of memory.
    message = refusal(alias_bomb(levels=9))
    assert re.match(rf"{re.escape(NAME)}:\d+:\d+: aliases expand to more than 100000 values", message), message


def test_very_deep_nesting_is_refused_with_the_same_message():
    message = refusal("model: m\nformat: 1\ntables: " + "[" * 5000 + "]" * 5000 + "\n")
    assert re.match(rf"{re.escape(NAME)}:3:\d+: nesting is deeper than 64 levels", message), message


def test_deep_block_nesting_is_refused():
    nested = "".join("  " * level + f"k{level}:\n" for level in range(80))
    message = refusal(BASE + "extra:\n" + "\n".join("  " + line for line in nested.splitlines()) + "\n")
    assert message.startswith(f"{NAME}:95:") and "nesting is deeper than 64 levels" in message, message


def test_modest_aliases_stay_under_the_budget():
    text = alias_bomb(levels=4) + BASE  # 9**4 = 6561 values
    assert load_text(text).model.name == "bike_share"


def test_oversized_file_is_refused(monkeypatch):
    monkeypatch.setattr(load.text, "MAX_FILE_BYTES", len(BASE) - 1)
    message = refusal(BASE)
    assert message.startswith(f"{NAME}: file is ") and "split it into a NAME.model/ folder" in message


def test_file_at_the_size_limit_loads(monkeypatch):
    monkeypatch.setattr(load.text, "MAX_FILE_BYTES", len(BASE))
    assert load_text(BASE).findings == ()


def test_oversized_file_on_disk_is_refused_before_reading(monkeypatch, tmp_path):
    path = tmp_path / NAME
    path.write_text(BASE)
    monkeypatch.setattr(load.text, "MAX_FILE_BYTES", 10)
    with pytest.raises(ModeldiffError, match=rf"^{re.escape(str(path))}: file is {len(BASE)} bytes, over the 10 bytes limit"):
        load_path(path)


def test_missing_path_is_refused(tmp_path):
    missing = tmp_path / "nothing.model.yaml"
    with pytest.raises(ModeldiffError) as caught:
        load_path(missing)
    assert str(caught.value) == (
        f"{missing}: no such file or folder; give the path of a NAME.model.yaml file or a NAME.model/ folder"
    )


def test_existing_path_loads(tmp_path):
    path = tmp_path / NAME
    path.write_text(BASE)
    assert load_path(path).model.name == "bike_share"


def test_folder_not_named_model_is_refused(tmp_path):
    folder = tmp_path / "models"
    folder.mkdir()
    (folder / "a.yaml").write_text(BASE)
    with pytest.raises(ModeldiffError, match=r"is a folder but not a NAME\.model/ folder"):
        load_path(folder)


def test_model_folder_with_yaml_files_loads(tmp_path):
    folder = tmp_path / "bikes.model"
    folder.mkdir()
    (folder / "a.yaml").write_text(BASE)
    assert load_path(folder).findings == ()


def test_model_folder_without_yaml_files_is_refused(tmp_path):
    folder = tmp_path / "bikes.model"
    folder.mkdir()
    (folder / "notes.txt").write_text(BASE)
    with pytest.raises(ModeldiffError, match=r"holds no \.yaml or \.yml files"):
        load_path(folder)


def test_no_files_at_all_is_refused():
    with pytest.raises(ModeldiffError, match="no model files were given"):
        load_files([])


def test_folder_without_model_names_every_file():
    files = [("m/a.yaml", "format: 1\ntables: {}\n"), ("m/b.yaml", "links: {}\n")]
    with pytest.raises(ModeldiffError) as caught:
        load_files(files)
    assert str(caught.value).startswith("m/a.yaml (and the other files of the folder):1:1: `model` is missing")


def test_folder_disagreeing_on_format_is_refused():
    files = [("m/a.yaml", "model: m\nformat: 1\ntables: {}\n"), ("m/b.yaml", "model: m\nformat: 2\n")]
    message = str(pytest.raises(ModeldiffError, load_files, files).value)
    assert message.startswith("m/b.yaml:2:9: `format` is the number 2 here but the number 1 in m/a.yaml:2")


def test_folder_defining_a_measure_twice_names_both_files():
    files = [
        ("m/a.yaml", "model: m\nformat: 1\ntables: {}\nmeasures:\n  n: {expr: count(*)}\n"),
        ("m/b.yaml", "measures:\n  x: {expr: a}\n  n: {expr: count(*)}\n"),
    ]
    message = str(pytest.raises(ModeldiffError, load_files, files).value)
    assert message == "m/b.yaml:3:3: measure 'n' is defined in both m/a.yaml:5 and m/b.yaml:3; keep one definition"


def test_folder_defining_different_measures_loads():
    files = [
        ("m/a.yaml", "model: m\nformat: 1\ntables: {}\nmeasures:\n  n: {expr: count(*)}\n"),
        ("m/b.yaml", "measures:\n  x: {expr: a}\n"),
    ]
    assert list(load_files(files).model.measures) == ["n", "x"]


def test_folder_fixture_with_conflict_is_refused_and_clean_folder_loads():
    with pytest.raises(ModeldiffError, match=r"table 'trips' is defined in both .*a\.yaml:4 and .*b\.yaml:5"):
        load_path(FIXTURES / "conflict.model")
    assert load_path(FIXTURES / "folder.model").findings == ()


# --------------------------------------------------------------------------
# 2. Readable but not following the format: a Model plus invalid-model findings

# id -> (old text, new text, [(subject, line, column)] of every expected finding)
NOT_THE_FORMAT = {
    "unknown table key": ("    key: trip_key\n", "    key: trip_key\n    colour: red\n", [("tables.trips.colour", 7, 5)]),
    "unknown top key": ("measures:\n", "dashboards: {}\nmeasures:\n", [("dashboards", 22, 1)]),
    "bad table name": ("  stations:\n", "  2stations:\n", [("tables.2stations", 11, 3)]),
    "bad column name": ("      district: text", "      district-name: text", [("tables.stations.columns.district-name", 17, 7)]),
    "number as name": ("      district: text", "      2024: text", [("tables.stations.columns.2024", 17, 7)]),
    "bad kind": ("    kind: dimension", "    kind: dim", [("tables.stations.kind", 12, 11)]),
    "kind as list": ("    kind: dimension", "    kind: [dimension]", [("tables.stations.kind", 12, 11)]),
    "missing kind": ("    kind: dimension\n", "", [("tables.stations.kind", 11, 3)]),
    "bad column type": ("      fare: decimal", "      fare: money", [("tables.trips.columns.fare", 10, 13)]),
    "column type number": ("      fare: decimal", "      fare: 12", [("tables.trips.columns.fare", 10, 13)]),
    "unique not bool": ("      fare: decimal", "      fare: {type: decimal, unique: 'yes'}", [("tables.trips.columns.fare.unique", 10, 37)]),
    "columns a list": (
        "      station_key: integer\n      district: text\n",
        "      - station_key\n",
        [("tables.stations.columns", 16, 7)],
    ),
    "key a mapping": ("    key: trip_key", "    key: {a: 1}", [("tables.trips.key", 6, 10)]),
    "history type 5": ("history: {type: 1}", "history: {type: 5}", [("tables.stations.history.type", 14, 21)]),
    "history type text": ("history: {type: 1}", "history: {type: two}", [("tables.stations.history.type", 14, 21)]),
    "cardinality": (
        "    to: stations.station_key\n",
        "    to: stations.station_key\n    cardinality: one-to-many\n",
        [("links.trips_station.cardinality", 22, 18)],
    ),
    "flow": ("    to: stations.station_key\n", "    to: stations.station_key\n    flow: both\n", [("links.trips_station.flow", 22, 11)]),
    "security flow": (
        "    to: stations.station_key\n",
        "    to: stations.station_key\n    security_flow: true\n",
        [("links.trips_station.security_flow", 22, 20)],
    ),
    "standby text": ("    to: stations.station_key\n", "    to: stations.station_key\n    standby: maybe\n", [("links.trips_station.standby", 22, 14)]),
    "from without column": ("    from: trips.station_key", "    from: trips", [("links.trips_station.from", 20, 11)]),
    "to with schema": ("    to: stations.station_key", "    to: dw.stations.station_key", [("links.trips_station.to", 21, 9)]),
    "lists of different length": (
        "    from: trips.station_key",
        "    from: [trips.station_key, trips.fare]",
        [("links.trips_station", 21, 9)],
    ),
    "from of two tables": (
        "    from: trips.station_key\n    to: stations.station_key",
        "    from: [trips.station_key, stations.fare]\n    to: [stations.station_key, stations.district]",
        [("links.trips_station.from", 20, 11)],
    ),
    "link missing to": ("    to: stations.station_key\n", "", [("links.trips_station.to", 19, 3)]),
    "measure without expr": ("    expr: sum(fare)\n", "", [("measures.fare_revenue", 23, 3)]),
    "expr not text": ("    expr: sum(fare)", "    expr: [sum(fare)]", [("measures.fare_revenue.expr", 25, 11)]),
    "flow override value": ("{trips_station: two-way}", "{trips_station: both-ways}", [("measures.fare_revenue.flow.trips_station", 26, 27)]),
    "via not a list": ("    expr: sum(fare)\n", "    expr: sum(fare)\n    via: trips_station\n", [("measures.fare_revenue.via", 26, 10)]),
    "report by without table": ("by: [stations.district]", "by: [district]", [("reports.weekly_fares.by", 30, 10)]),
    "report measure name": ("measures: [fare_revenue]", "measures: [fare revenue]", [("reports.weekly_fares.measures", 29, 16)]),
}


def expected_result(case: str) -> tuple[LoadResult, list[tuple[str, int, int]]]:
    old, new, expected = NOT_THE_FORMAT[case]
    return load_text(edited(old, new)), expected


@pytest.mark.parametrize("case", sorted(NOT_THE_FORMAT))
def test_format_violations_become_findings_at_their_position(case):
    result, expected = expected_result(case)
    found = [(f.subject, f.pos.line, f.pos.column) for f in result.findings]
    assert found == expected
    for finding in result.findings:
        assert (finding.rule, finding.severity, finding.pos.file) == ("invalid-model", "error", NAME)
        assert "\n" not in finding.message


@pytest.mark.parametrize("case", sorted(NOT_THE_FORMAT))
def test_format_violations_still_give_a_model(case):
    result, _ = expected_result(case)
    assert result.model.name == "bike_share"
    assert "trips" in result.model.tables


def test_bad_enum_message_says_expected_and_found_and_default():
    result = load_text(edited("    kind: dimension", "    kind: dim"))
    (finding,) = result.findings
    assert finding.message == (
        "tables.stations.kind: expected one of fact, dimension, bridge, access, found 'dim' (read as fact)"
    )
    assert result.model.tables["stations"].kind == "fact"


def test_unknown_key_message_suggests_the_close_key():
    result = load_text(edited("    columns:\n      trip_key", "    colums:\n      trip_key"))
    messages = {f.subject: f.message for f in result.findings}
    assert messages["tables.trips.colums"] == "unknown key 'colums' in table 'trips' (ignored); did you mean `columns`?"
    assert messages["tables.trips.columns"] == "tables.trips: `columns` is missing; expected a mapping"


def test_bad_items_are_dropped_or_defaulted():
    text = edited("    expr: sum(fare)\n", "")
    text = edited("      fare: decimal", "      fare: money", text)
    text = edited("    from: trips.station_key", "    from: trips", text)
    text = edited("  stations:\n", "  2stations:\n", text)
    model = load_text(text).model
    assert model.measures == {}
    assert model.links == {}
    assert model.tables["trips"].columns["fare"].type == "text"
    assert list(model.tables) == ["trips"]


def test_link_end_lists_of_one_table_load():
    text = edited(
        "    from: trips.station_key\n    to: stations.station_key",
        "    from: [trips.station_key, trips.fare]\n    to: [stations.station_key, stations.district]",
    )
    result = load_text(text)
    assert result.findings == ()
    link = result.model.links["trips_station"]
    assert (link.from_columns, link.to_columns) == (("station_key", "fare"), ("station_key", "district"))


def test_references_to_unknown_names_are_not_the_loaders_business():
    # broken-reference belongs to check.py
    text = edited("    to: stations.station_key", "    to: riders.rider_key")
    text = edited("measures: [fare_revenue]", "measures: [no_such_measure]", text)
    assert load_text(text).findings == ()


def test_findings_are_sorted_by_position():
    text = edited("      fare: decimal", "      fare: money")
    text = edited("    kind: dimension", "    kind: dim", text)
    text = edited("    key: trip_key\n", "    key: trip_key\n    colour: x\n", text)
    lines = [f.pos.line for f in load_text(text).findings]
    assert lines == sorted(lines) and len(lines) == 3
