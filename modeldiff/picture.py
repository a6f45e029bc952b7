"""Draw a model's filter graph: `modeldiff graph MODEL [--format mermaid|dot|svg|text] [--setting ...]`.

One node per table, one arrow per link, pointing the way a filter travels
(from the link's `to` table to its `from` table; both ways for a two-way or
one-to-one link; dotted for a link that carries no filter in the setting
drawn). The pure functions here build a `Picture` record and turn it into
Mermaid, Graphviz dot or plain text; render/svg.py draws the same record as
inline SVG, and the diff reports (Markdown, HTML) call `diff_picture`.

In a diff, changed links are drawn red (Mermaid `linkStyle <index>`, where
the index is the arrow's 0-based definition order, counted here as the arrows
are emitted), the tables a filter now reaches along a new path (the ends of
`path.added` pairs, not every table such a path passes) get the `newpath`
class, and removed links are drawn red and dotted. A model of more than `NEIGHBOURHOOD_LIMIT`
tables is cut down to the tables within one link of what changed, and the
caption says so.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace
from typing import Iterable, Sequence


FORMATS = ("mermaid", "dot", "svg", "text")
NEIGHBOURHOOD_LIMIT = 60  # tables; above it a diff's picture shows only what is near the change
HIGHLIGHT = "stroke:#d33,stroke-width:3px"
ROLE_COLOUR = "#6a1b9a"  # a role's filtered and restricted tables, and the links its filters travel
ROLE_HIGHLIGHT = f"stroke:{ROLE_COLOUR},stroke-width:3px"

ONE_WAY, TWO_WAY, STANDBY, REMOVED = "one-way", "two-way", "standby", "removed"
KIND_ORDER = ("fact", "dimension", "bridge", "access", "missing", "report")

# Mermaid shape brackets by table kind.
_SHAPES = {"fact": ("[", "]"), "dimension": ("(", ")"), "bridge": ("{{", "}}"), "access": ("[/", "/]"),
           "missing": ("[", "]"), "report": ("[[", "]]")}
_CLASS_DEFS = {
    "fact": "fill:#fff4e0,stroke:#b7791f,color:#222",
    "dimension": "fill:#e8f1fb,stroke:#3b6ea5,color:#222",
    "bridge": "fill:#eaf6ea,stroke:#3f8f3f,color:#222",
    "access": "fill:#f5ecfa,stroke:#7d4a9e,color:#222",
    "missing": "fill:#ffffff,stroke:#999999,stroke-dasharray:4 4,color:#666",
    "report": "fill:#fafafa,stroke:#555555,color:#222",
    "newpath": "stroke:#d33,stroke-width:3px",
    "rolefilter": f"stroke:{ROLE_COLOUR},stroke-width:5px",
    "restricted": f"stroke:{ROLE_COLOUR},stroke-width:3px",
}
_ARROWS = {ONE_WAY: "-->", TWO_WAY: "<-->", STANDBY: "-.->", REMOVED: "-.->"}


# --- records ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Node:
    """A table in a picture."""

    id: str  # sanitised, safe as a Mermaid or dot identifier
    table: str
    kind: str  # fact | dimension | bridge | access | missing (named by a link, not defined) | report (its label)
    on_new_path: bool = False
    description: str | None = None
    role: str = ""  # in a role's picture: "filter" (the role filters it) | "restricted" (its filter reaches it) | ""


@dataclass(frozen=True)
class Arrow:
    """One link as drawn: a filter on `src` (the link's `to` table) restricts `dst` (its `from` table)."""

    index: int  # 0-based definition order: Mermaid's linkStyle index
    link: str
    src: str
    dst: str
    style: str  # one-way | two-way | standby | removed
    changed: bool = False
    off: bool = False  # style standby because the setting turned the link off (`flow: off`, a twin's `via`)
    travelled: bool = False  # in a role's picture: the role's filter travels along it
    words: str = ""  # more to say in the label, e.g. " (one way for roles)"

    @property
    def red(self) -> bool:
        return self.changed or self.style == REMOVED

    @property
    def label(self) -> str:
        """The link's name, with in words what dashes and arrowheads show (for readers without them)."""
        if self.style == STANDBY:
            return self.link + (" (no filter here)" if self.off else " (standby)") + self.words
        return self.link + {TWO_WAY: " (both ways)", REMOVED: " (removed)"}.get(self.style, "") + self.words


@dataclass(frozen=True)
class Picture:
    """A picture of a model's filter graph: tables, arrows and a caption."""

    model: str
    nodes: tuple[Node, ...]
    arrows: tuple[Arrow, ...]
    caption: str | None = None  # says when the picture leaves tables out
    setting: str = "default setting"

    @property
    def highlighted(self) -> tuple[int, ...]:
        return tuple(a.index for a in self.arrows if a.red)

    @property
    def travelled(self) -> tuple[int, ...]:
        """Arrows a role's filter travels along (not also red: a change's red wins)."""
        return tuple(a.index for a in self.arrows if a.travelled and not a.red)


# --- building the picture ---------------------------------------------------------------------


def node_ids(tables: Iterable[str]) -> dict[str, str]:
    """Table -> an identifier of letters, digits and `_` only, prefixed so no keyword (`end`) can clash."""
    out: dict[str, str] = {}
    taken: set[str] = set()
    for table in sorted(tables):
        base = "t_" + re.sub(r"[^A-Za-z0-9_]", "_", table)
        candidate, n = base, 2
        while candidate in taken:
            candidate, n = f"{base}_{n}", n + 1
        taken.add(candidate)
        out[table] = candidate
    return out


def _paths(new_paths) -> list[tuple[str, ...]]:
    """Accepts paths (sequences of link names); a lone string counts as a one-link path."""
    return [(p,) if isinstance(p, str) else tuple(p) for p in new_paths]


def _link_style(link, setting) -> str:
    flow = setting.flows.get(link.name)
    if flow is None:
        return STANDBY
    return TWO_WAY if flow == TWO_WAY or link.cardinality == "one-to-one" else ONE_WAY


def _security_style(link) -> str:
    from modeldiff import graph

    if link.standby:
        return STANDBY
    return TWO_WAY if len(graph.security_edges(link)) == 2 else ONE_WAY


def _security_words(link) -> str:
    """A link whose filters flow both ways while row security flows one way says so."""
    if not link.standby and link.flow == TWO_WAY and _security_style(link) == ONE_WAY:
        return " (one way for roles)"
    return ""


def role_reach(model, role: str) -> tuple[dict, set[str]]:
    """(restricted table -> path from a filtered table, tables the role filters) over the security graph."""
    from modeldiff import graph
    from modeldiff.errors import ModeldiffError

    if role not in model.roles:
        known = ", ".join(sorted(model.roles)[:8]) or "none"
        raise ModeldiffError(f"--role {role}: model {model.name} has no role {role!r} (its roles: {known})")
    restricted = graph.role_restricted(model, model.roles[role])
    return restricted, {t for t in model.roles[role].filters if t in model.tables}


def _neighbourhood(model, focus: set[str], removed: Sequence) -> set[str]:
    keep = set(focus)
    for link in list(model.links.values()) + list(removed):
        if link.from_table in focus or link.to_table in focus:
            keep |= {link.from_table, link.to_table}
    return keep


def picture(model, highlight_links: Iterable[str] = (), new_paths: Iterable[Sequence[str]] = (),
            removed_links: Iterable = (), setting=None, setting_label: str = "default setting",
            focus_tables: Iterable[str] = (), limit: int = NEIGHBOURHOOD_LIMIT,
            reached: Iterable[str] = (), security: bool = False, role: str | None = None,
            report=None) -> Picture:
    """The picture of `model` (in `setting`, default: the model's own links).

    `highlight_links`: names of links drawn red. `new_paths`: filter paths (link
    names) whose tables get the `newpath` class; `reached`: tables that get it
    themselves (a diff marks only the tables a filter now reaches along a new
    path, not every table such a path passes). `removed_links`: Link records
    of the old revision, drawn red and dotted (names are ignored: their tables
    are unknown). When the model has more than `limit` tables and something is
    highlighted, only the tables within one link of it are kept.

    `security`: draw the security graph instead (semantics.md section 3: the
    links row security travels, standby links dotted, `setting` ignored).
    `role`: the security graph with that role's reach: the tables it filters
    and the tables its filters restrict get the `rolefilter` / `restricted`
    marks, the links they travel along are `travelled`.
    `report`: a Report record drawn as one more node (kind `report`), labelled
    with its name, its groups and its condition (`having`) when it has one.
    """
    from modeldiff import graph

    if setting is None:
        setting = graph.default_setting(model)
    restricted, filtered = role_reach(model, role) if role is not None else ({}, set())
    security = security or role is not None
    highlight = {name for name in highlight_links if name in model.links}
    removed = sorted((l for l in removed_links if not isinstance(l, str) and l.name not in model.links),
                     key=lambda l: l.name)
    marked = {t for path in _paths(new_paths) for name in path if name in model.links
              for t in (model.links[name].from_table, model.links[name].to_table)}
    marked |= {t for t in reached if t in model.tables}

    tables = set(model.tables)
    for link in list(model.links.values()) + removed:
        tables |= {link.from_table, link.to_table}
    focus = {t for name in highlight for t in model.links[name].tables} | marked | set(restricted) \
        | {t for l in removed for t in l.tables} | {t for t in focus_tables if t in tables}
    caption = None
    if len(model.tables) > limit and focus:
        kept = _neighbourhood(model, focus, removed)
        caption = (f"{model.name} has {len(model.tables)} tables: showing the {len(kept)} within one link "
                   f"of what is marked.")
        tables = kept

    ids = node_ids(tables)
    nodes = tuple(Node(ids[t], t, model.tables[t].kind if t in model.tables else "missing", t in marked,
                       model.tables[t].description if t in model.tables else None,
                       "filter" if t in filtered else "restricted" if t in restricted else "")
                  for t in sorted(tables))
    if report is not None:
        nodes += (report_node(report, set(ids.values())),)
    arrows: list[Arrow] = []
    for name in sorted(model.links):
        link = model.links[name]
        if link.from_table in tables and link.to_table in tables:
            style = _security_style(link) if security else _link_style(link, setting)
            travelled = not link.standby and any(e.src in restricted for e in graph.security_edges(link))
            arrows.append(Arrow(len(arrows), name, link.to_table, link.from_table, style, name in highlight,
                                style == STANDBY and not link.standby and not security, travelled,
                                _security_words(link) if security else ""))
    for link in removed:
        if link.from_table in tables and link.to_table in tables:
            arrows.append(Arrow(len(arrows), link.name, link.to_table, link.from_table, REMOVED, True))
    return Picture(model.name, nodes, tuple(arrows), caption, setting_label)


def report_node(report, taken: set[str] = frozenset()) -> Node:
    """A report as a node: `report NAME by ...`, and `having CONDITION` when it keeps only some groups."""
    words = f"report {report.name}" + (f" by {', '.join(report.by)}" if report.by else "")
    if report.having is not None:
        words += f", having {' '.join(report.having.split())}"
    node_id = "r_" + re.sub(r"[^A-Za-z0-9_]", "_", report.name)
    while node_id in taken:
        node_id += "_"
    return Node(node_id, words, "report", description=report.description)


def diff_picture(result, limit: int = NEIGHBOURHOOD_LIMIT) -> Picture | None:
    """The new revision of a `DiffResult`, with what changed marked; None when no link or path changed.

    Changed links are red; the tables marked are the ends of the new filter
    paths (`paths.S->T` of a `path.added` change marks T: a filter on S now
    reaches it a new way), not every table those paths pass through, which
    after one link changed can be the whole model.
    """
    highlight, removed_names, reached, focus = set(), set(), set(), set()
    for change in result.changes:
        section, _, rest = change.subject.partition(".")
        name = rest.split(".")[0]
        if change.kind == "link.removed":
            removed_names.add(name)
        elif change.kind.startswith("link."):
            highlight.add(name)
        elif change.kind == "path.added" and "->" in rest:
            reached.add(rest.split("->", 1)[1])
        elif section == "tables" and change.kind.startswith("table."):
            focus.add(name)
    removed = [result.old.links[n] for n in sorted(removed_names) if n in result.old.links]
    if not (highlight or removed or reached):
        return None
    return picture(result.new, highlight, (), removed, focus_tables=focus, limit=limit, reached=reached)


def role_picture(model, role: str, highlight_links: Iterable[str] = (), limit: int = NEIGHBOURHOOD_LIMIT) -> Picture:
    """The security graph with `role`'s reach marked (see `picture`), its label saying what the role restricts."""
    restricted, filtered = role_reach(model, role)
    more = len(set(restricted) - filtered)
    label = (f"row security of role {role}: filters {_words(sorted(filtered)) or 'no table'}, which restrict "
             f"{more} more table{'s' if more != 1 else ''}")
    return picture(model, highlight_links, setting_label=label, limit=limit, role=role)


def _words(names) -> str:
    from modeldiff.words import and_list

    return and_list(names)


READABLE_NODES = 40  # tables a diagram (Markdown, HTML) shows at most: beyond a few dozen it is not read (nor rendered)


def readable(pic: Picture, max_nodes: int = READABLE_NODES) -> Picture:
    """`pic` cut to at most `max_nodes` tables, nearest to what changed first; the caption says what was left out.

    Kept in this order until the limit: the tables of changed (red) links, in
    the order the links are drawn; the tables on new filter paths; the other
    tables (the neighbours `diff_picture` keeps). Arrows are kept between kept
    tables and numbered again, so `linkStyle` indices stay right.
    """
    if len(pic.nodes) <= max_nodes:
        return pic
    order: list[str] = []
    for arrow in pic.arrows:
        if arrow.red:
            order += [arrow.src, arrow.dst]
    order += [n.table for n in pic.nodes if n.on_new_path]
    order += [n.table for n in pic.nodes]
    kept = list(dict.fromkeys(order))[:max_nodes]
    keep = set(kept)
    nodes = tuple(n for n in pic.nodes if n.table in keep)
    arrows: list[Arrow] = []
    for arrow in pic.arrows:
        if arrow.src in keep and arrow.dst in keep:
            arrows.append(replace(arrow, index=len(arrows)))
    red_left = sum(1 for a in pic.arrows if a.red) - sum(1 for a in arrows if a.red)
    caption = (f"{pic.model}: showing {len(nodes)} of the {len(pic.nodes)} tables near what changed "
               f"(the changed links' own tables first); {len(pic.nodes) - len(nodes)} tables and "
               f"{len(pic.arrows) - len(arrows)} links left out"
               + (f", {red_left} of them changed" if red_left else "")
               + ". `modeldiff graph` on the new revision draws every table; `--format json` lists every change.")
    return Picture(pic.model, nodes, tuple(arrows), caption, pic.setting)


# --- Mermaid ------------------------------------------------------------------------------------


def mermaid_label(text: str) -> str:
    """Text for a quoted Mermaid label: anything but letters, digits, spaces and `_ .-(),:/` as an entity code."""
    return "".join(ch if ch.isascii() and (ch.isalnum() or ch in "_ .-(),:/") else f"#{ord(ch)};" for ch in text)


def mermaid_of(pic: Picture) -> str:
    lines = ["graph LR"]
    if pic.caption:
        lines.append(f"  %% {pic.caption}")
    for n in pic.nodes:
        left, right = _SHAPES.get(n.kind, ("[", "]"))
        lines.append(f'  {n.id}{left}"{mermaid_label(n.table)}"{right}')
    ids = {n.table: n.id for n in pic.nodes}
    for a in pic.arrows:
        lines.append(f'  {ids[a.src]} {_ARROWS[a.style]}|"{mermaid_label(a.label)}"| {ids[a.dst]}')
    used = [k for k in KIND_ORDER if any(n.kind == k for n in pic.nodes)]
    marks = {"newpath": [n.id for n in pic.nodes if n.on_new_path],
             "rolefilter": [n.id for n in pic.nodes if n.role == "filter"],
             "restricted": [n.id for n in pic.nodes if n.role == "restricted"]}
    for kind in used + [mark for mark, ids_ in marks.items() if ids_]:
        lines.append(f"  classDef {kind} {_CLASS_DEFS[kind]}")
    for kind in used:
        lines.append(f"  class {','.join(n.id for n in pic.nodes if n.kind == kind)} {kind}")
    for mark, marked in marks.items():
        if marked:
            lines.append(f"  class {','.join(marked)} {mark}")
    for index in pic.travelled:
        lines.append(f"  linkStyle {index} {ROLE_HIGHLIGHT}")
    for index in pic.highlighted:
        lines.append(f"  linkStyle {index} {HIGHLIGHT}")
    return "\n".join(lines) + "\n"


def mermaid(model, highlight_links: Iterable[str] = (), new_paths: Iterable[Sequence[str]] = (),
            removed_links: Iterable = (), setting=None) -> str:
    """Mermaid `graph LR` source of `model`'s filter graph (see `picture` for the arguments)."""
    return mermaid_of(picture(model, highlight_links, new_paths, removed_links, setting))


# --- Graphviz dot and text ---------------------------------------------------------------------------

_DOT_NODE = {"fact": 'shape=box, style=filled, fillcolor="#fff4e0", color="#b7791f"',
             "dimension": 'shape=box, style="rounded,filled", fillcolor="#e8f1fb", color="#3b6ea5"',
             "bridge": 'shape=hexagon, style=filled, fillcolor="#eaf6ea", color="#3f8f3f"',
             "access": 'shape=parallelogram, style=filled, fillcolor="#f5ecfa", color="#7d4a9e"',
             "missing": 'shape=box, style=dashed, color="#999999"',
             "report": 'shape=note, style=filled, fillcolor="#fafafa", color="#555555"'}


def _dot_string(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def dot_of(pic: Picture) -> str:
    lines = [f"digraph {_dot_string(pic.model)} {{", "  rankdir=LR;", '  node [fontname="Helvetica"];',
             '  edge [fontname="Helvetica", fontsize=10];']
    if pic.caption:
        lines.append(f"  label={_dot_string(pic.caption)};")
    for n in pic.nodes:
        extra = ', color="#d33", penwidth=3' if n.on_new_path else ""
        if n.role:
            extra += f', color="{ROLE_COLOUR}", penwidth={5 if n.role == "filter" else 3}'
        lines.append(f"  {n.id} [label={_dot_string(n.table)}, {_DOT_NODE.get(n.kind, _DOT_NODE['missing'])}{extra}];")
    ids = {n.table: n.id for n in pic.nodes}
    for a in pic.arrows:
        attrs = [f"label={_dot_string(a.label)}"]
        if a.style == TWO_WAY:
            attrs.append("dir=both")
        if a.style in (STANDBY, REMOVED):
            attrs.append("style=dashed")
        if a.red:
            attrs.append('color="#d33", penwidth=3')
        elif a.travelled:
            attrs.append(f'color="{ROLE_COLOUR}", penwidth=3')
        lines.append(f"  {ids[a.src]} -> {ids[a.dst]} [{', '.join(attrs)}];")
    lines.append("}")
    return "\n".join(lines) + "\n"


_TEXT_ARROWS = {ONE_WAY: "-->", TWO_WAY: "<->", STANDBY: "..>", REMOVED: "xx>"}


def text_of(pic: Picture) -> str:
    tables = sum(1 for n in pic.nodes if n.kind != "report")
    lines = [f"{pic.model}: {tables} tables, {len(pic.arrows)} links ({pic.setting})"]
    if pic.caption:
        lines.append(pic.caption)
    lines += ["", "tables"]
    for kind in KIND_ORDER:
        names = [n.table for n in pic.nodes if n.kind == kind]
        if names:
            lines.append(f"  {kind + ':':<11}{', '.join(names)}")
    for role, words in (("filter", "the role filters"), ("restricted", "its filters restrict")):
        names = [n.table for n in pic.nodes if n.role == role]
        if names:
            lines.append(f"  {words}: {', '.join(names)}")
    lines += ["", "links (a filter on the left table restricts the right one; <-> both ways, ..> carries no filter here)"]
    width = max((len(a.src) for a in pic.arrows), default=0)
    width_dst = max((len(a.dst) for a in pic.arrows), default=0)
    for a in pic.arrows:
        mark = "  * changed" if a.changed else "  * the role's filter travels here" if a.travelled else ""
        lines.append(f"  {a.src:<{width}} {_TEXT_ARROWS[a.style]} {a.dst:<{width_dst}}  {a.link}{a.words}{mark}")
    return "\n".join(lines) + "\n"


# --- a setting named on the command line ------------------------------------------------------


def resolve(model, spec: str | None):
    """(Setting, label) for `measure:NAME` or `report:NAME`; the default setting for None."""
    from modeldiff import graph
    from modeldiff.errors import ModeldiffError

    if spec is None:
        return graph.default_setting(model), "default setting"
    what, _, name = spec.partition(":")
    if what not in ("measure", "report") or not name:
        raise ModeldiffError(f"--setting {spec!r}: expected measure:NAME or report:NAME")
    items = model.measures if what == "measure" else model.reports
    if name not in items:
        known = ", ".join(sorted(items)[:8]) or "none"
        raise ModeldiffError(f"--setting {spec}: model {model.name} has no {what} {name!r} (its {what}s: {known})")
    if what == "measure":
        setting = graph.measure_setting(model, items[name], variant_defaults=True)
    else:
        setting = graph.measure_setting(model, None, items[name], variant_defaults=True)
    return setting, f"setting of {what} {name}"
