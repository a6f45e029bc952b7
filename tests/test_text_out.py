"""render.TextOut: the text of check and diff, styled by rich on a terminal, plain elsewhere without rich.

The two ways must give the same characters (only styles differ), wrap prose
at the width with its indentation, and leave rich unimported off a terminal.
"""

from __future__ import annotations

import io
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from modeldiff.cli import main
from modeldiff.render import TextOut, styled

ROOT = Path(__file__).resolve().parent.parent
OLD = ROOT / "examples" / "bikeshare.model.yaml"
NEW = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"
SCENARIOS = ROOT / "tests" / "scenarios"
ANSI = re.compile(r"\x1b\[[0-9;]*m")


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def text_of(argv: list[str], stream: io.StringIO) -> str:
    main(argv, stdout=stream, stderr=io.StringIO())
    return stream.getvalue()


def scenario_pairs() -> list[tuple[str, str]]:
    pairs = []
    for folder in sorted(p for p in SCENARIOS.iterdir() if (p / "old.model.yaml").exists()):
        pairs.append((str(folder / "old.model.yaml"), str(folder / "new.model.yaml")))
    return pairs


@pytest.fixture
def fixed_width(monkeypatch):
    monkeypatch.setenv("COLUMNS", "90")
    monkeypatch.delenv("NO_COLOR", raising=False)
    monkeypatch.delenv("FORCE_COLOR", raising=False)
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")


def test_styled_and_plain_text_have_the_same_characters(fixed_width):
    pairs = scenario_pairs()
    assert len(pairs) > 10
    argvs = [["diff", old, new] for old, new in pairs] + [["check", new] for _, new in pairs]
    styled_any = False
    for argv in argvs:
        plain = text_of(argv, io.StringIO())
        coloured = text_of(argv, Terminal())
        styled_any |= "\x1b[" in coloured
        assert "\x1b[" not in plain, argv
        assert ANSI.sub("", coloured) == plain, argv
    assert styled_any  # the terminal really got styles


def test_plain_text_is_not_styled_and_never_imports_rich():
    code = ("import sys; from modeldiff.cli import main; main(sys.argv[1:]); "
            "print('rich' in sys.modules, file=sys.stderr)")
    env = {k: v for k, v in os.environ.items() if k not in ("FORCE_COLOR", "NO_COLOR")}
    for argv in (["diff", str(OLD), str(NEW)], ["check", str(NEW)]):
        done = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True,
                              env={**env, "MODELDIFF_NO_CACHE": "1"})
        assert done.stderr.strip() == "False", done.stderr
        assert "\x1b[" not in done.stdout and done.stdout


def test_force_color_styles_a_pipe_through_rich():
    # The twin of the test above: FORCE_COLOR asks for styles even off a terminal.
    code = ("import sys; from modeldiff.cli import main; main(sys.argv[1:]); "
            "print('rich' in sys.modules, file=sys.stderr)")
    env = {k: v for k, v in os.environ.items() if k != "NO_COLOR"}
    done = subprocess.run([sys.executable, "-c", code, "check", str(NEW)], capture_output=True, text=True,
                          env={**env, "FORCE_COLOR": "1", "MODELDIFF_NO_CACHE": "1"})
    assert done.stderr.strip() == "True"
    assert "\x1b[" in done.stdout


def test_no_color_on_a_terminal_is_plain(monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    assert not styled(Terminal())
    monkeypatch.delenv("NO_COLOR")
    assert styled(Terminal())  # the twin: a terminal without NO_COLOR is styled


def test_paragraph_wraps_at_the_width_and_keeps_its_indentation(monkeypatch):
    monkeypatch.setenv("COLUMNS", "50")
    out = io.StringIO()
    writer = TextOut(out)
    writer.paragraph("word " * 30, 4, "  ", ("LEAD:", "bold"), " ")
    lines = out.getvalue().splitlines()
    assert lines[0].startswith("  LEAD: word")
    assert len(lines) > 2
    assert all(len(line) <= 49 for line in lines)
    assert all(line.startswith("    word") for line in lines[1:])


def test_a_short_paragraph_stays_on_one_line(monkeypatch):
    monkeypatch.setenv("COLUMNS", "50")
    out = io.StringIO()
    TextOut(out).paragraph("a few words", 4)
    assert out.getvalue() == "    a few words\n"


def test_names_with_brackets_are_written_as_they_are(fixed_width):
    # Parts are never read as markup: a subject like `[bold]` shows literally, styled or not.
    for stream in (io.StringIO(), Terminal()):
        writer = TextOut(stream)
        writer.line("  ", ("[bold]x[/]", "yellow"), " [red]y")
        assert ANSI.sub("", stream.getvalue()) == "  [bold]x[/] [red]y\n"
