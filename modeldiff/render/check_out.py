"""Rendering the findings of `modeldiff check`."""

from __future__ import annotations

from typing import Sequence, TextIO

from modeldiff.model import Finding


def finding_json(f: Finding) -> dict:
    out = {"rule": f.rule, "severity": f.severity, "subject": f.subject, "message": f.message,
           "paths": [list(p) for p in f.paths]}
    if f.pos is not None:
        out["location"] = {"file": f.pos.file, "line": f.pos.line, "column": f.pos.column}
    if hasattr(f, "json_extra"):  # a finding about the data (modeldiff.datacheck): its count and examples
        out.update(f.json_extra())
    return out


def as_json(model_name: str, findings: Sequence[Finding], stream: TextIO) -> None:
    doc = {"format": 1, "model": model_name, "findings": [finding_json(f) for f in findings],
           "summary": {"errors": sum(f.severity == "error" for f in findings),
                       "warnings": sum(f.severity == "warning" for f in findings)}}
    import json

    json.dump(doc, stream, indent=2)
    stream.write("\n")


def _counts(findings: Sequence[Finding]) -> tuple[int, int]:
    return sum(f.severity == "error" for f in findings), sum(f.severity == "warning" for f in findings)


def as_text(model_name: str, source: str, findings: Sequence[Finding], stream: TextIO) -> None:
    from modeldiff.render import TextOut

    out = TextOut(stream)
    errors, warnings = _counts(findings)
    if not findings:
        out.line(("ok", "bold green"), f" model {model_name} ({source}): no findings")
        return
    out.line("model ", (model_name, "bold"), f" ({source}): {errors} error(s), {warnings} warning(s)")
    for severity, style, title in (("error", "bold red", "Errors"), ("warning", "yellow", "Warnings")):
        group = [f for f in findings if f.severity == severity]
        if not group:
            continue
        out.line()
        out.line((title, style))
        for f in group:
            where = f"{f.pos}: " if f.pos else ""
            out.line("  ", (f.rule, style), f" {f.subject}")
            out.paragraph(where + f.message, 4)
            for path in f.paths:
                out.line(f"    path: {' -> '.join(path)}")


def _cell(text: str) -> str:
    """Text that stays inside one Markdown table cell."""
    return " ".join(text.split()).replace("|", "\\|")


def as_markdown(model_name: str, source: str, findings: Sequence[Finding], stream: TextIO) -> None:
    errors, warnings = _counts(findings)
    lines = [f"## modeldiff check: `{model_name}`", "", f"Source: `{source}`. **{errors}** error(s), **{warnings}** warning(s).", ""]
    if findings:
        lines += ["| severity | rule | subject | location | what to do |", "|---|---|---|---|---|"]
        for f in findings:
            message = _cell(f.message)
            if f.paths:
                message += "<br>" + "<br>".join("path: " + " → ".join(p) for p in f.paths)
            lines.append(f"| {f.severity} | `{f.rule}` | `{f.subject}` | {_cell(str(f.pos or ''))} | {message} |")
    else:
        lines.append("No findings.")
    stream.write("\n".join(lines) + "\n")
