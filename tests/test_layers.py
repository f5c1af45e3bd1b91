"""The layering DEVELOPERS.md states is the layering the code has.

Every ``import`` of a ``harness`` module, at module level or inside a function, is read from the
source with :mod:`ast`; a module may import its own subpackage, any lower layer, and the package
top (``harness.__version__``), never a layer above or beside it.
"""

from __future__ import annotations

import ast
from pathlib import Path

import harness

ROOT = Path(harness.__file__).parent

#: Lowest first; packages on one rank must not import each other.
RANKS: tuple[tuple[str, ...], ...] = (
    ("core",),
    ("stats", "trainers"),
    ("manifest", "store"),
    ("execute",),
    ("gate",),
    ("report",),
    ("cli", "pytest_plugin"),
)
RANK = {package: rank for rank, packages in enumerate(RANKS) for package in packages}


def _package(module: str) -> str | None:
    """``harness.gate.verify`` -> ``gate``; ``harness`` itself -> None."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else None


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
            found.update(f"{node.module}.{alias.name}" for alias in node.names if node.module == "harness")
    return {name for name in found if name == "harness" or name.startswith("harness.")}


def _modules() -> list[tuple[str, Path]]:
    out = []
    for path in sorted(ROOT.rglob("*.py")):
        rel = path.relative_to(ROOT.parent).with_suffix("")
        out.append((".".join(rel.parts).removesuffix(".__init__"), path))
    return out


def test_every_package_has_a_rank():
    packages = {_package(name) for name, _ in _modules()} - {None, "__main__"}
    assert packages == set(RANK)


def test_no_import_goes_up_or_sideways():
    violations = []
    for name, path in _modules():
        own = _package(name)
        if own in (None, "__main__"):
            continue
        for imported in sorted(_imports(path)):
            target = _package(imported)
            if target is None or target == own or target in ("__version__",):
                continue
            if RANK[target] >= RANK[own]:
                violations.append(f"{name} imports {imported}")
    assert violations == []


def test_the_check_sees_imports_inside_functions(tmp_path):
    """Guard against a checker that passes because it reads nothing."""
    source = tmp_path / "x.py"
    source.write_text("def f():\n    from harness.gate.verify import decide\n")
    assert _imports(source) == {"harness.gate.verify"}
