"""Helpers for the draft and data-aware check tests: draft a DDL text, load and check the result."""

from __future__ import annotations

import io
import random

from modeldiff import check, load
from modeldiff.catalog import Catalog, CatalogTable, DdlCatalog, ForeignKey
from modeldiff.cli import main
from modeldiff.draft import draft, render


def draft_ddl(tmp_path, ddl: str, name: str = "drafted", schema: str | None = None) -> str:
    """The YAML text `modeldiff draft --ddl` writes for this DDL."""
    path = tmp_path / f"{name}.sql"
    path.write_text(ddl, encoding="utf-8")
    return render(draft(DdlCatalog(str(path), schema).read(), name))


def loaded(text: str):
    """(model, findings of check) of a model's YAML text."""
    result = load.load_files([("drafted.model.yaml", text)])
    return result.model, check.check_model(result.model, result.findings)


def errors(findings) -> list:
    return [f for f in findings if f.severity == "error"]


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def link_pairs(model) -> set[tuple[str, tuple[str, ...], str, tuple[str, ...]]]:
    """Every link as (from table, from columns, to table, to columns), names aside."""
    return {(l.from_table, l.from_columns, l.to_table, l.to_columns) for l in model.links.values()}


# --- random catalogs (the property test and benchmarks/campaigns/draft_campaign.py) ---------------

_TYPES = ("INTEGER", "BIGINT", "VARCHAR", "DECIMAL(9,2)", "DOUBLE", "DATE", "TIMESTAMP", "BOOLEAN", "BLOB")


def random_catalog(rng: random.Random) -> Catalog:
    """A random catalog: tables with keys or not, uniques, foreign keys of any shape, validity dates."""
    tables: list[CatalogTable] = []
    for t in range(rng.randint(1, 7)):
        name = rng.choice([f"t{t}", f"T{t}", f"t {t}", "null" if t == 0 else f"x{t}"])
        columns = [(f"c{i}", rng.choice(_TYPES)) for i in range(rng.randint(1, 6))]
        if rng.random() < 0.3:
            columns += [("valid_from", "DATE"), ("valid_to", "DATE"), (rng.choice(["m_code", "c0"]), "VARCHAR"),
                        ("is_current", "BOOLEAN")]
        names = [c for c, _ in columns]
        pk = tuple(rng.sample(names, rng.randint(1, min(2, len(names))))) if rng.random() < 0.8 else ()
        uniques = tuple(tuple(rng.sample(names, rng.randint(1, min(2, len(names))))) for _ in range(rng.randint(0, 2)))
        tables.append(CatalogTable(name, tuple(columns), pk, uniques))
    built = []
    for table in tables:
        fks = []
        for _ in range(rng.randint(0, 3)):
            target = rng.choice(tables)
            width = rng.randint(1, 2)
            ref = target.primary_key if target.primary_key and rng.random() < 0.8 else tuple(
                c for c, _ in target.columns[:width])
            if len(table.columns) >= len(ref) and ref:
                fks.append(ForeignKey(_referencing(rng, table, target, ref), target.name, ref))
        built.append(CatalogTable(table.name, table.columns, table.primary_key, table.uniques, tuple(fks)))
    return Catalog("random", tuple(built))


def _referencing(rng: random.Random, table: CatalogTable, target: CatalogTable, ref) -> tuple[str, ...]:
    """Columns of `table` to refer to `ref`: mostly of the same types (so the link survives), sometimes any."""
    types = dict(target.columns)
    chosen: list[str] = []
    for column in ref:
        same = [c for c, ty in table.columns if ty == types.get(column) and c not in chosen]
        pool = same if same and rng.random() < 0.8 else [c for c, _ in table.columns if c not in chosen]
        if not pool:
            return tuple(c for c, _ in rng.sample(table.columns, len(ref)))
        chosen.append(rng.choice(pool))
    return tuple(chosen)


def duckdb_ready(catalog: Catalog) -> Catalog:
    """The part of a random catalog DuckDB accepts: names unique but for case, foreign keys onto an earlier
    table's primary key or unique constraint between columns of the same types, no repeated column in a
    constraint."""
    tables: list[CatalogTable] = []
    for table in catalog.tables:
        if table.name.lower() in {t.name.lower() for t in tables}:
            continue
        columns, seen = [], set()
        for name, type_ in table.columns:
            if name.lower() not in seen:
                seen.add(name.lower())
                columns.append((name, type_))
        pk = table.primary_key if len(set(table.primary_key)) == len(table.primary_key) else ()
        uniques = tuple(dict.fromkeys(u for u in table.uniques if len(set(u)) == len(u) and set(u) != set(pk)))
        fks = []
        for fk in table.foreign_keys:
            target = next((t for t in tables if t.name == fk.ref_table), None)
            if target is None or len(set(fk.columns)) != len(fk.columns):
                continue
            mine, theirs = dict(columns), dict(target.columns)
            if any(mine.get(a) != theirs.get(b) for a, b in zip(fk.columns, fk.ref_columns)):
                continue  # DuckDB wants the same types on both sides
            if fk.ref_columns == target.primary_key or fk.ref_columns in target.uniques:
                fks.append(fk)
        tables.append(CatalogTable(table.name, tuple(columns), pk, uniques, tuple(fks)))
    return Catalog(catalog.source, tuple(tables))


def _quoted(names) -> str:
    return ", ".join('"' + n.replace('"', '""') + '"' for n in names)


def catalog_ddl(catalog: Catalog) -> str:
    """CREATE TABLE statements (quoted names, table constraints) for a catalog."""
    statements = []
    for table in catalog.tables:
        items = [f"{_quoted([name])} {type_}" for name, type_ in table.columns]
        if table.primary_key:
            items.append(f"PRIMARY KEY ({_quoted(table.primary_key)})")
        items += [f"UNIQUE ({_quoted(u)})" for u in table.uniques]
        items += [f"FOREIGN KEY ({_quoted(fk.columns)}) REFERENCES {_quoted([fk.ref_table])} ({_quoted(fk.ref_columns)})"
                  for fk in table.foreign_keys]
        statements.append(f"CREATE TABLE {_quoted([table.name])} ({', '.join(items)});")
    return "\n".join(statements) + "\n"


def catalog_facts(catalog: Catalog) -> dict:
    """What a catalog says, independent of how its reader spells types: for comparing two readers."""
    from modeldiff.catalog import model_type, resolve_references

    return {t.name: ([(c, model_type(ty)) for c, ty in t.columns], t.primary_key, set(t.uniques), set(t.foreign_keys))
            for t in resolve_references(catalog).tables}


_DDL_TOKENS = ("(", ")", ",", "REFERENCES", "PRIMARY KEY", "UNIQUE", "FOREIGN KEY", "CONSTRAINT c", "ALTER TABLE",
               "ADD", ";", "x", '"q q"', "INTEGER", "NOT NULL", "CREATE TABLE", "VIEW", "AS SELECT 1", "DEFAULT 1",
               "CHECK (a > 0)", "ADD COLUMN", "--", "/*", "'", "\r", "\u2028")


def mutated_ddl(rng: random.Random, seeds) -> str:
    """A DDL script with a few words deleted, inserted or replaced: mostly broken, sometimes still valid."""
    words = rng.choice(seeds).split(" ")
    for _ in range(rng.randint(1, 4)):
        i = rng.randrange(len(words))
        roll = rng.random()
        if roll < 0.4:
            del words[i]
        elif roll < 0.8:
            words.insert(i, rng.choice(_DDL_TOKENS))
        else:
            words[i] = rng.choice(_DDL_TOKENS)
    return " ".join(words)


def draft_or_refuse(path: str) -> str | None:
    """The draft of a DDL file, or None when it is refused with a ModeldiffError (bad input, exit 2)."""
    from modeldiff.errors import ModeldiffError

    try:
        return render(draft(DdlCatalog(path).read(), "m"))
    except ModeldiffError:
        return None
