"""`--format github`: workflow-command annotations on stdout, and the Markdown report in the job summary.

GitHub shows only 10 error and 10 warning annotations per step, so the most
severe come first and a last `::notice` says how many were left out.
Breaking changes (and error findings) are errors, changes that can move
numbers are warnings, a few safe changes are notices. Each annotation points
at the line where the subject is written in the new revision when the loader
recorded it.

When `$GITHUB_STEP_SUMMARY` names a file, the Markdown report
(render/diff_out.as_markdown) is appended to it, cut to stay under the 1 MiB a
step's summary may hold, with a note when cut. Unset, nothing is written.
"""

from __future__ import annotations

import io
import os
from dataclasses import dataclass
from typing import Iterable, Mapping, Sequence, TextIO

from modeldiff.words import agree, and_list, counted

from modeldiff.changes import rank

SHOWN_PER_LEVEL = 10  # GitHub shows this many error and this many warning annotations per step
SAFE_NOTICES = 9  # notices for safe changes; one more notice may count what was left out
SUMMARY_LIMIT = 1024 * 1024  # bytes a step summary may hold
SUMMARY_MARGIN = 4096  # kept free below the limit
TRIM_NOTE = ("> **Trimmed:** this report was cut to stay under the 1 MiB a job summary may hold. "
             "Run `modeldiff diff --format markdown` (or `--format html`) for all of it.")
_LEVEL_OF = {"breaking": "error", "numbers": "warning", "safe": "notice", "error": "error", "warning": "warning"}
_LEVEL_RANK = {"error": 0, "warning": 1, "notice": 2}


# --- escaping (the rules of GitHub's actions toolkit, command.ts) ----------------------------------


def escape_data(text: str) -> str:
    return text.replace("%", "%25").replace("\r", "%0D").replace("\n", "%0A")


def escape_property(text: str) -> str:
    return escape_data(text).replace(":", "%3A").replace(",", "%2C")


@dataclass(frozen=True)
class Annotation:
    """One workflow-command annotation: level, title, message and where."""

    level: str  # error | warning | notice
    title: str
    message: str
    file: str | None = None
    line: int | None = None
    col: int | None = None

    def command(self) -> str:
        props = []
        if self.file:
            props.append(f"file={escape_property(self.file)}")
            if self.line:
                props.append(f"line={self.line}")
                if self.col:
                    props.append(f"col={self.col}")
        props.append(f"title={escape_property(self.title)}")
        return f"::{self.level} {','.join(props)}::{escape_data(self.message)}"


# --- where a subject was written ---------------------------------------------------------------


def workspace_path(file: str, env: Mapping[str, str] | None = None) -> str:
    """A path as GitHub wants it: relative to the workspace (or the current folder), with `/`."""
    env = os.environ if env is None else env
    if os.path.isabs(file):
        base = env.get("GITHUB_WORKSPACE") or os.getcwd()
        rel = os.path.relpath(file, base)
        if not rel.startswith(".."):
            file = rel
    file = file.replace(os.sep, "/")
    return file[2:] if file.startswith("./") else file


def _position(result, change):
    """The Pos where the change's subject is written in the new revision, or None.

    A path or ambiguity points at the link that moved it; an item gone from
    the new revision points at its section there (old line numbers would
    mislead on the new file).
    """
    new = result.new
    subjects = [f"links.{name}" for name in change.details.get("links", ()) if isinstance(name, str)] \
        if change.subject.startswith(("paths.", "ambiguity.")) else []
    subjects.append(change.subject)
    if change.subject.startswith("paths.") and "->" in change.subject:
        subjects.append("tables." + change.subject.split("->")[-1])
    for subject in subjects:
        item = ".".join(subject.split(".")[:2])
        if item in new.positions:
            return new.pos(subject)
    return new.pos(change.subject.split(".")[0]) if new.positions else None


def _located(level: str, title: str, message: str, pos, fallback_file: str | None, env) -> Annotation:
    if pos is not None:
        return Annotation(level, title, message, workspace_path(pos.file, env), pos.line, pos.column)
    return Annotation(level, title, message, workspace_path(fallback_file, env) if fallback_file else None)


def diff_annotations(diffs: Sequence, env: Mapping[str, str] | None = None) -> list[Annotation]:
    """Every change and new error finding as an annotation, the most severe first (stable otherwise)."""
    rows: list[tuple[tuple, Annotation]] = []
    for md in diffs:
        r = md.result
        name = r.new.name or r.old.name
        new_file = md.new.path if md.new.rev is None else None  # a file at another revision is not in the checkout
        for f in r.new_errors:
            a = _located("error", f"modeldiff {f.rule} ({name})", f"{f.subject}: {f.message}", f.pos, new_file, env)
            rows.append(((-rank("breaking"), 1), a))
        for c in r.changes:
            level = _LEVEL_OF[c.severity]
            a = _located(level, f"modeldiff {c.severity} {c.kind} ({name})", f"{c.id} {c.subject}: {c.message}",
                         _position(r, c), new_file, env)
            rows.append(((-rank(c.severity), 0 if c.kind == "security.exposed" else 1), a))
    return [a for _, a in sorted(rows, key=lambda row: row[0])]


def check_annotations_of(model_name: str, findings: Iterable, env: Mapping[str, str] | None = None) -> list[Annotation]:
    rows = [_located(f.severity, f"modeldiff {f.rule} ({model_name})", f"{f.subject}: {f.message}", f.pos, None, env)
            for f in findings]
    return sorted(rows, key=lambda a: _LEVEL_RANK[a.level])


def limited(annotations: Sequence[Annotation]) -> tuple[list[Annotation], dict[str, int]]:
    """Those GitHub will show (10 errors, 10 warnings, a few notices), and how many of each were left out."""
    caps = {"error": SHOWN_PER_LEVEL, "warning": SHOWN_PER_LEVEL, "notice": SAFE_NOTICES}
    shown: list[Annotation] = []
    left = {"error": 0, "warning": 0, "notice": 0}
    for a in annotations:
        if caps[a.level] > 0:
            caps[a.level] -= 1
            shown.append(a)
        else:
            left[a.level] += 1
    return shown, left


def more_notice(left: Mapping[str, int], where: str) -> Annotation | None:
    counts = [counted(n, f"more {label}") for label, n in (("error", left["error"]), ("warning", left["warning"]),
                                                          ("notice", left["notice"])) if n]
    if not counts:
        return None
    verb = agree(sum(left.values()), "is", "are")
    return Annotation("notice", "modeldiff: more not shown",
                      f"{and_list(counts)} {verb} not shown as annotations (GitHub shows 10 errors and 10 warnings "
                      f"per step); {where}.")


def write_annotations(annotations: Sequence[Annotation], stream: TextIO, where: str) -> None:
    shown, left = limited(annotations)
    notice = more_notice(left, where)
    for a in shown + ([notice] if notice else []):
        stream.write(a.command() + "\n")


# --- job summary -------------------------------------------------------------------------------------


def _close_open_blocks(lines: list[str]) -> list[str]:
    """Closes a code fence or <details> left open by a cut."""
    out = list(lines)
    if sum(1 for line in out if line.startswith("```")) % 2:
        out.append("```")
    opened = sum(line.count("<details>") for line in out) - sum(line.count("</details>") for line in out)
    out += ["", "</details>"] * max(opened, 0)
    return out


def trim(markdown: str, budget: int) -> str:
    """`markdown` if it fits in `budget` UTF-8 bytes; else its first whole lines and TRIM_NOTE ("" if even that won't fit)."""
    if len(markdown.encode("utf-8")) <= budget:
        return markdown
    note = "\n" + TRIM_NOTE + "\n"
    room = budget - len(note.encode("utf-8")) - 64  # 64: closing a fence and a <details>
    kept: list[str] = []
    used = 0
    for line in markdown.splitlines():
        size = len(line.encode("utf-8")) + 1
        if used + size > room:
            break
        kept.append(line)
        used += size
    text = "\n".join(_close_open_blocks(kept)) + "\n" + note if kept else note.lstrip("\n")
    return text if len(text.encode("utf-8")) <= budget else ""


def append_summary(markdown: str, path: str, limit: int = SUMMARY_LIMIT) -> bool:
    """Appends `markdown` to the step summary file, within what is left of `limit`; True when it was cut."""
    try:
        existing = os.path.getsize(path)
    except OSError:
        existing = 0
    budget = max(limit - SUMMARY_MARGIN - existing, 0)
    text = trim(markdown, budget)
    with open(path, "a", encoding="utf-8") as out:
        out.write(("\n" if existing else "") + text)
    return text != markdown


# --- entry points ------------------------------------------------------------------------------------


def as_github(diffs: Sequence, stream: TextIO, env: Mapping[str, str] | None = None) -> None:
    """Annotations on `stream`, one plain verdict line per model, the Markdown report in the job summary."""
    from modeldiff.render.diff_out import as_markdown

    env = os.environ if env is None else env
    summary = env.get("GITHUB_STEP_SUMMARY") or ""
    where = "the job summary has the whole report" if summary else "run `modeldiff diff` for the whole report"
    write_annotations(diff_annotations(diffs, env), stream, where)
    for md in diffs:
        r, c = md.result, md.result.counts()
        stream.write(f"modeldiff: {r.new.name or r.old.name}: {r.verdict} ({c['breaking']} breaking, "
                     f"{c['numbers']} can move numbers, {c['safe']} safe)\n")
    if summary:
        buffer = io.StringIO()
        as_markdown(diffs, buffer)
        try:
            append_summary(buffer.getvalue(), summary)
        except OSError as exc:
            stream.write(Annotation("warning", "modeldiff: no job summary",
                                    f"could not append the report to {summary}: {exc.strerror or exc}").command() + "\n")


def check_annotations(model_name: str, findings: Iterable, stream: TextIO, env: Mapping[str, str] | None = None) -> None:
    """`modeldiff check --format github`: each finding as an error or warning annotation."""
    write_annotations(check_annotations_of(model_name, findings, env), stream, "run `modeldiff check` for all of them")
