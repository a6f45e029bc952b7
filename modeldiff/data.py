"""Finding and loading a model's data, and running engine queries on DuckDB.

The only module that imports duckdb (lazily, inside functions).

Where each table's rows come from, first match wins:

1. `db_file`: a DuckDB database file holding a table (or view) per model table;
2. `data_dir`: a folder holding `<table>.parquet` or `<table>.csv`;
3. the table's `source:` in the model, a path relative to the model file.

Loading copies each table into an in-memory database, with the model's
columns in the model's order and `_row`, a row number the engine relies on.
Bad data stops with one clear line (ModeldiffError): a missing file or
column, a value that is not of the column's declared type, or data breaking
a declared key (a duplicate or NULL in a table's `key`, a duplicate in a
column marked `unique`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from modeldiff.engine import Query
from modeldiff.model import Model


@dataclass(frozen=True)
class Result:
    """A report's numbers: column names and rows of Python values.

    On the `(no match)` row every grouping value is `NO_MATCH`.
    """

    columns: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]
    report: str = ""
    notes: tuple[str, ...] = ()


class _NoMatch:
    def __repr__(self) -> str:
        return "NO_MATCH"

    def __str__(self) -> str:
        return "(no match)"


NO_MATCH = _NoMatch()


class Database:
    """An in-memory DuckDB database holding one model's tables; use it as a context manager."""

    def __init__(self, connection, model: Model) -> None:
        self.connection = connection
        self.model = model

    @classmethod
    def open(cls, model: Model, model_path: str | None = None, data_dir: str | None = None,
             db_file: str | None = None) -> "Database":
        """Load every table of `model`; raises ModeldiffError on missing or bad data."""
        raise NotImplementedError

    def __enter__(self) -> "Database":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        self.connection.close()

    def run(self, query: Query) -> list[tuple]:
        """Run a query from modeldiff.engine (its steps, loops and cleanup too); its rows."""
        raise NotImplementedError

    def table_counts(self) -> dict[str, int]:
        """Rows per table, by table name."""
        raise NotImplementedError


def evaluate_report(model: Model, report_name: str, db: Database, user: str | None = None) -> Result:
    """Run one report's query and return its rows (grouping values then measures)."""
    raise NotImplementedError
