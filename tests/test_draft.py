"""`modeldiff draft`: a model drafted from a catalog (DDL script or DuckDB file), its guesses and its writing."""

from __future__ import annotations

import os
import random

import pytest
from draftkit import (catalog_ddl, catalog_facts, draft_ddl, draft_or_refuse, duckdb_ready, errors, loaded,
                      mutated_ddl, random_catalog, run)

from modeldiff.catalog import model_type
from modeldiff.errors import ModeldiffError
from modeldiff.draft import draft, model_name_of, render

STAR = """
CREATE TABLE day_dim (day_key INTEGER PRIMARY KEY, day DATE, year INTEGER);
CREATE TABLE shop (shop_key INTEGER PRIMARY KEY, shop_code VARCHAR(8) UNIQUE, name VARCHAR);
CREATE TABLE sales (
  sale_id BIGINT PRIMARY KEY,
  order_day_key INTEGER REFERENCES day_dim (day_key),
  ship_day_key INTEGER REFERENCES day_dim (day_key),
  shop_key INTEGER REFERENCES shop,
  amount DECIMAL(12, 2), weight DOUBLE, paid BOOLEAN, sold_at TIMESTAMP, raw BLOB);
CREATE TABLE loose (a INTEGER, b VARCHAR);
"""


def test_tables_columns_types_and_keys(tmp_path):
    model, findings = loaded(draft_ddl(tmp_path, STAR))
    assert errors(findings) == []
    assert sorted(model.tables) == ["day_dim", "sales", "shop"]
    sales = model.tables["sales"]
    assert sales.key == ("sale_id",)
    assert {n: c.type for n, c in sales.columns.items()} == {
        "sale_id": "integer", "order_day_key": "integer", "ship_day_key": "integer", "shop_key": "integer",
        "amount": "decimal", "weight": "float", "paid": "boolean", "sold_at": "timestamp"}
    assert model.tables["shop"].natural_key == ("shop_code",)
    assert model.tables["shop"].columns["shop_code"].unique is True
    assert model.tables["day_dim"].natural_key == ()


def test_kinds_are_guesses_in_comments(tmp_path):
    text = draft_ddl(tmp_path, STAR)
    model, _ = loaded(text)
    assert {n: t.kind for n, t in model.tables.items()} == {"day_dim": "dimension", "shop": "dimension", "sales": "fact"}
    kind_lines = [line for line in text.splitlines() if line.strip().startswith("kind:")]
    assert len(kind_lines) == 3 and all("# guess:" in line for line in kind_lines)


def test_role_playing_links_one_live_rest_standby_named_by_column(tmp_path):
    model, _ = loaded(draft_ddl(tmp_path, STAR))
    assert set(model.links) == {"sales_order_day_key", "sales_ship_day_key", "sales_shop_key"}
    assert model.links["sales_order_day_key"].standby is False
    assert model.links["sales_ship_day_key"].standby is True
    assert model.links["sales_shop_key"].standby is False
    # a REFERENCES clause without columns points at the referenced table's primary key
    assert model.links["sales_shop_key"].to_columns == ("shop_key",)


def test_one_foreign_key_to_a_table_is_not_standby(tmp_path):
    model, _ = loaded(draft_ddl(tmp_path, STAR.replace(
        "ship_day_key INTEGER REFERENCES day_dim (day_key)", "ship_day_key INTEGER")))
    assert [l.name for l in model.links.values() if l.standby] == []


def test_left_out_table_and_column_are_listed_not_guessed(tmp_path):
    text = draft_ddl(tmp_path, STAR)
    assert "# Not drafted, listed commented out at the end: loose." in text
    assert "#  loose:  # no foreign key from or to it" in text
    assert "#    kind: ?" in text
    assert "# note: column raw (BLOB) left out: the format has no such type" in text


def test_table_without_primary_key_is_drafted_without_key_and_listed(tmp_path):
    text = draft_ddl(tmp_path, STAR.replace("sale_id BIGINT PRIMARY KEY", "sale_id BIGINT"))
    model, findings = loaded(text)
    assert model.tables["sales"].key == ()
    assert "# No primary key (no `key` written): sales." in text
    assert errors(findings) == []


def test_everything_has_a_key_when_every_table_has_one(tmp_path):
    assert "No primary key" not in draft_ddl(tmp_path, STAR)


CARDINALITY = """
CREATE TABLE person (person_key INTEGER PRIMARY KEY, email VARCHAR UNIQUE);
CREATE TABLE badge (badge_key INTEGER PRIMARY KEY, person_key INTEGER UNIQUE REFERENCES person (person_key));
CREATE TABLE visit (visit_key INTEGER PRIMARY KEY, person_key INTEGER REFERENCES person (person_key),
                    email VARCHAR REFERENCES person (email));
CREATE TABLE profile (person_key INTEGER PRIMARY KEY REFERENCES person (person_key), bio VARCHAR);
"""


def test_cardinality_from_uniqueness(tmp_path):
    model, findings = loaded(draft_ddl(tmp_path, CARDINALITY))
    assert errors(findings) == []
    cardinality = {name: l.cardinality for name, l in model.links.items()}
    assert cardinality == {
        "badge_person_key": "one-to-one",     # the referencing column is unique
        "profile_person_key": "one-to-one",   # the referencing column is the table's key
        "visit_person_key": "many-to-one",    # onto the primary key
        "visit_email": "many-to-one",         # onto a unique column
    }
    assert model.links["visit_email"].standby is True  # two links visit -> person


def test_bridge_guess(tmp_path):
    ddl = """
    CREATE TABLE account (account_key INTEGER PRIMARY KEY, name VARCHAR);
    CREATE TABLE customer (customer_key INTEGER PRIMARY KEY, name VARCHAR);
    CREATE TABLE account_holder (
      account_key INTEGER REFERENCES account, customer_key INTEGER REFERENCES customer,
      share DECIMAL(5, 4), PRIMARY KEY (account_key, customer_key));
    CREATE TABLE balance (account_key INTEGER REFERENCES account, day DATE, amount DECIMAL(12, 2),
      PRIMARY KEY (account_key, day));
    """
    model, findings = loaded(draft_ddl(tmp_path, ddl))
    assert errors(findings) == []
    assert model.tables["account_holder"].kind == "bridge"
    # a composite key of one foreign key and a date is not a bridge
    assert model.tables["balance"].kind == "fact"


SCD = """
CREATE TABLE agent (agent_key INTEGER PRIMARY KEY, agent_code VARCHAR, region VARCHAR,
                    valid_from DATE, valid_to DATE, is_current BOOLEAN);
CREATE TABLE call (call_key INTEGER PRIMARY KEY, agent_key INTEGER REFERENCES agent, seconds INTEGER);
"""


def test_type_2_history_suggested(tmp_path):
    text = draft_ddl(tmp_path, SCD)
    model, findings = loaded(text)
    assert errors(findings) == []
    agent = model.tables["agent"]
    assert agent.natural_key == ("agent_code",)
    assert (agent.history.type, agent.history.valid_from, agent.history.valid_to, agent.history.current) == (
        2, "valid_from", "valid_to", "is_current")
    assert "history:  # guess: validity dates valid_from/valid_to" in text


def test_no_history_without_validity_dates(tmp_path):
    model, _ = loaded(draft_ddl(tmp_path, SCD.replace("valid_from DATE, valid_to DATE", "hired DATE, left DATE")))
    assert model.tables["agent"].history is None
    assert model.tables["agent"].natural_key == ()


def test_no_history_when_the_business_key_is_unique(tmp_path):
    text = draft_ddl(tmp_path, SCD.replace("agent_code VARCHAR", "agent_code VARCHAR UNIQUE"))
    model, _ = loaded(text)
    assert model.tables["agent"].history is None
    assert "no business key" in text


def test_names_the_format_cannot_hold_and_yaml_words(tmp_path):
    ddl = """
    CREATE TABLE "order line" (id INTEGER PRIMARY KEY);
    CREATE TABLE dim (dim_key INTEGER PRIMARY KEY, "null" VARCHAR, "true" INTEGER);
    CREATE TABLE fact (dim_key INTEGER REFERENCES dim, "my col" INTEGER);
    """
    text = draft_ddl(tmp_path, ddl)
    model, findings = loaded(text)
    assert errors(findings) == []
    assert set(model.tables["dim"].columns) == {"dim_key", "null", "true"}
    assert "table 'order line' left out" in text
    assert "column 'my col' left out" in text


def test_model_type_mapping():
    # DuckDB's own spellings and common DDL spellings of the seven model types
    assert model_type("INTEGER") == model_type("BIGINT") == model_type("int4") == "integer"
    assert model_type("DECIMAL(15,2)") == model_type("NUMERIC(7, 2)") == "decimal"
    assert model_type("DOUBLE") == model_type("DOUBLE PRECISION") == model_type("REAL") == "float"
    assert model_type("VARCHAR(25)") == model_type("CHAR(1)") == model_type("TEXT") == "text"
    assert model_type("DATE") == "date"
    assert model_type("TIMESTAMP WITH TIME ZONE") == model_type("TIMESTAMP") == "timestamp"
    assert model_type("BOOLEAN") == "boolean"
    for other in ("BLOB", "INTERVAL", "TIME", "INTEGER[]", "STRUCT(a INTEGER)", "MAP(VARCHAR, INTEGER)", ""):
        assert model_type(other) is None, other


def test_model_name_of():
    assert model_name_of("/x/shop.duckdb") == "shop"
    assert model_name_of("2024 sales.sql") == "m2024_sales"
    assert model_name_of("---.sql") == "model"


# --- the command: reading, writing, bad input ----------------------------------------------


def test_cli_writes_a_file_that_check_passes(tmp_path):
    (tmp_path / "star.sql").write_text(STAR)
    out = tmp_path / "star.model.yaml"
    code, stdout, stderr = run("draft", "--ddl", str(tmp_path / "star.sql"), "-o", str(out))
    assert (code, stdout, stderr) == (0, "", "")
    assert "model: star" in out.read_text()
    code, stdout, _ = run("check", "--no-cache", str(out))
    assert code == 0, stdout
    assert [p for p in os.listdir(tmp_path) if p.startswith(".modeldiff-draft-")] == []


def test_cli_prints_to_standard_output_without_o(tmp_path):
    (tmp_path / "star.sql").write_text(STAR)
    code, stdout, _ = run("draft", "--ddl", str(tmp_path / "star.sql"), "--name", "shop")
    assert code == 0 and "model: shop" in stdout


def test_cli_never_overwrites_without_force(tmp_path):
    (tmp_path / "star.sql").write_text(STAR)
    out = tmp_path / "star.model.yaml"
    out.write_text("mine\n")
    code, stdout, stderr = run("draft", "--ddl", str(tmp_path / "star.sql"), "-o", str(out))
    assert code == 2 and stderr.count("\n") == 1 and "--force" in stderr
    assert out.read_text() == "mine\n"
    code, _, _ = run("draft", "--ddl", str(tmp_path / "star.sql"), "-o", str(out), "--force")
    assert code == 0 and out.read_text().startswith("# Drafted by")


@pytest.mark.parametrize("content, what", [
    (None, "no such file"),
    ("CREATE TABLE (", "cannot parse the DDL"),
    ("CREATE TABLE call INTEGER PRIMARY KEY, x INT);", "cannot read the statement `CREATE TABLE call INTEGER"),
    ("CREATE TABLE f (a INT, FOREIGN KEY (a));", "names no table after REFERENCES"),
    (b"\xff\xfe CREATE", "not UTF-8"),
])
def test_cli_bad_ddl_exits_2_with_one_line_and_writes_nothing(tmp_path, content, what):
    script = tmp_path / "bad.sql"
    if isinstance(content, bytes):
        script.write_bytes(content)
    elif content is not None:
        script.write_text(content)
    out = tmp_path / "bad.model.yaml"
    code, stdout, stderr = run("draft", "--ddl", str(script), "-o", str(out))
    assert code == 2 and stdout == "" and stderr.count("\n") == 1 and what in stderr
    assert "Traceback" not in stderr
    assert os.listdir(tmp_path) == ([] if content is None else ["bad.sql"])


def test_cli_bad_database_file_exits_2(tmp_path):
    fake = tmp_path / "fake.duckdb"
    fake.write_text("not a database")
    for argv in (["--db", str(fake)], ["--db", str(tmp_path / "missing.duckdb")], ["--db", "postgresql://h/db"],
                 [], ["--db", str(fake), "--ddl", str(fake)]):
        code, stdout, stderr = run("draft", *argv)
        assert code == 2 and stdout == "" and stderr.count("\n") == 1, (argv, stderr)


def test_duckdb_catalog_read_only_and_locked(tmp_path):
    import duckdb

    from modeldiff import data

    path = tmp_path / "shop.duckdb"
    con = duckdb.connect(str(path))
    con.execute("CREATE TABLE shop (shop_key INTEGER PRIMARY KEY, name VARCHAR);"
                "CREATE TABLE sale (id INTEGER PRIMARY KEY, shop_key INTEGER REFERENCES shop (shop_key));"
                "CREATE VIEW v AS SELECT 1 AS one")
    con.close()
    before = path.read_bytes()
    code, stdout, _ = run("draft", "--db", str(path))
    assert code == 0 and "sale_shop_key:" in stdout and "view v not drafted" in stdout
    assert path.read_bytes() == before
    connection = data.open_locked_database(str(path))
    try:
        for statement in ("CREATE TABLE t (a INTEGER)", "SET enable_external_access = true",
                          "SELECT * FROM read_csv('/etc/hostname')", "INSTALL httpfs"):
            with pytest.raises(duckdb.Error):
                connection.execute(statement)
    finally:
        connection.close()


def test_duckdb_and_ddl_readers_agree(tmp_path):
    import duckdb

    path = tmp_path / "star.duckdb"
    ddl = STAR.replace("REFERENCES shop,", "REFERENCES shop (shop_key),").replace(", raw BLOB", "").replace(
        "CREATE TABLE loose (a INTEGER, b VARCHAR);", "")
    con = duckdb.connect(str(path))
    con.execute(ddl)
    con.close()
    from_db, _ = loaded(run("draft", "--db", str(path), "--name", "star")[1])
    from_ddl, _ = loaded(draft_ddl(tmp_path, ddl, name="star"))
    assert from_db.tables == from_ddl.tables
    assert from_db.links == from_ddl.links


def test_ddl_schema_option(tmp_path):
    ddl = """
    CREATE TABLE a.dim (k INTEGER PRIMARY KEY);
    CREATE TABLE a.fact (k INTEGER REFERENCES a.dim (k));
    CREATE TABLE b.other (k INTEGER PRIMARY KEY);
    CREATE TABLE b.other_fact (k INTEGER REFERENCES b.other (k));
    """
    model, _ = loaded(draft_ddl(tmp_path, ddl, schema="a"))
    assert sorted(model.tables) == ["dim", "fact"]
    model, _ = loaded(draft_ddl(tmp_path, ddl))
    assert sorted(model.tables) == ["dim", "fact", "other", "other_fact"]


def test_alter_table_before_create_is_bad_input(tmp_path):
    script = tmp_path / "x.sql"
    script.write_text("ALTER TABLE f ADD FOREIGN KEY (k) REFERENCES d (k);")
    code, _, stderr = run("draft", "--ddl", str(script))
    assert code == 2 and "create the table first" in stderr


# --- property: every catalog drafts a model that check passes with no error -------------------

def test_property_every_draft_passes_check_without_error():
    rng = random.Random(14)
    for case in range(300):
        catalog = random_catalog(rng)
        text = render(draft(catalog, "random"))
        model, findings = loaded(text)
        assert errors(findings) == [], (case, text, errors(findings))
        # every table of the catalog is accounted for: drafted, listed as not drafted, or in a note
        for table in catalog.tables:
            assert table.name in model.tables or f"#  {table.name}:" in text or f"#  \"{table.name}\":" in text \
                or f"table {table.name!r} left out" in text, (case, table.name, text)


def test_property_duckdb_and_ddl_readers_read_the_same_catalog(tmp_path):
    """Differential: random schemas created in DuckDB (its own catalog, duckdb_constraints()) and read back,
    against the same DDL parsed by sqlglot: the same tables, columns, types, keys, uniques and foreign keys."""
    import duckdb

    from modeldiff.catalog import DdlCatalog, DuckDBCatalog

    rng = random.Random(1414)
    for case in range(15):  # benchmarks/campaigns/draft_campaign.py runs many more
        catalog = duckdb_ready(random_catalog(rng))
        ddl = catalog_ddl(catalog)
        path = tmp_path / f"case{case}.duckdb"
        con = duckdb.connect(str(path))
        con.execute(ddl)
        con.close()
        script = tmp_path / f"case{case}.sql"
        script.write_text(ddl)
        from_db, from_ddl = DuckDBCatalog(str(path)).read(), DdlCatalog(str(script)).read()
        assert catalog_facts(from_db) == catalog_facts(from_ddl) == catalog_facts(catalog), (case, ddl)
        assert render(draft(from_db, "m")).split("\n", 1)[1] == render(draft(from_ddl, "m")).split("\n", 1)[1]


def test_alter_table_adds_columns_and_constraints(tmp_path):
    ddl = """
    CREATE TABLE dim (k INTEGER);
    CREATE TABLE fact (id INTEGER);
    ALTER TABLE dim ADD CONSTRAINT dim_pk PRIMARY KEY (k);
    ALTER TABLE fact ADD COLUMN k INTEGER;
    ALTER TABLE fact ADD FOREIGN KEY (k) REFERENCES dim (k);
    COMMENT ON TABLE dim IS 'ignored';
    """
    model, findings = loaded(draft_ddl(tmp_path, ddl))
    assert errors(findings) == []
    assert list(model.tables["fact"].columns) == ["id", "k"]
    assert model.tables["dim"].key == ("k",)
    assert [(l.from_table, l.to_table) for l in model.links.values()] == [("fact", "dim")]


def test_property_mutated_ddl_is_drafted_or_refused_never_a_traceback(tmp_path):
    """Broken scripts: either a draft that check passes with no error, or a ModeldiffError (exit 2)."""
    rng = random.Random(2014)
    script = tmp_path / "mutated.sql"
    drafted = 0
    for case in range(200):  # benchmarks/campaigns/draft_campaign.py runs many more
        script.write_text(mutated_ddl(rng, (STAR, CARDINALITY, SCD)), encoding="utf-8")
        text = draft_or_refuse(str(script))
        if text is not None:
            drafted += 1
            assert errors(loaded(text)[1]) == [], (case, script.read_text())
    assert 0 < drafted < 200  # some mutations break the script, some do not


def test_write_is_atomic_nothing_half_written(tmp_path, monkeypatch):
    from modeldiff import draft as draft_module

    target = tmp_path / "m.model.yaml"
    target.write_text("before\n")

    def failing_replace(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(draft_module.os, "replace", failing_replace)
    with pytest.raises(ModeldiffError, match="nothing was written"):
        draft_module.write_atomically(str(target), "after\n", force=True)
    assert target.read_text() == "before\n"
    assert sorted(os.listdir(tmp_path)) == ["m.model.yaml"]  # the temporary file is gone


def test_output_into_a_missing_folder_is_bad_input(tmp_path):
    (tmp_path / "star.sql").write_text(STAR)
    code, _, stderr = run("draft", "--ddl", str(tmp_path / "star.sql"), "-o", str(tmp_path / "no" / "m.yaml"))
    assert code == 2 and "no such folder" in stderr and not (tmp_path / "no").exists()


def test_unwritable_folder_is_bad_input(tmp_path):
    if os.geteuid() == 0:
        pytest.skip("root writes anywhere")
    (tmp_path / "star.sql").write_text(STAR)
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        code, _, stderr = run("draft", "--ddl", str(tmp_path / "star.sql"), "-o", str(locked / "m.yaml"))
    finally:
        locked.chmod(0o700)
    assert code == 2 and "cannot write" in stderr and os.listdir(locked) == []


def test_names_with_line_breaks_stay_inside_their_comments(tmp_path):
    # found by the mutated-DDL campaign: a quoted name spanning lines broke the YAML of a note
    ddl = (STAR.replace("REFERENCES day_dim (day_key),\n  shop_key", "REFERENCES \"day\n  dim\u2028x\" (day_key),\n  shop_key")
           + 'CREATE TABLE "bell\x07" (k INTEGER REFERENCES shop);')
    text = draft_ddl(tmp_path, ddl)
    model, findings = loaded(text)
    assert errors(findings) == []
    assert "# Note: foreign key sales(ship_day_key) -> day dim x(day_key) left out" in text
    assert "table 'bell\\x07' left out" in text
