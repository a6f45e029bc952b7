"""Build small models for graph tests from a compact description.

    build({"trips_bike": "trips->bikes two-way", "stock_day": "stock_levels->calendar standby"},
          tables="trips:fact stock_levels:fact")

A link is written `FROM->TO` followed by any of: `one-way` `two-way`
`many-to-one` `one-to-one` `many-to-many` `standby` `secure` (security_flow
two-way). Tables named by links are created as dimensions unless `tables`
says `name:kind`. Measures, variants, roles and reports are records built with
the small helpers below.
"""

from __future__ import annotations

from typing import Iterable, Mapping

from modeldiff.model import (Column, Link, Measure, Model, Overrides, Report, Role, Table, Variant,
                             VariantOption)

_LINK_WORDS = {
    "one-way": ("flow", "one-way"),
    "two-way": ("flow", "two-way"),
    "many-to-one": ("cardinality", "many-to-one"),
    "one-to-one": ("cardinality", "one-to-one"),
    "many-to-many": ("cardinality", "many-to-many"),
    "standby": ("standby", True),
    "secure": ("security_flow", "two-way"),
}


def link(name: str, spec: str) -> Link:
    ends, *words = spec.split()
    src, dst = ends.split("->")
    options = {}
    for word in words:
        if word not in _LINK_WORDS:
            raise ValueError(f"unknown word {word!r} in link {name}: {spec!r}")
        key, value = _LINK_WORDS[word]
        options[key] = value
    return Link(name, src, (f"{name}_key",), dst, (f"{dst}_key",), **options)


def ov(via: str | Iterable[str] = (), **flow: str) -> Overrides:
    """Overrides: `ov("trips_end_day", trips_bike="off")`."""
    names = tuple(via.split()) if isinstance(via, str) else tuple(via)
    return Overrides(names, dict(flow))


def measure(name: str, table: str | None = "trips", overrides: Overrides = Overrides()) -> Measure:
    return Measure(name, "count(*)", table, overrides=overrides)


def variant(name: str, default: str, **options: Overrides) -> Variant:
    return Variant(name, default, {o: VariantOption(o, ovr) for o, ovr in options.items()})


def role(name: str, tables: str) -> Role:
    return Role(name, {t: "1 = 1" for t in tables.split()})


def report(name: str, measures: str = "", variant: Mapping[str, str] | None = None,
           overrides: Overrides = Overrides()) -> Report:
    return Report(name, tuple(measures.split()), variant=dict(variant or {}), overrides=overrides)


def build(links: Mapping[str, str] | None = None, tables: str = "", measures: Iterable[Measure] = (),
          variants: Iterable[Variant] = (), roles: Iterable[Role] = (), reports: Iterable[Report] = (),
          name: str = "bikeshare") -> Model:
    built = {n: link(n, spec) for n, spec in (links or {}).items()}
    kinds: dict[str, str] = {}
    for word in tables.split():
        table, _, kind = word.partition(":")
        kinds[table] = kind or "dimension"
    for each in built.values():
        for table in (each.from_table, each.to_table):
            kinds.setdefault(table, "dimension")
    return Model(
        name,
        {t: _table(t, k) for t, k in sorted(kinds.items())},
        built,
        {m.name: m for m in measures},
        {v.name: v for v in variants},
        {r.name: r for r in roles},
        {r.name: r for r in reports},
    )


def _table(name: str, kind: str) -> Table:
    key = f"{name}_key"
    return Table(name, kind, (key,), {key: Column(key, "integer")})
