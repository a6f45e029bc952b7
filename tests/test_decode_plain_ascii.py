"""load.text._plain_ascii: the shortcut that skips the control-character search must agree with it."""

from modeldiff import load


def test_every_ascii_character_agrees_with_the_control_pattern():
    for code in range(128):
        text = f"model: m\nname: a{chr(code)}b\n"
        assert load.text._plain_ascii(text) == (load.text._CONTROL.search(text) is None), code


def test_plain_ascii_text_is_passed():
    assert load.text._plain_ascii("model: m\n\ttables: {}\r\n")


def test_non_ascii_text_is_left_to_the_pattern():
    assert not load.text._plain_ascii("model: café\n")  # the pattern decides: no finding there
    assert load.text._decode("m.yaml", "model: café\n".encode()) == "model: café\n"


def test_control_character_is_still_refused_with_its_position():
    import pytest

    from modeldiff.errors import ModeldiffError

    with pytest.raises(ModeldiffError, match=r"m.yaml:2:3.*U\+0007"):
        load.text._decode("m.yaml", b"model: m\nx:\x07\n")
    assert load.text._decode("m.yaml", b"model: m\nx: 1\n") == "model: m\nx: 1\n"
