"""Finding and loading a model's data, and running engine queries on DuckDB.

The only module that imports duckdb (lazily, inside functions).

Where each table's rows come from:

1. `db_file`, when given: a DuckDB database file holding a table (or view)
   named like each model table (opened read-only);
2. else `data_dir`, when given: a folder holding `<table>.parquet` or
   `<table>.csv` (Parquet first);
3. else the table's `source:` in the model (`.parquet` or `.csv`), a path
   relative to the folder of the model file (for a `NAME.model/` folder, to
   that folder), which must stay inside the model's repository: no absolute
   path, no `..` or link leading out (`allow_outside` widens it; a file in
   `data_dir` that is a link out of it is refused the same way).

The connection is locked (`lock`) before any data is read: it may open only
the data files, reach no other file, network or extension, and change no
setting afterwards. A stored view of a database file runs under the lock.
Every statement is checked to be one statement before it runs.

Each model table becomes a relation of its name in an in-memory database,
with the model's columns in the model's order and `_row`, a row number the
engine relies on. A Parquet file is read where it lies (a view: each query
reads only the columns it needs, so data larger than memory can be
evaluated, `_row` is the file's row number); CSV files and database tables
are copied in.
CSV files are read as text with a header row (an empty field is NULL) and
each column is converted to its declared type. Bad data stops with one clear
line (ModeldiffError, exit 2): a missing file or column, a value that is not
of the column's declared type, or data breaking a declared key (a NULL or a
duplicate in a table's `key`, a duplicate in a column marked `unique`).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from typing import Any, Sequence

from modeldiff.engine import NO_MATCH_COLUMN, Loop, Query, q, report_notes, report_query
from modeldiff.errors import ModeldiffError
from modeldiff.model import Model, Table

INTEGER_TYPES = frozenset({"TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT",
                           "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT"})
FLOAT_TYPES = frozenset({"FLOAT", "DOUBLE", "REAL"})

# DuckDB type a CSV column is converted to, by model column type
CSV_TYPES = {"integer": "BIGINT", "float": "DOUBLE", "text": "VARCHAR", "date": "DATE",
             "timestamp": "TIMESTAMP", "boolean": "BOOLEAN"}  # decimal: DECIMAL(38, scale found)
_SQL_TYPES = dict(CSV_TYPES, decimal="DECIMAL(38, 10)")


@dataclass(frozen=True)
class Result:
    """A report's numbers: column names and rows of Python values.

    Grouping columns come first ("table.column"), then one per measure. On the
    `(no match)` row every grouping value is `NO_MATCH`.
    """

    columns: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]
    report: str = ""
    notes: tuple[str, ...] = ()
    groups: int = 0  # how many leading columns are grouping columns


class _NoMatch:
    """The grouping value of the row gathering rows of a measure's table that fall in no group."""

    def __repr__(self) -> str:
        return "NO_MATCH"

    def __str__(self) -> str:
        return "(no match)"


NO_MATCH = _NoMatch()


@dataclass(frozen=True)
class _Origin:
    """Where one table's rows are read from, and how to name that place in a message."""

    kind: str  # parquet | csv | db
    place: str  # a path, or the database file
    shown: str  # for messages


class Database:
    """An in-memory DuckDB database holding one model's tables; use it as a context manager."""

    def __init__(self, connection, model: Model, origins: dict[str, _Origin] | None = None) -> None:
        self.connection = connection
        self.model = model
        self.origins = origins or {}

    @classmethod
    def open(cls, model: Model, model_path: str | None = None, data_dir: str | None = None,
             db_file: str | None = None, allow_outside: bool = False) -> "Database":
        """Load every table of `model` into a locked database; raises ModeldiffError on missing or bad data.

        The connection is locked (`lock`) before anything is read: it can read
        only the data files found here, and no setting can change after.
        `source:` paths must stay inside the model's repository unless
        `allow_outside` (see `_origin`).
        """
        import duckdb

        origins = {name: _origin(model, name, model_path, data_dir, db_file, allow_outside)
                   for name in sorted(model.tables)}
        connection = duckdb.connect(":memory:")
        db = cls(connection, model, origins)
        try:
            lock(connection, _data_files(origins))
            if db_file is not None:
                connection.execute(f"ATTACH {_literal(_real(db_file))} AS _src (READ_ONLY)")
            for name in sorted(model.tables):
                _load(connection, model.tables[name], origins[name])
            for name in sorted(model.tables):
                check_keys(connection, model.tables[name], origins[name].shown)
        except duckdb.Error as error:
            connection.close()
            raise ModeldiffError(f"cannot read the data: {_first_line(error)}") from None
        except BaseException:
            connection.close()
            raise
        return db

    @classmethod
    def from_rows(cls, model: Model, rows: dict[str, list[tuple]], connection=None) -> "Database":
        """A database holding the given rows (one tuple per row, the model's columns in order).

        For tests and for callers that build data in Python; keys are not
        checked, but the engine relies on them: give no two rows of a table
        the same value of its key or of a column declared unique. Given a
        DuckDB `connection`, its tables of the model's names are replaced (and
        closing the database closes the connection).
        """
        import duckdb

        connection = duckdb.connect(":memory:") if connection is None else connection
        if connection.execute("SELECT current_setting('lock_configuration')").fetchone()[0] is not True:
            lock(connection, ())
        for name in sorted(model.tables):
            table = model.tables[name]
            columns = ", ".join(f"{q(c)} {_SQL_TYPES[col.type]}" for c, col in table.columns.items())
            connection.execute(f"CREATE OR REPLACE TABLE {q(name)} (_row BIGINT, {columns})")
            values = [(i,) + tuple(row) for i, row in enumerate(rows.get(name, ()))]
            if values:
                marks = "(" + ", ".join("?" for _ in values[0]) + ")"
                connection.execute(f"INSERT INTO {q(name)} VALUES " + ", ".join(marks for _ in values),
                                   [v for row in values for v in row])
        return cls(connection, model)

    def __enter__(self) -> "Database":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        self.connection.close()

    def run(self, query: Query, what: str = "the query") -> list[tuple]:
        """Run a query from modeldiff.engine (its steps, loops and cleanup too); its rows."""
        import duckdb

        params = dict(query.params)
        try:
            try:
                self._steps(query, params)
                return self._execute(query.sql, params).fetchall()
            finally:
                for statement in query.cleanup:
                    self._execute(statement, params)
        except duckdb.Error as error:
            raise ModeldiffError(f"cannot evaluate {what} on the data: {_first_line(error)}") from None

    def _steps(self, query: Query, params: dict) -> None:
        """Run the steps that prepare `query`'s answer (temporary relations, loops), in order."""
        for step in query.steps:
            if isinstance(step, Loop):
                self._loop(step, params)
            else:
                self._execute(step, params)

    def _loop(self, loop: Loop, params: dict) -> None:
        before = self._execute(loop.progress, params).fetchone()[0]
        while True:
            for statement in loop.statements:
                self._execute(statement, params)
            after = self._execute(loop.progress, params).fetchone()[0]
            if after == before:
                return
            before = after

    def _execute(self, sql: str, params: dict):
        """Run one statement of the engine's; text holding several statements is refused, never run."""
        statements = self.connection.extract_statements(sql)
        if len(statements) != 1:
            raise ModeldiffError(f"refusing to run {len(statements)} statements in one call; the engine writes one "
                                 "statement per call (report this as a bug)")
        if not params:
            return self.connection.execute(sql)
        used = _parameters_of(statements[0], sql)
        return self.connection.execute(sql, {k: v for k, v in params.items() if k in used})

    def table_counts(self) -> dict[str, int]:
        """Rows per table, by table name."""
        return {name: self.connection.execute(f"SELECT count(*) FROM {q(name)}").fetchone()[0]
                for name in sorted(self.model.tables)}


def evaluate_report(model: Model, report_name: str, db: Database, user: str | None = None) -> Result:
    """Run one report's query and return its rows (grouping values, then measures)."""
    query = report_query(model, report_name, user=user)
    rows = db.run(query, f"report {report_name}")
    report = model.reports[report_name]
    groups = len(report.by)
    columns = query.columns
    if columns and columns[-1] == NO_MATCH_COLUMN:
        columns = columns[:-1]
        rows = [((NO_MATCH,) * groups + tuple(row[groups:-1])) if row[-1] else tuple(row[:-1]) for row in rows]
    notes = list(report_notes(model, report_name))
    if report.role is not None:
        viewer = f" (user {user})" if user is not None else ""
        notes.insert(0, f"As role {report.role} sees it{viewer}.")
    return Result(tuple(columns), tuple(tuple(r) for r in rows), report_name, tuple(notes), groups)


_REMOTE_ERROR: list = []


def query_error(message: str) -> Exception:
    """An error of a query run elsewhere (PostgreSQL, Spark): a ModeldiffError that is also a `duckdb.Error`,
    so callers that fall back on a DuckDB error do the same for the other engines."""
    if not _REMOTE_ERROR:
        import duckdb

        class RemoteQueryError(ModeldiffError, duckdb.Error):
            """A query of another engine that failed; its message is redacted and one line."""

        _REMOTE_ERROR.append(RemoteQueryError)
    return _REMOTE_ERROR[0](message)


def shape_database(model: Model, columns: dict[str, dict[str, tuple[str, str]]], engine: str):
    """An empty, locked DuckDB database with the model's tables, typed as another engine stores them.

    `columns`: table -> model column -> (stored name, DuckDB spelling of the
    type). DuckDB plans each query on it to say which type each result column
    has (`result_types`); no row of the data is ever in it.
    """
    import duckdb

    connection = duckdb.connect(":memory:")
    try:
        for name in sorted(model.tables):
            table = model.tables[name]
            typed = ", ".join(f"{q(c)} {_shape_type(columns[name][c][1], table.columns[c].type)}"
                              for c in table.columns)
            connection.execute(f"CREATE TABLE {q(name)} (_row BIGINT, {typed})")
        lock(connection, ())
    except duckdb.Error as error:
        connection.close()
        raise ModeldiffError(f"cannot type the results of {engine} ({_first_line(error)}); report this as a bug") \
            from None
    return connection


def _shape_type(stored: str, model_type: str) -> str:
    base = stored.upper().split("(")[0].strip()
    if base == "DECIMAL":
        match = re.match(r"DECIMAL\((\d+),\s*(\d+)\)", stored.upper())
        precision, scale = (int(match.group(1)), int(match.group(2))) if match else (38, 10)
        precision = min(max(precision, 1), 38)
        return f"DECIMAL({precision}, {min(scale, precision)})"
    if base in INTEGER_TYPES or base in FLOAT_TYPES or base in ("VARCHAR", "DATE", "BOOLEAN", "TIMESTAMP"):
        return base
    if base.startswith("TIMESTAMP"):
        return "TIMESTAMPTZ" if "ZONE" in stored.upper() else "TIMESTAMP"
    return _SQL_TYPES[model_type]


def result_types(connection, query: Query) -> list[str]:
    """The DuckDB type of each column `query` returns, planned on `connection` (a `shape_database`)."""
    db = Database(connection, Model(name="_shape", tables={}))
    params = dict(query.params)
    try:
        db._steps(query, params)
        described = db._execute(query.sql, params).description
    finally:
        for statement in query.cleanup:
            db._execute(statement, params)
    return [str(d[1]) for d in described]


def converter(duck_type: str):
    """A function turning a value from another engine into the Python value DuckDB gives a `duck_type` column."""
    from datetime import date, datetime
    from decimal import Decimal

    base = duck_type.upper().split("(")[0].strip()

    def keep(value):
        return value

    if base in INTEGER_TYPES:
        return lambda v: v if v is None else int(v)
    if base in FLOAT_TYPES:
        return lambda v: v if v is None else float(v)
    if base == "DECIMAL":
        match = re.match(r"DECIMAL\((\d+),\s*(\d+)\)", duck_type.upper())
        unit = Decimal(1).scaleb(-int(match.group(2))) if match else None

        def decimal(v):
            if v is None or unit is None:
                return v
            return Decimal(str(v) if isinstance(v, float) else v).quantize(unit)
        return decimal
    if base == "BOOLEAN":
        return lambda v: v if v is None else bool(v)
    if base == "DATE":
        return lambda v: v.date() if isinstance(v, datetime) else v
    if base == "TIMESTAMP":
        return lambda v: v.replace(tzinfo=None) if isinstance(v, datetime) else (
            datetime(v.year, v.month, v.day) if isinstance(v, date) else v)
    return keep


# --- finding the data -------------------------------------------------------------------


def _origin(model: Model, name: str, model_path: str | None, data_dir: str | None, db_file: str | None,
            allow_outside: bool = False) -> _Origin:
    if db_file is not None:
        if not os.path.isfile(db_file):
            raise ModeldiffError(f"{db_file}: no such database file; give an existing DuckDB file")
        return _Origin("db", _real(db_file), f"{db_file}: table {name}")
    if data_dir is not None:
        if not os.path.isdir(data_dir):
            raise ModeldiffError(f"{data_dir}: no such folder; give the folder holding <table>.parquet or <table>.csv")
        for suffix in ("parquet", "csv"):
            path = os.path.join(data_dir, f"{name}.{suffix}")
            if os.path.isfile(path):
                place = _real(path)
                if not allow_outside and not _inside(place, _real(data_dir)):
                    raise ModeldiffError(f"{path} (table {name}) is a link to {place}, outside {data_dir}; put the "
                                         f"file itself in the folder, or pass {ALLOW_OUTSIDE_OPTION} to read it")
                return _Origin(suffix, place, path)
        raise ModeldiffError(f"{data_dir} has no {name}.parquet or {name}.csv; add the data of table {name}")
    table = model.tables[name]
    if table.source is None:
        raise ModeldiffError(f"table {name} has no source: in the model; give --data DIR holding {name}.parquet "
                             f"or {name}.csv, or set its source")
    folder = "."
    if model_path is not None:
        model_path = os.fspath(model_path)
        folder = model_path if os.path.isdir(model_path) else os.path.dirname(model_path) or "."
    path = os.path.normpath(os.path.join(folder, table.source))
    suffix = os.path.splitext(path)[1].lower().lstrip(".")
    if suffix not in ("parquet", "csv"):
        raise ModeldiffError(f"{path} (source of table {name}): not a .parquet or .csv file; convert it to one")
    if not allow_outside:
        _confine(name, table.source, folder, path)
    if not os.path.isfile(path):
        raise ModeldiffError(f"{path} (source of table {name}): no such file; fix the source or give --data DIR")
    return _Origin(suffix, _real(path), path)


ALLOW_OUTSIDE_OPTION = "--allow-data-outside"


def _confine(name: str, source: str, folder: str, path: str) -> None:
    """Refuse a `source:` that leads out of the model's repository: absolute, through `..`, or through a link.

    The repository is the nearest folder above the model holding `.git`
    (without one, the model's own folder). A model from a pull request must
    not make `eval` or `verify` read files elsewhere on the machine.
    """
    what = f"the source of table {name} ({source})"
    advice = f"keep the data inside the repository, give --data DIR, or pass {ALLOW_OUTSIDE_OPTION} to read it"
    if os.path.isabs(source) or os.path.splitdrive(source)[0]:
        raise ModeldiffError(f"{what} is an absolute path; write it relative to the model file; {advice}")
    root = _repository_root(folder)
    if not _inside(os.path.normpath(os.path.join(_real(folder), source)), root):
        raise ModeldiffError(f"{what} leads out of the repository {root} through `..`; {advice}")
    real = _real(path)
    if not _inside(real, root):
        raise ModeldiffError(f"{what} is a link leading out of the repository {root} (to {real}); {advice}")


def _repository_root(folder: str) -> str:
    """The nearest folder at or above `folder` holding `.git` (real path); `folder` itself when there is none."""
    from modeldiff.files import enclosing_work_tree

    start = _real(folder)
    return enclosing_work_tree(os.path.join(start, "_")) or start  # the search starts at the folder itself


def _inside(path: str, root: str) -> bool:
    try:
        return os.path.commonpath([path, root]) == root
    except ValueError:  # different drives
        return False


# --- loading ----------------------------------------------------------------------------


def _literal(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def _first_line(error: Exception) -> str:
    text = str(error).strip()
    return text.splitlines()[0] if text else type(error).__name__


def _parameters_of(statement, sql: str) -> set[str]:
    try:
        return set(statement.named_parameters)
    except AttributeError:  # an older DuckDB without named_parameters
        return set(re.findall(r"\$([A-Za-z_][A-Za-z0-9_]*)", sql))


# --- the locked engine --------------------------------------------------------------------

# Set in this order, before any data is read: the files the data lives in are the only ones the
# connection may open; then no file, network or extension access beyond them, no extension
# installed or loaded on demand, no progress bar on stdout, and no setting can change afterwards
# (so SQL run later cannot undo any of it). Names from duckdb_settings() of duckdb 2.0.1.
_LOCK = (
    "SET enable_external_access = false",
    "SET autoinstall_known_extensions = false",
    "SET autoload_known_extensions = false",
    "SET enable_progress_bar = false",
    "SET lock_configuration = true",
)


def lock(connection, readable: Sequence[str]) -> None:
    """Confine `connection` to reading the files `readable` (absolute paths) and lock its configuration.

    After this, reading or writing any other file (read_text, read_csv, glob,
    COPY, ATTACH, EXPORT), installing or loading an extension and changing
    any setting fail on the connection itself, whatever SQL reaches it.
    Raises ModeldiffError when this DuckDB cannot be locked (fails closed).
    """
    import duckdb

    allowed = "[" + ", ".join(_literal(path) for path in sorted(set(readable))) + "]"
    try:
        connection.execute(f"SET allowed_paths = {allowed}")
        for statement in _LOCK:
            connection.execute(statement)
    except duckdb.Error as error:
        raise ModeldiffError(f"cannot lock DuckDB {duckdb.__version__} to the data files ({_first_line(error)}); "
                             "install a DuckDB with allowed_paths and lock_configuration (1.2 or later)") from None


def _data_files(origins: dict[str, "_Origin"]) -> list[str]:
    """The files the data is read from: each Parquet or CSV file, or the database file and its write-ahead log."""
    files = []
    for origin in origins.values():
        files.append(origin.place)
        if origin.kind == "db":
            files.append(origin.place + ".wal")
    return files


def _real(path: str | os.PathLike) -> str:
    return os.path.realpath(os.fspath(path))


def _relation(origin: _Origin, table: str, varchar: bool = False) -> str:
    if origin.kind == "parquet":
        return f"read_parquet({_literal(origin.place)})"
    if origin.kind == "csv":
        return f"read_csv({_literal(origin.place)}, header = true, all_varchar = true)"
    return f"_src.main.{q(table)}"


def _describe(connection, relation: str, origin: _Origin) -> dict[str, str]:
    """Column name (lower case) -> (name as stored, DuckDB type)."""
    import duckdb

    try:
        rows = connection.execute(f"DESCRIBE SELECT * FROM {relation}").fetchall()
    except duckdb.Error as error:
        if origin.kind == "db" and isinstance(error, duckdb.PermissionException):
            raise ModeldiffError(f"{origin.shown}: a view that reads outside the database file "
                                 f"({_first_line(error)}); a stored view runs its own SQL, so only views over the "
                                 "file's own tables are read: store its rows as a table") from None
        if origin.kind == "db":
            raise ModeldiffError(f"{origin.shown}: not found or unreadable ({_first_line(error)}); "
                                 "add the table or give another database") from None
        raise ModeldiffError(f"{origin.shown}: cannot read it as {origin.kind.upper()} ({_first_line(error)}); "
                             "fix or replace the file") from None
    return {row[0].lower(): (row[0], row[1]) for row in rows}


def _load(connection, table: Table, origin: _Origin) -> None:
    relation = _relation(origin, table.name)
    found = _describe(connection, relation, origin)
    missing = [c for c in table.columns if c.lower() not in found]
    if missing:
        raise ModeldiffError(f"{origin.shown}: no column {missing[0]} (table {table.name}); "
                             "add it to the data or remove it from the model")
    if origin.kind == "csv":
        staged = q(f"_csv_{table.name}")
        connection.execute(f"CREATE OR REPLACE TEMP TABLE {staged} AS SELECT * FROM {relation}")
        selects = [_csv_column(connection, staged, table, name, found[name.lower()][0], origin)
                   for name in table.columns]
        source = staged
    else:
        selects = []
        for name, column in table.columns.items():
            stored, duck_type = found[name.lower()]
            if not _compatible(column.type, duck_type):
                raise ModeldiffError(f"{origin.shown}: column {name} holds {duck_type} values but the model "
                                     f"says {column.type}; fix the data or the column's type")
            selects.append(f"{q(stored)} AS {q(name)}")
        source = relation
    if origin.kind == "parquet" and "file_row_number" not in found:  # else the option's column would clash
        reader = f"read_parquet({_literal(origin.place)}, file_row_number = true)"
        connection.execute(f"CREATE VIEW {q(table.name)} AS SELECT file_row_number + 1 AS _row, "
                           f"{', '.join(selects)} FROM {reader}")
        return
    connection.execute(f"CREATE TABLE {q(table.name)} AS SELECT row_number() OVER () AS _row, "
                       f"{', '.join(selects)} FROM {source}")
    if origin.kind == "csv":
        connection.execute(f"DROP TABLE {staged}")


def _compatible(model_type: str, duck_type: str) -> bool:
    base = duck_type.upper().split("(")[0].strip()
    if model_type == "integer":
        return base in INTEGER_TYPES
    if model_type == "decimal":
        return base == "DECIMAL" or base in INTEGER_TYPES or base in FLOAT_TYPES
    if model_type == "float":
        return base in FLOAT_TYPES or base == "DECIMAL" or base in INTEGER_TYPES
    if model_type == "text":
        return base in ("VARCHAR", "ENUM") or base.startswith("ENUM")
    if model_type == "date":
        return base == "DATE"
    if model_type == "timestamp":
        return base.startswith("TIMESTAMP") or base == "DATE"
    if model_type == "boolean":
        return base == "BOOLEAN"
    return False


def _csv_column(connection, staged: str, table: Table, name: str, stored: str, origin: _Origin) -> str:
    """The SELECT item converting one text column of a CSV file; raises on the first bad value."""
    model_type = table.columns[name].type
    value = q(stored)
    if model_type == "text":
        return f"{value} AS {q(name)}"
    target = _csv_target(connection, staged, value, model_type)
    bad = connection.execute(
        f"SELECT _n, _v FROM (SELECT row_number() OVER () AS _n, {value} AS _v FROM {staged}) "
        f"WHERE _v IS NOT NULL AND trim(_v) <> '' AND TRY_CAST(trim(_v) AS {target}) IS NULL ORDER BY _n LIMIT 1"
    ).fetchone()
    if bad is not None:
        raise ModeldiffError(f"{origin.shown}: row {bad[0]} has {bad[1]!r} in column {name}, which is not "
                             f"{_a(model_type)}; fix the value or the column's type")
    return f"{_csv_cast(value, target)} AS {q(name)}"


def _csv_target(connection, staged: str, value: str, model_type: str) -> str:
    """The DuckDB type a CSV text column of `model_type` converts to (a decimal: with the largest scale found)."""
    if model_type != "decimal":
        return CSV_TYPES[model_type]
    scale = connection.execute(
        f"SELECT coalesce(max(length(regexp_extract(trim({value}), '\\.([0-9]+)$', 1))), 0) FROM {staged}"
    ).fetchone()[0]
    return f"DECIMAL(38, {min(int(scale), 18)})"


def _csv_cast(value: str, target: str) -> str:
    """A CSV text value converted to `target`: an empty field is NULL, a value that does not convert NULL too."""
    return f"CASE WHEN trim({value}) = '' THEN NULL ELSE TRY_CAST(trim({value}) AS {target}) END"


def _a(model_type: str) -> str:
    return ("an " if model_type[0] in "aeiou" else "a ") + model_type


def check_keys(connection, table: Table, shown: str) -> None:
    """A table's key: no NULL, no duplicate; a `unique` column: no duplicate (`shown` names the table in messages).

    `connection` is DuckDB's, or a `backends.RemoteDatabase`'s (the same
    queries, rendered for the target)."""
    name = q(table.name)
    if table.key:
        missing = " OR ".join(f"{q(c)} IS NULL" for c in table.key)
        count = connection.execute(f"SELECT count(*) FROM {name} WHERE {missing}").fetchone()[0]
        if count:
            raise ModeldiffError(f"{shown}: {count} row(s) have no value in {_names(table.key)}, the key of "
                                 f"table {table.name}; fill the key or change the model's key")
        _no_duplicates(connection, table, table.key, shown, "the key")
    for column_name, column in table.columns.items():
        if column.unique:
            _no_duplicates(connection, table, (column_name,), shown, "declared unique")


def _no_duplicates(connection, table: Table, columns, shown: str, what: str) -> None:
    cols = ", ".join(q(c) for c in columns)
    found = connection.execute(
        f"SELECT {cols}, count(*) FROM {q(table.name)} WHERE " + " AND ".join(f"{q(c)} IS NOT NULL" for c in columns)
        + f" GROUP BY {cols} HAVING count(*) > 1 ORDER BY {cols} LIMIT 1").fetchone()
    if found is not None:
        value = ", ".join(f"{c} = {v!r}" for c, v in zip(columns, found[:-1]))
        raise ModeldiffError(f"{shown}: {value} appears on {found[-1]} rows, but {_names(columns)} is {what} "
                             f"of table {table.name}; remove the duplicates or change the model")


def _names(columns) -> str:
    return columns[0] if len(columns) == 1 else "(" + ", ".join(columns) + ")"


# --- a database's catalog and its tables as they are: read-only and locked ---------------
#
# For `modeldiff draft --db` (modeldiff.catalog) and the data-aware `modeldiff check
# --db/--data` (modeldiff.datacheck). Nothing here refuses bad data: these readers hand
# the catalog and the rows over as they are, and the callers turn what they find into a
# draft or into findings. Every connection is opened read-only (a database file) or
# in memory (a data folder, whose files are copied in first), and then locked: external
# access off, extensions neither loaded nor installed, configuration locked, so neither
# the file's stored views nor SQL built from a model can read or write anything else.

LOCKED_CONFIG = {"autoload_known_extensions": False, "autoinstall_known_extensions": False}


def _lock(connection) -> None:
    """External access off and the configuration locked, from now on for this connection."""
    connection.execute("SET enable_external_access = false")
    connection.execute("SET lock_configuration = true")


def open_locked_database(db_file: str):
    """A DuckDB connection to `db_file`, read-only and locked; raises ModeldiffError (exit 2) if it cannot be opened."""
    import duckdb

    path = os.fspath(db_file)
    if not os.path.isfile(path):
        raise ModeldiffError(f"{path}: no such database file; give an existing DuckDB file")
    try:
        connection = duckdb.connect(path, read_only=True, config=dict(LOCKED_CONFIG))
    except duckdb.Error as error:
        raise ModeldiffError(f"{path}: cannot open it as a DuckDB database ({_first_line(error)}); "
                             "give a DuckDB file") from None
    try:
        _lock(connection)
    except BaseException:
        connection.close()
        raise
    return connection


def duckdb_catalog(db_file: str, schema: str = "main") -> tuple[list[tuple], list[tuple], list[str]]:
    """The catalog of one schema of a DuckDB file, as plain rows.

    Returns (columns, constraints, views): columns as (table, column, type)
    in the order the tables were created, base tables only; constraints as (table,
    type, columns, referenced table, referenced columns) for PRIMARY KEY,
    UNIQUE and FOREIGN KEY, in the catalog's order; the names of the views.
    """
    import duckdb

    connection = open_locked_database(db_file)
    try:
        columns = connection.execute(
            "SELECT c.table_name, c.column_name, c.data_type FROM duckdb_columns() c "
            "JOIN duckdb_tables() t ON t.table_oid = c.table_oid "
            "WHERE c.database_name = current_database() AND c.schema_name = $schema "
            "ORDER BY t.table_oid, c.column_index",
            {"schema": schema}).fetchall()
        constraints = connection.execute(
            "SELECT table_name, constraint_type, constraint_column_names, referenced_table, "
            "referenced_column_names FROM duckdb_constraints() "
            "WHERE database_name = current_database() AND schema_name = $schema "
            "AND constraint_type IN ('PRIMARY KEY', 'UNIQUE', 'FOREIGN KEY') "
            "ORDER BY table_name, constraint_index", {"schema": schema}).fetchall()
        views = [row[0] for row in connection.execute(
            "SELECT table_name FROM information_schema.tables WHERE table_catalog = current_database() "
            "AND table_schema = $schema AND table_type = 'VIEW' ORDER BY table_name", {"schema": schema}).fetchall()]
    except duckdb.Error as error:
        raise ModeldiffError(f"{db_file}: cannot read its catalog ({_first_line(error)})") from None
    finally:
        connection.close()
    return ([(t, c, ty) for t, c, ty in columns],
            [(t, kind, tuple(cols or ()), ref, tuple(ref_cols or ())) for t, kind, cols, ref, ref_cols in constraints],
            views)


def type_fits(model_type: str, duck_type: str) -> bool:
    """Whether a column stored as `duck_type` holds values of the model's `model_type` (as `eval` accepts them)."""
    return _compatible(model_type, duck_type)


class RawTables:
    """The tables of a DuckDB file or a data folder, as they are, behind a locked connection.

    `open(tables, db_file=...)` reads the file's tables in place; `open(tables,
    data_dir=...)` copies `<table>.parquet` or `<table>.csv` of each wanted
    table into memory first (a CSV file is read as text, each column of the
    model converted to its declared type; the values that do not convert are
    kept in `bad_values`). `columns(table)` says which columns a table has
    (None: no such table); `rows(sql)` runs a query. The SQL is the caller's:
    identifiers quoted with `engine.q`, values passed as parameters.
    """

    def __init__(self, connection, relations: dict[str, str], shown: str) -> None:
        self.connection = connection
        self.relations = relations  # table name -> quoted relation, for the tables found
        self.shown = shown
        self.bad_values: dict[tuple[str, str], tuple[int, list[str]]] = {}
        self._columns: dict[str, dict[str, tuple[str, str]]] = {}

    @classmethod
    def open(cls, model: Model, db_file: str | None = None, data_dir: str | None = None,
             schema: str = "main") -> "RawTables":
        import duckdb

        if db_file is not None:
            connection = open_locked_database(db_file)
            try:
                found = {name.lower(): name for (name,) in connection.execute(
                    "SELECT table_name FROM information_schema.tables WHERE table_catalog = current_database() "
                    "AND table_schema = $schema", {"schema": schema}).fetchall()}
            except BaseException:
                connection.close()
                raise
            relations = {t: f"{q(schema)}.{q(found[t.lower()])}" for t in model.tables if t.lower() in found}
            return cls(connection, relations, os.fspath(db_file))
        if data_dir is None or not os.path.isdir(data_dir):
            raise ModeldiffError(f"{data_dir}: no such folder; give the folder holding <table>.parquet or <table>.csv")
        connection = duckdb.connect(":memory:", config=dict(LOCKED_CONFIG))
        raw = cls(connection, {}, os.fspath(data_dir))
        try:
            for name in sorted(model.tables):
                path = _data_file(data_dir, name)
                if path is not None:
                    raw._copy_in(model.tables[name], path)
            _lock(connection)
        except duckdb.Error as error:
            connection.close()
            raise ModeldiffError(f"cannot read the data in {data_dir}: {_first_line(error)}") from None
        except BaseException:
            connection.close()
            raise
        return raw

    def _copy_in(self, table: Table, path: str) -> None:
        target = q(f"_raw_{table.name}")
        if path.endswith(".parquet"):
            self.connection.execute(f"CREATE TABLE {target} AS SELECT * FROM read_parquet({_literal(path)})")
            self.relations[table.name] = target
            return
        staged = q(f"_csv_{table.name}")
        self.connection.execute(f"CREATE TABLE {staged} AS SELECT * FROM "
                                f"read_csv({_literal(path)}, header = true, all_varchar = true)")
        stored = {row[0].lower(): row[0] for row in self.connection.execute(f"DESCRIBE {staged}").fetchall()}
        selects = []
        for lower, name in stored.items():
            column = next((c for c in table.columns.values() if c.name.lower() == lower), None)
            value = q(name)
            if column is None or column.type == "text":
                selects.append(value)
                continue
            cast = _csv_cast(value, _csv_target(self.connection, staged, value, column.type))
            bad = self.connection.execute(
                f"SELECT {value} FROM {staged} WHERE trim({value}) <> '' AND {cast} IS NULL").fetchall()
            if bad:
                self.bad_values[(table.name, column.name)] = (len(bad), [row[0] for row in bad[:_SAMPLE]])
            selects.append(f"{cast} AS {value}")
        self.connection.execute(f"CREATE TABLE {target} AS SELECT {', '.join(selects)} FROM {staged}")
        self.connection.execute(f"DROP TABLE {staged}")
        self.relations[table.name] = target

    def __enter__(self) -> "RawTables":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        self.connection.close()

    def columns(self, table: str) -> dict[str, tuple[str, str]] | None:
        """Column name (lower case) -> (name as stored, DuckDB type) of a model table; None when it is missing."""
        relation = self.relations.get(table)
        if relation is None:
            return None
        if table not in self._columns:
            rows = self.rows(f"DESCRIBE SELECT * FROM {relation}")
            self._columns[table] = {row[0].lower(): (row[0], row[1]) for row in rows}
        return self._columns[table]

    def rows(self, sql: str, params: dict | None = None) -> list[tuple]:
        import duckdb

        try:
            return self.connection.execute(sql, params or {}).fetchall()
        except duckdb.Error as error:
            raise ModeldiffError(f"cannot read {self.shown}: {_first_line(error)}") from None


_SAMPLE = 5  # values kept as examples of a problem


def _data_file(data_dir: str, name: str) -> str | None:
    """`<name>.parquet` or `<name>.csv` in data_dir (Parquet first), a regular file inside the folder; else None."""
    root = os.path.realpath(data_dir)
    for suffix in ("parquet", "csv"):
        path = os.path.join(data_dir, f"{name}.{suffix}")
        if os.path.isfile(path) and os.path.dirname(os.path.realpath(path)) == root:
            return path
    return None


def folder_catalog(data_dir: str) -> tuple[list[tuple[str, str, str]], dict[str, str], list[str]]:
    """The tables of a data folder as `eval --data DIR` finds them, with their columns: what `draft --data` reads.

    A table is a regular file `<name>.parquet` or `<name>.csv` directly in
    the folder (Parquet first when both are there, as `eval` reads them).
    Returns (columns, files, notes): columns as (table, column, DuckDB type)
    in table-name then file order: a Parquet file's types are its schema's; a
    CSV file's are what DuckDB's CSV sniffer infers from its values; files as
    table -> "parquet" or "csv". Notes say
    what was passed over (a CSV beside a Parquet of the same name, a link
    leading out of the folder). The connection may read only those files
    (`lock`) and reads their schemas, not their rows (the sniffer samples a CSV).
    """
    import duckdb

    if not os.path.isdir(data_dir):
        raise ModeldiffError(f"{data_dir}: no such folder; give the folder holding <table>.parquet or <table>.csv")
    root = _real(data_dir)
    try:
        names = sorted(os.listdir(data_dir))
    except OSError as error:
        raise ModeldiffError(f"{data_dir}: cannot list it ({error.strerror}); give a readable folder") from None
    found: dict[str, tuple[str, str]] = {}  # table -> (suffix, path)
    notes: list[str] = []
    for suffix in ("parquet", "csv"):
        for entry in names:
            if not entry.endswith("." + suffix) or len(entry) == len(suffix) + 1:
                continue
            table, path = entry[: -len(suffix) - 1], os.path.join(data_dir, entry)
            if not os.path.isfile(path):
                continue
            if os.path.dirname(_real(path)) != root:
                notes.append(f"{entry} left out: it is a link leading out of the folder")
            elif table in found:
                notes.append(f"{entry} left out: {table}.parquet is read for table {table}, as eval reads it")
            else:
                found[table] = (suffix, _real(path))
    if not found:
        raise ModeldiffError(f"{data_dir} holds no <table>.parquet or <table>.csv file; give the folder eval reads "
                             "with --data")
    connection = duckdb.connect(":memory:", config=dict(LOCKED_CONFIG))
    columns: list[tuple[str, str, str]] = []
    try:
        lock(connection, [path for _, path in found.values()])
        for table in sorted(found):
            suffix, path = found[table]
            relation = (f"read_parquet({_literal(path)})" if suffix == "parquet"
                        else f"read_csv({_literal(path)}, header = true)")
            try:
                rows = connection.execute(f"DESCRIBE SELECT * FROM {relation}").fetchall()
            except duckdb.Error as error:
                raise ModeldiffError(f"{os.path.join(data_dir, table + '.' + suffix)}: cannot read it as "
                                     f"{suffix.upper()} ({_first_line(error)}); fix or replace the file") from None
            columns += [(table, row[0], row[1]) for row in rows]
    finally:
        connection.close()
    return columns, {table: suffix for table, (suffix, _) in sorted(found.items())}, notes
