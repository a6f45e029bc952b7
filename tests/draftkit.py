"""Helpers for the draft and data-aware check tests: draft a DDL text, load and check the result."""

from __future__ import annotations

import io

from modeldiff import check, load
from modeldiff.catalog import DdlCatalog
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
