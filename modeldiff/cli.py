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


def _empty_model(name: str):
    from modeldiff.model import Model

    return Model(name=name, tables={})


def _diff_pair(old_spec: str | None, new_spec: str | None, old_side, new_side):
    """One ModelDiff; a side that is None is a model absent there (whole-model addition or removal)."""
    from modeldiff import impact, load
    from modeldiff.render.diff_out import ModelDiff

    def side(spec, source):
        if source is not None:
            return load.load_files(source.files)
        if spec is not None:
            return read_model(spec)[1]
        return None

    old_result, new_result = side(*old_side), side(*new_side)
    name = (new_result or old_result).model.name
    old_model = old_result.model if old_result else _empty_model(name)
    new_model = new_result.model if new_result else _empty_model(name)
    return impact.analyse(old_model, new_model, old_result.findings if old_result else (),
                          new_result.findings if new_result else ())


def _split_side(spec: str) -> tuple[str | None, str]:
    if not os.path.exists(spec) and ":" in spec:
        rev, _, path = spec.partition(":")
        return rev, path
    return None, spec


def cmd_diff(args, stdout: TextIO) -> int:
    from modeldiff.render import diff_out
    from modeldiff.render.diff_out import ModelDiff, Side

    diffs: list[ModelDiff] = []
    if args.base is None:
        if len(args.models) != 2:
            raise UsageError("diff takes OLD and NEW (paths or REV:PATH), or --base REV [--head REV] [MODEL ...]")
        if args.head is not None:
            raise UsageError("--head goes with --base")
        old_spec, new_spec = args.models
        result = _diff_pair(old_spec, new_spec, (old_spec, None), (new_spec, None))
        diffs.append(ModelDiff(Side(*_split_side(old_spec)), Side(*_split_side(new_spec)), result))
    else:
        from modeldiff import git

        root = git.repo_root(".")
        if args.models:
            paths = [git.model_path_of(_repo_relative(root, m)) or _repo_relative(root, m) for m in args.models]
        else:
            paths = sorted(set(git.list_models(root, args.base)) | set(git.list_models(root, args.head)))
        if not paths:
            raise ModeldiffError(f"no model files (*.model.yaml or *.model/) found at {args.base} or "
                                 f"{args.head or 'the working tree'}; name them after --base")
        diffs.extend(_diff_revisions(root, args.base, args.head, paths))
    {"json": diff_out.as_json, "markdown": diff_out.as_markdown}.get(args.format, diff_out.as_text)(diffs, stdout)
    from modeldiff.changes import EXIT_CODES

    return EXIT_CODES[diff_out.verdict_of(diffs)]


def _diff_revisions(root: str, base: str, head: str | None, paths: list[str]):
    """ModelDiffs for `paths` between two revisions; a model moved to another path is paired by its name."""
    from modeldiff import git, impact, load
    from modeldiff.render.diff_out import ModelDiff, Side

    pairs: list[tuple[str | None, str | None]] = []
    old_only: dict[str, object] = {}
    new_only: dict[str, object] = {}
    loaded: dict[tuple[str, str | None], object] = {}
    for path in paths:
        old_source, new_source = git.read_at(root, base, path), git.read_at(root, head, path)
        if old_source is None and new_source is None:
            raise ModeldiffError(f"{path}: not found at {base} nor at {head or 'the working tree'}; check the path")
        for side, source in (("old", old_source), ("new", new_source)):
            if source is not None:
                loaded[(side, path)] = load.load_files(source.files)
        if old_source is not None and new_source is not None:
            pairs.append((path, path))
        elif old_source is not None:
            old_only[path] = loaded[("old", path)]
        else:
            new_only[path] = loaded[("new", path)]
    # a model present only at an old path and only at a new path, under the same name, was moved
    by_name_new: dict[str, list[str]] = {}
    for path, result in new_only.items():
        by_name_new.setdefault(result.model.name, []).append(path)
    for path, result in sorted(old_only.items()):
        candidates = by_name_new.get(result.model.name, [])
        if len(candidates) == 1:
            pairs.append((path, candidates.pop()))
        else:
            pairs.append((path, None))
    pairs += [(None, path) for paths_left in by_name_new.values() for path in paths_left]

    out = []
    for old_path, new_path in sorted(pairs, key=lambda p: (p[1] or p[0], p[0] or "")):
        old_result = loaded.get(("old", old_path)) if old_path else None
        new_result = loaded.get(("new", new_path)) if new_path else None
        name = (new_result or old_result).model.name
        result = impact.analyse(old_result.model if old_result else _empty_model(name),
                                new_result.model if new_result else _empty_model(name),
                                old_result.findings if old_result else (), new_result.findings if new_result else ())
        out.append(ModelDiff(Side(base, old_path or new_path), Side(head, new_path or old_path), result))
    return out


def _repo_relative(root: str, path: str) -> str:
    absolute = os.path.abspath(path)
    rel = os.path.relpath(absolute, root)
    return rel.replace(os.sep, "/") if not rel.startswith("..") else path


def cmd_schema(args, stdout: TextIO) -> int:
    from modeldiff import load

    stdout.write(load.schema_text())
    return 0


def build_parser() -> argparse.ArgumentParser:
    from modeldiff.render import FORMATS

    parser = _Parser(prog="modeldiff", description="What a change to an analytical model does to its numbers and its row security.")
    parser.add_argument("--version", action="store_true", help="print the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("check", help="check one revision of a model against the rules")
    p.add_argument("model", metavar="MODEL", help="model file, NAME.model/ folder, or REV:PATH")
    p.add_argument("--format", choices=FORMATS, default="text")
    p.add_argument("--strict", action="store_true", help="exit 1 when there are warnings")
    p.set_defaults(run=cmd_check)

    p = sub.add_parser("diff", help="compare two revisions: changes, and what could return different numbers")
    p.add_argument("models", nargs="*", metavar="MODEL", help="OLD NEW (paths or REV:PATH); with --base, the models to compare (default: all)")
    p.add_argument("--base", metavar="REV", help="compare every model file at REV with the working tree (or --head)")
    p.add_argument("--head", metavar="REV", help="with --base: compare with this revision instead of the working tree")
    p.add_argument("--format", choices=FORMATS, default="text")
    p.set_defaults(run=cmd_diff)

    p = sub.add_parser("schema", help="print the JSON Schema of the model file format")
    p.set_defaults(run=cmd_schema)
    return parser


def main(argv: Sequence[str] | None = None, stdout: TextIO | None = None, stderr: TextIO | None = None) -> int:
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    try:
        parser = build_parser()
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
    except BrokenPipeError:
        return 0
    except KeyboardInterrupt:
        print("modeldiff: interrupted", file=stderr)
        return 130
