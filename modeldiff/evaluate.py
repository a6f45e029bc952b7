"""Evaluate a model's reports on data: `modeldiff eval MODEL [--data DIR|FILE] [--db URL] [--report NAME] [--user EMAIL]`.

Each report becomes one table of numbers: its grouping columns ("table.column")
first, then one column per measure, computed as semantics.md section 5 says
(modeldiff.engine writes the SQL, modeldiff.data runs it on DuckDB). The rows
come from `--data`: a folder holding `<table>.parquet` or `<table>.csv`, or a
DuckDB database file; without it, from each table's `source:` (relative to the
model file). `--db URL` evaluates inside PostgreSQL or Spark instead
(modeldiff.backends; docs/evaluation.md), with `--timeout SECONDS`.

Formats: `text` (a table per report), `json` (one document: for one report
`{"report", "columns", "rows"}`, for several a list of them; numbers as
numbers, decimals as floats, dates as ISO text, NULL as null, the `(no match)`
row's grouping values as the text "(no match)"), `csv` (one report, header
first). Bad input (a model with errors, a missing data file, a value of the
wrong type, data breaking a declared key) is one line on stderr and exit 2;
nothing is printed before everything was computed.
"""

from __future__ import annotations

import math
from datetime import date, datetime, time
from decimal import Decimal
from typing import Any, Sequence, TextIO


FORMATS = ("text", "json", "csv")
NO_MATCH_TEXT = "(no match)"


def read_checked_model(path: str):
    """The model at `path` (a file, a NAME.model/ folder or REV:PATH), refused with its first error finding
    when `check` finds errors."""
    from modeldiff.check import check_model
    from modeldiff.compare import read_model
    from modeldiff.errors import ModeldiffError

    _, result = read_model(path)
    errors = [f for f in check_model(result.model, result.findings, graph_rules=False) if f.severity == "error"]
    if errors:
        first = errors[0]
        where = f"{first.pos}: " if first.pos else ""
        more = f" (and {len(errors) - 1} more error(s))" if len(errors) > 1 else ""
        raise ModeldiffError(f"{where}{first.message}{more}; fix the model first (modeldiff check {path})")
    return result.model


# --- output -----------------------------------------------------------------------------


def json_value(value: Any) -> Any:
    """A JSON-native value: numbers as numbers, decimals as floats, dates as ISO text, NULL as None."""
    from modeldiff.data import NO_MATCH

    if value is NO_MATCH:
        return NO_MATCH_TEXT
    if value is None or isinstance(value, (bool, int, str)):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, Decimal):
        return float(value) if value.is_finite() else None
    if isinstance(value, (date, datetime, time)):
        return value.isoformat()
    return str(value)


def text_value(value: Any) -> str:
    from modeldiff.data import NO_MATCH

    if value is NO_MATCH:
        return NO_MATCH_TEXT
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:.6g}" if math.isfinite(value) else str(value)
    if isinstance(value, (date, datetime, time)):
        return value.isoformat()
    return str(value)


def as_json(results: Sequence) -> str:
    """One document per report, each row on one line; a list of documents for several reports."""
    docs = [_json_doc(r, "  " if len(results) > 1 else "") for r in results]
    if len(docs) == 1:
        return docs[0] + "\n"
    return "[\n  " + ",\n  ".join(docs) + "\n]\n"


def _json_doc(result, pad: str) -> str:
    import json

    def dump(value) -> str:
        return json.dumps(value, allow_nan=False, ensure_ascii=False)

    rows = [dump([json_value(v) for v in row]) for row in result.rows]
    body = f",\n{pad}    ".join(rows)
    rows_text = f"[\n{pad}    {body}\n{pad}  ]" if rows else "[]"
    return (f"{{\n{pad}  \"report\": {dump(result.report)},\n{pad}  \"columns\": {dump(list(result.columns))},\n"
            f"{pad}  \"rows\": {rows_text}\n{pad}}}")


def as_csv(results: Sequence) -> str:
    import csv
    import io

    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    for result in results:
        writer.writerow(result.columns)
        for row in result.rows:
            writer.writerow([_csv_value(v) for v in row])
    return out.getvalue()


def _csv_value(value: Any) -> str:
    if isinstance(value, float):
        return repr(value)
    return text_value(value)


def as_text(results: Sequence, stream: TextIO | None = None) -> str:
    """Each report as a table, for `stream`: on a terminal at its width; anywhere else (a pipe, a file, a
    buffer) at the full width the rows need, so no header or value is cut."""
    import io

    from rich.markup import escape
    from rich.table import Table

    from modeldiff.render import console

    out = console(stream if stream is not None else io.StringIO(), fit_tables=True)
    with out.capture() as captured:
        for n, result in enumerate(results):
            if n:
                out.print()
            out.print(f"[bold]report {escape(result.report)}[/]")
            table = Table()
            for i, column in enumerate(result.columns):
                numeric = i >= result.groups and any(_is_number(row[i]) for row in result.rows)
                table.add_column(escape(column), justify="right" if numeric else "left")
            for row in result.rows:
                table.add_row(*(escape(text_value(v)) for v in row))
            out.print(table)
            rows = len(result.rows)
            out.print(f"{rows} row{'s' if rows != 1 else ''}")
            for note in result.notes:
                out.print(escape(note))
    return captured.get()


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float, Decimal)) and not isinstance(value, bool)
