"""`--format github`: workflow-command annotations (escaping, order, the per-step limit) and the job summary.

GitHub facts used (ECOSYSTEM.md, "CI output", checked against GitHub's documentation; the escaping rules are
those of the actions toolkit's command.ts, from memory): `::error file=F,line=L,title=T::message`; data escapes
`%` `\\r` `\\n`, properties also `:` `,`; 10 error and 10 warning annotations shown per step; a step summary
holds 1 MiB.
"""

from __future__ import annotations

import io
import os
import re
from pathlib import Path

import pytest

from modeldiff import cli, impact
from modeldiff.changes import Change
from modeldiff.compare import ModelDiff, Side
from modeldiff.impact import DiffResult
from modeldiff.render import github
from modelkit import bikeshare

ROOT = Path(__file__).parent.parent
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"
COMMAND = re.compile(r"^::(error|warning|notice) ([^:]*)::(.*)$")


def commands(out: str) -> list[tuple[str, dict, str]]:
    found = []
    for line in out.splitlines():
        m = COMMAND.match(line)
        if m:
            props = dict(p.split("=", 1) for p in m.group(2).split(","))
            found.append((m.group(1), props, m.group(3)))
    return found


def synthetic(breaking: int, numbers: int, safe: int, interleave: bool = True) -> list[ModelDiff]:
    """One model whose diff has the given numbers of changes (no positions: built in Python)."""
    m = bikeshare()
    changes = [Change("link.flow_widened", f"links.l{i}", sev, f"change {i}", id=f"c{i}")
               for i, sev in enumerate(["breaking"] * breaking + ["numbers"] * numbers + ["safe"] * safe)]
    if interleave:
        changes = changes[::-1]  # safe first: the output must reorder
    result = DiffResult(m, m, tuple(changes), (), (), ())
    return [ModelDiff(Side(None, "models/m.model.yaml"), Side(None, "models/m.model.yaml"), result)]


def render(diffs, env=None) -> str:
    out = io.StringIO()
    github.as_github(diffs, out, env={} if env is None else env)
    return out.getvalue()


# --- escaping -------------------------------------------------------------------------------------


def test_message_escapes_percent_and_line_breaks_only():
    assert github.escape_data("50% off\r\nnext: a, b") == "50%25 off%0D%0Anext: a, b"


def test_properties_also_escape_colon_and_comma():
    assert github.escape_property("a:b,c%\n") == "a%3Ab%2Cc%25%0A"


def test_an_annotation_line_keeps_its_shape_whatever_the_text():
    a = github.Annotation("warning", "t: x, y", "line one\nline two: 100%", "dir/a,b.yaml", 3, 5)
    assert a.command() == "::warning file=dir/a%2Cb.yaml,line=3,col=5,title=t%3A x%2C y::line one%0Aline two: 100%25"


def test_an_annotation_without_position_names_no_line():
    assert github.Annotation("notice", "t", "m").command() == "::notice title=t::m"


# --- what is emitted ------------------------------------------------------------------------------------


def test_revision_2_errors_first_then_warnings_pointing_at_the_link():
    from modeldiff.load import load_path

    old, new = load_path(str(EXAMPLE)).model, load_path(str(REVISION_2)).model  # absolute paths
    diff = ModelDiff(Side(None, str(EXAMPLE)), Side(None, str(REVISION_2)), impact.analyse(old, new, (), ()))
    out = render([diff], {"GITHUB_WORKSPACE": str(ROOT)})
    found = commands(out)
    assert [level for level, _, _ in found] == ["error"] + ["warning"] * 9 + ["notice"]  # notice: a new check warning
    link_line = next(n for n, line in enumerate(REVISION_2.read_text().splitlines(), 1) if line == "  trips_start_station:")
    level, props, message = next(c for c in found if "links.trips_start_station" in c[2])
    assert props["file"] == "examples/revision-2/bikeshare.model.yaml" and props["line"] == str(link_line)
    assert "ambiguity.introduced" in found[0][1]["title"]
    assert out.splitlines()[-1] == "modeldiff: bikeshare: breaking (1 breaking, 9 can move numbers, 1 safe)"


def test_most_severe_first_whatever_the_order_of_changes():
    levels = [level for level, _, _ in commands(render(synthetic(2, 2, 2)))]
    assert levels == ["error", "error", "warning", "warning", "notice", "notice"]


def test_an_exposure_comes_first_among_the_breaking():
    diff = synthetic(2, 0, 0, interleave=False)[0]
    exposed = Change("security.exposed", "roles.r.tables.trips", "breaking", "rows exposed", id="c9")
    result = DiffResult(diff.result.old, diff.result.new, diff.result.changes + (exposed,), (), (), ())
    found = commands(render([ModelDiff(diff.old, diff.new, result)]))
    assert [m.split(" ")[0] for _, _, m in found] == ["c9", "c0", "c1"]


def test_at_most_ten_errors_and_ten_warnings_then_a_notice_counting_the_rest():
    found = commands(render(synthetic(13, 12, 12)))
    levels = [level for level, _, _ in found]
    assert levels.count("error") == 10 and levels.count("warning") == 10
    assert levels[:20] == ["error"] * 10 + ["warning"] * 10
    last_level, _, last = found[-1]
    assert last_level == "notice" and "3 more errors, 2 more warnings and 3 more notices are not shown" in last
    assert levels.count("notice") == 10  # 9 safe changes and the count


def test_no_counting_notice_when_everything_fits():
    found = commands(render(synthetic(10, 10, 9)))
    assert len(found) == 29 and not any("not shown" in m for _, _, m in found)


def test_new_revision_errors_are_error_annotations(tmp_path):
    from modeldiff.model import Finding, Pos

    m = bikeshare()
    finding = Finding("broken-reference", "error", "measures.x", "measure x names table nope", pos=Pos("m.model.yaml", 7, 3))
    result = DiffResult(m, m, (), (), (), (), (finding,))
    (level, props, message), = commands(render([ModelDiff(Side(None, "m.model.yaml"), Side(None, "m.model.yaml"), result)]))
    assert (level, props["line"], props["title"]) == ("error", "7", "modeldiff broken-reference (bikeshare)")


def test_new_revision_errors_come_before_the_warnings():
    from modeldiff.model import Finding

    diff = synthetic(0, 2, 1)[0]
    finding = Finding("broken-reference", "error", "measures.x", "measure x names table nope")
    result = DiffResult(diff.result.old, diff.result.new, diff.result.changes, (), (), (), (finding,))
    levels = [level for level, _, _ in commands(render([ModelDiff(diff.old, diff.new, result)]))]
    assert levels == ["error", "warning", "warning", "notice"]


def test_an_absolute_position_is_made_relative_to_the_workspace(tmp_path):
    assert github.workspace_path(str(tmp_path / "models" / "m.model.yaml"), {"GITHUB_WORKSPACE": str(tmp_path)}) \
        == "models/m.model.yaml"
    assert github.workspace_path("./models/m.model.yaml", {}) == "models/m.model.yaml"


# --- the job summary -------------------------------------------------------------------------------------


def test_summary_is_appended_when_the_variable_is_set(tmp_path):
    summary = tmp_path / "summary.md"
    summary.write_text("earlier step\n", encoding="utf-8")
    render(synthetic(1, 1, 0), {"GITHUB_STEP_SUMMARY": str(summary)})
    text = summary.read_text(encoding="utf-8")
    assert text.startswith("earlier step\n") and "## modeldiff" in text and "| `bikeshare` | **breaking** |" in text
    assert "Trimmed" not in text


@pytest.mark.parametrize("env", [{}, {"GITHUB_STEP_SUMMARY": ""}])
def test_no_summary_variable_is_harmless(tmp_path, monkeypatch, env):
    monkeypatch.chdir(tmp_path)
    out = render(synthetic(1, 0, 0), env)
    assert commands(out)[0][0] == "error"
    assert list(tmp_path.iterdir()) == []


def test_an_unwritable_summary_is_a_warning_not_a_failure(tmp_path):
    out = render(synthetic(0, 0, 1), {"GITHUB_STEP_SUMMARY": str(tmp_path)})  # a folder: cannot be appended to
    assert any(level == "warning" and "no job summary" in props["title"] for level, props, _ in commands(out))


def test_a_long_report_is_trimmed_under_the_limit_with_a_note(tmp_path):
    summary = tmp_path / "summary.md"
    summary.write_text("x" * 1000 + "\n", encoding="utf-8")
    body = "## modeldiff\n\n<details><summary>many</summary>\n\n```mermaid\n" + "  a --> b\n" * 5000 + "```\n\n</details>\n"
    limit = 20_000 + github.SUMMARY_MARGIN
    assert github.append_summary(body, str(summary), limit=limit) is True
    text = summary.read_text(encoding="utf-8")
    assert len(text.encode("utf-8")) <= limit - github.SUMMARY_MARGIN
    assert github.TRIM_NOTE in text
    assert text.count("```") % 2 == 0 and text.count("<details>") == text.count("</details>")


def test_a_short_report_is_not_trimmed(tmp_path):
    summary = tmp_path / "summary.md"
    body = "## modeldiff\n\nshort\n"
    assert github.append_summary(body, str(summary)) is False
    assert summary.read_text(encoding="utf-8") == body


def test_the_real_limit_is_one_mebibyte():
    assert github.SUMMARY_LIMIT == 1024 * 1024


# --- through the command line ------------------------------------------------------------------------------


def test_diff_format_github_from_the_command_line(tmp_path, monkeypatch):
    summary = tmp_path / "summary.md"
    monkeypatch.setenv("GITHUB_STEP_SUMMARY", str(summary))
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["diff", str(EXAMPLE), str(REVISION_2), "--format", "github"], stdout=out, stderr=err)
    assert (code, err.getvalue()) == (3, "")
    assert all(line.startswith(("::", "modeldiff: ")) for line in out.getvalue().splitlines())
    assert "```mermaid" in summary.read_text(encoding="utf-8")


def test_check_format_github_lists_warnings(monkeypatch):
    monkeypatch.delenv("GITHUB_STEP_SUMMARY", raising=False)
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["check", str(REVISION_2), "--format", "github"], stdout=out, stderr=err)
    found = commands(out.getvalue())
    assert code == 0 and {level for level, _, _ in found} == {"warning"}
    assert {p["title"] for _, p, _ in found} == {"modeldiff ambiguous-paths (bikeshare)", "modeldiff security-stops (bikeshare)"}


def test_check_format_github_of_a_clean_model_prints_nothing(monkeypatch):
    out = io.StringIO()
    assert cli.main(["check", str(EXAMPLE), "--format", "github"], stdout=out, stderr=io.StringIO()) == 0
    assert out.getvalue() == ""


# --- the sample workflow ------------------------------------------------------------------------------------

WORKFLOW = ROOT / "docs" / "examples" / "modeldiff.yml"


def _steps() -> list[dict]:
    import yaml

    return yaml.safe_load(WORKFLOW.read_text(encoding="utf-8"))["jobs"]["modeldiff"]["steps"]


def test_sample_workflow_pastes_no_expression_into_a_script():
    runs = [s["run"] for s in _steps() if "run" in s]
    assert any("--format github" in r for r in runs) and any("--format html" in r for r in runs)
    assert not any("${{" in r for r in runs)


@pytest.mark.parametrize("modeldiff_exit, check_exit, report_fails", [(0, 0, False), (1, 0, False), (3, 3, False),
                                                                       (2, 2, True)])
def test_sample_workflow_scripts_map_exit_codes(tmp_path, modeldiff_exit, check_exit, report_fails):
    """The steps' scripts under GitHub's default shell (bash -eo pipefail), with a stand-in modeldiff."""
    import shutil
    import subprocess

    bash = shutil.which("bash")
    if bash is None:
        pytest.skip("bash is not installed")
    fake = tmp_path / "bin" / "modeldiff"
    fake.parent.mkdir()
    fake.write_text(f"#!/bin/sh\necho report\nexit {modeldiff_exit}\n")
    fake.chmod(0o755)
    env = {"PATH": f"{fake.parent}{os.pathsep}{os.environ.get('PATH', '')}", "BASE_REF": "main"}
    check, report = (next(s["run"] for s in _steps() if "run" in s and f"--format {fmt}" in s["run"])
                     for fmt in ("github", "html"))
    ran = subprocess.run([bash, "--noprofile", "--norc", "-eo", "pipefail", "-c", check], env=env, cwd=tmp_path)
    assert ran.returncode == check_exit
    ran = subprocess.run([bash, "--noprofile", "--norc", "-eo", "pipefail", "-c", report], env=env, cwd=tmp_path)
    assert (ran.returncode != 0) == report_fails
    assert (tmp_path / "modeldiff-report.html").read_text() == "report\n"
