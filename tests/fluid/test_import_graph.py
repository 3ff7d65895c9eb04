"""The import graph of fluid/ and desim/: no cycles, and desim reads only the scenario model and
the net's derived facts from fluid (design.md §2: desim -> fluid.scenario; DEVELOPERS.md).

The graph is built from the source with :mod:`ast`, counting every import statement wherever it
stands (module level, inside functions, under ``if``), so that a cycle cannot hide behind a
function-level import. An edge goes to the module named (``from fluid.scenario import X`` ->
fluid.scenario; ``from . import x`` -> the package's submodule x when there is one), not to
the packages above it: ``fluid/__init__.py`` importing its submodules is not a cycle.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PACKAGES = ("fluid", "desim")
#: What desim may import from fluid: the frozen scenario and its parts, and the derived facts.
DESIM_MAY_IMPORT = {"fluid.scenario", "fluid.distributions", "fluid.errors", "fluid.sources",
                    "fluid.structure", "fluid.json_values"}
#: desim modules that are entry points reading YAML files (like the CLI), not library code: the
#: benchmark (`python -m desim.bench`) loads the demo and its --scenario file itself.
DESIM_ENTRY_POINTS = {"desim.bench"}


def _modules() -> dict[str, Path]:
    out = {}
    for pkg in PACKAGES:
        for path in sorted((ROOT / pkg).glob("*.py")):
            name = pkg if path.stem == "__init__" else f"{pkg}.{path.stem}"
            out[name] = path
    return out


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """Modules of fluid/ and desim/ (or the packages themselves) that ``name`` imports."""
    package = name if path.stem == "__init__" else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module or ""
            # `from pkg import sub` imports the submodule when there is one
            targets = [f"{module}.{alias.name}" if f"{module}.{alias.name}" in known else module
                       for alias in node.names]
        else:
            continue
        for target in targets:
            while target and target not in known:
                target = target.rpartition(".")[0]
            if target and target != name:
                found.add(target)
    return found


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    known = set(modules)
    return {name: _imports(name, path, known) for name, path in modules.items()}


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One cycle of ``graph`` as a path (first node repeated at the end), or None."""
    state: dict[str, int] = {}
    for start in sorted(graph):
        if state.get(start):
            continue
        stack = [(start, iter(sorted(graph[start])))]
        path = [start]
        state[start] = 1
        while stack:
            node, it = stack[-1]
            nxt = next(it, None)
            if nxt is None:
                state[node] = 2
                stack.pop()
                path.pop()
            elif state.get(nxt) == 1:
                return path[path.index(nxt):] + [nxt]
            elif not state.get(nxt):
                state[nxt] = 1
                path.append(nxt)
                stack.append((nxt, iter(sorted(graph[nxt]))))
    return None


def test_the_graph_sees_function_level_imports(tmp_path):
    # the check itself: an import inside a function, or a relative one, is an edge like any other
    module = tmp_path / "scenario.py"
    module.write_text("import math\n\ndef f():\n    from .loading import x\n    import desim.run\n")
    known = {"fluid.scenario", "fluid.loading", "desim", "desim.run"}
    assert _imports("fluid.scenario", module, known) == {"fluid.loading", "desim.run"}
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


def test_fluid_and_desim_import_graph_has_no_cycle():
    graph = _graph()
    assert "fluid.scenario" in graph and "desim.engine" in graph
    cycle = _cycle(graph)
    assert cycle is None, "import cycle: " + " -> ".join(cycle)


def test_desim_reads_only_the_scenario_model_and_the_facts_from_fluid():
    graph = _graph()
    wrong = {(name, target) for name, targets in graph.items()
             if name.startswith("desim") and name not in DESIM_ENTRY_POINTS
             for target in targets
             if target.split(".")[0] == "fluid" and target not in DESIM_MAY_IMPORT}
    assert not wrong, f"desim imports from fluid beyond {sorted(DESIM_MAY_IMPORT)}: {sorted(wrong)}"
