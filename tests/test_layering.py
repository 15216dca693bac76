"""The package's layering holds: imports only go down the layers, and no module imports itself
back through others (checked by reading every import statement with ast, function-level ones
included).

Layers, lowest first (DEVELOPERS.md): shared helpers < data < kernels < equilibrium and
diagnostics (side by side, neither imports the other) < tables < faces.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import sahaboltz

PACKAGE = Path(sahaboltz.__file__).resolve().parent

#: layer rank of each top-level part of the package
LAYER = {"errors": 0, "constants": 0, "quantities": 0, "_version": 0, "_lazy": 0, "_html": 0,
         "__init__": 0,
         "data": 1, "kernels": 2, "equilibrium": 3, "diagnostics": 3, "tables": 4, "faces": 5}


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


MODULES = {_module_name(p): p for p in PACKAGE.rglob("*.py")}


def _part(module: str) -> str:
    """'sahaboltz.kernels.partition' -> 'kernels'; 'sahaboltz' -> '__init__'."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _imports(module: str) -> set[str]:
    """The sahaboltz modules that ``module`` imports (anywhere in the file)."""
    tree = ast.parse(MODULES[module].read_text(), filename=str(MODULES[module]))
    is_pkg = MODULES[module].name == "__init__.py"
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                pkg = module.split(".")
                pkg = pkg if is_pkg else pkg[:-1]
                pkg = pkg[:len(pkg) - node.level + 1]
                base = ".".join(pkg + ([base] if base else []))
            # "from sahaboltz.kernels import truncation" imports a submodule
            names = [f"{base}.{a.name}" if f"{base}.{a.name}" in MODULES else base
                     for a in node.names]
        else:
            continue
        for name in names:
            while name and name not in MODULES:
                name = name.rpartition(".")[0]
            if name.startswith("sahaboltz") and name != module:
                out.add(name)
    return out


GRAPH = {m: _imports(m) for m in MODULES}


def test_the_reader_sees_the_package():
    # a guard on the test itself: it must find the modules and their imports
    assert "sahaboltz.equilibrium.solver" in GRAPH
    assert "sahaboltz.equilibrium.atomic" in GRAPH["sahaboltz.equilibrium.solver"]
    assert "sahaboltz.kernels.truncation" in GRAPH["sahaboltz.kernels.partition"]


@pytest.mark.parametrize("module", sorted(MODULES))
def test_imports_go_down_the_layers(module):
    here = _part(module)
    assert here in LAYER, f"{module}: unknown part {here!r}; add it to LAYER and DEVELOPERS.md"
    for target in sorted(GRAPH[module]):
        there = _part(target)
        if there == here or LAYER[there] == LAYER[here] == 0:  # shared helpers may share
            continue
        assert LAYER[there] < LAYER[here], (
            f"{module} imports {target}: {there} (layer {LAYER[there]}) is not below "
            f"{here} (layer {LAYER[here]})")


def test_no_import_cycle():
    # depth-first search for a back edge; report the cycle found
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str):
        state[m] = 1
        stack.append(m)
        for n in sorted(GRAPH[m]):
            # a package's __init__ and its own submodules are one unit for Python's import
            if m.startswith(n + "."):
                continue
            if state.get(n) == 1:
                cycle = stack[stack.index(n):] + [n]
                pytest.fail("import cycle: " + " -> ".join(cycle))
            if n not in state:
                visit(n)
        stack.pop()
        state[m] = 2

    for m in sorted(GRAPH):
        if m not in state:
            visit(m)


def test_public_api_names_resolve():
    import sahaboltz as sb

    for name in sb.__all__:
        assert getattr(sb, name) is not None, name
    assert sb.solve_equilibrium.__module__ == "sahaboltz.equilibrium.solver"
