"""The `modeldiff` program (`cli.run`) ends the process without tearing it down (os._exit).

So it must flush everything first: the output of the real process equals what
`main` writes in-process, to the last byte, with the same exit code, whether
the output goes to a pipe or a file; and a reader that goes away early leaves
no traceback.
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from modeldiff.cli import main

ROOT = Path(__file__).resolve().parent.parent
OLD = ROOT / "examples" / "bikeshare.model.yaml"
NEW = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"


def program(*argv: str, **kwargs) -> subprocess.CompletedProcess:
    env = {**os.environ, "MODELDIFF_NO_CACHE": "1", "COLUMNS": "100"}
    for name in ("FORCE_COLOR", "PYTHONUNBUFFERED"):  # buffered, as for most users: the flush matters
        env.pop(name, None)
    return subprocess.run([sys.executable, "-m", "modeldiff", *argv], env=env, cwd=ROOT, **kwargs)


def in_process(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    return main(list(argv), stdout=out, stderr=err), out.getvalue(), err.getvalue()


@pytest.mark.parametrize("argv", [
    ("diff", str(OLD), str(NEW), "--format", "json"),
    ("diff", str(OLD), str(NEW), "--format", "markdown"),
    ("check", str(NEW), "--format", "json"),
    ("diff", str(OLD), str(OLD)),
], ids=["diff-json", "diff-markdown", "check-json", "diff-same"])
def test_program_writes_all_that_main_writes_with_the_same_exit_code(monkeypatch, argv):
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")
    monkeypatch.setenv("COLUMNS", "100")
    code, out, err = in_process(*argv)
    done = program(*argv, capture_output=True, text=True)
    assert (done.returncode, done.stdout, done.stderr) == (code, out, err)
    assert out  # something to lose if the flush were missing


def test_breaking_exit_code_survives_the_fast_exit():
    # The examples' flip makes a path ambiguous: breaking, exit 3 (changes.md, "Exit codes").
    done = program("diff", str(OLD), str(NEW), "--format", "json", capture_output=True, text=True)
    assert done.returncode == 3
    assert json.loads(done.stdout)["summary"]["exit_code"] == 3


def test_identical_revisions_exit_0_through_the_program():
    # The twin of the test above: no change, exit 0.
    assert program("diff", str(OLD), str(OLD), capture_output=True).returncode == 0


def test_output_to_a_file_is_complete(tmp_path):
    target = tmp_path / "out.json"
    with target.open("w") as handle:
        done = program("diff", str(OLD), str(NEW), "--format", "json", stdout=handle, stderr=subprocess.PIPE, text=True)
    assert done.stderr == ""
    assert json.loads(target.read_text())["format"] == 1


def test_a_reader_that_stops_early_gets_no_traceback():
    # `modeldiff diff ... | head -1`: the pipe closes while output is still being written or flushed.
    proc = subprocess.Popen([sys.executable, "-m", "modeldiff", "diff", str(OLD), str(NEW), "--format", "markdown"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            env={k: v for k, v in os.environ.items() if k != "PYTHONUNBUFFERED"})
    proc.stdout.read(10)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    proc.wait(timeout=60)
    assert "Traceback" not in err


def _many_changes(folder: Path) -> tuple[Path, Path]:
    """Two revisions whose diff is far longer than a pipe holds (64 KiB), so the writer meets a closed pipe."""
    head = "model: wide\nformat: 1\ntables:\n  trips: {kind: fact, key: trip_id, columns: {trip_id: integer, fare: decimal}}\n"
    old = head + "measures:\n" + "".join(f"  m{i}: {{table: trips, expr: sum(fare)}}\n" for i in range(3000))
    new = head + "measures:\n" + "".join(f"  m{i}: {{table: trips, expr: max(fare)}}\n" for i in range(3000))
    paths = folder / "old.model.yaml", folder / "new.model.yaml"
    for path, text in zip(paths, (old, new)):
        path.write_text(text)
    return paths


@pytest.mark.parametrize("pipefail", [False, True])
@pytest.mark.parametrize("fmt", ["text", "json"])
def test_a_closed_pipe_keeps_the_verdict_as_exit_code(tmp_path, pipefail, fmt):
    # `modeldiff diff OLD NEW | head -1`, through a real shell: the program's own status is the verdict (1:
    # numbers move), never 0 because the reader went away; and under pipefail the pipeline's status is too.
    old, new = _many_changes(tmp_path)
    expected = main(["diff", str(old), str(new), "--no-cache"], stdout=io.StringIO(), stderr=io.StringIO())
    assert expected == 1
    script = (("set -o pipefail; " if pipefail else "")
              + f'"{sys.executable}" -m modeldiff diff "{old}" "{new}" --format {fmt} | head -1 >/dev/null; '
              + 'echo "$? ${PIPESTATUS[0]}"')
    done = subprocess.run(["bash", "-c", script], capture_output=True, text=True, timeout=120,
                          env={**os.environ, "MODELDIFF_NO_CACHE": "1"})
    pipeline, program_status = done.stdout.split()
    assert program_status == "1", done.stderr
    assert pipeline == ("1" if pipefail else "0")  # without pipefail the pipeline's status is head's
    assert "Traceback" not in done.stderr


def test_an_open_pipe_gets_the_whole_output_and_the_verdict(tmp_path):
    old, new = _many_changes(tmp_path)
    done = subprocess.run(["bash", "-c", f'"{sys.executable}" -m modeldiff diff "{old}" "{new}" | wc -l; '
                                         'echo "${PIPESTATUS[0]}"'],
                          capture_output=True, text=True, timeout=120, env={**os.environ, "MODELDIFF_NO_CACHE": "1"})
    lines, status = done.stdout.split()
    assert status == "1" and int(lines) > 3000
