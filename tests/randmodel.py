"""Seeded random small VALID models, their data, and single random mutations of every change kind.

    case = generate(seed)               # Case(doc, rows): the model as a YAML-ready dict, rows per table
    model = load_model(case.doc)        # through modeldiff.load, as a user's file is read
    kind, new_doc = mutate(case.doc, random.Random(seed))   # one change of one kind (changes.md)
    db = database(model, case.rows)     # modeldiff.data.Database holding the rows

Everything generated passes `modeldiff check` with no error (`errors_of`);
mutations keep the model valid (they pick items nothing else names, or
follow a rename everywhere). The data fits the column types and declared keys
and holds what makes semantics.md section 5 interesting: orphans (foreign key
values with no target), NULLs, repeated natural keys of a type-2 table,
rows of a fact with no dimension and dimension rows with no fact.

Shapes: dimensions (some with a two-column key, reached by two-column
links), type-2 dimensions (surrogate `sk`, natural key `nk`, validity
dates), facts, bridges (two-column key, one link per side), access tables
(`email` filtered by `:user` in roles), random extra links (one-way,
two-way, one-to-one, many-to-many to a non-key column or a natural key,
cycles), standby links followed by measures, variant options and reports,
`flow` overrides, derived measures with their own overrides, roles with
and without `:user`, reports with several `by` columns, `where`, a role,
a variant option and a condition (`having`) over measures they may not show.

Used by tests/test_randmodel.py, tests/test_section5_reference.py,
tests/test_impact_soundness.py and benchmarks/campaigns/impact_soundness.py.
"""

from __future__ import annotations

import copy
import datetime as dt
import functools
import random
from dataclasses import dataclass
from typing import Any, Callable

import yaml

TEXTS = ("x", "y", "z")
USERS = ("u1@example.org", "u2@example.org", "u3@example.org")
AGGREGATES = ("count(*)", "sum(v)", "count(DISTINCT a)", "max(v)", "min(a)", "count(v)")
# predicates over a table's own columns a and v (the evaluator in tests/section5.py reads exactly these shapes)
PREDICATES = ("a = 'x'", "a <> 'y'", "a IS NULL", "a IS NOT NULL", "v >= 1", "v = 0", "v IS NULL", "v <> 2",
              "a = 'z' OR v = 1")
DERIVED = ("{0} + {1}", "{0} - {1}", "2 * {0}", "{0} * {1}")


@dataclass
class Case:
    """One random model (as the dict a YAML file holds) and rows per table (column -> value dicts)."""

    doc: dict
    rows: dict[str, list[dict]]
    seed: int = 0


# --- the key that makes a measure follow a standby link (`via`, first spelled `use`) ------------------------


@functools.lru_cache(maxsize=1)
def via_key() -> str:
    """`via` when the loader reads it as the standby-following key, else `use`."""
    from modeldiff import load

    text = ("model: probe\nformat: 1\ntables:\n  t: {kind: fact, key: k, columns: {k: integer}}\n"
            "  u: {kind: dimension, key: k, columns: {k: integer}}\n"
            "links:\n  l: {from: t.k, to: u.k, standby: true}\n"
            "measures:\n  m: {table: t, expr: count(*), via: [l]}\n")
    try:
        result = load.load_files([("probe.model.yaml", text)])
    except Exception:
        return "use"
    if any(f.severity == "error" for f in result.findings):
        return "use"
    measure = result.model.measures["m"]
    followed = getattr(measure.overrides, "via", None) or getattr(measure.overrides, "use", ())
    return "via" if tuple(followed) == ("l",) else "use"


def _overrides_of(item: dict) -> tuple[list[str], dict[str, str]]:
    """(links followed, flow) of a measure, option or report dict, whichever key spelled them."""
    return list(item.get("via", item.get("use", []))), dict(item.get("flow", {}))


def _set_followed(item: dict, links: list[str]) -> None:
    item.pop("via", None)
    item.pop("use", None)
    if links:
        item[via_key()] = list(links)


# --- generation -------------------------------------------------------------------------------------------


class _Gen:
    def __init__(self, rng: random.Random) -> None:
        self.rng = rng
        self.tables: dict[str, dict] = {}
        self.links: dict[str, dict] = {}
        self.kinds: dict[str, str] = {}  # table -> dimension | dimension2 | type2 | fact | bridge | access
        self.live_pairs: set[frozenset] = set()
        self.counter = 0

    def chance(self, p: float) -> bool:
        return self.rng.random() < p

    # tables
    def add_table(self, name: str, kind: str) -> None:
        self.kinds[name] = kind
        if kind == "dimension":
            t = {"kind": "dimension", "key": "k", "columns": {"k": "integer", "a": "text", "v": "integer"}}
        elif kind == "dimension2":
            t = {"kind": "dimension", "key": ["k", "k2"],
                 "columns": {"k": "integer", "k2": "integer", "a": "text", "v": "integer"}}
        elif kind == "type2":
            t = {"kind": "dimension", "key": "sk", "natural_key": "nk",
                 "history": {"type": 2, "valid_from": "vf", "valid_to": "vt"},
                 "columns": {"sk": "integer", "nk": "integer", "a": "text", "v": "integer", "vf": "date",
                             "vt": "date"}}
        elif kind == "fact":
            t = {"kind": "fact", "key": "id", "columns": {"id": "integer", "a": "text", "v": "integer"}}
        elif kind == "bridge":
            t = {"kind": "bridge", "key": ["p", "q"], "columns": {"p": "integer", "q": "integer", "a": "text",
                                                                  "v": "integer"}}
        else:  # access
            t = {"kind": "access", "key": ["email", "dk"], "columns": {"email": "text", "dk": "integer", "a": "text",
                                                                       "v": "integer"}}
        self.tables[name] = t

    def targets(self, table: str) -> list[tuple[list[str], str]]:
        """(columns, cardinality) a link into `table` may point at."""
        kind = self.kinds[table]
        out: list[tuple[list[str], str]] = [(["v"], "many-to-many")]
        if kind == "dimension":
            out += [(["k"], "many-to-one")] * 3
        elif kind == "dimension2":
            out += [(["k", "k2"], "many-to-one")] * 3
        elif kind == "type2":
            out += [(["sk"], "many-to-one")] * 2 + [(["nk"], "many-to-many")] * 2
        elif kind == "fact":
            out += [(["id"], "many-to-one")]
        return out

    def new_fk(self, table: str, width: int) -> list[str]:
        cols = []
        for _ in range(width):
            self.counter += 1
            name = f"r{self.counter}"
            self.tables[table]["columns"][name] = "integer"
            cols.append(name)
        return cols

    def add_link(self, src: str, dst: str, from_cols: list[str] | None = None, to: tuple | None = None,
                 standby: bool | None = None) -> str:
        to_cols, cardinality = to or self.rng.choice(self.targets(dst))
        if from_cols is None:
            from_cols = self.new_fk(src, len(to_cols))
        name = f"l{len(self.links)}_{src}_{dst}"
        pair = frozenset((src, dst))
        live = pair not in self.live_pairs and src != dst
        if standby is None:
            standby = not live or self.chance(0.12)
        if not standby and not live:
            standby = True
        if not standby:
            self.live_pairs.add(pair)
        if cardinality == "many-to-one" and self.chance(0.12):
            cardinality = "one-to-one"
        link: dict[str, Any] = {"from": _ref(src, from_cols), "to": _ref(dst, to_cols)}
        if cardinality != "many-to-one" or self.chance(0.2):
            link["cardinality"] = cardinality
        flow = "two-way" if self.chance(0.3) else "one-way"
        if flow == "two-way" or self.chance(0.1):
            link["flow"] = flow
        if self.chance(0.3):
            link["security_flow"] = self.rng.choice(("one-way", "two-way"))
        if standby:
            link["standby"] = True
        self.links[name] = link
        return name


def _ref(table: str, columns: list[str]) -> str | list[str]:
    return f"{table}.{columns[0]}" if len(columns) == 1 else [f"{table}.{c}" for c in columns]


def link_ends(link: dict) -> tuple[str, list[str], str, list[str]]:
    """(from table, from columns, to table, to columns) of a link dict."""
    def split(ref):
        refs = [ref] if isinstance(ref, str) else list(ref)
        return refs[0].split(".")[0], [r.split(".")[1] for r in refs]
    f, fc = split(link["from"])
    t, tc = split(link["to"])
    return f, fc, t, tc


def generate(seed: int) -> Case:
    """A random valid model and its data, the same for the same seed."""
    rng = random.Random(seed)
    g = _Gen(rng)
    dims = []
    for i in range(rng.choice((1, 2, 2, 3))):
        name = f"d{i}"
        g.add_table(name, "dimension2" if rng.random() < 0.25 else "dimension")
        dims.append(name)
    if rng.random() < 0.5:
        g.add_table("h0", "type2")
        dims.append("h0")
    facts = []
    for i in range(rng.choice((1, 1, 2))):
        g.add_table(f"f{i}", "fact")
        facts.append(f"f{i}")
    # every fact references one to three dimensions
    for f in facts:
        for d in rng.sample(dims, rng.randint(1, min(3, len(dims)))):
            g.add_link(f, d)
    # snowflake: a dimension may reference another
    for d in dims:
        others = [o for o in dims if o != d]
        if others and rng.random() < 0.35:
            g.add_link(d, rng.choice(others))
    if rng.random() < 0.35:
        g.add_table("b0", "bridge")
        sides = rng.sample(dims + facts, 2) if len(dims + facts) >= 2 else (dims + facts) * 2
        for col, side in zip(("p", "q"), sides):
            to = next(t for t in g.targets(side) if len(t[0]) == 1 and t[1] != "many-to-many") \
                if any(len(t[0]) == 1 and t[1] != "many-to-many" for t in g.targets(side)) else (["v"], "many-to-many")
            g.add_link("b0", side, [col], to)
    if rng.random() < 0.35:
        g.add_table("x0", "access")
        target = rng.choice(dims)
        to = next((t for t in g.targets(target) if len(t[0]) == 1 and t[1] == "many-to-one"), (["v"], "many-to-many"))
        g.add_link("x0", target, ["dk"], to, standby=False if frozenset(("x0", target)) not in g.live_pairs else None)
        if "flow" not in g.links[next(reversed(g.links))] and rng.random() < 0.6:
            g.links[next(reversed(g.links))].update({"flow": "two-way", "security_flow": "two-way"})
    # random extra links (cycles, standby twins, links between facts)
    names = list(g.tables)
    for _ in range(rng.choice((0, 1, 1, 2, 3))):
        g.add_link(rng.choice(names), rng.choice(names))
    # a spare integer column per table that has outgoing links, for key switches
    for link in g.links.values():
        f, fc, _, _ = link_ends(link)
        for i in range(len(fc)):
            g.tables[f]["columns"].setdefault(f"alt{i}", "integer")
    doc: dict[str, Any] = {"model": "rand", "format": 1, "tables": g.tables, "links": g.links}
    doc["measures"] = _measures(rng, g)
    variants = _variants(rng, g)
    if variants:
        doc["variants"] = variants
    roles = _roles(rng, g)
    if roles:
        doc["roles"] = roles
    doc["reports"] = _reports(rng, g, doc)
    # conditions draw from their own stream, so the rest of every seed's model is what it was before them
    _conditions(random.Random(f"having {seed}"), doc)
    if rng.random() < 0.2:  # a table nothing uses yet
        g.add_table("u0", "dimension")
    return Case(doc, make_rows(rng, doc), seed)


def _standby(g_or_doc) -> list[str]:
    links = g_or_doc.links if isinstance(g_or_doc, _Gen) else g_or_doc.get("links", {})
    return sorted(n for n, l in links.items() if l.get("standby"))


def _random_overrides(rng: random.Random, links: dict, item: dict, p_via: float = 0.35, p_flow: float = 0.3) -> None:
    standby = sorted(n for n, l in links.items() if l.get("standby"))
    if standby and rng.random() < p_via:
        _set_followed(item, rng.sample(standby, 1 if len(standby) == 1 or rng.random() < 0.8 else 2))
    if links and rng.random() < p_flow:
        flow = {}
        for name in rng.sample(sorted(links), 1 if len(links) == 1 or rng.random() < 0.7 else 2):
            flow[name] = rng.choice(("one-way", "two-way", "off"))
        item["flow"] = flow


def _measures(rng: random.Random, g: _Gen) -> dict:
    out: dict[str, dict] = {}
    homes = [t for t, k in g.kinds.items() if k == "fact"] * 3 + list(g.tables)
    for i in range(rng.randint(2, 5)):
        m: dict[str, Any] = {"table": rng.choice(homes), "expr": rng.choice(AGGREGATES)}
        if rng.random() < 0.3:
            m["where"] = rng.choice(PREDICATES)
        _random_overrides(rng, g.links, m)
        out[f"m{i}"] = m
    numeric = [n for n, m in out.items() if m["expr"] != "min(a)"]
    for i in range(rng.choice((0, 1, 1, 2)) if numeric else 0):
        names = rng.sample(numeric, 2) if len(numeric) >= 2 else numeric * 2
        m = {"expr": rng.choice(DERIVED).format(*names)}
        _random_overrides(rng, g.links, m, 0.3, 0.35)
        out[f"dm{i}"] = m
        numeric.append(f"dm{i}")
    return out


def _variants(rng: random.Random, g: _Gen) -> dict:
    if rng.random() < 0.55:
        return {}
    other: dict[str, Any] = {}
    _random_overrides(rng, g.links, other, 0.6, 0.4)
    if rng.random() < 0.4:
        other["where"] = {rng.choice(list(g.tables)): rng.choice(PREDICATES)}
    return {"att": {"default": "base", "options": {"base": {}, "other": other}}}


def _roles(rng: random.Random, g: _Gen) -> dict:
    out = {}
    tables = list(g.tables)
    for i in range(rng.choice((0, 1, 1, 2))):
        filters = {}
        for t in rng.sample(tables, 1 if rng.random() < 0.75 else min(2, len(tables))):
            filters[t] = "email = :user" if g.kinds[t] == "access" and rng.random() < 0.8 else rng.choice(PREDICATES)
        out[f"role{i}"] = {"filters": filters}
    return out


def by_columns(doc: dict) -> list[str]:
    out = []
    for t, table in doc["tables"].items():
        for c in table["columns"]:
            if c in ("a", "v", "k", "nk", "k2", "email") or (c.startswith("r") and len(out) % 3 == 0):
                out.append(f"{t}.{c}")
    return out


def _reports(rng: random.Random, g: _Gen, doc: dict) -> dict:
    out = {}
    measures = list(doc["measures"])
    columns = by_columns(doc)
    for i in range(rng.randint(1, 4)):
        r: dict[str, Any] = {"measures": rng.sample(measures, rng.randint(1, min(3, len(measures))))}
        nby = rng.choice((0, 1, 1, 1, 2, 2, 3))
        if nby:
            r["by"] = rng.sample(columns, min(nby, len(columns)))
        if rng.random() < 0.35:
            r["where"] = {t: rng.choice(PREDICATES) for t in rng.sample(list(g.tables), rng.choice((1, 1, 2)))}
        if doc.get("roles") and rng.random() < 0.4:
            r["role"] = rng.choice(sorted(doc["roles"]))
        if doc.get("variants") and rng.random() < 0.5:
            r["variant"] = {"att": rng.choice(("base", "other"))}
        if rng.random() < 0.2:
            _random_overrides(rng, g.links, r, 0.5, 0.5)
        out[f"rep{i}"] = r
    return out


def random_condition(rng: random.Random, doc: dict) -> str:
    """A report condition over the model's measures: comparisons on numeric ones, NULL tests on any."""
    measures = doc["measures"]
    numeric = [n for n, m in measures.items() if m.get("expr") != "min(a)" and "min(a)" not in str(m.get("expr"))]

    def atom() -> str:
        if numeric and rng.random() < 0.7:
            return f"{rng.choice(numeric)} {rng.choice(('>', '>=', '<', '=', '<>'))} {rng.choice((0, 1, 2, 3))}"
        return f"{rng.choice(sorted(measures))} {rng.choice(('IS NULL', 'IS NOT NULL'))}"

    return atom() if rng.random() < 0.7 else f"{atom()} {rng.choice(('OR', 'AND'))} {atom()}"


def _conditions(rng: random.Random, doc: dict) -> None:
    for r in doc["reports"].values():
        if r.get("by") and rng.random() < 0.3:
            r["having"] = random_condition(rng, doc)


# --- data -------------------------------------------------------------------------------------------------


def _value(rng: random.Random, column: str, ctype: str) -> Any:
    if ctype == "text":
        return rng.choice(TEXTS + TEXTS + (None,))
    if ctype == "date":
        return dt.date(2024, 1, 1) + dt.timedelta(days=rng.randint(0, 60))
    if column == "v":
        return rng.choice((0, 1, 1, 2, 2, 3, None))
    return rng.choice((1, 1, 2, 2, 3, 4, 5, None))  # foreign keys: 5 is an orphan for most targets


def make_rows(rng: random.Random, doc: dict) -> dict[str, list[dict]]:
    rows = {}
    for name, table in doc["tables"].items():
        cols = table["columns"]
        kind = table["kind"]
        key = [table["key"]] if isinstance(table["key"], str) else list(table["key"])
        n = rng.choice((0, 2, 3, 3, 4, 4, 5, 6)) if kind != "fact" else rng.choice((0, 3, 4, 5, 6, 7, 8))
        out = []
        if "history" in table:  # type 2: versions of 1-3 members
            sk = 0
            for nk in range(1, rng.randint(2, 4)):
                start = dt.date(2024, 1, 1)
                versions = rng.randint(1, 3)
                for j in range(versions):
                    sk += 1
                    end = start + dt.timedelta(days=rng.randint(5, 30))
                    row = {c: _value(rng, c, t if isinstance(t, str) else t["type"]) for c, t in cols.items()}
                    row.update(sk=sk, nk=nk, vf=start, vt=None if j == versions - 1 else end)
                    out.append(row)
                    start = end
            rows[name] = out
            continue
        seen = set()
        for i in range(n):
            row = {c: _value(rng, c, t if isinstance(t, str) else t["type"]) for c, t in cols.items()}
            if key == ["email", "dk"]:
                row["email"] = rng.choice(USERS)
                row["dk"] = rng.randint(1, 4)
            elif len(key) == 2:
                row[key[0]], row[key[1]] = rng.randint(1, 4), rng.randint(1, 2)
            else:
                row[key[0]] = i + 1
            ident = tuple(row[c] for c in key)
            if ident in seen:
                continue
            seen.add(ident)
            out.append(row)
        rows[name] = out
    return rows


# --- loading, checking, data --------------------------------------------------------------------------------


def to_yaml(doc: dict) -> str:
    return yaml.safe_dump(doc, sort_keys=False, default_flow_style=None, width=200)


def load_model(doc: dict):
    """The Model a user's file holding `doc` gives (raises if the loader finds the file invalid)."""
    from modeldiff import load

    result = load.load_files([("rand.model.yaml", to_yaml(doc))])
    bad = [f for f in result.findings if f.severity == "error"]
    if bad:
        raise ValueError(f"generated model is invalid: {bad[0].message}")
    return result.model


def errors_of(doc: dict) -> list:
    """`check`'s error findings for the model `doc`."""
    from modeldiff import check, load

    result = load.load_files([("rand.model.yaml", to_yaml(doc))])
    return [f for f in check.check_model(result.model, result.findings) if f.severity == "error"]


def tuples(model, rows: dict[str, list[dict]]) -> dict[str, list[tuple]]:
    """Rows as tuples in the model's column order (a column the rows lack is NULL; a type change converts)."""
    out = {}
    for name, table in model.tables.items():
        got = []
        # a table or column renamed by a mutation (NAME_rn) reads the rows of its old name, as a user's renamed file
        for row in rows.get(name, rows.get(name[:-3], ()) if name.endswith("_rn") else ()):
            got.append(tuple(_convert(row.get(c, row.get(c[:-3]) if c.endswith("_rn") else None), col.type)
                             for c, col in table.columns.items()))
        out[name] = got
    return out


def _convert(value: Any, ctype: str) -> Any:
    if value is None:
        return None
    if ctype == "float" and isinstance(value, int):
        return float(value)
    if ctype == "decimal" and isinstance(value, int):
        from decimal import Decimal
        return Decimal(value)
    if ctype == "text" and not isinstance(value, str):
        return str(value)
    return value


def database(model, rows: dict[str, list[dict]]):
    """A modeldiff.data.Database holding the rows (one DuckDB thread: the tables are tiny)."""
    import duckdb

    from modeldiff.data import Database

    connection = duckdb.connect(":memory:", config={"threads": 1})
    return Database.from_rows(model, tuples(model, rows), connection)


def uses_user(doc: dict, role: str | None) -> bool:
    return role is not None and any(":user" in p for p in doc.get("roles", {}).get(role, {}).get("filters", {}).values())


def viewers(doc: dict, role: str | None) -> list[str | None]:
    """Who to evaluate a computation under `role` for: two users when the role reads :user, else nobody."""
    return list(USERS[:2]) if uses_user(doc, role) else [None]


# --- mutations ------------------------------------------------------------------------------------------------


def _references(doc: dict) -> dict[str, set[str]]:
    """Names of links, measures, roles and variants that something else refers to."""
    links: set[str] = set()
    measures: set[str] = set()
    for item in _override_holders(doc):
        followed, flow = _overrides_of(item)
        links |= set(followed) | set(flow)
    for name, m in doc.get("measures", {}).items():
        if "table" not in m:
            measures |= {w for w in _words(m["expr"]) if w in doc["measures"]}
    for r in doc.get("reports", {}).values():
        measures |= set(r["measures"])
        measures |= {w for w in _words(r.get("having", "")) if w in doc["measures"]}
    roles = {r["role"] for r in doc.get("reports", {}).values() if "role" in r}
    return {"links": links, "measures": measures, "roles": roles}


def _words(text: str) -> list[str]:
    import re
    return re.findall(r"[A-Za-z_][A-Za-z0-9_]*", text)


def _override_holders(doc: dict) -> list[dict]:
    out = list(doc.get("measures", {}).values()) + list(doc.get("reports", {}).values())
    for v in doc.get("variants", {}).values():
        out += list(v["options"].values())
    return out


def _tables_used(doc: dict) -> set[str]:
    used = set()
    for link in doc.get("links", {}).values():
        f, _, t, _ = link_ends(link)
        used |= {f, t}
    for m in doc.get("measures", {}).values():
        if "table" in m:
            used.add(m["table"])
    for r in doc.get("reports", {}).values():
        used |= {b.split(".")[0] for b in r.get("by", [])} | set(r.get("where", {}))
    for r in doc.get("roles", {}).values():
        used |= set(r["filters"])
    for v in doc.get("variants", {}).values():
        for o in v["options"].values():
            used |= set(o.get("where", {}))
    return used


def _live_pairs(doc: dict, skip: str | None = None) -> set[frozenset]:
    out = set()
    for name, link in doc.get("links", {}).items():
        if name != skip and not link.get("standby"):
            f, _, t, _ = link_ends(link)
            out.add(frozenset((f, t)))
    return out


class _Skip(Exception):
    """This mutation does not apply to this model."""


def _pick(rng: random.Random, items) -> Any:
    items = sorted(items)
    if not items:
        raise _Skip
    return rng.choice(items)


def _link(rng, doc, want: Callable[[dict], bool] = lambda l: True) -> str:
    return _pick(rng, [n for n, l in doc.get("links", {}).items() if want(l)])


def m_flow_widened(rng, doc):
    name = _link(rng, doc, lambda l: l.get("flow", "one-way") == "one-way")
    doc["links"][name]["flow"] = "two-way"


def m_flow_narrowed(rng, doc):
    name = _link(rng, doc, lambda l: l.get("flow") == "two-way")
    doc["links"][name]["flow"] = "one-way"


def m_security_flow(rng, doc):
    name = _link(rng, doc)
    link = doc["links"][name]
    link["security_flow"] = "one-way" if link.get("security_flow", "one-way") == "two-way" else "two-way"


def m_cardinality(rng, doc):
    def options(link):
        _, _, t, tc = link_ends(link)
        table = doc["tables"][t]
        key = [table["key"]] if isinstance(table["key"], str) else list(table["key"])
        unique = tc == key
        now = link.get("cardinality", "many-to-one")
        return [c for c in (("many-to-one", "one-to-one", "many-to-many") if unique else ("many-to-many",)) if c != now]
    name = _link(rng, doc, lambda l: bool(options(l)))
    doc["links"][name]["cardinality"] = rng.choice(options(doc["links"][name]))


def m_key_switched(rng, doc):
    name = _link(rng, doc)
    link = doc["links"][name]
    f, fc, t, tc = link_ends(link)
    table = doc["tables"][t]
    if "history" in table and tc in (["sk"], ["nk"]) and rng.random() < 0.7:  # surrogate <-> natural key
        if tc == ["sk"]:
            link["to"], link["cardinality"] = f"{t}.nk", "many-to-many"
        else:
            link["to"] = f"{t}.sk"
            link.pop("cardinality", None)
        return
    if rng.random() < 0.5 or len(fc) > 1:  # switch the referencing column(s) to the spare one(s)
        spare = [f"alt{i}" for i in range(len(fc))]
        if spare == fc:
            raise _Skip
        link["from"] = _ref(f, spare)
        return
    if tc != ["v"]:
        link["to"], link["cardinality"] = f"{t}.v", "many-to-many"
        return
    raise _Skip


def m_standby_set(rng, doc):
    name = _link(rng, doc, lambda l: not l.get("standby"))
    doc["links"][name]["standby"] = True


def m_standby_cleared(rng, doc):
    live = _live_pairs(doc)
    def ok(l):
        f, _, t, _ = link_ends(l)
        return l.get("standby") and f != t and frozenset((f, t)) not in live
    name = _link(rng, doc, ok)
    doc["links"][name].pop("standby")


def m_link_added(rng, doc):
    tables = sorted(doc["tables"])
    src, dst = rng.choice(tables), rng.choice(tables)
    g = _Gen(rng)
    g.tables, g.links = doc["tables"], doc["links"]
    g.kinds = {t: _kind_of(doc["tables"][t]) for t in tables}
    g.live_pairs = _live_pairs(doc)
    g.counter = 1000 + len(doc["links"])
    g.add_link(src, dst)


def _kind_of(table: dict) -> str:
    if "history" in table and table["history"].get("type") == 2:
        return "type2"
    if table["kind"] == "access":
        return "access"
    if table["kind"] == "bridge":
        return "bridge"
    if table["kind"] == "fact":
        return "fact"
    return "dimension2" if table["key"] == ["k", "k2"] else "dimension"


def m_link_removed(rng, doc):
    refs = _references(doc)["links"]
    name = _link(rng, doc)
    if name in refs:
        raise _Skip
    del doc["links"][name]


def m_link_renamed(rng, doc):
    name = _link(rng, doc)
    new = name + "_rn"
    doc["links"] = {(new if k == name else k): v for k, v in doc["links"].items()}
    for item in _override_holders(doc):
        followed, flow = _overrides_of(item)
        if name in followed:
            _set_followed(item, [new if x == name else x for x in followed])
        if name in flow:
            item["flow"] = {(new if k == name else k): v for k, v in flow.items()}


def _base_measure(rng, doc) -> str:
    return _pick(rng, [n for n, m in doc["measures"].items() if "table" in m])


def m_measure_expr(rng, doc):
    name = _base_measure(rng, doc)
    m = doc["measures"][name]
    used = any(name in _words(d["expr"]) for d in doc["measures"].values() if "table" not in d) or \
        any(name in _words(r.get("having", "")) for r in doc["reports"].values())  # compared with numbers
    m["expr"] = rng.choice([a for a in AGGREGATES if a != m["expr"] and not (used and a == "min(a)")])


def m_measure_where(rng, doc):
    m = doc["measures"][_base_measure(rng, doc)]
    choices = [p for p in PREDICATES if p != m.get("where")]
    if "where" in m and rng.random() < 0.3:
        del m["where"]
    else:
        m["where"] = rng.choice(choices)


def m_measure_table(rng, doc):
    m = doc["measures"][_base_measure(rng, doc)]
    m["table"] = _pick(rng, [t for t in doc["tables"] if t != m["table"]])


def _change_overrides(rng, doc, item: dict) -> None:
    before = copy.deepcopy(item)
    for _ in range(10):
        item.pop("flow", None)
        _set_followed(item, [])
        _random_overrides(rng, doc["links"], item, 0.5, 0.6)
        if _overrides_of(item) != _overrides_of(before):
            return
    raise _Skip


def m_measure_overrides(rng, doc):
    _change_overrides(rng, doc, doc["measures"][_base_measure(rng, doc)])


def m_derived_overrides(rng, doc):
    name = _pick(rng, [n for n, m in doc["measures"].items() if "table" not in m])
    _change_overrides(rng, doc, doc["measures"][name])


def m_derived_expr(rng, doc):
    name = _pick(rng, [n for n, m in doc["measures"].items() if "table" not in m])
    m = doc["measures"][name]
    names = [w for w in _words(m["expr"]) if w in doc["measures"]]
    shape = rng.choice([d for d in DERIVED if d.format(*(names * 2)[:2]) != m["expr"]])
    m["expr"] = shape.format(*(names * 2)[:2])


def m_measure_cosmetic(rng, doc):
    m = doc["measures"][_base_measure(rng, doc)]
    m["expr"] = m["expr"].upper()


def m_measure_metadata(rng, doc):
    doc["measures"][_base_measure(rng, doc)]["description"] = "changed words"


def m_measure_added(rng, doc):
    doc["measures"]["m_new"] = {"table": _pick(rng, doc["tables"]), "expr": rng.choice(AGGREGATES)}


def m_measure_removed(rng, doc):
    refs = _references(doc)["measures"]
    name = _pick(rng, [n for n in doc["measures"] if n not in refs])
    del doc["measures"][name]


def m_measure_renamed(rng, doc):
    import re
    name = _pick(rng, doc["measures"])
    new = name + "_rn"
    doc["measures"] = {(new if k == name else k): v for k, v in doc["measures"].items()}
    for m in doc["measures"].values():
        if "table" not in m:
            m["expr"] = re.sub(rf"\b{name}\b", new, m["expr"])
    for r in doc.get("reports", {}).values():
        r["measures"] = [new if x == name else x for x in r["measures"]]
        if "having" in r:
            r["having"] = re.sub(rf"\b{name}\b", new, r["having"])


def _variant(rng, doc) -> dict:
    if not doc.get("variants"):
        raise _Skip
    return doc["variants"]["att"]


def m_variant_option(rng, doc):
    v = _variant(rng, doc)
    option = v["options"][rng.choice(sorted(v["options"]))]
    if rng.random() < 0.35:
        before = option.get("where")
        option["where"] = {rng.choice(sorted(doc["tables"])): rng.choice(PREDICATES)}
        if option["where"] == before:
            raise _Skip
    else:
        _change_overrides(rng, doc, option)


def m_variant_default(rng, doc):
    v = _variant(rng, doc)
    v["default"] = "other" if v["default"] == "base" else "base"


def m_variant_added(rng, doc):
    if doc.get("variants"):
        raise _Skip
    other: dict = {}
    _random_overrides(rng, doc["links"], other, 0.8, 0.8)
    doc["variants"] = {"att": {"default": rng.choice(("base", "other")), "options": {"base": {}, "other": other}}}


def _role(rng, doc) -> str:
    return _pick(rng, doc.get("roles", {}))


def m_role_filter(rng, doc):
    name = _role(rng, doc)
    role = doc["roles"][name]
    t = rng.choice(sorted(doc["tables"]))
    if t in role["filters"] and len(role["filters"]) > 1 and rng.random() < 0.3:
        del role["filters"][t]
        return
    choice = ("email = :user" if doc["tables"][t]["kind"] == "access" and rng.random() < 0.5
              else rng.choice(PREDICATES))
    if role["filters"].get(t) == choice:
        raise _Skip
    if rng.random() < 0.5:
        role["filters"] = {t: choice}
    else:
        role["filters"][t] = choice


def m_role_added(rng, doc):
    doc.setdefault("roles", {})["role_new"] = {"filters": {rng.choice(sorted(doc["tables"])): rng.choice(PREDICATES)}}


def m_role_removed(rng, doc):
    refs = _references(doc)["roles"]
    name = _pick(rng, [r for r in doc.get("roles", {}) if r not in refs])
    del doc["roles"][name]


def _report(rng, doc) -> dict:  # noqa: D103
    return doc["reports"][_pick(rng, doc["reports"])]


def m_report_by(rng, doc):
    r = _report(rng, doc)
    columns = by_columns(doc)
    by = list(r.get("by", []))
    if by and rng.random() < 0.4:
        by.pop(rng.randrange(len(by)))
    else:
        extra = [c for c in columns if c not in by]
        if not extra:
            raise _Skip
        by.append(rng.choice(extra))
    if by:
        r["by"] = by
    else:
        r.pop("by", None)


def m_report_where(rng, doc):
    r = _report(rng, doc)
    if r.get("where") and rng.random() < 0.3:
        del r["where"]
        return
    t = rng.choice(sorted(doc["tables"]))
    choice = rng.choice(PREDICATES)
    if r.get("where", {}).get(t) == choice:
        raise _Skip
    r.setdefault("where", {})[t] = choice


def m_report_role(rng, doc):
    r = _report(rng, doc)
    roles = sorted(doc.get("roles", {}))
    choices = [x for x in roles + [None] if x != r.get("role")]
    if not choices:
        raise _Skip
    pick = rng.choice(choices)
    if pick is None:
        if "role" not in r:
            raise _Skip
        del r["role"]
    else:
        r["role"] = pick


def m_report_variant(rng, doc):
    _variant(rng, doc)
    r = _report(rng, doc)
    now = r.get("variant", {}).get("att")
    r["variant"] = {"att": "other" if now in (None, "base") else "base"}


def m_report_measures(rng, doc):
    r = _report(rng, doc)
    extra = [m for m in doc["measures"] if m not in r["measures"]]
    if extra and (len(r["measures"]) == 1 or rng.random() < 0.5):
        r["measures"].append(rng.choice(extra))
    elif len(r["measures"]) > 1:
        r["measures"].pop(rng.randrange(len(r["measures"])))
    else:
        raise _Skip


def m_report_overrides(rng, doc):
    _change_overrides(rng, doc, _report(rng, doc))


def m_report_having(rng, doc):
    """A report's condition added, changed or removed (`report.condition_changed`)."""
    r = _report(rng, doc)
    if not r.get("by"):
        raise _Skip
    if "having" in r and rng.random() < 0.3:
        del r["having"]
        return
    condition = random_condition(rng, doc)
    if r.get("having") == condition:
        raise _Skip
    r["having"] = condition


def m_report_added(rng, doc):
    doc["reports"]["rep_new"] = {"measures": [rng.choice(sorted(doc["measures"]))],
                                 "by": [rng.choice(by_columns(doc))]}


def m_table_kind(rng, doc):
    name = _pick(rng, [t for t, x in doc["tables"].items() if x["kind"] in ("fact", "dimension")])
    table = doc["tables"][name]
    table["kind"] = "dimension" if table["kind"] == "fact" else "fact"


def m_table_key(rng, doc):
    """A key widened by one column, on a table no unique-needing link points at (still unique on the data)."""
    pointed = set()
    for link in doc["links"].values():
        _, _, t, _ = link_ends(link)
        if link.get("cardinality", "many-to-one") != "many-to-many":
            pointed.add(t)
    name = _pick(rng, [t for t, x in doc["tables"].items()
                       if t not in pointed and "history" not in x and isinstance(x["key"], str)])
    table = doc["tables"][name]
    table["key"] = [table["key"], "a"]


def m_history(rng, doc):
    name = _pick(rng, [t for t, x in doc["tables"].items() if x["kind"] == "dimension"])
    table = doc["tables"][name]
    if "history" in table and table["history"]["type"] == 2:
        table["history"] = {"type": 1}
    elif "history" in table:
        del table["history"]
    else:
        table["history"] = {"type": rng.choice((0, 1))}


def m_column_type(rng, doc):
    linked = {f"{t}.v" for link in doc["links"].values() for t, cols in (link_ends(link)[0:2], link_ends(link)[2:4])
              if "v" in cols}
    name = _pick(rng, [t for t in doc["tables"] if f"{t}.v" not in linked])
    doc["tables"][name]["columns"]["v"] = rng.choice(("decimal", "float"))


def m_column_added(rng, doc):
    name = _pick(rng, doc["tables"])
    doc["tables"][name]["columns"]["extra"] = "text"


def m_column_removed(rng, doc):
    name = _pick(rng, [t for t, x in doc["tables"].items() if "alt0" in x["columns"]
                       and not any("alt0" in str(l["from"]) for l in doc["links"].values())
                       and "alt1" not in x["columns"]])
    del doc["tables"][name]["columns"]["alt0"]


def m_table_added(rng, doc):
    doc["tables"]["t_new"] = {"kind": "dimension", "key": "k", "columns": {"k": "integer", "a": "text"}}


def m_table_removed(rng, doc):
    used = _tables_used(doc)
    name = _pick(rng, [t for t in doc["tables"] if t not in used])
    del doc["tables"][name]


def m_role_renamed(rng, doc):
    name = _role(rng, doc)
    doc["roles"] = {(name + "_rn" if k == name else k): v for k, v in doc["roles"].items()}
    for r in doc["reports"].values():
        if r.get("role") == name:
            r["role"] = name + "_rn"


def m_report_removed(rng, doc):
    if len(doc["reports"]) < 2:
        raise _Skip
    del doc["reports"][_pick(rng, doc["reports"])]


def m_report_renamed(rng, doc):
    name = _pick(rng, doc["reports"])
    doc["reports"] = {(name + "_rn" if k == name else k): v for k, v in doc["reports"].items()}


def m_variant_removed(rng, doc):
    _variant(rng, doc)
    del doc["variants"]
    for r in doc["reports"].values():
        r.pop("variant", None)


def m_variant_renamed(rng, doc):
    v = _variant(rng, doc)
    doc["variants"] = {"att_rn": v}
    for r in doc["reports"].values():
        if "variant" in r:
            r["variant"] = {"att_rn": r["variant"]["att"]}


def m_column_renamed(rng, doc):
    name = _pick(rng, [t for t, x in doc["tables"].items() if "alt0" in x["columns"]
                       and not any(f"{t}.alt0" in str(l["from"]) for l in doc["links"].values())])
    columns = doc["tables"][name]["columns"]
    doc["tables"][name]["columns"] = {("alt0_rn" if c == "alt0" else c): t for c, t in columns.items()}


def m_table_renamed(rng, doc):
    import re
    name = _pick(rng, doc["tables"])
    new = name + "_rn"
    pattern = re.compile(rf"^{name}\.")

    def ref(value):
        if isinstance(value, list):
            return [pattern.sub(new + ".", v) for v in value]
        return pattern.sub(new + ".", value)

    def keys(mapping):
        return {(new if k == name else k): v for k, v in mapping.items()}

    doc["tables"] = keys(doc["tables"])
    for link in doc["links"].values():
        link["from"], link["to"] = ref(link["from"]), ref(link["to"])
    for m in doc["measures"].values():
        if m.get("table") == name:
            m["table"] = new
    for r in doc["reports"].values():
        if "by" in r:
            r["by"] = [ref(b) for b in r["by"]]
        if "where" in r:
            r["where"] = keys(r["where"])
    for role in doc.get("roles", {}).values():
        role["filters"] = keys(role["filters"])
    for v in doc.get("variants", {}).values():
        for o in v["options"].values():
            if "where" in o:
                o["where"] = keys(o["where"])


MUTATIONS: dict[str, Callable] = {
    "link.flow_widened": m_flow_widened,
    "link.flow_narrowed": m_flow_narrowed,
    "link.security_flow_changed": m_security_flow,
    "link.cardinality_changed": m_cardinality,
    "link.key_switched": m_key_switched,
    "link.standby_set": m_standby_set,
    "link.standby_cleared": m_standby_cleared,
    "link.added": m_link_added,
    "link.removed": m_link_removed,
    "link.renamed": m_link_renamed,
    "measure.expr": m_measure_expr,
    "measure.where": m_measure_where,
    "measure.table": m_measure_table,
    "measure.overrides": m_measure_overrides,
    "measure.cosmetic": m_measure_cosmetic,
    "measure.metadata": m_measure_metadata,
    "measure.added": m_measure_added,
    "measure.removed": m_measure_removed,
    "measure.renamed": m_measure_renamed,
    "derived.overrides": m_derived_overrides,
    "derived.expr": m_derived_expr,
    "variant.option": m_variant_option,
    "variant.default": m_variant_default,
    "variant.added": m_variant_added,
    "role.filter": m_role_filter,
    "role.added": m_role_added,
    "role.removed": m_role_removed,
    "report.by": m_report_by,
    "report.where": m_report_where,
    "report.role": m_report_role,
    "report.variant": m_report_variant,
    "report.measures": m_report_measures,
    "report.overrides": m_report_overrides,
    "report.having": m_report_having,
    "report.added": m_report_added,
    "table.kind": m_table_kind,
    "table.key": m_table_key,
    "table.history": m_history,
    "column.type": m_column_type,
    "column.added": m_column_added,
    "column.removed": m_column_removed,
    "table.added": m_table_added,
    "table.removed": m_table_removed,
    "table.renamed": m_table_renamed,
    "column.renamed": m_column_renamed,
    "role.renamed": m_role_renamed,
    "report.removed": m_report_removed,
    "report.renamed": m_report_renamed,
    "variant.removed": m_variant_removed,
    "variant.renamed": m_variant_renamed,
}


def mutate(doc: dict, rng: random.Random, kind: str | None = None) -> tuple[str, dict]:
    """(mutation kind, a changed deep copy of `doc`): one change, keeping the model valid.

    With `kind`, only that mutation is tried (raises LookupError if it does
    not apply to this model); otherwise random kinds are tried until one applies.
    """
    kinds = [kind] if kind is not None else list(MUTATIONS)
    order = kinds if kind is not None else rng.sample(kinds, len(kinds))
    for name in order:
        new = copy.deepcopy(doc)
        try:
            MUTATIONS[name](rng, new)
        except _Skip:
            continue
        if new != doc:
            return name, new
    raise LookupError(f"no mutation of kind {kind or 'any'} applies")
