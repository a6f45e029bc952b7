"""Campaign (outside `make test`): the claims of `modeldiff draft` and the data-aware check over many inputs.

    python benchmarks/campaigns/draft_campaign.py [--cases 20000] [--duckdb 500] [--histories 300] [--mutated 20000] [--seed 1]

1. every random catalog drafts a model that `check` passes with no error, and every table of the
   catalog is accounted for (drafted, listed as not drafted, or in a note);
2. random schemas created in DuckDB and read back from its catalog equal the same DDL parsed by sqlglot,
   and draft to the same text;
3. seeded type-2 histories with planted overlaps, gaps and wrong current flags (Kimball's type-2
   technique, from memory): the data-aware check finds exactly the planted rows, with `valid_to`
   exclusive and inclusive;
4. DDL scripts with words deleted, inserted or replaced are drafted (a model check passes with no
   error) or refused with one line (ModeldiffError), never anything else.

The tests run small seeded samples of the same generators (tests/test_draft.py, tests/test_datacheck.py).
Prints the number of cases and failures; exits 1 on the first failure, with the case to reproduce it.
"""

from __future__ import annotations

import argparse
import random
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

from draftkit import (catalog_ddl, catalog_facts, draft_or_refuse, duckdb_ready, errors, loaded,  # noqa: E402
                      mutated_ddl, random_catalog)

from modeldiff.draft import draft, render  # noqa: E402


def drafts_pass_check(cases: int, seed: int) -> None:
    rng = random.Random(seed)
    for case in range(cases):
        catalog = random_catalog(rng)
        text = render(draft(catalog, "random"))
        model, findings = loaded(text)
        if errors(findings):
            sys.exit(f"draft: case {case} (seed {seed}) fails check: {errors(findings)}\n{text}")
        for table in catalog.tables:
            if not (table.name in model.tables or f"#  {table.name}:" in text or f'#  "{table.name}":' in text
                    or f"table {table.name!r} left out" in text):
                sys.exit(f"draft: case {case} (seed {seed}) loses table {table.name!r}\n{text}")
    print(f"drafts pass check: {cases} random catalogs, 0 failures")


def readers_agree(cases: int, seed: int) -> None:
    import duckdb

    from modeldiff.catalog import DdlCatalog, DuckDBCatalog

    rng = random.Random(seed)
    with tempfile.TemporaryDirectory() as folder:
        for case in range(cases):
            catalog = duckdb_ready(random_catalog(rng))
            ddl = catalog_ddl(catalog)
            path, script = Path(folder) / f"c{case}.duckdb", Path(folder) / f"c{case}.sql"
            con = duckdb.connect(str(path))
            con.execute(ddl)
            con.close()
            script.write_text(ddl)
            from_db, from_ddl = DuckDBCatalog(str(path)).read(), DdlCatalog(str(script)).read()
            if not catalog_facts(from_db) == catalog_facts(from_ddl) == catalog_facts(catalog):
                sys.exit(f"readers: case {case} (seed {seed}) differ\n{ddl}")
            if render(draft(from_db, "m")).split("\n", 1)[1] != render(draft(from_ddl, "m")).split("\n", 1)[1]:
                sys.exit(f"readers: case {case} (seed {seed}) draft differently\n{ddl}")
            path.unlink()
    print(f"DuckDB catalog = DDL catalog: {cases} random schemas, 0 failures")


def histories_found_exactly(cases: int, seed: int) -> None:
    from test_datacheck import TABLES, changed, found, seeded_history

    agent_cols, _ = TABLES["agent"]
    sale_cols, _ = TABLES["sale"]
    with tempfile.TemporaryDirectory() as folder:
        for case in range(cases):
            inclusive = case % 2 == 1
            rows, overlaps, gaps, flags = seeded_history(seed * 100_000 + case, inclusive)
            work = Path(folder) / str(case)
            work.mkdir()
            result = found(work, changed(agent=(agent_cols, rows), sale=(sale_cols, [])), examples=100_000)
            by_rule = {p.rule: {r[1] if p.rule != "data-current-flag" else r[0] for r in p.examples} for p in result}
            if (by_rule.get("data-history-overlap", set()), by_rule.get("data-history-gap", set()),
                    by_rule.get("data-current-flag", set())) != (overlaps, gaps, flags):
                sys.exit(f"history: case {case} (seed {seed}, inclusive={inclusive}) found {by_rule}, planted "
                         f"{overlaps=} {gaps=} {flags=}")
    print(f"type-2 overlaps, gaps and flags found exactly: {cases} seeded histories, 0 failures")


def mutated_scripts(cases: int, seed: int) -> None:
    from test_draft import CARDINALITY, SCD, STAR
    from test_draft_outside import TPCDS_DDL, TPCH_DDL

    rng = random.Random(seed)
    refused = 0
    with tempfile.TemporaryDirectory() as folder:
        script = Path(folder) / "mutated.sql"
        for case in range(cases):
            script.write_text(mutated_ddl(rng, (STAR, CARDINALITY, SCD, TPCH_DDL, TPCDS_DDL)), encoding="utf-8")
            try:
                text = draft_or_refuse(str(script))
            except Exception as error:  # noqa: BLE001 - the campaign's point: nothing else may escape
                sys.exit(f"mutated DDL: case {case} (seed {seed}) raised {type(error).__name__}: {error}\n"
                         f"{script.read_text()}")
            if text is None:
                refused += 1
            elif errors(loaded(text)[1]):
                sys.exit(f"mutated DDL: case {case} (seed {seed}) drafts a model with errors\n{script.read_text()}")
    print(f"mutated DDL drafted or refused in one line: {cases} scripts ({refused} refused), 0 failures")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=20_000)
    parser.add_argument("--duckdb", type=int, default=500)
    parser.add_argument("--histories", type=int, default=300)
    parser.add_argument("--mutated", type=int, default=20_000)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    drafts_pass_check(args.cases, args.seed)
    readers_agree(args.duckdb, args.seed)
    histories_found_exactly(args.histories, args.seed)
    mutated_scripts(args.mutated, args.seed)
    return 0


if __name__ == "__main__":
    sys.exit(main())
