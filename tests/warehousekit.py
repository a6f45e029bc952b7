"""Putting a model's data into the test servers: from a DuckDB database into PostgreSQL or into Parquet for Spark.

The tests build their data with DuckDB (modeldiff.data.Database: the files of
a folder, or `Database.from_rows`), so all three engines read the same rows of
the same types: each table is copied without `_row`, its DuckDB types
spelled in PostgreSQL's words (DECIMAL(p,s) -> numeric(p,s), ...), or written
as a Parquet file that Spark reads through `--data DIR`.
"""

from __future__ import annotations

import re
from pathlib import Path

_PG = {"BIGINT": "bigint", "INTEGER": "integer", "SMALLINT": "smallint", "TINYINT": "smallint", "HUGEINT": "numeric",
       "DOUBLE": "double precision", "FLOAT": "real", "VARCHAR": "text", "DATE": "date", "TIMESTAMP": "timestamp",
       "BOOLEAN": "boolean"}


def pg_type(duck_type: str) -> str:
    if duck_type.startswith("DECIMAL"):
        return "numeric" + duck_type[len("DECIMAL"):]
    return _PG[duck_type]


def _columns(connection, table: str) -> list[tuple[str, str]]:
    return [(r[0], r[1]) for r in connection.execute(f'DESCRIBE "{table}"').fetchall() if r[0] != "_row"]


def create_database(server, dbname: str) -> None:
    """A fresh database `dbname` on the test server (dropped first when it exists)."""
    with server.connect() as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{dbname}" WITH (FORCE)')
        admin.execute(f'CREATE DATABASE "{dbname}"')


def to_postgres(duck, tables, server, dbname: str, schema: str | None = None, renames: dict | None = None) -> None:
    """Copy each of `tables` of the DuckDB connection `duck` into `dbname` (in `schema` when given)."""
    renames = renames or {}
    with server.connect(dbname) as pg:
        if schema:
            pg.execute(f'CREATE SCHEMA IF NOT EXISTS "{schema}"')
        for table in tables:
            columns = _columns(duck, table)
            target = (f'"{schema}".' if schema else "") + f'"{renames.get(table, table)}"'
            pg.execute(f"DROP TABLE IF EXISTS {target}")
            pg.execute(f"CREATE TABLE {target} (" + ", ".join(f'"{c}" {pg_type(t)}' for c, t in columns) + ")")
            names = ", ".join(f'"{c}"' for c, _ in columns)
            rows = duck.execute(f'SELECT {names} FROM "{table}" ORDER BY _row').fetchall()
            with pg.cursor().copy(f"COPY {target} ({names}) FROM STDIN") as copy:
                for row in rows:
                    copy.write_row(row)


def to_parquet(duck, tables, folder: Path) -> Path:
    """Write each of `tables` to `folder/<table>.parquet` (without `_row`), for Spark's `--data DIR`.

    `duck` is locked to its data (no file can be written through it): the rows
    go through Python into a fresh connection that writes the files."""
    import duckdb

    folder.mkdir(parents=True, exist_ok=True)
    writer = duckdb.connect(":memory:")
    try:
        for table in tables:
            columns = _columns(duck, table)
            names = ", ".join(f'"{c}"' for c, _ in columns)
            writer.execute(f'CREATE TABLE "{table}" (' + ", ".join(f'"{c}" {t}' for c, t in columns) + ")")
            rows = duck.execute(f'SELECT {names} FROM "{table}" ORDER BY _row').fetchall()
            for start in range(0, len(rows), 500):
                chunk = rows[start:start + 500]
                marks = "(" + ", ".join("?" for _ in columns) + ")"
                writer.execute(f'INSERT INTO "{table}" VALUES ' + ", ".join(marks for _ in chunk),
                               [v for row in chunk for v in row])
            path = str(folder / f"{table}.parquet").replace("'", "''")
            writer.execute(f"COPY \"{table}\" TO '{path}' (FORMAT parquet)")
    finally:
        writer.close()
    return folder


def safe_name(text: str) -> str:
    return re.sub(r"[^a-z0-9_]", "_", text.lower())
