"""Rendering the result of `modeldiff diff`: JSON (the contract), text (rich) and Markdown.

Everything here reads `DiffResult` records; nothing is re-derived.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence, TextIO

from modeldiff.changes import EXIT_CODES, SEVERITIES, worst
from modeldiff.compare import ModelDiff, Side  # noqa: F401 (Side re-exported)
from modeldiff.impact import DiffResult, Impact, Reason

SECURITY_CAUTION = ("Row security changed in a way that can expose rows. modeldiff reads only the model's definition; "
                    "the organisation's own security review decides whether this is acceptable.")
MARKDOWN_LIST_LIMIT = 15  # rows shown before a list is folded into <details>



# --- JSON -----------------------------------------------------------------------------


def _paths(paths) -> list[list[str]]:
    return [list(p) for p in paths]


def reason_json(r: Reason) -> dict:
    out = {"change": r.change, "source": r.source, "paths_added": _paths(r.paths_added),
           "paths_removed": _paths(r.paths_removed), "message": r.message}
    if r.via is not None:
        out["via"] = r.via
    if r.route:
        out["route"] = list(r.route)
    return out


def impact_json(i: Impact, role: bool = False) -> dict:
    out = {"name": i.name, "severity": i.severity}
    if role:
        out.update(exposed=list(i.exposed), tightened=list(i.tightened), rerouted=list(i.rerouted))
    out["reasons"] = [reason_json(r) for r in i.reasons]
    return out


def model_json(md: ModelDiff) -> dict:
    r = md.result
    counts = r.counts()
    return {
        "format": 1,
        "model": r.new.name or r.old.name,
        "old": {"rev": md.old.rev, "path": md.old.path},
        "new": {"rev": md.new.rev, "path": md.new.path},
        "changes": [{"id": c.id, "kind": c.kind, "subject": c.subject, "severity": c.severity,
                     "before": c.before, "after": c.after, "message": c.message, **({"details": dict(c.details)} if c.details else {})}
                    for c in r.changes],
        "impacts": {
            "measures": [impact_json(i) for i in r.measures],
            "roles": [impact_json(i, role=True) for i in r.roles],
            "reports": [impact_json(i) for i in r.reports],
        },
        "findings": [{"rule": f.rule, "severity": f.severity, "subject": f.subject, "message": f.message} for f in r.new_errors],
        "summary": {**counts, "errors": len(r.new_errors),
                    "new_warnings": sum(c.kind == "warning.added" for c in r.changes),  # among the safe changes
                    "verdict": r.verdict, "exit_code": r.exit_code},
    }


def verdict_of(diffs: Sequence[ModelDiff]) -> str:
    return worst(d.result.verdict for d in diffs)


def as_json(diffs: Sequence[ModelDiff], stream: TextIO) -> None:
    """One model: the document of changes.md. Several: {"format": 1, "models": [...], "summary": ...}."""
    if len(diffs) == 1:
        doc = model_json(diffs[0])
    else:
        docs = [model_json(d) for d in diffs]
        summary = {k: sum(d["summary"][k] for d in docs) for k in ("breaking", "numbers", "safe", "errors",
                                                                     "new_warnings")}
        verdict = verdict_of(diffs)
        doc = {"format": 1, "models": docs, "summary": {**summary, "verdict": verdict, "exit_code": EXIT_CODES[verdict]}}
    import json

    json.dump(doc, stream, indent=2)
    stream.write("\n")


# --- text -----------------------------------------------------------------------------

_STYLE = {"breaking": "bold red", "numbers": "yellow", "safe": "green"}


def _side(side: Side) -> str:
    return f"{side.rev}:{side.path}" if side.rev else side.path


def _path_text(path) -> str:
    return " / ".join(path)


def _role_kind(kind: str) -> bool:
    return kind.startswith("security.") or kind.startswith("role.")


def reason_words(reason: Reason, kinds: dict[str, str]) -> str:
    """`c3 link.flow_widened, when filtered or grouped by calendar, via stock_value` (no paths)."""
    kind = kinds.get(reason.change, "")
    bits = [f"{reason.change} {kind}".strip()]
    if reason.source:
        bits.append(f"through the role's filter on {reason.source}" if _role_kind(kind)
                    else f"when filtered or grouped by {reason.source}")
    if reason.via:
        bits.append(f"via {reason.via}")
    return ", ".join(bits)


def _role_extras(i: Impact) -> str:
    parts = [f"{label}: {', '.join(tables)}" for label, tables in
             (("exposed", i.exposed), ("tightened", i.tightened), ("rerouted", i.rerouted)) if tables]
    return "; ".join(parts)


def as_text(diffs: Sequence[ModelDiff], stream: TextIO) -> None:
    from modeldiff.render import TextOut, causes_out

    out = TextOut(stream)
    for md in diffs:
        r = md.result
        counts = r.counts()
        kinds = {c.id: c.kind for c in r.changes}
        out.line((r.new.name or r.old.name, "bold"), f": {_side(md.old)} -> {_side(md.new)}")
        if not r.changes and not r.new_errors:
            out.line("  ", ("no changes", "green"))
            out.line()
            continue
        out.line("  verdict: ", (r.verdict, _STYLE[r.verdict]),
                 f" ({counts['breaking']} breaking, {counts['numbers']} can move numbers, {counts['safe']} safe)")
        if any(c.kind == "security.exposed" for c in r.changes):
            out.paragraph(SECURITY_CAUTION, 4, "  ", ("SECURITY:", "bold red"), " ")
        causes_out.write_text(out, r)
        for severity in reversed(SEVERITIES):
            group = [c for c in r.changes if c.severity == severity]
            if not group:
                continue
            out.line()
            out.line("  ", (severity, _STYLE[severity]))
            for c in group:
                out.line(f"    {c.id} ", (c.kind, _STYLE[severity]), f" {c.subject}")
                out.paragraph(c.message, 7)
        if r.new_errors:
            out.line()
            out.line("  ", ("errors in the new revision", "bold red"), " (run `modeldiff check` for details)")
            for f in r.new_errors:
                out.paragraph(f"{f.rule} {f.subject}: {f.message}", 4)
        for title, impacts in (("measures", r.measures), ("roles", r.roles), ("reports", r.reports)):
            if not impacts:
                continue
            out.line()
            out.line("  ", (f"impacted {title}", "bold"), f" ({len(impacts)})")
            for i in impacts:
                extra = _role_extras(i)
                out.line("    ", (i.name, _STYLE[i.severity]), f" ({i.severity})" + (f"  {extra}" if extra else ""))
                for reason in i.reasons:
                    out.paragraph(reason_words(reason, kinds), 7)
                    for p in reason.paths_added:
                        out.line(f"         + {_path_text(p)}")
                    for p in reason.paths_removed:
                        out.line(f"         - {_path_text(p)}")
                    if reason.route:
                        out.line(f"         route {' -> '.join(reason.route)}")
        out.line()


# --- Markdown ---------------------------------------------------------------------------


def _md(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _fold(title: str, rows: list[str], header: Sequence[str] = ()) -> list[str]:
    """The first rows shown, the rest folded into <details> (a table's header is repeated inside it)."""
    if len(rows) <= MARKDOWN_LIST_LIMIT:
        return list(header) + rows
    shown, rest = rows[:MARKDOWN_LIST_LIMIT], rows[MARKDOWN_LIST_LIMIT:]
    return (list(header) + shown + ["", f"<details><summary>{len(rest)} more {title}</summary>", ""]
            + list(header) + rest + ["", "</details>"])


def _md_reason(x: Reason, kinds: dict[str, str]) -> str:
    kind = kinds.get(x.change, "")
    text = f"{x.change}" + (f" `{kind}`" if kind else "") + (f" via {x.via}" if x.via else "")
    if x.source:
        text += f", role filter on `{x.source}`" if _role_kind(kind) else f", by `{x.source}`"
    text += "".join(f", + {_path_text(p)}" for p in x.paths_added)
    text += "".join(f", − {_path_text(p)}" for p in x.paths_removed)
    if x.route:
        text += f", route {' -> '.join(x.route)}"
    return text


def _md_diagrams(diffs: Sequence[ModelDiff]) -> list[str]:
    """A Mermaid picture of each model whose links or filter paths changed (GitHub renders the fence)."""
    from modeldiff.picture import diff_picture, mermaid_of, readable

    lines: list[str] = []
    for md in diffs:
        pic = diff_picture(md.result)
        if pic is None:
            continue
        pic = readable(pic)
        name = md.result.new.name or md.result.old.name
        lines += ["", f"**Filter graph of `{name}`**: arrows point the way a filter travels; changed links are red, "
                  "tables a filter now reaches along a new path are outlined in red, dotted links carry no filter.", "",
                  "```mermaid", mermaid_of(pic).rstrip("\n"), "```"]
        if pic.caption:
            lines += ["", f"_{_md(pic.caption)}_"]
    return lines


def as_markdown(diffs: Sequence[ModelDiff], stream: TextIO) -> None:
    from modeldiff.render import causes_out

    lines = ["## modeldiff", "", "| model | verdict | breaking | can move numbers | safe | impacted measures | roles | reports |",
             "|---|---|---|---|---|---|---|---|"]
    for md in diffs:
        r, c = md.result, md.result.counts()
        lines.append(f"| `{r.new.name or r.old.name}` | **{r.verdict}** | {c['breaking']} | {c['numbers']} | {c['safe']} | "
                     f"{len(r.measures)} | {len(r.roles)} | {len(r.reports)} |")
    lines += _md_diagrams(diffs)
    for md in diffs:
        r = md.result
        kinds = {c.id: c.kind for c in r.changes}
        lines += ["", f"### `{r.new.name or r.old.name}`: `{_side(md.old)}` → `{_side(md.new)}`", ""]
        if any(c.kind == "security.exposed" for c in r.changes):
            lines += [f"> **SECURITY:** {SECURITY_CAUTION}", ""]
        by_cause = causes_out.markdown_lines(r)
        lines += by_cause + ([""] if by_cause else [])
        if not r.changes and not r.new_errors:
            lines.append("No changes.")
            continue
        header = ["| id | severity | kind | subject | what it means |", "|---|---|---|---|---|"]
        body = [f"| {c.id} | {c.severity} | `{c.kind}` | `{c.subject}` | {_md(c.message)} |" for c in r.changes]
        lines += _fold("changes", body, header)
        if r.new_errors:
            lines += ["", "**Errors in the new revision:**", ""] + [f"- `{f.rule}` `{f.subject}`: {_md(f.message)}" for f in r.new_errors]
        for title, impacts in (("measures", r.measures), ("roles", r.roles), ("reports", r.reports)):
            if not impacts:
                continue
            lines += ["", f"#### Impacted {title} ({len(impacts)})", ""]
            items = []
            for i in impacts:
                why = "; ".join(_md_reason(x, kinds) for x in i.reasons)
                extra = _role_extras(i)
                extra = f" — **{extra}**" if extra else ""
                items.append(f"- **{i.name}** ({i.severity}){_md(extra)}: {_md(why)}")
            lines += _fold(title, items)
        lines += _instead_of_two_way(md)
    stream.write("\n".join(lines) + "\n")


def _instead_of_two_way(md) -> list[str]:
    """The proposal in place of each link made two-way (modeldiff.proposal), with its patch."""
    from modeldiff import proposal
    from modeldiff.render import proposal_out

    return proposal_out.markdown_lines(proposal.proposals(md), level="####")
