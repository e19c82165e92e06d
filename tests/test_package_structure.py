"""The package's import graph has no cycles (one module, one job; stages depend downstream only).

Reference: the graph is built with the standard library's ``ast`` over every module of the
package, counting module-level and function-level ``import`` statements alike, and checked with
``graphlib.TopologicalSorter`` (Python standard library), which raises ``CycleError`` on a cycle.
"""

from __future__ import annotations

import ast
import graphlib
from pathlib import Path

import obsprep

PACKAGE_DIR = Path(obsprep.__file__).parent


def _module_name(path: Path) -> str:
    parts = ("obsprep",) + path.relative_to(PACKAGE_DIR).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def import_graph() -> dict[str, set[str]]:
    """Module -> obsprep modules it imports (``from a.b import c`` counts as a.b.c when that is
    a module, else as a.b)."""
    modules = {_module_name(p): p for p in PACKAGE_DIR.rglob("*.py")}
    graph: dict[str, set[str]] = {}
    for name, path in modules.items():
        targets = set()
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            if isinstance(node, ast.Import):
                targets.update(a.name for a in node.names)
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                for alias in node.names:
                    submodule = f"{node.module}.{alias.name}"
                    # ``from package import submodule`` imports the submodule; the package's
                    # __init__ is imported first by any import below it, so it adds no edge
                    targets.add(submodule if submodule in modules else node.module)
        # a package's __init__ importing its own submodules is how a package exposes them
        graph[name] = {t for t in targets if t in modules and t != name
                       and not (path.name == "__init__.py" and t.startswith(name + "."))}
    return graph


def test_no_import_cycle_inside_obsprep():
    graph = import_graph()
    assert len(graph) > 40  # the walk found the package's modules
    try:
        tuple(graphlib.TopologicalSorter(graph).static_order())
    except graphlib.CycleError as exc:
        raise AssertionError(f"import cycle: {' -> '.join(exc.args[1])}") from None

