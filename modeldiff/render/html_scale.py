"""The parts of the HTML report that keep it usable at thousands of changes and impacts.

- A filter bar at the top of the page: a search box and filters by
  severity, kind, table and owner, applied by a few lines of plain
  JavaScript inside the page (no external asset; the page still reads whole
  without script: nothing is hidden until a filter is chosen). Every filtered
  item (a change, a cause, an impacted measure, role or report) carries
  `data-severity`, `data-kind`, `data-table` and `data-owner` (space-separated
  tokens) and is hidden when it does not match; a count says how many items
  are shown. The filters can be set from the address (`#severity=breaking&
  table=fact_1&q=text`), so a filtered view can be linked to.
- Changes are grouped by cause (`modeldiff.summary`), most severe first, each
  cause a collapsible block; the full lists (changes, impacted measures,
  roles, reports) follow, each collapsible and closed when longer than
  `OPEN_LIMIT` items, so the first screen shows the verdict, the filters and
  the causes.

What an item's tokens are: a change's kind; its tables (a table's name, the
two ends of a path or of a link, a measure's home table); the owner of the
measure or report it is about. An impacted item's kinds are those of the
changes its reasons name; a measure's table is its home table, a role's the
tables it now sees differently; owners as written in the model.
"""

from __future__ import annotations

from html import escape
from typing import Iterable, Sequence

from modeldiff.summary import lookup

OPEN_LIMIT = 50  # a list longer than this starts folded
CAUSES_OPEN = 3  # the first causes (most severe) start unfolded

CSS = """
.filters { position: sticky; top: 0; z-index: 5; background: #fff; border-bottom: 1px solid #ddd;
           padding: 8px 0; display: flex; flex-wrap: wrap; gap: 8px; align-items: center; }
.filters input[type=search] { flex: 1 1 240px; min-width: 180px; padding: 4px 8px; font-size: 15px; }
.filters select { max-width: 220px; padding: 3px 4px; font-size: 14px; }
.filters .shown { font-size: 13px; color: #555; white-space: nowrap; }
details.cause { border: 1px solid #e3e3e3; border-radius: 4px; margin: 6px 0; padding: 4px 10px; }
details.cause > summary { cursor: pointer; }
details.cause > summary .follows { color: #444; }
details.list > summary { cursor: pointer; font-size: 16px; font-weight: 600; margin: 18px 0 6px; }
ul.items { margin: 4px 0; padding-left: 20px; }
.where { font-size: 13px; color: #555; }
[hidden] { display: none !important; }
@media (max-width: 700px) {
  body { padding: 10px; font-size: 14px; }
  table { display: block; overflow-x: auto; }
  .filters select { max-width: 46vw; }
}
"""

SCRIPT = r"""
(function () {
  var bar = document.getElementById("filters");
  if (!bar) return;
  var q = document.getElementById("f-q"), fields = ["severity", "kind", "table", "owner"];
  var items = Array.prototype.slice.call(document.querySelectorAll("[data-filter]"));
  var texts = items.map(function (el) { return el.textContent.toLowerCase(); });
  var count = document.getElementById("f-shown");
  function tokens(el, name) { return (" " + (el.getAttribute("data-" + name) || "") + " "); }
  function apply() {
    var want = {}, words = q.value.trim().toLowerCase(), active = words !== "", shown = 0;
    fields.forEach(function (f) { var v = document.getElementById("f-" + f).value; if (v) { want[f] = v; active = true; } });
    items.forEach(function (el, i) {
      var ok = !words || texts[i].indexOf(words) >= 0;
      for (var f in want) { if (ok && tokens(el, f).indexOf(" " + want[f] + " ") < 0) ok = false; }
      el.hidden = !ok;
      if (ok) shown++;
    });
    if (active) {
      document.querySelectorAll("details.cause, details.list").forEach(function (d) {
        var visible = d.querySelector("[data-filter]:not([hidden])");
        if (d.hasAttribute("data-filter")) { d.open = !d.hidden && !!visible; } else { d.open = !!visible; }
      });
    }
    count.textContent = shown + " of " + items.length + " items shown";
    var parts = [];
    if (words) parts.push("q=" + encodeURIComponent(words));
    for (var f in want) parts.push(f + "=" + encodeURIComponent(want[f]));
    if (history.replaceState) history.replaceState(null, "", parts.length ? "#" + parts.join("&") : location.pathname);
  }
  location.hash.replace(/^#/, "").split("&").forEach(function (pair) {
    var kv = pair.split("="), el = kv[0] === "q" ? q : document.getElementById("f-" + kv[0]);
    if (el && kv.length === 2) el.value = decodeURIComponent(kv[1]);
  });
  var timer = null;
  q.addEventListener("input", function () { clearTimeout(timer); timer = setTimeout(apply, 150); });
  fields.forEach(function (f) { document.getElementById("f-" + f).addEventListener("change", apply); });
  bar.hidden = false;
  apply();
})();
"""


def attrs(severity: str, kinds: Iterable[str], tables: Iterable[str], owners: Iterable[str]) -> str:
    """The data attributes a filtered item carries (values are space-separated tokens, escaped)."""
    def joined(values: Iterable[str]) -> str:
        return escape(" ".join(sorted({v for v in values if v and " " not in v})))

    return (f' data-filter data-severity="{escape(severity)}" data-kind="{joined(kinds)}" '
            f'data-table="{joined(tables)}" data-owner="{joined(owners)}"')


def change_tables(result, change) -> list[str]:
    """The tables a change is about (see the module docstring)."""
    section, _, rest = change.subject.partition(".")
    name = rest.split(".")[0]
    if section == "tables":
        return [name]
    if section == "paths":
        return rest.split("->")
    if section == "links":
        link = lookup(result, "links", name)
        return [link.from_table, link.to_table] if link is not None else []
    if section == "measures":
        measure = lookup(result, "measures", name)
        return [measure.table] if measure is not None and measure.table else []
    if section == "roles":
        parts = rest.split(".")
        return [parts[2]] if len(parts) > 2 and parts[1] == "tables" else []
    return []


def change_owners(result, change) -> list[str]:
    section, _, rest = change.subject.partition(".")
    if section in ("measures", "reports"):
        item = lookup(result, section, rest.split(".")[0])
        return [item.owner] if item is not None and getattr(item, "owner", None) else []
    return []


def change_attrs(result, change) -> str:
    return attrs(change.severity, [change.kind], change_tables(result, change), change_owners(result, change))


def impact_attrs(result, section: str, item, kinds: dict[str, str]) -> str:
    """Attributes of an impacted measure, role or report (reasons read by their `change` alone)."""
    reason_kinds = [kinds.get(getattr(r, "change", ""), "") for r in getattr(item, "reasons", ())]
    record = lookup(result, section, item.name)
    tables: list[str] = []
    if section == "measures" and record is not None and record.table:
        tables.append(record.table)
    if section == "roles":
        tables += [*getattr(item, "exposed", ()), *getattr(item, "tightened", ()), *getattr(item, "rerouted", ())]
    owner = getattr(record, "owner", None) if record is not None else None
    return attrs(item.severity, reason_kinds, tables, [owner] if owner else [])


def filter_bar(diffs: Sequence) -> list[str]:
    """The search box and the four filters, their options taken from every item of the page."""
    from modeldiff.changes import SEVERITIES

    kinds: set[str] = set()
    tables: set[str] = set()
    owners: set[str] = set()
    for md in diffs:
        r = md.result
        for c in r.changes:
            kinds.add(c.kind)
            tables.update(change_tables(r, c))
            owners.update(change_owners(r, c))
        for section in ("measures", "reports"):
            for item in getattr(r, section):
                record = lookup(r, section, item.name)
                if record is not None and getattr(record, "owner", None):
                    owners.add(record.owner)
                if section == "measures" and record is not None and record.table:
                    tables.add(record.table)

    def select(name: str, label: str, values: Iterable[str]) -> str:
        options = "".join(f'<option value="{escape(v)}">{escape(v)}</option>' for v in values if " " not in v)
        return (f'<select id="f-{name}" aria-label="{escape(label)}"><option value="">{escape(label)}: all</option>'
                f"{options}</select>")

    return ['<div class="filters" id="filters" hidden>',
            '<input type="search" id="f-q" placeholder="Search names, kinds, subjects, messages" aria-label="Search">',
            select("severity", "severity", reversed(SEVERITIES)), select("kind", "kind", sorted(kinds)),
            select("table", "table", sorted(tables)), select("owner", "owner", sorted(owners)),
            '<span class="shown" id="f-shown"></span>', "</div>"]


def _names(result, section: str, items: Sequence, kinds: dict[str, str]) -> str:
    return "".join(f'<li{impact_attrs(result, section, i, kinds)}><strong>{escape(i.name)}</strong> '
                   f'<span class="sev sev-{escape(i.severity)}">{escape(i.severity)}</span></li>' for i in items)


def cause_groups(result) -> list[str]:
    """Each cause as a collapsible block: its change, derived changes and impacted items (names only)."""
    from modeldiff.render.causes_out import worth_showing
    from modeldiff.summary import causes, consequences, detail_lines, title

    found = causes(result)
    if not worth_showing(found):
        return []
    kinds = {c.id: c.kind for c in result.changes}
    out = [f"<h3>By cause ({len(found)})</h3>"]
    for index, cause in enumerate(found):
        own = [cause.change] if cause.change is not None else []
        tables = {t for c in own + list(cause.derived) for t in change_tables(result, c)} | {t for t, _ in cause.tables}
        everything = [c.kind for c in own + list(cause.derived)]
        opened = " open" if index < CAUSES_OPEN and cause.severity == "breaking" else ""
        out.append(f'<details class="cause"{opened}{attrs(cause.severity, everything, tables, [o for o, _ in cause.owners])}>'
                   f'<summary><span class="sev sev-{escape(cause.severity)}">{escape(cause.severity)}</span> '
                   f'{escape(title(cause))} — <span class="follows">{escape(consequences(cause, result))}</span></summary>')
        details = detail_lines(cause)
        if details:
            out.append(f'<p class="where">{escape("; ".join(details))}</p>')
        if cause.derived:
            out.append('<ul class="items">' + "".join(
                f'<li{change_attrs(result, c)}>{escape(c.id)} <code>{escape(c.kind)}</code> '
                f'<code>{escape(c.subject)}</code>: {escape(c.message)}</li>' for c in cause.derived) + "</ul>")
        for section in ("measures", "roles", "reports"):
            items = getattr(cause, section)
            if items:
                out.append(f'<p class="where">Impacted {section} ({len(items)}):</p><ul class="items">'
                           + _names(result, section, items, kinds) + "</ul>")
        out.append("</details>")
    return out


def folded(title: str, count: int, body: list[str]) -> list[str]:
    """A collapsible list, closed when it holds more than OPEN_LIMIT items."""
    opened = " open" if count <= OPEN_LIMIT else ""
    return [f'<details class="list"{opened}><summary>{escape(title)} ({count})</summary>', *body, "</details>"]
