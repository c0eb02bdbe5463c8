"""The layout of the code: no import circle among quadrat's modules, and no
``id()`` in what decides whether a posterior is current.

An import circle makes a module's names depend on which module was imported
first; it is walked here over every import statement, those inside functions
included, with the `ast` module (nothing is imported or run).
"""

import ast
import os

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PACKAGES = ("engine", "shell")


def _modules() -> dict[str, str]:
    """Module name -> file, for every module of the two packages."""
    out = {}
    for pkg in PACKAGES:
        for top, _dirs, files in os.walk(os.path.join(ROOT, pkg)):
            for f in files:
                if not f.endswith(".py"):
                    continue
                path = os.path.join(top, f)
                rel = os.path.relpath(path, ROOT)[:-3].split(os.sep)
                if rel[-1] == "__init__":
                    rel = rel[:-1]
                out[".".join(rel)] = path
    return out


def _imports(name: str, path: str, modules: dict[str, str]) -> set[str]:
    """The project's modules that module `name` imports, anywhere in its file."""
    with open(path, encoding="utf-8") as fh:
        tree = ast.parse(fh.read(), path)
    package = name if path.endswith("__init__.py") else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            # `from . import x` names a module x when there is one
            targets = [mod] + [f"{mod}.{a.name}" for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in modules:
                t = t.rpartition(".")[0]
            if t and t != name:
                found.add(t)
    return found


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    return {name: _imports(name, path, modules) for name, path in modules.items()}


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import circle of `graph`, as the modules along it, or None."""
    state: dict[str, int] = {}       # 1: on the current path, 2: done
    path: list[str] = []

    def visit(n: str) -> list[str] | None:
        state[n] = 1
        path.append(n)
        for m in sorted(graph.get(n, ())):
            if state.get(m) == 1:
                return path[path.index(m):] + [m]
            if m not in state:
                found = visit(m)
                if found:
                    return found
        path.pop()
        state[n] = 2
        return None

    for n in sorted(graph):
        if n not in state:
            found = visit(n)
            if found:
                return found
    return None


def test_the_walk_sees_imports_inside_functions_and_finds_a_circle():
    # the walker itself, on a graph with a circle through a function-level import
    modules = _modules()
    g = _graph()
    assert "engine.refine" in g["engine.state"]
    assert "shell.plots" in g["shell.commands.views"]      # imported inside `plot`
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None
    assert len(modules) > 30


def test_no_import_circle_among_the_project_modules():
    cycle = _cycle(_graph())
    assert cycle is None, "import circle: " + " -> ".join(cycle)


def test_the_engine_never_imports_the_shell_or_the_terminal_libraries():
    modules = _modules()
    for name, path in modules.items():
        if not name.startswith("engine"):
            continue
        with open(path, encoding="utf-8") as fh:
            tree = ast.parse(fh.read(), path)
        for node in ast.walk(tree):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import) else
                     [node.module or ""] if isinstance(node, ast.ImportFrom) and not node.level
                     else [])
            for n in names:
                assert n.split(".")[0] not in ("shell", "prompt_toolkit", "plotext"), (name, n)


@pytest.mark.parametrize("rel", ["engine/state.py", "engine/revision.py", "engine/results.py",
                                 "engine/workspace.py", "engine/whatif.py", "engine/edits.py",
                                 "engine/runs.py", "engine/asking.py", "engine/comparing.py",
                                 "shell/app.py"])
def test_no_id_in_the_basis_or_the_caches(rel):
    # `id()` of an object is reused once the object is freed: a basis or a cache
    # keyed on it could take a stale posterior for a current one
    with open(os.path.join(ROOT, rel), encoding="utf-8") as fh:
        tree = ast.parse(fh.read(), rel)
    calls = [n.lineno for n in ast.walk(tree) if isinstance(n, ast.Call)
             and isinstance(n.func, ast.Name) and n.func.id == "id"]
    assert calls == [], f"{rel} calls id() at lines {calls}"
