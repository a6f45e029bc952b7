"""Output: the same records rendered as text (rich), JSON and Markdown."""

from __future__ import annotations

import os
from typing import TextIO, Tuple, Union

FORMATS = ("text", "json", "markdown")


def _plain_width() -> int:
    """The width off a terminal: COLUMNS, else 100."""
    try:
        return int(os.environ.get("COLUMNS") or 100)
    except ValueError:
        return 100


def styled(stream: TextIO) -> bool:
    """Whether text written to `stream` gets styles: a terminal (or FORCE_COLOR), and NO_COLOR unset."""
    if os.environ.get("NO_COLOR"):
        return False
    return bool(os.environ.get("FORCE_COLOR")) or bool(getattr(stream, "isatty", None) and stream.isatty())


# Off a terminal, a table is as wide as its widest row needs: no value cut or wrapped inside a cell.
UNBOUNDED = 1_000_000


def console(stream: TextIO, fit_tables: bool = False):
    """A rich console for `stream`: styles only on a terminal, none at all (not even bold) under NO_COLOR.

    Off a terminal (CI logs, files, pipes) the width is COLUMNS or 100; with
    `fit_tables` it has no bound, so a table takes the full width its rows
    need (headers and values whole, never cut nor wrapped inside a cell) and
    a line of text is never wrapped: for output read by programs and in files
    (eval, verify). On a terminal the terminal's width rules.
    """
    from rich.console import Console

    width = None
    if not (hasattr(stream, "isatty") and stream.isatty()):
        width = UNBOUNDED if fit_tables else _plain_width()
    options = {"color_system": None} if os.environ.get("NO_COLOR") else {}
    return Console(file=stream, width=width, highlight=False, emoji=False, **options)


Part = Union[str, Tuple[str, str]]  # text, or (text, rich style)


def _plain(parts: tuple[Part, ...]) -> str:
    return "".join(p if p.__class__ is str else p[0] for p in parts)


class TextOut:
    """Where the text renderers of check and diff write: lines made of plain and styled parts.

    With styles (`styled`) rich writes each line; otherwise (pipes, files, CI
    logs, NO_COLOR) the parts are written as they are and rich is not even
    imported (it costs 0.02 s of start-up). Neither way wraps a line: long
    prose goes through `paragraph`, which wraps it here at the width, keeping
    its indentation, so both ways give the same characters and differ only in
    styles. Parts are never read as markup, so no text needs escaping.
    """

    def __init__(self, stream: TextIO) -> None:
        self.stream = stream
        self._rich = console(stream) if styled(stream) else None
        self.width = self._rich.width if self._rich is not None else _plain_width()

    def line(self, *parts: Part) -> None:
        if self._rich is None:
            self.stream.write(_plain(parts) + "\n")
        else:
            from rich.text import Text

            self._rich.print(Text.assemble(*parts), soft_wrap=True)

    def paragraph(self, text: str, indent: int, *lead: Part) -> None:
        """Plain `text` wrapped at the width, its lines indented by `indent` spaces; the first begins with `lead`."""
        import textwrap

        start = _plain(lead) if lead else " " * indent
        rows = textwrap.wrap(text, width=max(40, (self.width or 100) - 1), initial_indent=" " * len(start),
                             subsequent_indent=" " * indent, break_long_words=False, break_on_hyphens=False)
        first = rows[0][len(start):] if rows else ""
        self.line(*(lead or (start,)), first)
        for row in rows[1:]:
            self.line(row)
