"""Gibbs engines behind one small interface (``GibbsEngine``).

``dense`` diagonalises H (exact, n <= 14); ``typicality`` estimates from random vectors
(n up to ~22, with statistical error bars). ``auto`` picks by size: dense up to
``AUTO_DENSE_MAX_QUBITS`` qubits, typicality above (``choose_engine``).
"""

from __future__ import annotations

from ..errors import ThermoseedError
from ..paulis import TermSet
from .base import GibbsEngine, GibbsEvaluation
from .dense import DenseEngine
from .typicality import TypicalityEngine, TypicalityEvaluation

ENGINES = {"dense": DenseEngine, "typicality": TypicalityEngine}
#: Largest qubit count ``auto`` gives to the dense engine. Typicality is faster from about
#: n = 10 (tests/benchmarks/bench_typicality.py prints the crossover), but its moments carry
#: a statistical error (~5% relative at n = 12 with 8 vectors, halving every 2 qubits) while
#: dense is exact and still affordable at n = 12 (seconds per evaluation); from n = 13 on a
#: dense evaluation costs minutes and typicality's error is down to a few percent.
AUTO_DENSE_MAX_QUBITS = 12


def choose_engine(name: str, n_qubits: int) -> str:
    """Resolve ``"auto"`` to ``"dense"`` (n <= AUTO_DENSE_MAX_QUBITS) or ``"typicality"``."""
    if name == "auto":
        return "dense" if n_qubits <= AUTO_DENSE_MAX_QUBITS else "typicality"
    if name not in ENGINES:
        raise ThermoseedError(
            f"unknown engine {name!r}; choose one of {sorted(ENGINES) + ['auto']}")
    return name


def make_engine(name: str, terms: TermSet, **options) -> GibbsEngine:
    """Build the engine called ``name`` (or ``"auto"``) for ``terms``; ``options`` go to the
    engine's constructor (e.g. ``vectors=16, seed=1`` for typicality)."""
    cls = ENGINES[choose_engine(name, terms.n_qubits)]
    try:
        return cls(terms, **options)
    except TypeError as err:
        raise ThermoseedError(f"engine {name!r} does not take options {sorted(options)}: "
                              f"{err}") from err


__all__ = ["AUTO_DENSE_MAX_QUBITS", "ENGINES", "DenseEngine", "GibbsEngine", "GibbsEvaluation",
           "TypicalityEngine", "TypicalityEvaluation", "choose_engine", "make_engine"]
