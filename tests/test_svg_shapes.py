"""docs/graph.md: a table's shape tells its kind in every drawn format (fact rectangle, dimension rounded,
bridge hexagon, access parallelogram); the text format lists tables under their kind."""

from __future__ import annotations

import re

import pytest

from modeldiff import picture
from modeldiff.load import load_files
from modeldiff.render.svg import svg_of

MODEL = """\
model: shapes
format: 1
tables:
  sales: {kind: fact, key: id, columns: {id: integer, product_id: integer, account_id: integer}}
  products: {kind: dimension, key: product_id, columns: {product_id: integer}}
  accounts: {kind: dimension, key: account_id, columns: {account_id: integer}}
  account_groups: {kind: bridge, key: [account_id, group_id], columns: {account_id: integer, group_id: integer}}
  viewers: {kind: access, key: [email, group_id], columns: {email: text, group_id: integer}}
links:
  sales_product: {from: sales.product_id, to: products.product_id}
  sales_account: {from: sales.account_id, to: accounts.account_id}
  groups_account: {from: account_groups.account_id, to: accounts.account_id, flow: two-way}
  viewers_group: {from: viewers.group_id, to: account_groups.group_id, cardinality: many-to-many}
"""
KINDS = {"sales": "fact", "products": "dimension", "accounts": "dimension", "account_groups": "bridge",
         "viewers": "access"}


@pytest.fixture(scope="module")
def pic():
    return picture.picture(load_files([("shapes.model.yaml", MODEL)]).model)


def outlines(svg: str) -> dict[str, str]:
    """table -> the first shape element of its node group."""
    found = {}
    for table, body in re.findall(r'<g class="node[^"]*" data-table="(\w+)">(.*?)</g>', svg, re.S):
        found[table] = re.search(r"<(rect|polygon)\b[^>]*>", body).group(0)
    return found


def corners(element: str) -> list[tuple[float, float]]:
    points = re.search(r'points="([^"]+)"', element).group(1).split()
    return [tuple(float(v) for v in p.split(",")) for p in points]


def test_svg_draws_each_kind_in_its_shape(pic):
    shapes = outlines(svg_of(pic))
    assert sorted(shapes) == sorted(KINDS)
    assert re.search(r'<rect [^>]*rx="3"', shapes["sales"])
    assert re.search(r'<rect [^>]*rx="12"', shapes["products"]) and re.search(r'<rect [^>]*rx="12"', shapes["accounts"])
    hexagon = corners(shapes["account_groups"])
    assert len(hexagon) == 6
    # a hexagon lying down: two points at mid-height, left and right
    ys = sorted(y for _, y in hexagon)
    assert ys[2] == ys[3] and ys[0] == ys[1] and ys[4] == ys[5]
    para = corners(shapes["viewers"])
    assert len(para) == 4
    (x0, y0), (x1, y1), (x2, y2), (x3, y3) = para
    # opposite sides parallel and equal (a parallelogram), but leaning: not a rectangle
    assert (x1 - x0, y1 - y0) == (x2 - x3, y2 - y3) and (x3 - x0, y3 - y0) == (x2 - x1, y2 - y1)
    assert x3 != x0


def test_svg_shapes_are_not_all_the_same_rectangle(pic):  # twin: the shape follows the kind, nothing else
    shapes = outlines(svg_of(pic))
    assert len({re.sub(r'(x|y|width|height|points)="[^"]*"', "", s) for s in shapes.values()}) == 4


def test_mermaid_and_dot_draw_the_same_shapes(pic):
    mermaid = picture.mermaid_of(pic)
    ids = {n.table: n.id for n in pic.nodes}
    assert f'{ids["sales"]}["sales"]' in mermaid
    assert f'{ids["products"]}("products")' in mermaid
    assert f'{ids["account_groups"]}{{{{"account_groups"}}}}' in mermaid
    assert f'{ids["viewers"]}[/"viewers"/]' in mermaid
    dot = picture.dot_of(pic)
    for table, shape in (("sales", "shape=box, style=filled"), ("products", 'shape=box, style="rounded,filled"'),
                         ("account_groups", "shape=hexagon"), ("viewers", "shape=parallelogram")):
        assert re.search(rf'{ids[table]} \[label="{table}", {re.escape(shape)}', dot), table


def test_text_lists_tables_under_their_kind(pic):
    text = picture.text_of(pic)
    for kind in ("fact", "dimension", "bridge", "access"):
        line = next(l for l in text.splitlines() if l.strip().startswith(kind + ":"))
        assert sorted(t for t, k in KINDS.items() if k == kind) == sorted(line.split(":", 1)[1].replace(",", " ").split())


def test_graphviz_draws_the_dot_source_in_the_same_shapes(pic):
    # the `--format dot` output as Graphviz itself renders it (dot -Tsvg): each kind's outline
    import subprocess

    from toolkit import program

    drawn = subprocess.run([program("dot"), "-Tsvg"], input=picture.dot_of(pic), capture_output=True, text=True,
                           timeout=60, check=True).stdout
    ids = {n.id: n.table for n in pic.nodes}
    shapes = {}
    for node_id, body in re.findall(r'<g id="node\d+" class="node">\s*<title>(\w+)</title>\s*(<\w+[^>]*>)', drawn):
        shapes[ids[node_id]] = body
    assert sorted(shapes) == sorted(KINDS)
    assert shapes["sales"].startswith("<polygon") and len(corners(shapes["sales"])) == 5  # closed: first point again
    xs = {x for x, _ in corners(shapes["sales"])}
    assert len(xs) == 2  # upright rectangle
    assert shapes["products"].startswith("<path") and shapes["accounts"].startswith("<path")  # rounded corners
    assert len(corners(shapes["account_groups"])) == 7  # a hexagon, closed
    para = corners(shapes["viewers"])
    assert len(para) == 5 and len({x for x, _ in para}) == 4  # four corners, none above another: leaning
    for table, kind in KINDS.items():  # each outline in its kind's colour, as in the other formats
        colour = {"fact": "#b7791f", "dimension": "#3b6ea5", "bridge": "#3f8f3f", "access": "#7d4a9e"}[kind]
        assert f'stroke="{colour}"' in shapes[table], table
