"""Layers look only down: walk every module's imports with ``ast``, in-function ones included.

The three packages are ranked ``pretrain`` < ``bridge`` < ``recipes``; a module never imports
a higher package. Inside a package, the modules are ranked by the order written once, in the
package ``__init__`` docstring (the block under "Layer order"); a module imports only modules
ranked below it (a sub-package such as ``engines`` or ``plateau.*`` counts as its entries).
Package roots are the public API: a module never imports its own package's root, which would
hide an upward import behind a re-export. ``recipes.scenarios`` imports ``pretrain`` only.
The ``thermoseed.`` prefix is stripped before ranking.
"""

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("pretrain", "bridge", "recipes")
#: Sub-packages that must stay below a given package, whatever their rank says.
ONLY_PRETRAIN = ("recipes.scenarios",)


def documented_order(package: str, root: Path = ROOT) -> list[str]:
    """Module names listed under "Layer order" in the package docstring (``a -> b -> c``)."""
    doc = ast.get_docstring(ast.parse((root / package / "__init__.py").read_text()))
    lines = doc.split("Layer order", 1)[1].splitlines()[1:]
    block = []
    for line in lines:
        if not line.strip():
            break
        block.append(line.strip())
    return [part.strip() for part in " ".join(block).split("->")]


def module_name(path: Path, root: Path = ROOT) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def strip_prefix(name: str) -> str:
    return name[len("thermoseed."):] if name.startswith("thermoseed.") else name


def imports_of(source: str, name: str, is_package: bool):
    """Yield (absolute module imported without the ``thermoseed.`` prefix, line)."""
    tree = ast.parse(source)
    package = name if is_package else name.rpartition(".")[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield strip_prefix(alias.name), node.lineno
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = strip_prefix(node.module or "")
            if node.module is None:  # "from . import x": each name is a module
                for alias in node.names:
                    yield f"{target}.{alias.name}", node.lineno
            else:
                yield target, node.lineno


def rank(name: str, orders: dict[str, list[str]]):
    """(package index, module index) of a module; module index None for a package root."""
    parts = name.split(".")
    if parts[0] not in orders:
        return None
    top = PACKAGES.index(parts[0])
    rest = ".".join(parts[1:])
    if not rest:
        return top, None
    for k, entry in enumerate(orders[parts[0]]):
        if rest == entry or rest.startswith(entry + "."):
            return top, k
    inside = [k for k, entry in enumerate(orders[parts[0]]) if entry.startswith(rest + ".")]
    if inside:  # a sub-package root re-exports its modules: it sits on top of them
        return top, max(inside)
    return top, -1  # unranked: reported by test_every_module_is_ranked


def violations_in(path: Path, source: str, orders: dict[str, list[str]], root: Path = ROOT):
    name = module_name(path, root)
    is_package = path.name == "__init__.py"
    own = rank(name, orders)
    found = []
    for target, line in imports_of(source, name, is_package):
        other = rank(target, orders)
        if own is None or other is None:
            continue
        where = f"{path.relative_to(root)}:{line} imports {target}"
        if other[0] > own[0]:
            found.append(f"{where}: upward import ({PACKAGES[other[0]]} sits above "
                         f"{PACKAGES[own[0]]})")
        elif any(name.startswith(p) for p in ONLY_PRETRAIN) and other[0] != 0 and \
                not target.startswith(name.rpartition(".")[0]):
            found.append(f"{where}: scenarios import pretrain only")
        elif other[0] < own[0]:
            continue
        elif other[1] is None:
            if own[1] is not None:
                found.append(f"{where}: import the defining module, not the package root")
        elif own[1] is None:
            continue  # a package root re-exports its own modules
        elif other[1] > own[1]:
            found.append(f"{where}: upward import (layer {other[1]} > {own[1]})")
    return found


def python_files(package: str, root: Path = ROOT):
    folder = root / package
    return sorted(folder.rglob("*.py")) if folder.is_dir() else []


ORDERS = {package: documented_order(package) for package in PACKAGES}


@pytest.mark.parametrize("package", PACKAGES)
def test_every_module_is_ranked_and_every_entry_exists(package):
    names = {module_name(path) for path in python_files(package)}
    for name in names:
        if name == package:
            continue
        assert rank(name, ORDERS)[1] != -1, f"{name} is missing from the layer order"
    for entry in ORDERS[package]:
        full = f"{package}.{entry}"
        assert any(n == full or n.startswith(full + ".") for n in names), \
            f"layer order lists {entry!r}, which is not a module of {package}"


@pytest.mark.parametrize("package", PACKAGES)
def test_no_upward_or_forbidden_imports(package):
    found = []
    for path in python_files(package):
        found += violations_in(path, path.read_text(encoding="utf-8"), ORDERS)
    assert not found, "\n".join(found)


def test_checker_catches_violations(tmp_path):
    """The walker itself must flag the patterns it exists for, in-function imports included."""
    orders = {"pretrain": ["errors", "paulis", "engines", "models"],
              "bridge": ["ansatz", "compile", "plateau.probes", "plateau.report"],
              "recipes": ["scenarios", "pipeline", "cli"]}
    pkg, bridge, recipes = tmp_path / "pretrain", tmp_path / "bridge", tmp_path / "recipes"
    for folder in (pkg / "engines", bridge / "plateau", recipes / "scenarios"):
        folder.mkdir(parents=True)
    cases = {
        pkg / "paulis.py": ("from .models import VisibleGibbsModel\n", "upward"),
        pkg / "errors.py": ("import thermoseed.pretrain.paulis\n", "upward"),
        pkg / "engines" / "dense.py": ("def f():\n    from ..models import M\n", "upward"),
        pkg / "models.py": ("def f():\n    from thermoseed.bridge import seed\n", "upward"),
        bridge / "ansatz.py": ("def f():\n    from thermoseed.recipes.cli import main\n",
                               "upward"),
        bridge / "compile.py": ("from thermoseed.bridge import ansatz\n", "package root"),
        bridge / "plateau" / "probes.py": ("from .report import w\n", "upward"),
        recipes / "scenarios" / "magnet.py": ("from thermoseed.bridge.ansatz import A\n",
                                              "pretrain only"),
        recipes / "pipeline.py": ("def f():\n    from .cli import main\n", "upward"),
    }
    for path, (source, message) in cases.items():
        found = violations_in(path, source, orders, root=tmp_path)
        assert len(found) == 1 and message in found[0], (path, found)
    fine = {
        pkg / "models.py": "from .paulis import P\nfrom .engines import make_engine\n",
        pkg / "engines" / "dense.py": "from .base import GibbsEngine\nfrom ..paulis import x\n",
        bridge / "plateau" / "report.py": "from .probes import p\nfrom ..compile import c\n",
        bridge / "__init__.py": "from .plateau.report import w\n",
        recipes / "cli.py": "def f():\n    from thermoseed.recipes.pipeline import run\n"
                            "    from thermoseed.pretrain import M\n",
        recipes / "scenarios" / "magnet.py": "from thermoseed.pretrain.paulis import T\n"
                                             "from .checks import c\n",
    }
    for path, source in fine.items():
        assert violations_in(path, source, orders, root=tmp_path) == [], path


def test_checker_fails_on_an_injected_upward_import(tmp_path):
    """A copy of the real tree with one upward import added inside a function must fail."""
    import shutil

    for package in PACKAGES:
        shutil.copytree(ROOT / package, tmp_path / package)
    target = tmp_path / "pretrain" / "linalg.py"
    target.write_text(target.read_text() + "\n\ndef _bad():\n"
                      "    from thermoseed.bridge.compile import compile_latent\n")
    found = [v for package in PACKAGES for path in python_files(package, tmp_path)
             for v in violations_in(path, path.read_text(), ORDERS, root=tmp_path)]
    assert len(found) == 1 and "pretrain/linalg.py" in found[0]
