"""Release notes for a range of commits: what changed in each model, in plain words, grouped by severity.

The command's arguments and run; notes.py does the work.
"""

from __future__ import annotations

from typing import TextIO

from modeldiff.errors import UsageError
from modeldiff.notes import (FORMATS, Spool, as_markdown, commit_models_json, commit_piece, read_notes, split_range,
                             write_json)


def configure(parser) -> None:
    parser.add_argument("range", metavar="REV_RANGE", help="A..B or A...B, git's notation (A.. means A..HEAD)")
    parser.add_argument("--format", choices=FORMATS, default="markdown")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--per-commit", dest="mode", action="store_const", const="per-commit",
                      help="one section per commit, with its subject line")
    mode.add_argument("--squash", dest="mode", action="store_const", const="squash",
                      help="one section per model, the range as a whole (the default)")
    parser.set_defaults(mode="squash")
    parser.add_argument("--repo", metavar="DIR", default=".", help="the repository (default: the current folder)")
    parser.add_argument("--budget", metavar="N|none", default=None,
                        help="markdown: at most N characters (default 65536, a pull-request comment; 1MiB for a CI "
                             "job summary), the breaking changes whole and the rest folded and counted; none: "
                             "everything")


def run(args, stdout: TextIO) -> int:
    from modeldiff import git

    from modeldiff.render import md_budget

    split_range(args.range)  # a bad range is a usage error before git is touched
    budget = md_budget.COMMENT if args.budget is None else md_budget.parse_budget(args.budget)
    if args.budget is not None and args.format != "markdown":
        raise UsageError("--budget goes with --format markdown (json always holds everything)")
    root = git.repo_root(args.repo)
    spool = Spool()
    try:
        piece = commit_models_json if args.format == "json" else commit_piece
        render = (lambda c: spool.add(piece(c)) if c.changed_models or args.format == "json" else None)
        with git.session(root):  # one open repository for the whole walk
            notes = read_notes(root, args.range, args.mode, render)
        if args.format == "json":
            write_json(notes, stdout, spool)
        else:
            as_markdown(notes, stdout, spool, budget)
    finally:
        spool.close()
    return 0
