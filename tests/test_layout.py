"""The shape of the package: no module imports one that imports it back (directly or round a longer loop).

Every import counts, the ones inside functions too: a cycle hidden in a function still ties the two modules'
jobs together (issue 15: verify.py and render/verify_out.py imported each other).
"""
import ast
import os

import modeldiff

PACKAGE = os.path.dirname(modeldiff.__file__)


def _imports(folder: str, package: str) -> dict[str, set[str]]:
    """module -> the modules of the same package it imports, from the source text."""
    modules = {}
    for root, _, files in os.walk(folder):
        for file in files:
            if file.endswith(".py"):
                path = os.path.join(root, file)
                name = ".".join([package] + os.path.relpath(path[:-3], folder).split(os.sep))
                modules[name.removesuffix(".__init__")] = path
    edges: dict[str, set[str]] = {m: set() for m in modules}
    for module, path in modules.items():
        is_package = path.endswith("__init__.py")
        with open(path, encoding="utf-8") as handle:
            tree = ast.parse(handle.read())
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                names = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    parent = module if is_package else module.rsplit(".", 1)[0]
                    parent = parent.rsplit(".", node.level - 1)[0] if node.level > 1 else parent
                    base = f"{parent}.{base}" if base else parent
                names = [base] + [f"{base}.{alias.name}" for alias in node.names]
            else:
                continue
            edges[module].update(n for n in names if n in modules and n != module and n != package)
    return edges


def import_cycles(folder: str, package: str) -> list[list[str]]:
    """The groups of modules that import each other round a loop (strongly connected, more than one)."""
    edges = _imports(folder, package)
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found = []
    for start in sorted(edges):
        if start in index:
            continue
        work = [(start, iter(sorted(edges[start])))]
        index[start] = low[start] = len(index)
        stack.append(start)
        on_stack.add(start)
        while work:
            node, following = work[-1]
            step = next(following, None)
            if step is not None:
                if step not in index:
                    index[step] = low[step] = len(index)
                    stack.append(step)
                    on_stack.add(step)
                    work.append((step, iter(sorted(edges[step]))))
                elif step in on_stack:
                    low[node] = min(low[node], index[step])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                group = []
                while True:
                    member = stack.pop()
                    on_stack.discard(member)
                    group.append(member)
                    if member == node:
                        break
                if len(group) > 1:
                    found.append(sorted(group))
    return found


def test_the_package_has_no_import_cycle():
    assert import_cycles(PACKAGE, "modeldiff") == []


def test_a_cycle_through_a_function_level_import_is_found(tmp_path):
    folder = tmp_path / "pkg"
    (folder / "sub").mkdir(parents=True)
    (folder / "__init__.py").write_text("")
    (folder / "sub" / "__init__.py").write_text("")
    (folder / "a.py").write_text("from pkg import b\n")
    (folder / "b.py").write_text("from pkg.sub import c\n")
    (folder / "sub" / "c.py").write_text("def f():\n    from .. import a\n")
    (folder / "d.py").write_text("import pkg.a\n")  # imports into the loop, not part of it
    assert import_cycles(str(folder), "pkg") == [["pkg.a", "pkg.b", "pkg.sub.c"]]


def test_modules_that_import_one_way_are_no_cycle(tmp_path):
    folder = tmp_path / "pkg"
    folder.mkdir()
    (folder / "__init__.py").write_text("")
    (folder / "a.py").write_text("from pkg import b\n")
    (folder / "b.py").write_text("from . import c\n")
    (folder / "c.py").write_text("x = 1\n")
    assert import_cycles(str(folder), "pkg") == []
