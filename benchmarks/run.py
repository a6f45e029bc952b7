"""Benchmarks: each step timed as a ratio to a baseline measured in the same run.

    python benchmarks/run.py [--tables 2000 --links 3000 --measures 20000 --roles 100] [--repeat 3]
    python benchmarks/run.py --smoke      # tiny sizes, for CI: runs every step, asserts nothing

Baselines: PyYAML's C loader parsing the same file(s); `python -c pass` for
start-up. Targets (issue tracker): check <= 2x the parse, diff <= 2x the parse
of both revisions, --version < 0.15 s.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from synth import synthetic_model_text  # noqa: E402


def best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def yaml_parse(text: str):
    import yaml

    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    return yaml.load(text, Loader=loader)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--tables", type=int, default=2000)
    p.add_argument("--links", type=int, default=3000)
    p.add_argument("--measures", type=int, default=20000)
    p.add_argument("--roles", type=int, default=100)
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--smoke", action="store_true", help="tiny sizes, one repeat")
    args = p.parse_args(argv)
    if args.smoke:
        args.tables, args.links, args.measures, args.roles, args.repeat = 60, 90, 300, 5, 1

    from modeldiff import check, impact, load

    old_text = synthetic_model_text(args.tables, args.links, args.measures, args.roles)
    new_text = synthetic_model_text(args.tables, args.links, args.measures, args.roles, flip="l0")
    desc_text = old_text.replace("description: Measure 1\n", "description: Measure one\n")
    print(f"synthetic model: {args.tables} tables, {args.links} links, {args.measures} measures, {args.roles} roles, "
          f"{len(old_text) / 1e6:.2f} MB")

    parse_one = best(lambda: yaml_parse(old_text), args.repeat)
    parse_two = best(lambda: (yaml_parse(old_text), yaml_parse(new_text)), args.repeat)

    def run_check():
        result = load.load_files([("old.model.yaml", old_text)])
        return check.check_model(result.model, result.findings)

    def run_diff(a, b):
        ra = load.load_files([("old.model.yaml", a)])
        rb = load.load_files([("new.model.yaml", b)])
        return impact.analyse(ra.model, rb.model, ra.findings, rb.findings)

    t_load = best(lambda: load.load_files([("old.model.yaml", old_text)]), args.repeat)
    t_check = best(run_check, args.repeat)
    t_diff = best(lambda: run_diff(old_text, new_text), args.repeat)
    t_desc = best(lambda: run_diff(old_text, desc_text), args.repeat)

    exe = [sys.executable, "-m", "modeldiff", "--version"]
    t_py = best(lambda: subprocess.run([sys.executable, "-c", "pass"], check=True), max(3, args.repeat))
    t_version = best(lambda: subprocess.run(exe, check=True, stdout=subprocess.DEVNULL), max(3, args.repeat))

    rows = [
        ("PyYAML C loader, one revision (baseline)", parse_one, 1.0, None),
        ("load (ours), one revision", t_load, t_load / parse_one, None),
        ("check", t_check, t_check / parse_one, 2.0),
        ("PyYAML C loader, two revisions (baseline)", parse_two, 1.0, None),
        ("diff, one link flipped", t_diff, t_diff / parse_two, 2.0),
        ("diff, one description changed", t_desc, t_desc / parse_two, 2.0),
        ("python -c pass (baseline)", t_py, 1.0, None),
        ("modeldiff --version", t_version, t_version / t_py, None),
    ]
    print(f"{'step':45} {'seconds':>9} {'ratio':>7}  target")
    for name, seconds, ratio, target in rows:
        goal = f"<= {target:g}x" if target else ""
        print(f"{name:45} {seconds:9.3f} {ratio:7.2f}  {goal}")
    print(f"--version absolute: {t_version:.3f} s (target < 0.15 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
