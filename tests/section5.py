"""A second reading of shared/spec/semantics.md sections 1, 2, 3 and 5, in plain Python over lists of row dicts.

Written from the text of the spec alone, sharing no code with modeldiff.engine,
modeldiff.data or modeldiff.graph: it reads the model's records
(modeldiff.model) and nothing else of the package. It understands the SQL
shapes that tests/randmodel.py writes (predicates `col op literal`,
`IS [NOT] NULL`, `:user`, OR/AND; aggregates count(*), count(col),
count(DISTINCT col), sum, min, max; derived `+ - *` over measure names).

    rows = report(model, data, "rep0", user="u1@example.org")   # [(group values..., measure values...)]

Choices where the spec's text leaves room (each matching docs/evaluation.md):
- the values a `by` column takes for one measure: those of its table's rows
  visible in that measure's total (report filters and role, no group
  filter), in the measure's setting;
- a combination is a row when some base measure (in its own setting) has it
  among its own values and a visible row of its home table there, before the
  measure's own `where`; every measure shows its value in every row;
- a report without `by` has one row, even over no data;
- link values match with SQL's `=`: NULL matches nothing;
- a report's condition (`having`, shapes as predicates, over measure names)
  is tested on each row of the answer, `(no match)` included, with the values
  of the measures it names there; only true keeps the row. Measures it alone
  names take no part in which combinations are rows nor in whether the
  `(no match)` row exists; a report without `by` keeps its one row.
"""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass
from typing import Any, Iterable

NO_MATCH = "(no match)"


# --- section 1: settings ---------------------------------------------------------------------------------


@dataclass
class LinkState:
    carries: bool
    flow: str


def followed(overrides) -> tuple[str, ...]:
    """The links an override layer makes carry filters (`via`, first spelled `use`)."""
    return tuple(getattr(overrides, "via", ()) or getattr(overrides, "use", ()) or ())


def layer(overrides) -> tuple:
    """An override layer as a hashable (links followed, ((link, flow), ...))."""
    return (followed(overrides), tuple(sorted(overrides.flow.items())))


def setting(model, layers: Iterable) -> dict[str, LinkState]:
    """Link name -> whether it carries filters and its flow, after applying override layers in order."""
    state = {n: LinkState(not l.standby, l.flow) for n, l in model.links.items()}
    # link -> whether it carried filters before a layer set it `off`: a later flow turns it back to that,
    # so a standby link no layer named in `via` stays on standby ("carries no filter unless ... named in
    # via", model-format.md; seed 538 of the section 5 campaign made one carry)
    switched_off: dict[str, bool] = {}
    for via, flow in layers:
        for name in via:
            if name not in model.links:
                continue
            state[name].carries = True
            switched_off.pop(name, None)
            link = model.links[name]
            for other, o in model.links.items():  # every other link between the two tables goes on standby
                if other not in via and o.tables == link.tables:
                    state[other].carries = False
                    switched_off.pop(other, None)  # on standby now: a later flow does not bring it back
        for name, value in flow:
            if name not in model.links:
                continue
            if value == "off":
                switched_off.setdefault(name, state[name].carries)
                state[name].carries = False
            else:
                state[name].flow = value
                if name in switched_off:
                    state[name].carries = switched_off.pop(name)
    return state


# --- sections 2 and 3: graphs -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Arc:
    """A filter on `src` restricts `dst`: a dst row is kept when its dst_cols values appear among src's src_cols."""

    src: str
    dst: str
    src_cols: tuple[str, ...]
    dst_cols: tuple[str, ...]


def flow_arcs(model, state: dict[str, LinkState]) -> list[Arc]:
    arcs = []
    for name, link in model.links.items():
        if not state[name].carries:
            continue
        arcs.append(Arc(link.to_table, link.from_table, link.to_columns, link.from_columns))
        if state[name].flow == "two-way" or link.cardinality == "one-to-one":
            arcs.append(Arc(link.from_table, link.to_table, link.from_columns, link.to_columns))
    return arcs


def security_arcs(model) -> list[Arc]:
    arcs = []
    for link in model.links.values():
        if link.standby:
            continue
        arcs.append(Arc(link.to_table, link.from_table, link.to_columns, link.from_columns))
        if link.cardinality == "one-to-one" or (link.flow == "two-way" and link.security_flow == "two-way"):
            arcs.append(Arc(link.from_table, link.to_table, link.from_columns, link.to_columns))
    return arcs


# --- SQL shapes ---------------------------------------------------------------------------------------------

_ATOM = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*(?:(IS\s+NOT\s+NULL|IS\s+NULL)|(=|<>|!=|>=|<=|>|<)\s*"
                   r"('(?:[^']|'')*'|-?\d+(?:\.\d+)?|:user))\s*$", re.IGNORECASE)


def _atom(text: str, row: dict, user: str | None) -> bool | None:
    m = _ATOM.match(text)
    if m is None:
        raise ValueError(f"section5: predicate shape not understood: {text!r}")
    column, null_test, op, literal = m.groups()
    value = row[column]
    if null_test:
        return (value is None) if "NOT" not in null_test.upper() else (value is not None)
    if literal == ":user":
        other: Any = user
    elif literal.startswith("'"):
        other = literal[1:-1].replace("''", "'")
    else:
        other = float(literal) if "." in literal else int(literal)
    if value is None or other is None:
        return None
    return {"=": value == other, "<>": value != other, "!=": value != other, ">=": value >= other,
            "<=": value <= other, ">": value > other, "<": value < other}[op]


def holds(predicate: str, row: dict, user: str | None = None) -> bool:
    """SQL's three-valued logic: only a true condition keeps the row."""
    return _truth(predicate, row, user) is True


def _truth(predicate: str, row: dict, user: str | None) -> bool | None:
    parts = re.split(r"\s+OR\s+", predicate, flags=re.IGNORECASE)
    if len(parts) > 1:
        values = [_truth(p, row, user) for p in parts]
        return True if True in values else (None if None in values else False)
    parts = re.split(r"\s+AND\s+", predicate, flags=re.IGNORECASE)
    if len(parts) > 1:
        values = [_truth(p, row, user) for p in parts]
        return False if False in values else (None if None in values else True)
    text = predicate.strip()
    if text.startswith("(") and text.endswith(")"):
        return _truth(text[1:-1], row, user)
    return _atom(text, row, user)


def aggregate(expr: str, rows: list[dict]) -> Any:
    e = re.sub(r"\s+", "", expr.lower())
    if e == "count(*)":
        return len(rows)
    m = re.fullmatch(r"(count|sum|min|max)\((distinct)?([a-z_][a-z0-9_]*)\)", e)
    if m is None:
        raise ValueError(f"section5: aggregate not understood: {expr!r}")
    fn, distinct, column = m.groups()
    values = [r[column] for r in rows if r[column] is not None]
    if distinct:
        values = list(set(values))
    if fn == "count":
        return len(values)
    if not values:
        return None
    return {"sum": sum, "min": min, "max": max}[fn](values)


_TOKEN = re.compile(r"\s*(?:(\d+)|([A-Za-z_][A-Za-z0-9_]*)|(.))")


def derived_value(expr: str, values: dict[str, Any]) -> Any:
    """`+ - *` and parentheses over measure names and integers; NULL in, NULL out."""
    tokens = [t for t in _TOKEN.findall(expr) if any(t)]
    pos = 0

    def peek():
        return tokens[pos] if pos < len(tokens) else ("", "", "")

    def primary():
        nonlocal pos
        number, name, sym = peek()
        pos += 1
        if number:
            return int(number)
        if name:
            return values[name]
        if sym == "(":
            v = additive()
            pos += 1
            return v
        raise ValueError(f"section5: expression not understood: {expr!r}")

    def term():
        nonlocal pos
        v = primary()
        while peek()[2] == "*":
            pos += 1
            w = primary()
            v = None if v is None or w is None else v * w
        return v

    def additive():
        nonlocal pos
        v = term()
        while peek()[2] in ("+", "-"):
            op = peek()[2]
            pos += 1
            w = term()
            v = None if v is None or w is None else (v + w if op == "+" else v - w)
        return v

    return additive()


def measure_names(expr: str, measures) -> list[str]:
    return [w for w in re.findall(r"[A-Za-z_][A-Za-z0-9_]*", expr) if w in measures]


# --- section 5: visible rows --------------------------------------------------------------------------------


def visible(data: dict[str, list[dict]], arcs: list[Arc], filters: dict[str, list], start: dict[str, list[int]],
            user: str | None = None) -> dict[str, list[int]]:
    """V(X) per table, as row indexes: the largest sets meeting rules 1 and 2, by semi-joins until stable.

    `filters`: table -> list of predicates (text) or callables on a row.
    """
    constrained = {t for t, f in filters.items() if f}
    grew = True
    while grew:
        grew = False
        for arc in arcs:
            if arc.src in constrained and arc.dst not in constrained:
                constrained.add(arc.dst)
                grew = True

    def passes(t, row):
        for f in filters.get(t, ()):
            if callable(f):
                if not f(row):
                    return False
            elif not holds(f, row, user):
                return False
        return True

    seen = {t: [i for i in start[t] if passes(t, data[t][i])] for t in constrained}
    changed = True
    while changed:
        changed = False
        for arc in arcs:
            if arc.src not in constrained:
                continue
            allowed = {tuple(data[arc.src][i][c] for c in arc.src_cols) for i in seen[arc.src]}
            kept = []
            for i in seen[arc.dst]:
                mine = tuple(data[arc.dst][i][c] for c in arc.dst_cols)
                if None not in mine and mine in allowed:
                    kept.append(i)
            if len(kept) != len(seen[arc.dst]):
                seen[arc.dst] = kept
                changed = True
    return {t: (seen[t] if t in seen else list(start[t])) for t in data}


def role_rows(model, data, role_name: str | None, user: str | None) -> dict[str, list[int]]:
    everything = {t: list(range(len(rows))) for t, rows in data.items()}
    if role_name is None:
        return everything
    role = model.roles[role_name]
    return visible(data, security_arcs(model), {t: [p] for t, p in role.filters.items()}, everything, user)


# --- measures and reports --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Computation:
    """One base measure in one setting (the override layers in force)."""

    measure: str
    layers: tuple


def _option_layers(model, report) -> tuple[list, dict[str, list[str]]]:
    """The variant options in force (report's choice, else the default): their overrides and `where`."""
    layers, wheres = [], {}
    for vname, variant in model.variants.items():
        chosen = (report.variant.get(vname) if report is not None else None) or variant.default
        option = variant.options.get(chosen)
        if option is None:
            continue
        layers.append(layer(option.overrides))
        for t, p in option.where.items():
            wheres.setdefault(t, []).append(p)
    return layers, wheres


def computations(model, measure: str, layers: tuple) -> list[Computation]:
    """The base measures a measure reaches, each with its composed layers (derived overrides outermost first)."""
    m = model.measures[measure]
    if m.table is not None:
        return [Computation(measure, layers + (layer(m.overrides),))]
    out = []
    for name in measure_names(m.expr, model.measures):
        out += computations(model, name, layers + (layer(m.overrides),))
    return out


def _value(model, measure: str, layers: tuple, base_values: dict[Computation, Any]) -> Any:
    m = model.measures[measure]
    if m.table is not None:
        return base_values[Computation(measure, layers + (layer(m.overrides),))]
    values = {n: _value(model, n, layers + (layer(m.overrides),), base_values) for n in measure_names(m.expr, model.measures)}
    return derived_value(m.expr, values)


def evaluate(model, data: dict[str, list[dict]], measures: list[str], by: list[str], where: dict[str, list[str]],
             front_layers: list, role: str | None, user: str | None = None, having: str | None = None) -> list[tuple]:
    """Rows of a report: group values then measure values; the `(no match)` row last with NO_MATCH values."""
    start = role_rows(model, data, role, user)
    comps = []
    for name in measures:
        for c in computations(model, name, tuple(front_layers)):
            if c not in comps:
                comps.append(c)
    named = measure_names(having, model.measures) if having is not None and by else []
    every = list(comps)  # the shown measures' computations, then those only the condition reads
    for name in named:
        for c in computations(model, name, tuple(front_layers)):
            if c not in every:
                every.append(c)
    arcs = {c: flow_arcs(model, setting(model, c.layers)) for c in every}
    totals = {c: visible(data, arcs[c], where, start, user) for c in every}
    by_cols = [tuple(b.split(".", 1)) for b in by]

    def base_values(rows_of: dict[Computation, list[int]]) -> dict[Computation, Any]:
        out = {}
        for c in every:
            m = model.measures[c.measure]
            rows = [data[m.table][i] for i in rows_of[c]]
            if m.where is not None:
                rows = [r for r in rows if holds(m.where, r, user)]
            out[c] = aggregate(m.expr, rows)
        return out

    def shown(rows_of) -> tuple:
        values = base_values(rows_of)
        return tuple(_value(model, name, tuple(front_layers), values) for name in measures)

    def kept(rows_of) -> bool:
        if not named:
            return True
        values = base_values(rows_of)
        return holds(having, {n: _value(model, n, tuple(front_layers), values) for n in named}, user)

    home = {c: model.measures[c.measure].table for c in every}
    if not by_cols:
        return [shown({c: totals[c][home[c]] for c in comps})]
    own = {c: [{data[t][i][col] for i in totals[c][t]} for t, col in by_cols] for c in comps}
    candidates = []
    for k in range(len(by_cols)):
        values = set().union(*(own[c][k] for c in comps))
        candidates.append(sorted(values, key=lambda v: (v is None, v if v is not None else 0)))
    out = []
    grouped: dict[Computation, set[int]] = {c: set() for c in every}
    for combo in itertools.product(*candidates):
        filters = {t: list(ps) for t, ps in where.items()}
        for (t, col), value in zip(by_cols, combo):
            filters.setdefault(t, []).append(lambda row, col=col, value=value: row[col] == value
                                             if value is not None else row[col] is None)
        rows_of = {c: visible(data, arcs[c], filters, start, user)[home[c]] for c in every}
        if not any(rows_of[c] and all(v in vs for v, vs in zip(combo, own[c])) for c in comps):
            continue
        for c in every:
            grouped[c] |= set(rows_of[c])
        if kept(rows_of):
            out.append(combo + shown(rows_of))
    unmatched = {c: [i for i in totals[c][home[c]] if i not in grouped[c]] for c in every}
    if any(unmatched[c] for c in comps) and kept(unmatched):
        out.append((NO_MATCH,) * len(by_cols) + shown(unmatched))
    return out


def report(model, data: dict[str, list[dict]], name: str, user: str | None = None) -> list[tuple]:
    """The rows of a report of `model` over `data`, per semantics.md section 5."""
    r = model.reports[name]
    option_layers, option_where = _option_layers(model, r)
    where = {t: [p] for t, p in r.where.items()}
    for t, ps in option_where.items():
        where.setdefault(t, []).extend(ps)
    return evaluate(model, data, list(r.measures), list(r.by), where, option_layers + [layer(r.overrides)], r.role, user,
                    r.having)
