"""benchmarks/run.py --smoke runs every step on a tiny model (no timing is asserted)."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_benchmark_smoke_run_prints_the_ratio_lines():
    done = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "run.py"), "--smoke"],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    ratios = [line for line in done.stdout.splitlines() if line.startswith("ratio ")]
    assert [line.split(":")[0] for line in ratios] == [
        "ratio diff, one link flipped", "ratio check", "ratio repeated diff, warm cache",
        "ratio check", "ratio diff, one link flipped"]
    assert all("json.loads of both revisions" in line for line in ratios[:3])
    assert all("PyYAML's C loader" in line for line in ratios[3:])


def test_history_smoke_run_prints_a_line_per_count_of_commits():
    done = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "history.py"), "--smoke"],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    lines = [line for line in done.stdout.splitlines() if line.startswith("history ")]
    assert [line.split(":")[0] for line in lines] == ["history 6 commits", "history 12 commits"]
    for line in lines:
        assert re.search(r"per-commit notes cold [0-9.]+ s \(cpu [0-9.]+ s, peak [0-9]+ MB\), warm [0-9.]+ s .* "
                         r"squashed [0-9.]+ s .*; peak memory of the runs [0-9]+ MB", line), line
    table = done.stdout.split("\n\n")[1].splitlines()
    assert table[0].split()[:2] == ["commits", "per-commit"] and [row.split()[0] for row in table[1:]] == ["6", "12"]


def test_history_runs_past_the_limit_are_stopped_and_said_so():  # `make bench` runs 300 commits: it must end
    done = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "history.py"), "--smoke", "--limit", "0.01"],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    lines = [line for line in done.stdout.splitlines() if line.startswith("history ")]
    assert len(lines) == 2
    for line in lines:
        assert line.count("over the limit of 0.01 s (stopped)") == 3 and "peak memory of the runs not measured" in line
