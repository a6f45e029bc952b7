"""Model.positions: where each subject is written, kept as tuples and made into Pos records on first use."""

from __future__ import annotations

from typing import Any, Iterator, Mapping, Sequence

from modeldiff.model import SECTIONS, LazyMapping, Pos
from modeldiff.util import paused_gc
from modeldiff.load.text import _decode
from modeldiff.load.events import YamlMap, _NOTHING, _key_maps
from modeldiff.load.documents import _Document


_At = tuple  # (file, line, column): a position before it becomes a Pos


class _Positions(Mapping):
    """Model.positions: Pos records made on first use from (file, line, column) tuples."""

    __slots__ = ("_raw", "_made")

    def __init__(self, raw: dict[str, _At]) -> None:
        self._raw = raw
        self._made: dict[str, Pos] = {}

    def __getitem__(self, subject: str) -> Pos:
        pos = self._made.get(subject)
        if pos is None:
            pos = self._made[subject] = Pos(*self._raw[subject])
        return pos

    def __iter__(self) -> Iterator[str]:
        return iter(self._raw)

    def __len__(self) -> int:
        return len(self._raw)

    def __repr__(self) -> str:
        return f"<{len(self._raw)} positions>"


class _LazyPositions(LazyMapping):
    """Model.positions of a fast-read model: the event reader reads them on first use."""

    __slots__ = ()

    def __init__(self, files: Sequence[tuple[str, bytes | str]]) -> None:
        files = tuple(files)
        super().__init__(lambda: _read_positions(files), "positions")


def _read_positions(files: Sequence[tuple[str, bytes | str]]) -> Mapping[str, Pos]:
    with paused_gc():
        docs = [_Document(name, _key_maps(name, _decode(name, content))) for name, content in files]
        return _Positions(_positions_of(docs))


def _positions_of(docs: list[_Document]) -> dict[str, _At]:
    """Model.positions of a model without findings, from the event reader's values alone.

    The same subjects `_RecordBuilder` records on such a model, without
    building records (tests hold the two to the same answer on every model
    file): a named item points at its name; a field and an entry of a
    table-keyed map at its value; a history's `type` is not recorded.
    """
    found: dict[str, _At] = {}
    first = next(doc for doc in docs if "model" in doc.top)
    found["model"] = _value_pos(first.top, "model")
    for section in SECTIONS:
        for doc in docs:
            items = doc.top.get(section, _NOTHING) if isinstance(doc.top, dict) else _NOTHING
            if items is _NOTHING:
                continue
            found[section] = _value_pos(doc.top, section)
            if not isinstance(items, YamlMap):
                continue
            for name, fields in items.items():
                subject = f"{section}.{name}"
                found[subject] = _key_pos(items, name)
                if isinstance(fields, YamlMap):
                    _field_positions(found, subject, fields, section)
    return found


# Fields whose value is a map of entries each recorded at its value (a table-keyed map, or link -> flow).
_ENTRY_MAPS = frozenset({"flow", "where", "filters", "variant"})


def _field_positions(found: dict[str, _At], subject: str, fields: YamlMap, section: str) -> None:
    for key, value in fields.items():
        here = f"{subject}.{key}"
        found[here] = _value_pos(fields, key)
        if not isinstance(value, YamlMap):
            continue
        if key in _ENTRY_MAPS:
            for entry in value:
                found[f"{here}.{entry}"] = _value_pos(value, entry)
        elif section == "tables" and key == "columns":
            for column, spec in value.items():
                found[f"{here}.{column}"] = _key_pos(value, column)
                if isinstance(spec, YamlMap):
                    for column_key in spec:
                        found[f"{here}.{column}.{column_key}"] = _value_pos(spec, column_key)
        elif section == "tables" and key == "history":
            for history_key, history_value in value.items():
                if history_key != "type":
                    found[f"{here}.{history_key}"] = _value_pos(value, history_key)
                if history_key == "previous" and isinstance(history_value, YamlMap) and "column" in history_value:
                    found[f"{here}.previous.column"] = _value_pos(history_value, "column")
        elif section == "variants" and key == "options":
            for option, option_fields in value.items():
                option_subject = f"{here}.{option}"
                found[option_subject] = _key_pos(value, option)
                if isinstance(option_fields, YamlMap):
                    _field_positions(found, option_subject, option_fields, "options")


def _key_pos(mapping: YamlMap, key: Any) -> _At:
    at = mapping.at[key]
    return (mapping.file, at[0], at[1])


def _value_pos(mapping: YamlMap, key: Any) -> _At:
    at = mapping.at[key]
    return (mapping.file, at[2], at[3])
