"""Spectral helpers used everywhere: Hermitian eigh, shifted log-sum-exp, Gibbs states
from spectra, entropies. One implementation of each; everything else calls these."""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.special

#: Eigen-weights below this fraction of the largest are dropped when forming a Gibbs state.
WEIGHT_CUTOFF = 1e-16
#: Eigenvalues below this are treated as zero in entropies (0 log 0 = 0).
ENTROPY_FLOOR = 1e-15
#: scipy LAPACK driver for dense Hermitian eigendecompositions; 'evr' measured fastest here
#: from 2^10 on (tests/benchmarks/bench_dense_engine.py prints the comparison).
EIGH_DRIVER = "evr"


def eigh(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (ascending) and eigenvectors of a Hermitian (or real symmetric) matrix."""
    return scipy.linalg.eigh(matrix, driver=EIGH_DRIVER, check_finite=False)


def log_sum_exp_neg(energies: np.ndarray) -> tuple[float, np.ndarray]:
    """``log Z = log sum_k exp(-E_k)`` (``scipy.special.logsumexp``, which shifts by the
    largest exponent, i.e. by ``min E``) and the weights ``p_k = exp(-E_k - log Z)``."""
    e = np.asarray(energies, dtype=float)
    log_z = float(scipy.special.logsumexp(-e))
    return log_z, np.exp(-e - log_z)


def entropy_of_spectrum(probs: np.ndarray) -> float:
    """Shannon/von Neumann entropy ``-sum p log p`` (nats) of a probability vector, by
    ``scipy.special.entr``; weights at or below ``ENTROPY_FLOOR`` (round-off of an eigensolver,
    possibly slightly negative, where ``entr`` would give -inf) count as zero."""
    p = np.asarray(probs, dtype=float)
    return float(scipy.special.entr(p[p > ENTROPY_FLOOR]).sum())


def von_neumann_entropy(rho: np.ndarray) -> float:
    """``S(rho) = -Tr rho log rho`` in nats."""
    return entropy_of_spectrum(np.linalg.eigvalsh(rho))
