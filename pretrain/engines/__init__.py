"""Gibbs engines behind one small interface (``GibbsEngine``)."""

from __future__ import annotations

from ..errors import ThermoseedError
from ..paulis import TermSet
from .base import GibbsEngine, GibbsEvaluation
from .dense import DenseEngine

ENGINES = {"dense": DenseEngine}


def make_engine(name: str, terms: TermSet) -> GibbsEngine:
    """Build the engine called ``name`` for ``terms``."""
    if name not in ENGINES:
        raise ThermoseedError(f"unknown engine {name!r}; choose one of {sorted(ENGINES)}")
    return ENGINES[name](terms)


__all__ = ["ENGINES", "DenseEngine", "GibbsEngine", "GibbsEvaluation", "make_engine"]
