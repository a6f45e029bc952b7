"""`draft --db postgresql://...` and `check MODEL --db postgresql://...`: the catalog and the data of PostgreSQL.

A throw-away server per run (tests/conftest.py `postgres`). Outside reference:
TPC-H's DDL (specification clause 1.4; tests/test_draft_outside.py holds it,
from memory) created in PostgreSQL drafts the specification's eight tables
and ten foreign keys, as the same DDL script does.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import serverkit
import warehousekit as W
from clikit import run
from draftkit import link_pairs, loaded
from modeldiff.data import Database
from modeldiff.load import load_path
from test_draft_outside import TPCH_DDL, TPCH_FOREIGN_KEYS

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"


def test_tpch_ddl_in_postgresql_drafts_the_specifications_tables_and_keys(postgres, tmp_path):
    W.create_database(postgres, "tpchddl")
    with postgres.connect("tpchddl") as admin:
        for statement in TPCH_DDL.split(";"):
            if statement.strip():
                admin.execute(statement)
    serverkit.grant_reader(postgres, "tpchddl")
    code, from_db, err = run("draft", "--db", postgres.reader_url("tpchddl"))
    assert code == 0, err
    assert serverkit.READER_PASSWORD not in from_db + err
    model, findings = loaded(from_db)
    assert sorted(model.tables) == ["customer", "lineitem", "nation", "orders", "part", "partsupp", "region",
                                    "supplier"]
    assert link_pairs(model) == TPCH_FOREIGN_KEYS
    assert [f for f in findings if f.severity == "error"] == []
    # the same draft as from the script itself, but for the header naming the source
    (tmp_path / "tpchddl.sql").write_text(TPCH_DDL)
    code, from_ddl, _ = run("draft", "--ddl", tmp_path / "tpchddl.sql")
    assert code == 0
    body = [line for line in from_db.splitlines() if not line.startswith("#")]
    assert body == [line for line in from_ddl.splitlines() if not line.startswith("#")]


def _bike_database(postgres, name: str) -> None:
    from modeldiff.demo_data import write_demo_data

    folder = Path(tempfile.mkdtemp(prefix="modeldiff-bike-"))
    write_demo_data(folder)
    model = load_path(EXAMPLE).model
    with Database.open(model, data_dir=str(folder)) as duck:
        W.create_database(postgres, name)
        W.to_postgres(duck.connection, sorted(model.tables), postgres, name)


def test_check_on_postgresql_is_clean_where_the_data_fits(postgres):
    _bike_database(postgres, "bikecheck")
    serverkit.grant_reader(postgres, "bikecheck")
    code, out, err = run("check", "--no-cache", EXAMPLE, "--db", postgres.reader_url("bikecheck"), "--format", "json")
    assert code == 0, out + err
    assert not [f for f in json.loads(out)["findings"] if f["rule"].startswith("data-")]


def test_check_on_postgresql_finds_a_repeated_key_and_a_missing_column(postgres):
    _bike_database(postgres, "bikedrift")
    with postgres.connect("bikedrift") as admin:
        admin.execute("INSERT INTO stations SELECT * FROM stations WHERE station_key = "
                      "(SELECT min(station_key) FROM stations)")
        admin.execute("ALTER TABLE trips DROP COLUMN fare")
    serverkit.grant_reader(postgres, "bikedrift")
    code, out, err = run("check", "--no-cache", EXAMPLE, "--db", postgres.reader_url("bikedrift"), "--format", "json")
    assert code == 3, out + err
    found = {(f["rule"], f["subject"]) for f in json.loads(out)["findings"] if f["rule"].startswith("data-")}
    assert ("data-key-not-unique", "tables.stations.key") in found
    assert any(rule == "data-column-missing" and "fare" in subject for rule, subject in found), found
