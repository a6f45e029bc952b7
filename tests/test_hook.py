"""The pre-push gate on real repositories: a bare remote, `git push`, the installed hook run by git itself.

Pushes run git as a subprocess with every GIT_* variable of the surrounding process removed (hooks
export them); the finer policy and acknowledgement cases call `hook.run_hook` in-process with the
lines git would write, which is the same code minus the process start.
"""

from __future__ import annotations

import io
import re
import os
import shutil
import stat
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

from modeldiff import hook
from modeldiff.errors import ModeldiffError

ROOT = Path(__file__).resolve().parents[1]
MODEL = "models/bikeshare.model.yaml"
V1 = """\
model: bikeshare
format: 1
tables:
  trips: {kind: fact, key: trip_id, columns: {trip_id: integer, fare: decimal}}
measures:
  fare_revenue: {table: trips, expr: sum(fare)}
  trip_count: {table: trips, expr: count(*)}
reports:
  weekly_fares: {measures: [fare_revenue], owner: finance}
  ride_volume: {measures: [trip_count]}
"""
# fare_revenue removed while weekly_fares shows it: measure.removed and reference.broken, both breaking
BREAKING = V1.replace("  fare_revenue: {table: trips, expr: sum(fare)}\n", "")
# trip_count counts another way: numbers can move, nothing breaks
NUMBERS = V1.replace("count(*)", "count(trip_id)")
BREAKING_SUBJECTS = ("measures.fare_revenue", "reports.weekly_fares")


@pytest.fixture(autouse=True)
def clean_git_env(monkeypatch, tmp_path):
    """No GIT_* variable of the surrounding process (a hook, a CI runner) may reach these tests."""
    for name in list(os.environ):
        if name.startswith("GIT_") or name in ("FORCE_COLOR", "NO_COLOR"):
            monkeypatch.delenv(name)
    monkeypatch.setenv("GIT_CONFIG_NOSYSTEM", "1")
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", str(tmp_path / "no-global-gitconfig"))
    monkeypatch.setenv("HOME", str(tmp_path))


def git(cwd: Path, *args: str, check: bool = True, env: dict | None = None) -> subprocess.CompletedProcess:
    done = subprocess.run(["git", *args], cwd=cwd, capture_output=True, text=True, env=env)
    if check and done.returncode != 0:
        raise AssertionError(f"git {' '.join(args)} failed: {done.stderr}")
    return done


def sha(cwd: Path, rev: str) -> str | None:
    done = git(cwd, "rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}", check=False)
    return done.stdout.strip() or None


def write(root: Path, relative: str, text: str) -> None:
    target = root / relative
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_text(text)


def commit(root: Path, message: str, files: dict[str, str] | None = None, trailers: tuple[str, ...] = ()) -> str:
    for relative, text in (files or {}).items():
        write(root, relative, text)
    git(root, "add", "-A")
    args = ["commit", "-q", "--allow-empty", "-m", message]
    for trailer in trailers:
        args += ["--trailer", trailer]
    git(root, *args)
    return sha(root, "HEAD")


@dataclass
class World:
    work: Path
    remote: Path

    def push(self, *args: str, env: dict | None = None) -> "Pushed":
        done = git(self.work, "push", *args, check=False, env=env)
        return Pushed(done.returncode, done.stdout + done.stderr)

    def remote_sha(self, ref: str = "refs/heads/main") -> str | None:
        return sha(self.remote, ref)


@dataclass
class Pushed:
    code: int
    out: str


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    """Built once: a work repository whose main (V1 of the model) is on a bare remote at ../remote.git."""
    folder = tmp_path_factory.mktemp("template")
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update(GIT_CONFIG_NOSYSTEM="1", GIT_CONFIG_GLOBAL=str(folder / "no-global-gitconfig"), HOME=str(folder))

    def run(cwd, *args):
        subprocess.run(["git", *args], cwd=cwd, env=env, check=True, capture_output=True)
    run(folder, "init", "-q", "--bare", "remote.git")
    work = folder / "work"
    work.mkdir()
    run(work, "init", "-q", "-b", "main")
    for key, value in (("user.name", "Test Rider"), ("user.email", "rider@example.invalid"),
                       ("commit.gpgsign", "false"), ("tag.gpgsign", "false")):
        run(work, "config", key, value)
    write(work, MODEL, V1)
    write(work, "README.md", "bike share\n")
    run(work, "add", "-A")
    run(work, "commit", "-q", "-m", "first")
    run(work, "remote", "add", "origin", "../remote.git")  # relative: every copy pushes to its own remote
    run(work, "push", "-q", "origin", "main")
    run(work, "fetch", "-q", "origin")
    return folder


@pytest.fixture
def world(template, tmp_path) -> World:
    """A fresh copy of the template: no hook yet."""
    shutil.copytree(template / "remote.git", tmp_path / "remote.git", symlinks=True)
    shutil.copytree(template / "work", tmp_path / "work", symlinks=True)
    return World(tmp_path / "work", tmp_path / "remote.git")


@pytest.fixture
def gated(world) -> World:
    hook.install(str(world.work), io.StringIO(), python=sys.executable)
    return world


def in_process(work: Path, text: str, remote: str | None = "origin", from_env: bool = False,
               env: dict | None = None, stdin=None) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = hook.run_hook(remote, from_env=from_env, stdin=stdin if stdin is not None else io.StringIO(text),
                         stdout=out, stderr=err, env=env or {}, repo=str(work))
    return code, out.getvalue(), err.getvalue()


def line(local: str, remote_sha: str, ref: str = "refs/heads/main") -> str:
    return f"{ref} {local} {ref} {remote_sha}\n"


# --- blocking and letting through --------------------------------------------------------------------


def test_a_breaking_push_is_blocked_with_a_clear_explanation(gated):
    before = gated.remote_sha()
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    pushed = gated.push("origin", "main")
    assert pushed.code != 0 and gated.remote_sha() == before
    assert "verdict: breaking" in pushed.out
    assert "push blocked: refs/heads/main brings 3 unacknowledged breaking changes" in pushed.out
    for subject in BREAKING_SUBJECTS:
        assert f"--trailer 'Model-Reviewed: {subject}'" in pushed.out
    assert "--no-verify" in pushed.out
    assert "tell: finance: weekly_fares (breaking)" in pushed.out  # the report's own owner
    assert "\x1b[" not in pushed.out  # no colour unless forced


def test_a_push_that_only_moves_numbers_goes_through(gated):
    head = commit(gated.work, "count trips by id", {MODEL: NUMBERS})
    pushed = gated.push("origin", "main")
    assert pushed.code == 0 and gated.remote_sha() == head
    assert "verdict: numbers" in pushed.out and "refs/heads/main: push allowed" in pushed.out
    assert "push blocked" not in pushed.out and "tell:" not in pushed.out  # ride_volume has no owner


def test_a_push_acknowledged_by_trailers_goes_through(gated):
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    head = commit(gated.work, "Review model changes", trailers=("Model-Reviewed: measures.fare_revenue",
                                                                "Model-Reviewed: reports.weekly_fares"))
    pushed = gated.push("origin", "main")
    assert pushed.code == 0 and gated.remote_sha() == head
    assert "acknowledged by Model-Reviewed trailers: measures.fare_revenue, reports.weekly_fares" in pushed.out


def test_a_trailer_naming_another_subject_still_blocks(gated):
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING},
           trailers=("Model-Reviewed: measures.trip_count, measures.fare_revenue",))
    pushed = gated.push("origin", "main")
    assert pushed.code != 0
    assert "brings 2 unacknowledged breaking changes" in pushed.out  # both about reports.weekly_fares
    assert "--trailer 'Model-Reviewed: reports.weekly_fares'" in pushed.out
    assert "--trailer 'Model-Reviewed: measures.fare_revenue'" not in pushed.out


def test_a_wildcard_trailer_acknowledges_nothing_and_says_why(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "drop fare revenue", {MODEL: BREAKING}, trailers=("Model-Reviewed: *",))
    code, out, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_BLOCKED
    assert "ignored 'Model-Reviewed: *'" in err and "nobody has read" in err


def test_a_push_accepted_by_the_policy_goes_through(gated):
    head = commit(gated.work, "drop fare revenue, accepted", {
        MODEL: BREAKING, ".modeldiff.yaml": "accept: [measures.fare_revenue, 'reports.*']\n"})
    pushed = gated.push("origin", "main")
    assert pushed.code == 0 and gated.remote_sha() == head
    assert f"accepted by {head[:12]}:.modeldiff.yaml: measures.fare_revenue, reports.weekly_fares" in pushed.out
    assert "note: this push changes .modeldiff.yaml" in pushed.out


def test_a_policy_accepting_other_subjects_still_blocks(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "drop fare revenue", {MODEL: BREAKING, ".modeldiff.yaml": "accept: ['reports.*']\n"})
    code, out, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_BLOCKED
    assert "measures.fare_revenue (measure.removed" in err and "reports.weekly_fares (" not in err


def test_the_policy_is_read_from_the_pushed_commit_not_the_disk(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    write(world.work, ".modeldiff.yaml", "accept: ['*']\n")  # on disk only
    code, _, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_BLOCKED and "push blocked" in err


def test_a_broken_policy_blocks_with_its_reason(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS, ".modeldiff.yaml": "block: [breaking]\nacept: []\n"})
    code, _, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_UNDECIDED
    assert f"push blocked: {head[:12]}:.modeldiff.yaml:2:1: unknown key 'acept'" in err


def test_a_valid_policy_lets_the_same_change_through(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS, ".modeldiff.yaml": "block: [breaking]\naccept: []\n"})
    code, out, err = in_process(world.work, line(head, base))
    assert (code, err) == (0, "") and "push allowed" in out


def test_a_policy_blocking_numbers_blocks_a_numbers_change(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS, ".modeldiff.yaml": "block: [numbers, breaking]\n"})
    code, _, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_BLOCKED
    assert "unacknowledged breaking or numbers change (" in err and "measures.trip_count" in err


def test_policy_owners_are_told_about_impacted_reports(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS, ".modeldiff.yaml": "owners: {ride_volume: operations}\n"})
    code, out, _ = in_process(world.work, line(head, base))
    assert code == 0 and "tell: operations: ride_volume (numbers)" in out


# --- which range ------------------------------------------------------------------------------------


def test_a_new_branch_is_compared_with_its_merge_base_with_the_default_branch(gated):
    git(gated.work, "switch", "-q", "-c", "feature")
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    pushed = gated.push("origin", "feature")
    assert pushed.code != 0 and gated.remote_sha("refs/heads/feature") is None
    assert "compared with the merge base with origin/main" in pushed.out
    assert "push blocked: refs/heads/feature" in pushed.out


def test_a_new_branch_without_model_changes_goes_through_silently(gated):
    git(gated.work, "switch", "-q", "-c", "docs")
    head = commit(gated.work, "words", {"README.md": "bike share, documented\n"})
    pushed = gated.push("origin", "docs")
    assert pushed.code == 0 and gated.remote_sha("refs/heads/docs") == head
    assert "modeldiff" not in pushed.out


def test_a_branch_without_common_history_reports_every_model_as_added(world):
    git(world.work, "switch", "-q", "--orphan", "fresh")
    head = commit(world.work, "fresh start", {MODEL: NUMBERS})
    code, out, _ = in_process(world.work, line(head, "0" * 40, "refs/heads/fresh"))
    assert code == 0 and "every model counts as added" in out
    assert f"(nothing) -> {head[:12]}:{MODEL}" in out and "table.added tables.trips" in out


def test_a_remote_commit_missing_here_falls_back_to_the_merge_base_and_says_so(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS})
    missing = "1234567890" * 4
    code, out, err = in_process(world.work, line(head, missing))
    assert code == 0
    assert "is at 123456789012, which is not in this repository" in err
    assert "merge base with origin/main" in err and f"{base[:12]}..{head[:12]}" in out


def test_a_remote_commit_missing_here_still_blocks_a_breaking_change(world):
    head = commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    code, _, err = in_process(world.work, line(head, "1234567890" * 4))
    assert code == hook.EXIT_BLOCKED and "not in this repository" in err and "push blocked" in err


def test_deleting_a_branch_goes_through(gated):
    git(gated.work, "switch", "-q", "-c", "old")
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    assert gated.push("--no-verify", "origin", "old").code == 0
    pushed = gated.push("origin", "--delete", "old")
    assert pushed.code == 0 and gated.remote_sha("refs/heads/old") is None
    assert "modeldiff" not in pushed.out


def test_a_deletion_does_not_hide_a_breaking_branch_in_the_same_push(gated):
    git(gated.work, "switch", "-q", "-c", "old")
    assert gated.push("-q", "origin", "old").code == 0
    git(gated.work, "switch", "-q", "main")
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    pushed = gated.push("origin", ":old", "main")
    assert pushed.code != 0 and "push blocked: refs/heads/main" in pushed.out
    assert gated.remote_sha("refs/heads/old") is not None  # git aborts the whole push


def test_an_annotated_tag_is_peeled_to_its_commit_and_checked(gated):
    git(gated.work, "switch", "-q", "-c", "release")
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    git(gated.work, "tag", "-a", "v2", "-m", "version 2")
    pushed = gated.push("origin", "v2")
    assert pushed.code != 0 and "push blocked: refs/tags/v2" in pushed.out
    assert gated.remote_sha("refs/tags/v2") is None


def test_a_tag_on_a_commit_the_remote_has_goes_through_silently(gated):
    git(gated.work, "tag", "-a", "v1", "-m", "version 1")
    pushed = gated.push("origin", "v1")
    assert pushed.code == 0 and gated.remote_sha("refs/tags/v1") == sha(gated.work, "HEAD")
    assert "modeldiff" not in pushed.out


def test_every_line_is_read_even_hundreds_and_a_chained_hook_that_reads_none(world):
    """2,000 new tags (over 64 KiB of input, more than a pipe holds) plus, last, a tag of a breaking commit."""
    previous = world.work / ".git" / "hooks" / "pre-push"
    previous.write_text("#!/bin/sh\nexit 0\n")  # reads nothing: the wrapper must not die of SIGPIPE
    previous.chmod(0o755)
    hook.install(str(world.work), io.StringIO(), python=sys.executable)
    main = sha(world.work, "HEAD")
    refs = "".join(f"create refs/tags/t{i:04d} {main}\n" for i in range(2000))
    subprocess.run(["git", "update-ref", "--stdin"], cwd=world.work, input=refs, text=True, check=True)
    git(world.work, "switch", "-q", "-c", "late")
    commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    git(world.work, "tag", "zz-breaking")
    pushed = world.push("origin", "--tags")
    assert pushed.code != 0 and "push blocked: refs/tags/zz-breaking" in pushed.out
    git(world.work, "tag", "-d", "zz-breaking")
    pushed = world.push("origin", "--tags")
    assert pushed.code == 0 and world.remote_sha("refs/tags/t1999") == main


# --- the framework's variables --------------------------------------------------------------------------


class Unreadable:
    def read(self):
        raise AssertionError("--from-env must not read stdin: the framework has consumed it")


def test_from_env_blocks_a_breaking_range(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    env = {"PRE_COMMIT_FROM_REF": base, "PRE_COMMIT_TO_REF": head, "PRE_COMMIT_REMOTE_NAME": "origin",
           "PRE_COMMIT_REMOTE_BRANCH": "refs/heads/main"}
    code, _, err = in_process(world.work, "", remote=None, from_env=True, env=env, stdin=Unreadable())
    assert code == hook.EXIT_BLOCKED and "push blocked: refs/heads/main" in err


def test_from_env_reads_the_models_from_to_ref_not_the_disk(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS})
    write(world.work, MODEL, "model: [not, valid\n")  # the working tree is broken; TO_REF is not
    env = {"PRE_COMMIT_FROM_REF": base, "PRE_COMMIT_TO_REF": head}
    code, out, err = in_process(world.work, "", remote=None, from_env=True, env=env, stdin=Unreadable())
    assert (code, err) == (0, "") and "verdict: numbers" in out


def test_from_env_without_refs_compares_head_with_the_default_branch(world):
    commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    code, _, err = in_process(world.work, "", remote=None, from_env=True, env={}, stdin=Unreadable())
    assert code == hook.EXIT_BLOCKED and "push blocked" in err


def test_from_env_without_refs_at_the_default_branch_has_nothing_to_say(world):
    code, out, err = in_process(world.work, "", remote=None, from_env=True, env={}, stdin=Unreadable())
    assert (code, out, err) == (0, "", "")


def test_colour_only_when_forced(world, monkeypatch):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS})
    assert "\x1b[" not in in_process(world.work, line(head, base))[1]
    monkeypatch.setenv("FORCE_COLOR", "1")
    assert "\x1b[" in in_process(world.work, line(head, base))[1]


def test_a_pushed_model_that_cannot_be_read_blocks_with_where(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "oops", {MODEL: "model: [not, valid\n"})
    code, _, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_UNDECIDED and f"push blocked: {head}:{MODEL}:2:1: malformed YAML" in err


# --- a policy pushed on its own ---------------------------------------------------------------------------


def test_a_push_changing_only_the_policy_is_checked_and_a_typo_blocks(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "policy", {".modeldiff.yaml": "block: [breaking]\nacept: [links.trips_bike]\n"})
    code, out, err = in_process(world.work, line(head, base))
    assert code == hook.EXIT_UNDECIDED
    assert f"push blocked: {head[:12]}:.modeldiff.yaml:2:1: unknown key 'acept'" in err


def test_a_push_changing_only_a_valid_policy_says_it_reads(world):  # twin
    base = sha(world.work, "HEAD")
    head = commit(world.work, "policy", {".modeldiff.yaml": "block: [breaking]\naccept: [links.trips_bike]\n"})
    code, out, err = in_process(world.work, line(head, base))
    assert (code, err) == (0, "")
    assert out == (f"modeldiff: refs/heads/main: {head[:12]}:.modeldiff.yaml changed and reads correctly "
                   "(blocks breaking; 1 accepted, 0 owner patterns)\n")


def test_a_push_touching_neither_model_nor_policy_says_nothing(world):  # twin
    base = sha(world.work, "HEAD")
    head = commit(world.work, "docs", {"README.md": "bike share, again\n"})
    assert in_process(world.work, line(head, base)) == (0, "", "")


def test_a_policy_typo_blocks_a_real_push_too(gated):
    before = gated.remote_sha()
    commit(gated.work, "policy", {".modeldiff.yaml": "acept: []\n"})
    pushed = gated.push("origin", "main")
    assert pushed.code != 0 and gated.remote_sha() == before and "unknown key 'acept'" in pushed.out


# --- acknowledging a link covers what its change alone causes ---------------------------------------------

CLINIC_PATH = "models/clinic.model.yaml"
CLINIC = (ROOT / "tests" / "fixtures" / "clinic.model.yaml").read_text()
DOCTORS = "doctors_clinic: {from: doctors.clinic_key, to: clinics.clinic_key, standby: true}"
PATIENT = "appointments_patient: {from: appointments.patient_key, to: patients.patient_key}"
DOCTORS_LIVE = CLINIC.replace(DOCTORS, DOCTORS.replace(", standby: true", ""))
BOTH = DOCTORS_LIVE.replace(PATIENT, PATIENT[:-1] + ", flow: two-way}")
DERIVED = ("paths.clinic_access->appointment_diagnoses", "paths.clinic_access->appointments",
           "paths.clinics->appointment_diagnoses", "paths.clinics->appointments")


def clinic_push(world, new_text: str, *trailers: str) -> tuple[int, str, str]:
    base = commit(world.work, "clinic model", {CLINIC_PATH: CLINIC})
    head = commit(world.work, "change the clinic", {CLINIC_PATH: new_text}, trailers=trailers)
    return in_process(world.work, line(head, base))


def test_a_link_trailer_acknowledges_the_paths_its_change_alone_causes(world):
    code, out, err = clinic_push(world, DOCTORS_LIVE, "Model-Reviewed: links.doctors_clinic")
    assert (code, err) == (0, ""), out + err
    assert ("covered by Model-Reviewed: links.doctors_clinic (what its change alone causes): " + ", ".join(DERIVED)
            in out)
    assert "refs/heads/main: push allowed" in out


def test_without_the_link_trailer_the_derived_changes_block_and_one_trailer_is_suggested(world):  # twin
    code, out, err = clinic_push(world, DOCTORS_LIVE, "Model-Reviewed: links.appointments_clinic")
    assert code == hook.EXIT_BLOCKED and "covered by" not in out
    assert "brings 4 unacknowledged breaking changes" in err
    assert "--trailer 'Model-Reviewed: links.doctors_clinic'\n" in err and "--trailer 'Model-Reviewed: paths." not in err
    assert "a trailer naming links.doctors_clinic also acknowledges the path and ambiguity changes" in err


def test_a_derived_change_of_two_links_needs_both_trailers(world):
    code, out, err = clinic_push(world, BOTH, "Model-Reviewed: links.doctors_clinic")
    assert code == hook.EXIT_BLOCKED
    assert "paths.clinics->patients (ambiguity.introduced" in err  # doctors_clinic and appointments_patient
    assert "paths.clinics->appointments (" not in err  # doctors_clinic alone: covered
    assert "--trailer 'Model-Reviewed: links.appointments_patient'" in err
    both = clinic_push(world, BOTH, "Model-Reviewed: links.doctors_clinic, links.appointments_patient")
    assert both[0] == 0 and "covered by Model-Reviewed: links.appointments_patient and links.doctors_clinic" in both[1]


# --- input git would never write -------------------------------------------------------------------------


def test_input_that_is_not_the_protocol_blocks(world):
    code, _, err = in_process(world.work, "refs/heads/main not-a-sha\n")
    assert code == hook.EXIT_UNDECIDED and "push blocked" in err and "line 1" in err


def test_empty_input_lets_the_push_go_without_a_word(world):
    assert in_process(world.work, "") == (0, "", "")


# --- the fast path ----------------------------------------------------------------------------------------

_PROBE = """
import io, sys
from modeldiff import hook
code = hook.run_hook("origin", from_env=False, stdin=io.StringIO(sys.argv[1]), stdout=io.StringIO(),
                     stderr=io.StringIO(), env={}, repo=sys.argv[2])
heavy = sorted(m for m in ("rich", "sqlglot", "networkx", "yaml", "deepdiff", "duckdb") if m in sys.modules)
print(code, ",".join(heavy) or "-")
"""


def probe(work: Path, text: str) -> str:
    done = subprocess.run([sys.executable, "-c", _PROBE, text, str(work)], capture_output=True, text=True, check=True)
    return done.stdout.strip()


def test_a_push_without_model_changes_imports_nothing_heavy(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "words", {"README.md": "bike share, documented\n"})
    assert probe(world.work, line(head, base)) == "0 -"


def test_a_push_with_model_changes_does_load_the_analysis(world):
    base = sha(world.work, "HEAD")
    head = commit(world.work, "count by id", {MODEL: NUMBERS})
    code, heavy = probe(world.work, line(head, base)).split()
    assert code == "0" and "sqlglot" in heavy  # (rich is not needed: the hook writes plain text, render.TextOut)


# --- install, uninstall, status ------------------------------------------------------------------------------


def status_of(work: Path) -> str:
    out = io.StringIO()
    hook.status(str(work), out)
    return out.getvalue()


def test_install_marks_its_script_and_refuses_to_install_twice(world):
    assert "pre-push: none" in status_of(world.work)
    hook.install(str(world.work), io.StringIO(), python=sys.executable)
    script = world.work / ".git" / "hooks" / "pre-push"
    text = script.read_text()
    assert hook.MARKER in text.splitlines() and f"PYTHON={sys.executable}" in text
    assert os.access(script, os.X_OK)
    assert f"runs {sys.executable} -I (isolated)" in status_of(world.work)
    with pytest.raises(ModeldiffError, match="already installed"):
        hook.install(str(world.work), io.StringIO())
    hook.uninstall(str(world.work), io.StringIO())
    assert not script.exists() and "pre-push: none" in status_of(world.work)
    hook.install(str(world.work), io.StringIO())  # after uninstalling, installing works again


def test_uninstall_leaves_a_hook_it_did_not_install_alone(world):
    foreign = world.work / ".git" / "hooks" / "pre-push"
    foreign.write_text("#!/bin/sh\nexit 0\n")
    with pytest.raises(ModeldiffError, match="not installed by modeldiff"):
        hook.uninstall(str(world.work), io.StringIO())
    assert foreign.read_text() == "#!/bin/sh\nexit 0\n"
    assert "not modeldiff's" in status_of(world.work)


def test_core_hooks_path_is_respected_relative_to_the_work_tree(world):
    git(world.work, "config", "core.hooksPath", ".githooks")
    (world.work / "models").mkdir(exist_ok=True)
    hook.install(str(world.work / "models"), io.StringIO(), python=sys.executable)  # from a subfolder
    assert (world.work / ".githooks" / "pre-push").is_file()
    assert not (world.work / ".git" / "hooks" / "pre-push").exists()
    assert f"hooks folder: {world.work / '.githooks'}" in status_of(world.work)
    commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    assert world.push("origin", "main").code != 0  # git ran the hook from core.hooksPath


def test_a_hooks_path_outside_the_repository_is_pointed_out(world, tmp_path):
    shared = tmp_path / "shared-hooks"
    git(world.work, "config", "core.hooksPath", str(shared))
    out = io.StringIO()
    hook.install(str(world.work), out, python=sys.executable)
    assert (shared / "pre-push").is_file() and "every repository using" in out.getvalue()


def test_the_usual_hooks_folder_is_not_pointed_out(world):
    out = io.StringIO()
    hook.install(str(world.work), out, python=sys.executable)
    assert out.getvalue() == f"installed {world.work / '.git' / 'hooks' / 'pre-push'}\n"


class Terminal(io.StringIO):
    def isatty(self):
        return True


def test_run_by_hand_at_a_terminal_explains_instead_of_waiting(world):
    code, _, err = in_process(world.work, "", stdin=Terminal())
    assert code == hook.EXIT_UNDECIDED and "git runs it" in err


def test_without_the_hook_in_core_hooks_path_the_same_push_goes_through(world):
    git(world.work, "config", "core.hooksPath", ".githooks")
    hook.install(str(world.work), io.StringIO(), python=sys.executable)
    hook.uninstall(str(world.work), io.StringIO())
    head = commit(world.work, "drop fare revenue", {MODEL: BREAKING})
    assert world.push("origin", "main").code == 0 and world.remote_sha() == head


PREVIOUS = """#!/bin/sh
# the team's own pre-push hook
echo "previous hook: $1" >>"$(dirname "$0")/../previous.log"
cat >>"$(dirname "$0")/../previous.log"
[ ! -e "$(dirname "$0")/../previous-fails" ]
"""


def install_over_previous(world: World) -> Path:
    previous = world.work / ".git" / "hooks" / "pre-push"
    previous.write_bytes(PREVIOUS.encode())
    previous.chmod(0o750)
    hook.install(str(world.work), io.StringIO(), python=sys.executable)
    return previous


def test_an_existing_hook_is_kept_and_runs_first_with_the_same_arguments_and_input(world):
    install_over_previous(world)
    assert (world.work / ".git" / "hooks" / "pre-push.local").read_bytes() == PREVIOUS.encode()
    assert "runs pre-push.local first" in status_of(world.work)
    head = commit(world.work, "count by id", {MODEL: NUMBERS})
    pushed = world.push("origin", "main")
    assert pushed.code == 0 and world.remote_sha() == head
    log = (world.work / ".git" / "previous.log").read_text()
    assert log.startswith("previous hook: origin\n") and f"refs/heads/main {head} refs/heads/main" in log
    assert "push allowed" in pushed.out  # modeldiff got the same input after it


def test_a_failing_existing_hook_stops_the_push(world):
    install_over_previous(world)
    (world.work / ".git" / "previous-fails").write_text("")
    commit(world.work, "words", {"README.md": "bike share, documented\n"})
    before = world.remote_sha()
    assert world.push("origin", "main").code != 0 and world.remote_sha() == before


def test_uninstall_restores_the_existing_hook_byte_for_byte_with_its_mode(world):
    previous = install_over_previous(world)
    hook.uninstall(str(world.work), io.StringIO())
    assert previous.read_bytes() == PREVIOUS.encode()
    assert stat.S_IMODE(previous.stat().st_mode) == 0o750
    assert not (world.work / ".git" / "hooks" / "pre-push.local").exists()


def test_install_refuses_to_overwrite_a_kept_hook(world):
    hooks = world.work / ".git" / "hooks"
    (hooks / "pre-push").write_text("#!/bin/sh\nexit 0\n")
    (hooks / "pre-push.local").write_text("#!/bin/sh\nexit 1\n")
    with pytest.raises(ModeldiffError, match="so does"):
        hook.install(str(world.work), io.StringIO())
    assert (hooks / "pre-push").read_text() == "#!/bin/sh\nexit 0\n"


# --- where the installed script finds modeldiff -------------------------------------------------------------


def path_env(with_modeldiff: bool) -> dict:
    env = dict(os.environ)
    folders = [os.path.dirname(shutil.which("git")), "/usr/bin", "/bin"]
    if with_modeldiff:
        folders.insert(0, os.path.dirname(sys.executable))
    env["PATH"] = os.pathsep.join(folders)
    return env


@pytest.mark.skipif(not os.path.exists(os.path.join(os.path.dirname(sys.executable), "modeldiff")),
                    reason="needs the modeldiff console script beside this Python")
def test_without_its_python_the_hook_falls_back_to_modeldiff_on_path(world):
    # the script's last resort blocks (twin below), so a push that goes through ran modeldiff
    hook.install(str(world.work), io.StringIO(), python=str(world.work / "gone" / "python"))
    head = commit(world.work, "words", {"README.md": "bike share, documented\n"})
    pushed = world.push("origin", "main", env=path_env(with_modeldiff=True))
    assert pushed.code == 0 and world.remote_sha() == head


def test_without_its_python_nor_modeldiff_on_path_a_push_changing_no_model_goes_through_and_says_so(world):
    hook.install(str(world.work), io.StringIO(), python=str(world.work / "gone" / "python"))
    head = commit(world.work, "words", {"README.md": "bike share, documented\n"})
    pushed = world.push("origin", "main", env=path_env(with_modeldiff=False))
    assert pushed.code == 0 and world.remote_sha() == head, pushed.out
    notes = [x for x in pushed.out.splitlines() if x.startswith("modeldiff:")]
    assert len(notes) == 1 and "changes no model" in notes[0], pushed.out


@pytest.mark.parametrize("how", ["new-branch", "existing-branch", "model-folder"])
def test_without_its_python_nor_modeldiff_on_path_a_push_changing_a_model_is_blocked_and_says_why(world, how):
    hook.install(str(world.work), io.StringIO(), python=str(world.work / "gone" / "python"))
    if how == "model-folder":
        commit(world.work, "a folder model", {"more/rides.model/tables.yml": "tables: {}\n"})
    else:
        commit(world.work, "count by id", {MODEL: NUMBERS})  # even a change that would be allowed: cannot tell
    target = "main:refs/heads/topic" if how == "new-branch" else "main"
    before = world.remote_sha()
    pushed = world.push("origin", target, env=path_env(with_modeldiff=False))
    assert pushed.code != 0 and world.remote_sha() == before
    assert "push blocked" in pushed.out and "changes a model" in pushed.out and "--no-verify" in pushed.out


def _python_without_modeldiff() -> str | None:
    """An interpreter that exists but cannot import modeldiff (the package was uninstalled from it)."""
    for candidate in (getattr(sys, "_base_executable", None), shutil.which("python3", path="/usr/bin:/bin")):
        if candidate and os.path.exists(candidate):
            done = subprocess.run([candidate, "-I", "-c", "import modeldiff"], capture_output=True)
            if done.returncode != 0:
                return candidate
    return None


@pytest.mark.skipif(_python_without_modeldiff() is None, reason="needs a Python without modeldiff")
@pytest.mark.parametrize("files, blocked", [({MODEL: BREAKING}, True), ({"README.md": "documented\n"}, False)])
def test_a_python_that_lost_the_package_blocks_only_model_changes(world, files, blocked):
    hook.install(str(world.work), io.StringIO(), python=_python_without_modeldiff())
    head = commit(world.work, "change", files)
    pushed = world.push("origin", "main", env=path_env(with_modeldiff=False))
    assert (pushed.code != 0) is blocked and (world.remote_sha() == head) is not blocked, pushed.out
    assert "Traceback" not in pushed.out and "No module named" not in pushed.out


@pytest.mark.skipif(_python_without_modeldiff() is None, reason="needs a Python without modeldiff")
def test_install_says_when_its_python_cannot_import_modeldiff_isolated(world):
    out = io.StringIO()
    hook.install(str(world.work), out, python=_python_without_modeldiff())
    assert "cannot import modeldiff" in out.getvalue()


def test_install_says_nothing_more_when_its_python_has_modeldiff(world):
    out = io.StringIO()
    hook.install(str(world.work), out, python=sys.executable)
    assert "cannot import" not in out.getvalue() and out.getvalue().startswith("installed ")


# --- the repository's own code never runs (issue 16) -----------------------------------------------------------

PLANTED = "open({marker!r}, 'a').write('ran from the repository\\n')\n"


def plant_impostors(world: World, tmp_path: Path) -> Path:
    marker = tmp_path / "impostor-ran"
    code = PLANTED.format(marker=str(marker))
    commit(world.work, "impostors", {"modeldiff.py": code, "modeldiff/__init__.py": code,
                                     "modeldiff/__main__.py": code})
    git(world.work, "push", "-q", "--no-verify", "origin", "main")
    return marker


def python_only_env(tmp_path: Path) -> dict:
    """PATH with a `python3` that is this test's Python (modeldiff installed) and no modeldiff command."""
    folder = tmp_path / "pybin"
    folder.mkdir(exist_ok=True)
    wrapper = folder / "python3"
    wrapper.write_text(f'#!/bin/sh\nexec {sys.executable} "$@"\n')
    wrapper.chmod(0o755)
    env = path_env(with_modeldiff=False)
    env["PATH"] = str(folder) + os.pathsep + env["PATH"]
    return env


@pytest.mark.parametrize("files, blocked", [({MODEL: BREAKING}, True), ({"README.md": "documented\n"}, False)])
def test_the_installed_hook_runs_the_installed_tool_not_the_repositorys_code(world, tmp_path, files, blocked):
    marker = plant_impostors(world, tmp_path)
    hook.install(str(world.work), io.StringIO(), python=sys.executable)
    head = commit(world.work, "change", files)
    pushed = world.push("origin", "main", env={**path_env(with_modeldiff=False), "PYTHONPATH": "."})
    assert not marker.exists()
    assert (pushed.code != 0) is blocked and (world.remote_sha() == head) is not blocked, pushed.out
    assert ("push blocked: refs/heads/main" in pushed.out) is blocked


@pytest.mark.parametrize("files, blocked", [({MODEL: BREAKING}, True), ({"README.md": "documented\n"}, False)])
def test_the_repository_script_runs_the_installed_tool_not_the_repositorys_code(world, tmp_path, files, blocked):
    marker = plant_impostors(world, tmp_path)
    target = world.work / ".git" / "hooks" / "pre-push"
    shutil.copyfile(ROOT / "hooks" / "pre-push", target)
    target.chmod(0o755)
    head = commit(world.work, "change", files)
    pushed = world.push("origin", "main", env=python_only_env(tmp_path))
    assert not marker.exists()
    assert (pushed.code != 0) is blocked and (world.remote_sha() == head) is not blocked, pushed.out
    assert ("push blocked: refs/heads/main" in pushed.out) is blocked


# --- the script kept in the repository, and the framework manifest ----------------------------------------------


@pytest.mark.skipif(not os.path.exists(os.path.join(os.path.dirname(sys.executable), "modeldiff")),
                    reason="needs the modeldiff console script beside this Python")
@pytest.mark.parametrize("files, blocked", [({MODEL: BREAKING}, True), ({"README.md": "documented\n"}, False)])
def test_the_repository_script_behaves_like_the_installed_one(world, files, blocked):
    target = world.work / ".git" / "hooks" / "pre-push"
    shutil.copyfile(ROOT / "hooks" / "pre-push", target)
    target.chmod(0o755)
    head = commit(world.work, "change", files)
    pushed = world.push("origin", "main", env=path_env(with_modeldiff=True))
    assert (pushed.code != 0) is blocked and (world.remote_sha() == head) is not blocked
    assert ("push blocked: refs/heads/main" in pushed.out) is blocked


def test_the_repository_script_is_executable_and_marked():
    script = ROOT / "hooks" / "pre-push"
    assert os.access(script, os.X_OK) and hook.MARKER in script.read_text().splitlines()
    assert script.read_text() == hook.repository_script()  # one source for both scripts' logic


@pytest.mark.parametrize("script", ["installed", "repository"])
def test_both_scripts_run_python_isolated_and_never_from_the_current_folder(script):
    text = hook.hook_script("/opt/py/bin/python", chained=False) if script == "installed" else hook.repository_script()
    runs = [x for x in text.splitlines() if "hook run" in x and "modeldiff hook run" not in x]
    assert runs and all(" -I -c " in x for x in runs), runs
    assert " -m modeldiff" not in text and "import modeldiff'" not in text


def test_the_framework_manifest_declares_the_pre_push_hook():
    import yaml

    (entry,) = yaml.safe_load((ROOT / ".pre-commit-hooks.yaml").read_text())
    assert entry == {**entry, "id": "modeldiff-pre-push", "entry": "modeldiff hook run --from-env",
                     "language": "python", "stages": ["pre-push"], "always_run": True,
                     "pass_filenames": False, "minimum_pre_commit_version": "3.2.0", "verbose": True}


def test_a_passing_framework_run_keeps_the_tell_lines_visible():
    # the framework prints a passing hook's output only for a verbose hook: the owners' lines need it
    import yaml

    (entry,) = yaml.safe_load((ROOT / ".pre-commit-hooks.yaml").read_text())
    assert entry["verbose"] is True
    doc = (ROOT / "docs" / "hook.md").read_text()
    assert "verbose: true" in doc and "verbose: false" in doc


def test_the_docs_pin_the_framework_hook_to_this_release_tag():
    from modeldiff import __version__

    tag = f"v{__version__}"
    doc = (ROOT / "docs" / "hook.md").read_text()
    assert re.search(rf"^\s+rev: {re.escape(tag)}\s*(#.*)?$", doc, re.M), "docs/hook.md pins another tag"
    assert f"rev: {tag}" in (ROOT / ".pre-commit-hooks.yaml").read_text()
    assert "git tag -a" in (ROOT / "DEVELOPERS.md").read_text()  # how releases get their tag


def test_the_scripts_idea_of_a_model_file_agrees_with_git_model_path_of():
    # Without modeldiff, the script decides "this push changes a model" with grep; it must say yes exactly
    # where git.model_path_of does (seeded, 600 generated paths, through the real grep).
    import random
    import re

    from modeldiff import git as gitmod

    pattern = re.search(r"grep -Eiq '([^']+)'", hook.NO_TOOL).group(1)
    rng = random.Random(16)
    pieces = ["a", "b.model", ".model", "x.model.yaml", "y.yml", "z.YAML", "M.Model", "c.txt", "model", ".yaml",
              "p.model.yml", "q.MODEL.YAML", "r.model.json", "s.model.yaml.bak", "t u.model.yaml", "é.model.yml"]
    paths = sorted({"/".join(rng.choice(pieces) for _ in range(rng.randrange(1, 5))) for _ in range(600)})
    done = subprocess.run(["grep", "-Ein", pattern], input="\n".join(paths) + "\n", capture_output=True, text=True)
    matched = {int(line.split(":", 1)[0]) for line in done.stdout.splitlines()}
    for number, path in enumerate(paths, 1):
        assert (number in matched) is (gitmod.model_path_of(path) is not None), path
    assert matched and len(matched) < len(paths)  # both answers occur


def test_the_hooks_message_groups_what_follows_under_its_cause(gated):
    commit(gated.work, "drop fare revenue", {MODEL: BREAKING})
    pushed = gated.push("origin", "main")
    assert pushed.code != 0
    head, _, rest = pushed.out.partition("by cause (most severe first)")
    assert rest and "verdict: breaking" in head  # the summary by cause follows the verdict
    assert " report" in rest.split("\n\n")[0]  # the impacted report is counted under its cause


def test_the_hooks_message_has_no_summary_by_cause_when_nothing_follows_from_a_change(gated):  # twin
    described = V1.replace("  fare_revenue: {table: trips, expr: sum(fare)}\n",
                           "  fare_revenue: {table: trips, expr: sum(fare), description: Fares paid.}\n")
    assert described != V1
    commit(gated.work, "describe fare revenue", {MODEL: described})
    pushed = gated.push("origin", "main")
    assert pushed.code == 0 and "verdict: safe" in pushed.out
    assert "by cause" not in pushed.out
