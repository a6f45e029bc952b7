"""What refers to what in one revision: who names a table, link, measure, variant, role or column.

`References` indexes a model lazily; the SQL helpers say whether a text reads a column or names a measure
(parsing only texts that hold the name as a word). Used by the structural diff (diff.py) and the plan.
"""

from __future__ import annotations

import re
from collections import defaultdict
from functools import cached_property, lru_cache
from typing import Any

from modeldiff import conditions, sql  # sql is light: sqlglot is imported on first use
from modeldiff.model import Model, Overrides


_WORD = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


@lru_cache(maxsize=4096)
def _words(text: str) -> frozenset[str]:
    """Every identifier-like word of `text`, lowercased (literals included: a conservative pre-check)."""
    return frozenset(w.lower() for w in _WORD.findall(text))


@lru_cache(maxsize=4096)
def _column_refs(text: str) -> frozenset[tuple[str | None, str]] | None:
    """Lowercased (qualifier, column) pairs read by `text`, or None when it cannot be parsed."""
    try:
        refs = sql.column_refs(text)
    except sql.SqlError:
        return None
    return frozenset((q.lower() if q else None, c.lower()) for q, c in refs)


def sql_reads_column(text: str, table: str, column: str) -> bool:
    """Whether a predicate or expression over `table` reads `column` (True when it cannot tell)."""
    col = column.lower()
    if col not in _words(text):
        return False
    refs = _column_refs(text)
    if refs is None:
        return True
    return any(c == col and (q is None or q == table.lower()) for q, c in refs)


def sql_names_measure(expr: str, name: str) -> bool:
    """Whether a derived measure's expression names measure `name` (True when it cannot tell)."""
    if name.lower() not in _words(expr):
        return False
    try:  # derived_refs_fast: measure_refs's answer, usually without parsing
        return any(n.lower() == name.lower() for n in sql.derived_refs_fast(expr, (name,)))
    except sql.SqlError:
        return True


_COLS, _SQL = "cols", "sql"


class References:
    """Who names a table, link, measure, variant, role or column in one revision.

    Indexes are built lazily in one pass each; SQL is parsed only for texts that
    contain the name as a word.
    """

    def __init__(self, model: Model):
        self.model = model

    @cached_property
    def _by_name(self) -> dict[str, dict[str, set[str]]]:
        out: dict[str, dict[str, set[str]]] = {s: defaultdict(set) for s in ("tables", "links", "measures", "variants", "roles")}
        m = self.model

        def overrides(subject: str, o: Overrides) -> None:
            for link in (*o.via, *o.flow):
                out["links"][link].add(subject)

        for link in m.links.values():
            out["tables"][link.from_table].add(f"links.{link.name}")
            out["tables"][link.to_table].add(f"links.{link.name}")
        for measure in m.measures.values():
            subject = f"measures.{measure.name}"
            if measure.table is not None:
                out["tables"][measure.table].add(subject)
            overrides(subject, measure.overrides)
        for variant in m.variants.values():
            subject = f"variants.{variant.name}"
            for option in variant.options.values():
                overrides(subject, option.overrides)
                for table in option.where:
                    out["tables"][table].add(subject)
        for role in m.roles.values():
            for table in role.filters:
                out["tables"][table].add(f"roles.{role.name}")
        for report in m.reports.values():
            subject = f"reports.{report.name}"
            for name in report.measures:
                out["measures"][name].add(subject)
            for name in conditions.names_written(report):
                out["measures"][name].add(subject)
            for item in report.by:
                out["tables"][item.partition(".")[0]].add(subject)
            for table in report.where:
                out["tables"][table].add(subject)
            for variant in report.variant:
                out["variants"][variant].add(subject)
            if report.role is not None:
                out["roles"][report.role].add(subject)
            overrides(subject, report.overrides)
        return out

    def referrers(self, section: str, name: str) -> tuple[str, ...]:
        """Subjects that name `name` of `section` (reports and derived measures for a measure)."""
        if section not in self._by_name:
            return ()
        found = set(self._by_name[section].get(name, ()))
        if section == "measures":
            measures = self.model.measures
            found |= {f"measures.{m}" for m in self._derived_by_word.get(name.lower(), ())
                      if m != name and sql_names_measure(measures[m].expr, name)}
        return tuple(sorted(found))

    @cached_property
    def _derived_by_word(self) -> dict[str, list[str]]:
        """word -> derived measures whose expression contains it (candidates; confirmed by parsing)."""
        out: dict[str, list[str]] = defaultdict(list)
        for m in self.model.measures.values():
            if m.table is None:
                for word in _words(m.expr):
                    out[word].append(m.name)
        return out

    @cached_property
    def _column_sites(self) -> dict[str, list[tuple[str, str, Any]]]:
        """table -> [(subject, how, payload)]: every place that can name one of its columns."""
        sites: dict[str, list[tuple[str, str, Any]]] = defaultdict(list)
        m = self.model
        for table in m.tables.values():
            own = (*table.key, *table.natural_key)
            if table.history is not None:
                h = table.history
                own += tuple(c for c in (h.valid_from, h.valid_to, h.current, h.previous) if c is not None)
            sites[table.name].append((f"tables.{table.name}", _COLS, own))
        for link in m.links.values():
            sites[link.from_table].append((f"links.{link.name}", _COLS, link.from_columns))
            sites[link.to_table].append((f"links.{link.name}", _COLS, link.to_columns))
        for measure in m.measures.values():
            if measure.table is not None:
                for text in (measure.expr, measure.where):
                    if text is not None:
                        sites[measure.table].append((f"measures.{measure.name}", _SQL, text))
        for variant in m.variants.values():
            for option in variant.options.values():
                for table, text in option.where.items():
                    sites[table].append((f"variants.{variant.name}", _SQL, text))
        for role in m.roles.values():
            for table, text in role.filters.items():
                sites[table].append((f"roles.{role.name}", _SQL, text))
        for report in m.reports.values():
            for item in report.by:
                table, _, column = item.partition(".")
                sites[table].append((f"reports.{report.name}", _COLS, (column,)))
            for table, text in report.where.items():
                sites[table].append((f"reports.{report.name}", _SQL, text))
        return sites

    @cached_property
    def _column_indexes(self) -> dict[str, dict[str, list[tuple[str, str, Any]]]]:
        return {}

    def _column_index(self, table: str) -> dict[str, list[tuple[str, str, Any]]]:
        """word -> the sites of `table` that contain it: only those can name a column of that name."""
        index = self._column_indexes.get(table)
        if index is None:
            index = defaultdict(list)
            for site in self._column_sites.get(table, ()):
                _, how, payload = site
                for word in ({c.lower() for c in payload} if how == _COLS else _words(payload)):
                    index[word].append(site)
            self._column_indexes[table] = index
        return index

    def column_referrers(self, table: str, column: str) -> tuple[str, ...]:
        """Subjects that read `table.column` (by key, link, `by`, or SQL)."""
        col = column.lower()
        found: set[str] = set()
        for subject, how, payload in self._column_index(table).get(col, ()):
            if subject in found:
                continue
            if how == _COLS:
                hit = any(c.lower() == col for c in payload)
            else:
                hit = sql_reads_column(payload, table, column)
            if hit:
                found.add(subject)
        return tuple(sorted(found))
