"""The data-aware check: `modeldiff check MODEL --db FILE.duckdb | --data DIR`.

Every rule has a "detects" test and a "silent when absent" twin (the clean
data). The type-2 checks follow Kimball's type-2 technique (The Data
Warehouse Toolkit, slowly changing dimensions, type 2: one row per version,
effective and expiration dates, a current-row indicator; from memory): seeded
histories with deliberate overlaps and gaps, found exactly.
"""

from __future__ import annotations

import json
import random
from datetime import date, timedelta

import pytest
from draftkit import run

from modeldiff.data import RawTables
from modeldiff.datacheck import problems
from modeldiff.load import load_files

MODEL = """\
model: shop
format: 1
tables:
  agent:
    kind: dimension
    key: agent_key
    natural_key: agent_code
    history: {type: 2, valid_from: valid_from, valid_to: valid_to, current: is_current}
    columns: {agent_key: integer, agent_code: text, valid_from: date, valid_to: date, is_current: boolean}
  shop:
    kind: dimension
    key: shop_key
    columns: {shop_key: integer, shop_code: {type: text, unique: true}, name: text}
  sale:
    kind: fact
    key: sale_id
    columns: {sale_id: integer, shop_key: integer, agent_key: integer, amount: decimal}
links:
  sale_shop: {from: sale.shop_key, to: shop.shop_key}
  sale_agent: {from: sale.agent_key, to: agent.agent_key}
"""

TABLES = {
    "agent": ("agent_key INTEGER, agent_code VARCHAR, valid_from DATE, valid_to DATE, is_current BOOLEAN", [
        (1, "A", "2024-01-01", "2024-03-01", False), (2, "A", "2024-03-01", None, True),
        (3, "B", "2024-01-01", None, True)]),
    "shop": ("shop_key INTEGER, shop_code VARCHAR, name VARCHAR", [(1, "N1", "North"), (2, "S1", "South")]),
    "sale": ("sale_id INTEGER, shop_key INTEGER, agent_key INTEGER, amount DECIMAL(10, 2)", [
        (1, 1, 1, 10.5), (2, 2, 2, 20.0), (3, 1, 3, 5.25), (4, None, 3, 1.0)]),
}


def write_db(path, tables=TABLES):
    import duckdb

    con = duckdb.connect(str(path))
    for name, (columns, rows) in tables.items():
        con.execute(f"CREATE TABLE {name} ({columns})")
        if rows:
            marks = "(" + ", ".join("?" for _ in rows[0]) + ")"
            con.execute(f"INSERT INTO {name} VALUES " + ", ".join(marks for _ in rows), [v for r in rows for v in r])
    con.close()
    return path


def changed(**edits):
    """TABLES with some tables replaced: name -> (columns, rows), or None to drop the table."""
    out = dict(TABLES)
    for name, value in edits.items():
        if value is None:
            del out[name]
        else:
            out[name] = value
    return out


def found(tmp_path, tables=TABLES, model_text=MODEL, examples=3):
    model = load_files([("shop.model.yaml", model_text)]).model
    db = write_db(tmp_path / "data.duckdb", tables)
    with RawTables.open(model, db_file=str(db)) as raw:
        return problems(model, raw, examples)


def rules(problems_) -> list[tuple[str, str, int]]:
    return sorted((p.rule, p.subject, p.count) for p in problems_)


def test_clean_data_has_no_finding(tmp_path):
    assert found(tmp_path) == []


def test_missing_table_and_column_and_wrong_type(tmp_path):
    agent_cols, agent_rows = TABLES["agent"]
    tables = changed(shop=None, agent=(agent_cols.replace("agent_code", "code"), agent_rows),
                     sale=("sale_id INTEGER, shop_key INTEGER, agent_key INTEGER, amount VARCHAR",
                           [(1, 1, 1, "10.5")]))
    assert rules(found(tmp_path, tables)) == [
        ("data-column-missing", "tables.agent.columns.agent_code", 1),
        ("data-table-missing", "tables.shop", 1),
        ("data-type-mismatch", "tables.sale.columns.amount", 1),
    ]


def test_key_duplicates_and_nulls(tmp_path):
    sale_cols, sale_rows = TABLES["sale"]
    shop_cols, _ = TABLES["shop"]
    tables = changed(sale=(sale_cols, sale_rows + [(1, 1, 1, 2.0), (1, 2, 1, 3.0), (None, 1, 1, 4.0)]),
                     shop=(shop_cols, [(1, "N1", "North"), (2, "N1", "South")]))
    result = found(tmp_path, tables)
    assert rules(result) == [
        ("data-key-not-unique", "tables.sale.key", 1),
        ("data-key-not-unique", "tables.shop.columns.shop_code", 1),
        ("data-key-null", "tables.sale.key", 1),
    ]
    duplicate = next(p for p in result if p.subject == "tables.sale.key" and p.rule == "data-key-not-unique")
    assert duplicate.examples == ((1,),) and "(3 rows)" in duplicate.message


def test_orphans_per_link_with_rate_and_examples(tmp_path):
    sale_cols, sale_rows = TABLES["sale"]
    tables = changed(sale=(sale_cols, sale_rows + [(5, 9, 1, 1.0), (6, 9, 1, 1.0), (7, 8, 1, 1.0)]))
    result = found(tmp_path, tables)
    assert rules(result) == [("data-orphans", "links.sale_shop", 3)]
    orphans = result[0]
    assert orphans.examples == ((9,), (8,))  # most frequent first
    assert "3 of 7 row(s) of sale (42.9%)" in orphans.message
    assert "1 more have no value there" in orphans.message  # the NULL shop_key is not an orphan


def test_current_flag_disagreeing_with_valid_to(tmp_path):
    agent_cols, _ = TABLES["agent"]
    tables = changed(agent=(agent_cols, [
        (1, "A", "2024-01-01", "2024-03-01", True), (2, "A", "2024-03-01", None, True),
        (3, "B", "2024-01-01", "9999-12-31", True), (4, "C", "2024-01-01", None, False)]))
    result = found(tmp_path, tables)
    assert rules(result) == [("data-current-flag", "tables.agent.history", 2)]
    assert {r[0] for r in result[0].examples} == {1, 4}  # 9999-12-31 is an open version's high date


# --- Kimball's type-2 technique: seeded overlaps and gaps, found exactly -----------------------


def seeded_history(seed: int, inclusive: bool):
    """Versions of 40 members, contiguous; then some starts moved into the previous version (overlap) or
    past its end (gap), and some current flags flipped. Returns (rows, overlaps, gaps, bad_flags)."""
    rng = random.Random(seed)
    rows, overlaps, gaps, flags = [], set(), set(), set()
    key = 0
    for member in range(40):
        start = date(2020, 1, 1) + timedelta(days=rng.randint(0, 300))
        versions = []
        for _ in range(rng.randint(1, 6)):
            length = rng.randint(2, 60)
            versions.append([start, start + timedelta(days=length)])
            start += timedelta(days=length)
        versions[-1][1] = None
        for i in range(1, len(versions)):
            previous_start, previous_end = versions[i - 1]  # its start as planted: the order stays by start
            roll = rng.random()
            if roll < 0.2 and (previous_end - previous_start).days >= 2:  # start inside the previous version
                versions[i][0] = previous_end - timedelta(days=rng.randint(1, (previous_end - previous_start).days - 1))
                overlaps.add((member, i))
            elif roll < 0.4 and (versions[i][1] is None or (versions[i][1] - previous_end).days >= 2):
                limit = 30 if versions[i][1] is None else (versions[i][1] - previous_end).days - 1
                versions[i][0] = previous_end + timedelta(days=rng.randint(1, limit))
                gaps.add((member, i))
        for i, (valid_from, valid_to) in enumerate(versions):
            key += 1
            current = valid_to is None
            if rng.random() < 0.05:
                current = not current
                flags.add(key)
            shown_to = None if valid_to is None else (valid_to - timedelta(days=1) if inclusive else valid_to)
            rows.append((key, f"M{member:03d}", valid_from, shown_to, current))
            if (member, i) in overlaps:
                overlaps.discard((member, i)), overlaps.add(key)
            if (member, i) in gaps:
                gaps.discard((member, i)), gaps.add(key)
    return rows, overlaps, gaps, flags


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("inclusive", [False, True])
def test_type_2_overlaps_and_gaps_found_exactly(tmp_path, seed, inclusive):
    rows, overlaps, gaps, flags = seeded_history(seed, inclusive)
    assert overlaps and gaps and flags  # the seeds plant some of each
    agent_cols, _ = TABLES["agent"]
    sale_cols, _ = TABLES["sale"]
    tables = changed(agent=(agent_cols, rows), sale=(sale_cols, []))
    result = found(tmp_path, tables, examples=10_000)
    by_rule = {p.rule: p for p in result}
    assert set(by_rule) == {"data-history-overlap", "data-history-gap", "data-current-flag"}
    # examples: (natural key, surrogate key, valid_from); all of them with this many examples allowed
    assert {r[1] for r in by_rule["data-history-overlap"].examples} == overlaps
    assert {r[1] for r in by_rule["data-history-gap"].examples} == gaps
    assert by_rule["data-history-overlap"].count == len(overlaps)
    assert by_rule["data-history-gap"].count == len(gaps)
    assert {r[0] for r in by_rule["data-current-flag"].examples} == flags
    assert ("inclusive" if inclusive else "exclusive") in by_rule["data-history-gap"].message


@pytest.mark.parametrize("inclusive", [False, True])
def test_type_2_contiguous_history_is_clean(tmp_path, inclusive):
    rows, overlaps, gaps, flags = seeded_history(4, inclusive)
    # undo the planted problems: rebuild contiguous versions from the same members
    clean, by_member = [], {}
    for row in rows:
        by_member.setdefault(row[1], []).append(row)
    for member, versions in by_member.items():
        versions.sort(key=lambda r: r[0])
        for i, (key, code, _, _, _) in enumerate(versions):
            start = date(2021, 1, 1) + timedelta(days=10 * i)
            end = None if i == len(versions) - 1 else start + timedelta(days=10)
            shown = None if end is None else (end - timedelta(days=1) if inclusive else end)
            clean.append((key, code, start, shown, end is None))
    agent_cols, _ = TABLES["agent"]
    sale_cols, _ = TABLES["sale"]
    assert found(tmp_path, changed(agent=(agent_cols, clean), sale=(sale_cols, []))) == []


# --- the command ---------------------------------------------------------------------------------


def test_cli_check_db_exit_codes_and_json(tmp_path):
    model = tmp_path / "shop.model.yaml"
    model.write_text(MODEL)
    clean = write_db(tmp_path / "clean.duckdb")
    before = clean.read_bytes()
    assert run("check", "--no-cache", str(model), "--db", str(clean))[0] == 0
    assert clean.read_bytes() == before  # read-only
    sale_cols, sale_rows = TABLES["sale"]
    orphan = tmp_path / "orphan"
    orphan.mkdir()
    write_db(orphan / "d.duckdb", changed(sale=(sale_cols, sale_rows + [(9, 7, 1, 1.0)])))
    code, stdout, _ = run("check", "--no-cache", str(model), "--db", str(orphan / "d.duckdb"), "--format", "json")
    assert code == 0 and [(f["rule"], f["count"], f["examples"]) for f in json.loads(stdout)["findings"]] == [
        ("data-orphans", 1, [[7]])]
    assert run("check", "--no-cache", str(model), "--db", str(orphan / "d.duckdb"), "--strict")[0] == 1
    dup = tmp_path / "dup"
    dup.mkdir()
    write_db(dup / "d.duckdb", changed(sale=(sale_cols, sale_rows + [(1, 1, 1, 1.0)])))
    code, stdout, _ = run("check", "--no-cache", str(model), "--db", str(dup / "d.duckdb"))
    assert code == 3 and "data-key-not-unique" in stdout


def test_cli_check_data_folder_csv_values_of_another_type(tmp_path):
    model = tmp_path / "shop.model.yaml"
    model.write_text(MODEL)
    data = tmp_path / "data"
    data.mkdir()
    (data / "agent.csv").write_text("agent_key,agent_code,valid_from,valid_to,is_current\n1,A,2024-01-01,,true\n")
    (data / "shop.csv").write_text("shop_key,shop_code,name\n1,N1,North\n2,S1,South\n")
    (data / "sale.csv").write_text("sale_id,shop_key,agent_key,amount\n1,1,1,10.50\n2,2,1,2.00\n")
    code, stdout, stderr = run("check", "--no-cache", str(model), "--data", str(data))
    assert (code, stderr) == (0, "") and "no findings" in stdout
    (data / "sale.csv").write_text("sale_id,shop_key,agent_key,amount\n1,1,1,ten\n2,2,1,2.00\n3,2,1,n/a\n")
    code, stdout, _ = run("check", "--no-cache", str(model), "--data", str(data), "--format", "json")
    findings = json.loads(stdout)["findings"]
    assert code == 3 and [(f["rule"], f["subject"], f["count"], f["examples"]) for f in findings] == [
        ("data-type-mismatch", "tables.sale.columns.amount", 2, [["ten"], ["n/a"]])]
    assert "2 value(s) of sale.amount are not a decimal (e.g. 'ten', 'n/a')" in findings[0]["message"]


def test_cli_check_data_bad_input_exits_2(tmp_path):
    model = tmp_path / "shop.model.yaml"
    model.write_text(MODEL)
    fake = tmp_path / "fake.duckdb"
    fake.write_text("no")
    for argv in (["--db", str(tmp_path / "missing.duckdb")], ["--db", str(fake)],
                 ["--data", str(tmp_path / "missing")], ["--db", str(fake), "--data", str(tmp_path)]):
        code, stdout, stderr = run("check", "--no-cache", str(model), *argv)
        assert code == 2 and stderr.count("\n") == 1 and "Traceback" not in stderr, (argv, stderr)


def test_data_folder_is_copied_in_then_locked(tmp_path):
    import duckdb

    data = tmp_path / "data"
    data.mkdir()
    (data / "shop.csv").write_text("shop_key,shop_code,name\n1,N1,North\n")
    (tmp_path / "outside.csv").write_text("a\n1\n")
    model = load_files([("shop.model.yaml", MODEL)]).model
    with RawTables.open(model, data_dir=str(data)) as raw:
        assert raw.rows(f"SELECT count(*) FROM {raw.relations['shop']}") == [(1,)]
        assert raw.columns("agent") is None  # no agent file: reported as data-table-missing
        for statement in (f"SELECT * FROM read_csv('{tmp_path / 'outside.csv'}')",
                          "SET enable_external_access = true", "INSTALL httpfs",
                          f"COPY (SELECT 1) TO '{tmp_path / 'written.csv'}'"):
            with pytest.raises(duckdb.Error):
                raw.connection.execute(statement)
    assert not (tmp_path / "written.csv").exists()


def test_a_link_out_of_the_data_folder_is_not_followed(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    (tmp_path / "secret.csv").write_text("shop_key,shop_code,name\n1,N1,North\n")
    (data / "shop.csv").symlink_to(tmp_path / "secret.csv")
    model = load_files([("shop.model.yaml", MODEL)]).model
    with RawTables.open(model, data_dir=str(data)) as raw:
        assert raw.columns("shop") is None
    (data / "shop.csv").unlink()
    (data / "shop.csv").write_text("shop_key,shop_code,name\n1,N1,North\n")
    with RawTables.open(model, data_dir=str(data)) as raw:
        assert raw.columns("shop") is not None
