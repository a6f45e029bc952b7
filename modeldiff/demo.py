"""`make demo`: the bike-share example, end to end.

1. check the model;
2. build a throw-away git repository with two commits (the model, then the
   same model with one link flipped to two-way) and diff across them;
3. check the model against seeded bike-share data (the data-aware check);
4. verify the change on that data: how the flipped link moves the stock
   numbers by day, and the proposal to keep the link one-way with a report
   condition instead, side by side with the flip (modeldiff.proposal);
5. apply that proposal's patch and verify it against the first revision: the
   reports keep only the stations that have trips, and no stock number moves.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from contextlib import contextmanager
from pathlib import Path

from modeldiff.cli import main as modeldiff

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
MODEL = "bikeshare.model.yaml"


def _git(repo: Path, *args: str) -> None:
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update(GIT_AUTHOR_NAME="demo", GIT_AUTHOR_EMAIL="demo@example.org",
               GIT_COMMITTER_NAME="demo", GIT_COMMITTER_EMAIL="demo@example.org")
    subprocess.run(["git", *args], cwd=repo, env=env, check=True, stdout=subprocess.DEVNULL)


def _banner(text: str) -> None:
    print()
    print("=" * 78)
    print(text)
    print("=" * 78, flush=True)


def run() -> int:
    first, second = EXAMPLES / MODEL, EXAMPLES / "revision-2" / MODEL
    if not first.exists() or not second.exists():
        print(f"modeldiff demo: the example models are missing under {EXAMPLES}; run the demo from a clone of the project",
              file=sys.stderr)
        return 2
    _banner(f"1. modeldiff check examples/{MODEL}")
    modeldiff(["check", str(first)])

    work = Path(tempfile.mkdtemp(prefix="modeldiff-demo-"))
    try:
        _git(work, "init", "-q", "-b", "main")
        (work / "models").mkdir()
        shutil.copy(first, work / "models" / MODEL)
        _git(work, "add", ".")
        _git(work, "commit", "-q", "-m", "Bike-share model")
        shutil.copy(second, work / "models" / MODEL)
        _git(work, "commit", "-q", "-am", "Let trip filters reach stations (trips_start_station two-way)")
        _banner("2. modeldiff diff --base HEAD~1 --head HEAD   (in a temporary repository with two commits)")
        cwd = os.getcwd()
        os.chdir(work)
        try:
            code = modeldiff(["diff", "--base", "HEAD~1", "--head", "HEAD"])
        finally:
            os.chdir(cwd)
        print(f"(exit code {code}: 0 safe, 1 numbers may change, 3 breaking)")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    with _generated_data() as data:
        _data_check_step(first, data)
        _verify_step(first, second, data)
        _proposal_step(first, second, data)
    return 0


def _shown(path: Path) -> str:
    """A path relative to the current folder when it lies below it (shorter lines)."""
    relative = os.path.relpath(path)
    return path.as_posix() if relative.startswith("..") else relative


def _verify_step(first: Path, second: Path, data: Path) -> None:
    """Step 4: both revisions evaluated on generated data (modeldiff.demo_data), and the proposal beside the flip."""
    _banner("4. modeldiff verify OLD NEW --data DIR   (on generated bike-share data, 60 days)")
    print("trips_start_station is now two-way, so a day reaches stations through its trips: a station's stock "
          "counts on a day only if a trip started there (the rest falls in '(no match)'). The output ends with "
          "the safer alternative: keep the link one-way and keep only the groups with trips.", flush=True)
    code = modeldiff(["verify", _shown(first), _shown(second), "--data", str(data), "--limit", "3"])
    print(f"(exit code {code}: 0 nothing moved, 1 numbers moved, 3 a precondition fails or a role sees more rows)")


def _data_check_step(model: Path, data: Path) -> None:
    """Step 3: the data-aware check of the model on the generated data (modeldiff.datacheck)."""
    _banner("3. modeldiff check MODEL --data DIR   (the model against the data: tables, types, keys, links, history)")
    code = modeldiff(["check", _shown(model), "--data", str(data)])
    print(f"(exit code {code}: 0 the data fits the model, 3 it does not)")


def _proposal_step(first: Path, second: Path, data: Path) -> None:
    """Step 5: the proposal's patch applied to revision 2, verified against the first revision on the same data."""
    from modeldiff import compare, proposal

    (found,) = proposal.proposals(compare.compare_specs(_shown(first), _shown(second)))
    work = Path(tempfile.mkdtemp(prefix="modeldiff-demo-proposal-"))
    try:
        proposed = work / MODEL
        proposed.write_text(_patched(second.read_text(encoding="utf-8"), found.patch), encoding="utf-8")
        _banner("5. Instead of two-way: the proposal applied, verified against the first revision")
        print(f"{found.sentence}\nmodeldiff verify OLD PROPOSED --data DIR: only the groups without trips "
              "disappear; no stock number moves.", flush=True)
        code = modeldiff(["verify", _shown(first), str(proposed), "--data", str(data), "--limit", "3"])
        print(f"(exit code {code}: 1 because groups disappear, as intended; every group kept shows the numbers "
              "it had)")
    finally:
        shutil.rmtree(work, ignore_errors=True)


def _patched(text: str, patch: str) -> str:
    """`text` with a one-file unified diff applied (the proposal's patch: hunks in order, context checked)."""
    import re

    lines = text.splitlines(keepends=True)
    out: list[str] = []
    at = 0
    for hunk in re.split(r"^@@ ", patch, flags=re.M)[1:]:
        start = int(re.match(r"-(\d+)", hunk).group(1)) - 1
        out += lines[at:start]
        at = start
        for line in hunk.splitlines(keepends=True)[1:]:
            sign, body = line[:1], line[1:]
            if sign in (" ", "-"):
                if lines[at] != body:
                    raise RuntimeError(f"the proposal's patch does not fit line {at + 1}")
                at += 1
                if sign == " ":
                    out.append(body)
            elif sign == "+":
                out.append(body)
    return "".join(out + lines[at:])


@contextmanager
def _generated_data():
    """A temporary folder holding the seeded bike-share data (modeldiff.demo_data), removed afterwards."""
    from modeldiff.demo_data import write_demo_data

    data = Path(tempfile.mkdtemp(prefix="modeldiff-demo-data-"))
    try:
        write_demo_data(data)
        yield data
    finally:
        shutil.rmtree(data, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(run())
