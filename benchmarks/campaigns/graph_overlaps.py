"""Campaign (outside `make test`): many random models drawn as SVG and measured in headless Chromium.

    .venv/bin/python benchmarks/campaigns/graph_overlaps.py [--models 600] [--seed 0] [--engine dot|builtin]

Each model (2 to 12 tables, up to 18 links of random direction, flow, standby, security flow and label
length, every fourth one a role's picture) is drawn by render/svg.py and measured as Chromium lays it out,
with the checks of tests/test_graph_browser.py: no two texts overlap, no label covers a table, every table
inside the drawing. Prints the models with problems and a count; exit code 1 when any has one. The seeded
test tests/test_layout_properties.py checks the layout's own geometry over fewer models inside `make test`.
"""

from __future__ import annotations

import argparse
import html
import random
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(ROOT / "tests"), str(ROOT)]

from modeldiff import picture  # noqa: E402
from modeldiff.render.svg import svg_of  # noqa: E402
from test_graph_browser import measure, problems  # noqa: E402
from test_layout_properties import random_model  # noqa: E402

BATCH = 50  # drawings per page: one Chromium start each


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--models", type=int, default=600)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--engine", choices=("dot", "builtin"), default="dot")
    args = parser.parse_args()
    bad = 0
    with tempfile.TemporaryDirectory() as folder:
        for start in range(0, args.models, BATCH):
            parts = []
            for n in range(start, min(start + BATCH, args.models)):
                rng = random.Random(args.seed * 1_000_003 + n)
                model = random_model(rng)
                pic = picture.role_picture(model, "r") if n % 4 == 0 else picture.picture(model)
                parts.append(f'<div data-name="{n}">{svg_of(pic, prefix=f"g{n}", engine=args.engine)}</div>')
            for drawing in measure(Path(folder), "".join(parts), width=4000):
                found = problems(drawing)
                if found:
                    bad += 1
                    print(f"model {drawing['name']} ({drawing['layout']}): {'; '.join(found[:3])}")
            print(f"{min(start + BATCH, args.models)} models measured, {bad} with problems", file=sys.stderr)
    print(f"{args.models} models, {bad} with problems ({args.engine} layout)")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
