"""The JSON Schema explains every key: an editor shows each property's own `description` on hover.

Draft-07 ignores the siblings of a `$ref`, so a described property that reuses a definition keeps the
reference under `allOf` (JSON Schema draft-07, section 8.3, from memory).
"""

from __future__ import annotations

import copy
import io
import json

import jsonschema
import pytest

from modeldiff.cli import main
from modeldiff.load import read_yaml

CONDITIONALS = ("if", "then", "else", "not")  # validation logic, not keys a user writes


def shipped_schema() -> dict:
    out = io.StringIO()
    assert main(["schema"], stdout=out) == 0
    return json.loads(out.getvalue())


def properties_without_description(schema: dict) -> list[str]:
    """Paths of every property (outside if/then/else/not) lacking a non-empty description of its own."""
    missing = []

    def walk(node, path: str) -> None:
        if isinstance(node, list):
            for i, item in enumerate(node):
                walk(item, f"{path}[{i}]")
            return
        if not isinstance(node, dict):
            return
        for key, value in node.items():
            if key in CONDITIONALS:
                continue
            if key == "properties" and isinstance(value, dict):
                for name, prop in value.items():
                    text = prop.get("description") if isinstance(prop, dict) else None
                    if not (isinstance(text, str) and text.strip()):
                        missing.append(f"{path}.properties.{name}")
                    walk(prop, f"{path}.properties.{name}")
            else:
                walk(value, f"{path}.{key}")

    walk(schema, "#")
    return missing


def test_every_property_of_the_schema_has_a_description():
    assert properties_without_description(shipped_schema()) == []


def test_a_property_without_a_description_is_found():  # twin: the walk can fail
    schema = copy.deepcopy(shipped_schema())
    del schema["definitions"]["link"]["properties"]["standby"]["description"]
    schema["definitions"]["column"]["oneOf"][1]["properties"]["unique"]["description"] = " "
    assert properties_without_description(schema) == [
        "#.definitions.column.oneOf[1].properties.unique", "#.definitions.link.properties.standby"]


def test_a_description_beside_a_ref_is_not_used():
    # every property that reuses a definition keeps it under allOf, where draft-07 reads it
    bare = []

    def walk(node, path):
        if isinstance(node, dict):
            if "$ref" in node and len(node) > 1:
                bare.append(path)
            for key, value in node.items():
                walk(value, f"{path}.{key}")
        elif isinstance(node, list):
            for i, item in enumerate(node):
                walk(item, f"{path}[{i}]")

    walk(shipped_schema(), "#")
    assert bare == []


@pytest.mark.parametrize("where, words", [
    (("link", "flow"), ("one-way", "two-way", "filter")),
    (("link", "security_flow"), ("row security", "two-way")),
    (("link", "standby"), ("via", "live")),
    (("link", "cardinality"), ("many-to-one", "one-to-one", "many-to-many")),
    (("table", "kind"), ("fact", "dimension", "bridge", "access")),
    (("table", "history"), ("slowly changing",)),
    (("history", "type"), ("0", "1", "2", "3")),
    (("measure", "via"), ("standby",)),
])
def test_the_keys_that_move_numbers_say_how(where, words):
    definition, name = where
    text = shipped_schema()["definitions"][definition]["properties"][name]["description"].lower()
    assert [w for w in words if w not in text] == []


def test_the_schema_takes_use_alone_and_refuses_use_with_via():
    validator = jsonschema.Draft7Validator(shipped_schema())
    base = {"model": "m", "format": 1, "tables": {"t": {"kind": "fact", "columns": {"a": "integer"}}}}
    for measure, valid in (({"expr": "count(*)", "via": ["l"]}, True), ({"expr": "count(*)", "use": ["l"]}, True),
                           ({"expr": "count(*)", "use": ["l"], "via": ["l"]}, False)):
        doc = {**base, "measures": {"m": measure}}
        assert (list(validator.iter_errors(doc)) == []) is valid, measure


def test_the_described_schema_still_accepts_the_example_and_refuses_a_bad_flow():
    from pathlib import Path

    validator = jsonschema.Draft7Validator(shipped_schema())
    example = Path(__file__).resolve().parent.parent / "examples" / "bikeshare.model.yaml"
    doc = json.loads(json.dumps(read_yaml("example", example.read_bytes())))
    assert list(validator.iter_errors(doc)) == []
    doc["links"]["trips_bike"]["flow"] = "sideways"
    doc["tables"]["trips"]["kind"] = "event"
    assert sorted(e.path[-1] for e in validator.iter_errors(doc)) == ["flow", "kind"]
