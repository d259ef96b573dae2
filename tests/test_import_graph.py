"""The package's import graph, function-local imports included, has no cycles, and imports
inside functions are kept for heavy optional libraries.

Modules are read with :mod:`ast` (nothing is imported), so imports inside functions count
as much as those at the top of a module. A cycle means two modules that cannot be read
apart: the stages should only import downwards.
"""

from __future__ import annotations

import ast
from pathlib import Path

import regionmap

PACKAGE_DIR = Path(regionmap.__file__).parent

#: Third-party modules that may be imported inside functions: heavy or optional ones that the
#: commands that do not need them should not load.
LAZY_ALLOWED = {
    "affine",
    "cf_xarray",
    "cfgrib",
    "contourpy",
    "dask",
    "distributed",
    "eccodes",
    "geopandas",
    "jinja2",
    "matplotlib",
    "netCDF4",
    "numba",
    "PIL",
    "pint",
    "pyogrio",
    "pyproj",
    "rasterio",
    "scipy",
    "shapely",
    "tqdm",
}
#: Our modules that draw with matplotlib: other stages load them only when they draw.
LAZY_FIGURE_PACKAGES = ("regionmap.plots", "regionmap.report")


def _lazy_allowed(module: str, target: str) -> bool:
    if target.split(".")[0] != "regionmap":
        return target.split(".")[0] in LAZY_ALLOWED
    if module == "regionmap.cli":  # a command loads its own stage's modules when it runs
        return True
    return target.startswith(LAZY_FIGURE_PACKAGES) and not module.startswith(LAZY_FIGURE_PACKAGES)


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE_DIR.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE_DIR.rglob("*.py"))}


def _imports(name: str, path: Path, modules: dict[str, Path]):
    """(imported regionmap module, line, inside a function?) for every import statement."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    local = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            local.update(id(n) for n in ast.walk(node) if n is not node)
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                up = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join(up + ([base] if base else []))
            targets = [
                f"{base}.{a.name}" if f"{base}.{a.name}" in modules else base for a in node.names
            ]
        else:
            continue
        for target in targets:
            yield target, node.lineno, id(node) in local


def _graph():
    modules = _modules()
    edges: dict[str, set[str]] = {m: set() for m in modules}
    lazy: list[str] = []
    for name, path in modules.items():
        for target, line, in_function in _imports(name, path, modules):
            if target.split(".")[0] == "regionmap":
                while target not in modules:
                    target = target.rpartition(".")[0]
                if target != name:
                    edges[name].add(target)
            if in_function and not _lazy_allowed(name, target):
                lazy.append(f"{name}:{line} imports {target} inside a function")
    return edges, lazy


def _cycles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan 1972)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(edges[v]):
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

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return found


def test_cycle_finder_finds_a_planted_cycle():
    # negative control: the checker must see a cycle that is there
    edges = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert _cycles(edges) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


def test_package_import_graph_has_no_cycles():
    edges, _ = _graph()
    assert len(edges) > 50  # every module was read
    assert _cycles(edges) == []


def test_function_local_imports_are_only_heavy_optional_libraries():
    _, lazy = _graph()
    assert lazy == []
