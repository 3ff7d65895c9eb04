"""The rooms of compare/ import in one direction only: cli -> present -> study -> formulas.

Every import statement of every module (module level and inside functions, absolute and
relative) is read with ``ast``; a module may import its own room or a room below it, never one
above. ``formulas`` is pure: it imports nothing of the project's own packages. Nothing in
``fluid`` or ``desim`` imports ``compare`` (design.md §2).
"""

from __future__ import annotations

import ast
import pathlib

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]
ORDER = ("formulas", "study", "present", "cli")  # a room may import the rooms before it
OURS = ("compare", "fluid", "desim")


def _module_name(path: pathlib.Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports(path: pathlib.Path) -> list[tuple[int, str]]:
    """(line, absolute module name) of every import in ``path``."""
    name = _module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    return _imports_in(path.read_text(), package)


def _imports_in(source: str, package: str) -> list[tuple[int, str]]:
    out = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            out += [(node.lineno, a.name) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            # "from . import x" names submodules: count each of them
            if not node.module:
                out += [(node.lineno, f"{mod}.{a.name}") for a in node.names]
            else:
                out.append((node.lineno, mod))
    return out


def _room(module: str) -> str | None:
    parts = module.split(".")
    if parts[0] != "compare" or len(parts) < 2:
        return None
    return parts[1] if parts[1] in ORDER else None


MODULES = sorted((ROOT / "compare").rglob("*.py"))


def test_every_module_of_compare_lives_in_a_room():
    loose = [str(p.relative_to(ROOT)) for p in MODULES
             if p.parent == ROOT / "compare" and p.name != "__init__.py"]
    assert loose == [], "modules outside the four rooms"


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(ROOT)))
def test_imports_follow_the_room_order(path):
    here = _room(_module_name(path))
    if here is None:  # compare/__init__.py: the public facade may import any room
        return
    bad = []
    for line, mod in _imports(path):
        top = mod.split(".")[0]
        if here == "formulas" and top in OURS and _room(mod) != "formulas":
            bad.append(f"line {line}: formulas imports {mod} (formulas are pure)")
        if top != "compare":
            continue
        there = _room(mod)
        if there is None:
            bad.append(f"line {line}: {here} imports the facade or a loose module {mod}")
        elif ORDER.index(there) > ORDER.index(here):
            bad.append(f"line {line}: {here} imports {mod} ({there} is above {here})")
    assert bad == []


@pytest.mark.parametrize("package", ["fluid", "desim"])
def test_engines_never_import_compare(package):
    bad = [f"{p.relative_to(ROOT)}:{line} imports {mod}"
           for p in sorted((ROOT / package).rglob("*.py"))
           for line, mod in _imports(p) if mod.split(".")[0] == "compare"]
    assert bad == []


def test_the_checker_resolves_relative_imports_inside_functions():
    """The rule can fail: a function-level relative import from present into cli is found."""
    found = _imports_in("def f():\n    from ..cli import main\n    from . import tables\n",
                        "compare.present")
    assert found == [(2, "compare.cli"), (3, "compare.present.tables")]
    assert ORDER.index(_room(found[0][1])) > ORDER.index("present")
