"""Command line: `main(argv) -> exit code`. Heavy libraries are imported lazily.

Every command returns its exit code; streams are passed in so tests call
`main([...], stdout=..., stderr=...)` directly. Known errors become one line
on stderr and exit 2.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from typing import Sequence, TextIO

from modeldiff import __version__
from modeldiff.errors import ModeldiffError, UsageError


# Commands that live in modules of their own: (name, module, one-line help).
# Each module defines configure(parser) and run(args, stdout) -> exit
# code; only the module of the command being run is imported, so a command
# pays for no other command's imports.
EXTRA_COMMANDS = (
    ("graph", "modeldiff.commands.picture",
     "draw a model's filter graph (Mermaid, Graphviz dot, SVG or text), optionally in one measure's or report's setting"),
    ("plan", "modeldiff.commands.plan",
     "a migration plan from OLD to NEW: ordered steps with preconditions, checks (SQL for data) and rollbacks"),
    ("notes", "modeldiff.commands.notes",
     "release notes for a range of commits (A..B): what changed in each model, by severity, with a diagram"),
    ("hook", "modeldiff.commands.hook",
     "install, remove or show the pre-push hook that blocks unacknowledged breaking model changes"),
    ("eval", "modeldiff.commands.evaluate",
     "evaluate a model's reports on data (Parquet, CSV or a DuckDB file) and print their numbers"),
    ("verify", "modeldiff.commands.verify",
     "evaluate OLD and NEW on the same data: which numbers really move, and whether the data meets the change's preconditions"),
    ("draft", "modeldiff.commands.draft",
     "write a first model file from a database's catalog (a DuckDB file or a DDL script): tables, keys, links, guessed kinds"),
)


class _Formatter(argparse.HelpFormatter):
    """argparse's own help layout, its width found without importing shutil (0.002 s on every command)."""

    def __init__(self, prog: str, indent_increment: int = 2, max_help_position: int = 24, width: int | None = None):
        super().__init__(prog, indent_increment, max_help_position, _terminal_columns() - 2 if width is None else width)


def _terminal_columns() -> int:
    """The terminal's width as `shutil.get_terminal_size` finds it: COLUMNS, the terminal, else 80."""
    try:
        columns = int(os.environ.get("COLUMNS", "0"))
    except ValueError:
        columns = 0
    if columns <= 0:
        try:
            columns = os.get_terminal_size(sys.__stdout__.fileno()).columns
        except (AttributeError, ValueError, OSError):
            columns = 0
    return columns if columns > 0 else 80


class _Parser(argparse.ArgumentParser):
    def __init__(self, *args, **kwargs) -> None:
        kwargs.setdefault("formatter_class", _Formatter)
        super().__init__(*args, **kwargs)

    def error(self, message: str):  # argparse would print usage and exit 2 itself
        raise UsageError(f"{message} (see 'modeldiff {self.prog.split()[-1]} --help')" if " " in self.prog
                         else f"{message} (see 'modeldiff --help')")


# --- commands ------------------------------------------------------------------------


def cmd_check(args, stdout: TextIO) -> int:
    from modeldiff import check
    from modeldiff.compare import check_spec
    from modeldiff.render import check_out

    label, model, findings = check_spec(args.model, use_cache=not args.no_cache)
    if args.db is not None or args.data is not None:  # the data-aware check (modeldiff.datacheck)
        from modeldiff.datacheck import with_data_findings

        findings = with_data_findings(model, findings, args.db, args.data, args.schema)
    if args.format == "json":
        check_out.as_json(model.name, findings, stdout)
    elif args.format == "github":
        from modeldiff.render import github

        github.check_annotations(model.name, findings, stdout)
    elif args.format == "markdown":
        check_out.as_markdown(model.name, label, findings, stdout)
    else:
        check_out.as_text(model.name, label, findings, stdout)
    return check.exit_code(findings, strict=args.strict)


def cmd_diff(args, stdout: TextIO) -> int:
    from modeldiff import compare
    from modeldiff.render import md_budget

    budget = md_budget.COMMENT if args.budget is None else md_budget.parse_budget(args.budget)
    if args.budget is not None and args.format != "markdown":
        raise UsageError("--budget goes with --format markdown (json and html always hold everything)")
    from modeldiff.render import diff_out

    diffs: list[compare.ModelDiff] = []
    if args.base is None:
        if len(args.models) != 2:
            raise UsageError("diff takes OLD and NEW (paths or REV:PATH), or --base REV [--head REV] [MODEL ...]")
        if args.head is not None:
            raise UsageError("--head goes with --base")
        old_spec, new_spec = args.models
        diffs.append(compare.compare_specs(old_spec, new_spec, use_cache=not args.no_cache))
    else:
        from modeldiff import git

        root = git.repo_root(".")
        if args.models:
            paths = [git.model_path_of(compare.repo_relative(root, m)) or compare.repo_relative(root, m) for m in args.models]
        else:
            paths = sorted(set(git.list_models(root, args.base)) | set(git.list_models(root, args.head)))
        if not paths:
            raise ModeldiffError(f"no model files (*.model.yaml or *.model/) found at {args.base} or "
                                 f"{args.head or 'the working tree'}; name them after --base")
        diffs.extend(compare.compare_revisions(root, args.base, args.head, paths, use_cache=not args.no_cache))
    if args.format == "html":
        from modeldiff.render import html

        html.as_html(diffs, stdout)
    elif args.format == "github":
        from modeldiff.render import github

        github.as_github(diffs, stdout)
    elif args.format == "markdown":
        md_budget.as_markdown(diffs, stdout, budget)
    else:
        {"json": diff_out.as_json}.get(args.format, diff_out.as_text)(diffs, stdout)
    from modeldiff.changes import EXIT_CODES

    return EXIT_CODES[diff_out.verdict_of(diffs)]


def cmd_schema(args, stdout: TextIO) -> int:
    from modeldiff import load

    stdout.write(load.schema_text())
    return 0


def _command_of(argv: Sequence[str]) -> str | None:
    """The command word of `argv` (its first word that is not an option)."""
    return next((word for word in argv if not word.startswith("-")), None)


def build_parser(argv: Sequence[str] = ()) -> argparse.ArgumentParser:
    from modeldiff.render import FORMATS

    parser = _Parser(prog="modeldiff", description="What a change to an analytical model does to its numbers and its row security.")
    parser.add_argument("--version", action="store_true", help="print the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("check", help="check one revision of a model against the rules")
    p.add_argument("model", metavar="MODEL", help="model file, NAME.model/ folder, or REV:PATH")
    p.add_argument("--format", choices=FORMATS + ("github",), default="text")
    p.add_argument("--strict", action="store_true", help="exit 1 when there are warnings")
    p.add_argument("--no-cache", action="store_true", help="read and check afresh, ignoring and not writing the cache")
    p.add_argument("--db", metavar="FILE.duckdb|URL",
                   help="also check the model against this DuckDB file's or postgresql:// database's tables (read-only)")
    p.add_argument("--data", metavar="DIR", help="also check the model against <table>.parquet or <table>.csv in DIR")
    p.add_argument("--schema", metavar="NAME",
                   help="with --db: the schema holding the tables (default: main; PostgreSQL: public)")
    p.set_defaults(run=cmd_check)

    p = sub.add_parser("diff", help="compare two revisions: changes, and what could return different numbers")
    p.add_argument("models", nargs="*", metavar="MODEL", help="OLD NEW (paths or REV:PATH); with --base, the models to compare (default: all)")
    p.add_argument("--base", metavar="REV", help="compare every model file at REV with the working tree (or --head)")
    p.add_argument("--head", metavar="REV", help="with --base: compare with this revision instead of the working tree")
    p.add_argument("--format", choices=FORMATS + ("html", "github"), default="text")
    p.add_argument("--no-cache", action="store_true", help="read and compare afresh, ignoring and not writing the cache")
    p.add_argument("--budget", metavar="N|none", default=None,
                   help="markdown: at most N characters (default 65536, a pull-request comment; 1MiB for a CI job "
                        "summary), the breaking changes whole and the rest folded and counted; none: everything")
    p.set_defaults(run=cmd_diff)

    p = sub.add_parser("schema", help="print the JSON Schema of the model file format")
    p.set_defaults(run=cmd_schema)

    wanted = _command_of(argv)
    for name, module_name, help_text in EXTRA_COMMANDS:
        if name != wanted:
            sub.add_parser(name, help=help_text)  # listed in --help; configured only when it runs
            continue
        module = importlib.import_module(module_name)
        p = sub.add_parser(name, help=help_text, description=module.__doc__.strip().splitlines()[0] if module.__doc__ else None)
        module.configure(p)
        p.set_defaults(run=module.run)
    return parser


class _ReaderMayLeave:
    """The output stream of a command: once its reader has gone away (`modeldiff diff ... | head -1`), the
    rest of the output is dropped and the command goes on to its verdict, which stays the exit code.

    A gate's exit code must never turn into 0 because someone read only the first line.
    """

    def __init__(self, stream: TextIO) -> None:
        self._stream = stream
        self.gone = False

    def write(self, text: str) -> int:
        if not self.gone:
            try:
                return self._stream.write(text)
            except BrokenPipeError:
                self.gone = True
        return len(text)

    def writelines(self, lines) -> None:
        for text in lines:
            self.write(text)

    def flush(self) -> None:
        if not self.gone:
            try:
                self._stream.flush()
            except BrokenPipeError:
                self.gone = True

    def __getattr__(self, name: str):
        return getattr(self._stream, name)


def main(argv: Sequence[str] | None = None, stdout: TextIO | None = None, stderr: TextIO | None = None) -> int:
    stdout = _ReaderMayLeave(stdout or sys.stdout)
    stderr = stderr or sys.stderr
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv == ["--version"]:  # the fast path: no parser, no command modules
        print(f"modeldiff {__version__}", file=stdout)
        return 0
    try:
        parser = build_parser(argv)
        args = parser.parse_args(argv)
        if args.version:
            print(f"modeldiff {__version__}", file=stdout)
            return 0
        if not args.command:
            parser.print_help(stderr)
            raise UsageError("no command given; try 'modeldiff check MODEL' or 'modeldiff diff OLD NEW'")
        return args.run(args, stdout)
    except ModeldiffError as exc:
        print(f"modeldiff: {exc}", file=stderr)
        return exc.exit_code
    except BrokenPipeError:  # a write that did not go through `stdout` met a closed pipe: the verdict is unknown
        return 2
    except KeyboardInterrupt:
        print("modeldiff: interrupted", file=stderr)
        return 130


def run() -> None:
    """The `modeldiff` program: `main()`, then leave without tearing down the process.

    A diff of a large model holds a few hundred thousand small records; freeing
    them one by one at exit cost 0.03-0.05 s, a tenth of the whole command. Every
    file, repository and connection is closed by the time `main` returns (each
    lives in a `with` block or a try/finally), so once the output is flushed
    nothing is left to do and the process ends at once. Tests call `main`.
    """
    code = main()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a reader that went away, or a closed stream: nothing more can be said
            pass
    os._exit(code)
