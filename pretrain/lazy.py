"""Package roots that import their public names on first use (PEP 562 module ``__getattr__``).

A root lists ``{module: (names...)}``; ``from thermoseed.pretrain import VisibleGibbsModel``
then imports ``thermoseed.pretrain.models`` at that moment, and ``import thermoseed.pretrain``
alone imports nothing else. Used by the three package roots.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping, Sequence


def lazy_exports(package: str, exports: Mapping[str, Sequence[str]]
                 ) -> tuple[Callable, Callable, list[str]]:
    """``(__getattr__, __dir__, __all__)`` for ``package`` from ``{module: names}``."""
    where = {name: module for module, names in exports.items() for name in names}

    def __getattr__(name: str):
        if name not in where:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        return getattr(importlib.import_module(f"{package}.{where[name]}"), name)

    def __dir__() -> list[str]:
        return sorted(where)

    return __getattr__, __dir__, sorted(where)
