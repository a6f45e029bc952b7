"""Check findings of the new revision in `diff` and the hook (issue 9, point 10).

A warning the old revision lacks is a `warning.added` change of severity `safe`: shown in text, JSON,
Markdown and the hook's message, never raising the verdict on its own (warnings move no number; the
change that raised one carries its own severity). An error of the new revision makes the diff breaking
(changes.md, Severity). Each "shows" test has a twin where the warning is not new.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest

from modeldiff import cli, hook

from gitkit import git, init_repo, isolate_git

V1 = """\
model: rides
format: 1
tables:
  trips: {kind: fact, key: trip_id, columns: {trip_id: integer, start_station: integer, end_station: integer}}
  stations: {kind: dimension, key: station_id, columns: {station_id: integer, name: text}}
links:
  trips_start: {from: trips.start_station, to: stations.station_id}
measures:
  trip_count: {table: trips, expr: count(*)}
reports:
  trips_by_station: {measures: [trip_count], by: [stations.name]}
"""
# a standby link that nothing names in `via`/`use`: standby-unused, new in V2
SPARE = "  trips_end: {from: trips.end_station, to: stations.station_id, standby: true}\n"
V2 = V1.replace("links:\n", "links:\n" + SPARE)


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def files(tmp_path: Path, old: str, new: str) -> tuple[str, str]:
    a, b = tmp_path / "old.model.yaml", tmp_path / "new.model.yaml"
    a.write_text(old)
    b.write_text(new)
    return str(a), str(b)


def json_changes(tmp_path: Path, old: str, new: str) -> tuple[int, dict]:
    code, out, err = run("diff", *files(tmp_path, old, new), "--format", "json")
    assert err == ""
    return code, json.loads(out)


def test_a_new_warning_is_a_safe_change_in_json_and_leaves_the_verdict_alone(tmp_path):
    code, doc = json_changes(tmp_path, V1, V2)
    assert [(c["kind"], c["subject"], c["severity"]) for c in doc["changes"]] == [
        ("link.added", "links.trips_end", "safe"), ("warning.added", "links.trips_end", "safe")]
    warning = doc["changes"][1]
    assert warning["details"]["rule"] == "standby-unused"
    assert warning["details"]["location"].startswith(str(tmp_path / "new.model.yaml"))
    assert "Standby link trips_end is used by no measure" in warning["message"]
    assert (code, doc["summary"]["verdict"]) == (0, "safe")
    assert (doc["summary"]["new_warnings"], doc["summary"]["safe"]) == (1, 2)


def test_a_warning_present_in_both_revisions_is_not_new(tmp_path):
    code, doc = json_changes(tmp_path, V2, V2.replace("expr: count(*)}", "expr: count(*), description: Trips.}"))
    assert [c["kind"] for c in doc["changes"]] == ["measure.metadata_changed"]
    assert code == 0 and doc["summary"]["new_warnings"] == 0


def test_a_warning_that_follows_a_renamed_item_is_not_new(tmp_path):
    _, doc = json_changes(tmp_path, V2, V2.replace("  trips_end:", "  trips_finish:"))
    assert [(c["kind"], c["subject"]) for c in doc["changes"]] == [("link.renamed", "links.trips_finish")]


def test_a_warning_that_goes_away_is_not_reported(tmp_path):
    _, doc = json_changes(tmp_path, V2, V1)
    assert [c["kind"] for c in doc["changes"]] == ["link.removed"]


def test_text_and_markdown_show_the_new_warning(tmp_path):
    old, new = files(tmp_path, V1, V2)
    _, text, _ = run("diff", old, new)
    assert "warning.added links.trips_end" in text and "New check warning (standby-unused)" in text
    _, markdown, _ = run("diff", old, new, "--format", "markdown")
    assert "| `warning.added` | `links.trips_end` | New check warning (standby-unused)" in markdown


def test_text_and_markdown_show_no_warning_when_none_is_new(tmp_path):
    old, new = files(tmp_path, V2, V2.replace("  trips_end:", "  trips_finish:"))
    _, text, _ = run("diff", old, new)
    _, markdown, _ = run("diff", old, new, "--format", "markdown")
    assert "warning.added" not in text and "warning.added" not in markdown


def test_an_error_of_the_new_revision_makes_the_diff_breaking(tmp_path):
    broken = V1.replace("start_station: integer, end_station", "start_station: text, end_station")
    code, doc = json_changes(tmp_path, V1, broken)
    assert code == 3 and doc["summary"]["verdict"] == "breaking"
    assert [(f["rule"], f["severity"]) for f in doc["findings"]] == [("type-mismatch", "error")]
    assert "warning.added" not in [c["kind"] for c in doc["changes"]]


def test_a_clean_new_revision_adds_no_error(tmp_path):
    code, doc = json_changes(tmp_path, V1, V1.replace("count(*)", "count(trip_id)"))
    assert code == 1 and doc["findings"] == []


# --- the hook ------------------------------------------------------------------------------------------


@pytest.fixture
def repo(tmp_path, monkeypatch) -> Path:
    isolate_git(monkeypatch, tmp_path)
    work = init_repo(tmp_path / "work")
    (work / "models").mkdir()
    return work


def _commit(work: Path, text: str) -> str:
    (work / "models" / "rides.model.yaml").write_text(text)
    git(work, "add", "-A")
    git(work, "commit", "-q", "-m", "model")
    return git(work, "rev-parse", "HEAD")


def _hook_message(work: Path, old: str, new: str) -> tuple[int, str]:
    before, after = _commit(work, old), _commit(work, new)
    out, err = io.StringIO(), io.StringIO()
    code = hook.run_hook(None, from_env=False, stdin=io.StringIO(f"refs/heads/main {after} refs/heads/main {before}\n"),
                         stdout=out, stderr=err, env={}, repo=str(work))
    return code, out.getvalue() + err.getvalue()


def test_the_hook_message_shows_a_new_warning_and_lets_the_push_through(repo):
    code, message = _hook_message(repo, V1, V2)
    assert code == 0
    assert "warning.added links.trips_end" in message and "standby-unused" in message


def test_the_hook_message_says_nothing_of_a_warning_that_is_not_new(repo):
    code, message = _hook_message(repo, V2, V2.replace("expr: count(*)}", "expr: count(*), description: Trips.}"))
    assert code == 0 and "warning.added" not in message and "standby-unused" not in message

