"""A database's catalog as plain records, read from a DuckDB file or a DDL script.

`modeldiff draft` works from a `Catalog`: tables with their columns (name and
type as the database spells it), primary key, unique constraints and foreign
keys. Each source of a catalog is a `CatalogReader` (one method, `read()`):

- `DuckDBCatalog`: a DuckDB file, through information_schema and
  duckdb_constraints(), opened read-only and locked (modeldiff.data, the only
  module that imports duckdb);
- `DdlCatalog`: a SQL script of CREATE TABLE and ALTER TABLE ... ADD
  statements, parsed with sqlglot; no database needed;
- `FolderCatalog`: a data folder of `<table>.parquet` / `<table>.csv` files,
  as `eval --data DIR` reads it (modeldiff.data.folder_catalog): columns and
  types only, since such files declare no keys (`Catalog.constraints` False).

- `PostgresCatalog`: a PostgreSQL database (`postgresql://` URL), through
  pg_catalog in a read-only transaction (modeldiff.backends).

`model_type` maps a database type to the model's seven column types, the same
way for every reader; a type with no counterpart (BLOB, INTERVAL, TIME, lists,
structs, ...) maps to None and the column is left out of the draft, with a note.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, replace
from typing import Protocol

from modeldiff.errors import ModeldiffError


@dataclass(frozen=True)
class ForeignKey:
    """A foreign key: these columns of the table refer to `ref_columns` of `ref_table`."""

    columns: tuple[str, ...]
    ref_table: str
    ref_columns: tuple[str, ...]


@dataclass(frozen=True)
class CatalogTable:
    """One table of the catalog: columns (name, type as written) in order, and its constraints."""

    name: str
    columns: tuple[tuple[str, str], ...]
    primary_key: tuple[str, ...] = ()
    uniques: tuple[tuple[str, ...], ...] = ()
    foreign_keys: tuple[ForeignKey, ...] = ()


@dataclass(frozen=True)
class Catalog:
    """The tables of one schema, in the order the source lists them, and what was not read (views)."""

    source: str  # how to name the source in the draft's header
    tables: tuple[CatalogTable, ...]
    views: tuple[str, ...] = ()
    constraints: bool = True  # False: the source cannot declare keys (a data folder): none is missing
    notes: tuple[str, ...] = ()  # what the reader passed over
    inferred: tuple[str, ...] = ()  # tables whose column types were inferred from values (CSV files)


class CatalogReader(Protocol):
    """Anything that reads a catalog: DuckDB file, DDL script, later a warehouse."""

    def read(self) -> Catalog: ...


# --- database types -> model column types ----------------------------------------------

_TYPE_WORDS = {
    "integer": ("TINYINT", "SMALLINT", "INTEGER", "INT", "INT1", "INT2", "INT4", "INT8", "BIGINT", "HUGEINT",
                "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT", "MEDIUMINT", "SERIAL", "BIGSERIAL",
                "SMALLSERIAL", "INT128", "INT256", "UINT", "UINT128", "UINT256", "LONG", "SHORT", "SIGNED",
                "UMEDIUMINT", "UDOUBLE"),
    "decimal": ("DECIMAL", "NUMERIC", "NUMBER", "MONEY", "SMALLMONEY", "BIGDECIMAL", "DEC"),
    "float": ("FLOAT", "DOUBLE", "REAL", "FLOAT4", "FLOAT8", "DOUBLE PRECISION"),
    "text": ("VARCHAR", "CHAR", "TEXT", "STRING", "NVARCHAR", "NCHAR", "CHARACTER", "CHARACTER VARYING", "BPCHAR",
             "ENUM", "UUID", "CITEXT", "NAME", "TINYTEXT", "MEDIUMTEXT", "LONGTEXT", "VARCHAR2", "NVARCHAR2", "CLOB"),
    "date": ("DATE", "DATE32"),
    "timestamp": ("TIMESTAMP", "DATETIME", "TIMESTAMPTZ", "TIMESTAMP WITH TIME ZONE", "TIMESTAMP_S", "TIMESTAMP_MS",
                  "TIMESTAMP_NS", "TIMESTAMP_US", "TIMESTAMPLTZ", "TIMESTAMPNTZ", "DATETIME2", "SMALLDATETIME",
                  "DATETIME64", "TIMESTAMP WITHOUT TIME ZONE"),
    "boolean": ("BOOLEAN", "BOOL", "BIT", "LOGICAL"),
}
_MODEL_TYPE_OF = {word: model for model, words in _TYPE_WORDS.items() for word in words}


def model_type(database_type: str) -> str | None:
    """The model column type of a database type (`DECIMAL(15,2)` -> decimal, `VARCHAR(25)` -> text), else None."""
    text = " ".join(database_type.upper().split())
    if text.endswith("[]") or text.startswith(("STRUCT", "MAP", "UNION", "LIST", "ARRAY")):
        return None
    base = re.sub(r"\s*\(.*$", "", text)  # VARCHAR(25) -> VARCHAR, DECIMAL(15, 2) -> DECIMAL
    base = re.sub(r"^(UNSIGNED|SIGNED)\s+", "", base)
    if base.startswith("ENUM"):
        return "text"
    return _MODEL_TYPE_OF.get(base) or _MODEL_TYPE_OF.get(base.split(" ")[0])


# --- DuckDB file ------------------------------------------------------------------------


class DuckDBCatalog:
    """The catalog of one schema of a DuckDB file (default `main`), read-only and locked."""

    def __init__(self, path: str, schema: str | None = None) -> None:
        self.path = os.fspath(path)
        self.schema = schema or "main"

    def read(self) -> Catalog:
        from modeldiff import data

        columns, constraints, views = data.duckdb_catalog(self.path, self.schema)
        return assemble(f"{os.path.basename(self.path)} (schema {self.schema})", columns, constraints, views)


class PostgresCatalog:
    """The catalog of one schema of a PostgreSQL database (default `public`), read in a read-only transaction."""

    def __init__(self, url: str, schema: str | None = None) -> None:
        self.url = url
        self.schema = schema or "public"

    def read(self) -> Catalog:
        from modeldiff.backends import postgres_catalog

        columns, constraints, views, shown = postgres_catalog(self.url, self.schema)
        return assemble(f"{shown} (schema {self.schema})", columns, constraints, views)


def assemble(source: str, columns, constraints, views) -> Catalog:
    """A Catalog from a database's rows: columns (table, column, type) in table order, constraints (table,
    PRIMARY KEY | UNIQUE | FOREIGN KEY, columns, referenced table, referenced columns), view names."""
    tables: dict[str, dict] = {}
    for table, column, type_ in columns:
        tables.setdefault(table, {"columns": [], "pk": (), "uniques": [], "fks": []})["columns"].append((column, type_))
    for table, kind, cols, ref, ref_cols in constraints:
        entry = tables.get(table)
        if entry is None:
            continue
        if kind == "PRIMARY KEY":
            entry["pk"] = cols
        elif kind == "UNIQUE":
            entry["uniques"].append(cols)
        elif ref is not None:
            entry["fks"].append(ForeignKey(cols, ref, ref_cols))
    return Catalog(source, tuple(
        CatalogTable(name, tuple(t["columns"]), tuple(t["pk"]), tuple(t["uniques"]), tuple(t["fks"]))
        for name, t in tables.items()), tuple(views))


# --- data folder (Parquet / CSV) -----------------------------------------------------------


class FolderCatalog:
    """The tables of a data folder: `<table>.parquet` or `<table>.csv`, columns and types, no constraints.

    A column whose type maps to a model type that `eval` cannot read from the
    file (a UUID as text, say) is left out with a note, so that the draft
    passes `check --data` on the same folder.
    """

    def __init__(self, path: str) -> None:
        self.path = os.fspath(path)

    def read(self) -> Catalog:
        from modeldiff import data

        columns, files, notes = data.folder_catalog(self.path)
        tables: dict[str, list[tuple[str, str]]] = {table: [] for table in files}
        notes = list(notes)
        for table, column, type_ in columns:
            mapped = model_type(type_)
            if mapped is not None and not data.type_fits(mapped, type_):
                notes.append(f"column {column} of {table} ({type_}) left out: eval does not read it as {mapped}")
                continue
            tables[table].append((column, type_))
        shown = os.path.basename(os.path.normpath(self.path)) or self.path
        return Catalog(f"the data folder {shown}", tuple(CatalogTable(t, tuple(c)) for t, c in tables.items()),
                       constraints=False, notes=tuple(notes),
                       inferred=tuple(t for t, suffix in files.items() if suffix == "csv"))


# --- DDL script ---------------------------------------------------------------------------


_MAX_DDL_BYTES = 20_000_000


class DdlCatalog:
    """The tables a SQL script creates: CREATE TABLE (inline and table constraints) and ALTER TABLE ... ADD.

    `schema`, when given, keeps the tables created in that schema (and those
    created unqualified); the script's other statements are ignored.
    `dialect` is sqlglot's reading dialect (default: its generic SQL).
    """

    def __init__(self, path: str, schema: str | None = None, dialect: str | None = None) -> None:
        self.path = os.fspath(path)
        self.schema = schema
        self.dialect = dialect

    def read(self) -> Catalog:
        text = _read_text(self.path)
        return Catalog(os.path.basename(self.path) + (f" (schema {self.schema})" if self.schema else ""),
                       *self._tables(text))

    def _tables(self, text: str) -> tuple[tuple[CatalogTable, ...], tuple[str, ...]]:
        import sqlglot
        from sqlglot import exp

        from modeldiff.sql.reading import _quiet_sqlglot

        try:
            with _quiet_sqlglot():
                statements = [s for s in sqlglot.parse(text, read=self.dialect) if s is not None]
        except (sqlglot.errors.SqlglotError, ValueError, RecursionError) as error:
            first = _parse_error_text(error)
            raise ModeldiffError(f"{self.path}: cannot parse the DDL ({first}); fix the script or give "
                                 "--dialect") from None
        try:
            return self._read_statements(statements)
        except _Unreadable as error:
            raise ModeldiffError(f"{self.path}: {error}; fix the script") from None
        except (AttributeError, TypeError, KeyError, IndexError) as error:  # a tree of a shape not foreseen
            raise ModeldiffError(f"{self.path}: cannot read a statement of the script ({type(error).__name__}); "
                                 "fix it, or give --dialect if it is written for one database") from None

    def _read_statements(self, statements) -> tuple[tuple[CatalogTable, ...], tuple[str, ...]]:
        from sqlglot import exp

        tables: dict[str, dict] = {}
        views: list[str] = []
        for statement in statements:
            if isinstance(statement, exp.Command) and str(statement.this).upper() in ("CREATE", "ALTER"):
                shown = " ".join(f"{statement.this}{statement.args.get('expression') or ''}".split())
                shown = shown if len(shown) <= 70 else shown[:67] + "..."
                raise ModeldiffError(f"{self.path}: cannot read the statement `{shown}`; fix it, or give --dialect "
                                     "if it is written for one database")
            if isinstance(statement, exp.Create) and (statement.args.get("kind") or "").upper() == "VIEW":
                target = statement.this if isinstance(statement.this, exp.Table) else statement.find(exp.Table)
                if target is not None and self._wanted(target):
                    views.append(target.name)
            elif isinstance(statement, exp.Create) and (statement.args.get("kind") or "").upper() == "TABLE":
                schema = statement.this
                if not isinstance(schema, exp.Schema) or not isinstance(schema.this, exp.Table):
                    continue  # CREATE TABLE ... AS SELECT: no columns declared
                if not self._wanted(schema.this):
                    continue
                entry = tables.setdefault(schema.this.name.lower(), _entry(schema.this.name))
                for item in schema.expressions:
                    if isinstance(item, exp.ColumnDef):
                        self._column(entry, item)
                    else:
                        _table_constraint(entry, item)
            elif isinstance(statement, exp.Alter) and isinstance(statement.this, exp.Table):
                if not self._wanted(statement.this):
                    continue
                entry = tables.get(statement.this.name.lower())
                if entry is None:
                    raise ModeldiffError(f"{self.path}: ALTER TABLE {statement.this.name} comes before any CREATE "
                                         "TABLE of it; create the table first")
                for action in statement.args.get("actions") or ():
                    for item in (action.expressions if isinstance(action, exp.AddConstraint) else [action]):
                        if isinstance(item, exp.ColumnDef):  # ADD COLUMN
                            self._column(entry, item)
                        else:
                            _table_constraint(entry, item)
        return tuple(CatalogTable(t["name"], tuple(t["columns"]), tuple(t["pk"]), tuple(t["uniques"]),
                                  tuple(t["fks"])) for t in tables.values()), tuple(views)

    def _wanted(self, table) -> bool:
        if self.schema is None:
            return True
        return not table.db or table.db.lower() == self.schema.lower()

    def _column(self, entry: dict, column) -> None:
        from sqlglot import exp

        name = column.name
        kind = column.args.get("kind")
        entry["columns"].append((name, kind.sql(dialect="duckdb") if kind is not None else ""))
        for constraint in column.args.get("constraints") or ():
            found = constraint.args.get("kind")
            if isinstance(found, exp.PrimaryKeyColumnConstraint):
                entry["pk"] = (name,)
            elif isinstance(found, exp.UniqueColumnConstraint):
                entry["uniques"].append((name,))
            elif isinstance(found, exp.Reference):
                table, columns = _reference(found)
                entry["fks"].append(ForeignKey((name,), table, columns))


def _parse_error_text(error: Exception) -> str:
    """sqlglot's first error as `what at line L, column C`; else the exception's first line."""
    details = getattr(error, "errors", None)
    if details:
        first = details[0]
        description = str(first.get("description") or "syntax error").split(". ")[0]
        description = re.sub(r"<Token [^>]*?text: ([^,]*),[^>]*>", r"'\1'", description)
        return f"{description} at line {first.get('line')}, column {first.get('col')}"
    text = str(error).strip()
    return text.splitlines()[0] if text else type(error).__name__


class _Unreadable(Exception):
    """A statement sqlglot parsed but whose constraints cannot be read (the message says what)."""


def _entry(name: str) -> dict:
    return {"name": name, "columns": [], "pk": (), "uniques": [], "fks": []}


def _names(expressions) -> tuple[str, ...]:
    from sqlglot import exp

    out = []
    for item in expressions or ():
        if isinstance(item, exp.Ordered):
            item = item.this
        out.append(item.name)
    return tuple(out)


def _reference(reference) -> tuple[str, tuple[str, ...]]:
    """(table, columns) a REFERENCES clause names; no columns: the referenced table's primary key."""
    from sqlglot import exp

    target = reference.this if reference is not None else None
    if isinstance(target, exp.Schema) and isinstance(target.this, exp.Table):
        return target.this.name, _names(target.expressions)
    if isinstance(target, exp.Table):
        return target.name, ()
    raise _Unreadable("a foreign key names no table after REFERENCES")


def _table_constraint(entry: dict, item) -> None:
    from sqlglot import exp

    if isinstance(item, exp.Constraint):  # CONSTRAINT name <constraint>
        for inner in item.expressions:
            _table_constraint(entry, inner)
        return
    if isinstance(item, exp.PrimaryKey):
        entry["pk"] = _names(item.expressions)
    elif isinstance(item, exp.UniqueColumnConstraint):
        target = item.this
        entry["uniques"].append(_names(target.expressions) if isinstance(target, exp.Schema) else ())
    elif isinstance(item, exp.ForeignKey):
        table, columns = _reference(item.args.get("reference"))
        entry["fks"].append(ForeignKey(_names(item.expressions), table, columns))


def _read_text(path: str) -> str:
    """A DDL script's text: a regular file within the size limit, as UTF-8."""
    if not os.path.isfile(path):
        raise ModeldiffError(f"{path}: no such file; give the SQL script holding the CREATE TABLE statements")
    with open(path, "rb") as stream:
        raw = stream.read(_MAX_DDL_BYTES + 1)
    if len(raw) > _MAX_DDL_BYTES:
        raise ModeldiffError(f"{path}: larger than {_MAX_DDL_BYTES // 1_000_000} MB; give the DDL of the tables only")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise ModeldiffError(f"{path}: not UTF-8 text (byte {error.start}); save the script as UTF-8") from None


def resolve_references(catalog: Catalog) -> Catalog:
    """Foreign keys that name no columns point at the referenced table's primary key; names matched case-insensitively."""
    by_lower = {t.name.lower(): t for t in catalog.tables}
    tables = []
    for table in catalog.tables:
        fks = []
        for fk in table.foreign_keys:
            target = by_lower.get(fk.ref_table.lower())
            ref_table = target.name if target is not None else fk.ref_table
            ref_columns = fk.ref_columns or (target.primary_key if target is not None else ())
            fks.append(ForeignKey(fk.columns, ref_table, ref_columns))
        uniques = tuple(u for u in table.uniques if u)
        tables.append(CatalogTable(table.name, table.columns, table.primary_key, uniques, tuple(fks)))
    return replace(catalog, tables=tuple(tables))
