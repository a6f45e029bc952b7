"""`modeldiff draft --data DIR`: a model drafted from a data folder (`<table>.parquet` / `<table>.csv`, as eval reads
it). Such files declare no keys and no foreign keys: every table is drafted with its columns and types, nothing is
guessed, and the header lists the tables as needing a key and links.

The data: the bike-share example's generated rows (modeldiff.demo_data), as CSV, and as Parquet written by DuckDB
from the warehouse DDL (demo_data.WAREHOUSE_DDL, so the Parquet schema carries the warehouse's types).
"""

from __future__ import annotations

import os
import random
import re
from pathlib import Path

import pytest
from draftkit import errors, loaded, random_catalog, run

from modeldiff import data
from modeldiff.catalog import Catalog, CatalogTable, FolderCatalog
from modeldiff.demo_data import TABLE_COLUMNS, WAREHOUSE_DDL, write_demo_data
from modeldiff.draft import draft, render
from modeldiff.load import load_path

EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "bikeshare.model.yaml"


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    """(csv folder, parquet folder) of the generated bike-share data."""
    import duckdb

    root = tmp_path_factory.mktemp("folders")
    csv, parquet = root / "csv", root / "parquet"
    write_demo_data(csv)
    parquet.mkdir()
    con = duckdb.connect()
    con.execute(WAREHOUSE_DDL)
    for table in TABLE_COLUMNS:  # parents first: the foreign keys are enforced on insert
        con.execute(f"INSERT INTO {table} SELECT * FROM read_csv('{csv / (table + '.csv')}', header = true)")
        con.execute(f"COPY {table} TO '{parquet / (table + '.parquet')}' (FORMAT parquet)")
    con.close()
    return csv, parquet


def _drafted(folder: Path, tmp_path: Path, *argv: str) -> tuple[str, Path]:
    out = tmp_path / f"{folder.name}.model.yaml"
    code, stdout, stderr = run("draft", "--data", str(folder), "-o", str(out), *argv)
    assert (code, stdout, stderr) == (0, "", "")
    return out.read_text(), out


def test_a_parquet_folder_drafts_every_table_with_its_columns_and_types_and_nothing_else(folders, tmp_path):
    _, parquet = folders
    text, _ = _drafted(parquet, tmp_path)
    hand = load_path(str(EXAMPLE)).model
    model, findings = loaded(text)
    assert errors(findings) == []
    assert sorted(model.tables) == sorted(hand.tables)
    for name, table in hand.tables.items():  # the warehouse's types, read from the Parquet schema
        assert {c: col.type for c, col in model.tables[name].columns.items()} == \
            {c: col.type for c, col in table.columns.items()}, name
    # nothing guessed: no key, no natural key, no history, no link, every kind written fact and marked to set
    assert all(t.key == () and t.natural_key == () and t.history is None and t.kind == "fact"
               for t in model.tables.values())
    assert model.links == {} and "guess:" not in text
    assert text.count("kind: fact  # to set: ") == len(hand.tables)
    needing = " ".join(line.lstrip("#").strip() for line in text.splitlines()
                       if line.startswith("# Needing a key and links:") or line.startswith("#   "))
    assert all(name in needing for name in hand.tables)
    assert "inferred" not in text  # Parquet types are the file's own


def test_a_drafted_folder_passes_check_and_the_data_aware_check_on_its_own_data(folders, tmp_path):
    for folder in folders:
        _, path = _drafted(folder, tmp_path)
        assert run("check", str(path))[0] == 0
        code, stdout, _ = run("check", str(path), "--data", str(folder))
        assert code == 0 and "no findings" in stdout, stdout


def test_a_csv_folder_says_its_types_are_inferred_and_decimals_come_out_float(folders, tmp_path):
    csv, _ = folders
    text, _ = _drafted(csv, tmp_path)
    model, _ = loaded(text)
    hand = load_path(str(EXAMPLE)).model
    differ = {(name, c, col.type, model.tables[name].columns[c].type) for name, table in hand.tables.items()
              for c, col in table.columns.items() if model.tables[name].columns[c].type != col.type}
    # DuckDB's CSV reader infers DOUBLE for amounts written 12.50: the draft says float where the warehouse
    # says DECIMAL(10, 2); the header tells the user to check inferred types
    assert differ == {("stock_levels", "unit_cost", "decimal", "float"), ("repairs", "cost", "decimal", "float"),
                      ("trips", "fare", "decimal", "float")}
    assert "# Column types inferred from the values by DuckDB's CSV reader (check them): bikes," in text


def test_a_type_2_table_is_pointed_out_in_a_note_not_guessed(folders, tmp_path):
    _, parquet = folders
    text, _ = _drafted(parquet, tmp_path)
    notes = {m.group(1): m.group(2) for m in re.finditer(r"^  (\w+):\n(?:    kind: .*\n)((?:    # note: .*\n)*)",
                                                         text, re.M)}
    assert "valid_from and valid_to look like validity dates" in notes["mechanics"]
    assert notes["trips"] == "" and "history:" not in text  # twin: no validity dates, no note; nothing written


def test_parquet_is_read_before_a_csv_of_the_same_name_and_a_link_out_is_left_out(folders, tmp_path):
    _, parquet = folders
    folder = tmp_path / "mixed"
    folder.mkdir()
    (folder / "trips.parquet").write_bytes((parquet / "trips.parquet").read_bytes())
    (folder / "trips.csv").write_text("other\n1\n")
    (folder / "notes.txt").write_text("not data\n")
    outside = tmp_path / "elsewhere.csv"
    outside.write_text("secret\n1\n")
    os.symlink(outside, folder / "leak.csv")
    text, _ = _drafted(folder, tmp_path)
    model, _ = loaded(text)
    assert sorted(model.tables) == ["trips"] and "other" not in model.tables["trips"].columns
    assert "trips.csv left out: trips.parquet is read for table trips, as eval reads it" in text
    assert "leak.csv left out: it is a link leading out of the folder" in text


def test_columns_of_types_eval_cannot_read_are_left_out_with_a_note(tmp_path):
    import duckdb

    folder = tmp_path / "odd"
    folder.mkdir()
    con = duckdb.connect()
    con.execute(f"COPY (SELECT 1 AS id, 'x'::BLOB AS payload, TIME '10:00' AS at, [1, 2] AS list, "
                f"uuid() AS token, 2.5::DECIMAL(9, 2) AS amount) TO '{folder / 'events.parquet'}' (FORMAT parquet)")
    con.close()
    text, path = _drafted(folder, tmp_path)
    model, findings = loaded(text)
    assert errors(findings) == [] and list(model.tables["events"].columns) == ["id", "amount"]
    for column in ("payload", "at", "list", "token"):
        assert re.search(rf"column {column}\b.* left out", text), column
    assert run("check", str(path), "--data", str(folder))[0] == 0


@pytest.mark.parametrize("make, words", [
    (lambda p: None, "no such folder"),
    (lambda p: p.mkdir(), "holds no <table>.parquet or <table>.csv file"),
    (lambda p: (p.mkdir(), (p / "t.parquet").write_bytes(b"PAR1 not really")), "cannot read it as PARQUET"),
])
def test_bad_folders_exit_2_with_one_line_and_write_nothing(tmp_path, make, words):
    folder = tmp_path / "data"
    make(folder)
    out = tmp_path / "out.model.yaml"
    code, stdout, stderr = run("draft", "--data", str(folder), "-o", str(out))
    assert (code, stdout) == (2, "") and len(stderr.strip().splitlines()) == 1 and words in stderr
    assert not out.exists()


@pytest.mark.parametrize("argv, words", [(["--schema", "main"], "--schema goes with --db or --ddl"),
                                         (["--db", "x.duckdb"], "give one of --db")])
def test_data_with_another_source_or_a_schema_is_a_usage_error(folders, argv, words):
    code, stdout, stderr = run("draft", "--data", str(folders[1]), *argv)
    assert (code, stdout) == (2, "") and words in stderr


def test_the_folder_is_read_through_a_locked_connection(folders, monkeypatch, tmp_path):
    import duckdb

    other = tmp_path / "other.csv"
    other.write_text("a\n1\n")
    refused = []
    real_lock = data.lock

    def spying_lock(connection, readable):
        real_lock(connection, readable)
        assert all(Path(p).parent == Path(os.path.realpath(folders[1])) for p in readable)
        with pytest.raises(duckdb.Error):
            connection.execute(f"SELECT * FROM read_csv('{other}')").fetchall()
        with pytest.raises(duckdb.Error):
            connection.execute("SET enable_external_access = true")
        refused.append(True)

    monkeypatch.setattr(data, "lock", spying_lock)
    columns, files, _ = data.folder_catalog(str(folders[1]))
    assert refused == [True] and set(files) == set(TABLE_COLUMNS) and columns


def test_model_name_from_the_folder(folders):
    code, stdout, _ = run("draft", "--data", str(folders[1]) + os.sep)
    assert code == 0 and "\nmodel: parquet\n" in stdout


def test_property_every_folder_draft_passes_check_and_keeps_every_table():
    """Seeded: random catalogs read as a data folder would be (no constraints) draft to a model with no error,
    every table with a model name drafted, none with a key or a link."""
    rng = random.Random(1414)
    for case in range(200):
        tables = tuple(CatalogTable(t.name, t.columns) for t in random_catalog(rng).tables)
        catalog = Catalog("a folder", tables, constraints=False)
        text = render(draft(catalog, "folder"))
        model, findings = loaded(text)
        assert errors(findings) == [], (case, text)
        assert model.links == {} and all(t.key == () for t in model.tables.values())
        named = {t.name.lower() for t in tables if re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", t.name)}
        assert {n.lower() for n in model.tables} == named, (case, text)


def test_folder_catalog_reader_reads_what_eval_reads(folders):
    catalog = FolderCatalog(str(folders[1])).read()
    assert catalog.constraints is False and catalog.inferred == ()
    assert [t.name for t in catalog.tables] == sorted(TABLE_COLUMNS)
    for table in catalog.tables:
        assert [c for c, _ in table.columns] == list(TABLE_COLUMNS[table.name])
        assert table.primary_key == () and table.foreign_keys == ()
