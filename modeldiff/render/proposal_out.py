"""The "Instead of two-way" section (modeldiff.proposal) in text, Markdown, HTML and JSON.

`plan`, `verify` and the diff's Markdown and HTML reports all show it from the
same records: the proposal, the patch, and with data the side-by-side reading.
"""

from __future__ import annotations

from html import escape
from typing import Sequence

TITLE = "Instead of two-way"


def _group(values: tuple) -> str:
    return ", ".join(str(v) for v in values)


def _examples(groups: Sequence[tuple], limit: int = 3) -> str:
    shown = "; ".join(_group(g) for g in groups[:limit])
    return shown + (f"; and {len(groups) - limit} more" if len(groups) > limit else "")


def report_lines(p) -> list[str]:
    return [f"{r.report} (grouped by {', '.join(r.groups_by)}): having {r.having}" for r in p.reports]


def side_by_side_lines(d) -> list[str]:
    """Sentences for one proposal on data: the rows it gives, and the numbers the flip moves that it leaves alone."""
    out = []
    for r in d.reports:
        if r.note:
            out.append(f"{r.report}: {r.note}")
            continue
        if r.same_groups:
            words = f"{r.report}: the same {r.groups_two_way} groups as two-way"
        else:
            words = (f"{r.report}: {r.groups_proposed} groups, two-way {r.groups_two_way}"
                     + (f"; only under two-way: {_examples(r.only_two_way)}" if r.only_two_way else "")
                     + (f"; only under the proposal: {_examples(r.only_proposed)}" if r.only_proposed else ""))
        if r.no_match_two_way != r.no_match_proposed:
            words += ("; two-way adds a (no match) row (the rows its groups lose)" if r.no_match_two_way
                      else "; the proposal keeps a (no match) row")
        out.append(words)
    alone = d.left_alone
    moved = [m for m in d.measures if m.moved_by_proposal]
    if alone:
        out.append("the flip moves and the proposal leaves alone: "
                   + "; ".join(f"{m.measure} in {m.report}" for m in alone))
    elif d.measures:
        out.append("nothing the flip moves on this data is left alone by the proposal")
    if moved:
        out.append("the proposal moves too: " + "; ".join(f"{m.measure} in {m.report}" for m in moved))
    if d.flip_moved_measures:
        alone_measures = [m for m in d.flip_moved_measures if m not in d.proposal_moves_measures]
        listed = ("none of them" if not d.proposal_moves_measures
                  else "only " + ", ".join(d.proposal_moves_measures))
        under = (f"{', '.join(alone_measures)} cannot move (the diff of the old revision and the proposal lists "
                 f"{listed})" if alone_measures else "they can all move too")
        out.append(f"measures the flip moved on this data: {', '.join(d.flip_moved_measures)}; under the proposal "
                   f"{under}")
    out += list(d.notes)
    return out


def text_lines(proposals: Sequence, on_data: Sequence = (), patch: bool = True) -> list[str]:
    found = {d.proposal.change: d for d in on_data}
    lines: list[str] = []
    for p in proposals:
        lines += ["", f"{TITLE}: {p.link} ({p.from_table} -> {p.to_table})", f"  {p.sentence}"]
        if p.added_measure:
            lines.append(f"  The proposal adds the measure {p.measure} (count(*) on {p.from_table}).")
        lines += [f"  - {line}" for line in report_lines(p)]
        if p.change in found:
            lines.append("  On the data, proposal beside two-way:")
            lines += [f"  - {line}" for line in side_by_side_lines(found[p.change])]
        if patch and p.patch:
            lines += ["  The proposal as a patch of the model file (git apply / patch -p1):", ""]
            lines += [line.rstrip("\n") for line in p.patch.splitlines()]
        elif patch:
            lines.append(f"  No patch: {p.patch_note}.")
    return lines


def markdown_lines(proposals: Sequence, on_data: Sequence = (), patch: bool = True, level: str = "###") -> list[str]:
    found = {d.proposal.change: d for d in on_data}
    lines: list[str] = []
    for p in proposals:
        lines += ["", f"{level} {TITLE}: `{p.link}` ({p.from_table} → {p.to_table})", "", p.sentence, ""]
        if p.added_measure:
            lines += [f"The proposal adds the measure `{p.measure}` (`count(*)` on `{p.from_table}`).", ""]
        lines += [f"- `{r.report}` (grouped by {', '.join(f'`{b}`' for b in r.groups_by)}): "
                  f"`having: {r.having}`" for r in p.reports]
        if p.change in found:
            lines += ["", "**On the data, proposal beside two-way**", ""]
            lines += [f"- {line}" for line in side_by_side_lines(found[p.change])]
        if patch and p.patch:
            lines += ["", "<details><summary>The proposal as a patch of the model file</summary>", "", "```diff"]
            lines += [line.rstrip("\n") for line in p.patch.splitlines()] + ["```", "", "</details>"]
        elif patch:
            lines += ["", f"No patch: {p.patch_note}."]
    return lines


def html_section(proposals: Sequence) -> str:
    if not proposals:
        return ""
    parts = []
    for p in proposals:
        items = "".join(f"<li>{escape(line)}</li>" for line in report_lines(p))
        patch = (f"<details><summary>The proposal as a patch of the model file</summary><pre>{escape(p.patch)}</pre>"
                 f"</details>" if p.patch else f"<p>No patch: {escape(p.patch_note)}.</p>")
        parts.append(f"<section><h2>{escape(TITLE)}: {escape(p.link)} ({escape(p.from_table)} → "
                     f"{escape(p.to_table)})</h2><p>{escape(p.sentence)}</p><ul>{items}</ul>{patch}</section>")
    return "".join(parts)


def json_of(p, d=None) -> dict:
    out = {"change": p.change, "link": p.link, "from": p.from_table, "to": p.to_table, "measure": p.measure,
           "adds_measure": p.added_measure, "sentence": p.sentence,
           "reports": [{"report": r.report, "having": r.having, "groups_by": list(r.groups_by)} for r in p.reports],
           "patch": p.patch or None, "patch_note": p.patch_note or None}
    if d is not None:
        out["on_data"] = {
            "reports": [{"report": r.report, "groups_two_way": r.groups_two_way, "groups_proposed": r.groups_proposed,
                         "same_groups": r.same_groups, "only_two_way": [list(map(str, g)) for g in r.only_two_way],
                         "only_proposed": [list(map(str, g)) for g in r.only_proposed],
                         "no_match_two_way": r.no_match_two_way, "no_match_proposed": r.no_match_proposed,
                         "note": r.note or None} for r in d.reports],
            "measures": [{"report": m.report, "measure": m.measure, "moved_by_flip": m.moved_by_flip,
                          "moved_by_proposal": m.moved_by_proposal} for m in d.measures],
            "flip_moved_measures": list(d.flip_moved_measures),
            "proposal_moves_measures": list(d.proposal_moves_measures),
            "notes": list(d.notes)}
    return out
