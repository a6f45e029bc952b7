"""load.fast._node_mark: the scan for anchors, aliases and tags where a node starts, held to the plain loop it replaced."""

import re

from hypothesis import given, settings
from hypothesis import strategies as st

from modeldiff import load


def _reference(text: str) -> bool:
    """The loop `_fast_unsure` used before: every mark, spaces skipped backwards, then the character before."""
    for match in re.finditer(r"[&*!]", text):
        before = match.start() - 1
        while before >= 0 and text[before] == " ":
            before -= 1
        if before < 0 or text[before] in load.fast._NODE_INDICATORS or text[before] == "\n":
            return True
    return False


@settings(max_examples=400, deadline=None)
@given(st.text(alphabet=" \n-?:,[{&*!a(x", max_size=24))
def test_agrees_with_the_plain_loop(text):
    assert load.fast._node_mark(text) == _reference(text)


def test_detects_an_alias_after_a_colon_and_spaces():
    assert load.fast._node_mark("a:   *ref\n")
    assert load.fast._node_mark("&anchor x")
    assert load.fast._node_mark("x:\n  - !tag 1")


def test_does_not_report_marks_inside_words():
    assert not load.fast._node_mark("m1:\n  expr: count(*)\n  where: a != b\n  x: a&b\n")
