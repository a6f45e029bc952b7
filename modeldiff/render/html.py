"""`modeldiff diff --format html`: one self-contained HTML page on stdout.

Summary, changes, impacts, the security caution when rows can be exposed,
and the filter graph drawn as inline SVG (render/svg.py) with its Mermaid
source folded beneath for copy-paste. Nothing from the network (no script,
stylesheet, font or image fetched): the file opens the same offline, attached
to a CI run or mailed; its one inline script drives the search box and the
filters (render/html_scale.py), and the page reads whole without it. Changes
are grouped by cause and long lists start folded. Every text from the
models is escaped.
"""

from __future__ import annotations

from html import escape
from typing import Sequence, TextIO

from modeldiff.changes import SEVERITIES
from modeldiff.compare import ModelDiff, Side
from modeldiff.render.diff_out import SECURITY_CAUTION, reason_words, verdict_of

_CSS = """
:root { color-scheme: light; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Helvetica, Arial, sans-serif; color: #1d1d1f;
       margin: 0 auto; max-width: 1200px; padding: 24px; background: #fff; }
h1 { font-size: 24px; margin: 0 0 12px; }
h2 { font-size: 20px; margin: 32px 0 8px; border-bottom: 1px solid #ddd; padding-bottom: 4px; }
h2 code { font-size: 17px; }
h3 { font-size: 16px; margin: 22px 0 6px; }
code { font: 13px/1.3 ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; }
table { border-collapse: collapse; margin: 6px 0 12px; }
th, td { border: 1px solid #d6d6d6; padding: 4px 8px; text-align: left; vertical-align: top; }
th { background: #f3f4f6; }
td.n { text-align: right; }
.sev { font-weight: 600; white-space: nowrap; }
.sev-breaking { color: #b3261e; } .sev-numbers { color: #8a5a00; } .sev-safe { color: #2e7d32; }
.security { border: 2px solid #b3261e; background: #fdecea; padding: 10px 14px; margin: 12px 0; border-radius: 4px; }
.nochange { color: #2e7d32; }
ul.impacts > li { margin-bottom: 6px; }
ul.reasons { margin: 2px 0 0; padding-left: 20px; color: #333; font-size: 14px; }
.path { font-family: ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; font-size: 13px; }
figure { margin: 8px 0; overflow-x: auto; border: 1px solid #e3e3e3; border-radius: 4px; padding: 6px; }
figcaption { font-size: 13px; color: #555; margin-top: 4px; }
.legend span { display: inline-block; margin-right: 14px; font-size: 13px; }
.swatch { display: inline-block; width: 14px; height: 10px; border: 1.5px solid; margin-right: 4px; vertical-align: -1px; }
pre { background: #f6f8fa; padding: 10px; overflow-x: auto; font-size: 12px; }
"""


def _side(side: Side) -> str:
    return f"{side.rev}:{side.path}" if side.rev else side.path


def _sev(severity: str) -> str:
    return f'<span class="sev sev-{escape(severity)}">{escape(severity)}</span>'


def _summary_table(diffs: Sequence[ModelDiff]) -> list[str]:
    out = ['<table class="summary"><thead><tr><th>model</th><th>verdict</th><th>breaking</th><th>can move numbers</th>'
           "<th>safe</th><th>impacted measures</th><th>roles</th><th>reports</th></tr></thead><tbody>"]
    for md in diffs:
        r, c = md.result, md.result.counts()
        out.append(f"<tr><td><code>{escape(r.new.name or r.old.name)}</code></td><td>{_sev(r.verdict)}</td>"
                   f'<td class="n">{c["breaking"]}</td><td class="n">{c["numbers"]}</td><td class="n">{c["safe"]}</td>'
                   f'<td class="n">{len(r.measures)}</td><td class="n">{len(r.roles)}</td><td class="n">{len(r.reports)}</td></tr>')
    out.append("</tbody></table>")
    return out


def _changes_table(changes, result=None) -> list[str]:
    from modeldiff.render.html_scale import change_attrs

    order = {s: n for n, s in enumerate(reversed(SEVERITIES))}
    out = ['<table class="changes"><thead><tr><th>id</th><th>severity</th><th>kind</th><th>subject</th>'
           "<th>what it means</th></tr></thead><tbody>"]
    for c in sorted(changes, key=lambda c: order[c.severity]):
        row = change_attrs(result, c) if result is not None else ""
        out.append(f"<tr{row}><td>{escape(c.id)}</td><td>{_sev(c.severity)}</td><td><code>{escape(c.kind)}</code></td>"
                   f"<td><code>{escape(c.subject)}</code></td><td>{escape(c.message)}</td></tr>")
    out.append("</tbody></table>")
    return out


def _role_extras(i) -> str:
    return "; ".join(f"{label}: {', '.join(tables)}" for label, tables in
                     (("exposed", i.exposed), ("tightened", i.tightened), ("rerouted", i.rerouted)) if tables)


def _impacts(title: str, impacts, kinds: dict[str, str], result=None) -> list[str]:
    from modeldiff.render.html_scale import folded

    if result is not None:  # collapsible, each item filterable
        return folded(f"Impacted {title}", len(impacts), _impact_items(title, impacts, kinds, result))
    return [f"<h3>Impacted {escape(title)} ({len(impacts)})</h3>", *_impact_items(title, impacts, kinds, None)]


def _impact_items(title: str, impacts, kinds: dict[str, str], result) -> list[str]:
    from modeldiff.render.html_scale import impact_attrs

    out = ['<ul class="impacts">']
    for i in impacts:
        extra = _role_extras(i)
        item = impact_attrs(result, title, i, kinds) if result is not None else ""
        out.append(f"<li{item}><strong>{escape(i.name)}</strong> {_sev(i.severity)}"
                   + (f" <strong>{escape(extra)}</strong>" if extra else ""))
        if i.reasons:
            out.append('<ul class="reasons">')
            for reason in i.reasons:
                paths = "".join(f'<br><span class="path">+ {escape(" / ".join(p))}</span>' for p in reason.paths_added)
                paths += "".join(f'<br><span class="path">− {escape(" / ".join(p))}</span>' for p in reason.paths_removed)
                if reason.route:
                    paths += f'<br><span class="path">route {escape(" -> ".join(reason.route))}</span>'
                out.append(f"<li>{escape(reason_words(reason, kinds))}{paths}</li>")
            out.append("</ul>")
        out.append("</li>")
    out.append("</ul>")
    return out


def _legend() -> str:
    from modeldiff.render.svg import swatch

    kinds = "".join(f"<span>{swatch(kind)}{kind}</span>" for kind in ("fact", "dimension", "bridge", "access"))
    return ('<p class="legend">' + kinds +
            '<span><span class="swatch" style="border-color:#d33;border-width:3px"></span>table a filter now reaches along a new path</span>'
            '<span style="color:#d33">━ changed link</span><span>┅ standby or removed link</span>'
            "<span>arrows point the way a filter travels</span></p>")


def _diagram(md: ModelDiff, number: int) -> list[str]:
    """The filter graph cut like Markdown's (`picture.readable`), a line under it saying what was left out."""
    from modeldiff.picture import diff_picture, mermaid_of, readable
    from modeldiff.render.diff_out import _side
    from modeldiff.render.svg import svg_of

    near = diff_picture(md.result)
    if near is None:
        return []
    pic = readable(near)
    caption = pic.caption or "The new revision's filter graph; what changed is drawn in red."
    if pic is near:
        left_out = (f"All {len(pic.nodes)} tables and {len(pic.arrows)} links near what changed are drawn; "
                    "nothing was left out.")
    else:
        left_out = (f"{len(near.nodes) - len(pic.nodes)} tables and {len(near.arrows) - len(pic.arrows)} links "
                    f"left out. To see every table: <code>modeldiff graph {escape(_side(md.new))} --format svg "
                    "&gt; graph.svg</code>; every change: <code>--format json</code>.")
    return ["<h3>Filter graph</h3>", "<figure>", svg_of(pic, prefix=f"mdg{number}"),
            f"<figcaption>{escape(caption)}</figcaption>", "</figure>",
            f'<p class="left-out">{left_out}</p>', _legend(),
            "<details><summary>Mermaid source (paste into Markdown between <code>```mermaid</code> fences)</summary>",
            f"<pre>{escape(mermaid_of(pic))}</pre>", "</details>"]


def _role_views(md: ModelDiff, number: int) -> list[str]:
    """Each role a `security.*` change names, drawn before and after side by side (picture.role_picture)."""
    from modeldiff.picture import role_picture
    from modeldiff.render.svg import svg_of

    r = md.result
    named: dict[str, dict[str, list[str]]] = {}
    for c in r.changes:
        if c.kind.startswith("security.") and c.subject.startswith("roles."):
            role, _, table = c.subject.removeprefix("roles.").partition(".tables.")
            named.setdefault(role, {}).setdefault(c.kind.removeprefix("security."), []).append(table)
    if not named:
        return []
    changed_links = {c.subject.removeprefix("links.") for c in r.changes if c.kind.startswith("link.")}
    out = ["<h3>Row security, role by role</h3>",
           "<p>The tables each role filters (thick purple outline) and restricts (purple outline), and the links its "
           "filters travel (purple), before and after; changed links in red.</p>"]
    for k, (role, tables) in enumerate(sorted(named.items())):
        old_role = next((c.before for c in r.changes if c.kind == "role.renamed" and c.subject == f"roles.{role}"
                         and isinstance(c.before, str)), role)
        what = "; ".join(f"{kind}: {', '.join(names)}" for kind, names in sorted(tables.items()))
        out.append(f'<h4 class="role-view">Role <code>{escape(role)}</code> ({escape(what)})</h4>')
        out.append('<div class="role-views" style="display:flex;gap:12px;align-items:flex-start">')
        for side, model, name in (("before", r.old, old_role), ("after", r.new, role)):
            out.append(f'<figure class="role-{side}" style="flex:1 1 0;min-width:0">')
            if name in model.roles:
                pic = role_picture(model, name, changed_links)
                out += [svg_of(pic, prefix=f"mdg{number}r{k}{side[0]}"),
                        f"<figcaption>{escape(side.capitalize())}: {escape(pic.setting)}.</figcaption>"]
            else:
                out.append(f"<figcaption>{escape(side.capitalize())}: no role {escape(name)}.</figcaption>")
            out.append("</figure>")
        out.append("</div>")
    return out


def _by_cause(result) -> list[str]:
    from modeldiff.render.html_scale import cause_groups

    return cause_groups(result)


def _folded_changes(result) -> list[str]:
    from modeldiff.render.html_scale import folded

    return folded("Changes", len(result.changes), _changes_table(result.changes, result))


def _model_section(md: ModelDiff, number: int) -> list[str]:
    r = md.result
    name = r.new.name or r.old.name
    kinds = {c.id: c.kind for c in r.changes}
    out = [f'<section class="model" id="model-{number}">',
           f"<h2><code>{escape(name)}</code>: <code>{escape(_side(md.old))}</code> → <code>{escape(_side(md.new))}</code></h2>"]
    if any(c.kind == "security.exposed" for c in r.changes):
        out.append(f'<div class="security" role="alert"><strong>SECURITY:</strong> {escape(SECURITY_CAUTION)}</div>')
    if not r.changes and not r.new_errors:
        out += ['<p class="nochange">No changes.</p>', "</section>"]
        return out
    c = r.counts()
    out.append(f"<p>Verdict: {_sev(r.verdict)} ({c['breaking']} breaking, {c['numbers']} can move numbers, "
               f"{c['safe']} safe).</p>")
    out += _by_cause(r)
    out += _folded_changes(r)
    if r.new_errors:
        out += ["<h3>Errors in the new revision</h3>", "<ul>"]
        out += [f"<li><code>{escape(f.rule)}</code> <code>{escape(f.subject)}</code>: {escape(f.message)}</li>"
                for f in r.new_errors]
        out.append("</ul>")
    out += _diagram(md, number)
    out += _role_views(md, number)
    for title, impacts in (("measures", r.measures), ("roles", r.roles), ("reports", r.reports)):
        if impacts:
            out += _impacts(title, impacts, kinds, r)
    out += _instead_of_two_way(md)
    out.append("</section>")
    return out


def _instead_of_two_way(md: ModelDiff) -> list[str]:
    """The proposal in place of each link made two-way (modeldiff.proposal), with its patch."""
    from modeldiff import proposal
    from modeldiff.render import proposal_out

    section = proposal_out.html_section(proposal.proposals(md))
    return [section] if section else []


def document(diffs: Sequence[ModelDiff]) -> str:
    names = ", ".join(dict.fromkeys(d.result.new.name or d.result.old.name for d in diffs)) or "no models"
    body = [f"<h1>modeldiff: {escape(names)}</h1>",
            f"<p>Overall verdict: {_sev(verdict_of(diffs))}. Arrows in the graphs point the way a filter travels.</p>"]
    body += _summary_table(diffs)
    body += _filter_bar(diffs)
    for number, md in enumerate(diffs, 1):
        body += _model_section(md, number)
    from modeldiff.render.html_scale import CSS, SCRIPT

    return "\n".join(['<!DOCTYPE html>', '<html lang="en">', "<head>", '<meta charset="utf-8">',
                      '<meta name="viewport" content="width=device-width, initial-scale=1">',
                      f"<title>modeldiff: {escape(names)}</title>", f"<style>{_CSS}{CSS}</style>", "</head>", "<body>",
                      *body, f"<script>{SCRIPT}</script>", "</body>", "</html>"]) + "\n"


def _filter_bar(diffs: Sequence[ModelDiff]) -> list[str]:
    from modeldiff.render.html_scale import filter_bar

    return filter_bar(diffs)


def as_html(diffs: Sequence[ModelDiff], stream: TextIO) -> None:
    stream.write(document(diffs))
