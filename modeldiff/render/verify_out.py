"""Rendering `modeldiff verify`: JSON (the contract), text (rich) and Markdown.

Everything here reads `verify.Verification` records; nothing is evaluated again.
`limit` caps the differences listed per report or measure (0: all); the
number of all of them is always given.
"""

from __future__ import annotations

import json
from decimal import Decimal
from typing import Any, Sequence, TextIO

from modeldiff.render import proposal_out
from modeldiff.verify import (OFFENDING_UNITS, Comparison, Difference, Missed, Precondition, RoleCheck, Verification,
                              json_value)

ABSENT = "(absent)"  # a group the revision does not show
VERDICTS = {0: "nothing moved", 1: "numbers moved", 3: "a precondition fails or a role sees more rows"}
MISSED_VERDICT = "the diff missed something that moved: a defect of modeldiff"
MISSED_TITLE = "DEFECT OF MODELDIFF: the diff missed these, though they moved on the data (please report it)"


def verdict(v: Verification) -> str:
    return MISSED_VERDICT if v.missed else VERDICTS[v.exit_code]


def missed_line(m: Missed) -> str:
    return f"{m.kind} {m.name}: {m.evidence}"


def _shown(items: Sequence, limit: int) -> Sequence:
    return items if not limit else items[:limit]


def _side(side) -> dict:
    return {"rev": side.rev, "path": side.path}


def _label(side) -> str:
    return f"{side.rev}:{side.path}" if side.rev else side.path


# --- JSON -----------------------------------------------------------------------------------------------


def difference_json(d: Difference) -> dict:
    return {"group": {column: (None if d.no_match else json_value(value)) for column, value in d.group},
            "no_match": d.no_match, "user": d.user, "measure": d.measure, "present": d.present,
            "before": json_value(d.before), "after": json_value(d.after),
            "delta": json_value(d.delta), "relative": d.relative}


def comparison_json(c: Comparison, limit: int) -> dict:
    out: dict[str, Any] = {"name": c.name}
    if c.kind == "measure":
        out.update(source=c.source, role=c.role, by=list(c.by))
    else:
        out["by"] = list(c.by)
    out.update(moved=c.moved, groups_before=c.groups_before, groups_after=c.groups_after,
               differing=len(c.differences), differences=[difference_json(d) for d in _shown(c.differences, limit)],
               notes=list(c.notes))
    return out


def role_json(r: RoleCheck) -> dict:
    return {"name": r.name, "changed": r.changed, "exposed": r.exposed,
            "tables": [{"table": t.table, "user": t.user, "before": t.before, "after": t.after, "gained": t.gained,
                        "lost": t.lost} for t in r.tables],
            "notes": list(r.notes)}


def precondition_json(p: Precondition) -> dict:
    return {"check": p.check, "subject": p.subject, "passed": p.passed, "offending": p.offending,
            "examples": [{k: json_value(v) for k, v in e.items()} for e in p.examples], "why": p.why, "sql": p.sql}


def summary(v: Verification) -> dict:
    return {"reports": len(v.reports), "reports_moved": sum(c.moved for c in v.reports),
            "measures": len({c.name for c in v.measures}),
            "measures_moved": len({c.name for c in v.measures if c.moved}),
            "roles": len(v.roles), "roles_changed": sum(r.changed for r in v.roles),
            "roles_exposed": sum(r.exposed for r in v.roles),
            "preconditions": len(v.preconditions), "preconditions_failed": sum(not p.passed for p in v.preconditions),
            "missed": len(v.missed), "verdict": verdict(v), "exit_code": v.exit_code}


def verification_json(v: Verification, limit: int = 0) -> dict:
    md = v.diff
    return {"format": 1, "model": md.result.new.name or md.result.old.name,
            "old": _side(md.old), "new": _side(md.new), "data": v.data, "all": v.everything,
            "missed": [{"kind": m.kind, "name": m.name, "evidence": m.evidence} for m in v.missed],
            "reports": [comparison_json(c, limit) for c in v.reports],
            "measures": [comparison_json(c, limit) for c in v.measures],
            "roles": [role_json(r) for r in v.roles],
            "preconditions": [precondition_json(p) for p in v.preconditions],
            "instead_of_two_way": [proposal_out.json_of(d.proposal, d) for d in v.proposals],
            "summary": summary(v)}


def as_json(v: Verification, stream: TextIO, limit: int = 0) -> None:
    json.dump(verification_json(v, limit), stream, indent=2)
    stream.write("\n")


# --- shared wording ---------------------------------------------------------------------------------------


def value_text(value: Any, absent: bool = False) -> str:
    if absent:
        return ABSENT
    if value is None:
        return "NULL"
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, Decimal):
        return format(value, "f")
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def relative_text(value: float | None) -> str:
    return "" if value is None else f"{value:+.1%}"


def delta_text(d: Difference) -> str:
    delta = d.delta
    if delta is None:
        return ""
    text = value_text(delta)
    return text if text.startswith("-") else "+" + text


def what(c: Comparison) -> str:
    """`stock_value by calendar.date`, `stock_value under role depot_staff`, `station_stock`."""
    if c.kind == "report":
        return c.name
    parts = [c.name]
    if c.by:
        parts.append(f"by {', '.join(c.by)}")
    if c.role:
        parts.append(f"under role {c.role}")
    if not c.by and not c.role:
        parts.append("(total)")
    return " ".join(parts)


def headline(c: Comparison, limit: int) -> str:
    if not c.moved:
        if c.groups_before is None:
            return "unchanged (the same query on the same data)"
        return "unchanged" if not c.notes or c.groups_before or c.groups_after else "not compared"
    n = len(c.differences)
    shown = len(_shown(c.differences, limit))
    more = "" if shown == n else f", {shown} largest shown"
    return (f"MOVED: {n} difference{'s' if n != 1 else ''} ({c.groups_before} groups before, "
            f"{c.groups_after} after){more}")


def columns_of(c: Comparison) -> list[str]:
    groups = [col for col, _ in c.differences[0].group] if c.differences else list(c.by)
    cols = list(groups)
    if any(d.user for d in c.differences):
        cols.append("user")
    if c.kind == "report":
        cols.append("measure")
    return cols + ["before", "after", "delta", "relative"]


def cells(c: Comparison, d: Difference) -> list[str]:
    out = [("(no match)" if d.no_match else value_text(v)) for _, v in d.group]
    if any(x.user for x in c.differences):
        out.append(d.user or "")
    if c.kind == "report":
        out.append(d.measure)
    return out + [value_text(d.before, d.present == "after"), value_text(d.after, d.present == "before"),
                  delta_text(d), relative_text(d.relative)]


def role_line(t) -> list[str]:
    change = "" if t.before is None or t.after is None else f"{t.after - t.before:+d}"
    if t.gained is not None and (t.gained or t.lost):
        change = f"+{t.gained} -{t.lost}"
    flag = "MORE ROWS" if t.exposed else ("fewer rows" if t.changed and change else "")
    return [t.table, t.user or "", value_text(t.before, t.before is None), value_text(t.after, t.after is None),
            change, flag]


def example_text(example) -> str:
    return ", ".join(f"{k} = {value_text(v)}" for k, v in example.items())


# --- text -------------------------------------------------------------------------------------------------


def as_text(v: Verification, stream: TextIO, limit: int = 0) -> None:
    from rich import box
    from rich.padding import Padding
    from rich.table import Table
    from rich.text import Text

    from modeldiff.render import console as make_console

    out = make_console(stream, fit_tables=True)  # off a terminal: tables as wide as their rows, values whole
    md = v.diff
    s = summary(v)

    def line(text: str = "", style: str | None = None) -> None:
        out.print(Text(text, style=style or ""))

    def table(headers: list[str], rows: list[list[str]]) -> None:
        t = Table(box=box.SIMPLE, show_edge=False, pad_edge=False, padding=(0, 1))
        for h in headers:
            t.add_column(h, justify="right" if h in ("before", "after", "delta", "relative") else "left",
                         overflow="fold")
        for row in rows:
            t.add_row(*row)
        out.print(Padding(t, (0, 0, 0, 4), expand=False))

    line(f"Verify {md.result.new.name or md.result.old.name}: {_label(md.old)} -> {_label(md.new)}", "bold")
    line(f"Data: {v.data}" + (" (--all: everything evaluated, listed by the diff or not)" if v.everything else ""))
    if v.missed:
        line()
        line(MISSED_TITLE, "bold red")
        for m in v.missed:
            line(f"  {missed_line(m)}", "red")
    for title, comparisons in (("Reports", v.reports), ("Measures", v.measures)):
        line()
        moved = sum(c.moved for c in comparisons)
        line(f"{title}: {len(comparisons)} evaluated, {moved} moved" if comparisons else f"{title}: none impacted",
             "bold")
        if v.everything and len(comparisons) > moved:
            line(f"  ({len(comparisons) - moved} unchanged, not listed: --all)")
        for c in comparisons:
            if v.everything and not c.moved:
                continue
            line(f"  {what(c)}: {headline(c, limit)}", "yellow" if c.moved else None)
            for note in c.notes:
                line(f"    {note}")
            if c.moved:
                table(columns_of(c), [cells(c, d) for d in _shown(c.differences, limit)])
    line()
    line(f"Roles: {len(v.roles)} evaluated" if v.roles else "Roles: none impacted", "bold")
    for r in v.roles:
        if v.everything and not r.changed:
            continue
        state = "SEES MORE ROWS" if r.exposed else ("rows changed" if r.changed else "rows unchanged")
        line(f"  {r.name}: {state}", "red" if r.exposed else ("yellow" if r.changed else None))
        for note in r.notes:
            line(f"    {note}")
        if r.tables:
            table(["table", "user", "before", "after", "change", ""], [role_line(t) for t in r.tables])
    line()
    line(f"Preconditions: {len(v.preconditions)} checked" if v.preconditions
         else "Preconditions: none (this change needs no data check)", "bold")
    for p in v.preconditions:
        if p.passed:
            line(f"  PASS {p.check} {p.subject}")
            continue
        line(f"  FAIL {p.check} {p.subject}: {p.offending} offending {OFFENDING_UNITS.get(p.check, 'rows')}", "red")
        line(f"    {p.why}")
        for example in p.examples:
            line(f"    e.g. {example_text(example)}")
        line(f"    {p.sql}")
    for text in proposal_out.text_lines([d.proposal for d in v.proposals], v.proposals):
        line(text, "bold" if text.startswith(proposal_out.TITLE) else None)
    line()
    line(f"Verdict: {s['verdict']} (exit {s['exit_code']})", "bold red" if v.missed else "bold")


# --- Markdown ---------------------------------------------------------------------------------------------


def _md(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _md_table(headers: list[str], rows: list[list[str]]) -> list[str]:
    lines = ["| " + " | ".join(_md(h) for h in headers) + " |",
             "|" + "|".join("---:" if h in ("before", "after", "delta", "relative", "change") else "---"
                            for h in headers) + "|"]
    lines += ["| " + " | ".join(_md(c) for c in row) + " |" for row in rows]
    return lines


def as_markdown(v: Verification, stream: TextIO, limit: int = 0) -> None:
    md = v.diff
    s = summary(v)
    lines = [f"## Verify `{md.result.new.name or md.result.old.name}` on data", "",
             f"`{_label(md.old)}` → `{_label(md.new)}`; data: {_md(v.data)}", "",
             f"**Verdict:** {s['verdict']} (exit {s['exit_code']})"]
    if v.missed:
        lines += ["", f"### {MISSED_TITLE}", ""] + [f"- **{_md(m.kind)} {_md(m.name)}**: {_md(m.evidence)}"
                                                    for m in v.missed]
    for title, comparisons in (("Reports", v.reports), ("Measures", v.measures)):
        lines += ["", f"### {title}", ""]
        if not comparisons:
            lines.append("None impacted.")
        if v.everything and any(not c.moved for c in comparisons):
            lines.append(f"{sum(not c.moved for c in comparisons)} unchanged, not listed (`--all`).")
        for c in comparisons:
            if v.everything and not c.moved:
                continue
            lines += [f"- **{_md(what(c))}**: {_md(headline(c, limit))}"]
            lines += [f"  - {_md(n)}" for n in c.notes]
            if c.moved:
                lines += [""] + _md_table(columns_of(c), [cells(c, d) for d in _shown(c.differences, limit)]) + [""]
    lines += ["", "### Roles", ""]
    if not v.roles:
        lines.append("None impacted.")
    for r in v.roles:
        state = "**sees more rows**" if r.exposed else ("rows changed" if r.changed else "rows unchanged")
        lines += [f"- **{_md(r.name)}**: {state}"] + [f"  - {_md(n)}" for n in r.notes]
        if r.tables:
            lines += [""] + _md_table(["table", "user", "before", "after", "change", ""],
                                      [role_line(t) for t in r.tables]) + [""]
    lines += ["", "### Preconditions", ""]
    if not v.preconditions:
        lines.append("None: this change needs no data check.")
    for p in v.preconditions:
        if p.passed:
            lines.append(f"- pass: `{p.check}` `{p.subject}`")
            continue
        lines.append(f"- **FAIL**: `{p.check}` `{p.subject}`: {p.offending} offending {OFFENDING_UNITS.get(p.check, 'rows')}. {_md(p.why)}")
        lines += [f"  - e.g. {_md(example_text(e))}" for e in p.examples]
        lines.append(f"  - `{_md(p.sql)}`")
    lines += proposal_out.markdown_lines([d.proposal for d in v.proposals], v.proposals)
    stream.write("\n".join(lines) + "\n")
