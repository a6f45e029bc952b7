"""`modeldiff verify OLD NEW`: its arguments, and the run that prints the verification (verify.py does the work)."""

from __future__ import annotations

from typing import TextIO

from modeldiff.errors import ModeldiffError
from modeldiff.verify import DEFAULT_LIMIT, FORMATS, verify


def configure(parser) -> None:
    parser.add_argument("old", metavar="OLD", help="the old revision: model file, NAME.model/ folder, or REV:PATH")
    parser.add_argument("new", metavar="NEW", help="the new revision, as OLD")
    parser.add_argument("--data", metavar="DIR", help="folder holding <table>.parquet or <table>.csv "
                                                      "(default: each table's source: in the model)")
    parser.add_argument("--db", metavar="FILE|URL",
                        help="a DuckDB database file holding one table per model table, or a server: "
                             "postgresql://user@host:port/dbname, spark:local[N], sc://host:port (read-only)")
    from modeldiff.commands.evaluate import add_timeout

    add_timeout(parser)
    parser.add_argument("--format", choices=FORMATS, default="text")
    parser.add_argument("--user", metavar="EMAIL", help="the person viewing, for roles and reports filtering on :user")
    parser.add_argument("--all", dest="everything", action="store_true",
                        help="evaluate every report, measure and role, listed by the diff or not; anything that "
                             "moved without the diff listing it is a defect of the tool (exit 3)")
    parser.add_argument("--limit", metavar="N", type=int, default=DEFAULT_LIMIT,
                        help=f"differences listed per report or measure (default {DEFAULT_LIMIT}; 0: all)")
    from modeldiff.commands.evaluate import add_allow_outside

    add_allow_outside(parser)


def run(args, stdout: TextIO) -> int:
    """Verify, print, and exit 0 (nothing moved), 1 (numbers moved), 3 (precondition failed or rows exposed)."""
    from modeldiff import compare
    from modeldiff.render import verify_out

    if args.limit is not None and args.limit < 0:
        raise ModeldiffError(f"--limit {args.limit}: give 0 (list every difference) or a positive number")
    md = compare.compare_specs(args.old, args.new)
    from modeldiff.commands.evaluate import where_the_data_is

    where = where_the_data_is(args.data, args.db, args.timeout)
    verification = verify(md, where["data_dir"], where["db_file"], args.user, allow_outside=args.allow_data_outside,
                          everything=args.everything, db_url=where["db_url"], timeout=where["timeout"])
    render = {"json": verify_out.as_json, "markdown": verify_out.as_markdown}.get(args.format, verify_out.as_text)
    render(verification, stdout, limit=args.limit)
    return verification.exit_code
