"""Impact soundness campaign: N seeded random (model, data, one change) cases, `verify --all` against the diff.

    .venv/bin/python benchmarks/campaigns/impact_soundness.py            # 10,000 cases, 2 processes
    .venv/bin/python benchmarks/campaigns/impact_soundness.py -n 500 --start 0 --jobs 2
    .venv/bin/python benchmarks/campaigns/impact_soundness.py --shrink 23   # smallest reproducer of case 23

Each case (tests/soundness.py): a random valid model and data
(tests/randmodel.py), one random change of one kind, the diff
(impact.analyse) and `verify --all` on the data, in process. A false negative
is an item (measure, role, report) that moved on the data while the diff did
not list it: the tool's promise is that there are none. Precision per change
kind: of the items the diff listed, how many moved on this data (a listed
item may move only on other data, so precision below 1 is not a defect;
it says how much the list over-warns).

Results are appended to `--out` (JSON lines, one per case) as they come, so
an interrupted campaign resumes where it stopped; `--fresh` starts over.
Prints every false negative (seed, change kind, what moved) and a table per
change kind. Exit 1 when there is a false negative.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from collections import defaultdict
from concurrent.futures import ProcessPoolExecutor

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
sys.path.insert(0, os.path.join(ROOT, "tests"))


def one(seed: int) -> dict:
    import soundness

    try:
        o = soundness.run_case(seed)
    except Exception as error:  # a case the kit or the tool cannot run is counted, not hidden
        return {"seed": seed, "error": f"{type(error).__name__}: {error}"[:500]}
    return {"seed": seed, "kind": o.kind, "listed": sorted(map(list, o.listed)), "moved": sorted(map(list, o.moved)),
            "missed": [[m.kind, m.name, m.evidence] for m in o.missed]}


def _chunks(seeds: list[int], jobs: int):
    if jobs <= 1:
        for seed in seeds:
            yield one(seed)
        return
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        yield from pool.map(one, seeds, chunksize=4)


def summarise(results: list[dict], stream=sys.stdout) -> int:
    per_kind: dict[str, dict[str, int]] = defaultdict(lambda: defaultdict(int))
    negatives = [r for r in results if r.get("missed")]
    errors = [r for r in results if "error" in r]
    for r in results:
        if "error" in r:
            continue
        k = per_kind[r["kind"]]
        listed, moved = {tuple(x) for x in r["listed"]}, {tuple(x) for x in r["moved"]}
        k["cases"] += 1
        k["listed"] += len(listed)
        k["moved"] += len(moved)
        k["listed_and_moved"] += len(listed & moved)
        k["missed"] += len(moved - listed)
        k["cases_missing"] += bool(r["missed"])
    print(f"cases: {len(results)}   false negatives: {sum(len(r['missed']) for r in negatives)} items in "
          f"{len(negatives)} cases   errors: {len(errors)}", file=stream)
    for r in negatives[:200]:
        print(f"  FALSE NEGATIVE seed {r['seed']} ({r['kind']}): " +
              "; ".join(f"{k} {n}: {e}" for k, n, e in r["missed"]), file=stream)
    for r in errors[:20]:
        print(f"  ERROR seed {r['seed']}: {r['error']}", file=stream)
    print(file=stream)
    print("| change kind | cases | listed | moved | listed and moved | precision | missed items | cases missing |",
          file=stream)
    print("|---|---:|---:|---:|---:|---:|---:|---:|", file=stream)
    for kind in sorted(per_kind):
        k = per_kind[kind]
        precision = f"{k['listed_and_moved'] / k['listed']:.2f}" if k["listed"] else "-"
        print(f"| {kind} | {k['cases']} | {k['listed']} | {k['moved']} | {k['listed_and_moved']} | {precision} | "
              f"{k['missed']} | {k['cases_missing']} |", file=stream)
    return 1 if negatives else 0


def shrink(seed: int, stream=sys.stdout) -> dict | None:
    """The smallest pair of models and data (greedy deletions applied to both sides) still missing something."""
    import copy
    import random

    import randmodel as R
    import soundness

    case = R.generate(seed)
    kind, new_doc = R.mutate(case.doc, random.Random(seed * 7919 + 1))
    old_doc, rows = case.doc, case.rows

    def missed(old, new, data) -> list:
        try:
            if R.errors_of(old) or R.errors_of(new):
                return []
            v = soundness.verify_all(soundness.diff_of(old, new), data)
        except Exception:
            return []
        return list(v.missed)

    if not missed(old_doc, new_doc, rows):
        print(f"seed {seed}: nothing missed", file=stream)
        return None

    def deletions(old, new, data):
        for section in ("reports", "measures", "variants", "roles", "links", "tables"):
            for name in sorted(set(old.get(section, {})) | set(new.get(section, {}))):
                yield ("item", section, name)
        for table in sorted(data):
            for i in range(len(data[table])):
                yield ("row", table, i)
        for section in ("reports",):
            for name in sorted(old.get(section, {})):
                for field in ("where", "role", "variant", "by"):
                    yield ("field", section, name, field)

    def apply(step, old, new, data):
        old, new, data = copy.deepcopy(old), copy.deepcopy(new), copy.deepcopy(data)
        if step[0] == "item":
            _, section, name = step
            for doc in (old, new):
                doc.get(section, {}).pop(name, None)
                if section in doc and not doc[section] and section != "tables":
                    del doc[section]
            if section == "tables":
                data.pop(name, None)
        elif step[0] == "row":
            _, table, i = step
            if i >= len(data.get(table, ())):
                return None
            del data[table][i]
        else:
            _, section, name, field = step
            for doc in (old, new):
                doc.get(section, {}).get(name, {}).pop(field, None)
        return old, new, data

    changed = True
    while changed:
        changed = False
        for step in list(deletions(old_doc, new_doc, rows)):
            got = apply(step, old_doc, new_doc, rows)
            if got is None or got[:2] == (old_doc, new_doc) and got[2] == rows:
                continue
            if missed(*got):
                old_doc, new_doc, rows = got
                changed = True
    found = missed(old_doc, new_doc, rows)
    md = soundness.diff_of(old_doc, new_doc)
    listed = sorted({("measure", i.name) for i in md.result.measures} | {("role", i.name) for i in md.result.roles}
                    | {("report", i.name) for i in md.result.reports})
    changes = [f"{c.kind} {c.subject}" for c in md.result.changes]
    return {"seed": seed, "kind": kind, "old": R.to_yaml(old_doc), "new": R.to_yaml(new_doc),
            "rows": {t: [{k: (str(v) if v is not None and not isinstance(v, (int, float, str)) else v)
                          for k, v in r.items()} for r in rs] for t, rs in rows.items() if rs},
            "missed": [[m.kind, m.name, m.evidence] for m in found], "listed": listed, "changes": changes}


def markdown(found: dict) -> str:
    """One shrunk false negative as a Markdown section: models before and after, data, what moved, what was listed."""
    rows = "\n".join(f"{t}: {json.dumps(rs)}" for t, rs in found["rows"].items()) or "(every table empty)"
    listed = ", ".join(f"{k} {n}" for k, n in found["listed"]) or "nothing"
    moved = "\n".join(f"- {k} {n}: {e}" for k, n, e in found["missed"])
    return (f"## seed {found['seed']}: {found['kind']}\n\n"
            f"Changes the diff found: {', '.join(found['changes']) or 'none'}\n\n"
            f"Listed as impacted: {listed}\n\nMoved on the data but not listed:\n{moved}\n\n"
            f"Old model:\n```yaml\n{found['old']}```\nNew model:\n```yaml\n{found['new']}```\n"
            f"Data (rows per table; tables not named are empty):\n```\n{rows}\n```\n")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("-n", type=int, default=10_000, help="cases (default 10,000)")
    parser.add_argument("--start", type=int, default=0, help="first seed")
    parser.add_argument("--jobs", type=int, default=2, help="processes (default 2)")
    parser.add_argument("--out", default=os.path.join(ROOT, "out", "impact_soundness.jsonl"),
                        help="JSON lines file the results are appended to (resumed from)")
    parser.add_argument("--fresh", action="store_true", help="forget earlier results in --out")
    parser.add_argument("--shrink", type=int, nargs="+", metavar="SEED", help="print the smallest reproducer of cases")
    parser.add_argument("--append", metavar="FILE", help="with --shrink: append the reproducers to FILE as Markdown")
    args = parser.parse_args(argv)
    if args.shrink is not None:
        for seed in args.shrink:
            found = shrink(seed)
            if not found:
                continue
            text = markdown(found)
            print(text)
            if args.append:
                with open(args.append, "a") as f:
                    f.write(text + "\n")
        return 0
    os.makedirs(os.path.dirname(os.path.abspath(args.out)), exist_ok=True)
    if args.fresh and os.path.exists(args.out):
        os.remove(args.out)
    seeds = list(range(args.start, args.start + args.n))
    done: dict[int, dict] = {}
    if os.path.exists(args.out):
        with open(args.out) as f:
            for line in f:
                r = json.loads(line)
                if r["seed"] in set(seeds):
                    done[r["seed"]] = r
    todo = [s for s in seeds if s not in done]
    started = time.time()
    with open(args.out, "a") as out:
        for i, r in enumerate(_chunks(todo, args.jobs), 1):
            done[r["seed"]] = r
            out.write(json.dumps(r) + "\n")
            out.flush()
            if i % 100 == 0:
                rate = i / (time.time() - started)
                print(f"  {len(done)}/{len(seeds)} cases ({rate:.1f}/s)", file=sys.stderr)
    return summarise([done[s] for s in seeds if s in done])


if __name__ == "__main__":
    sys.exit(main())
