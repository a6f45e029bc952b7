"""benchmarks/tpch_engine.py --smoke runs the TPC-H benchmark on the committed scale factor 0.01 data.

No timing is asserted: the test checks that the run ends well and that the
engine's answer equals the hand-written SQL's, which the script itself
compares row for row (it exits 1 and prints "answers differ" otherwise).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SCRIPT = ROOT / "benchmarks" / "tpch_engine.py"


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, str(SCRIPT), *args], capture_output=True, text=True, timeout=300, cwd=ROOT)


def test_smoke_run_finds_the_engine_and_hand_written_sql_agree():
    done = run("--smoke", "--memory")
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    assert any(line.startswith("answers equal: 5 rows (customer.c_mktsegment;") for line in lines), done.stdout
    assert not any(line.startswith("answers differ") for line in lines)
    assert any(line.startswith("ratio engine / hand-written SQL at scale factor 0.01:") for line in lines)
    assert any(line.startswith("memory: peak RSS") for line in lines)


def test_smoke_run_reports_different_answers_when_they_differ():
    # The twin: the comparison can fail. Compare the engine with SQL that drops one segment.
    code = (
        "import sys; sys.path.insert(0, {bench!r}); import tpch_engine as t; "
        "t.HAND_SQL = t.HAND_SQL.replace('GROUP BY', \"WHERE c.c_mktsegment <> 'BUILDING' GROUP BY\"); "
        "sys.exit(t.main(['--smoke']))"
    ).format(bench=str(SCRIPT.parent))
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 1, done.stdout + done.stderr
    assert "answers differ" in done.stdout
    assert "answers equal" not in done.stdout
