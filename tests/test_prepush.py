"""modeldiff.prepush: git's pre-push input parsed, and the range each ref pushes decided, from made-up lines.

The line format, the all-zero ids (40 characters for SHA-1, 64 for SHA-256), `(delete)` and literal
local specs are from git's githooks documentation (from memory, checked against git 2.39's behaviour in
tests/test_hook.py).
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from modeldiff import prepush
from modeldiff.prepush import PrePushInputError, PushRange, RefUpdate

A = "a" * 40
B = "b" * 40
C = "c" * 40
Z40 = "0" * 40
Z64 = "0" * 64
A64 = "a1" * 32
B64 = "b2" * 32


# --- parsing ------------------------------------------------------------------------------------


def test_a_branch_update_is_parsed_into_its_four_fields():
    update = prepush.parse_line(f"refs/heads/main {A} refs/heads/main {B}\n")
    assert update == RefUpdate("refs/heads/main", A, "refs/heads/main", B)
    assert not update.deleted and not update.new_on_remote and not update.is_tag


def test_a_new_branch_has_an_all_zero_remote_id_in_sha1_and_sha256_repositories():
    sha1 = prepush.parse_line(f"refs/heads/feature {A} refs/heads/feature {Z40}")
    sha256 = prepush.parse_line(f"refs/heads/feature {A64} refs/heads/feature {Z64}")
    assert sha1.new_on_remote and sha256.new_on_remote
    assert not sha1.deleted and not sha256.deleted


def test_an_existing_branch_is_not_new_on_the_remote_in_either_hash():
    assert not prepush.parse_line(f"refs/heads/main {A64} refs/heads/main {B64}").new_on_remote


def test_a_deleted_ref_has_delete_and_an_all_zero_local_id():
    for zero in (Z40, Z64):
        update = prepush.parse_line(f"(delete) {zero} refs/heads/old {A if zero == Z40 else A64}")
        assert update.deleted and update.local_ref == "(delete)"


def test_a_local_spec_arrives_literally_even_with_spaces():
    assert prepush.parse_line(f"HEAD~1 {A} refs/heads/main {B}").local_ref == "HEAD~1"
    update = prepush.parse_line(f"main@{{2 days ago}} {A} refs/heads/main {B}")
    assert update.local_ref == "main@{2 days ago}" and update.local_sha == A


def test_a_tag_line_is_a_tag_and_a_branch_line_is_not():
    assert prepush.parse_line(f"refs/tags/v1 {A} refs/tags/v1 {Z40}").is_tag
    assert not prepush.parse_line(f"refs/heads/v1 {A} refs/heads/v1 {Z40}").is_tag


def test_upper_case_ids_are_read_in_lower_case():
    assert prepush.parse_line(f"refs/heads/main {A.upper()} refs/heads/main {B}").local_sha == A


@pytest.mark.parametrize("line", [
    f"refs/heads/main {A} refs/heads/main",  # three fields
    f"refs/heads/main {A[:39]} refs/heads/main {B}",  # 39 characters
    f"refs/heads/main {'g' * 40} refs/heads/main {B}",  # not hex
    f"refs/heads/main {A} refs/heads/main {'b' * 50}",  # neither 40 nor 64
    "garbage",
])
def test_a_line_that_is_not_the_protocol_is_refused_in_one_line(line):
    with pytest.raises(PrePushInputError) as exc:
        prepush.parse_line(line, 7)
    text = str(exc.value)
    assert "line 7" in text and "\n" not in text


def test_parse_lines_reads_every_line_skipping_blank_ones_and_carriage_returns():
    text = f"refs/heads/a {A} refs/heads/a {B}\r\n\n(delete) {Z40} refs/heads/b {C}\nrefs/tags/t {C} refs/tags/t {Z40}\n"
    updates = prepush.parse_lines(text)
    assert [u.remote_ref for u in updates] == ["refs/heads/a", "refs/heads/b", "refs/tags/t"]
    assert updates[0].remote_sha == B


def test_empty_input_means_nothing_is_pushed():
    assert prepush.parse_lines("") == () and prepush.parse_lines("\n\n") == ()


def test_a_bad_line_among_good_ones_is_named_by_its_number():
    with pytest.raises(PrePushInputError, match="line 2"):
        prepush.parse_lines(f"refs/heads/a {A} refs/heads/a {B}\nnot a line\n")


_ref = st.from_regex(r"refs/(heads|tags)/[a-z][a-z0-9_/-]{0,12}", fullmatch=True)
_spec = st.one_of(_ref, st.from_regex(r"[A-Za-z][A-Za-z0-9_~^@{}. -]{0,20}[A-Za-z0-9}~^]", fullmatch=True))
_sha = st.one_of(st.from_regex(r"[0-9a-f]{40}", fullmatch=True), st.just(Z40))


@settings(max_examples=60, deadline=None)
@given(local=_spec, local_sha=_sha, remote=_ref, remote_sha=_sha)
def test_any_line_git_could_write_round_trips(local, local_sha, remote, remote_sha):
    update = prepush.parse_line(f"{local} {local_sha} {remote} {remote_sha}\n")
    assert update == RefUpdate(local.strip(), local_sha, remote, remote_sha)


# --- the framework's variables -------------------------------------------------------------------


def test_from_env_takes_the_framework_range():
    update = prepush.from_env({"PRE_COMMIT_FROM_REF": B, "PRE_COMMIT_TO_REF": A,
                               "PRE_COMMIT_REMOTE_BRANCH": "refs/heads/main"})
    assert (update.local_sha, update.remote_sha, update.remote_ref) == (A, B, "refs/heads/main")
    assert not update.new_on_remote and not update.deleted


def test_from_env_without_refs_is_a_new_root_branch_at_the_local_branch_or_head():
    update = prepush.from_env({"PRE_COMMIT_LOCAL_BRANCH": "refs/heads/fresh"})
    assert update.local_sha == "refs/heads/fresh" and update.new_on_remote
    assert prepush.from_env({}).local_sha == "HEAD"


def test_the_remote_name_comes_from_the_argument_else_the_framework():
    assert prepush.remote_of_env({"PRE_COMMIT_REMOTE_NAME": "upstream"}, None) == "upstream"
    assert prepush.remote_of_env({"PRE_COMMIT_REMOTE_NAME": "upstream"}, "origin") == "origin"
    assert prepush.remote_of_env({}, None) is None


# --- where the remote's default branch is known ---------------------------------------------------


def test_a_named_remote_is_asked_first_then_origin():
    assert prepush.default_branch_candidates("upstream") == (
        "refs/remotes/upstream/HEAD", "refs/remotes/upstream/main", "refs/remotes/upstream/master",
        "refs/remotes/origin/HEAD", "refs/remotes/origin/main", "refs/remotes/origin/master")


@pytest.mark.parametrize("url", ["https://example.invalid/models.git", "../remote.git", "/srv/git/models.git",
                                 "git@example.invalid:models.git", None])
def test_a_url_is_not_taken_for_a_remote_name(url):
    assert prepush.default_branch_candidates(url) == (
        "refs/remotes/origin/HEAD", "refs/remotes/origin/main", "refs/remotes/origin/master")


# --- deciding the range ---------------------------------------------------------------------------


def test_an_existing_branch_is_compared_with_the_remote_commit():
    update = RefUpdate("refs/heads/main", A, "refs/heads/main", B)
    assert prepush.decide_range(update, A, B, C, "origin/main") == PushRange(
        ("refs/heads/main",), A, B, "the remote's refs/heads/main")


def test_a_deleted_ref_is_skipped_and_a_kept_one_is_not():
    deleted = RefUpdate("(delete)", Z40, "refs/heads/old", B)
    assert prepush.decide_range(deleted, None, B) is None
    assert prepush.decide_range(RefUpdate("refs/heads/old", A, "refs/heads/old", B), A, B) is not None


def test_a_new_branch_is_compared_with_the_merge_base_without_a_warning():
    update = RefUpdate("refs/heads/feature", A, "refs/heads/feature", Z40)
    decided = prepush.decide_range(update, A, None, C, "origin/main")
    assert (decided.base, decided.base_from, decided.note) == (C, "the merge base with origin/main", "")


def test_a_new_branch_without_common_history_counts_every_model_as_added():
    update = RefUpdate("refs/heads/orphan", A, "refs/heads/orphan", Z40)
    decided = prepush.decide_range(update, A, None, None, "origin/main")
    assert decided.base is None and decided.range_spec == A and "every model counts as added" in decided.base_from


def test_a_remote_commit_missing_here_falls_back_and_says_so():
    update = RefUpdate("refs/heads/main", A, "refs/heads/main", B)
    decided = prepush.decide_range(update, A, None, C, "origin/main")
    assert decided.base == C
    assert "bbbbbbbbbbbb" in decided.note and "not in this repository" in decided.note
    assert "merge base with origin/main" in decided.note


def test_a_tag_is_decided_with_its_peeled_commit():
    update = RefUpdate("refs/tags/v1", "d" * 40, "refs/tags/v1", Z40)  # the tag object's id
    decided = prepush.decide_range(update, A, None, C, "origin/main")
    assert decided.head == A and decided.refs == ("refs/tags/v1",)


def test_a_ref_naming_no_commit_is_skipped():
    update = RefUpdate("refs/tags/tree", "d" * 40, "refs/tags/tree", Z40)
    assert prepush.decide_range(update, None, None, C, "origin/main") is None


def test_a_head_already_at_its_base_brings_nothing_and_a_different_head_does():
    update = RefUpdate("refs/tags/v0", A, "refs/tags/v0", Z40)
    assert prepush.decide_range(update, A, None, A, "origin/main") is None
    assert prepush.decide_range(update, A, None, C, "origin/main") is not None


def test_the_same_range_pushed_to_two_refs_is_checked_once():
    one = PushRange(("refs/heads/main",), A, B, "x")
    two = PushRange(("refs/tags/v2",), A, B, "y")
    other = PushRange(("refs/heads/dev",), C, B, "z")
    assert prepush.unique_ranges([one, None, two, other]) == [
        PushRange(("refs/heads/main", "refs/tags/v2"), A, B, "x"), other]


def test_short_ids_shorten_only_full_ids():
    assert prepush.short(A) == "a" * 12 and prepush.short("HEAD~1") == "HEAD~1"
