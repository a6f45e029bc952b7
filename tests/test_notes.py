"""`modeldiff notes A..B`: release notes over a real temporary git repository.

The history: v1 (the bike-share example), a commit touching no model, a safe commit (a measure's
description), a commit touching no model, a breaking one (trips_start_station two-way: a new route from
calendar to stock_levels), all on main. Every test clears the surrounding GIT_* variables.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest
from gitkit import git, isolate_git

from modeldiff import cli
from modeldiff.render.diff_out import SECURITY_CAUTION

EXAMPLES = Path(__file__).parent.parent / "examples"
OLD_TEXT = (EXAMPLES / "bikeshare.model.yaml").read_text()
NEW_TEXT = (EXAMPLES / "revision-2" / "bikeshare.model.yaml").read_text()
DESCRIPTION = "    description: Units held; adding it up over several days counts a unit once per day.\n"
SAFE_EDIT = "    description: Units held at close of day.\n"
MODEL = "models/bikeshare.model.yaml"


clear_git_env = isolate_git


def new_repo(root: Path) -> Path:
    (root / "models").mkdir(parents=True)
    git(root, "init", "-q", "-b", "main")
    git(root, "config", "user.name", "Test Rider")
    git(root, "config", "user.email", "rider@example.invalid")
    git(root, "config", "commit.gpgsign", "false")
    return root


def commit(root: Path, message: str, files: dict[str, str]) -> str:
    for name, text in files.items():
        (root / name).write_text(text)
    git(root, "add", "-A")
    git(root, "commit", "-q", "-m", message)
    return git(root, "rev-parse", "HEAD")


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    """(root, {subject: sha}) of the history in the module docstring."""
    mp = pytest.MonkeyPatch()
    home = tmp_path_factory.mktemp("home")
    clear_git_env(mp, home)
    root = new_repo(tmp_path_factory.mktemp("notes") / "repo")
    shas = {"base": commit(root, "base model", {MODEL: OLD_TEXT})}
    git(root, "tag", "v1")
    shas["readme"] = commit(root, "docs: a readme", {"README.md": "# Bike share\n"})
    shas["safe"] = commit(root, "describe stock_on_hand", {MODEL: OLD_TEXT.replace(DESCRIPTION, SAFE_EDIT)})
    shas["ci"] = commit(root, "ci: run the tests", {"ci.txt": "make test\n"})
    shas["breaking"] = commit(root, "trips_start_station two-way", {MODEL: NEW_TEXT.replace(DESCRIPTION, SAFE_EDIT)})
    yield root, shas
    mp.undo()


@pytest.fixture(autouse=True)
def clean_git_env(monkeypatch, tmp_path):
    clear_git_env(monkeypatch, tmp_path)


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def notes(root: Path, *argv: str) -> str:
    code, out, err = run("notes", *argv, "--repo", str(root))
    assert (code, err) == (0, "")
    return out


def mermaid_blocks(text: str) -> list[str]:
    return re.findall(r"```mermaid\n(.*?)```", text, re.S)


_EDGE = re.compile(r'^\s*(\S+)\s+(?:<-->|-->|-\.->|---|==>)\|"([^" ]*)[^"]*"\|\s+(\S+)\s*$')  # the link name


def edges_and_styles(block: str) -> tuple[list[str], list[int]]:
    """Edge labels in definition order, and the indices `linkStyle` names (Mermaid counts edges from 0)."""
    edges = [m.group(2) for m in map(_EDGE.match, block.splitlines()) if m]
    styles = [int(i) for line in block.splitlines() if line.strip().startswith("linkStyle")
              for i in line.split()[1].split(",")]
    return edges, styles


# --- squashed -------------------------------------------------------------------------------------


def test_squashed_markdown_has_one_section_per_model_breaking_first(history):
    root, shas = history
    out = notes(root, "v1..HEAD")
    assert out.startswith("# Release notes: `v1..HEAD`\n")
    assert out.count("## `bikeshare`") == 1
    breaking, numbers, safe = (out.index(f"**{t}**") for t in ("Breaking", "Can move numbers", "Safe"))
    assert breaking < numbers < safe
    assert "calendar now reaches stock_levels along more than one route" in out[breaking:numbers]
    assert "The description of measure stock_on_hand changed" in out[safe:]
    # the flip moves trips too (trips -> stations -> trips comes back): every report showing a trip or stock measure
    assert "Impacted reports (5): daily_returns (numbers; owner operations), east_overview" in out
    assert "station_stock (numbers; owner operations)" in out


def test_squashed_markdown_lists_model_commits_and_puts_the_others_on_one_last_line(history):
    root, shas = history
    out = notes(root, "v1..HEAD")
    commits = out[out.index("## Commits"):]
    assert f"- `{shas['safe'][:7]}` describe stock_on_hand: {MODEL}" in commits
    assert f"- `{shas['breaking'][:7]}` trips_start_station two-way: {MODEL}" in commits
    last = out.rstrip("\n").splitlines()[-1]
    assert last == f"2 commits changed no model: `{shas['readme'][:7]}` docs: a readme; `{shas['ci'][:7]}` ci: run the tests."


def test_the_mermaid_block_highlights_exactly_the_changed_link(history):
    root, _ = history
    (block,) = mermaid_blocks(notes(root, "v1..HEAD"))
    assert block.startswith("graph LR\n")
    edges, styles = edges_and_styles(block)
    assert "trips_start_station" in edges and len(edges) > 1
    assert [edges[i] for i in styles] == ["trips_start_station"]


def test_a_range_without_a_link_change_has_no_link_style(history):
    root, shas = history
    out = notes(root, f"v1..{shas['ci']}")
    assert "The description of measure stock_on_hand changed" in out
    assert "linkStyle" not in out and mermaid_blocks(out) == []


def test_squashed_json_carries_the_diff_records_and_the_commits(history, monkeypatch):
    root, shas = history
    monkeypatch.chdir(root)
    doc = json.loads(notes(root, "v1..HEAD", "--format", "json"))
    assert (doc["format"], doc["range"], doc["mode"]) == (1, "v1..HEAD", "squash")
    assert [(c["sha"], c["subject"], c["changed_models"]) for c in doc["commits"]] == [
        (shas["readme"], "docs: a readme", False), (shas["safe"], "describe stock_on_hand", True),
        (shas["ci"], "ci: run the tests", False), (shas["breaking"], "trips_start_station two-way", True)]
    assert all("models" not in c for c in doc["commits"])
    (model,) = doc["models"]
    code, diff_text, _ = run("diff", f"v1:{MODEL}", f"HEAD:{MODEL}", "--format", "json")
    diff = json.loads(diff_text)
    assert [(c["id"], c["kind"], c["subject"]) for c in model["changes"]] == \
        [(c["id"], c["kind"], c["subject"]) for c in diff["changes"]]
    assert model["impacts"] == diff["impacts"]
    assert "linkStyle" in model["diagram"]
    assert doc["summary"] == {"commits": 4, "changing_models": 2, "verdict": "breaking"}


# --- per commit ---------------------------------------------------------------------------------------


def test_per_commit_markdown_gives_each_model_commit_its_subject_and_changes(history):
    root, shas = history
    out = notes(root, "v1..HEAD", "--per-commit")
    safe = out.index(f"## `{shas['safe'][:7]}` describe stock_on_hand")
    breaking = out.index(f"## `{shas['breaking'][:7]}` trips_start_station two-way")
    assert safe < breaking
    assert "The description of measure stock_on_hand changed" in out[safe:breaking]
    assert "Link trips_start_station now lets filters flow both ways" in out[breaking:]
    assert "Link trips_start_station" not in out[safe:breaking]
    assert f"## `{shas['readme'][:7]}`" not in out
    assert out.rstrip("\n").splitlines()[-1].startswith("2 commits changed no model: ")


def test_per_commit_diagrams_only_where_a_link_changed(history):
    root, shas = history
    out = notes(root, "v1..HEAD", "--per-commit")
    breaking = out.index(f"## `{shas['breaking'][:7]}`")
    assert mermaid_blocks(out[:breaking]) == []
    (block,) = mermaid_blocks(out[breaking:])
    edges, styles = edges_and_styles(block)
    assert [edges[i] for i in styles] == ["trips_start_station"]


def test_per_commit_json_has_each_commits_model_documents(history):
    root, shas = history
    doc = json.loads(notes(root, "v1..HEAD", "--per-commit", "--format", "json"))
    assert doc["mode"] == "per-commit"
    by_subject = {c["subject"]: c for c in doc["commits"]}
    assert by_subject["docs: a readme"]["models"] == []
    (safe,) = by_subject["describe stock_on_hand"]["models"]
    assert [c["kind"] for c in safe["changes"]] == ["measure.metadata_changed"]
    assert safe["diagram"] is None and safe["summary"]["verdict"] == "safe"
    (breaking,) = by_subject["trips_start_station two-way"]["models"]
    assert breaking["summary"]["verdict"] == "breaking"
    assert (breaking["old"]["rev"], breaking["new"]["rev"]) == (shas["ci"], shas["breaking"])
    assert len(doc["models"]) == 1  # the range as a whole, as in squashed mode


def test_a_merge_lists_what_it_merged_under_the_merged_commit_only(tmp_path):
    root = new_repo(tmp_path / "repo")
    commit(root, "base model", {MODEL: OLD_TEXT})
    git(root, "tag", "v1")
    git(root, "checkout", "-q", "-b", "feature")
    feature = commit(root, "describe stock_on_hand", {MODEL: OLD_TEXT.replace(DESCRIPTION, SAFE_EDIT)})
    git(root, "checkout", "-q", "main")
    commit(root, "docs: a readme", {"README.md": "# Bike share\n"})
    git(root, "merge", "-q", "--no-ff", "-m", "merge feature", "feature")
    doc = json.loads(notes(root, "v1..HEAD", "--per-commit", "--format", "json"))
    by_subject = {c["subject"]: c for c in doc["commits"]}
    assert by_subject["describe stock_on_hand"]["sha"] == feature
    assert by_subject["describe stock_on_hand"]["paths"] == [MODEL]
    assert by_subject["merge feature"]["paths"] == [] and by_subject["merge feature"]["models"] == []
    assert [c["kind"] for c in doc["models"][0]["changes"]] == ["measure.metadata_changed"]


# --- security -----------------------------------------------------------------------------------------


def exposing(text: str) -> str:
    """district_access_district's row security made one-way: depot_staff stops restricting districts and below."""
    anchor = "    flow: two-way\n    security_flow: two-way\n"
    assert anchor in text
    return text.replace(anchor, "    flow: two-way\n    security_flow: one-way\n")


def test_an_exposure_is_said_plainly_with_the_caution(tmp_path):
    root = new_repo(tmp_path / "repo")
    commit(root, "base model", {MODEL: OLD_TEXT})
    commit(root, "district access one-way for row security", {MODEL: exposing(OLD_TEXT)})
    out = notes(root, "HEAD~1..HEAD")
    caution = next(line for line in out.splitlines() if line.startswith("> **SECURITY:**"))
    assert "role depot_staff can now see rows of districts that were hidden from it" in caution
    assert caution.endswith(SECURITY_CAUTION)


def test_no_security_line_without_an_exposure(history):
    root, _ = history
    assert "SECURITY" not in notes(root, "v1..HEAD")


# --- ranges and bad input -------------------------------------------------------------------------------


def test_an_empty_range_says_so(history):
    root, _ = history
    out = notes(root, "HEAD..v1")
    assert "No commits in `HEAD..v1`." in out and "##" not in out


def test_a_range_open_on_the_right_ends_at_head(history):
    root, _ = history
    assert notes(root, "v1..") == notes(root, "v1..HEAD").replace("`v1..HEAD`", "`v1..`")


def assert_one_line_error(code: int, out: str, err: str, *words: str) -> None:
    assert code == 2 and out == ""
    assert err.startswith("modeldiff: ") and err.count("\n") == 1 and "Traceback" not in err
    for word in words:
        assert word in err, err


def test_a_single_revision_is_not_a_range(history):
    root, _ = history
    assert_one_line_error(*run("notes", "v1", "--repo", str(root)), "not a range", "A..B")


def test_an_unknown_revision_exits_2(history):
    root, _ = history
    assert_one_line_error(*run("notes", "nowhere..HEAD", "--repo", str(root)), "nowhere")


def test_outside_a_repository_exits_2(tmp_path):
    assert_one_line_error(*run("notes", "v1..HEAD", "--repo", str(tmp_path)), "not inside a git repository")


def test_per_commit_and_squash_together_exit_2(history):
    root, _ = history
    assert_one_line_error(*run("notes", "v1..HEAD", "--per-commit", "--squash", "--repo", str(root)))


# --- what the diagram marks ---------------------------------------------------------------------

CLINIC = (Path(__file__).parent / "fixtures" / "clinic.model.yaml").read_text()
PATIENT_LINK = "appointments_patient: {from: appointments.patient_key, to: patients.patient_key}"


def newpath_tables(block: str) -> set[str]:
    return {t for line in block.splitlines() if line.strip().startswith("class ") and line.endswith(" newpath")
            for t in line.split()[1].removeprefix("t_").replace(",t_", ",").split(",")}


def clinic_notes(tmp_path: Path, new_text: str) -> str:
    root = new_repo(tmp_path / "repo")
    commit(root, "clinic", {"models/clinic.model.yaml": CLINIC})
    git(root, "tag", "v1")
    commit(root, "change", {"models/clinic.model.yaml": new_text})
    return notes(root, "v1..HEAD")


def test_the_diagram_marks_only_the_tables_a_filter_now_reaches(tmp_path):
    # appointments -> patients made two-way: every table that filters appointments now reaches patients, and
    # through patients the invoices. The new paths pass through all nine tables; only two are reached anew.
    widened = CLINIC.replace(PATIENT_LINK, PATIENT_LINK[:-1] + ", flow: two-way}")
    out = clinic_notes(tmp_path, widened)
    (block,) = mermaid_blocks(out)
    assert newpath_tables(block) == {"patients", "invoices"}
    assert "calendar → patients" in out and "clinic_access → invoices" in out  # the new paths are listed


def test_a_change_without_new_paths_marks_no_table(tmp_path):  # twin: a removed link, no path added
    removed = CLINIC.replace("  " + PATIENT_LINK + "\n", "")
    (block,) = mermaid_blocks(clinic_notes(tmp_path, removed))
    assert newpath_tables(block) == set() and "newpath" not in block
    assert "appointments_patient (removed)" in block
