"""Parsing, normalising and inspecting the SQL expressions of a model.

A model holds SQL in four places: a measure's `expr` and `where`, a role's
filters, a report's `where` and a variant option's `where`. Each is one plain
SQL expression, read in DuckDB's dialect (the engine that data verification
runs on). `:user` is a parameter, the person viewing; DuckDB also spells it
`$user`, and both mean the same. sqlglot reads `:user` differently in some
positions, so each `:name` is read as a plain name and put back as a
placeholder in the tree.

Names are compared the way DuckDB compares them: case-insensitively, quoted or
not. Functions here return names as they were written; compare them with
`.lower()`.

A model's SQL is untrusted: it may hold only what the allow-list of
modeldiff.sqlguard allows (`Facts.refused` names the rest), and it reaches the
engine only through `engine_tree` / `engine_text`, never as the text written.

Every answer is memoised by the text, so a model with tens of thousands of
measures parses each distinct text once. sqlglot is imported on first use:
importing this module is cheap.
"""

from __future__ import annotations

from modeldiff.sql.reading import (  # noqa: F401
    DIALECT,
    EXTRA_AGGREGATES,
    Facts,
    REFUSED_ADVICE,
    SqlError,
    USER_PARAMETER,
    parse,
)
from modeldiff.sql.words import (  # noqa: F401
    installed_sqlglot_version,
    word_snapshot_text,
)
from modeldiff.sql.tree import (  # noqa: F401
    column_refs,
    derived_measure_refs,
    derived_refs_fast,
    engine_text,
    engine_tree,
    facts,
    has_aggregate,
    measure_refs,
    names,
    normal_form,
    render_for_engine,
    same_logic,
    uses_user_parameter,
)

# The package's modules, each importing only those above it:
#   reading  the dialect, SqlError, parse (sqlglot's tree, parameters put aside), error messages, Facts
#   words    the dialect's reserved words and known functions (snapshot or sqlglot)
#   scan     the scanner of derived measures' common shapes (names without parsing)
#   shapes   the exact reader of common shapes' facts (without sqlglot)
#   tree     normal form, facts, references, and the SQL the engine runs
