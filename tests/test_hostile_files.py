"""Special files in place of a model (issue 16, point 6): a link to /dev/zero, a named pipe, a device.

A model is read from regular files only, within the size limit, by reading at most limit + 1 bytes:
anything else is one line on stderr and exit 2, at once (never a hang, a traceback or a memory blow-up).
Each case runs the real program with a timeout; the twin with a regular file reads fine.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from modeldiff import files

ROOT = Path(__file__).resolve().parent.parent
OLD = ROOT / "examples" / "bikeshare.model.yaml"


def program(*argv: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    env = {**os.environ, "MODELDIFF_NO_CACHE": "1", "COLUMNS": "100"}
    return subprocess.run([sys.executable, "-m", "modeldiff", *argv], capture_output=True, text=True, timeout=60,
                          env=env, cwd=cwd or ROOT)


def refused_in_one_line(done: subprocess.CompletedProcess, *words: str) -> None:
    assert done.returncode == 2, (done.returncode, done.stdout, done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in done.stderr, done.stderr
    for word in words:
        assert word in lines[0], lines[0]


def plant(path: Path, what: str) -> Path:
    if what == "zero":
        os.symlink("/dev/zero", path)
    elif what == "fifo":
        os.mkfifo(path)
    elif what == "null":
        os.symlink("/dev/null", path)
    return path


@pytest.mark.parametrize("what, kind", [("zero", "a character device"), ("fifo", "a named pipe"),
                                        ("null", "a character device")])
def test_check_refuses_a_model_that_is_not_a_regular_file(tmp_path, what, kind):
    model = plant(tmp_path / "rides.model.yaml", what)
    refused_in_one_line(program("check", str(model)), str(model), kind, "regular file")


@pytest.mark.parametrize("what", ["zero", "fifo"])
def test_diff_refuses_either_side_that_is_not_a_regular_file(tmp_path, what):
    model = plant(tmp_path / "rides.model.yaml", what)
    refused_in_one_line(program("diff", str(OLD), str(model)), str(model), "regular file")
    refused_in_one_line(program("diff", str(model), str(OLD)), str(model), "regular file")


@pytest.mark.parametrize("what", ["zero", "fifo"])
def test_a_model_folder_holding_a_special_file_is_refused(tmp_path, what):
    folder = tmp_path / "rides.model"
    folder.mkdir()
    (folder / "a.yaml").write_bytes(OLD.read_bytes())
    plant(folder / "b.yaml", what)
    refused_in_one_line(program("check", str(folder)), "b.yaml", "regular file")


def test_the_twin_regular_file_and_folder_are_read(tmp_path):
    model = tmp_path / "rides.model.yaml"
    model.write_bytes(OLD.read_bytes())
    folder = tmp_path / "rides.model"
    folder.mkdir()
    os.symlink(model, folder / "a.yaml")  # a link to a regular file is a regular file
    for target in (model, folder):
        done = program("check", str(target))
        assert done.returncode in (0, 3) and "Traceback" not in done.stderr, done.stderr
    assert program("diff", str(OLD), str(model)).returncode == 0


def test_a_special_file_in_the_working_tree_is_refused_by_diff_base(tmp_path):
    repo = tmp_path / "repo"
    repo.mkdir()
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update(GIT_CONFIG_NOSYSTEM="1", GIT_CONFIG_GLOBAL=str(tmp_path / "none"), HOME=str(tmp_path))

    def git(*args):
        subprocess.run(["git", *args], cwd=repo, env=env, check=True, capture_output=True)

    git("init", "-q", "-b", "main")
    (repo / "rides.model.yaml").write_bytes(OLD.read_bytes())
    git("add", ".")
    git("-c", "user.name=t", "-c", "user.email=t@example.invalid", "commit", "-qm", "one")
    (repo / "rides.model.yaml").unlink()
    os.mkfifo(repo / "rides.model.yaml")
    refused_in_one_line(program("diff", "--base", "HEAD", cwd=repo), "rides.model.yaml", "regular file")


def test_read_regular_reads_at_most_the_limit_plus_one(tmp_path):
    path = tmp_path / "f"
    path.write_bytes(b"x" * 10)
    assert files.read_regular(str(path), 10) == b"x" * 10
    with pytest.raises(files.TooBig):
        files.read_regular(str(path), 9)
    with pytest.raises(files.NotRegular) as caught:
        files.read_regular("/dev/zero", 10)
    assert caught.value.kind == "a character device"
    with pytest.raises(files.NotRegular):
        files.read_regular(str(tmp_path), 10)
    os.mkfifo(tmp_path / "pipe")
    with pytest.raises(files.NotRegular) as caught:
        files.read_regular(str(tmp_path / "pipe"), 10)  # opened without waiting for a writer
    assert caught.value.kind == "a named pipe (FIFO)"


TINY = """\
model: tiny
format: 1
tables:
  trips: {kind: fact, key: trip_id, source: trips.csv, columns: {trip_id: integer, fare: decimal}}
measures:
  fare_revenue: {table: trips, expr: sum(fare)}
reports:
  fares: {measures: [fare_revenue]}
"""


@pytest.mark.parametrize("what", ["zero", "fifo"])
@pytest.mark.parametrize("how", ["source", "--data DIR", "--data FILE"])
def test_eval_refuses_a_data_file_that_is_not_a_regular_file(tmp_path, what, how):
    # Data files are opened by DuckDB; data.py passes it regular files only (os.path.isfile), so a FIFO or
    # a link to /dev/zero in their place is one line and exit 2, at once.
    model = tmp_path / "tiny.model.yaml"
    model.write_text(TINY)
    data = tmp_path / ("trips.csv" if how != "--data FILE" else "all.duckdb")
    plant(data, what)
    argv = ["eval", str(model)] + ([] if how == "source" else ["--data", str(tmp_path if how == "--data DIR" else data)])
    done = program(*argv)
    assert done.returncode == 2 and "Traceback" not in done.stderr, done.stderr
    assert len(done.stderr.strip().splitlines()) == 1


def test_eval_reads_the_twin_regular_data_file(tmp_path):
    model = tmp_path / "tiny.model.yaml"
    model.write_text(TINY)
    (tmp_path / "trips.csv").write_text("trip_id,fare\n1,2.5\n2,4\n")
    done = program("eval", str(model), "--format", "json")
    assert done.returncode == 0 and "6.5" in done.stdout, done.stderr
