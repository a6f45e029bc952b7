"""Drafting checked against outside sources: the TPC-H and TPC-DS schemas' keys.

The DDL below is written in the tests, FROM MEMORY of the specifications (not
copied from them); table and column names are the specifications'. The
expected link sets are the specifications' foreign keys, as already written
(also from memory) in tests/fixtures/tpch.model.yaml and tpcds.model.yaml.
"""

from __future__ import annotations

from pathlib import Path

from draftkit import draft_ddl, errors, link_pairs, loaded, run

from modeldiff.load import load_path

FIXTURES = Path(__file__).parent / "fixtures"

# TPC Benchmark H Standard Specification, clause 1.4.1 (the eight tables, their
# columns and datatypes) and clause 1.4.2 (primary keys; foreign keys, given
# here as ALTER TABLE statements as the benchmark kit's referential-integrity
# script does). From memory.
TPCH_DDL = """
CREATE TABLE part (p_partkey INTEGER NOT NULL, p_name VARCHAR(55), p_mfgr CHAR(25), p_brand CHAR(10),
  p_type VARCHAR(25), p_size INTEGER, p_container CHAR(10), p_retailprice DECIMAL(15,2), p_comment VARCHAR(23),
  PRIMARY KEY (p_partkey));
CREATE TABLE supplier (s_suppkey INTEGER NOT NULL, s_name CHAR(25), s_address VARCHAR(40), s_nationkey INTEGER,
  s_phone CHAR(15), s_acctbal DECIMAL(15,2), s_comment VARCHAR(101), PRIMARY KEY (s_suppkey));
CREATE TABLE partsupp (ps_partkey INTEGER NOT NULL, ps_suppkey INTEGER NOT NULL, ps_availqty INTEGER,
  ps_supplycost DECIMAL(15,2), ps_comment VARCHAR(199), PRIMARY KEY (ps_partkey, ps_suppkey));
CREATE TABLE customer (c_custkey INTEGER NOT NULL, c_name VARCHAR(25), c_address VARCHAR(40), c_nationkey INTEGER,
  c_phone CHAR(15), c_acctbal DECIMAL(15,2), c_mktsegment CHAR(10), c_comment VARCHAR(117), PRIMARY KEY (c_custkey));
CREATE TABLE orders (o_orderkey INTEGER NOT NULL, o_custkey INTEGER, o_orderstatus CHAR(1),
  o_totalprice DECIMAL(15,2), o_orderdate DATE, o_orderpriority CHAR(15), o_clerk CHAR(15),
  o_shippriority INTEGER, o_comment VARCHAR(79), PRIMARY KEY (o_orderkey));
CREATE TABLE lineitem (l_orderkey INTEGER NOT NULL, l_partkey INTEGER, l_suppkey INTEGER, l_linenumber INTEGER NOT NULL,
  l_quantity DECIMAL(15,2), l_extendedprice DECIMAL(15,2), l_discount DECIMAL(15,2), l_tax DECIMAL(15,2),
  l_returnflag CHAR(1), l_linestatus CHAR(1), l_shipdate DATE, l_commitdate DATE, l_receiptdate DATE,
  l_shipinstruct CHAR(25), l_shipmode CHAR(10), l_comment VARCHAR(44), PRIMARY KEY (l_orderkey, l_linenumber));
CREATE TABLE nation (n_nationkey INTEGER NOT NULL, n_name CHAR(25), n_regionkey INTEGER, n_comment VARCHAR(152),
  PRIMARY KEY (n_nationkey));
CREATE TABLE region (r_regionkey INTEGER NOT NULL, r_name CHAR(25), r_comment VARCHAR(152), PRIMARY KEY (r_regionkey));
ALTER TABLE supplier ADD FOREIGN KEY (s_nationkey) REFERENCES nation (n_nationkey);
ALTER TABLE partsupp ADD FOREIGN KEY (ps_partkey) REFERENCES part (p_partkey);
ALTER TABLE partsupp ADD FOREIGN KEY (ps_suppkey) REFERENCES supplier (s_suppkey);
ALTER TABLE customer ADD FOREIGN KEY (c_nationkey) REFERENCES nation (n_nationkey);
ALTER TABLE orders ADD FOREIGN KEY (o_custkey) REFERENCES customer (c_custkey);
ALTER TABLE lineitem ADD FOREIGN KEY (l_orderkey) REFERENCES orders (o_orderkey);
ALTER TABLE lineitem ADD FOREIGN KEY (l_partkey) REFERENCES part (p_partkey);
ALTER TABLE lineitem ADD FOREIGN KEY (l_suppkey) REFERENCES supplier (s_suppkey);
ALTER TABLE lineitem ADD FOREIGN KEY (l_partkey, l_suppkey) REFERENCES partsupp (ps_partkey, ps_suppkey);
ALTER TABLE nation ADD FOREIGN KEY (n_regionkey) REFERENCES region (r_regionkey);
"""

# TPC-H clause 1.4.2's foreign keys, from memory: ten, one of them composite.
TPCH_FOREIGN_KEYS = {
    ("supplier", ("s_nationkey",), "nation", ("n_nationkey",)),
    ("partsupp", ("ps_partkey",), "part", ("p_partkey",)),
    ("partsupp", ("ps_suppkey",), "supplier", ("s_suppkey",)),
    ("customer", ("c_nationkey",), "nation", ("n_nationkey",)),
    ("orders", ("o_custkey",), "customer", ("c_custkey",)),
    ("lineitem", ("l_orderkey",), "orders", ("o_orderkey",)),
    ("lineitem", ("l_partkey",), "part", ("p_partkey",)),
    ("lineitem", ("l_suppkey",), "supplier", ("s_suppkey",)),
    ("lineitem", ("l_partkey", "l_suppkey"), "partsupp", ("ps_partkey", "ps_suppkey")),
    ("nation", ("n_regionkey",), "region", ("r_regionkey",)),
}


def test_tpch_draft_has_eight_tables_and_exactly_the_specifications_foreign_keys(tmp_path):
    model, findings = loaded(draft_ddl(tmp_path, TPCH_DDL, name="tpch"))
    assert sorted(model.tables) == ["customer", "lineitem", "nation", "orders", "part", "partsupp", "region", "supplier"]
    assert link_pairs(model) == TPCH_FOREIGN_KEYS
    assert all(l.cardinality == "many-to-one" and not l.standby for l in model.links.values())
    # the hand-written fixture (same source, same memory) has the same links, keys and columns
    fixture = load_path(FIXTURES / "tpch.model.yaml").model
    assert link_pairs(fixture) == TPCH_FOREIGN_KEYS
    for name, table in fixture.tables.items():
        assert model.tables[name].key == table.key, name
        assert {c: col.type for c, col in model.tables[name].columns.items()} == \
            {c: col.type for c, col in table.columns.items()}, name
    # kinds differ where the guess cannot know better: partsupp's key is its two foreign keys (bridge, the
    # fixture says dimension), and orders, a fact to the fixture, is referenced by lineitem (dimension)
    assert {n: t.kind for n, t in model.tables.items() if t.kind != fixture.tables[n].kind} == {
        "partsupp": "bridge", "orders": "dimension"}
    # check is clean: no error; the warnings are the key graph's own ambiguities, as for the fixture
    assert errors(findings) == []
    assert {f.rule for f in findings} == {"ambiguous-paths"}


def test_tpch_draft_check_on_the_scale_factor_001_data_is_clean(tmp_path):
    out = tmp_path / "tpch.model.yaml"
    (tmp_path / "tpch.sql").write_text(TPCH_DDL)
    assert run("draft", "--ddl", str(tmp_path / "tpch.sql"), "-o", str(out))[0] == 0
    code, stdout, _ = run("check", "--no-cache", str(out), "--data", str(FIXTURES / "tpch"), "--format", "json")
    import json

    rules = {f["rule"] for f in json.loads(stdout)["findings"]}
    assert code == 0 and rules == {"ambiguous-paths"}, stdout


# TPC Benchmark DS Standard Specification, clause 2 (logical database design),
# a subset: store_sales and catalog_sales with the dimensions they reference
# for dates, times, items, customers and stores. From memory; columns cut to
# the keys, the business ids, the history dates and one measure each.
TPCDS_DDL = """
CREATE TABLE date_dim (d_date_sk INTEGER NOT NULL PRIMARY KEY, d_date_id CHAR(16) NOT NULL, d_date DATE,
  d_year INTEGER, d_moy INTEGER);
CREATE TABLE time_dim (t_time_sk INTEGER NOT NULL PRIMARY KEY, t_time_id CHAR(16) NOT NULL, t_time INTEGER);
CREATE TABLE item (i_item_sk INTEGER NOT NULL PRIMARY KEY, i_item_id CHAR(16) NOT NULL, i_rec_start_date DATE,
  i_rec_end_date DATE, i_item_desc VARCHAR(200), i_current_price DECIMAL(7,2));
CREATE TABLE customer (c_customer_sk INTEGER NOT NULL PRIMARY KEY, c_customer_id CHAR(16) NOT NULL,
  c_first_name CHAR(20), c_last_name CHAR(30));
CREATE TABLE store (s_store_sk INTEGER NOT NULL PRIMARY KEY, s_store_id CHAR(16) NOT NULL, s_rec_start_date DATE,
  s_rec_end_date DATE, s_store_name VARCHAR(50));
CREATE TABLE store_sales (
  ss_sold_date_sk INTEGER REFERENCES date_dim (d_date_sk), ss_sold_time_sk INTEGER REFERENCES time_dim (t_time_sk),
  ss_item_sk INTEGER NOT NULL REFERENCES item (i_item_sk), ss_customer_sk INTEGER REFERENCES customer (c_customer_sk),
  ss_store_sk INTEGER REFERENCES store (s_store_sk), ss_ticket_number INTEGER NOT NULL, ss_sales_price DECIMAL(7,2),
  PRIMARY KEY (ss_item_sk, ss_ticket_number));
CREATE TABLE catalog_sales (
  cs_sold_date_sk INTEGER REFERENCES date_dim (d_date_sk), cs_sold_time_sk INTEGER REFERENCES time_dim (t_time_sk),
  cs_ship_date_sk INTEGER REFERENCES date_dim (d_date_sk),
  cs_bill_customer_sk INTEGER REFERENCES customer (c_customer_sk),
  cs_ship_customer_sk INTEGER REFERENCES customer (c_customer_sk),
  cs_item_sk INTEGER NOT NULL REFERENCES item (i_item_sk), cs_order_number INTEGER NOT NULL,
  cs_sales_price DECIMAL(7,2), PRIMARY KEY (cs_item_sk, cs_order_number));
"""


def test_tpcds_fact_to_dimension_links_with_role_playing_dates(tmp_path):
    model, findings = loaded(draft_ddl(tmp_path, TPCDS_DDL, name="tpcds"))
    assert errors(findings) == []
    fixture = load_path(FIXTURES / "tpcds.model.yaml").model
    # the published fact-to-dimension foreign keys among these tables (the dimensions' own date columns are
    # cut from this subset), with the fixture's (a modeller's) standby choices
    subset = set(model.tables)
    expected = {(l.from_table, l.from_columns, l.to_table, l.to_columns): l.standby for l in fixture.links.values()
                if l.from_table in ("store_sales", "catalog_sales") and l.to_table in subset}
    drafted = {(l.from_table, l.from_columns, l.to_table, l.to_columns): l.standby for l in model.links.values()}
    assert len(expected) == 11
    assert drafted == expected
    # catalog_sales meets date_dim twice and customer twice: one live, the rest standby, each named by its column
    to_dates = {l.name: l.standby for l in model.links.values()
                if (l.from_table, l.to_table) == ("catalog_sales", "date_dim")}
    assert to_dates == {"catalog_sales_cs_sold_date_sk": False, "catalog_sales_cs_ship_date_sk": True}
    assert {l.name: l.standby for l in model.links.values() if l.to_table == "customer"} == {
        "store_sales_ss_customer_sk": False,
        "catalog_sales_cs_bill_customer_sk": False, "catalog_sales_cs_ship_customer_sk": True}
    # the specification's history-keeping dimensions (rec_start_date / rec_end_date, a business id
    # repeating per version) come out as type-2 suggestions, as the fixture declares them
    for name in ("item", "store"):
        drafted_table, declared = model.tables[name], fixture.tables[name]
        assert drafted_table.natural_key == declared.natural_key
        assert (drafted_table.history.valid_from, drafted_table.history.valid_to) == (
            declared.history.valid_from, declared.history.valid_to)
    assert model.tables["date_dim"].history is None and model.tables["customer"].history is None
    assert {n: t.kind for n, t in model.tables.items()} == {
        "date_dim": "dimension", "time_dim": "dimension", "item": "dimension", "customer": "dimension",
        "store": "dimension", "store_sales": "fact", "catalog_sales": "fact"}


# The whole TPC-DS key graph of the fixture (clause 2, from memory: 19 tables of the store and catalog
# channels and inventory, 54 foreign keys), written as DDL with its primary keys, unique columns and foreign
# keys: the draft recovers every foreign key as a link, the fact tables' role-playing links as the fixture
# (a modeller) chose them, and the three history-keeping dimensions as type-2 suggestions.
_SQL_TYPES = {"integer": "INTEGER", "decimal": "DECIMAL(7,2)", "text": "VARCHAR", "date": "DATE",
              "timestamp": "TIMESTAMP", "boolean": "BOOLEAN", "float": "DOUBLE"}


def _fixture_ddl(model) -> str:
    statements = []
    for name, table in model.tables.items():
        items = [f"{c} {_SQL_TYPES[col.type]}" + (" UNIQUE" if col.unique else "") for c, col in table.columns.items()]
        items.append(f"PRIMARY KEY ({', '.join(table.key)})")
        items += [f"FOREIGN KEY ({', '.join(l.from_columns)}) REFERENCES {l.to_table} ({', '.join(l.to_columns)})"
                  for l in model.links.values() if l.from_table == name]
        statements.append(f"CREATE TABLE {name} (\n  " + ",\n  ".join(items) + ");")
    return "\n".join(statements)


def test_tpcds_whole_key_graph_drafts_every_foreign_key_and_one_live_link_per_role_playing_group(tmp_path):
    fixture = load_path(FIXTURES / "tpcds.model.yaml").model
    model, findings = loaded(draft_ddl(tmp_path, _fixture_ddl(fixture), name="tpcds"))
    assert errors(findings) == [] and len(fixture.links) == 54
    assert link_pairs(model) == link_pairs(fixture)
    # several links between one table and date_dim (and customer, its demographics and address): exactly one
    # live, the others standby, each named by its column
    groups: dict[tuple[str, str], list] = {}
    for link in model.links.values():
        groups.setdefault((link.from_table, link.to_table), []).append(link)
    several = {pair: links for pair, links in groups.items() if len(links) > 1}
    assert ("catalog_sales", "date_dim") in several and len(several[("customer", "date_dim")]) == 3
    for pair, links in several.items():
        assert sum(not l.standby for l in links) == 1, pair
        assert all(l.name == f"{l.from_table}_{'_'.join(l.from_columns)}" for l in links), pair
    # the fact tables' links: live and standby as the fixture has them (the first date by column order is the
    # sold date); the dimensions' own date references differ: the fixture puts them all on standby (a
    # modeller's choice so that a date filter reaches the facts one way), the draft keeps one live
    ends = lambda link: (link.from_table, link.from_columns, link.to_table, link.to_columns)  # noqa: E731
    declared = {ends(l): l.standby for l in fixture.links.values()}
    drafted = {ends(l): l.standby for l in model.links.values()}
    facts = {"store_sales", "store_returns", "catalog_sales", "inventory"}
    assert {k: v for k, v in drafted.items() if k[0] in facts} == {k: v for k, v in declared.items() if k[0] in facts}
    assert {k[0] for k in drafted if drafted[k] != declared[k]} == {"call_center", "catalog_page", "customer",
                                                                    "promotion", "store"}
    # kinds: every table as the fixture says but store_sales, which store_returns' foreign key points at
    assert {n: t.kind for n, t in model.tables.items() if t.kind != fixture.tables[n].kind} == {
        "store_sales": "dimension"}
    # the specification's history-keeping dimensions (rec_start_date / rec_end_date) as type-2 suggestions
    assert sorted(n for n, t in model.tables.items() if t.history) == ["call_center", "item", "store"]
    for name in ("call_center", "item", "store"):
        assert model.tables[name].natural_key == fixture.tables[name].natural_key
        assert (model.tables[name].history.valid_from, model.tables[name].history.valid_to) == (
            fixture.tables[name].history.valid_from, fixture.tables[name].history.valid_to)
