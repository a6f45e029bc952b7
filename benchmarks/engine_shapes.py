"""Benchmark: the engine on six report shapes, each against hand-written SQL for the same answer.

    python benchmarks/engine_shapes.py            # scale factor 1 (6 million lineitem rows)
    python benchmarks/engine_shapes.py --smoke    # scale factor 0.01, one round
    python benchmarks/engine_shapes.py --sf 10 --memory   # peak memory of each answer, each in its own process

The model is benchmarks/shapes.model.yaml; its reports are the shapes:

- chain: lineitem -> orders -> customer, by customer.c_mktsegment;
- two_routes: nation reaches lineitem through customer/orders and through
  supplier/partsupp (the two routes must agree), filters on region and order
  date, by nation.n_name with its (no match) group;
- bridge: lineitem -> part <- part_category -> category (many-to-many), a
  line counted once per category it reaches, lines of parts with no category
  in (no match);
- role_filtered: role nation_reader (`:user` through the access table
  nation_access), by orders.o_orderpriority;
- standby_variant: variant date_basis=shipped follows the standby link
  lineitem_shipdate (and turns orders_date off), by dates.d_year;
- two_way_return: a measure making customer_nation two-way, so the group's
  customers reach nation and come back through supplier, by customer.c_mktsegment.

Data: TPC-H-shaped tables at the scale factor's row counts (TPC-H clause
4.2.5, from memory: supplier 10,000, customer 150,000, part 200,000,
partsupp 800,000, orders 1,500,000 per scale factor; here 4 lines per order),
made deterministically by DuckDB SQL over range() (no dbgen: its extension
cannot be installed offline), written once to Parquet in
`<cache>/shapes-sf<N>/`. The engine's time is `report_query` plus
`Database.run`; the hand-written SQL runs on the same connection; rounds
interleave them and the best of each counts. Every answer must equal the
hand-written one row for row (exit 1 otherwise).

`--memory` measures instead the peak resident memory of each answer: for
each shape, one fresh process opens the data and computes the engine's
answer, another the hand-written one, and a third opens the data only (the
floor); each prints its own peak (`ru_maxrss`). At scale factor 10 (60
million lineitem rows, about 350 MB of Parquet made on first use in a few
minutes) this is the check that the engine stays within the machine.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import shutil
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
MODEL = ROOT / "benchmarks" / "shapes.model.yaml"
GOAL = 1.3
USER = "u3"
TABLES = ("region", "nation", "supplier", "customer", "part", "category", "part_category", "partsupp",
          "dates", "orders", "lineitem", "nation_access")


def say(text: str) -> None:
    print(text, flush=True)


def sf_name(sf: float) -> str:
    return format(sf, "g")


# --------------------------------------------------------------------------- making the data


def generate_sql(sf: float) -> dict[str, str]:
    """One SELECT per table; deterministic (arithmetic on range(), no random())."""
    s, c, p, o = (max(8, int(n * sf)) for n in (10_000, 150_000, 200_000, 1_500_000))
    step = s // 4  # partsupp: part p is supplied by ((p + i*step) % s) + 1, i = 0..3 (distinct)
    orderable = (c // 3) * 2  # customers whose key is not a multiple of 3 place orders (TPC-H: 1/3 never do)
    return {
        "region": "SELECT r::INTEGER AS r_regionkey, ['AFRICA','AMERICA','ASIA','EUROPE','MIDDLE EAST'][r + 1] AS r_name "
                  "FROM range(5) t(r)",
        "nation": "SELECT n::INTEGER AS n_nationkey, 'NATION_' || lpad(n::VARCHAR, 2, '0') AS n_name, "
                  "(n % 5)::INTEGER AS n_regionkey FROM range(25) t(n)",
        "supplier": f"SELECT k::INTEGER AS s_suppkey, ((k * 7 + k // 25) % 25)::INTEGER AS s_nationkey FROM range(1, {s + 1}) t(k)",
        "customer": f"SELECT k::INTEGER AS c_custkey, ((k // 5 * 3 + k) % 25)::INTEGER AS c_nationkey, "
                    f"['AUTOMOBILE','BUILDING','FURNITURE','HOUSEHOLD','MACHINERY'][(k % 5) + 1] AS c_mktsegment "
                    f"FROM range(1, {c + 1}) t(k)",
        "part": f"SELECT k::INTEGER AS p_partkey, (k % 50 + 1)::INTEGER AS p_size FROM range(1, {int(200_000 * sf) + 1}) t(k)",
        "category": "SELECT k::INTEGER AS cat_key, 'CAT_' || lpad(k::VARCHAR, 2, '0') AS cat_name FROM range(1, 41) t(k)",
        # parts with key % 10 = 0 have no category; the others one or two
        "part_category": f"SELECT k::INTEGER AS pc_partkey, (k % 40 + 1)::INTEGER AS pc_catkey FROM range(1, {int(200_000 * sf) + 1}) t(k) WHERE k % 10 <> 0 "
                         f"UNION ALL SELECT k::INTEGER, ((k * 7 + 3) % 40 + 1)::INTEGER FROM range(1, {int(200_000 * sf) + 1}) t(k) "
                         f"WHERE k % 10 <> 0 AND k % 3 = 0 AND (k * 7 + 3) % 40 <> k % 40",
        "partsupp": f"SELECT k::INTEGER AS ps_partkey, (((k + i * {step}) % {s}) + 1)::INTEGER AS ps_suppkey "
                    f"FROM range(1, {int(200_000 * sf) + 1}) t(k), range(4) u(i)",
        "dates": "SELECT d::DATE AS d_date, year(d)::INTEGER AS d_year "
                 "FROM range(DATE '1992-01-01', DATE '1999-01-01', INTERVAL 1 DAY) t(d)",
        "orders": f"SELECT k::INTEGER AS o_orderkey, "
                  f"((((k * 31) % {orderable}) // 2) * 3 + ((k * 31) % {orderable}) % 2 + 1)::INTEGER AS o_custkey, "
                  f"(DATE '1992-01-01' + ((k * 17) % 2405)::INTEGER) AS o_orderdate, "
                  f"['1-URGENT','2-HIGH','3-MEDIUM','4-NOT SPECIFIED','5-LOW'][((k // 7) % 5) + 1] AS o_orderpriority "
                  f"FROM range(1, {o + 1}) t(k)",
        "lineitem": f"SELECT o.o_orderkey AS l_orderkey, j::INTEGER AS l_linenumber, pk::INTEGER AS l_partkey, "
                    f"(((pk + ((o.o_orderkey + j) % 4) * {step}) % {s}) + 1)::INTEGER AS l_suppkey, "
                    f"((o.o_orderkey * 13 + j * 7) % 50 + 1)::INTEGER AS l_quantity, "
                    f"(((o.o_orderkey * 13 + j * 7) % 50 + 1) * (900 + pk % 1000) / 100.0)::DECIMAL(15,2) AS l_extendedprice, "
                    f"(o.o_orderdate + ((o.o_orderkey + j * 29) % 121 + 1)::INTEGER) AS l_shipdate "
                    f"FROM (SELECT *, 0 AS _ FROM orders) o, range(1, 5) u(j), "
                    f"LATERAL (SELECT (o.o_orderkey * 37 + j * 101) % {int(200_000 * sf)} + 1 AS pk) v",
        "nation_access": "SELECT 'u' || (n % 10)::VARCHAR AS na_user, n::INTEGER AS na_nationkey FROM range(25) t(n)",
    }


def data_dir(sf: float, cache: Path) -> Path:
    target = cache / f"shapes-sf{sf_name(sf)}"
    if all((target / f"{t}.parquet").is_file() for t in TABLES):
        say(f"data: scale factor {sf_name(sf)} from {target} (made earlier)")
        return target
    import duckdb

    partial = cache / f"shapes-sf{sf_name(sf)}.partial"
    shutil.rmtree(partial, ignore_errors=True)
    partial.mkdir(parents=True)
    start = time.perf_counter()
    con = duckdb.connect()
    for table, sql in generate_sql(sf).items():
        con.execute(f"CREATE TABLE {table} AS {sql}")
        con.execute(f"COPY {table} TO '{partial / (table + '.parquet')}' (FORMAT parquet, COMPRESSION zstd)")
    con.close()
    shutil.rmtree(target, ignore_errors=True)
    os.replace(partial, target)
    say(f"data: generated scale factor {sf_name(sf)} into {target} in {time.perf_counter() - start:.0f} s")
    return target


# --------------------------------------------------------------------------- the shapes and their hand-written SQL

REV = "sum(l.l_extendedprice) AS revenue, sum(l.l_quantity) AS quantity"
LINE_ROUTES = """FROM lineitem l
JOIN orders o ON l.l_orderkey = o.o_orderkey
JOIN customer c ON o.o_custkey = c.c_custkey
JOIN partsupp ps ON l.l_partkey = ps.ps_partkey AND l.l_suppkey = ps.ps_suppkey
JOIN supplier s ON ps.ps_suppkey = s.s_suppkey"""

# Each query returns the grouping column(s), the measures, and a no-match flag last.
HAND = {
    "chain": f"""SELECT c.c_mktsegment, {REV}, false
FROM lineitem l JOIN orders o ON l.l_orderkey = o.o_orderkey JOIN customer c ON o.o_custkey = c.c_custkey
GROUP BY c.c_mktsegment""",
    # a line is in nation g's group when both routes reach g; in (no match) when both are European but differ
    "two_routes": f"""SELECT CASE WHEN cn.n_nationkey = sn.n_nationkey THEN cn.n_name END AS n_name, {REV},
       cn.n_nationkey <> sn.n_nationkey AS nm
{LINE_ROUTES}
JOIN nation cn ON c.c_nationkey = cn.n_nationkey JOIN region cr ON cn.n_regionkey = cr.r_regionkey
JOIN nation sn ON s.s_nationkey = sn.n_nationkey JOIN region sr ON sn.n_regionkey = sr.r_regionkey
WHERE cr.r_name = 'EUROPE' AND sr.r_name = 'EUROPE' AND o.o_orderdate >= DATE '1995-01-01'
GROUP BY 1, 4""",
    "bridge": f"""SELECT cat.cat_name, {REV}, false
FROM lineitem l JOIN part_category pc ON pc.pc_partkey = l.l_partkey JOIN category cat ON cat.cat_key = pc.pc_catkey
GROUP BY cat.cat_name
UNION ALL
SELECT NULL, {REV}, true FROM lineitem l
WHERE NOT EXISTS (SELECT 1 FROM part_category pc WHERE pc.pc_partkey = l.l_partkey)""",
    "role_filtered": f"""SELECT o.o_orderpriority, {REV}, false
{LINE_ROUTES}
WHERE c.c_nationkey IN (SELECT na_nationkey FROM nation_access WHERE na_user = '{USER}')
  AND s.s_nationkey IN (SELECT na_nationkey FROM nation_access WHERE na_user = '{USER}')
GROUP BY o.o_orderpriority""",
    "standby_variant": f"""SELECT d.d_year, {REV}, false
FROM lineitem l JOIN dates d ON l.l_shipdate = d.d_date
GROUP BY d.d_year""",
    # customer_nation two-way: a group's customers reach their nations, which reach suppliers, which
    # reach lineitem through partsupp: a line counts for segment g when its supplier's nation has a g customer
    "two_way_return": f"""SELECT CASE WHEN g.c_nationkey IS NOT NULL THEN c.c_mktsegment END AS c_mktsegment,
       sum(l.l_extendedprice) AS revenue_twoway, g.c_nationkey IS NULL AS nm
{LINE_ROUTES}
LEFT JOIN (SELECT DISTINCT c_mktsegment, c_nationkey FROM customer) g
  ON g.c_mktsegment = c.c_mktsegment AND g.c_nationkey = s.s_nationkey
GROUP BY 1, 3""",
}


def normal(rows: list[tuple]) -> list[tuple]:
    """Rows as (no-match flag, grouping..., measures...) sorted; a group with no line (all NULL) left out."""
    out = []
    for row in rows:
        flag, values = bool(row[-1]), tuple(row[:-1])
        if all(v is None for v in values[1:]):
            continue  # a grouping value visible in the total that no line reaches: no hand-written join shows it
        out.append((flag, tuple(None if flag else v for v in values[:1]) + values[1:]))
    return sorted(out, key=repr)


def engine_answer(model, db, report: str):
    from modeldiff.engine import report_query

    return db.run(report_query(model, report, user=USER), f"report {report}")


def run(sf: float, cache: Path, rounds: int, only: list[str]) -> int:
    sys.path.insert(0, str(ROOT))
    from modeldiff.data import Database
    from modeldiff.load import load_path

    folder = data_dir(sf, cache)
    model = load_path(MODEL).model
    start = time.perf_counter()
    ratios = {}
    with Database.open(model, str(MODEL), data_dir=str(folder)) as db:
        say(f"load: {db.table_counts()['lineitem']} lineitem rows in {time.perf_counter() - start:.1f} s")
        for shape in only:
            engine_times, hand_times = [], []
            for _ in range(rounds):
                t0 = time.perf_counter()
                ours = engine_answer(model, db, shape)
                t1 = time.perf_counter()
                theirs = db.connection.execute(HAND[shape]).fetchall()
                t2 = time.perf_counter()
                engine_times.append(t1 - t0)
                hand_times.append(t2 - t1)
            if normal(ours) != normal(theirs):
                say(f"answers differ: {shape}\n  engine:       {normal(ours)}\n  hand-written: {normal(theirs)}")
                return 1
            engine, hand = min(engine_times), min(hand_times)
            ratios[shape] = engine / hand if hand > 0 else float("inf")
            groups = sum(1 for flag, _ in normal(ours) if not flag)
            nm = "with" if any(flag for flag, _ in normal(ours)) else "no"
            say(f"shape {shape}: answers equal ({groups} groups, {nm} (no match) row); engine {engine:.3f} s, "
                f"hand-written {hand:.3f} s, ratio {ratios[shape]:.2f}x")
    met = all(r <= GOAL for r in ratios.values())
    say(f"ratios at scale factor {sf_name(sf)}: " + ", ".join(f"{k} {v:.2f}x" for k, v in ratios.items())
        + (f" (goal <= {GOAL}x at scale factor 1: {'met' if met else 'NOT met'})" if sf == 1 else ""))
    return 0


def peak_mb() -> float:
    """This process's peak resident memory in MB (Linux reports ru_maxrss in KB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def child(sf: float, cache: Path, shape: str, side: str) -> int:
    """One answer in this process, then its peak memory and seconds as JSON on stdout."""
    sys.path.insert(0, str(ROOT))
    from modeldiff.data import Database
    from modeldiff.load import load_path

    model = load_path(MODEL).model
    folder = cache / f"shapes-sf{sf_name(sf)}"
    with Database.open(model, str(MODEL), data_dir=str(folder)) as db:
        start = time.perf_counter()
        if side == "engine":
            rows = engine_answer(model, db, shape)
        elif side == "hand":
            rows = db.connection.execute(HAND[shape]).fetchall()
        else:
            rows = []
        seconds = time.perf_counter() - start
    print(json.dumps({"peak_mb": peak_mb(), "seconds": seconds, "rows": len(rows)}))
    return 0


def memory(sf: float, cache: Path, only: list[str]) -> int:
    """Peak memory of each shape's engine and hand-written answers, each in a fresh process."""
    data_dir(sf, cache)

    def measure(shape: str, side: str) -> dict:
        done = subprocess.run([sys.executable, __file__, "--sf", str(sf), "--cache", str(cache),
                               "--child", f"{shape}:{side}"], capture_output=True, text=True)
        if done.returncode != 0:
            say(done.stderr.strip().splitlines()[-1] if done.stderr.strip() else f"{shape} {side} failed")
            raise SystemExit(1)
        return json.loads(done.stdout.strip().splitlines()[-1])

    floor = measure(only[0], "none")
    say(f"peak memory at scale factor {sf_name(sf)}: opening the data alone {floor['peak_mb']:.0f} MB")
    worst = 0.0
    for shape in only:
        ours, theirs = measure(shape, "engine"), measure(shape, "hand")
        worst = max(worst, ours["peak_mb"])
        say(f"shape {shape}: engine peak {ours['peak_mb']:.0f} MB ({ours['seconds']:.1f} s), "
            f"hand-written peak {theirs['peak_mb']:.0f} MB ({theirs['seconds']:.1f} s)")
    total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**20
    say(f"largest engine peak at scale factor {sf_name(sf)}: {worst:.0f} MB of {total:.0f} MB on this machine")
    return 0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sf", type=float, default=1.0, help="scale factor (default 1)")
    p.add_argument("--rounds", type=int, default=5, help="interleaved rounds; the best of each counts (default 5)")
    p.add_argument("--smoke", action="store_true", help="scale factor 0.01, one round")
    p.add_argument("--shape", action="append", choices=sorted(HAND), help="run only this shape (repeatable)")
    p.add_argument("--cache", type=Path, default=Path.home() / ".cache" / "modeldiff-bench",
                   help="where generated data lives")
    p.add_argument("--memory", action="store_true",
                   help="measure each answer's peak memory in its own process instead of timing")
    p.add_argument("--child", help=argparse.SUPPRESS)  # SHAPE:engine|hand|none, run by --memory
    args = p.parse_args(argv)
    if args.sf <= 0:
        p.error("--sf must be positive")
    if args.smoke:
        args.sf, args.rounds = 0.01, 1
    if args.child:
        shape, _, side = args.child.partition(":")
        return child(args.sf, args.cache.expanduser(), shape, side)
    if args.memory:
        return memory(args.sf, args.cache.expanduser(), args.shape or list(HAND))
    return run(args.sf, args.cache.expanduser(), max(1, args.rounds), args.shape or list(HAND))


if __name__ == "__main__":
    sys.exit(main())
