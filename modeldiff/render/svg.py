"""A `Picture` (modeldiff.picture) drawn as SVG; laid out by Graphviz `dot` where it is installed.

The layout: `layout(pic)` asks Graphviz's layered layout (`dot -Tjson`, run as
a subprocess with a timeout) where each table, each arrow's curve and each
label goes; dot keeps labels apart because it sizes each one as a box of its
own. Only identifiers (`t_...`, `e<index>`) and numbers go into dot's input:
node and label boxes are sized here from the texts and left empty, so no
model text reaches dot. When dot is not installed, fails, times out or
answers something unreadable, or when `MODELDIFF_LAYOUT=builtin` (or
`engine="builtin"`), the layout is computed here: tables in columns by depth
along the arrows (a filter's direction; cycles broken where a depth-first
search meets them), each column ordered by a few barycentre sweeps to cut
crossings, labels placed where they overlap least. A failure of dot is said
in the drawing's `<desc>` (Layout.note). Either way the drawing itself
(shapes, colours, arrowheads, texts, all escaped) is done here, with no
browser script.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from dataclasses import dataclass, field
from typing import Iterable
from html import escape

NODE_H = 34
ROW_GAP = 22
DUMMY_H = 12  # the slot an arrow takes in a column it crosses
MARGIN = 24
CHAR_W = 7.4  # px per character at the node font size: a width estimate, not a measurement
SWEEPS = 4
GAP_PER_ARROW = 14  # extra px between two columns for each arrow crossing it beyond four
MAX_GAP = 520
LABEL_TRIES = (0.5, 0.38, 0.62, 0.28, 0.72, 0.2, 0.8)  # where along a curve a label may go, first choice first
LABEL_H = 13
LABEL_CHAR_W = 6.2
LAYOUT_ENV = "MODELDIFF_LAYOUT"  # "builtin" forces the layout computed here; "dot" (or unset): dot where installed
DOT_TIMEOUT = 20.0  # seconds; past it the layout computed here is used
DOT_NODESEP = 0.3  # inches between neighbours in a rank
DOT_RANKSEP = 0.6  # inches between ranks
LABEL_PAD = 8  # px of room around a label's estimated text, so a wider font still fits

_FILL = {"fact": "#fff4e0", "dimension": "#e8f1fb", "bridge": "#eaf6ea", "access": "#f5ecfa", "missing": "#ffffff",
         "report": "#fafafa"}
_STROKE = {"fact": "#b7791f", "dimension": "#3b6ea5", "bridge": "#3f8f3f", "access": "#7d4a9e", "missing": "#999999",
           "report": "#555555"}
RED = "#d33"
GREY = "#555"
PURPLE = "#6a1b9a"  # picture.ROLE_COLOUR: a role's tables and the links its filters travel


@dataclass(frozen=True)
class Box:
    """A table's box in the drawing."""

    table: str
    layer: int
    x: float
    y: float
    w: float
    h: float

    @property
    def cy(self) -> float:
        return self.y + self.h / 2


# --- layout -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Layout:
    """Where every box and bend of a drawing goes."""

    boxes: dict  # table -> Box
    bends: dict  # arrow index -> the Boxes (dummy slots) it passes through in the columns it crosses
    width: float
    height: float
    routes: dict = field(default_factory=dict)  # arrow index -> cubic segments, when dot routed the arrows
    labels: dict = field(default_factory=dict)  # arrow index -> (x, baseline y) of its label, when dot placed it
    engine: str = "builtin"  # "dot" or "builtin"
    note: str | None = None  # why dot's layout was not used, when it was asked for and failed


def layers(tables: list[str], edges: list[tuple[str, str]]) -> dict[str, int]:
    """Depth of each table along `edges`, after dropping the edges that close a cycle.

    Longest-path layering; then a table nothing points into moves right, next
    to the nearest table it points at, so that few arrows skip a column.
    """
    succ: dict[str, list[str]] = {t: [] for t in tables}
    for src, dst in sorted(set(edges)):
        if src != dst and src in succ and dst in succ:
            succ[src].append(dst)
    state: dict[str, int] = {}  # 1 on the stack, 2 done
    finished: list[str] = []
    dag: dict[str, list[str]] = {t: [] for t in tables}
    for root in sorted(tables):
        if root in state:
            continue
        state[root] = 1
        stack = [(root, iter(succ[root]))]
        while stack:
            node, rest = stack[-1]
            for nxt in rest:
                if state.get(nxt) == 1:
                    continue  # closes a cycle: left out of the layering
                dag[node].append(nxt)
                if nxt not in state:
                    state[nxt] = 1
                    stack.append((nxt, iter(succ[nxt])))
                    break
            else:
                state[node] = 2
                finished.append(node)
                stack.pop()
    depth = {t: 0 for t in tables}
    has_in: set[str] = set()
    for node in reversed(finished):  # a topological order of the acyclic part
        for nxt in dag[node]:
            depth[nxt] = max(depth[nxt], depth[node] + 1)
            has_in.add(nxt)
    for t in tables:
        if t not in has_in and dag[t]:
            depth[t] = min(depth[d] for d in dag[t]) - 1
    return depth


def _order(cols: list[list[str]], near: dict[str, set[str]]) -> list[list[str]]:
    """Barycentre sweeps, left to right then back, ties by name."""
    for sweep in range(SWEEPS):
        forward = sweep % 2 == 0
        for i in (range(1, len(cols)) if forward else range(len(cols) - 2, -1, -1)):
            ref = cols[i - 1] if forward else cols[i + 1]
            where = {t: n for n, t in enumerate(ref)}
            current = {t: n for n, t in enumerate(cols[i])}

            def centre(t: str) -> float:
                seen = [where[u] for u in near[t] if u in where]
                return sum(seen) / len(seen) if seen else current[t]

            cols[i] = sorted(cols[i], key=lambda t: (centre(t), t))
    return cols


def layout(pic, engine: str | None = None) -> Layout:
    """Where everything goes: dot's layout where dot is installed (see the module docstring), else `builtin_layout`.

    `engine`: "builtin" or "dot" (default: the environment's MODELDIFF_LAYOUT, else dot when installed). A dot
    that cannot be run or fails gives the builtin layout with a `note` saying why.
    """
    choice = engine or os.environ.get(LAYOUT_ENV, "").strip().lower() or "dot"
    if choice == "builtin" or not pic.nodes:
        return builtin_layout(pic)
    program = shutil.which("dot")
    if program is None:
        note = None if engine is None and LAYOUT_ENV not in os.environ else "Graphviz dot is not installed"
        return _with_note(builtin_layout(pic), note)
    try:
        return dot_layout(pic, program)
    except DotFailed as exc:
        return _with_note(builtin_layout(pic), f"Graphviz dot failed ({exc}); laid out by modeldiff itself")


def _with_note(lay: Layout, note: str | None) -> Layout:
    from dataclasses import replace

    return lay if note is None else replace(lay, note=note)


def builtin_layout(pic) -> Layout:
    """Tables in columns by depth; an arrow that crosses columns gets a slot in each, so it passes between tables."""
    tables = [n.table for n in pic.nodes]
    depth = layers(tables, [(a.src, a.dst) for a in pic.arrows])
    chains: dict[int, list[str]] = {}
    for a in pic.arrows:
        lo, hi = depth[a.src], depth[a.dst]
        step = 1 if hi > lo else -1
        chains[a.index] = [f"\0{a.index}:{layer}" for layer in range(lo + step, hi, step)]  # "\0": no table name
        for key in chains[a.index]:
            depth[key] = int(key.rsplit(":", 1)[1])
    cols: list[list[str]] = [[] for _ in range(max(depth.values(), default=-1) + 1)]
    for key in sorted(depth):
        cols[depth[key]].append(key)
    near: dict[str, set[str]] = {key: set() for key in depth}
    for a in pic.arrows:
        chain = [a.src, *chains[a.index], a.dst]
        for u, v in zip(chain, chain[1:]):
            if u != v:
                near[u].add(v)
                near[v].add(u)
    cols = _order(cols, near)

    node_w = max((len(t) for t in tables), default=4) * CHAR_W + 28
    base = min(max(max((len(a.link) for a in pic.arrows), default=0) * LABEL_CHAR_W + 48, 96), 240)
    crossing = [0] * len(cols)  # arrows crossing the gap after each column: a crowded gap is made wider
    for a in pic.arrows:
        lo, hi = sorted((depth[a.src], depth[a.dst]))
        for i in range(lo, hi):
            crossing[i] += 1
    gaps = [min(base + GAP_PER_ARROW * max(n - 4, 0), MAX_GAP) for n in crossing]
    xs = [MARGIN + i * node_w + sum(gaps[:i]) for i in range(len(cols))]

    def height_of(key: str) -> float:
        return DUMMY_H if key.startswith("\0") else NODE_H

    col_h = [sum(height_of(k) for k in col) + max(len(col) - 1, 0) * ROW_GAP for col in cols]
    tallest = max(col_h, default=0)
    slots: dict[str, Box] = {}
    for i, col in enumerate(cols):
        y = MARGIN + (tallest - col_h[i]) / 2
        for key in col:
            slots[key] = Box(key, i, xs[i], y, node_w, height_of(key))
            y += height_of(key) + ROW_GAP
    width = 2 * MARGIN + len(cols) * node_w + sum(gaps[:-1])
    bends = {index: tuple(slots[k] for k in chain) for index, chain in chains.items()}
    return Layout({t: slots[t] for t in tables}, bends, max(width, 2 * MARGIN), max(2 * MARGIN + tallest, 2 * MARGIN))


# --- Graphviz dot --------------------------------------------------------------------------------


class DotFailed(Exception):
    """dot could not be run, failed, timed out or answered something this module cannot read."""


def node_width(table: str) -> float:
    return len(table) * CHAR_W + 28


def label_size(text: str) -> tuple[float, float]:
    """The room a label needs (px): its estimated text width and height, plus LABEL_PAD on every side."""
    return len(text) * LABEL_CHAR_W + 2 * LABEL_PAD, LABEL_H + LABEL_PAD


def dot_source(pic) -> str:
    """dot's input for the layout: identifiers and sizes only (no model text), in points (1 pt drawn as 1 px)."""
    lines = ["digraph modeldiff {",
             f"  graph [rankdir=LR, nodesep={DOT_NODESEP}, ranksep={DOT_RANKSEP}, margin=0, pad=0];",
             '  node [shape=box, fixedsize=true, label=""];', "  edge [arrowsize=0.9];"]
    for n in pic.nodes:
        lines.append(f"  {n.id} [width={node_width(n.table) / 72:.4f}, height={NODE_H / 72:.4f}];")
    ids = {n.table: n.id for n in pic.nodes}
    for a in pic.arrows:
        w, h = label_size(_label(a))
        box = (f'<<TABLE BORDER="0" CELLBORDER="0" CELLSPACING="0" CELLPADDING="0"><TR>'
               f'<TD FIXEDSIZE="TRUE" WIDTH="{w:.0f}" HEIGHT="{h:.0f}"></TD></TR></TABLE>>')
        two_way = a.style == "two-way"
        if a.src == a.dst:
            # dot does not keep a loop's label clear of others: the loop goes out to a point of its own and back,
            # two edges dot routes (and labels) like any other; the drawing joins them
            lines.append(f"  k{a.index} [shape=point, width=0.01, height=0.01];")
            lines.append(f'  {ids[a.src]} -> k{a.index} [id="e{a.index}", label={box}, '
                         f'dir={"back" if two_way else "none"}];')
            lines.append(f'  k{a.index} -> {ids[a.dst]} [id="f{a.index}"];')
            continue
        lines.append(f'  {ids[a.src]} -> {ids[a.dst]} [id="e{a.index}", label={box}{", dir=both" if two_way else ""}];')
    lines.append("}")
    return "\n".join(lines) + "\n"


def run_dot(source: str, program: str = "dot", timeout: float | None = None) -> dict:
    """dot's JSON answer for `source` (within `timeout` s, default DOT_TIMEOUT); DotFailed with the reason."""
    timeout = DOT_TIMEOUT if timeout is None else timeout
    try:
        done = subprocess.run([program, "-Tjson"], input=source.encode(), capture_output=True, timeout=timeout,
                              check=False)
    except subprocess.TimeoutExpired:
        raise DotFailed(f"no answer within {timeout:g} s") from None
    except OSError as exc:
        raise DotFailed(exc.strerror or str(exc)) from None
    if done.returncode != 0:
        first = (done.stderr.decode("utf-8", "replace").strip().splitlines() or ["no message"])[0]
        raise DotFailed(f"exit code {done.returncode}: {first[:200]}")
    try:
        return json.loads(done.stdout)
    except ValueError:
        raise DotFailed("its output is not JSON") from None


def _point(text: str) -> tuple[float, float]:
    x, y = text.split(",")[-2:]
    return float(x), float(y)


def _spline(pos: str) -> list[tuple[tuple[float, float], ...]]:
    """Cubic segments of dot's `pos` ("e,x,y s,x,y p0 p1 ... p3k"), the arrowhead stretches included."""
    start = end = None
    points = []
    for token in pos.split(";")[0].split():
        if token.startswith("e,"):
            end = _point(token)
        elif token.startswith("s,"):
            start = _point(token)
        else:
            points.append(_point(token))
    if len(points) < 4 or (len(points) - 1) % 3:
        raise DotFailed(f"an edge position of {len(points)} points")
    segments = [tuple(points[i:i + 4]) for i in range(0, len(points) - 1, 3)]

    def straight(p, q):
        return p, (p[0] + (q[0] - p[0]) / 3, p[1] + (q[1] - p[1]) / 3), (p[0] + 2 * (q[0] - p[0]) / 3,
                                                                        p[1] + 2 * (q[1] - p[1]) / 3), q

    if start is not None:
        segments.insert(0, straight(start, points[0]))
    if end is not None:
        segments.append(straight(points[-1], end))
    return segments


def dot_layout(pic, program: str = "dot", timeout: float | None = None) -> Layout:
    """Tables, arrows and labels where dot puts them (its y axis turned to point down, everything inside margins)."""
    answer = run_dot(dot_source(pic), program, timeout)
    try:
        by_id = {o["name"]: o for o in answer.get("objects", ())}
        centres = {n.table: _point(by_id[n.id]["pos"]) for n in pic.nodes}
        edges = {e["id"]: e for e in answer.get("edges", ()) if "id" in e}
        raw_routes = {a.index: _spline(edges[f"e{a.index}"]["pos"])
                      + (_spline(edges[f"f{a.index}"]["pos"]) if a.src == a.dst else []) for a in pic.arrows}
        raw_labels = {a.index: _point(edges[f"e{a.index}"]["lp"]) for a in pic.arrows}
    except (KeyError, ValueError, TypeError, AttributeError) as exc:
        raise DotFailed(f"its answer lacks {exc}") from None
    xs, ys = [], []
    for n in pic.nodes:
        (x, y), w = centres[n.table], node_width(n.table)
        xs += [x - w / 2, x + w / 2]
        ys += [y - NODE_H / 2, y + NODE_H / 2]
    for a in pic.arrows:
        for segment in raw_routes[a.index]:
            xs += [p[0] for p in segment]
            ys += [p[1] for p in segment]
        (x, y), (w, h) = raw_labels[a.index], label_size(_label(a))
        xs += [x - w / 2, x + w / 2]
        ys += [y - h / 2, y + h / 2]
    left, top = min(xs) - MARGIN, max(ys) + MARGIN  # dot's y grows upwards; the drawing's downwards

    def at(p: tuple[float, float]) -> tuple[float, float]:
        return p[0] - left, top - p[1]

    boxes = {}
    for n in pic.nodes:
        (x, y), w = at(centres[n.table]), node_width(n.table)
        boxes[n.table] = Box(n.table, 0, x - w / 2, y - NODE_H / 2, w, NODE_H)
    routes = {i: [tuple(at(p) for p in segment) for segment in segments] for i, segments in raw_routes.items()}
    labels = {}
    for i, p in raw_labels.items():
        x, y = at(p)
        labels[i] = (x, y + 4)  # the baseline of an 11 px text centred on dot's label box
    return Layout(boxes, {}, max(xs) + MARGIN - left, top - min(ys) + MARGIN, routes, labels, "dot")


def _segment(x0: float, y0: float, x3: float, y3: float, offset: float = 0.0) -> tuple[tuple[float, float], ...]:
    dx = (x3 - x0) / 2
    return (x0, y0), (x0 + dx, y0 + offset), (x3 - dx, y3 + offset), (x3, y3)


def route(a: Box, b: Box, bends: tuple[Box, ...], offset: float) -> list[tuple[tuple[float, float], ...]]:
    """Cubic segments from box `a` to box `b` through `bends`; `offset` separates links joining the same tables."""
    if b.layer == a.layer:
        bulge = 48 + abs(offset) + abs(b.cy - a.cy) / 6
        x0, x3 = a.x + a.w, b.x + b.w
        return [((x0, a.cy), (x0 + bulge, a.cy + offset), (x3 + bulge, b.cy + offset), (x3, b.cy))]
    forward = b.layer > a.layer
    points = [(a.x + a.w if forward else a.x, a.cy)]
    for bend in bends:  # enter and leave each crossed column at the slot's height
        points += [(bend.x if forward else bend.x + bend.w, bend.cy), (bend.x + bend.w if forward else bend.x, bend.cy)]
    points.append((b.x if forward else b.x + b.w, b.cy))
    segments = []
    for n in range(0, len(points) - 1):
        (x0, y0), (x3, y3) = points[n], points[n + 1]
        crossing = n % 2 == 1  # a straight run through a crossed column
        segments.append(((x0, y0), (x0, y0), (x3, y3), (x3, y3)) if crossing else _segment(x0, y0, x3, y3, offset))
    return segments


def _at(points, t: float) -> tuple[float, float]:
    """The point of a cubic curve at parameter t."""
    (x0, y0), (x1, y1), (x2, y2), (x3, y3) = points
    u = 1 - t
    a, b, c, d = u * u * u, 3 * u * u * t, 3 * u * t * t, t * t * t
    return a * x0 + b * x1 + c * x2 + d * x3, a * y0 + b * y1 + c * y2 + d * y3


def _label_box(x: float, y: float, text: str) -> tuple[float, float, float, float]:
    w = len(text) * LABEL_CHAR_W + 4
    return x - w / 2, y - LABEL_H, x + w / 2, y + 2


class _Taken:
    """Rectangles already placed, bucketed in a grid so a query looks only at its neighbours."""

    CELL = 64.0

    def __init__(self) -> None:
        self.boxes: list[tuple[float, float, float, float]] = []
        self.cells: dict[tuple[int, int], list[int]] = {}

    def _cells(self, box):
        x0, y0, x1, y1 = box
        for cx in range(int(x0 // self.CELL), int(x1 // self.CELL) + 1):
            for cy in range(int(y0 // self.CELL), int(y1 // self.CELL) + 1):
                yield cx, cy

    def add(self, box) -> None:
        self.boxes.append(box)
        for cell in self._cells(box):
            self.cells.setdefault(cell, []).append(len(self.boxes) - 1)

    def overlap(self, box) -> float:
        """The area `box` shares with the rectangles placed."""
        x0, y0, x1, y1 = box
        near = {i for cell in self._cells(box) for i in self.cells.get(cell, ())}
        total = 0.0
        for i in near:
            b = self.boxes[i]
            total += max(0.0, min(x1, b[2]) - max(x0, b[0])) * max(0.0, min(y1, b[3]) - max(y0, b[1]))
        return total


def place_labels(items: list[tuple[str, list]], boxes: Iterable[Box]) -> list[tuple[float, float]]:
    """Where each (text, segments) label goes: the first spot along its curve that overlaps no table and no
    label placed before it, else the one that overlaps them least. Labels are placed in the order given."""
    taken = _Taken()
    for b in boxes:
        taken.add((b.x, b.y, b.x + b.w, b.y + b.h))
    spots = []
    for text, segments in items:
        segment = segments[1] if len(segments) > 1 else segments[0]  # a crossed column's straight run, if any
        candidates = [_at(segment, t) for t in LABEL_TRIES]
        if len(segments) > 1:
            candidates += [_at(segments[0], t) for t in LABEL_TRIES[1:]]
        best, best_area = candidates[0], None
        for c in candidates:
            area = taken.overlap(_label_box(c[0], c[1] - 4, text))
            if best_area is None or area < best_area:
                best, best_area = c, area
            if area == 0:
                break
        taken.add(_label_box(best[0], best[1] - 4, text))
        spots.append(best)
    return spots


def _f(v: float) -> str:
    return f"{v:.1f}".rstrip("0").rstrip(".")


# --- drawing ------------------------------------------------------------------------------------


def _markers(prefix: str) -> str:
    out = []
    for name, colour in (("grey", GREY), ("red", RED), ("role", PURPLE)):
        out.append(f'<marker id="{prefix}-{name}" viewBox="0 0 10 10" refX="9" refY="5" markerWidth="9" '
                   f'markerHeight="9" markerUnits="userSpaceOnUse" orient="auto-start-reverse"><path d="M0,0 L10,5 L0,10 z" fill="{colour}"/></marker>')
    return "<defs>" + "".join(out) + "</defs>"


def _offsets(pic) -> dict[int, float]:
    groups: dict[frozenset, list[int]] = {}
    for a in pic.arrows:
        groups.setdefault(frozenset((a.src, a.dst)), []).append(a.index)
    out = {}
    for members in groups.values():
        for k, index in enumerate(members):
            out[index] = (k - (len(members) - 1) / 2) * 26
    return out


def _path_d(segments) -> str:
    return f"M{_f(segments[0][0][0])},{_f(segments[0][0][1])}" + "".join(
        " C" + " ".join(f"{_f(x)},{_f(y)}" for x, y in seg[1:]) for seg in segments)


def _label(a) -> str:
    return a.label


def _arrow(a, segments, spot: tuple[float, float], prefix: str) -> str:
    """One arrow with its label, whose baseline centre is `spot`."""
    tone = "red" if a.red else "role" if a.travelled else "grey"
    colour = {"red": RED, "role": PURPLE, "grey": GREY}[tone]
    marker = f"url(#{prefix}-{tone})"
    attrs = [f'd="{_path_d(segments)}"', 'fill="none"', f'stroke="{colour}"',
             f'stroke-width="{1.4 if tone == "grey" else 3}"', f'marker-end="{marker}"']
    if a.style == "two-way":
        attrs.append(f'marker-start="{marker}"')
    if a.style in ("standby", "removed"):
        attrs.append('stroke-dasharray="5 4"')
    what = {"one-way": "one-way", "two-way": "two-way", "standby": "carries no filter here",
            "removed": "removed"}[a.style]
    cls = "edge changed" if a.red else "edge travelled" if a.travelled else "edge"
    return (f'<g class="{cls}" data-link="{escape(a.link)}" data-index="{a.index}">'
            f"<title>{escape(a.link)}: a filter on {escape(a.src)} restricts {escape(a.dst)} ({what})</title>"
            f'<path {" ".join(attrs)}/>'
            f'<text class="label" x="{_f(spot[0])}" y="{_f(spot[1])}" text-anchor="middle" font-size="11" fill="{colour}" '
            f'stroke="#ffffff" stroke-width="3" paint-order="stroke">{escape(_label(a))}</text></g>')


SLANT = 10  # px: a hexagon's point, a parallelogram's lean


def _outline(kind: str, box: Box, slant: float = SLANT, round_rx: float = 12) -> str:
    """The shape of a table's kind (docs/graph.md): fact rectangle, dimension rounded, bridge hexagon, access parallelogram."""
    x, y, w, h = box.x, box.y, box.w, box.h
    if kind == "bridge":
        corners = ((x + slant, y), (x + w - slant, y), (x + w, y + h / 2), (x + w - slant, y + h), (x + slant, y + h),
                   (x, y + h / 2))
    elif kind == "access":
        corners = ((x + slant, y), (x + w, y), (x + w - slant, y + h), (x, y + h))
    else:
        rx = round_rx if kind == "dimension" else 3
        return f'<rect x="{_f(x)}" y="{_f(y)}" width="{_f(w)}" height="{_f(h)}" rx="{rx}" '
    return '<polygon points="' + " ".join(f"{_f(px)},{_f(py)}" for px, py in corners) + '" '


def swatch(kind: str) -> str:
    """A small inline drawing of a table kind's shape and colours, for a legend."""
    box = Box("", 0, 1.5, 1.5, 30, 14)
    return (f'<svg xmlns="http://www.w3.org/2000/svg" class="swatch-{escape(kind)}" width="33" height="17" '
            f'viewBox="0 0 33 17" style="vertical-align:-3px;margin-right:4px" aria-hidden="true">'
            + _outline(kind, box, slant=5, round_rx=6)
            + f'fill="{_FILL.get(kind, "#fff")}" stroke="{_STROKE.get(kind, GREY)}" stroke-width="1.5"/></svg>')


def _node(n, box: Box) -> str:
    stroke, width = (RED, 3) if n.on_new_path else (_STROKE.get(n.kind, GREY), 1.5)
    if n.role:
        stroke, width = PURPLE, 5 if n.role == "filter" else 3
    dash = ' stroke-dasharray="4 4"' if n.kind == "missing" else ""
    title = f"{n.table} ({n.kind})" + (f": {n.description}" if n.description else "")
    title += {"filter": "; the role filters it", "restricted": "; the role's filters restrict it"}.get(n.role, "")
    cls = "node" + (" newpath" if n.on_new_path else "") + (f" role-{n.role}" if n.role else "")
    return (f'<g class="{cls}" data-table="{escape(n.table)}"><title>{escape(title)}</title>'
            + _outline(n.kind, box)
            + f'fill="{_FILL.get(n.kind, "#fff")}" stroke="{stroke}" stroke-width="{width}"{dash}/>'
            f'<text x="{_f(box.x + box.w / 2)}" y="{_f(box.cy + 4.5)}" text-anchor="middle" font-size="13" '
            f'fill="#222">{escape(n.table)}</text></g>')


def svg_of(pic, prefix: str = "mdg", standalone: bool = False, engine: str | None = None) -> str:
    """The picture as one <svg> element (with an XML namespace, so it also stands alone as a file).

    Inside a page (not `standalone`) it shrinks to the width it is given rather than being cut off.
    `engine`: see `layout`.
    """
    lay = layout(pic, engine)
    width, height = lay.width, lay.height
    fit = "" if standalone else ' style="max-width:100%;height:auto"'
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="modeldiff-graph" width="{_f(width)}" '
             f'height="{_f(height)}" viewBox="0 0 {_f(width)} {_f(height)}"{fit} role="img" '
             f'data-layout="{lay.engine}" '
             f'font-family="system-ui, -apple-system, Segoe UI, Helvetica, Arial, sans-serif">',
             f"<title>Filter graph of {escape(pic.model)} ({escape(pic.setting)})</title>"]
    if lay.note:
        parts.append(f'<desc class="layout-note">{escape(lay.note)}</desc>')
    parts.append(_markers(prefix))
    if lay.routes:
        routes, spots = lay.routes, lay.labels
    else:
        offsets = _offsets(pic)
        routes = {a.index: route(lay.boxes[a.src], lay.boxes[a.dst], lay.bends[a.index], offsets[a.index])
                  for a in pic.arrows}
        # red labels first, so the changed links keep the best spots
        order = sorted(pic.arrows, key=lambda a: (not a.red, a.index))
        placed = place_labels([(_label(a), routes[a.index]) for a in order], lay.boxes.values())
        spots = {a.index: (x, y - 4) for a, (x, y) in zip(order, placed)}  # the text's baseline above the spot
    parts += [_arrow(a, routes[a.index], spots[a.index], prefix) for a in pic.arrows]
    parts += [_node(n, lay.boxes[n.table]) for n in pic.nodes]
    parts.append("</svg>")
    svg = "\n".join(parts)
    return ('<?xml version="1.0" encoding="UTF-8"?>\n' + svg) if standalone else svg
