"""Build whole models in Python for diff tests, and edit them one item at a time.

    base = bikeshare()
    new = edit(base, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"))
    new = drop(new, "reports", "daily_returns")

Records are the ones of modeldiff.model; the helpers only fill in defaults.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Iterable, Mapping

from modeldiff.model import (Column, History, Link, Measure, Model, Overrides, Report, Role, Table, Variant,
                             VariantOption)

_SECTION_OF = {Table: "tables", Link: "links", Measure: "measures", Variant: "variants", Role: "roles", Report: "reports"}


def _names(value: str | Iterable[str]) -> tuple[str, ...]:
    return (value,) if isinstance(value, str) else tuple(value)


def col(type: str, description: str | None = None, unique: bool = False) -> tuple[str, str | None, bool]:
    """A column's long form, for `table(columns={...})`."""
    return (type, description, unique)


def table(name: str, kind: str = "dimension", key: str | Iterable[str] = (), columns: Mapping[str, object] = (),
          natural_key: str | Iterable[str] = (), history: History | None = None, **rest) -> Table:
    """`columns` maps a name to a type or to `col(...)`; `key` defaults to the first column."""
    built = {}
    for column, spec in dict(columns).items():
        type_, description, unique = (spec, None, False) if isinstance(spec, str) else spec
        built[column] = Column(column, type_, description, unique)
    keys = _names(key) if key else tuple(built)[:1]
    return Table(name, kind, keys, built, _names(natural_key), history, **rest)


def link(name: str, src: str, dst: str, **rest) -> Link:
    """`src`/`dst` are "table.column" or "table.a,b" for several columns."""
    from_table, _, from_columns = src.partition(".")
    to_table, _, to_columns = dst.partition(".")
    return Link(name, from_table, tuple(from_columns.split(",")), to_table, tuple(to_columns.split(",")), **rest)


def ov(via: str | Iterable[str] = (), **flow: str) -> Overrides:
    return Overrides(tuple(via.split()) if isinstance(via, str) else tuple(via), dict(flow))


def measure(name: str, expr: str, table: str | None = None, where: str | None = None,
            overrides: Overrides = Overrides(), **meta) -> Measure:
    return Measure(name, expr, table, where, overrides, **meta)


def variant(name: str, default: str, options: Mapping[str, tuple[Overrides, Mapping[str, str]] | Overrides],
            description: str | None = None) -> Variant:
    built = {}
    for option, spec in options.items():
        overrides, where = (spec, {}) if isinstance(spec, Overrides) else spec
        built[option] = VariantOption(option, overrides, dict(where))
    return Variant(name, default, built, description)


def role(name: str, filters: Mapping[str, str], description: str | None = None) -> Role:
    return Role(name, dict(filters), description)


def report(name: str, measures: str | Iterable[str], by: str | Iterable[str] = (), **rest) -> Report:
    if "where" in rest:
        rest["where"] = dict(rest["where"])
    if "variant" in rest:
        rest["variant"] = dict(rest["variant"])
    return Report(name, _names(measures), _names(by), **rest)


def model(*items, name: str = "bikeshare") -> Model:
    sections: dict[str, dict] = {s: {} for s in _SECTION_OF.values()}
    for item in items:
        sections[_SECTION_OF[type(item)]][item.name] = item
    return Model(name, **sections)


def edit(m: Model, *items) -> Model:
    """`m` with each item added, or replacing the item of the same name."""
    sections = {s: dict(getattr(m, s)) for s in _SECTION_OF.values()}
    for item in items:
        sections[_SECTION_OF[type(item)]][item.name] = item
    return replace(m, **sections)


def drop(m: Model, section: str, *names: str) -> Model:
    kept = {k: v for k, v in getattr(m, section).items() if k not in names}
    return replace(m, **{section: kept})


def rename(m: Model, section: str, old: str, new: str) -> Model:
    """Only the item's own name changes; references are left as they were."""
    items = {(new if k == old else k): (replace(v, name=new) if k == old else v) for k, v in getattr(m, section).items()}
    return replace(m, **{section: items})


def bikeshare() -> Model:
    """A small but complete bike-share model: every section, a type-2 dimension, standby links, a variant."""
    return model(
        table("calendar", columns={"day_key": "integer", "date": "date", "week_start": "date"},
              description="One row per day."),
        table("districts", columns={"district_key": "integer", "name": "text",
                                    "region": col("text", "East or West of the river")}),
        table("stations", columns={"station_key": "integer", "name": "text", "district_key": "integer"}),
        table("bikes", columns={"bike_key": "integer", "serial_number": col("text", unique=True), "bike_type": "text"}),
        table("mechanics", key="mechanic_key", natural_key="mechanic_code",
              history=History(2, "valid_from", "valid_to"),
              columns={"mechanic_key": "integer", "mechanic_code": "text", "depot_district_key": "integer",
                       "valid_from": "date", "valid_to": "date"}),
        table("trips", "fact", columns={"trip_key": "integer", "start_day_key": "integer", "end_day_key": "integer",
                                        "start_station_key": "integer", "bike_key": "integer", "fare": "decimal",
                                        "status": "text"}),
        table("repairs", "fact", columns={"repair_key": "integer", "bike_key": "integer", "mechanic_key": "integer",
                                          "mechanic_code": "text", "current_mechanic_key": "integer", "cost": "decimal"}),
        table("district_access", "access", key=("staff_email", "district_key"),
              columns={"staff_email": "text", "district_key": "integer"}),
        link("stations_district", "stations.district_key", "districts.district_key"),
        link("mechanics_depot", "mechanics.depot_district_key", "districts.district_key"),
        link("trips_start_day", "trips.start_day_key", "calendar.day_key"),
        link("trips_end_day", "trips.end_day_key", "calendar.day_key", standby=True),
        link("trips_start_station", "trips.start_station_key", "stations.station_key"),
        link("trips_bike", "trips.bike_key", "bikes.bike_key"),
        link("repairs_bike", "repairs.bike_key", "bikes.bike_key"),
        link("repairs_mechanic", "repairs.mechanic_key", "mechanics.mechanic_key"),
        link("repairs_current_mechanic", "repairs.current_mechanic_key", "mechanics.mechanic_key", standby=True),
        link("district_access_district", "district_access.district_key", "districts.district_key",
             flow="two-way", security_flow="two-way"),
        measure("fare_revenue", "sum(fare)", "trips", "status = 'completed'", unit="EUR", owner="finance"),
        measure("trip_count", "count(*)", "trips"),
        measure("trips_by_end_day", "count(*)", "trips", overrides=ov("trips_end_day")),
        measure("revenue_per_trip", "fare_revenue / nullif(trip_count, 0)"),
        measure("repair_cost", "sum(cost)", "repairs"),
        variant("attribution", "historical", {"historical": ov(), "current": ov("repairs_current_mechanic")},
                description="Whether repairs count for the mechanic's depot then or now."),
        role("east_district_lead", {"districts": "region = 'East'"}),
        role("depot_staff", {"district_access": "staff_email = :user"}),
        report("weekly_fares", ["fare_revenue", "trip_count", "revenue_per_trip"], ["calendar.week_start", "districts.name"],
               owner="finance"),
        report("repair_costs_current", "repair_cost", "districts.name", variant={"attribution": "current"}),
        report("east_overview", ["fare_revenue", "repair_cost"], "districts.name", role="east_district_lead",
               where={"trips": "status <> 'cancelled'"}),
        report("daily_returns", "trips_by_end_day", "calendar.date"),
    )
