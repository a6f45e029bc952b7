"""Command line: `main(argv) -> exit code`. Heavy libraries are imported lazily."""

from __future__ import annotations

import argparse
import sys
from typing import Sequence, TextIO

from modeldiff import __version__
from modeldiff.errors import ModeldiffError


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse would exit 2 with a usage dump
        from modeldiff.errors import UsageError

        raise UsageError(f"{message} (see 'modeldiff --help')")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="modeldiff", description="What a change to an analytical model does to its numbers.")
    parser.add_argument("--version", action="version", version=f"modeldiff {__version__}")
    sub = parser.add_subparsers(dest="command", parser_class=_Parser)
    return parser


def main(argv: Sequence[str] | None = None, stdout: TextIO | None = None, stderr: TextIO | None = None) -> int:
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if not args.command:
            parser.print_help(stdout)
            return 2
        return args.run(args, stdout)
    except ModeldiffError as exc:
        print(f"modeldiff: {exc}", file=stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("modeldiff: interrupted", file=stderr)
        return 130
