"""The interface every Gibbs engine supplies: for a coefficient vector theta, the log
partition function, the model moments ``<P_j>_sigma`` and, on request, sigma itself."""

from __future__ import annotations

from abc import ABC, abstractmethod
from typing import NamedTuple

import numpy as np

from ..paulis import TermSet


class GibbsEvaluation(NamedTuple):
    """One evaluation of ``sigma(theta) = exp(-H(theta)) / Z``.

    Attributes:
        log_z: ``log Z(theta)``.
        moments: ``<P_j>_sigma`` for every term.
        energies: eigenvalues of H (ascending), or None when the engine does not compute them.
        state: the density matrix sigma, or None when not requested.
        vectors: eigenvectors of H as columns (order of ``energies``) when the state was
            requested and the engine computes them, else None.
    """

    log_z: float
    moments: np.ndarray
    energies: np.ndarray | None
    state: np.ndarray | None
    vectors: np.ndarray | None = None


class GibbsEngine(ABC):
    """Computes Gibbs-state quantities for a fixed term set; never sees a model."""

    #: Largest qubit count the engine handles in reasonable memory.
    max_qubits: int = 14

    def __init__(self, terms: TermSet):
        self.terms = terms

    @abstractmethod
    def evaluate(self, theta: np.ndarray, *, want_state: bool = False) -> GibbsEvaluation:
        """Return log Z, moments and (optionally) sigma for coefficients ``theta``."""
