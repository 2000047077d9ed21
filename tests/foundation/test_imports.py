"""The package's import graph: no cycle between modules, no private name from another package.

Every ``import`` and ``from ... import`` of every module is read with :mod:`ast`,
at module level and inside functions alike (a function-level import only defers
a cycle; it does not remove it).

- Nodes are modules (a package is its ``__init__``). ``from pkg import name``
  points at the submodule ``pkg.name`` when there is one, else at the submodule
  of ``pkg`` whose names the ``__init__`` re-exports as ``name`` (followed
  through re-exports), else at ``pkg`` itself. A package's ``__init__``
  importing its own submodules is how it re-exports them and is no cycle by
  itself; nothing adds an implicit edge from a submodule to its package.
- A private name is a module or an attribute whose name starts with an
  underscore (dunder names such as ``__version__`` are public). A private
  module may be imported within the package that holds it and its
  subpackages (``profshape._version`` everywhere in ``profshape``); a private
  attribute only by modules of the same package as the module defining it.
"""

from __future__ import annotations

import ast
import os
from pathlib import Path

import profshape

ROOT = Path(os.environ.get("PROFSHAPE_IMPORT_ROOT", Path(profshape.__file__).resolve().parent))


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, tuple[Path, bool]]:
    """Module name -> (file, is a package)."""
    return {_module_name(p): (p, p.name == "__init__.py") for p in sorted(ROOT.rglob("*.py"))}


MODULES = _modules()


def _package_of(name: str) -> str:
    """The package a module belongs to (a package's ``__init__`` belongs to itself)."""
    return name if MODULES[name][1] else name.rpartition(".")[0]


def _imports(name: str) -> list[tuple[str, str | None, int]]:
    """(absolute module, imported attribute or None, line) of every import of ``name``."""
    path, is_pkg = MODULES[name]
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    here = name if is_pkg else name.rpartition(".")[0]
    out: list[tuple[str, str | None, int]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, None, node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = here.split(".")
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            out += [(mod, a.name, node.lineno) for a in node.names]
    return [(m, a, line) for m, a, line in out if m == ROOT.name or m.startswith(ROOT.name + ".")]


def _provider(module: str, attr: str | None, seen: frozenset[str] = frozenset()) -> str:
    """The module an import really depends on (see the module docstring)."""
    if attr is None or attr == "*":
        return module
    if f"{module}.{attr}" in MODULES:
        return f"{module}.{attr}"
    if module in MODULES and MODULES[module][1] and module not in seen:
        for target, name, _ in _imports(module):
            if name == attr and target.startswith(module + "."):
                return _provider(target, attr, seen | {module})
    return module


def _graph() -> dict[str, set[str]]:
    graph: dict[str, set[str]] = {name: set() for name in MODULES}
    for name in MODULES:
        for module, attr, _ in _imports(name):
            target = _provider(module, attr)
            while target not in MODULES:  # e.g. a name of a module that is not a file
                target = target.rpartition(".")[0]
            if target != name:
                graph[name].add(target)
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                found.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def _private(part: str) -> bool:
    return part.startswith("_") and not (part.startswith("__") and part.endswith("__"))


def test_the_walk_sees_the_package():
    # the graph is built from real files: the core modules and their known imports are there
    graph = _graph()
    assert len(MODULES) > 50
    assert f"{ROOT.name}.likelihood" in graph[f"{ROOT.name}.problem"]
    assert f"{ROOT.name}.shapes._base" in graph[f"{ROOT.name}.shapes.log_spline"]


def test_a_cycle_is_found_when_there_is_one():
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


def test_no_import_cycle_between_modules():
    cycles = _cycles(_graph())
    assert not cycles, "import cycles (each a set of modules reaching each other): " + "; ".join(
        " <-> ".join(c) for c in cycles)


def test_no_private_name_from_another_package():
    bad = []
    for name in MODULES:
        importer_pkg = _package_of(name)
        for module, attr, line in _imports(name):
            parts = module.split(".")
            for i, part in enumerate(parts):
                if _private(part):
                    owner = ".".join(parts[:i])  # the package holding the private module
                    if not (importer_pkg == owner or importer_pkg.startswith(owner + ".")):
                        bad.append(f"{name}:{line} imports private module {module}")
                    break
            if attr is None or not _private(attr):
                continue
            full = f"{module}.{attr}"
            if full in MODULES:  # a private module, imported by its name
                owner = module
                if not (importer_pkg == owner or importer_pkg.startswith(owner + ".")):
                    bad.append(f"{name}:{line} imports private module {full}")
            elif module in MODULES and _package_of(module) != importer_pkg:
                bad.append(f"{name}:{line} imports private {attr} from {module}")
    assert not bad, "\n".join(bad)
