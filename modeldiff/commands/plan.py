"""Migration plan between two revisions of a model: ordered steps, each with preconditions, checks and a rollback.

The command's arguments and run; plan.py does the work.
"""

from __future__ import annotations

import json
from typing import TextIO

from modeldiff.plan import FORMATS, as_markdown, as_text, build_plan, plan_json


def configure(parser) -> None:
    parser.add_argument("old", metavar="OLD", help="the old revision: model file, NAME.model/ folder, or REV:PATH")
    parser.add_argument("new", metavar="NEW", help="the new revision, as OLD")
    parser.add_argument("--format", choices=FORMATS, default="text")


def run(args, stdout: TextIO) -> int:
    """Print the plan; exit 0 (the plan is a document: `modeldiff diff` is the gate)."""
    from modeldiff import compare

    md = compare.compare_specs(args.old, args.new)
    plan = build_plan(md)
    changes = {c.id: c for c in md.result.changes}
    if args.format == "json":
        json.dump(plan_json(plan), stdout, indent=2)
        stdout.write("\n")
    elif args.format == "markdown":
        as_markdown(plan, changes, stdout)
    else:
        as_text(plan, changes, stdout)
    return 0
