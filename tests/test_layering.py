"""Layers look only down: walk every module's imports with ``ast``.

pretrain/ never imports bridge/ (anywhere, even inside functions). Module-level imports go
only to lower layers: pretrain in the order documented in ``pretrain/__init__.py``, bridge in
ansatz -> compile -> seed -> discriminative -> plateau -> sweep -> report -> cli. Package
``__init__`` files are the public API (top of their package) and are not ranked.
"""

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PRETRAIN_ORDER = ["errors", "_base", "files", "linalg", "paulis", "data", "engines", "fit",
                  "models", "diagnostics", "io"]
BRIDGE_ORDER = ["unitaries", "ansatz", "compile", "compile_io", "seed", "discriminative",
                "eigensolver", "plateau_grad", "plateau", "plateau_stats", "sweep", "report",
                "findings", "neighbour", "recipe_config", "pipeline", "cli", "__main__"]
ORDERS = {"pretrain": PRETRAIN_ORDER, "bridge": BRIDGE_ORDER}


def module_name(path: Path, root: Path = ROOT) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def imports_of(source: str, name: str, is_package: bool):
    """Yield (absolute module imported, line, module_level) for every import in ``source``."""
    tree = ast.parse(source)
    top_level = {id(node) for node in tree.body}
    package = name if is_package else name.rpartition(".")[0]
    for node in ast.walk(tree):
        level_ok = id(node) in top_level
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name, node.lineno, level_ok
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if node.module is None:  # "from . import x": each name is a module
                for alias in node.names:
                    yield f"{target}.{alias.name}", node.lineno, level_ok
            else:
                yield target, node.lineno, level_ok


def rank(name: str):
    """(package, layer index) of a module, or None when it is not a ranked module."""
    parts = name.split(".")
    if parts[0] not in ORDERS or len(parts) < 2:
        return None
    order = ORDERS[parts[0]]
    return (parts[0], order.index(parts[1])) if parts[1] in order else None


def violations_in(path: Path, source: str, root: Path = ROOT):
    name = module_name(path, root)
    is_package = path.name == "__init__.py"
    own = rank(name) if not (is_package and name.count(".") == 0) else None
    found = []
    for target, line, module_level in imports_of(source, name, is_package):
        where = f"{path.relative_to(root)}:{line} imports {target}"
        if name.startswith("pretrain") and target.split(".")[0] == "bridge":
            found.append(f"{where}: pretrain must never import bridge")
            continue
        if own is None or not module_level:
            continue
        other = rank(target)
        if other is None or other[0] != own[0]:
            continue
        if other[1] > own[1]:
            found.append(f"{where}: upward import (layer {other[1]} > {own[1]})")
        elif other[1] == own[1] and target.split(".")[1] != name.split(".")[1]:
            found.append(f"{where}: same-layer import between different modules")
    return found


def python_files(package: str):
    folder = ROOT / package
    return sorted(folder.rglob("*.py")) if folder.is_dir() else []


def test_pretrain_order_matches_package_docstring():
    doc = ast.get_docstring(ast.parse((ROOT / "pretrain" / "__init__.py").read_text()))
    line = doc.split("Layering")[1].split(":", 1)[1].split(".")[0]
    documented = [part.strip() for part in line.replace("\n", " ").split(",")]
    assert documented == PRETRAIN_ORDER


@pytest.mark.parametrize("package", ["pretrain", "bridge"])
def test_every_module_is_ranked(package):
    for path in python_files(package):
        name = module_name(path)
        if name == package:
            continue
        assert rank(name) is not None, f"{name} is missing from the layer order"


def test_bridge_order_matches_package_docstring():
    doc = ast.get_docstring(ast.parse((ROOT / "bridge" / "__init__.py").read_text()))
    line = doc.split("Layering")[1].split(":", 1)[1].split(".")[0]
    documented = [part.strip() for part in line.replace("\n", " ").split(",")]
    assert documented == BRIDGE_ORDER


@pytest.mark.parametrize("package", ["pretrain", "bridge"])
def test_no_upward_or_forbidden_imports(package):
    found = []
    for path in python_files(package):
        found += violations_in(path, path.read_text(encoding="utf-8"))
    assert not found, "\n".join(found)


def test_checker_catches_violations(tmp_path):
    """The walker itself must flag the patterns it exists for."""
    pkg = tmp_path / "pretrain"
    (pkg / "engines").mkdir(parents=True)
    cases = {
        pkg / "paulis.py": ("from .models import VisibleGibbsModel\n", "upward"),
        pkg / "data.py": ("import pretrain.fit\n", "upward"),
        pkg / "engines" / "dense.py": ("from ..io import save_model\n", "upward"),
        pkg / "linalg.py": ("def f():\n    from bridge import seed\n", "never import bridge"),
        pkg / "errors.py": ("import bridge.report\n", "never import bridge"),
    }
    for path, (source, message) in cases.items():
        found = violations_in(path, source, root=tmp_path)
        assert len(found) == 1 and message in found[0], (path, found)
    fine = {
        pkg / "models.py": "from .fit import minimize\nfrom .engines import make_engine\n",
        pkg / "io.py": "def load():\n    from .models import VisibleGibbsModel\n",
        pkg / "engines" / "dense.py": "from .base import GibbsEngine\nfrom ..paulis import x\n",
    }
    for path, source in fine.items():
        assert violations_in(path, source, root=tmp_path) == [], path
    bridge = tmp_path / "bridge"
    bridge.mkdir()
    assert violations_in(bridge / "seed.py", "from .plateau import probe\n", root=tmp_path)
    assert violations_in(bridge / "seed.py", "from bridge.compile import c\n",
                         root=tmp_path) == []
    assert violations_in(bridge / "cli.py", "from pretrain.models import M\n",
                         root=tmp_path) == []
