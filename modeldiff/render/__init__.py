"""Output: the same records rendered as text (rich), JSON and Markdown."""

from __future__ import annotations

import os
from typing import TextIO

FORMATS = ("text", "json", "markdown")


def console(stream: TextIO):
    """A rich console for `stream`: colour only on a terminal, honouring NO_COLOR/FORCE_COLOR/TERM."""
    from rich.console import Console

    width = None
    if not (hasattr(stream, "isatty") and stream.isatty()):
        width = int(os.environ.get("COLUMNS", "100") or 100)
    return Console(file=stream, width=width, highlight=False, emoji=False)
