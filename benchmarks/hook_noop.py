"""Benchmark: the pre-push hook on a push that touches no model, against `git rev-parse HEAD`.

    python benchmarks/hook_noop.py [--repeat 7] [--refs 1]
    python benchmarks/hook_noop.py --smoke     # one repeat: runs every step, asserts nothing

A temporary repository holds a model and a bare remote; one commit changes only a README. The hook is
run the way the installed script runs it (`python -m modeldiff hook run origin URL`, git's lines on
stdin, `--refs` of them), best of `--repeat` runs, next to the cheapest git command there is, timed in
the same run so the ratio does not depend on the machine. Goal (issue tracker): under 0.3 s in total,
because the remote connection stays open while the hook runs.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

GOAL_SECONDS = 0.3
MODEL = """model: bikeshare
format: 1
tables:
  trips: {kind: fact, key: trip_id, columns: {trip_id: integer, fare: decimal}}
measures:
  fare_revenue: {table: trips, expr: sum(fare)}
"""


def clean_env(home: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update(GIT_CONFIG_NOSYSTEM="1", GIT_CONFIG_GLOBAL=str(home / "no-global-gitconfig"), HOME=str(home))
    return env


def git(cwd: Path, env: dict[str, str], *args: str) -> str:
    return subprocess.run(["git", *args], cwd=cwd, env=env, check=True, capture_output=True, text=True).stdout.strip()


def make_repo(folder: Path, env: dict[str, str]) -> tuple[Path, str]:
    """A work repository with main pushed to a bare remote and one README-only commit on top; its stdin line."""
    git(folder, env, "init", "-q", "--bare", "remote.git")
    work = folder / "work"
    work.mkdir()
    git(work, env, "init", "-q", "-b", "main")
    git(work, env, "config", "user.name", "Bench Rider")
    git(work, env, "config", "user.email", "bench@example.invalid")
    (work / "models").mkdir()
    (work / "models" / "bikeshare.model.yaml").write_text(MODEL)
    (work / "README.md").write_text("bike share\n")
    git(work, env, "add", "-A")
    git(work, env, "commit", "-q", "-m", "first")
    git(work, env, "remote", "add", "origin", "../remote.git")
    git(work, env, "push", "-q", "origin", "main")
    base = git(work, env, "rev-parse", "HEAD")
    (work / "README.md").write_text("bike share, documented\n")
    git(work, env, "commit", "-q", "-am", "words")
    head = git(work, env, "rev-parse", "HEAD")
    return work, f"refs/heads/main {head} refs/heads/main {base}\n"


def best(command: list[str], cwd: Path, env: dict[str, str], stdin: str, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        done = subprocess.run(command, cwd=cwd, env=env, input=stdin, capture_output=True, text=True)
        times.append(time.perf_counter() - start)
        if done.returncode != 0:
            raise SystemExit(f"{' '.join(command)} failed ({done.returncode}): {done.stderr.strip()}")
    return min(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--refs", type=int, default=1, help="how many ref lines git writes (the same range)")
    parser.add_argument("--smoke", action="store_true", help="one repeat; runs every step")
    args = parser.parse_args(argv)
    repeat = 1 if args.smoke else max(1, args.repeat)
    with tempfile.TemporaryDirectory(prefix="modeldiff-hook-bench-") as tmp:
        folder = Path(tmp)
        env = clean_env(folder)
        work, line = make_repo(folder, env)
        stdin = line * max(1, args.refs)
        floor = best(["git", "rev-parse", "HEAD"], work, env, "", repeat)
        python = best([sys.executable, "-c", "pass"], work, env, "", repeat)
        hook = best([sys.executable, "-m", "modeldiff", "hook", "run", "origin", "../remote.git"],
                    work, env, stdin, repeat)
    print(f"no-model push, {args.refs} ref line(s), best of {repeat}:")
    print(f"  git rev-parse HEAD          {floor * 1000:8.1f} ms")
    print(f"  python -c pass              {python * 1000:8.1f} ms")
    print(f"  modeldiff hook run          {hook * 1000:8.1f} ms   ({hook / floor:.1f}x git rev-parse HEAD)")
    verdict = "met" if hook < GOAL_SECONDS else "MISSED"
    print(f"  goal: under {GOAL_SECONDS:.1f} s in total: {verdict}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
