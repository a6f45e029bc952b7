"""`modeldiff check` on the command line: exit codes, output formats, git revisions, bad input.

changes.md, "The command line": exit 0 when check finds no error (warnings
included, unless --strict, which makes them 1), 3 for errors, 2 when the input
cannot be read or the command is misused, with one clear line on stderr and
never a traceback.
"""

from __future__ import annotations

import io
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from gitkit import git, init_repo, isolate_git

from modeldiff import __version__
from modeldiff.cli import main

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
CLEAN = EXAMPLES / "bikeshare.model.yaml"
WARNINGS = EXAMPLES / "revision-2" / "bikeshare.model.yaml"
ESCAPE = "\x1b"

# A small model with exactly one error: a link joining an integer to a text column.
MISMATCH = """\
model: bikeshare
format: 1
tables:
  bikes: {kind: dimension, key: bike_key, columns: {bike_key: integer}}
  trips: {kind: fact, key: trip_key, columns: {trip_key: integer, bike_key: text}}
links:
  trips_bike: {from: trips.bike_key, to: bikes.bike_key}
"""
MISMATCH_FIXED = MISMATCH.replace("bike_key: text", "bike_key: integer")


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def write(tmp_path: Path, content: str | bytes, name: str = "bikes.model.yaml") -> Path:
    path = tmp_path / name
    path.write_bytes(content.encode() if isinstance(content, str) else content)
    return path


def one_error_line(err: str) -> str:
    """The single stderr line of an exit-2 failure (and proof there is no traceback)."""
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("modeldiff: "), err
    assert "Traceback" not in err
    return lines[0]


@pytest.fixture(autouse=True)
def plain_terminal(monkeypatch):
    """The surrounding shell must not colour (or un-colour) these outputs."""
    for name in ("FORCE_COLOR", "NO_COLOR", "TERM", "COLUMNS"):
        monkeypatch.delenv(name, raising=False)


# --- exit codes -------------------------------------------------------------------------


def test_clean_model_exits_0():
    code, out, err = run("check", str(CLEAN))
    assert (code, err) == (0, "")
    assert "no findings" in out


def test_clean_model_exits_0_with_strict_too():
    assert run("check", str(CLEAN), "--strict")[0] == 0


def test_warnings_exit_0_without_strict():
    code, out, err = run("check", str(WARNINGS))
    assert (code, err) == (0, "")
    assert "2 warning(s)" in out


def test_summary_line_is_never_wrapped_whatever_the_path_length(tmp_path, monkeypatch):
    # The counts must stay greppable in CI logs, where checkouts live under deep paths.
    monkeypatch.setenv("COLUMNS", "80")
    deep = tmp_path / ("a-rather-long-folder-name-" * 4) / "checkout"
    deep.mkdir(parents=True)
    model = write(deep, WARNINGS.read_text())
    code, out, _ = run("check", str(model))
    assert code == 0
    first = out.splitlines()[0]
    assert str(model) in first and first.endswith("0 error(s), 2 warning(s)")


def test_short_summary_line_is_unchanged(monkeypatch):
    monkeypatch.setenv("COLUMNS", "200")
    assert run("check", str(WARNINGS))[1].splitlines()[0].endswith("0 error(s), 2 warning(s)")


def test_warnings_exit_1_with_strict():
    code, _, err = run("check", str(WARNINGS), "--strict")
    assert (code, err) == (1, "")


def test_errors_exit_3(tmp_path):
    code, out, err = run("check", str(write(tmp_path, MISMATCH)))
    assert (code, err) == (3, "")
    assert "type-mismatch" in out


def test_errors_exit_3_with_strict_too(tmp_path):
    assert run("check", str(write(tmp_path, MISMATCH)), "--strict")[0] == 3


def test_fixed_model_exits_0(tmp_path):
    assert run("check", str(write(tmp_path, MISMATCH_FIXED)))[0] == 0


def test_folder_model_is_checked(tmp_path):
    folder = tmp_path / "bikes.model"
    folder.mkdir()
    (folder / "tables.yaml").write_text(MISMATCH.split("links:")[0])
    (folder / "links.yaml").write_text("model: bikeshare\nformat: 1\nlinks:" + MISMATCH.split("links:")[1])
    code, out, _ = run("check", str(folder), "--format", "json")
    assert code == 3
    assert [(f["rule"], f["subject"]) for f in json.loads(out)["findings"]] == [("type-mismatch", "links.trips_bike")]
    assert json.loads(out)["findings"][0]["location"]["file"].endswith("links.yaml")


@pytest.mark.parametrize("argv", [
    ["check"],                                     # MODEL missing
    ["check", str(CLEAN), str(CLEAN)],             # one MODEL only
    ["check", str(CLEAN), "--format", "xml"],      # no such format
    ["check", str(CLEAN), "--stirct"],             # no such option
    ["chek", str(CLEAN)],                          # no such command
], ids=["no-model", "two-models", "bad-format", "bad-option", "bad-command"])
def test_misuse_exits_2_with_one_line(argv):
    code, out, err = run(*argv)
    assert (code, out) == (2, "")
    one_error_line(err)


def test_missing_path_exits_2_naming_it(tmp_path):
    missing = tmp_path / "nothere.model.yaml"
    code, out, err = run("check", str(missing))
    assert (code, out) == (2, "")
    assert str(missing) in one_error_line(err)


# --- output formats ---------------------------------------------------------------------


def check_json(path: Path, *extra: str) -> tuple[int, dict]:
    code, out, err = run("check", str(path), "--format", "json", *extra)
    assert err == ""
    return code, json.loads(out)


def test_json_shape_follows_changes_md():
    code, doc = check_json(WARNINGS)
    assert code == 0
    assert doc["format"] == 1 and doc["model"] == "bikeshare"
    for finding in doc["findings"]:
        assert {"rule", "severity", "subject", "message", "paths"} <= set(finding)
        assert all(isinstance(finding[k], str) for k in ("rule", "severity", "subject", "message"))
        assert isinstance(finding["paths"], list)
        assert all(isinstance(p, list) and all(isinstance(name, str) for name in p) for p in finding["paths"])
    assert [(f["rule"], f["severity"], f["subject"]) for f in doc["findings"]] == [
        ("ambiguous-paths", "warning", "paths.calendar->stock_levels"),
        ("security-stops", "warning", "roles.student_programme_analyst"),
    ]


def test_json_paths_are_lists_of_link_names():
    _, doc = check_json(WARNINGS)
    ambiguous = doc["findings"][0]
    assert sorted(ambiguous["paths"]) == [["stock_levels_day"],
                                         ["trips_start_day", "trips_start_station", "stock_levels_station"]]
    assert doc["findings"][1]["paths"] == []


def test_json_of_a_clean_model_has_no_findings():
    code, doc = check_json(CLEAN)
    assert (code, doc["format"], doc["model"], doc["findings"]) == (0, 1, "bikeshare", [])


def test_json_of_errors_has_locations(tmp_path):
    code, doc = check_json(write(tmp_path, MISMATCH))
    assert code == 3
    [finding] = doc["findings"]
    assert (finding["rule"], finding["severity"], finding["subject"]) == ("type-mismatch", "error", "links.trips_bike")
    assert finding["location"]["line"] == MISMATCH.splitlines().index(
        "  trips_bike: {from: trips.bike_key, to: bikes.bike_key}") + 1


def test_json_exit_code_follows_strict():
    assert check_json(WARNINGS, "--strict")[0] == 1


def test_markdown_lists_every_finding():
    code, out, err = run("check", str(WARNINGS), "--format", "markdown")
    assert (code, err) == (0, "")
    rows = [line for line in out.splitlines() if line.startswith("| warning")]
    assert len(rows) == 2
    assert "`ambiguous-paths`" in rows[0] and "`paths.calendar->stock_levels`" in rows[0]
    assert "trips_start_day → trips_start_station → stock_levels_station" in rows[0]
    assert "`security-stops`" in rows[1] and "`roles.student_programme_analyst`" in rows[1]
    assert all(row.count(" | ") - row.count("\\|") >= 4 for row in rows)


def test_markdown_of_a_clean_model_says_so():
    code, out, _ = run("check", str(CLEAN), "--format", "markdown")
    assert code == 0 and "No findings." in out and "| warning" not in out


def test_markdown_keeps_a_pipe_inside_its_cell(tmp_path):
    # The SQL cannot be read, and the message quotes it, pipes included.
    text = MISMATCH_FIXED + "roles:\n  r: {filters: {bikes: \"bike_key = = 1 || 2\"}}\n"
    code, out, _ = run("check", str(write(tmp_path, text)), "--format", "markdown")
    rows = [line for line in out.splitlines() if line.startswith("| error")]
    assert code == 3 and len(rows) == 1
    assert "\\|\\|" in rows[0] and len(re.split(r"(?<!\\)\|", rows[0])) == 7  # 5 cells between 6 bars


def test_text_lists_every_finding_with_its_location_and_paths():
    code, out, err = run("check", str(WARNINGS))
    flat = " ".join(out.split())
    assert (code, err) == (0, "")
    assert "ambiguous-paths paths.calendar->stock_levels" in flat
    assert "security-stops roles.student_programme_analyst" in flat
    assert f"{WARNINGS}:" in flat
    assert "path: trips_start_day -> trips_start_station -> stock_levels_station" in flat


def test_text_of_errors_names_rule_and_subject(tmp_path):
    code, out, _ = run("check", str(write(tmp_path, MISMATCH)))
    flat = " ".join(out.split())
    assert code == 3 and "1 error(s), 0 warning(s)" in flat
    assert "type-mismatch links.trips_bike" in flat


# --- no escape codes where nobody reads colours -----------------------------------------


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


@pytest.mark.parametrize("fmt", ["text", "json", "markdown"])
def test_non_tty_output_has_no_escape_codes(fmt):
    _, out, _ = run("check", str(WARNINGS), "--format", fmt)
    assert ESCAPE not in out


def test_no_color_on_a_terminal_has_no_escape_codes(monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    out = FakeTerminal()
    main(["check", str(WARNINGS)], stdout=out, stderr=io.StringIO())
    assert ESCAPE not in out.getvalue() and "security-stops" in out.getvalue()


def test_terminal_without_no_color_is_coloured(monkeypatch):
    # The twin of the test above: the same terminal does get styles when colour is allowed.
    out = FakeTerminal()
    main(["check", str(WARNINGS)], stdout=out, stderr=io.StringIO())
    assert ESCAPE in out.getvalue()


def test_piped_output_of_the_real_command_has_no_escape_codes():
    env = {k: v for k, v in os.environ.items() if k not in ("FORCE_COLOR", "NO_COLOR")}
    done = subprocess.run([sys.executable, "-m", "modeldiff", "check", str(WARNINGS)], capture_output=True,
                          text=True, env=env, cwd=ROOT)
    assert done.returncode == 0 and ESCAPE not in done.stdout and "security-stops" in done.stdout


# --- REV:PATH on a real repository ------------------------------------------------------




@pytest.fixture
def repo(tmp_path, monkeypatch) -> Path:
    """Committed: the fixed model. Working tree: the model with a type mismatch."""
    isolate_git(monkeypatch, tmp_path)
    root = tmp_path / "repo"
    (root / "models").mkdir(parents=True)
    init_repo(root)
    (root / "models" / "bikes.model.yaml").write_text(MISMATCH_FIXED)
    git(root, "add", "-A")
    git(root, "commit", "-q", "-m", "bikes model")
    (root / "models" / "bikes.model.yaml").write_text(MISMATCH)
    monkeypatch.chdir(root)
    return root


def test_check_at_a_revision_reads_the_committed_model(repo):
    code, out, err = run("check", "HEAD:models/bikes.model.yaml", "--format", "json")
    assert (code, err) == (0, "")
    assert json.loads(out)["findings"] == []


def test_check_of_the_working_tree_reads_the_file_on_disk(repo):
    code, out, _ = run("check", "models/bikes.model.yaml", "--format", "json")
    assert code == 3
    assert [f["rule"] for f in json.loads(out)["findings"]] == ["type-mismatch"]


def test_check_at_a_revision_names_the_revision_in_text(repo):
    code, out, _ = run("check", "main:models/bikes.model.yaml")
    assert code == 0 and "main:models/bikes.model.yaml" in out


@pytest.mark.parametrize("spec", ["nosuchrev:models/bikes.model.yaml", "HEAD:models/other.model.yaml"],
                         ids=["unknown-revision", "path-not-at-revision"])
def test_bad_revision_or_path_exits_2_with_one_line(repo, spec):
    code, out, err = run("check", spec)
    assert (code, out) == (2, "")
    one_error_line(err)


# --- schema and version -----------------------------------------------------------------


def test_schema_prints_a_valid_draft_7_json_schema():
    import jsonschema

    code, out, err = run("schema")
    assert (code, err) == (0, "")
    schema = json.loads(out)
    jsonschema.Draft7Validator.check_schema(schema)


def test_schema_accepts_the_example_and_rejects_a_broken_one():
    import jsonschema

    from modeldiff.load import read_yaml

    schema = json.loads(run("schema")[1])
    example = read_yaml("example", CLEAN.read_bytes())
    jsonschema.validate(json.loads(json.dumps(example)), schema)
    broken = json.loads(json.dumps(example))
    broken["links"]["trips_bike"]["flow"] = "sideways"
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(broken, schema)


def test_version_prints_the_version():
    done = subprocess.run([sys.executable, "-m", "modeldiff", "--version"], capture_output=True, text=True, cwd=ROOT)
    assert (done.returncode, done.stderr) == (0, "")
    assert done.stdout.strip() == f"modeldiff {__version__}"


# --- bad input at the command line ------------------------------------------------------

BASE = """\
model: bikeshare
format: 1
tables:
  trips:
    kind: fact
    key: trip_key
    columns:
      trip_key: integer
      fare: decimal
"""

# (file content, text the one stderr line must contain: FILE:LINE where known)
UNREADABLE = {
    "malformed-yaml": (BASE + "links: {a: [\n", ":11:"),
    "tab-indentation": (BASE.replace("      fare: decimal", "\tfare: decimal"), ":9:"),
    "binary-file": (b"model: bikeshare\n\x00\x01\x02\xff", ":2:"),
    "not-utf8": (BASE.encode() + b"# caf\xe9\n", ":10:"),
    "empty-file": ("", ":1:"),
    "only-comments": ("# nothing here\n", ":1:"),
    "top-level-list": ("- model: bikeshare\n- format: 1\n", ":1:"),
    "top-level-scalar": ("bikeshare\n", ":1:"),
    "deep-nesting": (BASE + "description: " + "[" * 200 + "]" * 200 + "\n", ":10:"),
    "alias-bomb": ("model: bikeshare\nformat: 1\ntables: {}\n"
                   + "".join(f"l{i}: &l{i} [{', '.join([f'*l{i - 1}'] * 9) if i else 'x, x, x, x, x, x, x, x, x'}]\n"
                             for i in range(9)), ":9:"),
    "no-format": (BASE.replace("format: 1\n", ""), ":1:"),
    "duplicate-key": (BASE + "tables: {}\n", ":10:"),
}


@pytest.mark.parametrize("content, where", UNREADABLE.values(), ids=UNREADABLE.keys())
def test_unreadable_file_exits_2_with_one_line(tmp_path, content, where):
    path = write(tmp_path, content)
    code, out, err = run("check", str(path), "--format", "json")
    assert (code, out) == (2, "")
    line = one_error_line(err)
    assert line.startswith(f"modeldiff: {path}{where}"), line


def test_readable_twin_of_the_unreadable_files_exits_0(tmp_path):
    assert run("check", str(write(tmp_path, BASE)))[0] == 0


@pytest.mark.parametrize("content", [UNREADABLE["alias-bomb"][0], UNREADABLE["binary-file"][0]],
                         ids=["alias-bomb", "binary-file"])
def test_unreadable_input_gives_no_traceback_from_the_real_command(tmp_path, content):
    path = write(tmp_path, content)
    done = subprocess.run([sys.executable, "-m", "modeldiff", "check", str(path)], capture_output=True,
                          text=True, cwd=ROOT)
    assert done.returncode == 2 and done.stdout == ""
    one_error_line(done.stderr)


# (edit of BASE, expected (rule, subject) findings, line of the first finding)
NOT_THE_FORMAT = {
    "wrong-type": (("fare: decimal", "fare: [decimal]"), [("invalid-model", "tables.trips.columns.fare")], 9),
    "wrong-enum": (("kind: fact", "kind: event"), [("invalid-model", "tables.trips.kind")], 5),
    "unknown-key": (("key: trip_key", "key: trip_key\n    colour: red"), [("invalid-model", "tables.trips.colour")], 7),
    "bad-name": (("      fare: decimal", "      fare: decimal\n      2nd_fare: decimal"),
                 [("invalid-model", "tables.trips.columns.2nd_fare")], 10),
    "unknown-table": (("fare: decimal", "fare: decimal\nmeasures:\n  fares: {table: trip, expr: sum(fare)}"),
                      [("broken-reference", "measures.fares")], 11),
    "unknown-column": (("fare: decimal", "fare: decimal\nmeasures:\n  fares: {table: trips, expr: sum(fares)}"),
                       [("broken-reference", "measures.fares")], 11),
}


@pytest.mark.parametrize("edit, expected, line", NOT_THE_FORMAT.values(), ids=NOT_THE_FORMAT.keys())
def test_file_not_following_the_format_exits_3_with_located_findings(tmp_path, edit, expected, line):
    old, new = edit
    assert BASE.count(old) == 1
    path = write(tmp_path, BASE.replace(old, new))
    code, out, err = run("check", str(path), "--format", "json")
    assert (code, err) == (3, "")
    findings = json.loads(out)["findings"]
    assert [(f["rule"], f["subject"]) for f in findings] == expected
    assert (findings[0]["location"]["file"], findings[0]["location"]["line"]) == (str(path), line)


@pytest.mark.parametrize("edit", [("fare: decimal", "fare: float"), ("kind: fact", "kind: dimension")],
                         ids=["right-type", "right-enum"])
def test_file_following_the_format_exits_0(tmp_path, edit):
    path = write(tmp_path, BASE.replace(*edit))
    assert run("check", str(path))[0] == 0
