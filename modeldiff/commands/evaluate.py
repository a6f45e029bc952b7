"""Evaluate a model's reports on data: `modeldiff eval MODEL [--data DIR|FILE] [--db URL] [--report NAME] [--user EMAIL]`.

The command's arguments and run, and the options eval and verify share (--timeout, --data/--db,
--allow-data-outside); evaluate.py does the work.
"""

from __future__ import annotations

from typing import TextIO

from modeldiff.evaluate import FORMATS, as_csv, as_json, as_text, read_checked_model


def configure(parser) -> None:
    parser.add_argument("model", metavar="MODEL", help="model file, NAME.model/ folder, or REV:PATH")
    parser.add_argument("--data", metavar="DIR|FILE",
                        help="folder of <table>.parquet/.csv files, or a DuckDB database file "
                             "(default: each table's source: in the model)")
    parser.add_argument("--report", metavar="NAME", action="append",
                        help="evaluate this report (repeat for several; default: every report)")
    parser.add_argument("--user", metavar="EMAIL", help="the viewer, bound to :user in a report's role")
    parser.add_argument("--db", metavar="URL",
                        help="evaluate where the data lives: postgresql://user@host:port/dbname, spark:local[N] or "
                             "sc://host:port (read-only; see docs/evaluation.md); with Spark, --data DIR may hold "
                             "<table>.parquet")
    add_timeout(parser)
    parser.add_argument("--format", choices=FORMATS, default="text")
    add_allow_outside(parser)


def add_timeout(parser) -> None:
    """`--timeout SECONDS` (eval and verify): the longest the evaluation may take on a server."""
    parser.add_argument("--timeout", metavar="SECONDS", type=float,
                        help="stop the evaluation on a server (--db URL) after this many seconds "
                             "(default: each PostgreSQL statement may take an hour)")


def where_the_data_is(data: str | None, db: str | None, timeout: float | None = None) -> dict:
    """The keyword arguments of `backends.open_database` for the options --data and --db (eval and verify)."""
    import os

    from modeldiff.backends import is_url, parse_url
    from modeldiff.errors import ModeldiffError, UsageError

    if timeout is not None and not timeout > 0:
        raise UsageError(f"--timeout {timeout:g}: give a number of seconds above 0")
    out: dict = {"data_dir": None, "db_file": None, "db_url": None, "timeout": timeout}
    if db is not None and is_url(db):
        target = parse_url(db)
        out["db_url"] = db
        if data is not None:
            if target.kind != "spark":
                raise UsageError(f"--data with --db {target.shown}: the tables are in the database; give one of them")
            if not os.path.isdir(data):
                raise ModeldiffError(f"{data}: no such folder; give the folder holding <table>.parquet")
            out["data_dir"] = data
        return out
    if db is not None:
        if data is not None:
            raise UsageError("give --data DIR or --db FILE, not both")
        if not os.path.isfile(db):
            raise ModeldiffError(f"{db}: no such database file; give a DuckDB file or a URL "
                                 "(postgresql://..., spark:local[N], sc://host:port)")
        out["db_file"] = db
        return out
    if data is not None:
        if os.path.isdir(data):
            out["data_dir"] = data
        elif os.path.isfile(data):
            out["db_file"] = data
        else:
            raise ModeldiffError(f"{data}: no such folder or file; give a folder of <table>.parquet/.csv "
                                 "files or a DuckDB database file")
    return out


def add_allow_outside(parser) -> None:
    """The option that lets a model's `source:` paths, or links in --data, lead outside (eval and verify)."""
    parser.add_argument("--allow-data-outside", action="store_true",
                        help="read a table's source: even when it leads outside the model's repository (an "
                             "absolute path, `..`, a link), and files in --data that are links to elsewhere")


def run(args, stdout: TextIO) -> int:
    from modeldiff.backends import open_database
    from modeldiff.data import evaluate_report
    from modeldiff.errors import ModeldiffError

    model = read_checked_model(args.model)
    names = list(args.report or model.reports)
    if not names:
        raise ModeldiffError(f"model {model.name} has no reports; add one under reports: or name one with --report")
    for name in names:
        if name not in model.reports:
            known = ", ".join(sorted(model.reports)) or "none"
            raise ModeldiffError(f"model {model.name} has no report {name}; its reports: {known}")
    if args.format == "csv" and len(names) > 1:
        raise ModeldiffError(f"--format csv writes one report; name it with --report (reports: {', '.join(names)})")
    where = where_the_data_is(args.data, getattr(args, "db", None), getattr(args, "timeout", None))
    from modeldiff.compare import spec_path
    from modeldiff.verify import _Progress

    with open_database(model, spec_path(args.model), allow_outside=args.allow_data_outside, **where) as db:
        step = _Progress(len(names) if where["db_url"] else 0)
        try:
            results = [step(f"report {name}", lambda name=name: evaluate_report(model, name, db, user=args.user))
                       for name in names]
        finally:
            step.close()
    text = as_text(results, stdout) if args.format == "text" else {"json": as_json, "csv": as_csv}[args.format](results)
    stdout.write(text)
    return 0
