"""Output: the same records rendered as text (rich), JSON and Markdown."""

from __future__ import annotations

import os
from typing import TextIO

FORMATS = ("text", "json", "markdown")


def console(stream: TextIO):
    """A rich console for `stream`: styles only on a terminal, none at all (not even bold) under NO_COLOR.

    Off a terminal (CI logs, files, pipes) the width is COLUMNS or 100.
    """
    from rich.console import Console

    width = None
    if not (hasattr(stream, "isatty") and stream.isatty()):
        try:
            width = int(os.environ.get("COLUMNS") or 100)
        except ValueError:
            width = 100
    options = {"color_system": None} if os.environ.get("NO_COLOR") else {}
    return Console(file=stream, width=width, highlight=False, emoji=False, **options)


def print_indented(out, text: str, indent: int) -> None:
    """Print plain `text` (no markup) so that wrapped lines keep the same indentation."""
    import textwrap

    from rich.text import Text

    pad = " " * indent
    width = max(40, (out.width or 100) - 1)
    filled = textwrap.fill(text, width=width, initial_indent=pad, subsequent_indent=pad,
                           break_long_words=False, break_on_hyphens=False)
    out.print(Text(filled), overflow="ignore", crop=False, soft_wrap=True)
