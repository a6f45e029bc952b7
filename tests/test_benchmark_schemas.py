"""`check` on the key graphs of two public benchmarks: TPC-H and (part of) TPC-DS.

The fixtures are written from memory of the TPC specifications (see their
headers). The ambiguous pairs are derived here by hand for TPC-H and by brute
force with networkx (`all_simple_edge_paths`, independent of modeldiff.graph)
for TPC-DS, and check must find exactly those.
"""

from __future__ import annotations

from dataclasses import replace
from itertools import islice
from pathlib import Path

import pytest

from modeldiff.check import check_model
from modeldiff.load import load_path
from modeldiff.model import Model

FIXTURES = Path(__file__).parent / "fixtures"


@pytest.fixture(scope="module")
def tpch() -> Model:
    result = load_path(FIXTURES / "tpch.model.yaml")
    assert result.findings == ()
    return result.model


@pytest.fixture(scope="module")
def tpcds() -> Model:
    result = load_path(FIXTURES / "tpcds.model.yaml")
    assert result.findings == ()
    return result.model


def ambiguous(findings) -> dict[tuple[str, str], tuple[tuple[str, ...], ...]]:
    """(source, target) -> witness paths, for the ambiguous-paths findings."""
    out = {}
    for f in findings:
        if f.rule == "ambiguous-paths":
            source, target = f.subject.removeprefix("paths.").split("->")
            out[(source, target)] = f.paths
    return out


# --- a reference built without modeldiff.graph ------------------------------------------


def reference_settings(model: Model) -> dict[str, dict[str, str]]:
    """Each setting as {link: flow}: the model's own, and each measure's `via`/`flow` on top.

    semantics.md section 1: `via: [L]` makes L carry filters and puts the other
    links between the same two tables on standby; `flow: {L: off}` removes L.
    Enough for these fixtures, which have no variants and no reports with overrides.
    """
    assert not model.variants and not any(r.overrides for r in model.reports.values())
    default = {name: link.flow for name, link in model.links.items() if not link.standby}
    settings = {"default": default}
    for measure in model.measures.values():
        if not measure.overrides:
            continue
        standby = {name: link.standby for name, link in model.links.items()}
        flows = {name: link.flow for name, link in model.links.items()}
        for used in measure.overrides.via:
            for name, link in model.links.items():
                if link.tables == model.links[used].tables:
                    standby[name] = name not in measure.overrides.via
        flows.update(measure.overrides.flow)
        settings[measure.name] = {n: f for n, f in flows.items() if not standby[n] and f != "off"}
    return settings


def reference_graph(model: Model, flows: dict[str, str]):
    """semantics.md section 2: T -> F for every carrying link, F -> T too when two-way or one-to-one."""
    import networkx as nx

    g = nx.MultiDiGraph()
    g.add_nodes_from(model.tables)
    for name, flow in flows.items():
        link = model.links[name]
        g.add_edge(link.to_table, link.from_table, key=name)
        if flow == "two-way" or link.cardinality == "one-to-one":
            g.add_edge(link.from_table, link.to_table, key=name)
    return g


def brute_force_ambiguous(g) -> set[tuple[str, str]]:
    """Pairs with at least two simple paths, by listing paths (stopping at the second)."""
    import networkx as nx

    pairs = set()
    for s in g.nodes:
        for x in g.nodes:
            if s != x and len(list(islice(nx.all_simple_edge_paths(g, s, x), 2))) == 2:
                pairs.add((s, x))
    return pairs


def is_walk(model: Model, flows: dict[str, str], source: str, path: tuple[str, ...], target: str) -> bool:
    """Whether `path` (link names) is a simple path from `source` to `target` in the setting."""
    here, seen = source, {source}
    for name in path:
        if name not in flows:
            return False
        link = model.links[name]
        if link.to_table == here:
            here = link.from_table
        elif link.from_table == here and (flows[name] == "two-way" or link.cardinality == "one-to-one"):
            here = link.to_table
        else:
            return False
        if here in seen:
            return False
        seen.add(here)
    return here == target and len(path) > 0


# --- TPC-H (specification clause 1.4.2, keys and foreign keys, from memory) -------------

# The foreign keys of clause 1.4.2, all many-to-one, each filter flowing from the
# referenced table to the referencing one:
#   region <- nation <- supplier <- partsupp <- lineitem
#                    <- customer <- orders   <- lineitem
#   part <- partsupp;  part <- lineitem;  supplier <- lineitem
# lineitem references part and supplier directly AND through partsupp (its
# (l_partkey, l_suppkey) is partsupp's key): part and supplier each reach it twice.
# nation reaches lineitem through supplier (directly and via partsupp) and through
# customer/orders; region sits above nation, so it inherits the same routes.
# No other pair has two routes: every other table has one referencing chain to
# each table below it (orders, customer and partsupp reach lineitem once each).
TPCH_AMBIGUOUS = {("part", "lineitem"), ("supplier", "lineitem"), ("nation", "lineitem"), ("region", "lineitem")}


def test_tpch_checks_without_errors(tpch):
    assert [f for f in check_model(tpch) if f.severity == "error"] == []


def test_tpch_has_exactly_the_ambiguous_pairs_of_its_key_graph(tpch):
    findings = check_model(tpch)
    assert {f.rule for f in findings} == {"ambiguous-paths"}
    assert set(ambiguous(findings)) == TPCH_AMBIGUOUS


def test_tpch_ambiguous_pairs_agree_with_brute_force(tpch):
    assert brute_force_ambiguous(reference_graph(tpch, reference_settings(tpch)["default"])) == TPCH_AMBIGUOUS


def test_tpch_witnesses_are_two_real_distinct_link_sequences(tpch):
    flows = reference_settings(tpch)["default"]
    for (source, target), paths in ambiguous(check_model(tpch)).items():
        assert len(paths) == 2 and paths[0] != paths[1]
        assert all(is_walk(tpch, flows, source, p, target) for p in paths), (source, target, paths)


def test_tpch_part_witnesses_are_direct_and_through_partsupp(tpch):
    assert set(ambiguous(check_model(tpch))[("part", "lineitem")]) == {
        ("lineitem_part",), ("partsupp_part", "lineitem_partsupp")}


def test_tpch_without_the_partsupp_link_keeps_only_the_nation_routes(tpch):
    # The twin: drop lineitem -> partsupp and part/supplier reach lineitem once;
    # nation and region still reach it through supplier and through customer.
    links = {n: l for n, l in tpch.links.items() if n != "lineitem_partsupp"}
    assert set(ambiguous(check_model(replace(tpch, links=links)))) == {("nation", "lineitem"), ("region", "lineitem")}


# --- TPC-DS (specification clause 2, keys and foreign keys, from memory) ----------------


# What remains ambiguous as shipped (the fixture's header explains the choices):
# - the customer's current address, demographics and household (and the income band
#   above the household) reach the sales both directly (as at the sale) and through
#   customer (as now);
# - store_returns references the sale line in store_sales as well as the sale's own
#   dimensions, so every dimension both reference reaches the returns twice (customer
#   and store included);
# - in a measure's setting that follows a dimension's own date (first sale, store
#   closing, promotion, call centre, catalog page dates) date_dim reaches the facts
#   through that dimension too; following promotion -> item, item reaches the sales
#   through the promotion too.
TPCDS_DEFAULT = {
    (dim, fact)
    for dim in ("customer_address", "customer_demographics", "household_demographics", "income_band")
    for fact in ("store_sales", "store_returns", "catalog_sales")
} | {(dim, "store_returns") for dim in ("customer", "date_dim", "item", "store", "time_dim")}
TPCDS_MEASURE_SETTINGS = {("date_dim", "store_sales"), ("date_dim", "catalog_sales"), ("item", "store_sales"),
                          ("item", "catalog_sales")}


@pytest.fixture(scope="module")
def tpcds_reference(tpcds):
    """{setting name: (flows, ambiguous pairs)}, by brute force."""
    out = {}
    for name, flows in reference_settings(tpcds).items():
        out[name] = (flows, brute_force_ambiguous(reference_graph(tpcds, flows)))
    return out


def test_tpcds_checks_without_errors(tpcds):
    assert [f for f in check_model(tpcds) if f.severity == "error"] == []


def test_tpcds_has_only_ambiguity_warnings(tpcds):
    # Every standby link is used by a measure, no `via` names a live link, no roles.
    assert {f.rule for f in check_model(tpcds)} == {"ambiguous-paths"}


def test_tpcds_ambiguous_pairs_are_exactly_those_of_brute_force(tpcds, tpcds_reference):
    # Every ambiguous pair of every setting is reported (the contract, docs/meaning.md check rules), including
    # those that no measure of that setting reads (their message says so).
    expected = set().union(*(pairs for _, pairs in tpcds_reference.values()))
    assert expected == TPCDS_DEFAULT | TPCDS_MEASURE_SETTINGS
    assert set(ambiguous(check_model(tpcds))) == expected


def test_tpcds_default_setting_pairs_agree_with_brute_force(tpcds, tpcds_reference):
    # A pair is reported once, for the first setting it is ambiguous in; the default
    # setting comes first, and only its messages name no setting.
    found = {tuple(f.subject.removeprefix("paths.").split("->")) for f in check_model(tpcds)
             if f.rule == "ambiguous-paths" and " setting (" not in f.message}
    assert found == tpcds_reference["default"][1] == TPCDS_DEFAULT


def test_tpcds_witnesses_are_real_paths_in_a_setting_where_the_pair_is_ambiguous(tpcds, tpcds_reference):
    for (source, target), paths in ambiguous(check_model(tpcds)).items():
        assert len(paths) == 2 and paths[0] != paths[1]
        assert any((source, target) in pairs and all(is_walk(tpcds, flows, source, p, target) for p in paths)
                   for flows, pairs in tpcds_reference.values()), (source, target, paths)


@pytest.mark.parametrize("source, target, witnesses", [
    # the customer's current address, and the address at the sale
    ("customer_address", "store_sales", {("store_sales_addr",), ("customer_current_addr", "store_sales_customer")}),
    # a return references the sale line, and the sale's dimensions directly
    ("item", "store_returns", {("store_returns_item",), ("store_sales_item", "store_returns_sale")}),
    ("date_dim", "store_returns", {("store_returns_returned_date",), ("store_sales_sold_date", "store_returns_sale")}),
    ("income_band", "catalog_sales", {("household_demographics_income_band", "catalog_sales_bill_hdemo"),
                                      ("household_demographics_income_band", "customer_current_hdemo",
                                       "catalog_sales_bill_customer")}),
])
def test_tpcds_named_ambiguous_pairs_of_the_default_setting(tpcds, source, target, witnesses):
    finding = next(f for f in check_model(tpcds) if f.subject == f"paths.{source}->{target}")
    assert set(finding.paths) == witnesses
    assert " setting (" not in finding.message


@pytest.mark.parametrize("source, target, measure", [
    ("date_dim", "store_sales", "customers_by_first_sale"),  # the date, and the customer's first sale date
    ("item", "catalog_sales", "promotion_cost_by_item"),     # the item, and the promotion's item
])
def test_tpcds_pairs_ambiguous_only_in_a_measures_setting(tpcds, tpcds_reference, source, target, measure):
    assert (source, target) not in tpcds_reference["default"][1]
    assert (source, target) in tpcds_reference[measure][1]
    assert tpcds.measures[measure].table != target  # the measure counts a dimension, not the sales
    finding = next(f for f in check_model(tpcds) if f.subject == f"paths.{source}->{target}")
    assert f"in measure {measure}'s setting" in finding.message
    assert "no measure computed in this setting reads it yet" in finding.message


def test_tpcds_a_pair_ambiguous_in_a_setting_whose_measure_reads_it_is_reported_at_that_measure(tpcds):
    # The twin: the same setting given to a measure of the sales (customer's first sale date followed by a
    # catalog sales count) makes date_dim reach catalog_sales twice there, and that measure reads it.
    overrides = tpcds.measures["customers_by_first_sale"].overrides
    counted = replace(tpcds.measures["catalog_days_to_ship"], overrides=overrides)
    model = replace(tpcds, measures={**tpcds.measures, "catalog_days_to_ship": counted})
    finding = next(f for f in check_model(model) if f.subject == "paths.date_dim->catalog_sales")
    assert "in measure catalog_days_to_ship's setting" in finding.message
    assert "on measure catalog_days_to_ship" in finding.message and "`flow: {" in finding.message
    assert finding.pos == model.pos("measures.catalog_days_to_ship")


@pytest.mark.parametrize("source, target", [
    ("date_dim", "inventory"),      # inventory meets date_dim once; dimension dates are standby
    ("warehouse", "catalog_sales"),
    ("store", "store_sales"),
    ("customer", "store_sales"),
])
def test_tpcds_pairs_with_one_route_are_not_reported(tpcds, tpcds_reference, source, target):
    assert all((source, target) not in pairs for _, pairs in tpcds_reference.values())
    assert (source, target) not in ambiguous(check_model(tpcds))


def with_link(model: Model, name: str, **changes) -> Model:
    return replace(model, links={**model.links, name: replace(model.links[name], **changes)})


def test_tpcds_second_live_role_playing_date_is_duplicate_live_link(tpcds):
    # Clearing standby on catalog_sales' ship-date link: two live links between
    # catalog_sales and date_dim. The measure that names it in `via` now names a live link,
    # and a date filter reaches catalog_sales twice.
    findings = check_model(with_link(tpcds, "catalog_sales_ship_date", standby=False))
    assert [(f.rule, f.subject) for f in findings if f.severity == "error"] == [
        ("duplicate-live-link", "links.catalog_sales_sold_date")]
    assert ("via-not-standby", "measures.catalog_sales_by_ship_date") in [(f.rule, f.subject) for f in findings]
    assert set(ambiguous(findings)[("date_dim", "catalog_sales")]) == {("catalog_sales_ship_date",),
                                                                       ("catalog_sales_sold_date",)}


def test_tpcds_as_shipped_has_no_duplicate_live_link(tpcds, tpcds_reference):
    findings = check_model(tpcds)
    assert not any(f.rule in ("duplicate-live-link", "via-not-standby") for f in findings)
    # As shipped, date_dim reaches catalog_sales twice only in the settings of measures
    # that follow a dimension's own date, never by the two role-playing links at once.
    assert ("date_dim", "catalog_sales") not in tpcds_reference["default"][1]
    assert set(ambiguous(findings)[("date_dim", "catalog_sales")]) != {("catalog_sales_ship_date",),
                                                                       ("catalog_sales_sold_date",)}


def test_tpcds_second_live_bill_to_ship_to_customer_is_duplicate_live_link(tpcds):
    findings = check_model(with_link(tpcds, "catalog_sales_ship_customer", standby=False))
    assert [(f.rule, f.subject) for f in findings if f.severity == "error"] == [
        ("duplicate-live-link", "links.catalog_sales_ship_customer")]
