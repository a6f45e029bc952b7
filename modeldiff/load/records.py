"""Values -> records: the model's items built from plain values, with invalid-model findings where written."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterable, Mapping

from modeldiff.errors import ModeldiffError
from modeldiff.model import (
    CARDINALITIES,
    COLUMN_TYPES,
    FLOWS,
    FLOW_OVERRIDES,
    NO_OVERRIDES,
    SECTIONS,
    TABLE_KINDS,
    Column,
    Finding,
    History,
    Link,
    Measure,
    Model,
    Overrides,
    Pos,
    Report,
    Role,
    Table,
    Variant,
    VariantOption,
)
from modeldiff.load.text import (
    DEPRECATED_KEYS,
    DEPRECATED_RULE,
    RULE,
    _COLREF,
    _NAME,
    _NAME_PATTERN,
    _YAML11_BOOLEANS,
    _fail,
)
from modeldiff.load.events import YamlList, YamlMap, _NOTHING
from modeldiff.load.documents import _Document, _describe
from modeldiff.load.positions import _At, _Positions


@dataclass(frozen=True)
class LoadResult:
    """A model as read, with the invalid-model findings met while reading it."""

    model: Model
    findings: tuple[Finding, ...]  # rule "invalid-model" (error), or "deprecated-key" (warning)


# --------------------------------------------------------------------------
# Values -> records, with invalid-model findings

_TOP_KEYS = ("model", "format") + SECTIONS
_TABLE_KEYS = ("kind", "key", "natural_key", "history", "columns", "source", "description")
_COLUMN_KEYS = ("type", "description", "unique")
_HISTORY_KEYS = ("type", "valid_from", "valid_to", "current", "previous")
_LINK_KEYS = ("from", "to", "cardinality", "flow", "security_flow", "standby", "description")
_MEASURE_KEYS = ("table", "expr", "where", "via", "flow", "description", "unit", "owner", "folder")
_VARIANT_KEYS = ("default", "options", "description")
_OPTION_KEYS = ("via", "flow", "where")
_ROLE_KEYS = ("filters", "description")
_REPORT_KEYS = ("measures", "by", "where", "variant", "role", "owner", "via", "flow", "description", "having")
_SINGULAR = {
    "tables": "table", "links": "link", "measures": "measure",
    "variants": "variant", "roles": "role", "reports": "report",
}  # fmt: skip
_COLUMN_TYPE_SET = frozenset(COLUMN_TYPES)
_MEASURE_TEXT_KEYS = frozenset(("table", "expr", "where", "description", "unit", "owner", "folder"))
_TABLE_PLAIN_KEYS = frozenset(("kind", "key", "columns", "source", "description"))
_LINK_PLAIN_KEYS = frozenset(_LINK_KEYS)

_BAD = object()  # a field that was present but wrong (a finding was recorded)


class _RecordBuilder:
    """Turns the documents' plain values into Model records and invalid-model findings."""

    def __init__(self) -> None:
        self.findings: list[Finding] = []
        self.positions: dict[str, _At] = {}

    # ---- the whole model

    def build(self, docs: list[_Document], name: str, fmt: int) -> LoadResult:
        for doc in docs:
            self._check_keys(doc.top, _TOP_KEYS, "", "at the top level")
        first = next(doc for doc in docs if "model" in doc.top)
        self.positions["model"] = self._pos_value(first.top, "model")
        if not any("tables" in doc.top for doc in docs):
            self._bad("tables", (docs[0].file, 1, 1), "`tables` is missing; a model needs a `tables:` section")
        builders = {
            "tables": self._table, "links": self._link, "measures": self._measure,
            "variants": self._variant, "roles": self._role, "reports": self._report,
        }  # fmt: skip
        sections = {section: self._section(docs, section, builders[section]) for section in SECTIONS}
        model = Model(name=name, format=fmt, positions=self._model_positions(), **sections)
        findings = sorted(
            self.findings, key=lambda f: (f.pos.file, f.pos.line, f.pos.column, f.subject, f.message)
        )
        return LoadResult(model, tuple(findings))

    def _model_positions(self) -> Mapping[str, Pos]:
        return _Positions(self.positions)

    def _section(self, docs: list[_Document], section: str, build_item) -> dict[str, Any]:
        """One section merged over the files; a name in two files cannot be read."""
        records: dict[str, Any] = {}
        seen: dict[str, _At] = {}
        for doc in docs:
            items = self._get_map(doc.top, section, section)
            if items is None:
                continue
            for name, value in items.items():
                if not self._check_name(items, name, section):
                    continue
                subject = f"{section}.{name}"
                pos = self._pos_key(items, name)
                if name in seen:
                    raise self._defined_twice(section, name, seen[name], pos)
                seen[name] = pos
                self.positions[subject] = pos
                record = build_item(name, value, subject, items)
                if record is not None:
                    records[name] = record
        return records

    def _defined_twice(self, section: str, name: str, first: _At, pos: _At) -> ModeldiffError:
        return _fail(
            *pos,
            f"{_SINGULAR[section]} '{name}' is defined in both {first[0]}:{first[1]} and "
            f"{pos[0]}:{pos[1]}; keep one definition",
        )  # fmt: skip

    # ---- sections

    def _item_map(self, name: str, value: Any, subject: str, parent: YamlMap, keys: tuple[str, ...]) -> YamlMap | None:
        what = f"{subject.split('.')[0][:-1]} '{name}'"
        if not isinstance(value, dict):
            self._expected(subject, self._pos_value(parent, name), "a mapping of fields", value, f"{what} is ignored")
            return None
        self._check_keys(value, keys, subject, f"in {what}")
        return value

    def _table(self, name: str, value: Any, subject: str, parent: YamlMap) -> Table | None:
        fields = self._item_map(name, value, subject, parent, _TABLE_KEYS)
        if fields is None:
            return None
        kind = self._get_enum(fields, "kind", subject, TABLE_KINDS, "fact", required=True)
        columns = self._columns(fields, subject)
        return Table(
            name=name,
            kind=kind,
            key=self._get_columns(fields, "key", subject),
            columns=columns,
            natural_key=self._get_columns(fields, "natural_key", subject),
            history=self._history(fields, subject),
            source=self._get_str(fields, "source", subject),
            description=self._get_str(fields, "description", subject),
        )

    def _columns(self, fields: YamlMap, subject: str) -> dict[str, Column]:
        columns = self._get_map(fields, "columns", f"{subject}.columns", required=True)
        if columns is None:
            return {}
        records = {}
        prefix = f"{subject}.columns."
        at = getattr(columns, "at", None)  # None from the fast reader, which records no positions
        positions, file = self.positions, getattr(columns, "file", None)
        for name, value in columns.items():  # the model's most numerous item: keep it lean
            if not (name.__class__ is str and _NAME.match(name)):
                self._check_name(columns, name, f"{subject}.columns")
                continue
            if at is not None:
                entry = at[name]
                positions[prefix + name] = (file, entry[0], entry[1])
            if value.__class__ is str and value in _COLUMN_TYPE_SET:
                records[name] = Column(name, value)
            else:
                records[name] = self._column(name, value, prefix + name, columns)
        return records

    def _column(self, name: str, value: Any, subject: str, parent: YamlMap) -> Column:
        if isinstance(value, str):
            if value in COLUMN_TYPES:
                return Column(name, value)
            return self._bad_column_type(name, value, subject, self._pos_value(parent, name))
        if not isinstance(value, dict):
            expected = "a column type or a mapping {type, description, unique}"
            self._expected(subject, self._pos_value(parent, name), expected, value, "read as text")
            return Column(name, "text")
        self._check_keys(value, _COLUMN_KEYS, subject, f"in column '{name}'")
        if "type" not in value:
            self._bad(subject, self._pos_value(parent, name), f"{subject}: `type` is missing (read as text)")
            column_type = "text"
        else:
            column_type = self._get_enum(value, "type", subject, COLUMN_TYPES, "text")
        return Column(
            name,
            column_type,
            description=self._get_str(value, "description", subject),
            unique=self._get_bool(value, "unique", subject, False),
        )

    def _bad_column_type(self, name: str, value: str, subject: str, pos: _At) -> Column:
        self._expected(subject, pos, "one of " + ", ".join(COLUMN_TYPES), value, "read as text")
        return Column(name, "text")

    def _history(self, fields: YamlMap, subject: str) -> History | None:
        subject = f"{subject}.history"
        history = self._get_map(fields, "history", subject)
        if history is None:
            return None
        self._check_keys(history, _HISTORY_KEYS, subject, "in `history`")
        if "type" not in history:
            self._bad(subject, self._pos_value(fields, "history"), f"{subject}: `type` is missing; history is ignored")
            return None
        history_type = history["type"]
        if type(history_type) is not int or history_type not in (0, 1, 2, 3):
            where = self._pos_value(history, "type")
            self._expected(f"{subject}.type", where, "0, 1, 2 or 3", history_type, "history is ignored")
            return None
        return History(
            type=history_type,
            valid_from=self._get_name(history, "valid_from", subject),
            valid_to=self._get_name(history, "valid_to", subject),
            current=self._get_name(history, "current", subject),
            previous=self._previous(history, subject, history_type),
        )

    def _previous(self, history: YamlMap, subject: str, history_type: int) -> str | None:
        if "previous" not in history:
            return None
        subject = f"{subject}.previous"
        if history_type != 3:
            message = f"{subject}: `previous` applies only to history type 3; it is ignored"
            self._bad(subject, self._pos_key(history, "previous"), message)
            return None
        previous = self._get_map(history, "previous", subject)
        if previous is None:
            return None
        self._check_keys(previous, ("column",), subject, "in `previous`")
        if "column" not in previous:
            self._bad(subject, self._pos_value(history, "previous"), f"{subject}: `column` is missing")
            return None
        return self._get_name(previous, "column", subject)

    def _link(self, name: str, value: Any, subject: str, parent: YamlMap) -> Link | None:
        fields = self._item_map(name, value, subject, parent, _LINK_KEYS)
        if fields is None:
            return None
        ends = [self._link_end(fields, end, subject, name) for end in ("from", "to")]
        if _BAD in ends:
            return None
        (from_table, from_columns), (to_table, to_columns) = ends
        if len(from_columns) != len(to_columns):
            self._bad(
                subject,
                self._pos_value(fields, "to"),
                f"{subject}: `from` has {len(from_columns)} column(s) but `to` has {len(to_columns)}; "
                f"they must pair up one to one (link '{name}' is ignored)",
            )
            return None
        return Link(
            name=name,
            from_table=from_table,
            from_columns=from_columns,
            to_table=to_table,
            to_columns=to_columns,
            cardinality=self._get_enum(fields, "cardinality", subject, CARDINALITIES, "many-to-one"),
            flow=self._get_enum(fields, "flow", subject, FLOWS, "one-way"),
            security_flow=self._get_enum(fields, "security_flow", subject, FLOWS, "one-way"),
            standby=self._get_bool(fields, "standby", subject, False),
            description=self._get_str(fields, "description", subject),
        )

    def _link_end(self, fields: YamlMap, end: str, subject: str, name: str):
        """(table, columns) of a link's `from` or `to`, or _BAD."""
        field_subject = f"{subject}.{end}"
        if end not in fields:
            message = f"{field_subject}: `{end}` is missing (link '{name}' is ignored)"
            self._bad(field_subject, self.positions[subject], message)
            return _BAD
        value, pos = self._field(fields, end, subject)
        refs = list(value) if isinstance(value, list) else [value]
        expected = "\"table.column\" or a list of them, all of one table"
        parsed = [_COLREF.match(ref) if isinstance(ref, str) else None for ref in refs]
        if not refs or None in parsed:
            bad = next((ref for ref, match in zip(refs, parsed) if match is None), value)
            self._expected(field_subject, pos, expected, bad, f"link '{name}' is ignored")
            return _BAD
        tables = sorted({match.group(1) for match in parsed})
        if len(tables) > 1:
            self._bad(
                field_subject,
                pos,
                f"{field_subject}: expected columns of one table, found tables {', '.join(tables)} "
                f"(link '{name}' is ignored)",
            )
            return _BAD
        return tables[0], tuple(match.group(2) for match in parsed)

    def _measure(self, name: str, value: Any, subject: str, parent: YamlMap) -> Measure | None:
        fields = self._item_map(name, value, subject, parent, _MEASURE_KEYS)
        if fields is None:
            return None
        expr = self._get_str(fields, "expr", subject, sql=True)
        if expr is None:
            if "expr" not in fields:
                message = f"{subject}: `expr` is missing; measure '{name}' is ignored"
                self._bad(subject, self.positions[subject], message)
            return None
        return Measure(
            name=name,
            expr=expr,
            table=self._get_name(fields, "table", subject),
            where=self._get_str(fields, "where", subject, sql=True),
            overrides=self._overrides(fields, subject),
            description=self._get_str(fields, "description", subject),
            unit=self._get_str(fields, "unit", subject),
            owner=self._get_str(fields, "owner", subject),
            folder=self._get_str(fields, "folder", subject),
        )

    def _variant(self, name: str, value: Any, subject: str, parent: YamlMap) -> Variant | None:
        fields = self._item_map(name, value, subject, parent, _VARIANT_KEYS)
        if fields is None:
            return None
        default = self._get_name(fields, "default", subject)
        if default is None and "default" not in fields:
            self._bad(subject, self.positions[subject], f"{subject}: `default` is missing; variant '{name}' is ignored")
        options = self._options(fields, subject)
        if default is None or not options:
            return None
        return Variant(name, default, options, description=self._get_str(fields, "description", subject))

    def _options(self, fields: YamlMap, subject: str) -> dict[str, VariantOption]:
        options = self._get_map(fields, "options", f"{subject}.options", required=True)
        if options is None:
            return {}
        if not options:
            message = f"{subject}.options: a variant needs at least one option"
            self._bad(f"{subject}.options", self._pos_value(fields, "options"), message)
        records = {}
        for name, value in options.items():
            if not self._check_name(options, name, f"{subject}.options"):
                continue
            option_subject = f"{subject}.options.{name}"
            self.positions[option_subject] = self._pos_key(options, name)
            if not isinstance(value, dict):
                pos = self._pos_value(options, name)
                self._expected(option_subject, pos, "a mapping (write {} for no changes)", value, "read as {}")
                records[name] = VariantOption(name)
                continue
            self._check_keys(value, _OPTION_KEYS, option_subject, f"in option '{name}'")
            where = self._get_predicates(value, "where", option_subject)
            records[name] = VariantOption(name, overrides=self._overrides(value, option_subject), where=where)
        return records

    def _role(self, name: str, value: Any, subject: str, parent: YamlMap) -> Role | None:
        fields = self._item_map(name, value, subject, parent, _ROLE_KEYS)
        if fields is None:
            return None
        if "filters" not in fields:
            self._bad(subject, self.positions[subject], f"{subject}: `filters` is missing; role '{name}' is ignored")
            return None
        filters = self._get_predicates(fields, "filters", subject)
        return Role(name, filters, description=self._get_str(fields, "description", subject))

    def _report(self, name: str, value: Any, subject: str, parent: YamlMap) -> Report | None:
        fields = self._item_map(name, value, subject, parent, _REPORT_KEYS)
        if fields is None:
            return None
        if "measures" not in fields:
            self._bad(subject, self.positions[subject], f"{subject}: `measures` is missing; report '{name}' is ignored")
            return None
        measures = self._get_names(fields, "measures", subject, nonempty=True)
        return Report(
            name=name,
            measures=measures,
            by=self._get_colrefs(fields, "by", subject),
            where=self._get_predicates(fields, "where", subject),
            variant=self._get_name_map(fields, "variant", subject),
            role=self._get_name(fields, "role", subject),
            owner=self._get_str(fields, "owner", subject),
            overrides=self._overrides(fields, subject),
            description=self._get_str(fields, "description", subject),
            having=self._get_str(fields, "having", subject, sql=True),
        )

    def _overrides(self, fields: YamlMap, subject: str) -> Overrides:
        key = self._old_spelling(fields, "use", subject) if "use" in fields else "via"
        via = self._get_names(fields, key, subject)
        if key != "via" and f"{subject}.{key}" in self.positions:
            self.positions[f"{subject}.via"] = self.positions[f"{subject}.{key}"]  # where check rules point
        flow = self._get_flow(fields, subject)
        return Overrides(via, flow) if via or flow else NO_OVERRIDES

    def _old_spelling(self, fields: YamlMap, old: str, subject: str) -> str:
        """The key to read for `old`'s new spelling: `old` itself, with a deprecated-key warning, unless both are given."""
        new = DEPRECATED_KEYS[old]
        at = self._pos_key(fields, old)
        if new in fields:
            self._bad(f"{subject}.{old}", at, f"{subject}: both `{new}` and its old spelling `{old}` are given; "
                                              f"remove `{old}` (it is ignored)")
            return new
        self._warn(f"{subject}.{old}", at, f"{subject}: `{old}` (line {at[1]}) is the old spelling of `{new}`; "
                                           f"rename the key to `{new}` (read as `{new}` until then)")
        return old

    # ---- typed fields: each returns the value, or a default after recording a finding

    def _field(self, fields: YamlMap, key: str, subject: str) -> tuple[Any, _At | None]:
        if key not in fields:
            return _NOTHING, None
        pos = self._pos_value(fields, key)
        self.positions[f"{subject}.{key}"] = pos
        return fields[key], pos

    def _get_str(self, fields: YamlMap, key: str, subject: str, sql: bool = False) -> str | None:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return None
        if isinstance(value, str) and (not sql or value.strip()):
            return value
        expected = "a non-empty SQL expression" if sql else "text"
        self._expected(f"{subject}.{key}", pos, expected, value, "it is ignored")
        return None

    def _get_name(self, fields: YamlMap, key: str, subject: str) -> str | None:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return None
        if isinstance(value, str) and _NAME.match(value):
            return value
        self._expected(f"{subject}.{key}", pos, f"a name matching {_NAME_PATTERN}", value, "it is ignored")
        return None

    def _get_bool(self, fields: YamlMap, key: str, subject: str, default: bool) -> bool:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return default
        if value is True or value is False:
            return value
        meant = _YAML11_BOOLEANS.get(value) if isinstance(value, str) else None
        if meant is not None:  # YAML 1.1 spellings: YAML 1.2 reads them as text
            self._bad(f"{subject}.{key}", pos, f"{subject}.{key}: {value} is not a boolean in this format; write "
                                               f"{meant} (YAML 1.2 reads {value} as text, so it counts as "
                                               f"{str(default).lower()})")
            return default
        self._expected(f"{subject}.{key}", pos, "true or false", value, f"read as {str(default).lower()}")
        return default

    def _get_enum(self, fields: YamlMap, key: str, subject: str, choices, default: str, required: bool = False) -> str:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            if required:
                message = f"{subject}: `{key}` is missing; expected one of {', '.join(choices)} (read as {default})"
                self._bad(f"{subject}.{key}", self.positions.get(subject) or self._pos_first(fields), message)
            return default
        if isinstance(value, str) and value in choices:
            return value
        self._expected(f"{subject}.{key}", pos, "one of " + ", ".join(choices), value, f"read as {default}")
        return default

    def _get_list(self, fields: YamlMap, key: str, subject: str, expected: str, nonempty: bool = False):
        """The items of a list field that pass, with a finding for the rest; None when absent."""
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return None, None
        if not isinstance(value, list) or (nonempty and not value):
            wanted = f"a non-empty list of {expected}" if nonempty else f"a list of {expected}"
            self._expected(f"{subject}.{key}", pos, wanted, value, "it is ignored")
            return None, None
        return value, pos

    def _get_names(self, fields: YamlMap, key: str, subject: str, nonempty: bool = False) -> tuple[str, ...]:
        items, _ = self._get_list(fields, key, subject, "names", nonempty)
        if items is None:
            return ()
        good = []
        for index, item in enumerate(items):
            if isinstance(item, str) and _NAME.match(item):
                good.append(item)
            else:
                item_pos = self._pos_item(items, index)
                self._expected(f"{subject}.{key}", item_pos, f"a name matching {_NAME_PATTERN}", item, "it is ignored")
        return tuple(good)

    def _get_colrefs(self, fields: YamlMap, key: str, subject: str) -> tuple[str, ...]:
        items, _ = self._get_list(fields, key, subject, '"table.column" entries')
        if items is None:
            return ()
        good = []
        for index, item in enumerate(items):
            if isinstance(item, str) and _COLREF.match(item):
                good.append(item)
            else:
                item_pos = self._pos_item(items, index)
                self._expected(f"{subject}.{key}", item_pos, '"table.column"', item, "it is ignored")
        return tuple(good)

    def _get_columns(self, fields: YamlMap, key: str, subject: str) -> tuple[str, ...]:
        """`key`/`natural_key`: one column name or a non-empty list of them."""
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return ()
        if isinstance(value, str) and _NAME.match(value):
            return (value,)
        if isinstance(value, list) and value and all(isinstance(v, str) and _NAME.match(v) for v in value):
            return tuple(value)
        wanted = "a column name or a non-empty list of column names"
        self._expected(f"{subject}.{key}", pos, wanted, value, "it is ignored")
        return ()

    def _get_flow(self, fields: YamlMap, subject: str) -> dict[str, str]:
        flows = self._get_map(fields, "flow", f"{subject}.flow")
        if flows is None:
            return {}
        result = {}
        for link, value in flows.items():
            if not self._check_name(flows, link, f"{subject}.flow"):
                continue
            pos = self._pos_value(flows, link)
            self.positions[f"{subject}.flow.{link}"] = pos
            if isinstance(value, str) and value in FLOW_OVERRIDES:
                result[link] = value
            else:
                wanted = "one of " + ", ".join(FLOW_OVERRIDES)
                self._expected(f"{subject}.flow.{link}", pos, wanted, value, "it is ignored")
        return result

    def _get_predicates(self, fields: YamlMap, key: str, subject: str) -> dict[str, str]:
        """A map table -> SQL predicate (`where`, `filters`)."""
        return self._get_name_keyed(fields, key, subject, "a non-empty SQL predicate", _is_sql)

    def _get_name_map(self, fields: YamlMap, key: str, subject: str) -> dict[str, str]:
        """A map name -> name (a report's `variant`: variant -> option)."""
        return self._get_name_keyed(fields, key, subject, f"a name matching {_NAME_PATTERN}", _is_name)

    def _get_name_keyed(self, fields: YamlMap, key: str, subject: str, expected: str, accept) -> dict[str, str]:
        entries = self._get_map(fields, key, f"{subject}.{key}")
        if entries is None:
            return {}
        result = {}
        for name, value in entries.items():
            if not self._check_name(entries, name, f"{subject}.{key}"):
                continue
            pos = self._pos_value(entries, name)
            self.positions[f"{subject}.{key}.{name}"] = pos
            if accept(value):
                result[name] = value
            else:
                self._expected(f"{subject}.{key}.{name}", pos, expected, value, "it is ignored")
        return result

    def _get_map(self, fields: YamlMap, key: str, subject: str, required: bool = False) -> YamlMap | None:
        if key not in fields:
            if required:
                parent = subject.rsplit(".", 1)[0]
                where = self.positions.get(parent) or self._pos_first(fields)
                self._bad(subject, where, f"{parent}: `{key}` is missing; expected a mapping")
            return None
        value = fields[key]
        pos = self._pos_value(fields, key)
        self.positions[subject] = pos
        if isinstance(value, dict):
            return value
        self._expected(subject, pos, "a mapping", value, "it is ignored")
        return None

    # ---- names, keys, findings

    def _check_name(self, mapping: YamlMap, name: Any, section: str) -> bool:
        if isinstance(name, str) and _NAME.match(name):
            return True
        wanted = f"a name matching {_NAME_PATTERN}"
        self._expected(f"{section}.{name}", self._pos_key(mapping, name), wanted, name, "the entry is ignored")
        return False

    def _check_keys(self, mapping: YamlMap, allowed: tuple[str, ...], subject: str, where: str) -> None:
        for key in mapping:
            if key in allowed or DEPRECATED_KEYS.get(key) in allowed:
                continue
            hint = _close_match(key, allowed)
            suggestion = f"; did you mean `{hint}`?" if hint else f"; expected one of {', '.join(allowed)}"
            key_subject = f"{subject}.{key}" if subject else str(key)
            message = f"unknown key {_describe(key)} {where} (ignored){suggestion}"
            self._bad(key_subject, self._pos_key(mapping, key), message)

    def _expected(self, subject: str, pos: _At, expected: str, found: Any, consequence: str) -> None:
        self._bad(subject, pos, f"{subject}: expected {expected}, found {_describe(found)} ({consequence})")

    def _bad(self, subject: str, at: _At, message: str) -> None:
        pos = Pos(*at)
        self.findings.append(Finding(rule=RULE, severity="error", subject=subject, message=message, pos=pos))

    def _warn(self, subject: str, at: _At, message: str) -> None:
        pos = Pos(*at)
        self.findings.append(Finding(rule=DEPRECATED_RULE, severity="warning", subject=subject, message=message, pos=pos))

    @staticmethod
    def _pos_key(mapping: YamlMap, key: Any) -> _At:
        at = mapping.at[key]
        return (mapping.file, at[0], at[1])

    @staticmethod
    def _pos_value(mapping: YamlMap, key: Any) -> _At:
        at = mapping.at[key]
        return (mapping.file, at[2], at[3])

    @staticmethod
    def _pos_first(mapping: YamlMap) -> _At:
        return (mapping.file, mapping.line, mapping.column)

    @staticmethod
    def _pos_item(items: YamlList, index: int) -> _At:
        return (items.file, *items.at[index])


def _is_sql(value: Any) -> bool:
    return isinstance(value, str) and bool(value.strip())


def _is_name(value: Any) -> bool:
    return isinstance(value, str) and _NAME.match(value) is not None


def _close_match(key: Any, allowed: Iterable[str]) -> str | None:
    if not isinstance(key, str):
        return None
    import difflib

    matches = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.75)
    return matches[0] if matches else None
