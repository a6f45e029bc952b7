"""The fast reader: a compiled YAML 1.2 parser for the common case, records without positions or findings."""

from __future__ import annotations

import os
import re
from typing import Any, Mapping, Sequence

from modeldiff.errors import ModeldiffError
from modeldiff.model import (
    CARDINALITIES,
    FLOWS,
    NO_OVERRIDES,
    TABLE_KINDS,
    Column,
    Link,
    Measure,
    Pos,
    Table,
)
from modeldiff.load.text import _COLREF, _NAME, _NAME_PATTERN, _decode
from modeldiff.load.events import YamlList, YamlMap, _NOTHING
from modeldiff.load.documents import _Document, _model_identity
from modeldiff.load.positions import _At, _LazyPositions
from modeldiff.load.records import (
    LoadResult,
    _COLUMN_TYPE_SET,
    _LINK_PLAIN_KEYS,
    _MEASURE_TEXT_KEYS,
    _RecordBuilder,
    _TABLE_PLAIN_KEYS,
)


# --------------------------------------------------------------------------
# The fast reader: a compiled YAML 1.2 parser for the common case, positions on demand
#
# `yaml_rs` (docs/performance.md says why this one) builds plain values about
# six times as fast as the event loop above, but keeps no positions and differs
# from the YAML 1.2 core schema on a few plain scalars (`1_000`, `0b101`). So
# it is used only when a cheap scan of the text finds none of the constructs
# where the two readers could differ (tags, anchors, aliases, merge keys,
# directives, document markers, complex keys, escapes, tabs, carriage returns,
# a `format` or `type` that is not plain digits or letters, very deep nesting),
# and only when the records come out without a single finding. Anything else,
# including every error, goes to the event reader, which reports it exactly.
# Positions are then read from the parser's events the first time one is asked for.

FAST_READER_ENV = "MODELDIFF_FAST_YAML"  # "0": always use the event reader

_NODE_INDICATORS = "-?:,[{"  # after these (and spaces) a new node starts
_COMPACT_PAIR = re.compile(r"-[ ]+[-?][ ]")  # a compact collection right inside another (rare: checked further)
_COMPACT_RUN = re.compile(r"(?:[-?][ ]+){16}")  # many compact collections on one line
_COMPLEX_KEY = re.compile(r"^[ ]*\?(?:[ ]|$)", re.MULTILINE)
# Only `format` and a history's `type` accept a number; the readers differ on some
# spellings of numbers (`0b1`, `1_0`), so those two values must be plain digits.
_NUMBER_FIELDS = tuple(re.compile(key + r"['\"]?[ ]*:\s*([^\s,\[\]{}#'\"]*)") for key in ("format", "type"))


def _fast_unsure(text: str) -> bool:
    """Whether the text uses a construct on which the fast reader might differ from the event reader.

    Cheap and conservative: a false alarm only costs speed.
    """
    if "\t" in text or "\r" in text or "\\" in text or "<<" in text:  # tabs, escapes, merge keys
        return True
    if text.startswith(("%", "---", "...")) or any(mark in text and "\n" + mark in text for mark in ("%", "---", "...")):
        return True  # directives, document markers (each mark looked for alone first: it is rare, a newline is not)
    if "\n" + " " * 200 in text or (_COMPACT_PAIR.search(text) and _COMPACT_RUN.search(text)):
        return True  # nesting far deeper than a model's
    if "?" in text and _COMPLEX_KEY.search(text):
        return True
    if _node_mark(text):
        return True
    for pattern in _NUMBER_FIELDS:
        for match in pattern.finditer(text):
            value = match.group(1)
            if value and not (value.isdigit() or value.isalpha()):
                return True
    return False


def _node_mark(text: str) -> bool:
    """Whether an anchor, alias or tag mark (`&`, `*`, `!`) stands where a node starts.

    That is: after only spaces since the text's start, a line's start or one of
    `_NODE_INDICATORS`. Each mark is found with `str.find`; one right after any
    other character (the `*` of `count(*)`) is passed over at once.
    """
    for mark in "&*!":
        index = text.find(mark)
        while index >= 0:
            before = index - 1
            if before < 0 or text[before] in _MARK_NEIGHBOURS:
                while before >= 0 and text[before] == " ":
                    before -= 1
                if before < 0 or text[before] in _NODE_INDICATORS or text[before] == "\n":
                    return True
            index = text.find(mark, index + 1)
    return False


_MARK_NEIGHBOURS = " \n" + _NODE_INDICATORS  # the characters after which a mark may start a node


class _Fallback(Exception):
    """The fast reader met something that only the event reader reports exactly."""


def _no_position(mapping, key):
    """The fast reader keeps no positions: a problem that needs one is the event reader's to word."""
    raise _Fallback


def _fast_reader():
    """yaml_rs's `loads`, or None when it is not installed or switched off."""
    if os.environ.get(FAST_READER_ENV, "1") == "0":
        return None
    try:
        import yaml_rs
    except ImportError:
        return None
    policy = yaml_rs.DuplicateKeyPolicy.Error

    def loads(text: str) -> Any:
        return yaml_rs.loads(text, parse_datetime=False, duplicate_key_policy=policy)

    return loads


def _fast_values(loads, name: str, content: bytes | str) -> dict | None:
    """The top-level mapping of one file by the fast reader, or None when the event reader must decide."""
    try:
        text = _decode(name, content)
    except ModeldiffError:
        return None
    if _fast_unsure(text):
        return None
    try:
        top = loads(text)
    except Exception:  # noqa: BLE001 - any complaint of the fast reader: the event reader words it
        return None
    return top if type(top) is dict else None


def _plain_names(value: Any) -> tuple[str, ...] | None:
    """A table's `key` as `_get_columns` reads it when it is well formed (absent: ()); else None."""
    if value is _NOTHING:
        return ()
    if value.__class__ is str:
        return (value,) if _NAME.match(value) else None
    if value.__class__ is list and value and all(v.__class__ is str and _NAME.match(v) for v in value):
        return tuple(value)
    return None


def _plain_columns(columns: dict, made: dict[tuple[str, str], Column]) -> dict[str, Column] | None:
    """Columns written as `name: type` only, as `_columns` reads them; else None.

    `made` holds the columns made so far by (name, type): a column is an
    immutable record, and most tables repeat a few (`id: integer`), so equal
    ones are made once and shared.
    """
    records = {}
    for name, value in columns.items():
        if value.__class__ is not str:
            return None
        found = made.get((name, value))
        if found is None:
            if not (name.__class__ is str and value in _COLUMN_TYPE_SET and _NAME.match(name)):
                return None
            found = made[(name, value)] = Column(name, value)
        records[name] = found
    return records

_IS_TEXT = str.__instancecheck__
_NAME_LINES = re.compile(rf"(?:{_NAME_PATTERN}\n)*{_NAME_PATTERN}")


def _plain_names_only(items: dict) -> bool:
    """Whether every key is text and a plain name (`_NAME`): one pattern over the keys, one per line."""
    if not items:
        return True
    if not all(map(_IS_TEXT, items)):
        return False
    lines = "\n".join(items)
    return lines.count("\n") == len(items) - 1 and _NAME_LINES.fullmatch(lines) is not None
_MEASURE_FIELDS = ("name", "expr", "table", "where", "overrides", "description", "unit", "owner", "folder")


def _measure_maker():
    """A maker of Measure records without overrides from a name and a dict of text fields (keys among
    `_MEASURE_TEXT_KEYS`), nearly twice as fast as the dataclass's own __init__.

    It gives the record a filled field dict directly, which is the same record
    only while Measure has exactly these fields and no __post_init__ or
    __slots__: otherwise (checked once, here) the class itself is called.
    """
    import dataclasses

    if tuple(f.name for f in dataclasses.fields(Measure)) != _MEASURE_FIELDS or hasattr(Measure, "__post_init__") \
            or hasattr(Measure, "__slots__"):
        return lambda name, fields: Measure(name=name, **fields)
    new, set_field = object.__new__, object.__setattr__
    blank = dict.fromkeys(_MEASURE_FIELDS)
    blank["overrides"] = NO_OVERRIDES

    def make(name: str, fields: dict[str, str]) -> Measure:
        own = blank.copy()  # every field in the class's order, then this measure's values
        own.update(fields)
        own["name"] = name
        record = new(Measure)
        set_field(record, "__dict__", own)  # (a frozen record refuses plain assignment)
        return record

    return make


_plain_measure = _measure_maker()


class _NoPositions(dict):
    """The fast builder's positions: none are kept, and every one asked for is unknown."""

    def __missing__(self, subject: str) -> None:
        return None


class _FastBuilder(_RecordBuilder):
    """The record builder over the fast reader's plain values: no positions, and no findings.

    Any finding, which would need a position, sends the whole model back to
    the event reader (`_Fallback`); so a model it builds is exactly the one the
    event reader would build, without findings.
    """

    def __init__(self, files: Sequence[tuple[str, bytes | str]], shared: Mapping[str, Measure] | None = None) -> None:
        super().__init__()
        self.files = files
        self.positions = _NoPositions()
        self.shared = shared or None  # see load_files
        self.good_tables: set[str] = set()  # tables of measures whose names were found well formed
        self.columns: dict[tuple[str, str], Column] = {}  # plain columns made so far (`_plain_columns`)

    def _good_table(self, table: str) -> bool:
        if _NAME.match(table):
            self.good_tables.add(table)
            return True
        return False

    def _model_positions(self) -> Mapping[str, Pos]:
        return _LazyPositions(self.files)

    def _section(self, docs: list[_Document], section: str, build_item) -> dict[str, Any]:
        records: dict[str, Any] = {}
        for doc in docs:
            items = self._get_map(doc.top, section, section)
            if items is None:
                continue
            if not _plain_names_only(items) or (records and not records.keys().isdisjoint(items)):
                raise _Fallback  # a bad name, or one defined in two files
            if build_item == self._measure:  # most of a large model: its own loop, without a call per item
                self._measures(items, records)
                continue
            prefix = section + "."
            for name, value in items.items():
                record = build_item(name, value, prefix + name, items)
                if record is not None:
                    records[name] = record
        return records

    def _measures(self, items: dict[str, Any], records: dict[str, Any]) -> None:
        """The common measure (text fields only) made directly, the same record the general path makes; others by it.

        With `shared`, a measure equal to the one of the same name there is that record.
        """
        good, shared, text_keys, is_text, make = self.good_tables, self.shared, _MEASURE_TEXT_KEYS, _IS_TEXT, _plain_measure
        for name, value in items.items():
            if value.__class__ is dict and "expr" in value and value.keys() <= text_keys \
                    and all(map(is_text, value.values())):  # (the fast reader makes no subclass of str)
                get = value.get
                table, where = get("table"), get("where")
                if value["expr"].strip() and (table is None or table in good or self._good_table(table)) \
                        and (where is None or where.strip()):
                    found = make(name, value)
                    if shared is not None:
                        twin = shared.get(name)
                        if twin is not None and twin == found:
                            found = twin
                    records[name] = found
                    continue
            record = self._measure(name, value, "measures." + name, items)
            if record is not None:
                records[name] = record

    def _table(self, name: str, value: Any, subject: str, parent: YamlMap) -> Table | None:
        """The common table (kind, key, plain column types, texts) without the general path's bookkeeping."""
        if value.__class__ is dict and value.keys() <= _TABLE_PLAIN_KEYS:
            kind, key, columns = value.get("kind"), value.get("key", _NOTHING), value.get("columns")
            if (kind.__class__ is str and kind in TABLE_KINDS and columns.__class__ is dict
                    and all(v.__class__ is str for k, v in value.items() if k in ("source", "description"))):
                keys = _plain_names(key)
                built = _plain_columns(columns, self.columns)
                if keys is not None and built is not None:
                    return Table(name, kind, keys, built, source=value.get("source"),
                                 description=value.get("description"))
        return super()._table(name, value, subject, parent)

    def _link(self, name: str, value: Any, subject: str, parent: YamlMap) -> Link | None:
        """The common link (one column each way, known words) without the general path's bookkeeping."""
        if value.__class__ is dict and value.keys() <= _LINK_PLAIN_KEYS:
            ends = value.get("from"), value.get("to")
            if ends[0].__class__ is str and ends[1].__class__ is str:
                start, end = _COLREF.match(ends[0]), _COLREF.match(ends[1])
                get = value.get
                cardinality, flow = get("cardinality", "many-to-one"), get("flow", "one-way")
                security, standby = get("security_flow", "one-way"), get("standby", False)
                description = get("description", "")  # present, it must be text (null is a finding)
                if (start and end and cardinality.__class__ is str and cardinality in CARDINALITIES
                        and flow.__class__ is str and flow in FLOWS and security.__class__ is str and security in FLOWS
                        and (standby is True or standby is False) and description.__class__ is str):
                    return Link(name, start.group(1), (start.group(2),), end.group(1), (end.group(2),), cardinality,
                                flow, security, standby, get("description"))
        return super()._link(name, value, subject, parent)

    def _field(self, fields: YamlMap, key: str, subject: str) -> tuple[Any, _At | None]:
        return fields.get(key, _NOTHING), None

    def _bad(self, subject: str, at: _At, message: str) -> None:
        raise _Fallback

    def _warn(self, subject: str, at: _At, message: str) -> None:
        raise _Fallback

    def _old_spelling(self, fields: YamlMap, old: str, subject: str) -> str:
        raise _Fallback  # a finding either way, which needs positions

    def _defined_twice(self, section: str, name: str, first: _At, pos: _At) -> ModeldiffError:
        raise _Fallback

    @staticmethod
    def _pos_key(mapping: YamlMap, key: Any) -> _At:
        return None

    @staticmethod
    def _pos_value(mapping: YamlMap, key: Any) -> _At:
        return None

    @staticmethod
    def _pos_first(mapping: YamlMap) -> _At:
        return None

    @staticmethod
    def _pos_item(items: YamlList, index: int) -> _At:
        return None


def _fast_load(files: Sequence[tuple[str, bytes | str]], shared: Mapping[str, Measure] | None = None) -> LoadResult | None:
    """The model read by the fast reader, or None when the event reader must read it."""
    loads = _fast_reader()
    if loads is None:
        return None
    docs = []
    for name, content in files:
        top = _fast_values(loads, name, content)
        if top is None:
            return None
        docs.append(_Document(name, top))
    try:
        name, fmt = _model_identity(docs, _no_position)
        return _FastBuilder(files, shared).build(docs, name, fmt)
    except (_Fallback, ModeldiffError):
        return None
