"""Benchmarks: each command timed as a ratio to a floor measured in the same run, with each stage's share.

    python benchmarks/run.py [--tables 2000 --links 3000 --measures 22000 --roles 100] [--repeat 5]
    python benchmarks/run.py --smoke      # tiny sizes, one repeat: runs every step, asserts nothing

The floor is `json.loads` of the same data: the YAML-loaded values of each
revision written out with `json.dumps`, then read back. It is the least any
Python program pays to build the values of the file, so a ratio to it does
not depend on the machine. Goals (issue tracker), on the default model:

    diff, one link flipped            <= 10x  json.loads of both revisions
    check                             <= 40x  json.loads of both revisions (one revision also shown)
    repeated diff, warm cache         <= 3x   json.loads of both revisions

Times are CPU seconds (user + system), the least of `--repeat` rounds, for the
command and for the floor alike; each round times the floor and every command
in turn, so that a machine that slows down or speeds up during the run moves
both alike. Each command is timed as a person runs it: `python -m modeldiff diff OLD NEW`
(or `check OLD`) in a fresh process, from the files on disk to the text on
standard output; the cold diff with MODELDIFF_NO_CACHE=1,
the warm one after a first run filled a cache folder of its own. The stage
table comes from a separate run inside this process, with timers around the
functions named in `install_clock` (time inside a stage excludes the stages it
calls) and the SQL module's memos emptied first, so that no stage looks
cheaper for having run before.
"""

from __future__ import annotations

import argparse
import gc
import io
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from synth import synthetic_model_text  # noqa: E402

GOALS = {"diff": 10.0, "check": 40.0, "warm": 3.0}
STAGES = ("read", "load", "check rules", "graph", "impact", "render", "cache")


def best(fn, repeat: int) -> float:
    """The least CPU time (user + system) of `repeat` runs of `fn`, in this process and its children.

    CPU time, not wall time: on a shared machine other work stretches the wall
    clock of both the command and the floor, by different amounts.
    """
    times = []
    for _ in range(repeat):
        start = _cpu()
        fn()
        times.append(_cpu() - start)
    return min(times)


def _cpu() -> float:
    import resource

    own, children = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


# --------------------------------------------------------------------------- stage timers


class StageClock:
    """Exclusive time per stage: a timed function's time minus that of the timed functions it calls."""

    def __init__(self) -> None:
        self.spent = {stage: 0.0 for stage in STAGES}
        self._stack: list[list[float]] = []  # [start, time of timed callees]
        self._undo: list[tuple[object, str, object]] = []

    def wrap(self, owner, name: str, stage: str) -> None:
        original = getattr(owner, name)
        clock = self

        def timed(*args, **kwargs):
            clock._stack.append([time.perf_counter(), 0.0])
            try:
                return original(*args, **kwargs)
            finally:
                start, inner = clock._stack.pop()
                total = time.perf_counter() - start
                clock.spent[stage] += total - inner
                if clock._stack:
                    clock._stack[-1][1] += total

        setattr(owner, name, timed)
        self._undo.append((owner, name, original))

    def restore(self) -> None:
        for owner, name, original in reversed(self._undo):
            setattr(owner, name, original)
        self._undo.clear()


def install_clock() -> StageClock:
    from modeldiff import cache, check, compare, diff, graph, impact, load
    from modeldiff.render import check_out, diff_out

    clock = StageClock()
    clock.wrap(load, "_read_file", "read")
    clock.wrap(load, "load_files", "load")
    clock.wrap(load, "splice_files", "load")
    clock.wrap(check, "check_model", "check rules")
    clock.wrap(check, "check_pair", "check rules")
    clock.wrap(check, "check_new_side", "check rules")
    for name in ("flow_graph", "security_graph", "path_delta", "role_restricted", "security_stops"):
        clock.wrap(graph, name, "graph")
    for name in ("ambiguous_pairs", "ambiguous_count"):
        clock.wrap(graph.FilterGraph, name, "graph")
    clock.wrap(impact, "changed_pairs", "graph")
    clock.wrap(impact, "analyse", "impact")
    clock.wrap(diff, "diff_models", "impact")
    clock.wrap(compare, "compare_specs", "impact")
    for name in ("as_text",):
        clock.wrap(diff_out, name, "render")
        clock.wrap(check_out, name, "render")
    clock.wrap(compare, "_spec_files", "read")
    for name in ("load_revision", "store_revision", "load_pair", "store_pair", "revision_key", "fingerprint"):
        clock.wrap(cache, name, "cache")
    return clock


def forget_memos() -> None:
    """Empty the process-wide memos, so an in-process run pays what a fresh `modeldiff` process pays."""
    from modeldiff import diff, sql

    for module in (sql, diff):
        for value in vars(module).values():
            if callable(getattr(value, "cache_clear", None)):
                value.cache_clear()


def shares(fn, repeat: int) -> dict[str, float]:
    """Fraction of the time spent in each stage, over `repeat` timed runs."""
    clock = install_clock()
    try:
        for _ in range(repeat):
            forget_memos()
            fn()
    finally:
        clock.restore()
    total = sum(clock.spent.values()) or 1.0
    return {stage: seconds / total for stage, seconds in clock.spent.items()}


# --------------------------------------------------------------------------- the commands


def run_diff(old_path: str, new_path: str, use_cache: bool) -> str:
    from modeldiff import compare
    from modeldiff.render import diff_out

    result = compare.compare_specs(old_path, new_path, use_cache=use_cache)
    out = io.StringIO()
    diff_out.as_text([result], out)
    return out.getvalue()


def run_check(path: str) -> str:
    from modeldiff import check, compare
    from modeldiff.render import check_out

    label, loaded = compare.read_model(path)
    findings = check.check_model(loaded.model, loaded.findings)
    out = io.StringIO()
    check_out.as_text(loaded.model.name, label, findings, out)
    return out.getvalue()


def command(args: list[str], env: dict[str, str]) -> None:
    """One `python -m modeldiff ...` in a fresh process."""
    subprocess.run([sys.executable, "-m", "modeldiff", *args], env=env, cwd=str(ROOT),
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)


def json_floor(texts: list[str]):
    """A function doing json.loads of each text's YAML values: the least a Python reader of the same data pays."""
    import yaml

    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    dumped = [json.dumps(yaml.load(text, Loader=loader)) for text in texts]
    return lambda: [json.loads(d) for d in dumped]


def interleaved(measures: dict[str, object], rounds: int, floors: tuple[str, ...] = ()) -> dict[str, float]:
    """The least CPU time of each measure over `rounds` rounds; each round runs every measure in turn.

    A shared machine speeds up and slows down during a run; taking the floor
    and the commands in turn lets both see the same spells. A floor (a few
    hundredths of a second) is timed three times a round, each time on a tidy
    heap: leftovers of earlier steps would make the collector's share vary.
    """
    least = {key: float("inf") for key in measures}
    for _ in range(rounds):
        for key, fn in measures.items():
            for _ in range(3 if key in floors else 1):
                if key in floors:
                    gc.collect()
                start = _cpu()
                fn()
                least[key] = min(least[key], _cpu() - start)
    return least


def pyyaml_parse(texts: list[str], repeat: int) -> float:
    """PyYAML's C loader parsing each text: the baseline of the foundation's and the diff's first targets."""
    import yaml

    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    return best(lambda: [yaml.load(text, Loader=loader) for text in texts], repeat)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--tables", type=int, default=2000)
    p.add_argument("--links", type=int, default=3000)
    p.add_argument("--measures", type=int, default=22000)
    p.add_argument("--roles", type=int, default=100)
    p.add_argument("--repeat", type=int, default=5)
    p.add_argument("--smoke", action="store_true", help="tiny sizes, one repeat")
    args = p.parse_args(argv)
    if args.smoke:
        args.tables, args.links, args.measures, args.roles, args.repeat = 60, 90, 300, 5, 1

    old_text = synthetic_model_text(args.tables, args.links, args.measures, args.roles)
    new_text = synthetic_model_text(args.tables, args.links, args.measures, args.roles, flip="l0")
    print(f"synthetic model: {args.tables} tables, {args.links} links, {args.measures} measures, {args.roles} roles, "
          f"{len(old_text.encode()) / 1e6:.2f} MB")

    with tempfile.TemporaryDirectory(prefix="modeldiff-bench-") as work:
        old_path = os.path.join(work, "old", "synthetic.model.yaml")
        new_path = os.path.join(work, "new", "synthetic.model.yaml")
        for path, text in ((old_path, old_text), (new_path, new_text)):
            os.makedirs(os.path.dirname(path))
            with open(path, "w", encoding="utf-8") as handle:
                handle.write(text)
        os.environ["MODELDIFF_CACHE_DIR"] = os.path.join(work, "cache")
        os.environ.pop("MODELDIFF_NO_CACHE", None)

        yaml_one = pyyaml_parse([old_text], min(args.repeat, 3))
        yaml_both = pyyaml_parse([old_text, new_text], min(args.repeat, 3))

        cold = lambda: run_diff(old_path, new_path, use_cache=False)  # noqa: E731
        checked = lambda: run_check(old_path)  # noqa: E731
        warm = lambda: run_diff(old_path, new_path, use_cache=True)  # noqa: E731
        if run_diff(old_path, new_path, use_cache=True) != cold():  # fills the cache, and proves it changes nothing
            print("error: the diff read from the cache differs from the diff computed afresh", file=sys.stderr)
            return 1
        # as installed: compiled modules kept (in a folder of this run, not beside the sources)
        base_env = {k: v for k, v in os.environ.items()
                    if k not in ("MODELDIFF_NO_CACHE", "COLUMNS", "PYTHONDONTWRITEBYTECODE")}
        base_env["PYTHONPYCACHEPREFIX"] = os.path.join(work, "pycache")
        cold_env = {**base_env, "MODELDIFF_NO_CACHE": "1", "COLUMNS": "100"}
        warm_env = {**base_env, "COLUMNS": "100"}
        command(["diff", old_path, new_path], warm_env)  # the cache folder holds this comparison from now on
        command(["check", old_path], cold_env)  # every module compiled once
        timed = interleaved({
            "one": json_floor([old_text]),
            "both": json_floor([old_text, new_text]),
            "diff": lambda: command(["diff", old_path, new_path], cold_env),
            "check": lambda: command(["check", old_path], cold_env),
            "warm": lambda: command(["diff", old_path, new_path], warm_env),
        }, max(args.repeat, 1), floors=("one", "both"))
        one, both = timed["one"], timed["both"]
        rows = [
            ("diff, one link flipped", "diff", timed["diff"], shares(cold, 1)),
            ("check", "check", timed["check"], shares(checked, 1)),
            ("repeated diff, warm cache", "warm", timed["warm"], shares(warm, 1)),
        ]

    print(f"floor: json.loads of one revision {one:.4f} s, of both {both:.4f} s (CPU seconds, as below)")
    print()
    print(f"{'command':28} {'seconds':>8} {'x both':>7} {'x one':>6}  goal       " + " ".join(f"{s:>11}" for s in STAGES))
    for name, key, seconds, split in rows:
        goal = f"<= {GOALS[key]:g}x both"
        cells = " ".join(f"{split[s] * 100:10.0f}%" for s in STAGES)
        print(f"{name:28} {seconds:8.3f} {seconds / both:7.1f} {seconds / one:6.1f}  {goal:10} {cells}")
    print()
    for name, key, seconds, _ in rows:
        verdict = "meets" if seconds / both <= GOALS[key] else "misses"
        print(f"ratio {name}: {seconds / both:.1f}x json.loads of both revisions ({verdict} the goal of {GOALS[key]:g}x)")
    # the first targets, against PyYAML's C loader parsing the same file(s) in this run
    print(f"ratio check: {timed['check'] / yaml_one:.2f}x PyYAML's C loader parsing the file "
          f"({yaml_one:.3f} s; goal <= 2x)")
    print(f"ratio diff, one link flipped: {timed['diff'] / yaml_both:.2f}x PyYAML's C loader parsing both revisions "
          f"({yaml_both:.3f} s; goal <= 2x)")
    start = best(lambda: subprocess.run([sys.executable, "-c", "pass"], check=True), 3)
    print(f"(each command's time includes starting Python: {start:.3f} s)")
    version = best(lambda: subprocess.run([sys.executable, "-m", "modeldiff", "--version"], check=True,
                                          stdout=subprocess.DEVNULL, cwd=str(ROOT)), 3)
    print(f"start-up: modeldiff --version {version:.3f} s (python -c pass {start:.3f} s; goal < 0.15 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
