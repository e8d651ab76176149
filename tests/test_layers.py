"""The package's shape: layers never import upward, no import circles, no stdlib-named modules.

The layers are those of DEVELOPERS.md ("The data path"): a module may import from its own
package (unit) and from units of strictly lower layers only. Every import counts, at module
level, inside functions and under ``TYPE_CHECKING`` alike.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "fringe"

#: DEVELOPERS.md's order, lowest first. A unit is a top-level module or subpackage of fringe.
LAYERS = (
    ("fringe.conventions", "fringe.constants", "fringe.errors", "fringe.heap", "fringe.linalg",
     "fringe.site", "fringe.text_table", "fringe.version"),
    ("fringe.frames",),
    ("fringe.theories",),
    ("fringe.experiment", "fringe.noise"),
    ("fringe.io",),
    ("fringe.demodulate", "fringe.simulation"),
    ("fringe.fit", "fringe.plan"),
    ("fringe.study",),
    ("fringe.report",),
    ("fringe.cli",),
    ("fringe",),                      # fringe/__init__.py: the Python face
)
LAYER_OF = {unit: i for i, units in enumerate(LAYERS) for unit in units}

#: Stdlib names the layout keeps on purpose: only ever imported as ``fringe.io``/``fringe.site``,
#: never bare, so they shadow nothing (``inspect``, ``signal`` and ``html`` were renamed).
STDLIB_NAMES_ALLOWED = {"io", "site"}


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def all_modules() -> dict[str, Path]:
    return {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


MODULES = all_modules()


def unit_of(module: str) -> str:
    if module == "fringe":
        return "fringe"
    return ".".join(module.split(".")[:2])


def imported_modules(module: str, path: Path) -> set[str]:
    """Every fringe module that ``module`` imports (a ``from pkg import sub`` names ``pkg.sub``)."""
    is_package = path.name == "__init__.py"
    package = module if is_package else module.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.split(".")[0] == "fringe")
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "fringe":
                continue
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                found.add(sub if sub in MODULES else target)
    return found


GRAPH = {m: imported_modules(m, p) for m, p in MODULES.items()}


def test_every_unit_has_a_layer():
    units = {unit_of(m) for m in MODULES}
    assert units <= set(LAYER_OF), f"units without a layer: {sorted(units - set(LAYER_OF))}"


@pytest.mark.parametrize("module", sorted(MODULES))
def test_no_upward_import(module):
    here = unit_of(module)
    upward = sorted(t for t in GRAPH[module]
                    if unit_of(t) != here and LAYER_OF[unit_of(t)] >= LAYER_OF[here]
                    and LAYER_OF[here] > 0)     # the ground floor's modules may use each other
    assert not upward, f"{module} (layer {LAYER_OF[here]}) imports {upward}"


def test_no_import_circles():
    # Tarjan's strongly connected components over the module graph
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    circles = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in GRAPH.get(v, ()):
            if w not in MODULES:
                continue
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
            if len(component) > 1 or v in GRAPH.get(v, ()):
                circles.append(sorted(component))

    for v in sorted(MODULES):
        if v not in index:
            visit(v)
    assert not circles, f"import circles: {circles}"


def test_the_graph_sees_imports():
    """The walker finds real edges (so the tests above cannot pass on an empty graph)."""
    assert "fringe.errors" in GRAPH["fringe.frames"]
    assert "fringe.fit.stages" in GRAPH["fringe.fit"]
    assert len(MODULES) > 50


def test_no_module_named_after_the_standard_library():
    clashes = sorted(m for m in MODULES
                     if m.rpartition(".")[2] in sys.stdlib_module_names
                     and m.rpartition(".")[2] not in STDLIB_NAMES_ALLOWED)
    assert not clashes, f"modules named after standard-library modules: {clashes}"


def test_import_fringe_is_light():
    """``import fringe`` loads neither matplotlib nor the fit (the face imports lazily)."""
    import subprocess

    code = ("import sys, fringe; bad = [m for m in ('matplotlib', 'fringe.fit', 'lmfit', 'dask')"
            " if m in sys.modules]; print(','.join(bad))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=PACKAGE.parent)
    assert out.stdout.strip() == ""
