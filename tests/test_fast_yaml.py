"""The fast YAML reader (yaml_rs) against the event reader: the same records, findings and positions.

`load.load_files` reads with yaml_rs when it is installed and the text passes
a cheap scan, and falls back to the event reader for anything else; these
tests hold every model file of the repository, and generated ones, to the
event reader's answer (the reference: docs/performance.md).
"""

from __future__ import annotations

import string
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from modeldiff import load
from modeldiff.errors import ModeldiffError

ROOT = Path(__file__).resolve().parent.parent
fast = pytest.importorskip("yaml_rs", reason="the fast reader is optional; without it the event reader reads everything")


def _model_sources() -> list[tuple[str, list[tuple[str, bytes]]]]:
    """Every model file and NAME.model/ folder in tests/ and examples/, as load_files input."""
    found = []
    for base in (ROOT / "tests", ROOT / "examples"):
        for path in sorted(base.rglob("*")):
            if any(part.endswith(".model") for part in path.relative_to(ROOT).parts[:-1]):
                continue  # read with its folder
            if path.is_dir() and path.name.endswith(".model"):
                files = [(str(p.relative_to(path)), p.read_bytes()) for p in sorted(path.rglob("*.y*ml"))]
                if files:
                    found.append((str(path.relative_to(ROOT)), files))
            elif path.is_file() and path.suffix in (".yaml", ".yml"):
                found.append((str(path.relative_to(ROOT)), [(str(path.relative_to(ROOT)), path.read_bytes())]))
    return found


SOURCES = _model_sources()


def _exact(files):
    try:
        return load._exact_load(files)
    except ModeldiffError as exc:
        return str(exc)


def _same(fast_result, exact_result) -> None:
    assert fast_result == exact_result  # records and findings
    assert dict(fast_result.model.positions) == dict(exact_result.model.positions)


def _same_as_exact(files, exact, label: str = "") -> None:
    """The fast reader's model, when it takes the files, and `load_files`' answer or error equal the event reader's."""
    quick = load.fast._fast_load(files)
    if quick is not None:
        assert not isinstance(exact, str), f"{label}: the fast reader accepted files the event reader refuses: {exact}"
        _same(quick, exact)
    try:
        got = load.load_files(files)
    except ModeldiffError as exc:
        assert str(exc) == exact, label
    else:
        _same(got, exact)


def test_every_model_file_reads_the_same_with_both_readers():
    taken = 0
    for label, files in SOURCES:
        quick = load.fast._fast_load(files)
        exact = _exact(files)
        if quick is None:
            continue  # the event reader reads it
        taken += 1
        assert not isinstance(exact, str), f"{label}: the fast reader accepted a file the event reader refuses: {exact}"
        _same(quick, exact)
    # the comparison above means something only if the fast reader took a good share of the files
    assert taken >= len(SOURCES) // 3, (taken, len(SOURCES))


def test_load_files_gives_the_event_readers_answer_or_error_for_every_file():
    for label, files in SOURCES:
        _same_as_exact(files, _exact(files), label)


def test_positions_of_a_fast_read_model_are_read_on_first_use():
    text = (ROOT / "examples" / "bikeshare.model.yaml").read_bytes()
    files = [("bikeshare.model.yaml", text)]
    result = load.load_files(files)
    assert isinstance(result.model.positions, load.positions._LazyPositions)
    assert not result.model.positions.computed
    subject = next(s for s in load._exact_load(files).model.positions if s.startswith("measures.") and s.endswith(".expr"))
    pos = result.model.pos(subject)
    assert result.model.positions.computed
    assert pos == load._exact_load(files).model.pos(subject)
    assert text.decode().split("\n")[pos.line - 1][pos.column - 1:].startswith(
        str(result.model.measures[subject.split(".")[1]].expr)[:5])


def test_switched_off_by_the_environment(monkeypatch):
    text = (ROOT / "examples" / "bikeshare.model.yaml").read_bytes()
    monkeypatch.setenv(load.FAST_READER_ENV, "0")
    assert load.fast._fast_load([("x.model.yaml", text)]) is None
    monkeypatch.delenv(load.FAST_READER_ENV)
    assert load.fast._fast_load([("x.model.yaml", text)]) is not None


BASE = "model: m\nformat: 1\ntables:\n  trips:\n    kind: fact\n    key: id\n    columns: {id: integer, fare: decimal}\n"


@pytest.mark.parametrize("extra", [
    "measures:\n  m: &a {expr: sum(fare), table: trips}\n  n: *a\n",   # anchors and aliases
    "measures:\n  m: !!map {expr: sum(fare), table: trips}\n",      # tags
    "measures:\n  m:\n    <<: {table: trips}\n    expr: sum(fare)\n",  # merge keys
    "measures:\n  ? m\n  : {expr: sum(fare), table: trips}\n",      # complex keys
    "measures:\n  m: {expr: \"sum(fare)\\t\", table: trips}\n",       # escapes
    "measures:\n\tm: {expr: sum(fare), table: trips}\n",            # tabs
    "--- \nmeasures: {}\n",                                          # document markers
])
def test_the_scan_sends_risky_constructs_to_the_event_reader(extra):
    text = BASE + extra
    assert load.fast._fast_unsure(text)
    assert load.fast._fast_load([("x.model.yaml", text)]) is None


def test_the_scan_lets_a_plain_model_through():
    text = BASE + "measures:\n  m: {expr: count(*) * 2, table: trips, where: fare != 0}\n  n:\n    expr: m / nullif(m, 0)\n"
    assert not load.fast._fast_unsure(text)
    assert load.fast._fast_load([("x.model.yaml", text)]) is not None


# Plain scalars on which YAML readers are known to differ (YAML 1.2 core schema vs 1.1 habits), common practice.
SPELLINGS = ["1", "01", "1_0", "0b1", "0o1", "0x1", "+1", "1.0", "1e0", ".inf", ".iNf", "true", "yes", "on", "~",
             "null", "2024-01-01", "12:30", "0B1", "-0x1", "1_", "_1", "'1'", '"1"', "", "[1]", "{}"]
scalar = st.one_of(st.sampled_from(SPELLINGS), st.text(alphabet=string.digits + "._+-eEbBoxXabn:", max_size=6))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(fmt=scalar, history=scalar, description=scalar, unique=scalar, name=st.sampled_from(["fare", "1", "true", "x_1"]))
def test_generated_models_read_the_same_with_both_readers(fmt, history, description, unique, name):
    text = (f"model: m\nformat: {fmt or 1}\ntables:\n  trips:\n    kind: dimension\n    key: id\n"
            f"    natural_key: code\n    history: {{type: {history}, valid_from: a, valid_to: b}}\n"
            f"    columns:\n      id: integer\n      code: text\n      a: date\n      b: date\n"
            f"      {name}: {{type: decimal, unique: {unique}}}\n"
            f"measures:\n  m:\n    table: trips\n    expr: sum(fare)\n    description: {description}\n")
    files = [("x.model.yaml", text)]
    _same_as_exact(files, _exact(files))


def test_environment_switch_name_is_documented():
    docs = (ROOT / "docs" / "performance.md").read_text(encoding="utf-8")
    assert load.FAST_READER_ENV in docs


# Per field: the values the fast builder's shortcuts accept (first, up to the "|" marker), then values
# next to them that they must hand to the general path (which reports them, or reads them the long way).
LINK_VALUES = {
    "from": ["trips.bike_id", "|", "trips.bike_id ", "[trips.bike_id]", "trips", "1", "null"],
    "to": ["bikes.id", "|", "[bikes.id, bikes.code]", "bikes.nope", "1.5"],
    "cardinality": [None, "many-to-one", "one-to-one", "many-to-many", "|", "one-to-many", "1"],
    "flow": [None, "one-way", "two-way", "|", "off", "true"],
    "security_flow": [None, "one-way", "two-way", "|", "both"],
    "standby": [None, "true", "false", "|", "1", "'true'", "yes"],
    "description": [None, "a link", "''", "|", "1", "null"],
}
TABLE_VALUES = {
    "kind": ["dimension", "fact", "bridge", "access", "|", None, "dim", "1"],
    "key": [None, "id", "[id]", "[id, code]", "|", "[]", "1", "bad-name", "[id, 1]"],
    "columns": ["{id: integer, code: text}", "{}", "|", "{id: integer, code: bogus}", "{id: {type: integer}}",
                "{1: integer}", "[id]", None],
    "source": [None, "raw.bikes", "|", "1"],
    "description": [None, "bikes", "|", "true"],
    "natural_key": [None, "|", "code"],
}
MEASURE_VALUES = {
    "table": [None, "trips", "|", "bikes", "1", "null"],
    "expr": ["count(*)", "sum(fare)", "|", "' '", "1", None],
    "where": [None, "fare > 0", "|", "''", "true"],
    "description": [None, "rides", "|", "1"],
    "unit": [None, "EUR", "|", "~"],
    "via": [None, "|", "[trips_bike]"],
}


def _item(values: dict, picks: list[int]) -> str:
    """An item in flow style; a pick below 100 takes an accepted value, above it any value."""
    fields = []
    for (key, options), pick in zip(values.items(), picks):
        accepted = options[: options.index("|")]
        every = [o for o in options if o != "|"]
        value = accepted[pick % len(accepted)] if pick < 100 else every[pick % len(every)]
        if value is not None:
            fields.append(f"{key}: {value}")
    return "{" + ", ".join(fields) + "}"


VALID = {"trips": "{kind: fact, key: id, columns: {id: integer, bike_id: integer, fare: decimal}}",
         "bikes": "{kind: dimension, key: id, columns: {id: integer, code: text}}",
         "link": "{from: trips.bike_id, to: bikes.id}", "measure": "{table: trips, expr: count(*)}"}
picks = st.lists(st.one_of(st.integers(0, 99), st.integers(0, 200)), min_size=7, max_size=7)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(which=st.sampled_from(["table", "link", "measure"]), chosen=picks)
def test_the_fast_builders_shortcuts_agree_with_the_event_reader(which, chosen):
    bikes = _item(TABLE_VALUES, chosen) if which == "table" else VALID["bikes"]
    link = _item(LINK_VALUES, chosen) if which == "link" else VALID["link"]
    measure = _item(MEASURE_VALUES, chosen) if which == "measure" else VALID["measure"]
    text = (f"model: m\nformat: 1\ntables:\n  trips: {VALID['trips']}\n  bikes: {bikes}\n"
            f"links:\n  trips_bike: {link}\nmeasures:\n  rides: {measure}\n")
    files = [("x.model.yaml", text)]
    exact = _exact(files)
    if all(pick < 100 for pick in chosen):
        assert load.fast._fast_load(files) is not None, text  # accepted values only: the shortcut takes it
    _same_as_exact(files, exact)


def _one_field_varied() -> list[tuple[str, str, str | None]]:
    """Every (item kind, field, value) of the tables above; each case varies one field, the rest accepted."""
    cases = []
    for which, values in (("table", TABLE_VALUES), ("link", LINK_VALUES), ("measure", MEASURE_VALUES)):
        for key, options in values.items():
            cases += [(which, key, value) for value in options if value != "|"]
    return cases


@pytest.mark.parametrize("which,key,value", _one_field_varied())
def test_each_field_value_reads_the_same_with_both_readers(which, key, value):
    values = {"table": TABLE_VALUES, "link": LINK_VALUES, "measure": MEASURE_VALUES}[which]
    fields = {k: options[0] for k, options in values.items()}
    fields[key] = value
    item = "{" + ", ".join(f"{k}: {v}" for k, v in fields.items() if v is not None) + "}"
    bikes = item if which == "table" else VALID["bikes"]
    link = item if which == "link" else VALID["link"]
    measure = item if which == "measure" else VALID["measure"]
    text = (f"model: m\nformat: 1\ntables:\n  trips: {VALID['trips']}\n  bikes: {bikes}\n"
            f"links:\n  trips_bike: {link}\nmeasures:\n  rides: {measure}\n")
    files = [("x.model.yaml", text)]
    exact = _exact(files)
    quick = load.fast._fast_load(files)
    accepted = values[key][: values[key].index("|")]
    if value in accepted:
        assert quick is not None, text
    if quick is not None:
        assert not isinstance(exact, str), exact
        _same(quick, exact)


def test_an_equal_measure_is_shared_between_revisions():
    # m is unchanged; n gained a unit; o is the same record written with its keys in another order.
    old = BASE + ("measures:\n  m: {expr: sum(fare), table: trips}\n  n: {expr: count(*), table: trips}\n"
                  "  o: {table: trips, expr: max(fare)}\n")
    new = BASE + ("measures:\n  m: {expr: sum(fare), table: trips}\n  n: {expr: count(*), table: trips, unit: rides}\n"
                  "  o: {expr: max(fare), table: trips}\n")
    first = load.load_files([("old.model.yaml", old)])
    second = load.load_files([("new.model.yaml", new)], first.model.measures)
    assert second.model.measures["m"] is first.model.measures["m"]
    assert second.model.measures["o"] is first.model.measures["o"]
    assert second.model.measures["n"] is not first.model.measures["n"]  # not equal: built anew
    assert second.model.measures["n"].unit == "rides"
    _same(second, load._exact_load([("new.model.yaml", new)]))


def test_no_measure_is_shared_without_a_related_revision():
    # The twin of the test above: read alone, the same text gives records of its own.
    text = BASE + "measures:\n  m: {expr: sum(fare), table: trips}\n"
    first, second = load.load_files([("a.model.yaml", text)]), load.load_files([("b.model.yaml", text)])
    assert second.model.measures["m"] == first.model.measures["m"]
    assert second.model.measures["m"] is not first.model.measures["m"]
