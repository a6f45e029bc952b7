"""Immutable, typed records of one revision of a model.

YAML, git and the terminal never reach these records: the loader builds them,
and everything else (check, graph, diff, impact) only reads them.
Field names follow docs/format.md (the model file format); `from`/`to` of a link are
split into table and columns.
"""

from __future__ import annotations

from collections import abc
from dataclasses import dataclass, field
from typing import Mapping, Sequence

TABLE_KINDS = ("fact", "dimension", "bridge", "access")
COLUMN_TYPES = ("integer", "decimal", "float", "text", "date", "timestamp", "boolean")
CARDINALITIES = ("many-to-one", "one-to-one", "many-to-many")
FLOWS = ("one-way", "two-way")
FLOW_OVERRIDES = ("one-way", "two-way", "off")
SECTIONS = ("tables", "links", "measures", "variants", "roles", "reports")


@dataclass(frozen=True)
class Pos:
    """Where something was written: file, 1-based line and column."""

    file: str
    line: int
    column: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


@dataclass(frozen=True)
class Column:
    """A column of a table: its name, type and whether its values are unique."""

    name: str
    type: str
    description: str | None = None
    unique: bool = False


@dataclass(frozen=True)
class History:
    """Slowly changing dimension handling (Kimball's types 0-3)."""

    type: int
    valid_from: str | None = None
    valid_to: str | None = None
    current: str | None = None
    previous: str | None = None  # type 3: column holding the prior value


@dataclass(frozen=True)
class Table:
    """A fact, dimension, bridge or access table: its key, columns and history handling."""

    name: str
    kind: str
    key: tuple[str, ...]
    columns: Mapping[str, Column]
    natural_key: tuple[str, ...] = ()
    history: History | None = None
    source: str | None = None
    description: str | None = None


@dataclass(frozen=True)
class Overrides:
    """`via` and `flow` of a measure, variant option or report."""

    via: tuple[str, ...] = ()
    flow: Mapping[str, str] = field(default_factory=dict)  # link -> one-way | two-way | off

    def __bool__(self) -> bool:
        return bool(self.via) or bool(self.flow)


NO_OVERRIDES = Overrides()


def layers_key(layers: Sequence[Overrides]) -> tuple:
    """A hashable key of a stack of override layers (equal stacks, equal keys)."""
    return tuple((o.via, tuple(sorted(o.flow.items()))) for o in layers)


@dataclass(frozen=True)
class Link:
    """Reads like a foreign key: from the referencing columns to the referenced ones."""

    name: str
    from_table: str
    from_columns: tuple[str, ...]
    to_table: str
    to_columns: tuple[str, ...]
    cardinality: str = "many-to-one"
    flow: str = "one-way"
    security_flow: str = "one-way"
    standby: bool = False
    description: str | None = None

    @property
    def tables(self) -> frozenset[str]:
        return frozenset((self.from_table, self.to_table))


@dataclass(frozen=True)
class Measure:
    """A base measure has its own `table`; a derived one (table None) combines measures."""

    name: str
    expr: str
    table: str | None = None
    where: str | None = None
    overrides: Overrides = NO_OVERRIDES
    description: str | None = None
    unit: str | None = None
    owner: str | None = None
    folder: str | None = None

    @property
    def is_base(self) -> bool:
        return self.table is not None


@dataclass(frozen=True)
class VariantOption:
    """One option of a variant: the overrides and row conditions it brings."""

    name: str
    overrides: Overrides = NO_OVERRIDES
    where: Mapping[str, str] = field(default_factory=dict)  # table -> SQL predicate


@dataclass(frozen=True)
class Variant:
    """A named choice between options (a setting a report may pick), with its default option."""

    name: str
    default: str
    options: Mapping[str, VariantOption]
    description: str | None = None


@dataclass(frozen=True)
class Role:
    """A row-security role: a SQL filter per table it restricts."""

    name: str
    filters: Mapping[str, str]  # table -> SQL predicate (may use :user)
    description: str | None = None


@dataclass(frozen=True)
class Report:
    """A consumer of measures: grouped by columns, filtered, in a variant option and role."""

    name: str
    measures: tuple[str, ...]
    by: tuple[str, ...] = ()  # "table.column"
    where: Mapping[str, str] = field(default_factory=dict)
    variant: Mapping[str, str] = field(default_factory=dict)  # variant -> option
    role: str | None = None
    owner: str | None = None
    overrides: Overrides = NO_OVERRIDES
    description: str | None = None
    having: str | None = None  # SQL condition over measure names, kept per group (docs/format.md, Reports)


@dataclass(frozen=True)
class Model:
    """One revision of an analytical model: every section, and where each item was written."""

    name: str
    tables: Mapping[str, Table]
    links: Mapping[str, Link] = field(default_factory=dict)
    measures: Mapping[str, Measure] = field(default_factory=dict)
    variants: Mapping[str, Variant] = field(default_factory=dict)
    roles: Mapping[str, Role] = field(default_factory=dict)
    reports: Mapping[str, Report] = field(default_factory=dict)
    format: int = 1
    # subject path ("links.trips_bike", "links.trips_bike.to") -> where it was written
    positions: Mapping[str, Pos] = field(default_factory=dict, compare=False, repr=False)

    def pos(self, subject: str) -> Pos | None:
        """The position of a subject, or of its nearest enclosing subject."""
        parts = subject.split(".")
        while parts:
            found = self.positions.get(".".join(parts))
            if found is not None:
                return found
            parts.pop()
        return None


@dataclass(frozen=True)
class Finding:
    """One result of checking one revision (semantics.md section 7)."""

    rule: str
    severity: str  # error | warning
    subject: str
    message: str
    paths: tuple[tuple[str, ...], ...] = ()
    pos: Pos | None = None


class LazyMapping(abc.Mapping):
    """A read-only mapping made by `make()` the first time it is read (then `make` is let go)."""

    __slots__ = ("_make", "_label", "_data")

    def __init__(self, make, label: str) -> None:
        self._make = make
        self._label = label
        self._data: Mapping | None = None

    def _items(self) -> Mapping:
        if self._data is None:
            self._data = self._make()
            self._make = None
        return self._data

    @property
    def computed(self) -> bool:
        return self._data is not None

    def __getitem__(self, key: str):
        return self._items()[key]

    def __iter__(self):
        return iter(self._items())

    def __len__(self) -> int:
        return len(self._items())

    def __repr__(self) -> str:
        return f"<{self._label}, read on first use>" if self._data is None else repr(self._data)

    def __reduce__(self):
        return (dict, (dict(self._items()),))


class DeferredSection(LazyMapping):
    """A section (or the positions) of a model that is read on first use, by `read()` (which gives the whole Model)."""

    __slots__ = ()

    def __init__(self, read, field: str) -> None:
        super().__init__(lambda: getattr(read(), field), field)


def deferred_model(name: str, fmt: int, read) -> Model:
    """A Model whose name and format are known and whose sections and positions come from `read()` on first use."""
    sections = {section: DeferredSection(read, section) for section in SECTIONS}
    return Model(name=name, format=fmt, positions=DeferredSection(read, "positions"), **sections)
