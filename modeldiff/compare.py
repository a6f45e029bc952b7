"""Reading two revisions of a model and comparing them: the service behind diff, hook, notes and plan.

Returns `ModelDiff` records (where each side came from, and the analysis);
rendering is left to render/.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

from modeldiff.errors import ModeldiffError


@dataclass(frozen=True)
class Side:
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

    if os.path.exists(spec):
        return spec, load.load_path(spec)
    if ":" in spec:
        from modeldiff import git

        source = git.read_spec(spec)
        return spec, load.load_files(source.files)
    raise ModeldiffError(f"{spec}: no such file or folder; give a model file, a NAME.model/ folder, or REV:PATH")



def compare_specs(old_spec: str, new_spec: str) -> ModelDiff:
    """Compare two models given as paths or REV:PATH."""
    result = _diff_pair(old_spec, new_spec, (old_spec, None), (new_spec, None))
    return ModelDiff(Side(*_split_side(old_spec)), Side(*_split_side(new_spec)), result)


def compare_revisions(root: str, base: str, head: str | None, paths: list[str] | None = None) -> list[ModelDiff]:
    """Every model of the repository (or `paths`) at `base` against `head` (None: the working tree)."""
    from modeldiff import git

    if paths is None:
        paths = sorted(set(git.list_models(root, base)) | set(git.list_models(root, head)))
    return _diff_revisions(root, base, head, paths)


def _empty_model(name: str):
    from modeldiff.model import Model

    return Model(name=name, tables={})


def _diff_pair(old_spec: str | None, new_spec: str | None, old_side, new_side):
    """One ModelDiff; a side that is None is a model absent there (whole-model addition or removal)."""
    from modeldiff import impact, load

    def side(spec, source):
        if source is not None:
            return load.load_files(source.files)
        if spec is not None:
            return read_model(spec)[1]
        return None

    old_result, new_result = side(*old_side), side(*new_side)
    name = (new_result or old_result).model.name
    old_model = old_result.model if old_result else _empty_model(name)
    new_model = new_result.model if new_result else _empty_model(name)
    return impact.analyse(old_model, new_model, old_result.findings if old_result else (),
                          new_result.findings if new_result else ())


def _split_side(spec: str) -> tuple[str | None, str]:
    if not os.path.exists(spec) and ":" in spec:
        rev, _, path = spec.partition(":")
        return rev, path
    return None, spec


def _diff_revisions(root: str, base: str, head: str | None, paths: list[str]):
    """ModelDiffs for `paths` between two revisions; a model moved to another path is paired by its name."""
    from modeldiff import git, impact, load

    pairs: list[tuple[str | None, str | None]] = []
    old_only: dict[str, object] = {}
    new_only: dict[str, object] = {}
    loaded: dict[tuple[str, str | None], object] = {}
    for path in paths:
        old_source, new_source = git.read_at(root, base, path), git.read_at(root, head, path)
        if old_source is None and new_source is None:
            raise ModeldiffError(f"{path}: not found at {base} nor at {head or 'the working tree'}; check the path")
        for side, source in (("old", old_source), ("new", new_source)):
            if source is not None:
                loaded[(side, path)] = load.load_files(source.files)
        if old_source is not None and new_source is not None:
            pairs.append((path, path))
        elif old_source is not None:
            old_only[path] = loaded[("old", path)]
        else:
            new_only[path] = loaded[("new", path)]
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
        old_result = loaded.get(("old", old_path)) if old_path else None
        new_result = loaded.get(("new", new_path)) if new_path else None
        name = (new_result or old_result).model.name
        result = impact.analyse(old_result.model if old_result else _empty_model(name),
                                new_result.model if new_result else _empty_model(name),
                                old_result.findings if old_result else (), new_result.findings if new_result else ())
        out.append(ModelDiff(Side(base, old_path or new_path), Side(head, new_path or old_path), result))
    return out


def repo_relative(root: str, path: str) -> str:
    absolute = os.path.abspath(path)
    rel = os.path.relpath(absolute, root)
    return rel.replace(os.sep, "/") if not rel.startswith("..") else path
