"""Reading two revisions of a model and comparing them: the service behind diff, hook, notes and plan.

Returns `ModelDiff` records (where each side came from, and the analysis);
rendering is left to render/.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, replace as _replace
from typing import Sequence

from modeldiff.errors import ModeldiffError
from modeldiff.util import paused_gc


@dataclass(frozen=True)
class Side:
    """Where one side of a comparison came from: a git revision (None: the working tree or a plain path) and a path."""

    rev: str | None
    path: str


@dataclass(frozen=True)
class ModelDiff:
    """One model's comparison, with where each side came from."""

    old: Side
    new: Side
    result: "DiffResult"  # noqa: F821 (modeldiff.impact.DiffResult, imported lazily)


def read_model(spec: str):
    """(label, LoadResult) for a path on disk or a `REV:PATH` spec."""
    from modeldiff import load

    return spec, load.load_files(_spec_files(spec))


def check_spec(spec: str, use_cache: bool = True):
    """(label, Model, findings) of `modeldiff check SPEC`: `check.check_model` of the model, through the cache.

    A model checked before (same files, same tool) is not read again: its
    findings come from the cache and its records are read from the files
    on first use. `use_cache=False` or MODELDIFF_NO_CACHE=1 checks afresh.
    """
    from modeldiff import cache, check, load

    files = _spec_files(spec)
    folder = key = None
    if cache.enabled(use_cache):
        folder, key = cache.directory("."), cache.revision_key(files)
        found = cache.load_check(folder, key, files)
        if found is not None:
            return (spec, *found)
    with paused_gc():
        result = load.load_files(files)
        findings = check.check_model(result.model, result.findings)
    if key is not None:
        cache.store_check(folder, key, result.model, findings)
    return spec, result.model, findings


def _spec_files(spec: str):
    """The (display name, content) pairs of a path on disk or a `REV:PATH` spec, not yet parsed."""
    from modeldiff import load

    if os.path.exists(spec):
        return load.path_files(spec)
    if ":" in spec:
        from modeldiff import git

        return git.read_spec(spec).files
    raise ModeldiffError(f"{spec}: no such file or folder; give a model file, a NAME.model/ folder, or REV:PATH")


def compare_specs(old_spec: str, new_spec: str, use_cache: bool = True) -> ModelDiff:
    """Compare two models given as paths or REV:PATH.

    `use_cache=False` (or MODELDIFF_NO_CACHE=1) reads and compares afresh
    without looking at or writing the cache (modeldiff/cache.py).
    """
    from modeldiff import load

    old_files = _spec_files(old_spec)
    try:
        new_files = _spec_files(new_spec)
    except ModeldiffError:
        load.load_files(old_files)  # a broken old model is reported first, as it is read first
        raise
    result = _compare_files(old_files, new_files, use_cache, ".")
    return ModelDiff(Side(*_split_side(old_spec)), Side(*_split_side(new_spec)), result)


def compare_revisions(root: str, base: str, head: str | None, paths: list[str] | None = None,
                      use_cache: bool = True, history: "History | None" = None) -> list[ModelDiff]:
    """Every model of the repository (or `paths`) at `base` against `head` (None: the working tree).

    `use_cache` as in `compare_specs`; entries live in the repository's git folder.
    `history`: the revisions met so far when walking commits in order (see `History`).
    """
    from modeldiff import git

    if paths is None:
        paths = sorted(set(git.list_models(root, base)) | set(git.list_models(root, head)))
    return _diff_revisions(root, base, head, paths, use_cache, history)


def compare_with_nothing(root: str, rev: str, paths: Sequence[str], old_label: str | None = None) -> list[ModelDiff]:
    """Each model at `rev` compared with nothing (a commit without a parent, a push with no shared history).

    The old side is labelled `old_label`, or the model's own path when None.
    """
    from modeldiff import git, impact, load

    out = []
    for path in paths:
        source = git.read_at(root, rev, path)
        if source is None:
            continue
        loaded = load.load_files(source.files)
        result = impact.analyse(_empty_model(loaded.model.name), loaded.model, (), loaded.findings)
        out.append(ModelDiff(Side(None, old_label or path), Side(rev, path), result))
    return out


def _empty_model(name: str):
    from modeldiff.model import Model

    return Model(name=name, tables={})


class _Revision:
    """One side of a comparison: its files, loaded at most once."""

    def __init__(self, files, base: "_Revision | None" = None) -> None:
        self.files = files
        self.base = base  # the other side, read first: items written as there are not read again, equal records shared
        self._loaded = None
        self.checked = None  # the record-rule findings, once known
        self.walk = False  # met by a History walk: its findings live on it, not in the cache

    def ready(self) -> bool:
        """Whether this revision is read, or can be spliced from a neighbour that is (or can be) read."""
        return self._loaded is not None or (self.base is not None and self.base.ready())

    def loaded(self):
        if self._loaded is None:
            from modeldiff import load

            base = self.base
            if base is not None and base.ready():
                self._loaded = load.splice_files(self.files, base.files, base.loaded())
            else:
                self._loaded = load.load_files(self.files)
            self.base = None  # read: the other side is no longer needed (and not kept alive by this one)
        return self._loaded


def _revision_model(revision: _Revision, known):
    """A Model with the name and format of `known` whose sections are read from `revision` on first use.

    A comparison found in the cache comes back with models that would read
    their files again on their own; drawn from the `_Revision` instead, a
    revision is read once however many comparisons show it (the new side of
    one commit is the old side of the next, and is spliced from it).
    """
    from modeldiff.model import deferred_model

    return deferred_model(known.name, known.format, lambda: revision.loaded().model)


class History:
    """The revisions of each model path met while walking commits one by one (`notes --per-commit`).

    Only the latest revision of each path is remembered: the new side of one
    commit is found again as the old side of the next (the same files), so it
    is read at most once, and the revision before it is released. A revision
    whose neighbour was read is spliced from it at once (`load.splice_files`,
    a few changed items), so a walk reads one model whole and the rest by
    their changes, and holds no more than the last few revisions of a path.
    (A commit that changed no model still names the model differently,
    `SHA:PATH`: the same text under the new name is a splice of nothing.)

    The record-rule findings of a revision met by the walk stay on it for the
    next commit, and are not written to the cache as revision entries: a
    walk of N commits leaves N comparison entries, not 2N, so a long range
    stays within the cache's count of entries (`cache.MAX_ENTRIES`; a walk
    longer than that still finds the oldest comparisons evicted).
    """

    def __init__(self) -> None:
        self._latest: dict[str, _Revision] = {}

    def revision(self, path: str, files) -> _Revision:
        """The remembered revision of `path` when its files are `files`, else a new one spliced from it."""
        latest = self._latest.get(path)
        if latest is not None and latest.files == files:
            return latest
        revision = _Revision(files, latest)  # the same text under another commit's name costs a splice of nothing
        revision.walk = True
        return revision

    def keep(self, path: str, revision: _Revision) -> None:
        """Remember `revision` as the latest of `path`, releasing the ones before."""
        previous = self._latest.get(path)
        self._latest[path] = revision
        if previous is not None and previous is not revision:
            previous.base = None
        if revision._loaded is None and revision.base is not None and revision.base.ready():
            try:
                revision.loaded()  # a splice from the neighbour costs little now and spares a whole read later
            except ModeldiffError:
                pass  # only ahead of need: whoever needs the model meets the error then


def _compare_files(old_files, new_files, use_cache: bool, where: str, old=None, new=None):
    """The DiffResult of two revisions' files (None: the model is absent on that side), through the cache."""
    old = old if old is not None else (_Revision(old_files) if old_files is not None else None)
    new = new if new is not None else (_Revision(new_files, old) if new_files is not None else None)
    with paused_gc():  # two models' worth of records and no cycles: the collector would only walk them
        return _cached_comparison(old, new, use_cache, where)


def _cached_comparison(old: _Revision | None, new: _Revision | None, use_cache: bool, where: str):
    from modeldiff import cache

    if not cache.enabled(use_cache):
        return _analyse(old, new, None, None)
    folder = cache.directory(where)
    old_key = cache.revision_key(old.files) if old is not None else None
    new_key = cache.revision_key(new.files) if new is not None else None
    pair = cache.pair_key(old_key, new_key)
    found = cache.load_pair(folder, pair, old.files if old else None, new.files if new else None)
    if found is not None:
        return _replace(found, old=_revision_model(old, found.old) if old is not None else found.old,
                        new=_revision_model(new, found.new) if new is not None else found.new)
    if old is not None:
        old.loaded()  # the old model is read (and any error in it reported) first
    checked = [_checked_before(folder, revision, key) for revision, key in ((old, old_key), (new, new_key))]
    if old is not None and new is not None and checked == [None, None]:
        from modeldiff import check

        old_result, new_result = old.loaded(), new.loaded()
        both = check.check_pair(old_result.model, old_result.findings, new_result.model, new_result.findings)
        checked = [tuple(found) for found in both]
        _keep_checked(folder, old, old_key, checked[0])
        _keep_checked(folder, new, new_key, checked[1])
    for index, (revision, key) in enumerate(((old, old_key), (new, new_key))):
        if checked[index] is None and revision is not None:
            from modeldiff import check

            result = revision.loaded()
            checked[index] = tuple(check.check_model(result.model, result.findings, graph_rules=False))
            _keep_checked(folder, revision, key, checked[index])
    result = _analyse(old, new, *checked)
    cache.store_pair(folder, pair, result)
    return result


def _checked_before(folder: str, revision: _Revision | None, key: str | None):
    """The record-rule findings of a revision known already: kept by the walk, else from the cache; or None."""
    if revision is None:
        return None
    if revision.checked is not None:
        return revision.checked
    from modeldiff import cache

    return cache.load_revision(folder, key)


def _keep_checked(folder: str, revision: _Revision, key: str, checked: tuple) -> None:
    """Remember a revision's findings on it; in the cache too, unless a walk keeps them (see `History`)."""
    from modeldiff import cache

    revision.checked = checked
    if not revision.walk:
        cache.store_revision(folder, key, checked)


def _analyse(old, new, old_checked, new_checked):
    """impact.analyse of two sides; a side that is None is a model absent there (whole-model addition or removal)."""
    from modeldiff import impact

    old_result = old.loaded() if old is not None else None
    new_result = new.loaded() if new is not None else None
    name = (new_result or old_result).model.name
    result = impact.analyse(old_result.model if old_result else _empty_model(name),
                            new_result.model if new_result else _empty_model(name),
                            old_result.findings if old_result else (), new_result.findings if new_result else (),
                            old_checked=old_checked if old_result else None,
                            new_checked=new_checked if new_result else None)
    return removed_whole(result) if new_result is None else result


# What people outside the model use: when the model is deleted whole, these go from under them.
WHOLE_REMOVAL_KINDS = frozenset({"table.removed", "measure.removed", "report.removed"})


def removed_whole(result):
    """A model deleted whole is breaking: its tables, measures and reports were there for someone to use.

    Inside a model that stays, removing an item nothing in it uses is `numbers` (changes.md); but no
    model can name who used a model that is gone (reports elsewhere, dashboards, queries), so each of
    its removals becomes `breaking` (DEVELOPERS.md, "Decisions where the spec is silent").
    """
    from dataclasses import replace

    changes = tuple(
        replace(c, severity="breaking", message=c.message + " The whole model was deleted, so whatever used it breaks.")
        if c.kind in WHOLE_REMOVAL_KINDS and c.severity != "breaking" else c
        for c in result.changes
    )
    return replace(result, changes=changes)


def spec_path(spec: str) -> str:
    """The path of a spec: the spec itself, or PATH of `REV:PATH` (where a model's `source:` files are found)."""
    return _split_side(spec)[1]


def _split_side(spec: str) -> tuple[str | None, str]:
    if not os.path.exists(spec) and ":" in spec:
        rev, _, path = spec.partition(":")
        return rev, path
    return None, spec


def _diff_revisions(root: str, base: str, head: str | None, paths: list[str], use_cache: bool = True,
                    history: History | None = None):
    """ModelDiffs for `paths` between two revisions; a model moved to another path is paired by its name."""
    from modeldiff import git

    pairs: list[tuple[str | None, str | None]] = []
    old_only: dict[str, _Revision] = {}
    new_only: dict[str, _Revision] = {}
    sides: dict[tuple[str, str | None], _Revision] = {}
    done: dict[tuple[str | None, str | None], object] = {}
    for path in paths:
        old_source, new_source = git.read_at(root, base, path), git.read_at(root, head, path)
        if (old_source is None or new_source is None) and _say_links_leaving(root, path, base, head, old_source,
                                                                               new_source) and old_source is new_source:
            continue  # a link out of the repository on both sides: named, not read, and the others go on
        if old_source is None and new_source is None:
            raise ModeldiffError(f"{path}: not found at {base} nor at {head or 'the working tree'}; check the path")
        for side, source in (("old", old_source), ("new", new_source)):
            if source is not None:
                sides[(side, path)] = history.revision(path, source.files) if history else _Revision(source.files)
        if old_source is not None and new_source is not None:
            old, new = sides[("old", path)], sides[("new", path)]
            if new is not old and new._loaded is None:
                new.base = old
            pairs.append((path, path))  # compared now: its revisions are read (or found in the cache) in path order
            done[(path, path)] = _compare_files(old_source.files, new_source.files, use_cache, root, old, new)
        elif old_source is not None:
            old_only[path] = sides[("old", path)].loaded()
        else:
            new_only[path] = sides[("new", path)].loaded()
        if history is not None and new_source is not None:
            history.keep(path, sides[("new", path)])
    # a model present only at an old path and only at a new path, under the same name, was moved
    by_name_new: dict[str, list[str]] = {}
    for path, result in new_only.items():
        by_name_new.setdefault(result.model.name, []).append(path)
    for path, result in sorted(old_only.items()):
        candidates = by_name_new.get(result.model.name, [])
        if len(candidates) == 1:
            pairs.append((path, candidates.pop()))
        else:
            pairs.append((path, None))
    pairs += [(None, path) for paths_left in by_name_new.values() for path in paths_left]

    out = []
    for old_path, new_path in sorted(pairs, key=lambda p: (p[1] or p[0], p[0] or "")):
        old = sides.get(("old", old_path)) if old_path else None
        new = sides.get(("new", new_path)) if new_path else None
        result = done.get((old_path, new_path))
        if result is None:
            result = _compare_files(old.files if old else None, new.files if new else None, use_cache, root, old, new)
        out.append(ModelDiff(Side(base, old_path or new_path), Side(head, new_path or old_path), result))
    return out


def _say_links_leaving(root: str, path: str, base: str, head: str | None, old_source, new_source) -> bool:
    """One line on stderr when `path` is, where it was not read, a link out of the repository; whether it was.

    The link's target is never read, so nothing of it (a secrets file, /etc/passwd) can be printed.
    """
    import sys

    from modeldiff import git

    leaving = [(rev or "the working tree", target) for rev, source in ((base, old_source), (head, new_source))
               if source is None for target in [git.link_leaving(root, rev, path)] if target is not None]
    if not leaving:
        return False
    where = " and ".join(f"at {label}" for label, _ in leaving)
    sys.stderr.write(f"modeldiff: {path}: {where} it is a symbolic link to {leaving[0][1]!r}, outside the repository; "
                     "links out of the repository are not followed, so it counts as absent there\n")
    return True


def repo_relative(root: str, path: str) -> str:
    absolute = os.path.abspath(path)
    rel = os.path.relpath(absolute, root)
    return rel.replace(os.sep, "/") if not rel.startswith("..") else path
