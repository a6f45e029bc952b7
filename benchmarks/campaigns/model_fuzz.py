"""Hostile models through `check` and `diff`: no traceback, no hang, no exit code outside 0-3 (issue 16).

Generates and mutates model files (seeded, reproducible) and runs each through `modeldiff check MODEL`
and `modeldiff diff BASE MODEL` / `diff MODEL BASE` in this process (cli.main, as the tests do), with
a time limit per case; a few cases that need a real process (special files: a link to /dev/zero, a
named pipe, a folder named like a model) run the program itself with a timeout.

Kinds of case (each about equally often):

- random YAML documents: nested mappings, lists and scalars of every kind at any place;
- a valid model (examples/) with one or more nodes replaced by a hostile value: huge and odd numbers,
  deep nesting, long and strange text (NUL, bidirectional controls, unpaired surrogates, every
  Unicode line break), wrong types (a list where a mapping goes, a number where a name goes), SQL
  fragments;
- text mutations of a valid model: bytes flipped, cut, repeated, BOM, tabs, CR line ends, tags
  (`!!python/object`), anchors and alias bombs, duplicate keys, non-UTF-8 bytes, a Git LFS pointer.

A failure is any exception escaping `main`, a "Traceback" on stderr, an exit code outside 0-3, or a
case over the time limit; each failing model is kept in `--out` with a line saying what happened.

    .venv/bin/python benchmarks/campaigns/model_fuzz.py                 # 10,000 models, seed 16
    .venv/bin/python benchmarks/campaigns/model_fuzz.py --count 500     # a quick look

Exit status: 0 when every case held, 1 otherwise.
"""

from __future__ import annotations

import argparse
import io
import json
import os
import random
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from modeldiff import cli  # noqa: E402

BASES = [ROOT / "examples" / "bikeshare.model.yaml", ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"]
LINE_BREAKS = ["\n", "\r", "\r\n", "\x0b", "\x0c", "\x1c", "\x1d", "\x1e", "\x85", "\u2028", "\u2029"]
ODD_TEXT = ["", " ", "\x00", "\u202e", "\u200b", "\ufeff", "\udcff", "é", "ｆａｒｅ", "𝔣𝔞𝔯𝔢", "a" * 5000,
            "sum(fare) -- comment", "sum(fare) /* x", "'; DROP TABLE trips; --", "count(COLUMNS(*))",
            "read_text('/etc/passwd')", "${HOME}", "../../etc/passwd", "/dev/zero", "trips.fare", "null", "~",
            "yes", "0x1F", "1e400", ".nan", "-.inf", "2026-12-03", "{{", "[[", "&a", "*a", "!!python/object"]
CASE_SECONDS = 30
TIMEOUT_EXIT = 124


class TimedOut(Exception):
    pass


def _alarm(signum, frame):
    raise TimedOut()


# --------------------------------------------------------------------------- generated values


def odd_scalar(rng: random.Random):
    pick = rng.randrange(10)
    if pick == 0:
        return rng.choice([10**400, -(10**30), 2**63, -1, 0, 1, 3.5e308, 1e-320])
    if pick == 1:
        return rng.choice([float("nan"), float("inf"), -0.0, True, False, None])
    if pick == 2:
        return rng.choice(ODD_TEXT) + rng.choice(LINE_BREAKS) + rng.choice(ODD_TEXT)
    if pick == 3:
        return "".join(chr(rng.choice([rng.randrange(32, 127), rng.randrange(0x80, 0x3000),
                                       rng.randrange(0x10000, 0x10FFFF)])) for _ in range(rng.randrange(1, 40)))
    return rng.choice(ODD_TEXT)


def odd_value(rng: random.Random, depth: int = 0):
    pick = rng.randrange(6 if depth < 6 else 1)
    if pick <= 1:
        return odd_scalar(rng)
    if pick == 2:
        return [odd_value(rng, depth + 1) for _ in range(rng.randrange(5))]
    if pick == 3:
        return {str(odd_scalar(rng))[:30]: odd_value(rng, depth + 1) for _ in range(rng.randrange(5))}
    if pick == 4:  # deep
        value: object = odd_scalar(rng)
        for _ in range(rng.choice([10, 63, 64, 65, 200])):
            value = [value] if rng.random() < 0.5 else {"k": value}
        return value
    return {"kind": odd_scalar(rng), "key": odd_scalar(rng), "columns": odd_value(rng, depth + 1),
            "table": odd_scalar(rng), "expr": odd_scalar(rng), "where": odd_scalar(rng)}


def to_yaml(value) -> str:
    """YAML text of `value`, JSON-flavoured (JSON is YAML), with the odd values JSON cannot spell."""
    def scalar(v):
        if isinstance(v, float) and v != v:
            return ".nan"
        if v == float("inf"):
            return ".inf"
        if v == float("-inf"):
            return "-.inf"
        return json.dumps(v, ensure_ascii=False)

    def text(v, indent):
        pad = "  " * indent
        if isinstance(v, dict):
            if not v:
                return "{}"
            return "\n" + "\n".join(f"{pad}{json.dumps(k, ensure_ascii=False)}: {text(x, indent + 1)}" for k, x in v.items())
        if isinstance(v, list):
            if not v or indent > 40:
                return json.dumps(v, ensure_ascii=False, default=str) if indent > 40 else "[]"
            return "\n" + "\n".join(f"{pad}- {text(x, indent + 1).lstrip()}" if not isinstance(x, (dict, list))
                                    else f"{pad}-{text(x, indent + 1)}" for x in v)
        return scalar(v)

    return text(value, 0).lstrip("\n") + "\n"


def random_document(rng: random.Random) -> bytes:
    top = {"model": odd_scalar(rng) if rng.random() < 0.3 else "fuzz", "format": rng.choice([1, 1, 2, "1", None])}
    for section in ("tables", "links", "measures", "roles", "reports", "variants"):
        if rng.random() < 0.6:
            top[section] = odd_value(rng)
    if rng.random() < 0.1:
        top = odd_value(rng)
    return to_yaml(top).encode("utf-8", "surrogatepass")


def replaced_nodes(rng: random.Random, base_text: str) -> bytes:
    import yaml

    data = yaml.safe_load(base_text)
    for _ in range(rng.randrange(1, 4)):
        node, key = data, None
        path = []
        while isinstance(node, (dict, list)) and node and rng.random() < 0.8:
            key = rng.choice(list(node)) if isinstance(node, dict) else rng.randrange(len(node))
            path.append((node, key))
            node = node[key]
        if not path:
            data = odd_value(rng)
            break
        parent, key = path[-1]
        choice = rng.randrange(4)
        if choice == 0 and isinstance(parent, dict):
            del parent[key]
        elif choice == 1 and isinstance(parent, dict):
            parent[str(odd_scalar(rng))[:40]] = odd_value(rng)
        else:
            parent[key] = odd_value(rng)
    return to_yaml(data).encode("utf-8", "surrogatepass")


def text_mutation(rng: random.Random, base: bytes) -> bytes:
    data = bytearray(base)
    for _ in range(rng.randrange(1, 6)):
        pick = rng.randrange(14)
        at = rng.randrange(len(data) + 1)
        if pick == 0 and data:
            data[min(at, len(data) - 1)] ^= 1 << rng.randrange(8)
        elif pick == 1:
            del data[at:at + rng.randrange(1, 200)]
        elif pick == 2:
            data[at:at] = data[at:at + rng.randrange(1, 400)] * rng.randrange(1, 4)
        elif pick == 3:
            data[0:0] = b"\xef\xbb\xbf"
        elif pick == 4:
            data = bytearray(bytes(data).replace(b"  ", b"\t", rng.randrange(1, 5)))
        elif pick == 5:
            data = bytearray(bytes(data).replace(b"\n", rng.choice([b"\r", b"\r\n", "\u2028".encode()])))
        elif pick == 6:
            data[at:at] = rng.choice([b"!!python/object/apply:os.system ['true'] ", b"!!binary ", b"!custom ",
                                      b"&anchor ", b"*anchor ", b"<<: *x\n"])
        elif pick == 7:
            bomb = "a0: &a0 [x, x, x, x, x, x, x, x, x]\n" + "".join(
                f"a{i}: &a{i} [*a{i-1}, *a{i-1}, *a{i-1}, *a{i-1}, *a{i-1}, *a{i-1}, *a{i-1}, *a{i-1}, *a{i-1}]\n"
                for i in range(1, rng.randrange(2, 9)))
            data[0:0] = bomb.encode()
        elif pick == 8:
            line_end = data.find(b"\n", at)
            line_start = data.rfind(b"\n", 0, at) + 1
            if line_end > 0:
                data[line_end:line_end] = b"\n" + data[line_start:line_end]  # a duplicate key, often
        elif pick == 9:
            data[at:at] = bytes(rng.randrange(256) for _ in range(rng.randrange(1, 20)))
        elif pick == 10:
            data = data[:at]
        elif pick == 11:
            data[at:at] = rng.choice(ODD_TEXT).encode("utf-8", "surrogatepass")
        elif pick == 12:
            data[at:at] = b"[" * rng.choice([10, 64, 65, 500]) + b"]" * rng.randrange(3)
        else:
            data = bytearray(b"version https://git-lfs.github.com/spec/v1\noid sha256:" + b"0" * 64 + b"\nsize 9\n")
    return bytes(data)


# --------------------------------------------------------------------------- running the cases


def run_main(argv: list[str]) -> tuple[int | None, str]:
    """(exit code, what went wrong or '') of cli.main in this process, within CASE_SECONDS."""
    out, err = io.StringIO(), io.StringIO()
    signal.alarm(CASE_SECONDS)
    try:
        code = cli.main(argv, stdout=out, stderr=err)
    except TimedOut:
        return TIMEOUT_EXIT, "over the time limit"
    except BaseException as exc:  # noqa: BLE001 - anything escaping main is what this campaign looks for
        return None, f"{type(exc).__name__}: {exc}"[:300]
    finally:
        signal.alarm(0)
    if "Traceback" in err.getvalue():
        return code, "Traceback on stderr"
    if code not in (0, 1, 2, 3):
        return code, f"exit code {code}"
    return code, ""


def special_cases(work: Path) -> list[tuple[str, Path]]:
    cases = []
    link = work / "zero.model.yaml"
    os.symlink("/dev/zero", link)
    cases.append(("a link to /dev/zero", link))
    fifo = work / "pipe.model.yaml"
    os.mkfifo(fifo)
    cases.append(("a named pipe", fifo))
    folder = work / "folder.model.yaml"
    folder.mkdir()
    cases.append(("a folder named like a model file", folder))
    empty = work / "empty.model.yaml"
    empty.write_bytes(b"")
    cases.append(("an empty file", empty))
    model_dir = work / "odd.model"
    model_dir.mkdir()
    os.mkfifo(model_dir / "tables.yaml")
    cases.append(("a model folder holding a named pipe", model_dir))
    return cases


def run_program(argv: list[str]) -> tuple[int | None, str]:
    env = {**os.environ, "MODELDIFF_NO_CACHE": "1"}
    try:
        done = subprocess.run([sys.executable, "-m", "modeldiff", *argv], capture_output=True, text=True,
                              timeout=CASE_SECONDS, env=env, cwd=str(ROOT))
    except subprocess.TimeoutExpired:
        return TIMEOUT_EXIT, "over the time limit (a real process)"
    if "Traceback" in done.stderr:
        return done.returncode, "Traceback on stderr"
    if done.returncode not in (0, 1, 2, 3):
        return done.returncode, f"exit code {done.returncode}"
    return done.returncode, ""


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=10_000, help="models to generate (default 10,000)")
    parser.add_argument("--seed", type=int, default=16)
    parser.add_argument("--out", default=None, help="folder for failing models (default: a temporary one)")
    args = parser.parse_args(argv)

    rng = random.Random(args.seed)
    base_texts = [path.read_text() for path in BASES]
    out = Path(args.out or tempfile.mkdtemp(prefix="modeldiff-fuzz-failures-"))
    out.mkdir(parents=True, exist_ok=True)
    signal.signal(signal.SIGALRM, _alarm)
    os.environ["MODELDIFF_NO_CACHE"] = "1"
    codes: dict[int, int] = {}
    failures: list[str] = []
    started = time.time()
    with tempfile.TemporaryDirectory(prefix="modeldiff-fuzz-") as work_dir:
        work = Path(work_dir)
        model = work / "case.model.yaml"
        for index in range(args.count):
            kind = rng.randrange(3)
            if kind == 0:
                data = random_document(rng)
            elif kind == 1:
                data = replaced_nodes(rng, rng.choice(base_texts))
            else:
                data = text_mutation(rng, rng.choice(base_texts).encode())
            model.write_bytes(data)
            base = str(rng.choice(BASES))
            for argv in (["check", str(model)], ["diff", base, str(model)], ["diff", str(model), base, "--format", "json"]):
                code, problem = run_main(argv)
                codes[code if code is not None else -1] = codes.get(code if code is not None else -1, 0) + 1
                if problem:
                    kept = out / f"case-{index}.model.yaml"
                    kept.write_bytes(data)
                    failures.append(f"{kept}: {' '.join(argv[:1])}: {problem}")
            if (index + 1) % 1000 == 0:
                print(f"{index + 1} models, {len(failures)} failures, {time.time() - started:.0f} s", flush=True)
        specials = special_cases(work)
        for what, path in specials:
            for argv in (["check", str(path)], ["diff", str(BASES[0]), str(path)]):
                code, problem = run_program(argv)
                codes[code if code is not None else -1] = codes.get(code if code is not None else -1, 0) + 1
                if problem:
                    failures.append(f"{what}: {argv[0]}: {problem}")
    total = sum(codes.values())
    print(f"{args.count} generated models (+ {len(specials)} special files), "
          f"{total} runs of check and diff in {time.time() - started:.0f} s")
    print("exit codes: " + ", ".join(f"{code}: {n}" for code, n in sorted(codes.items())))
    if failures:
        print(f"{len(failures)} failures (models kept in {out}):")
        for line in failures[:50]:
            print("  " + line)
        return 1
    print("no traceback, no hang, every exit code within 0-3")
    return 0


if __name__ == "__main__":
    sys.exit(main())
