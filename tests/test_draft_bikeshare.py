"""The bike-share example drafted from its own generated data, against the hand-written model.

The generated CSV files (modeldiff.demo_data) are loaded into a DuckDB file
created from the warehouse DDL (demo_data.WAREHOUSE_DDL: types, primary keys,
unique business keys, foreign keys), and `modeldiff draft --db` reads its
catalog. The draft comes out equivalent to examples/bikeshare.model.yaml up to
names and comments; what differs, and why, is listed in EXPECTED_DIFFERENCES.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from draftkit import errors, loaded, run

from modeldiff.demo_data import TABLE_COLUMNS, WAREHOUSE_DDL, write_demo_data
from modeldiff.load import load_path

EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "bikeshare.model.yaml"

# What the draft cannot know from a catalog, each with its reason:
EXPECTED_DIFFERENCES = {
    # An access table (who may see what) looks like any other table with a foreign key: the kind is a
    # decision of row security, which no catalog records. The draft guesses fact.
    ("tables.district_access.kind", "access", "fact"),
    # The draft takes a unique constraint as the table's business (natural) key; the hand-written model
    # only marks those columns unique. Both say the column is unique.
    ("tables.bikes.natural_key", (), ("serial_number",)),
    ("tables.parts.natural_key", (), ("part_code",)),
    # Flow is a modelling choice, not a constraint: the hand-written model lets district_access filter
    # districts (two-way, for row security too); every drafted link is one-way.
    ("links.district_access_district.flow", "two-way", "one-way"),
    ("links.district_access_district.security_flow", "two-way", "one-way"),
}
# Names: links are named by their column (`trips_start_day_key` for `trips_start_day`); descriptions,
# measures, variants, roles and reports are not in a catalog and are not drafted.


@pytest.fixture(scope="module")
def warehouse(tmp_path_factory):
    """A DuckDB file holding the generated bike-share data, created from the warehouse DDL."""
    import duckdb

    folder = tmp_path_factory.mktemp("bikeshare")
    write_demo_data(folder)
    path = folder / "bikeshare.duckdb"
    con = duckdb.connect(str(path))
    con.execute(WAREHOUSE_DDL)
    for table in TABLE_COLUMNS:  # parents first: the foreign keys are enforced on insert
        con.execute(f"INSERT INTO {table} SELECT * FROM read_csv('{folder / (table + '.csv')}', header = true)")
    con.close()
    return path


def differences(hand, drafted) -> set[tuple]:
    """What differs between two models, links paired by their columns (names aside)."""
    out = set()
    assert sorted(hand.tables) == sorted(drafted.tables)
    for name, table in hand.tables.items():
        other = drafted.tables[name]
        for field in ("kind", "key", "natural_key", "history"):
            if getattr(table, field) != getattr(other, field):
                out.add((f"tables.{name}.{field}", getattr(table, field), getattr(other, field)))
        mine = {c: (col.type, col.unique) for c, col in table.columns.items()}
        theirs = {c: (col.type, col.unique) for c, col in other.columns.items()}
        if mine != theirs:
            out.add((f"tables.{name}.columns", tuple(mine.items()), tuple(theirs.items())))
    by_ends = {(l.from_table, l.from_columns, l.to_table, l.to_columns): l for l in drafted.links.values()}
    assert len(by_ends) == len(hand.links) == len(drafted.links)
    for name, link in hand.links.items():
        other = by_ends[(link.from_table, link.from_columns, link.to_table, link.to_columns)]
        for field in ("cardinality", "flow", "security_flow", "standby"):
            if getattr(link, field) != getattr(other, field):
                out.add((f"links.{name}.{field}", getattr(link, field), getattr(other, field)))
    return out


def test_draft_from_the_generated_duckdb_data_equals_the_example_up_to_names(warehouse, tmp_path):
    out = tmp_path / "bikeshare.model.yaml"
    assert run("draft", "--db", str(warehouse), "-o", str(out)) == (0, "", "")
    drafted, findings = loaded(out.read_text())
    assert errors(findings) == []
    hand = load_path(EXAMPLE).model
    assert differences(hand, drafted) == EXPECTED_DIFFERENCES
    # the role-playing links of the example come out on standby, named by their columns
    assert {l.name for l in drafted.links.values() if l.standby} == {"trips_end_day_key", "repairs_current_mechanic_key"}


def test_draft_from_the_ddl_equals_the_draft_from_the_database(warehouse, tmp_path):
    script = tmp_path / "bikeshare.sql"
    script.write_text(WAREHOUSE_DDL)
    from_ddl = loaded(run("draft", "--ddl", str(script))[1])[0]
    from_db = loaded(run("draft", "--db", str(warehouse))[1])[0]
    assert dict(from_ddl.tables) == dict(from_db.tables)
    assert dict(from_ddl.links) == dict(from_db.links)


def test_example_and_its_draft_pass_the_data_aware_check_on_the_generated_data(warehouse, tmp_path):
    code, stdout, _ = run("check", "--no-cache", str(EXAMPLE), "--db", str(warehouse))
    assert code == 0 and "no findings" in stdout
    out = tmp_path / "drafted.model.yaml"
    run("draft", "--db", str(warehouse), "-o", str(out))
    code, stdout, _ = run("check", "--no-cache", str(out), "--db", str(warehouse), "--format", "json")
    assert code == 0 and '"data-' not in stdout  # only the standby-unused warnings of a model with no measures


def test_data_aware_check_on_the_generated_csv_folder_is_clean(warehouse):
    code, stdout, _ = run("check", "--no-cache", str(EXAMPLE), "--data", str(warehouse.parent))
    assert code == 0 and "no findings" in stdout


def test_warehouse_ddl_has_the_columns_of_the_generated_data():
    created = dict(re.findall(r"CREATE TABLE (\w+) \((.*?)\);", WAREHOUSE_DDL, re.S))
    assert list(created) == list(TABLE_COLUMNS)
    for table, body in created.items():
        names = [m for m in re.findall(r"(?:^|,)\s*(\w+) (?:INTEGER|VARCHAR|DATE|BOOLEAN|DECIMAL)", body)]
        assert tuple(names) == TABLE_COLUMNS[table], table


def test_demo_runs_the_data_aware_check_on_the_generated_data(capsys):
    from modeldiff import demo

    with demo._generated_data() as data:
        demo._data_check_step(EXAMPLE, data)
    out = capsys.readouterr().out
    assert "3. modeldiff check MODEL --data DIR" in out and "no findings" in out
    assert out.rstrip().endswith("(exit code 0: 0 the data fits the model, 3 it does not)")
