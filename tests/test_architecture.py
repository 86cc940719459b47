"""Keep the one-way data flow true: kernels never import I/O, outputs never import kernels."""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "gridstab"
KERNELS = {"constants", "moisture", "thermo", "adiabats", "layers", "parcels", "profile",
           "columns", "_elementwise"}
OUTPUTS = {"writing", "maps"}
ALLOWED_EVERYWHERE = {"gridstab.errors", "gridstab.caution", "gridstab._version"}


def imports(module: str) -> set[str]:
    tree = ast.parse((PACKAGE / f"{module}.py").read_text())
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            found.add(node.module)
    return found


def test_kernels_import_only_numerics_and_each_other():
    allowed_third_party = {"math", "numba", "numpy", "functools", "typing", "dataclasses",
                           "__future__"}
    for module in KERNELS:
        for name in imports(module):
            top = name.split(".")[0]
            if top == "gridstab":
                assert name.split(".")[1] in KERNELS or name in ALLOWED_EVERYWHERE, (module, name)
            else:
                assert top in allowed_third_party, (module, name)


def test_outputs_do_not_import_kernels():
    for module in OUTPUTS:
        for name in imports(module):
            if name.startswith("gridstab."):
                assert name.split(".")[1] not in KERNELS, (module, name)
                assert name.split(".")[1] not in {"reading", "engine", "cli"}, (module, name)


def test_only_the_engine_calls_apply_ufunc():
    for path in PACKAGE.glob("*.py"):
        if path.stem == "engine":
            continue
        assert "apply_ufunc" not in path.read_text().replace("# apply_ufunc", ""), path.name


def test_only_the_cli_prints_or_exits():
    for path in PACKAGE.glob("*.py"):
        if path.stem in {"cli", "__main__"}:
            continue
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
                assert node.func.id not in {"print", "exit"}, (path.name, node.lineno)
            if isinstance(node, ast.Attribute) and node.attr == "exit":
                assert not (isinstance(node.value, ast.Name) and node.value.id == "sys"), path.name
