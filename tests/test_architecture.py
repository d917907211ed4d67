"""The layers of the package and the rule that imports only point down (function-level imports included).

Layers, top to bottom: ``cli`` -> ``workflows`` -> ``outputs`` -> ``posterior`` -> ``inputs`` -> ``physics``,
and ``workflows`` -> ``model`` -> ``inputs``; the base modules ``errors``, ``processes`` and ``_version`` import
nothing of the package and may be imported from anywhere. Within one layer, modules may import each other but
not in a circle.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "inference"
BASE = {"errors", "processes", "_version"}
#: What each layer may import (besides itself and the base modules).
ALLOWED = {
    "physics": set(),
    "inputs": {"physics"},
    "model": {"inputs", "physics"},
    "posterior": {"inputs", "physics"},
    "outputs": {"posterior", "inputs", "physics"},
    "workflows": {"outputs", "model", "posterior", "inputs", "physics"},
    "cli": {"workflows", "outputs", "model", "posterior", "inputs", "physics"},
    "__main__": {"cli"},
    "__init__": {"inputs", "workflows"},
}


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" and len(parts) > 1 else parts)


def _imports(path: Path) -> set[str]:
    """Dotted names (within the package) of every module ``path`` imports, at any depth of the code."""
    module = _module_name(path)
    package = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                target = ".".join([*base, *(node.module.split(".") if node.module else [])])
                names = [f"{target}.{a.name}" if target else a.name for a in node.names]
                found.update(name for name in [target, *names] if name)
            elif node.module and node.module.startswith("inference"):
                found.add(node.module.removeprefix("inference").lstrip("."))
        elif isinstance(node, ast.Import):
            names = (a.name for a in node.names if a.name.startswith("inference"))
            found.update(name.removeprefix("inference").lstrip(".") for name in names)
    modules = {_module_name(p) for p in PACKAGE.rglob("*.py")}
    return {name for name in found if name in modules and name != module}


def _layer(module: str) -> str:
    return module.split(".")[0]


def _graph() -> dict[str, set[str]]:
    return {_module_name(p): _imports(p) for p in PACKAGE.rglob("*.py")}


def test_every_module_lives_in_a_layer():
    top_level = {p.stem for p in PACKAGE.glob("*.py")}
    assert top_level <= BASE | {"cli", "__init__", "__main__"}, top_level


def test_imports_only_point_down():
    upward = []
    for module, targets in _graph().items():
        layer = _layer(module)
        if layer in BASE:
            assert not targets, f"{module} is a base module and imports {targets}"
            continue
        for target in targets:
            if _layer(target) in BASE | {layer} or _layer(target) in ALLOWED[layer]:
                continue
            upward.append(f"{module} -> {target}")
    assert not upward, "imports that do not point down:\n" + "\n".join(sorted(upward))


def test_no_circular_imports():
    graph = _graph()
    state: dict[str, int] = {}
    cycles = []

    def visit(node: str, trail: list[str]) -> None:
        state[node] = 1
        for target in graph.get(node, ()):
            if state.get(target) == 1:
                cycles.append(" -> ".join([*trail[trail.index(target) :], target]))
            elif target not in state:
                visit(target, [*trail, target])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert not cycles, "circular imports:\n" + "\n".join(cycles)


def test_importing_the_package_loads_no_heavy_library():
    code = (
        "import sys, inference, inference.inputs.config; "
        "print(sorted(m for m in ('pymc', 'pytensor', 'matplotlib', 'arviz') if m in sys.modules))"
    )
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert loaded.strip() == "[]"


def test_physics_imports_no_other_library_than_numerics():
    allowed = set(sys.stdlib_module_names) | {"numpy", "scipy", "numba"}
    for path in (PACKAGE / "physics").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Import):
                roots = {a.name.split(".")[0] for a in node.names}
            elif isinstance(node, ast.ImportFrom) and node.level == 0:
                roots = {node.module.split(".")[0]}
            else:
                continue
            assert roots <= allowed, f"{path.name} imports {roots - allowed}"
