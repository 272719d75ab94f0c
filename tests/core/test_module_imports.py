"""How the modules of dualcost import each other: the core stands alone and nothing goes round.

Every module's source is read (not imported) and each ``import`` in it, at the top or inside a
function, becomes an edge to the dualcost module it names; ``from package import name`` names
the submodule when there is one. Keeping a layered package free of import cycles is common
practice (an import cycle makes the order of initialisation decide whether a name exists yet).
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import dualcost

ROOT = Path(dualcost.__file__).parent


def _module_name(path: Path) -> str:
    parts = ("dualcost",) + path.relative_to(ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {_module_name(p): p for p in sorted(ROOT.rglob("*.py"))}


def _is_package(name: str) -> bool:
    return MODULES[name].name == "__init__.py"


def _imported(name: str) -> set[str]:
    """The dualcost modules that module ``name`` imports anywhere in its source."""
    tree = ast.parse(MODULES[name].read_text(encoding="utf-8"))
    package = name if _is_package(name) else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                found.add(sub if sub in MODULES else target)
    return {m for m in found if m in MODULES and m != name}


GRAPH = {name: _imported(name) for name in MODULES}


def test_the_source_walk_sees_the_known_imports() -> None:
    """The walk itself: a few imports known to be there are found (relative, absolute, nested)."""
    assert "dualcost.core.errors" in GRAPH["dualcost.core.households"]
    assert "dualcost.core._checks" in GRAPH["dualcost.core.preferences.nested_ces"]
    assert "dualcost.engines.dask" in GRAPH["dualcost.api.operations.households"]  # in functions
    assert "dualcost.core.households" in GRAPH["dualcost.engines.dask"]


def test_the_core_imports_nothing_from_engines_or_the_web_layer() -> None:
    """dualcost.core is pure numpy/scipy: no engine, no api, cli or configuration, even lazily
    (the house rule of the core)."""
    outside = ("dualcost.engines", "dualcost.api", "dualcost.cli", "dualcost.config",
               "dualcost.client", "dualcost.pipeline_check")
    bad = sorted(
        (name, target)
        for name, targets in GRAPH.items() if name.startswith("dualcost.core")
        for target in targets if target.startswith(outside)
    )
    assert bad == []


def test_no_import_cycle_between_dualcost_modules() -> None:
    """Tarjan's strongly connected components (Tarjan 1972) of the import graph are single
    modules: no module imports, through others, a module that imports it."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    cycles: list[list[str]] = []
    for start in sorted(GRAPH):
        if start in index:
            continue
        # Iterative depth-first search: (module, iterator over its imports).
        work = [(start, iter(sorted(GRAPH[start])))]
        index[start] = low[start] = len(index)
        stack.append(start)
        on_stack.add(start)
        while work:
            node, targets = work[-1]
            target = next(targets, None)
            if target is None:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[node])
                if low[node] == index[node]:
                    component = []
                    while True:
                        member = stack.pop()
                        on_stack.discard(member)
                        component.append(member)
                        if member == node:
                            break
                    if len(component) > 1:
                        cycles.append(sorted(component))
            elif target not in index:
                index[target] = low[target] = len(index)
                stack.append(target)
                on_stack.add(target)
                work.append((target, iter(sorted(GRAPH[target]))))
            elif target in on_stack:
                low[node] = min(low[node], index[target])
    assert cycles == []


def test_importing_the_whole_core_loads_no_engine() -> None:
    """The same at run time: every core module imported in a fresh interpreter, and no module
    of dualcost.engines (nor Dask) is loaded."""
    core = [name for name in MODULES if name.startswith("dualcost.core")]
    code = (f"import importlib, sys\nfor m in {core!r}:\n    importlib.import_module(m)\n"
            "bad = sorted(m for m in sys.modules if m.startswith(('dualcost.engines', 'dask', "
            "'distributed')))\nprint(bad)\nsys.exit(1 if bad else 0)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
