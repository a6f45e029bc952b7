"""Synthetic models for benchmarks: a star/snowflake network of the given size, seeded.

`synthetic_model_text(tables=2000, links=3000, measures=22000, roles=100)`
returns format-1 YAML text of about 1.7 MB at the default sizes (one base
measure in four carries a description; every tenth measure is derived). Facts link to several dimensions; some dimensions
link to other dimensions (snowflake); some links are two-way; a few are on
standby and followed by a measure.
"""

from __future__ import annotations

import random
import re


def synthetic_model_text(tables: int = 2000, links: int = 3000, measures: int = 22000, roles: int = 100,
                         seed: int = 11, flip: str | None = None) -> str:
    rng = random.Random(seed)
    n_facts = max(1, tables // 5)
    facts = [f"fact_{i}" for i in range(n_facts)]
    dims = [f"dim_{i}" for i in range(tables - n_facts)]
    out = ["model: synthetic", "format: 1", "tables:"]
    fact_columns: dict[str, list[str]] = {}
    for name in dims:
        out += [f"  {name}:", "    kind: dimension", "    key: id", "    columns:", "      id: integer",
                "      label: text", "      parent_id: integer", "      region: text"]
    link_lines: list[str] = []
    fact_fks: dict[str, list[str]] = {f: [] for f in facts}
    made = 0
    link_names: list[str] = []
    # facts -> dimensions
    while made < links * 3 // 4:
        fact = facts[made % n_facts]
        dim = rng.choice(dims)
        fk = f"{dim}_id"
        if fk in fact_fks[fact]:
            made += 1
            continue
        fact_fks[fact].append(fk)
        name = f"l{made}"
        two_way = rng.random() < 0.03
        link_lines += [f"  {name}:", f"    from: {fact}.{fk}", f"    to: {dim}.id"]
        if two_way:
            link_lines.append("    flow: two-way")
        link_names.append(name)
        made += 1
    # dimension -> dimension (snowflake), parent_id; one per dimension at most
    snow_from = rng.sample(dims, min(len(dims), links - made))
    for dim in snow_from:
        parent = rng.choice(dims)
        if parent == dim:
            continue
        name = f"l{made}"
        link_lines += [f"  {name}:", f"    from: {dim}.parent_id", f"    to: {parent}.id"]
        link_names.append(name)
        made += 1
    for fact in facts:
        cols = ["id: integer", "amount: decimal", "qty: integer"] + [f"{fk}: integer" for fk in fact_fks[fact]]
        out += [f"  {fact}:", "    kind: fact", "    key: id", "    columns:"] + [f"      {c}" for c in cols]
        fact_columns[fact] = fact_fks[fact]
    out.append("links:")
    if flip is not None:
        # flip the named link to two-way (or back) for diff benchmarks
        text = "\n".join(link_lines)
        marker = f"  {flip}:\n"
        start = text.index(marker)
        end = text.find("\n  l", start + len(marker))
        block = text[start:end if end != -1 else len(text)]
        if "flow: two-way" in block:
            new_block = block.replace("\n    flow: two-way", "")
        else:
            new_block = block + "\n    flow: two-way"
        link_lines = (text[:start] + new_block + text[start + len(block):]).split("\n")
    out += link_lines
    out.append("measures:")
    base_names = []
    for i in range(measures):
        fact = facts[i % n_facts]
        if i % 10 == 9 and len(base_names) > 2:
            a, b = rng.sample(base_names[-50:], 2)
            out += [f"  m{i}:", f"    expr: {a} / nullif({b}, 0)"]
        else:
            agg = ("sum(amount)", "sum(qty)", "count(*)", "avg(amount)", "max(qty)")[i % 5]
            out += [f"  m{i}:", f"    table: {fact}", f"    expr: {agg}"]
            if i % 4 == 0:
                out.append(f"    description: Measure {i}")
            base_names.append(f"m{i}")
    out.append("roles:")
    for i in range(roles):
        dim = rng.choice(dims)
        out += [f"  r{i}:", "    filters:", f"      {dim}: region = 'R{i % 7}'"]
    out.append("reports:")
    for i in range(min(200, measures // 10)):
        fact = facts[i % n_facts]
        fks = fact_columns[fact]
        by = f"{fks[0][:-3]}.label" if fks else None
        out += [f"  p{i}:", f"    measures: [m{i * 10 % measures}]"]
        if by:
            out.append(f"    by: [{by}]")
    return "\n".join(out) + "\n"


def first_link_of_fact(text: str) -> str:
    return "l0"


# --- ordinary changes, as a team makes them (benchmarks/history.py, the large-change tests) ---------------


def _flip_link(text: str, rng: random.Random) -> tuple[str, str]:
    found = list(re.finditer(r"^  (l\d+):\n    from: [^\n]+\n    to: [^\n]+(\n    flow: two-way)?$", text, flags=re.M))
    match = rng.choice(found)
    name = match.group(1)
    if match.group(2):
        return text[:match.start(2)] + text[match.end(2):], f"link {name} back to one-way"
    return text[:match.end()] + "\n    flow: two-way" + text[match.end():], f"link {name} made two-way"


def _edit_condition(text: str, rng: random.Random) -> tuple[str, str]:
    found = re.findall(r"^  (m\d+):\n    table: \S+\n    expr: [^\n]+\n", text, flags=re.M)
    name = rng.choice(found)
    match = re.search(rf"^  {name}:\n    table: \S+\n    expr: [^\n]+\n(    where: [^\n]+\n)?", text, flags=re.M)
    where = f"    where: amount > {rng.randint(1, 500)}\n"
    head = match.group(0)[: match.start(1) - match.start()] if match.group(1) else match.group(0)
    return text[:match.start()] + head + where + text[match.end():], f"measure {name}: condition edited"


def _touch_description(text: str, rng: random.Random) -> tuple[str, str]:
    found = [m for m in re.finditer(r"^    description: ([^\n]+)$", text, flags=re.M)]
    match = rng.choice(found)
    return (text[:match.start(1)] + match.group(1) + " (reworded)" + text[match.end(1):],
            "description touched")


EDITS = (_flip_link, _edit_condition, _touch_description)


def ordinary_changes(text: str, count: int, seed: int = 3) -> str:
    """`text` after `count` ordinary changes made in turn (a link flipped, a condition edited, a description touched)."""
    rng = random.Random(seed)
    for number in range(count):
        text, _ = EDITS[number % len(EDITS)](text, rng)
    return text
