"""`modeldiff diff` end to end: the JSON contract of changes.md, exit codes, text and Markdown, git revisions.

Every git test runs on a real temporary repository with the surrounding GIT_* variables cleared.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest

from gitkit import git, init_repo, isolate_git
from modeldiff import cli

SCENARIOS = Path(__file__).parent / "impact_scenarios"
TPCDS = Path(__file__).parent / "fixtures" / "tpcds.model.yaml"


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def pair(name: str) -> tuple[str, str]:
    return str(SCENARIOS / name / "old.model.yaml"), str(SCENARIOS / name / "new.model.yaml")


def diff_json(name: str) -> tuple[int, dict]:
    code, out, err = run("diff", *pair(name), "--format", "json")
    assert err == ""
    return code, json.loads(out)


def assert_one_line_error(code: int, out: str, err: str, *words: str) -> None:
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and err.startswith("modeldiff: "), err
    assert "Traceback" not in err
    for word in words:
        assert word in err, err


# --- the JSON contract ---------------------------------------------------------------------------
# Written from changes.md, "diff --format json (abridged)": the fields named there, with their types.
# More fields may be added (so additionalProperties stays open); none of these may go or be renamed.

_PATHS = {"type": "array", "items": {"type": "array", "items": {"type": "string"}}}
_REASON = {"type": "object", "required": ["change", "source", "paths_added", "paths_removed"],
           "properties": {"change": {"type": "string", "pattern": "^c[0-9]+$"},
                          "source": {"type": ["string", "null"]},
                          "paths_added": _PATHS, "paths_removed": _PATHS}}
_SEVERITY = {"enum": ["safe", "numbers", "breaking"]}
_TABLES = {"type": "array", "items": {"type": "string"}}
DIFF_SCHEMA = {
    "type": "object",
    "required": ["format", "old", "new", "changes", "impacts", "summary"],
    "properties": {
        "format": {"const": 1},
        "old": {"type": "object", "required": ["rev", "path"],
                "properties": {"rev": {"type": ["string", "null"]}, "path": {"type": "string"}}},
        "new": {"type": "object", "required": ["rev", "path"],
                "properties": {"rev": {"type": ["string", "null"]}, "path": {"type": "string"}}},
        "changes": {"type": "array", "items": {
            "type": "object", "required": ["id", "kind", "subject", "severity", "before", "after", "message"],
            "properties": {"id": {"type": "string", "pattern": "^c[0-9]+$"},
                           "kind": {"type": "string", "pattern": r"^[a-z]+\.[a-z_]+$"},
                           "subject": {"type": "string"}, "severity": _SEVERITY, "message": {"type": "string"}}}},
        "impacts": {
            "type": "object", "required": ["measures", "roles", "reports"],
            "properties": {
                "measures": {"type": "array", "items": {
                    "type": "object", "required": ["name", "severity", "reasons"],
                    "properties": {"name": {"type": "string"}, "severity": _SEVERITY,
                                   "reasons": {"type": "array", "items": _REASON}}}},
                "roles": {"type": "array", "items": {
                    "type": "object", "required": ["name", "severity", "exposed", "tightened", "rerouted", "reasons"],
                    "properties": {"name": {"type": "string"}, "severity": _SEVERITY, "exposed": _TABLES,
                                   "tightened": _TABLES, "rerouted": _TABLES, "reasons": {"type": "array"}}}},
                "reports": {"type": "array", "items": {
                    "type": "object", "required": ["name", "severity", "reasons"],
                    "properties": {"name": {"type": "string"}, "severity": _SEVERITY, "reasons": {"type": "array"}}}}}},
        "summary": {"type": "object", "required": ["breaking", "numbers", "safe", "exit_code"],
                    "properties": {"breaking": {"type": "integer"}, "numbers": {"type": "integer"},
                                   "safe": {"type": "integer"}, "exit_code": {"enum": [0, 1, 3]}}},
    },
}

# The example of changes.md, as printed there.
SPEC_EXAMPLE = {
    "format": 1,
    "old": {"rev": "main", "path": "models/bikeshare.model.yaml"},
    "new": {"rev": None, "path": "models/bikeshare.model.yaml"},
    "changes": [{"id": "c1", "kind": "link.flow_widened", "subject": "links.trips_start_station",
                 "severity": "numbers", "before": "one-way", "after": "two-way", "message": "..."}],
    "impacts": {
        "measures": [{"name": "stock_value", "severity": "numbers",
                      "reasons": [{"change": "c1", "source": "calendar",
                                   "paths_added": [["trips_start_day", "trips_start_station", "stock_station"]],
                                   "paths_removed": []}]}],
        "roles": [{"name": "east_depot_lead", "severity": "breaking",
                   "exposed": ["trips"], "tightened": [], "rerouted": [], "reasons": []}],
        "reports": [{"name": "weekly_fares", "severity": "numbers", "reasons": []}]},
    "summary": {"breaking": 0, "numbers": 1, "safe": 0, "exit_code": 1},
}


def validate(doc: dict) -> None:
    import jsonschema

    jsonschema.validate(doc, DIFF_SCHEMA)


def test_the_schema_here_accepts_the_spec_example_and_rejects_a_renamed_field():
    import jsonschema

    validate(SPEC_EXAMPLE)
    renamed = json.loads(json.dumps(SPEC_EXAMPLE))
    renamed["impacts"]["measures"][0]["reasons"][0]["paths"] = renamed["impacts"]["measures"][0]["reasons"][0].pop("paths_added")
    with pytest.raises(jsonschema.ValidationError):
        validate(renamed)


@pytest.mark.parametrize("name", ["flow_widened", "security_flow_one_way", "role_filter_moved", "measure_removed_used",
                                  "variant_option_changed", "identical"])
def test_diff_json_follows_the_contract(name):
    code, doc = diff_json(name)
    validate(doc)
    old, new = pair(name)
    assert doc["old"] == {"rev": None, "path": old} and doc["new"] == {"rev": None, "path": new}
    assert doc["summary"]["exit_code"] == code
    ids = [c["id"] for c in doc["changes"]]
    assert ids == [f"c{i}" for i in range(1, len(ids) + 1)]
    counts = {s: sum(c["severity"] == s for c in doc["changes"]) for s in ("breaking", "numbers", "safe")}
    assert {k: doc["summary"][k] for k in counts} == counts
    for section in ("measures", "roles", "reports"):
        for item in doc["impacts"][section]:
            assert {r["change"] for r in item["reasons"]} <= set(ids)


def test_diff_json_names_the_change_source_and_paths_of_a_reason():
    _, doc = diff_json("flow_widened")
    widened = next(c for c in doc["changes"] if c["kind"] == "link.flow_widened")
    assert (widened["subject"], widened["before"], widened["after"]) == ("links.trips_start_station", "one-way", "two-way")
    stock = next(m for m in doc["impacts"]["measures"] if m["name"] == "stock_value")
    calendar = next(r for r in stock["reasons"] if r["source"] == "calendar")
    assert calendar["change"] == widened["id"]
    assert calendar["paths_added"] == [["trips_start_day", "trips_start_station", "stock_levels_station"]]
    assert calendar["paths_removed"] == []


def test_diff_json_lists_roles_with_exposed_tightened_and_rerouted():
    _, doc = diff_json("role_filter_moved")
    [role] = doc["impacts"]["roles"]
    assert role["name"] == "east_district_lead" and role["severity"] == "breaking"
    assert role["exposed"] == ["district_access", "districts", "mechanics", "repairs"]
    assert role["tightened"] == []
    assert role["rerouted"] == ["station_parts", "stations", "stock_levels", "trips"]


def test_identical_models_give_an_empty_document():
    code, doc = diff_json("identical")
    assert code == 0
    assert doc["changes"] == [] and doc["impacts"] == {"measures": [], "roles": [], "reports": []}
    assert {k: doc["summary"][k] for k in ("breaking", "numbers", "safe", "exit_code")} == \
        {"breaking": 0, "numbers": 0, "safe": 0, "exit_code": 0}


# --- exit codes ---------------------------------------------------------------------------------


@pytest.mark.parametrize("name, expected", [("description_only", 0), ("identical", 0), ("link_renamed", 0),
                                            ("standby_set", 1), ("via_added", 1), ("security_flow_two_way", 1),
                                            ("flow_widened", 3), ("security_flow_one_way", 3),
                                            ("measure_removed_used", 3)])
def test_exit_codes(name, expected):
    for fmt in ("text", "json", "markdown"):
        code, _, err = run("diff", *pair(name), "--format", fmt)
        assert (code, err) == (expected, "")


def test_a_new_revision_with_an_error_is_breaking(tmp_path):
    old = (SCENARIOS / "identical" / "old.model.yaml").read_text()
    broken = tmp_path / "broken.model.yaml"
    broken.write_text(old.replace("to: riders.rider_key}", "to: riders.rider_id}"))  # no such column
    code, out, _ = run("diff", str(SCENARIOS / "identical" / "old.model.yaml"), str(broken), "--format", "json")
    doc = json.loads(out)
    assert code == 3 and doc["summary"]["exit_code"] == 3
    assert any(f["severity"] == "error" for f in doc["findings"])


def test_unreadable_input_exits_2_with_one_line(tmp_path):
    old, _ = pair("identical")
    assert_one_line_error(*run("diff", old, str(tmp_path / "missing.model.yaml")), "missing.model.yaml")
    bad = tmp_path / "bad.model.yaml"
    bad.write_text("model: bikeshare\nformat: 1\ntables: [unclosed\n")
    assert_one_line_error(*run("diff", old, str(bad)), "bad.model.yaml")
    binary = tmp_path / "binary.model.yaml"
    binary.write_bytes(b"\xff\xfe\x00model")
    assert_one_line_error(*run("diff", str(binary), old), "binary.model.yaml")


def test_misused_command_exits_2_with_one_line():
    old, new = pair("identical")
    assert_one_line_error(*run("diff", old))
    assert_one_line_error(*run("diff", old, new, "--head", "HEAD"), "--head")
    assert_one_line_error(*run("diff", old, new, "--format", "yaml"))


# --- text and Markdown ------------------------------------------------------------------------


def test_text_says_security_plainly_and_defers_to_the_organisations_review():
    code, out, _ = run("diff", *pair("security_flow_one_way"))
    assert code == 3
    lines = out.splitlines()
    caution = [line for line in lines if line.strip().startswith("SECURITY:")]
    assert caution, out
    assert "security review" in " ".join(out.split())
    # the caution comes before the list of changes
    assert lines.index(caution[0]) < next(i for i, line in enumerate(lines) if "security.exposed" in line)
    assert "\x1b[" not in out  # not a terminal: no escape codes


def test_text_has_no_security_caution_without_an_exposure():
    for name in ("security_flow_two_way", "flow_widened", "security_flow_one_way_no_effect"):
        _, out, _ = run("diff", *pair(name))
        assert "SECURITY" not in out


def test_text_lists_impacts_with_sources_and_paths():
    _, out, _ = run("diff", *pair("flow_widened"))
    flat = " ".join(out.split())
    assert "impacted measures (9)" in flat  # stock measures by new paths, trip measures by the route back
    assert "when filtered or grouped by calendar" in flat
    assert "+ trips_start_day / trips_start_station / stock_levels_station" in flat


def test_text_of_identical_models_says_no_changes():
    code, out, _ = run("diff", *pair("identical"))
    assert code == 0 and "no changes" in out


def markdown(*argv: str) -> str:
    code, out, err = run("diff", *argv, "--format", "markdown")
    assert err == "" and code in (0, 1, 3)
    return out


def test_markdown_starts_with_the_summary_table():
    out = markdown(*pair("flow_widened"))
    tables = [line for line in out.splitlines() if line.startswith("|")]
    assert tables[0].startswith("| model | verdict |")
    assert re.match(r"\| `bikeshare` \| \*\*breaking\*\* \| 1 \| 13 \| 1 \| 9 \| 0 \| 5 \|", tables[2])


def test_markdown_folds_long_lists_into_details_and_repeats_the_table_header(tmp_path):
    text = TPCDS.read_text()
    link = "  store_sales_item:\n    from: store_sales.ss_item_sk\n    to: item.i_item_sk\n"
    new = tmp_path / "tpcds.model.yaml"
    new.write_text(text.replace(link, link + "    flow: two-way\n"))
    out = markdown(str(TPCDS), str(new))
    assert "<details><summary>" in out and "</details>" in out
    header = "| id | severity | kind | subject | what it means |"
    assert out.count(header) == 2  # once shown, once inside the fold
    folded = out[out.index("<details>"):out.index("</details>")]
    assert header in folded
    assert out.index("| model | verdict |") < out.index("<details>")


def test_markdown_does_not_fold_short_lists():
    out = markdown(*pair("standby_set"))
    assert "<details>" not in out


def test_markdown_security_caution_only_with_an_exposure():
    assert "**SECURITY:**" in markdown(*pair("security_flow_one_way"))
    assert "SECURITY" not in markdown(*pair("security_flow_two_way"))


# --- git revisions -----------------------------------------------------------------------------------


@pytest.fixture(autouse=True)
def clean_git_env(monkeypatch, tmp_path):
    isolate_git(monkeypatch, tmp_path)


def scenario_text(name: str, side: str) -> str:
    return (SCENARIOS / name / f"{side}.model.yaml").read_text()


@pytest.fixture
def repo(tmp_path, monkeypatch) -> Path:
    """Two commits of models/bikeshare.model.yaml: the base model, then trips_start_station two-way."""
    root = tmp_path / "repo"
    (root / "models").mkdir(parents=True)
    init_repo(root)
    model = root / "models" / "bikeshare.model.yaml"
    model.write_text(scenario_text("flow_widened", "old"))
    git(root, "add", "-A")
    git(root, "commit", "-q", "-m", "base model")
    model.write_text(scenario_text("flow_widened", "new"))
    git(root, "commit", "-q", "-am", "trips_start_station two-way")
    monkeypatch.chdir(root)
    return root


def kinds(doc: dict) -> list[tuple[str, str]]:
    return [(c["kind"], c["subject"]) for c in doc["changes"]]


def test_base_and_head_revisions(repo):
    code, out, err = run("diff", "--base", "HEAD~1", "--head", "HEAD", "--format", "json")
    doc = json.loads(out)
    validate(doc)
    assert (code, err) == (3, "")
    assert doc["old"] == {"rev": "HEAD~1", "path": "models/bikeshare.model.yaml"}
    assert doc["new"] == {"rev": "HEAD", "path": "models/bikeshare.model.yaml"}
    assert ("link.flow_widened", "links.trips_start_station") in kinds(doc)
    assert ("ambiguity.introduced", "paths.calendar->stock_levels") in kinds(doc)


def test_base_against_the_working_tree(repo):
    # the working tree goes back to the base model, with one description added
    text = scenario_text("flow_widened", "old").replace("description: Parts and labour.", "description: Parts and labour with VAT.")
    (repo / "models" / "bikeshare.model.yaml").write_text(text)
    code, out, _ = run("diff", "--base", "HEAD~1", "--format", "json")
    doc = json.loads(out)
    assert doc["new"] == {"rev": None, "path": "models/bikeshare.model.yaml"}
    assert (code, kinds(doc)) == (0, [("measure.metadata_changed", "measures.repair_cost")])
    # the committed head still has the flip
    assert run("diff", "--base", "HEAD~1", "--head", "HEAD")[0] == 3


def test_rev_path_against_a_file(repo):
    code, out, _ = run("diff", "HEAD~1:models/bikeshare.model.yaml", "models/bikeshare.model.yaml", "--format", "json")
    doc = json.loads(out)
    validate(doc)
    assert code == 3
    assert doc["old"] == {"rev": "HEAD~1", "path": "models/bikeshare.model.yaml"}
    assert doc["new"] == {"rev": None, "path": "models/bikeshare.model.yaml"}
    same = json.loads(run("diff", "HEAD:models/bikeshare.model.yaml", "models/bikeshare.model.yaml", "--format", "json")[1])
    assert same["changes"] == []


def test_a_model_added_in_the_head_only_is_a_whole_model_addition(repo):
    fleet = scenario_text("identical", "old").replace("model: bikeshare", "model: fleet")
    (repo / "models" / "fleet.model.yaml").write_text(fleet)
    git(repo, "add", "-A")
    git(repo, "commit", "-q", "-m", "fleet model")
    code, out, err = run("diff", "--base", "HEAD~1", "--head", "HEAD", "--format", "json")
    doc = json.loads(out)
    assert err == ""
    paths = [m["new"]["path"] for m in doc["models"]]
    assert paths == ["models/bikeshare.model.yaml", "models/fleet.model.yaml"]
    bikeshare, added = doc["models"]
    assert bikeshare["changes"] == [] and bikeshare["summary"]["exit_code"] == 0
    assert added["model"] == "fleet"
    assert {c["kind"].split(".")[1] for c in added["changes"]} == {"added"}
    assert not [c for c in added["changes"] if c["kind"].startswith("path.")]  # every path is new: none listed
    assert added["impacts"] == {"measures": [], "roles": [], "reports": []}
    assert code == doc["summary"]["exit_code"] == added["summary"]["exit_code"]


def test_a_whole_model_addition_reports_its_ambiguities(repo):
    (repo / "models" / "fleet.model.yaml").write_text(scenario_text("flow_widened", "new").replace("model: bikeshare", "model: fleet"))
    git(repo, "add", "-A")
    git(repo, "commit", "-q", "-m", "fleet model")
    code, out, _ = run("diff", "--base", "HEAD~1", "--head", "HEAD", "models/fleet.model.yaml", "--format", "json")
    doc = json.loads(out)
    assert code == 3
    assert [c["subject"] for c in doc["changes"] if c["kind"] == "ambiguity.introduced"] == ["paths.calendar->stock_levels"]


def test_a_model_moved_between_revisions_is_compared_with_itself(repo):
    git(repo, "mv", "models/bikeshare.model.yaml", "bikeshare.model.yaml")
    git(repo, "commit", "-q", "-m", "move the model")
    code, out, _ = run("diff", "--base", "HEAD~1", "--head", "HEAD", "--format", "json")
    doc = json.loads(out)
    assert code == 0
    assert doc["old"]["path"] == "models/bikeshare.model.yaml" and doc["new"]["path"] == "bikeshare.model.yaml"
    assert doc["changes"] == []


def test_a_removed_model_and_an_added_model_of_another_name_are_not_paired(repo):
    # twin of the move test: a different model at the new path is a whole removal plus a whole addition
    text = (repo / "models" / "bikeshare.model.yaml").read_text().replace("model: bikeshare", "model: fleet", 1)
    git(repo, "rm", "-q", "models/bikeshare.model.yaml")
    (repo / "fleet.model.yaml").write_text(text)
    git(repo, "add", "-A")
    git(repo, "commit", "-q", "-m", "replace the model")
    code, out, _ = run("diff", "--base", "HEAD~1", "--head", "HEAD", "--format", "json")
    doc = json.loads(out)
    assert [(m["model"], m["old"]["path"], m["new"]["path"]) for m in doc["models"]] == [
        ("fleet", "fleet.model.yaml", "fleet.model.yaml"),
        ("bikeshare", "models/bikeshare.model.yaml", "models/bikeshare.model.yaml")]
    assert all(c["kind"] == "table.added" for c in doc["models"][0]["changes"] if c["kind"].startswith("table."))
    assert any(c["kind"] == "table.removed" for c in doc["models"][1]["changes"])


def test_a_model_moved_between_revisions_can_be_compared_by_rev_path(repo):
    git(repo, "mv", "models/bikeshare.model.yaml", "bikeshare.model.yaml")
    git(repo, "commit", "-q", "-m", "move the model")
    code, out, _ = run("diff", "HEAD~1:models/bikeshare.model.yaml", "HEAD:bikeshare.model.yaml", "--format", "json")
    assert code == 0 and json.loads(out)["changes"] == []


def test_shallow_clone_missing_the_base_exits_2_and_says_shallow(repo, tmp_path, monkeypatch):
    clone = tmp_path / "clone"
    git(tmp_path, "clone", "-q", "--depth", "1", f"file://{repo}", str(clone))
    monkeypatch.chdir(clone)
    assert_one_line_error(*run("diff", "--base", "HEAD~1", "--head", "HEAD"), "shallow")
    assert_one_line_error(*run("diff", "--base", "HEAD~1"), "shallow")
    # what the clone does hold still compares
    assert run("diff", "--base", "HEAD", "--head", "HEAD")[0] == 0


def test_bad_revision_exits_2_with_one_line(repo):
    assert_one_line_error(*run("diff", "--base", "no-such-branch"), "no-such-branch")
    assert_one_line_error(*run("diff", "--base", "HEAD~1", "--head", "no-such-branch"), "no-such-branch")
    assert_one_line_error(*run("diff", "no-such-branch:models/bikeshare.model.yaml", "models/bikeshare.model.yaml"),
                          "no-such-branch")


def test_missing_path_at_a_revision_exits_2_with_one_line(repo):
    assert_one_line_error(*run("diff", "HEAD~1:models/nothing.model.yaml", "models/bikeshare.model.yaml"),
                          "nothing.model.yaml")


def test_not_a_repository_exits_2_with_one_line(tmp_path, monkeypatch):
    plain = tmp_path / "plain"
    plain.mkdir()
    monkeypatch.setenv("GIT_CEILING_DIRECTORIES", str(tmp_path))
    monkeypatch.chdir(plain)
    assert_one_line_error(*run("diff", "--base", "HEAD"))
