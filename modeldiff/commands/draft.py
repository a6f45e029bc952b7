"""Draft a model file from a database's catalog: `modeldiff draft --db FILE.duckdb | --ddl FILE.sql | --data DIR`.

The command's arguments and run; draft.py does the work.
"""

from __future__ import annotations

import os
from typing import TextIO

from modeldiff.draft import NAME, draft, model_name_of, reader_of, render, write_atomically
from modeldiff.errors import ModeldiffError, UsageError


def configure(parser) -> None:
    parser.add_argument("--db", metavar="FILE.duckdb|URL",
                        help="read the catalog of this DuckDB file or postgresql:// database (read-only)")
    parser.add_argument("--ddl", metavar="FILE.sql", help="read CREATE TABLE / ALTER TABLE statements from this script")
    parser.add_argument("--data", metavar="DIR", help="read the tables of a data folder (<table>.parquet or "
                                                      "<table>.csv, as eval reads them): columns and types, no keys")
    parser.add_argument("--schema", metavar="NAME",
                        help="the schema to draft (DuckDB default: main; PostgreSQL: public; DDL: all)")
    parser.add_argument("--dialect", metavar="NAME", help="SQL dialect of --ddl, as sqlglot names it (default: generic)")
    parser.add_argument("--name", metavar="MODEL", help="the model's name (default: from the file name)")
    parser.add_argument("-o", "--output", metavar="OUT", help="write the model here (default: standard output)")
    parser.add_argument("--force", action="store_true", help="replace OUT if it exists")


def run(args, stdout: TextIO) -> int:
    if args.name is not None and not NAME.match(args.name):
        raise UsageError(f"--name {args.name!r}: a model name is letters, digits and _, starting with a letter")
    reader = reader_of(args.db, args.ddl, args.schema, args.dialect, args.data)
    if args.output is not None and os.path.lexists(args.output) and not args.force:
        raise ModeldiffError(f"{args.output} already exists; give --force to replace it, or another -o")
    catalog = reader.read()
    text = render(draft(catalog, args.name or model_name_of(args.db or args.ddl or args.data)))
    if args.output is None:
        stdout.write(text)
    else:
        write_atomically(args.output, text, force=args.force)
    return 0
