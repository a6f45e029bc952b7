"""A seeded property test of the dot layout (render/svg.py) over random models: the label boxes it asked dot to
keep free never overlap one another or a table, and everything lies inside the drawing.

This checks the layout's own geometry (the sizes estimated from the texts); what a browser's fonts make of
it is measured by tests/test_graph_browser.py, and over many more models by
benchmarks/campaigns/graph_overlaps.py.
"""

from __future__ import annotations

import random

import pytest

from modeldiff import picture
from modeldiff.render import svg
from graphkit import build, role
from toolkit import program

CASES = 120
WORDS = ["two-way", "one-to-one", "many-to-many", "standby", "secure"]
NAMES = ["calendar", "districts", "stations", "bikes", "trips", "repairs", "riders", "parts", "stock_levels",
         "mechanics", "appointment_diagnoses", "clinic_access", "d"]


def random_model(rng: random.Random):
    tables = rng.sample(NAMES, rng.randint(2, 12))
    links = {}
    for i in range(rng.randint(0, 18)):
        src, dst = rng.choice(tables), rng.choice(tables)
        name = f"l{i}_" + "x" * rng.randint(0, 24)  # label lengths from 3 to 40 characters
        links[name] = " ".join([f"{src}->{dst}", *rng.sample(WORDS, rng.randint(0, 2))])
    kinds = " ".join(f"{t}:{rng.choice(['fact', 'dimension', 'bridge', 'access'])}" for t in tables)
    return build(links, tables=kinds, roles=[role("r", tables[0])])


def text_box(x: float, baseline: float, text: str) -> tuple[float, float, float, float]:
    """The label's text as the layout estimates it: centred on x, its baseline at `baseline`."""
    w = len(text) * svg.LABEL_CHAR_W
    return x - w / 2, baseline - svg.LABEL_H + 2, x + w / 2, baseline + 3


def overlap(a, b) -> bool:
    return min(a[2], b[2]) > max(a[0], b[0]) and min(a[3], b[3]) > max(a[1], b[1])


@pytest.mark.parametrize("seed", range(CASES))
def test_dot_keeps_labels_apart_and_everything_inside(seed):
    program("dot")
    rng = random.Random(seed)
    model = random_model(rng)
    pic = picture.role_picture(model, "r") if seed % 3 == 0 else picture.picture(model)
    lay = svg.dot_layout(pic)
    nodes = [(b.x, b.y, b.x + b.w, b.y + b.h) for b in lay.boxes.values()]
    labels = [text_box(*lay.labels[a.index], a.label) for a in pic.arrows]
    for box in nodes + labels:
        assert box[0] >= 0 and box[1] >= 0 and box[2] <= lay.width and box[3] <= lay.height, (seed, box)
    for i, a in enumerate(labels):
        assert not any(overlap(a, b) for b in labels[i + 1:]), (seed, pic.arrows[i].label)
        assert not any(overlap(a, n) for n in nodes), (seed, pic.arrows[i].label)
    for i, a in enumerate(nodes):
        assert not any(overlap(a, b) for b in nodes[i + 1:]), seed
