"""Run the `modeldiff` program in-process: (exit code, stdout, stderr)."""

from __future__ import annotations

import io

from modeldiff.cli import main


def run(*args: object) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main([str(arg) for arg in args], stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()
