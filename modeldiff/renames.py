"""Renames between two revisions: old name -> new name per section, and the old revision's items seen in new names.

One record for both uses: the structural diff fills it while pairing removed and added items (with column
renames and half-followed renames, `diff.DiffContext`), and the impact analysis, the plan and verify read it
from the `*.renamed` changes of a finished diff (`Renames.of`).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Iterable, Mapping

from modeldiff.changes import Change
from modeldiff.model import Link, Measure, Overrides, Report, Role, Table, Variant


@dataclass
class Renames:
    """Old name -> new name, per section; columns per (new) table, keyed by the lowercased old name.

    `stale` holds the half-followed renames: section -> old name -> the subjects
    (in new names) that still name the old one. Those items are read as
    written: the old name stays the old name there, so a left-behind reference
    is not mistaken for a change of that item (it is a `reference.broken`).
    """

    sections: dict[str, dict[str, str]] = field(default_factory=lambda: {
        s: {} for s in ("tables", "links", "measures", "variants", "roles", "reports")})
    columns: dict[str, dict[str, str]] = field(default_factory=dict)
    stale: dict[str, dict[str, frozenset[str]]] = field(default_factory=lambda: {
        s: {} for s in ("tables", "links", "measures", "variants", "roles", "reports")})

    def name(self, section: str, old: str, subject: str | None = None) -> str:
        """The new name of `old`; as written where `subject` still names the old one."""
        renames = self.sections[section]
        if old not in renames or (subject is not None and subject in self.stale[section].get(old, ())):
            return old
        return renames[old]

    def followed(self, section: str, subject: str | None) -> dict[str, str]:
        """The renames of `section` that `subject` follows (all of them when it is None)."""
        renames = self.sections[section]
        stale = self.stale[section]
        if subject is None or not stale:
            return renames
        return {o: n for o, n in renames.items() if subject not in stale.get(o, ())}

    def column(self, table: str, old: str) -> str:
        """`table` is the new table name."""
        mapping = self.columns.get(table)
        return mapping.get(old.lower(), old) if mapping else old

    def table_column(self, item: str, subject: str | None = None) -> str:
        """A "table.column" string of the old revision, in new names."""
        table, dot, column = item.partition(".")
        table = self.name("tables", table, subject)
        return f"{table}{dot}{self.column(table, column)}" if dot else table

    def overrides(self, o: Overrides, subject: str | None = None) -> Overrides:
        links = self.sections["links"]
        if not links or not o:
            return o
        name = lambda n: self.name("links", n, subject)  # noqa: E731
        return Overrides(tuple(map(name, o.via)), {name(n): v for n, v in o.flow.items()})

    def tables_keyed(self, by_table: Mapping[str, str], subject: str | None = None) -> dict[str, str]:
        return {self.name("tables", t, subject): text for t, text in by_table.items()}

    def subject(self, subject: str) -> str:
        """An item subject ("links.x") of the old revision, in new names."""
        section, _, name = subject.partition(".")
        return f"{section}.{self.name(section, name)}" if section in self.sections else subject

    # translations of whole items (structure only; SQL text is left as written)

    def table(self, t: Table) -> Table:
        name = self.name("tables", t.name)
        if name == t.name and name not in self.columns:
            return t
        col = lambda c: self.column(name, c)  # noqa: E731
        columns = {col(n): (replace(c, name=col(n)) if col(n) != n else c) for n, c in t.columns.items()}
        history = t.history
        if history is not None:
            history = replace(history, **{f: col(getattr(history, f)) for f in ("valid_from", "valid_to", "current", "previous")
                                          if getattr(history, f) is not None})
        return replace(t, name=name, key=tuple(map(col, t.key)), natural_key=tuple(map(col, t.natural_key)),
                       columns=columns, history=history)

    def link(self, link: Link) -> Link:
        name = self.name("links", link.name)
        subject = f"links.{name}"
        from_table, to_table = self.name("tables", link.from_table, subject), self.name("tables", link.to_table, subject)
        return replace(link, name=name,
                       from_table=from_table, from_columns=tuple(self.column(from_table, c) for c in link.from_columns),
                       to_table=to_table, to_columns=tuple(self.column(to_table, c) for c in link.to_columns))

    def measure(self, m: Measure) -> Measure:
        name = self.name("measures", m.name)
        subject = f"measures.{name}"
        table = self.name("tables", m.table, subject) if m.table is not None else None
        return replace(m, name=name, table=table, overrides=self.overrides(m.overrides, subject))

    def variant(self, v: Variant) -> Variant:
        name = self.name("variants", v.name)
        subject = f"variants.{name}"
        options = {n: replace(o, overrides=self.overrides(o.overrides, subject), where=self.tables_keyed(o.where, subject))
                   for n, o in v.options.items()}
        return replace(v, name=name, options=options)

    def role(self, r: Role) -> Role:
        name = self.name("roles", r.name)
        return replace(r, name=name, filters=self.tables_keyed(r.filters, f"roles.{name}"))

    def report(self, p: Report) -> Report:
        name = self.name("reports", p.name)
        subject = f"reports.{name}"
        return replace(p, name=name,
                       measures=tuple(self.name("measures", m, subject) for m in p.measures),
                       by=tuple(self.table_column(b, subject) for b in p.by),
                       where=self.tables_keyed(p.where, subject),
                       variant={self.name("variants", v, subject): o for v, o in p.variant.items()},
                       role=self.name("roles", p.role, subject) if p.role is not None else None,
                       overrides=self.overrides(p.overrides, subject))

    # the names of one revision in the other's, as the structural `*.renamed` changes of a diff give them

    @classmethod
    def of(cls, changes: Iterable[Change]) -> "Renames":
        """Old name -> new name, per section, from the `*.renamed` changes (no column renames, none half-followed)."""
        out = cls()
        for change in changes:
            noun, _, what = change.kind.partition(".")
            section = noun + "s"
            if what == "renamed" and section in out.sections:
                out.sections[section][change.before] = change.after
        return out

    @classmethod
    def named(cls, **sections: Mapping[str, str]) -> "Renames":
        """Old name -> new name for the sections given (`tables={...}, links={...}`)."""
        out = cls()
        for section, names in sections.items():
            out.sections[section].update(names)
        return out

    @property
    def tables(self) -> dict[str, str]:
        return self.sections["tables"]

    @property
    def links(self) -> dict[str, str]:
        return self.sections["links"]

    @property
    def measures(self) -> dict[str, str]:
        return self.sections["measures"]

    @property
    def variants(self) -> dict[str, str]:
        return self.sections["variants"]

    @property
    def roles(self) -> dict[str, str]:
        return self.sections["roles"]

    @property
    def reports(self) -> dict[str, str]:
        return self.sections["reports"]

    def table_name(self, name: str) -> str:
        return self.sections["tables"].get(name, name)

    def link_name(self, name: str) -> str:
        return self.sections["links"].get(name, name)

    def path(self, path: tuple[str, ...]) -> tuple[str, ...]:
        links = self.sections["links"]
        return tuple(links.get(link, link) for link in path)

    def __bool__(self) -> bool:
        """Whether a table or link is renamed (what the graphs see)."""
        return bool(self.sections["tables"] or self.sections["links"])

    def inverse(self) -> "Renames":
        """New name -> old name, per section (column renames and half-followed ones are not turned round)."""
        return Renames.named(**{section: {new: old for old, new in names.items()}
                                for section, names in self.sections.items()})
