"""Command line: `main(argv) -> exit code`. Heavy libraries are imported lazily.

Every command returns its exit code; streams are passed in so tests call
`main([...], stdout=..., stderr=...)` directly. Known errors become one line
on stderr and exit 2.
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import Sequence, TextIO

from modeldiff import __version__
from modeldiff.errors import ModeldiffError, UsageError


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse would print usage and exit 2 itself
        raise UsageError(f"{message} (see 'modeldiff {self.prog.split()[-1]} --help')" if " " in self.prog
                         else f"{message} (see 'modeldiff --help')")


def read_model(spec: str):
    """(label, LoadResult) for a path on disk or a `REV:PATH` spec."""
    from modeldiff import load

    if os.path.exists(spec):
        return spec, load.load_path(spec)
    if ":" in spec:
        from modeldiff import git

        source = git.read_spec(spec)
        return spec, load.load_files(source.files)
    raise ModeldiffError(f"{spec}: no such file or folder; give a model file, a NAME.model/ folder, or REV:PATH")


# --- commands ------------------------------------------------------------------------


def cmd_check(args, stdout: TextIO) -> int:
    from modeldiff import check
    from modeldiff.render import check_out

    label, result = read_model(args.model)
    findings = check.check_model(result.model, result.findings)
    if args.format == "json":
        check_out.as_json(result.model.name, findings, stdout)
    elif args.format == "markdown":
        check_out.as_markdown(result.model.name, label, findings, stdout)
    else:
        check_out.as_text(result.model.name, label, findings, stdout)
    return check.exit_code(findings, strict=args.strict)


def cmd_schema(args, stdout: TextIO) -> int:
    from modeldiff import load

    stdout.write(load.schema_text())
    return 0


def build_parser() -> argparse.ArgumentParser:
    from modeldiff.render import FORMATS

    parser = _Parser(prog="modeldiff", description="What a change to an analytical model does to its numbers and its row security.")
    parser.add_argument("--version", action="version", version=f"modeldiff {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("check", help="check one revision of a model against the rules")
    p.add_argument("model", metavar="MODEL", help="model file, NAME.model/ folder, or REV:PATH")
    p.add_argument("--format", choices=FORMATS, default="text")
    p.add_argument("--strict", action="store_true", help="exit 1 when there are warnings")
    p.set_defaults(run=cmd_check)

    p = sub.add_parser("schema", help="print the JSON Schema of the model file format")
    p.set_defaults(run=cmd_schema)
    return parser


def main(argv: Sequence[str] | None = None, stdout: TextIO | None = None, stderr: TextIO | None = None) -> int:
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not args.command:
            parser.print_help(stdout)
            return 2
        return args.run(args, stdout)
    except ModeldiffError as exc:
        print(f"modeldiff: {exc}", file=stderr)
        return exc.exit_code
    except BrokenPipeError:
        return 0
    except KeyboardInterrupt:
        print("modeldiff: interrupted", file=stderr)
        return 130
