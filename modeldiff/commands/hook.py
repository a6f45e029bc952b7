"""The pre-push gate: `modeldiff hook install | uninstall | status`, and `hook run`, which the hook calls.

The command's arguments and run; hook.py does the work.
"""

from __future__ import annotations

import os
import sys
from typing import TextIO

from modeldiff.hook import install, run_hook, status, uninstall


def configure(parser) -> None:
    sub = parser.add_subparsers(dest="action", metavar="ACTION", parser_class=type(parser), required=True)
    for name, text in (
        ("install", "install the pre-push hook (keeps and chains a hook already there)"),
        ("uninstall", "remove the pre-push hook and put back the one that was there before"),
        ("status", "say which pre-push hook is installed and where"),
    ):
        p = sub.add_parser(name, help=text)
        p.add_argument("--repo", default=".", metavar="DIR", help="the repository (default: the current folder)")
    p = sub.add_parser("run", help="what the hook runs: reads git's pre-push lines on stdin")
    p.add_argument("remote", nargs="?", help="the remote's name (git's first hook argument)")
    p.add_argument("url", nargs="?", help="the remote's URL (git's second hook argument)")
    p.add_argument("--from-env", action="store_true",
                   help="take the range from PRE_COMMIT_FROM_REF / PRE_COMMIT_TO_REF instead of stdin")
    p.add_argument("--repo", default=".", metavar="DIR", help="the repository (default: the current folder)")


def run(args, stdout: TextIO) -> int:
    if args.action == "run":
        return run_hook(args.remote, from_env=args.from_env, stdin=sys.stdin, stdout=stdout,
                        stderr=sys.stderr, env=os.environ, repo=args.repo)
    if args.action == "install":
        return install(args.repo, stdout)
    if args.action == "uninstall":
        return uninstall(args.repo, stdout)
    return status(args.repo, stdout)
