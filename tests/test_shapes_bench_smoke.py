"""benchmarks/engine_shapes.py --smoke: six report shapes, engine against hand-written SQL, at scale factor 0.01.

No timing is asserted: the script compares each shape's answers row for row
and exits 1 ("answers differ") when one differs; the test checks the output's
shape and that the comparison can fail.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BENCH = ROOT / "benchmarks"
SHAPES = ("chain", "two_routes", "bridge", "role_filtered", "standby_variant", "two_way_return")


def test_smoke_run_finds_every_shape_equal_to_hand_written_sql(tmp_path):
    done = subprocess.run([sys.executable, str(BENCH / "engine_shapes.py"), "--smoke", "--cache", str(tmp_path)],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 0, done.stdout + done.stderr
    lines = done.stdout.splitlines()
    shapes = [line.split(":")[0].removeprefix("shape ") for line in lines if line.startswith("shape ")]
    assert shapes == list(SHAPES)
    assert all("answers equal" in line and "ratio" in line for line in lines if line.startswith("shape "))
    assert not any(line.startswith("answers differ") for line in lines)
    # (no match) rows are exercised, not only plain groups
    assert "with (no match) row" in next(line for line in lines if line.startswith("shape two_routes:"))
    assert "with (no match) row" in next(line for line in lines if line.startswith("shape bridge:"))
    assert lines[-1].startswith("ratios at scale factor 0.01: chain ")


def test_smoke_run_reports_different_answers_when_they_differ(tmp_path):
    code = (
        "import sys; sys.path.insert(0, {bench!r}); import engine_shapes as e; "
        "e.HAND['bridge'] = e.HAND['bridge'].replace('NOT EXISTS', 'EXISTS'); "
        "sys.exit(e.main(['--smoke', '--shape', 'bridge', '--cache', {cache!r}]))"
    ).format(bench=str(BENCH), cache=str(tmp_path))
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 1, done.stdout + done.stderr
    assert "answers differ: bridge" in done.stdout
