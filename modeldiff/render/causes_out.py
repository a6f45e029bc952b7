"""The summary by cause (`modeldiff.summary.causes`) as text and Markdown (HTML: render/html_scale.py).

Shown at the top of a model's part of `diff` (text, Markdown, HTML), of the
hook's message and of each model section of the notes, when at least one
structural change has derived changes or impacts under it (a diff of plain
edits gains nothing from the grouping). At most `limit` causes are listed,
most severe first; a last line counts the others.
"""

from __future__ import annotations

from typing import Sequence

from modeldiff.summary import Cause, causes, consequences, detail_lines, title

TEXT_LIMIT = 20  # causes listed in the text of diff and of the hook
MARKDOWN_LIMIT = 25
_STYLE = {"breaking": "bold red", "numbers": "yellow", "safe": "green"}


def worth_showing(found: Sequence[Cause]) -> bool:
    """Whether grouping tells anything: some structural change has something under it, or something is unexplained."""
    return any(c.size for c in found)


def _more(found: Sequence[Cause], limit: int) -> str | None:
    rest = len(found) - limit
    if rest <= 0:
        return None
    return f"{rest} more cause{'s' if rest != 1 else ''}, less severe or with less following from them"


def write_text(out, result, limit: int = TEXT_LIMIT) -> None:
    """The causes of one model, on a `render.TextOut`, after its verdict line."""
    found = causes(result)
    if not worth_showing(found):
        return
    out.line()
    out.line("  ", ("by cause", "bold"), " (most severe first)")
    for cause in found[:limit]:
        out.paragraph(title(cause), 13, "    ", (f"{cause.severity:<8}", _STYLE[cause.severity]), " ")
        out.paragraph(consequences(cause, result), 13)
        for line in detail_lines(cause):
            out.paragraph(line, 13)
    more = _more(found, limit)
    if more:
        out.line(f"    … {more}")


def _md(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ").replace("<", "&lt;")


def markdown_lines(result, limit: int = MARKDOWN_LIMIT, found: Sequence[Cause] | None = None) -> list[str]:
    """The causes of one model as a Markdown list (empty when grouping tells nothing)."""
    found = causes(result) if found is None else found
    if not worth_showing(found):
        return []
    lines = ["**By cause** (most severe first):", ""]
    for cause in found[:limit]:
        details = "; ".join(detail_lines(cause))
        lines.append(f"- **{cause.severity}** {_md(title(cause))} — {_md(consequences(cause, result))}"
                     + (f" ({_md(details)})" if details else ""))
    more = _more(found, limit)
    if more:
        lines.append(f"- … {more}")
    return lines
