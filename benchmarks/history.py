"""History benchmark: `modeldiff notes A..B --per-commit` over a git history of the synthetic model.

    python benchmarks/history.py [--commits 50,300] [--tables 2000 ...]
    python benchmarks/history.py --smoke      # tiny sizes: runs every step, asserts nothing

A temporary repository holds the synthetic model (benchmarks/synth.py) and
then, for the largest count asked, that many commits of ordinary changes made
in turn: a link made two-way (or back), a measure's `where` condition edited,
a measure's description touched, and now and then a commit that changes no
model (a README). Each count N is measured on `HEAD~N..HEAD`:

- per-commit notes with a cold cache (an empty cache folder of its own);
- the same command again with the cache it filled (warm);
- the squashed notes (`--squash`), warm, for comparison.

Each run is a child process (`python benchmarks/history.py --child ...`)
that runs `modeldiff.cli.main` and reports its wall and CPU seconds and its
peak resident memory (VmHWM of /proc/self/status; `ru_maxrss` elsewhere, which
Linux carries over from a parent), so no run inherits another's memory. A
run past `--limit` seconds (default 900; the 300-commit cold run took about
370 s on a loaded machine) is stopped and reported as over the limit, so
`make bench`, which runs 50 and 300 commits, always ends. Goals (issue tracker, not tests): 50 commits
per-commit in under 5 s warm, and a peak under 300 MB whatever the number of
commits. The figures are one run each: on a shared machine read them as an
order of magnitude, and compare the cold and warm rows and the 50 and 300
columns of the same run rather than against the goal alone.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from synth import EDITS, synthetic_model_text  # noqa: E402

MODEL_PATH = "models/synthetic.model.yaml"
GOAL_SECONDS_50 = 5.0
GOAL_PEAK_MB = 300.0


# --- the history ------------------------------------------------------------------------------


def build_history(folder: str, commits: int, sizes: tuple[int, int, int, int], seed: int = 5) -> None:
    """A git repository at `folder`: the synthetic model, then `commits` commits of ordinary changes."""
    rng = random.Random(seed)
    text = synthetic_model_text(*sizes)
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update(GIT_AUTHOR_NAME="bench", GIT_AUTHOR_EMAIL="bench@example.invalid", GIT_COMMITTER_NAME="bench",
               GIT_COMMITTER_EMAIL="bench@example.invalid")
    subprocess.run(["git", "init", "-q", "-b", "main", folder], check=True, env=env)
    stamp = 1_700_000_000
    importer = subprocess.Popen(["git", "fast-import", "--quiet"], stdin=subprocess.PIPE, cwd=folder, env=env)
    stream = importer.stdin  # written as made: the history is never held whole in memory

    def commit(number: int, message: str, path: str, content: str) -> None:
        data = content.encode()
        body = message.encode()
        stream.write(b"commit refs/heads/main\n")
        stream.write(f"mark :{number}\ncommitter bench <bench@example.invalid> {stamp + number} +0000\n".encode())
        stream.write(f"data {len(body)}\n".encode() + body + b"\n")
        if number > 1:
            stream.write(f"from :{number - 1}\n".encode())
        stream.write(f"M 100644 inline {path}\ndata {len(data)}\n".encode() + data + b"\n")

    commit(1, "the synthetic model", MODEL_PATH, text)
    for number in range(2, commits + 2):
        if number % 10 == 0:
            commit(number, f"docs: note {number}", "README.md", f"note {number}\n")
            continue
        text, subject = EDITS[number % len(EDITS)](text, rng)
        commit(number, subject, MODEL_PATH, text)
    stream.close()
    if importer.wait() != 0:
        raise SystemExit("git fast-import failed")
    subprocess.run(["git", "checkout", "-q", "main"], cwd=folder, check=True, env=env)


# --- one measured run, in a child process -----------------------------------------------------------


def _high_water_kb() -> int | None:
    """This process's peak resident memory (VmHWM of /proc/self/status), or None off Linux.

    Preferred to `ru_maxrss`, which Linux carries over from the parent through
    fork and exec: a child of a large parent would report the parent's peak.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


def child(argv: list[str]) -> int:
    """Run `modeldiff` with `argv` here; print {"wall", "cpu", "peak_mb", "chars", "code"} as JSON."""
    import io
    import resource

    from modeldiff.cli import main

    out, err = io.StringIO(), io.StringIO()
    wall, cpu = time.perf_counter(), time.process_time()
    code = main(argv, out, err)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak_kb = _high_water_kb() or resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # kilobytes on Linux
    json.dump({"wall": wall, "cpu": cpu, "peak_mb": peak_kb / 1024, "chars": len(out.getvalue()), "code": code,
               "error": err.getvalue()[-500:]}, sys.stdout)
    return 0


def measure(argv: list[str], cache: str, cwd: str, limit: float) -> dict:
    """One run of `modeldiff argv` in a child process; its figures, or {"over": limit} when it ran past `limit` s."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_") and k != "MODELDIFF_NO_CACHE"}
    env["MODELDIFF_CACHE_DIR"] = cache
    try:
        done = subprocess.run([sys.executable, __file__, "--child", "--", *argv], capture_output=True, text=True,
                              cwd=cwd, env=env, check=True, timeout=limit)
    except subprocess.TimeoutExpired:
        return {"over": limit}
    figures = json.loads(done.stdout)
    if figures["code"] != 0:
        raise SystemExit(f"modeldiff {' '.join(argv)} exited {figures['code']}: {figures['error']}")
    return figures


def _seconds(run: dict, width: int) -> str:
    return f"{run['wall']:{width}.2f}s" if "over" not in run else f"{'>' + format(run['over'], 'g') + 's':>{width + 1}}"


def _mb(run: dict, width: int) -> str:
    return f"{run['peak_mb']:{width}.0f}MB" if "over" not in run else f"{'-':>{width + 2}}"


def _said(name: str, run: dict) -> str:
    if "over" in run:
        return f"{name} over the limit of {run['over']:g} s (stopped)"
    return f"{name} {run['wall']:.2f} s (cpu {run['cpu']:.2f} s, peak {run['peak_mb']:.0f} MB)"


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--commits", default="50,300", help="comma-separated counts of commits (default 50,300)")
    p.add_argument("--tables", type=int, default=2000)
    p.add_argument("--links", type=int, default=3000)
    p.add_argument("--measures", type=int, default=22000)
    p.add_argument("--roles", type=int, default=100)
    p.add_argument("--limit", type=float, default=900.0,
                   help="seconds a single run may take before it is stopped and reported as over (default 900)")
    p.add_argument("--smoke", action="store_true", help="tiny sizes: 60 tables, 6 and 12 commits")
    p.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("rest", nargs="*", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.child:
        return child(args.rest)
    if args.smoke:
        args.tables, args.links, args.measures, args.roles, args.commits = 60, 90, 300, 5, "6,12"
    counts = sorted({int(n) for n in args.commits.split(",")})
    sizes = (args.tables, args.links, args.measures, args.roles)
    print(f"history: synthetic model of {args.tables} tables, {args.measures} measures; "
          f"{max(counts)} commits of ordinary changes (one in ten changes no model); each run stopped past "
          f"{args.limit:g} s")
    rows = []
    with tempfile.TemporaryDirectory(prefix="modeldiff-history-") as work:
        repo = os.path.join(work, "repo")
        build_history(repo, max(counts), sizes)
        for count in counts:
            cache = os.path.join(work, f"cache-{count}")
            span = f"HEAD~{count}..HEAD"
            cold = measure(["notes", span, "--per-commit"], cache, repo, args.limit)
            warm = measure(["notes", span, "--per-commit"], cache, repo, args.limit)
            squash = measure(["notes", span, "--squash"], cache, repo, args.limit)
            rows.append((count, cold, warm, squash))
    print()
    print(f"{'commits':>7} {'per-commit cold':>16} {'warm':>8} {'squashed':>9}   {'peak cold':>9} {'warm':>8} "
          f"{'squashed':>9}   {'notes':>9}")
    for count, cold, warm, squash in rows:
        chars = next((run["chars"] for run in (warm, cold) if "over" not in run), None)
        print(f"{count:7d} {_seconds(cold, 15)} {_seconds(warm, 7)} {_seconds(squash, 8)}   "
              f"{_mb(cold, 7)} {_mb(warm, 6)} {_mb(squash, 7)}   "
              + (f"{chars / 1000:7.0f}kB" if chars is not None else f"{'-':>9}"))
    print()
    for count, cold, warm, squash in rows:
        peaks = [run["peak_mb"] for run in (cold, warm, squash) if "over" not in run]
        print(f"history {count} commits: per-commit notes {_said('cold', cold)}, {_said('warm', warm)}; "
              f"{_said('squashed', squash)}; peak memory of the runs "
              + (f"{max(peaks):.0f} MB" if peaks else "not measured")
              + f" (goal < {GOAL_PEAK_MB:g} MB"
              + (f"; warm goal < {GOAL_SECONDS_50:g} s at 50 commits)" if count == 50 else ")"))
    print("(wall seconds of one run each, in a child process; on a shared machine compare rows of the same run; "
          "notes: characters of the per-commit Markdown, within its default budget of 65,536)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
