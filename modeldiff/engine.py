"""SQL that evaluates a model's measures on data (semantics.md section 5).

Pure SQL generation: this module builds text and never runs it (modeldiff.data
runs it on DuckDB). Every table is read from a relation named like the model
table that holds the model's columns plus `_row`, a unique row number
(modeldiff.data provides them). Names starting with `_` never clash with a
model's names, which start with a letter.

Public API (kept stable: `modeldiff verify` builds on it):

- `Query`: the SQL of one evaluation, its parameters and its output columns;
  a query over a flow graph with a cycle also carries the statements that
  compute the visible rows by repeated semi-joins (`steps`).
- `report_query(model, report_name, user=None)`
- `measure_query(model, measure_name, by=(), where={}, role=None, layers=(), user=None)`
- `visible_rows_query(model, table, role=None, where={}, user=None)`
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

from modeldiff.errors import ModeldiffError
from modeldiff.model import Model, Overrides

NO_MATCH_COLUMN = "_no_match"  # last column of a grouped query: true on the (no match) row
ROWS_COLUMN = "rows"


@dataclass(frozen=True)
class Loop:
    """Statements run again and again, in order, until a whole pass changes nothing.

    `progress` is a query returning one number (the rows left in the relations
    the statements shrink); the loop stops when a pass leaves it unchanged.
    """

    statements: tuple[str, ...]
    progress: str


@dataclass(frozen=True)
class Query:
    """One evaluation: run `steps` in order, then `sql`; then run `cleanup`.

    `params` are (name, value) pairs for `$name` placeholders (the `:user` of
    role filters becomes `$user`); pass each statement only the names it uses.
    `columns` names the columns `sql` returns, in order. `steps` is empty
    unless a flow graph has a cycle among constrained tables: then the steps
    create temporary tables (`CREATE TEMP TABLE`) and shrink them in a `Loop`,
    and `cleanup` drops them.
    """

    sql: str
    params: tuple[tuple[str, object], ...] = ()
    columns: tuple[str, ...] = ()
    steps: tuple[str | Loop, ...] = ()
    cleanup: tuple[str, ...] = ()


def report_query(model: Model, report_name: str, *, user: str | None = None) -> Query:
    """The numbers of one report: one row per group, grouping columns first.

    Columns: each `by` column as "table.column", then one column per measure
    of the report (named like the measure), then, when the report has `by`
    columns, `_no_match` (true only on the `(no match)` row, whose grouping
    columns are NULL). Rows are sorted by the grouping columns (NULLs last),
    the `(no match)` row last. `user` binds `:user` in the report's role.
    """
    raise NotImplementedError


def measure_query(model: Model, measure_name: str, by: Sequence[str] = (), where: Mapping[str, str] | None = None,
                  role: str | None = None, layers: Sequence[Overrides] = (), *, user: str | None = None) -> Query:
    """One measure grouped by any columns, as a report naming only it would show it.

    `by`: "table.column" names; `where`: {table: SQL predicate}; `role`: a role
    name whose filters cut each table's rows first. The setting is the model's
    links, then each variant's default option (its `use`/`flow` and `where`),
    then `layers` in order, then the measure's own overrides. Columns as in
    `report_query`.
    """
    raise NotImplementedError


def visible_rows_query(model: Model, table: str, role: str | None = None, where: Mapping[str, str] | None = None,
                       user: str | None = None) -> Query:
    """How many rows of `table` are visible: one row, one column `rows`.

    The model's default setting (no variant options), the role's filters
    cutting each table's rows first (over the security graph), then `where`
    as direct filters over the flow graph.
    """
    raise NotImplementedError


def _unknown(what: str, name: str, model: Model) -> ModeldiffError:
    return ModeldiffError(f"model {model.name} has no {what} {name}; check the name")
