"""Distances between density matrices and fit diagnostics (natural log throughout).

PennyLane's ``qml.math`` has relative entropy, fidelity and trace distance too; these stay
here because ``pretrain`` depends on numpy and scipy only, and because ``relative_entropy``
returns ``inf`` when supp rho is not inside supp sigma instead of a large finite number.
The tests check all three against ``qml.math`` and QuTiP.
"""

from __future__ import annotations

import numpy as np

from .linalg import ENTROPY_FLOOR, entropy_of_spectrum


def relative_entropy(rho: np.ndarray, sigma: np.ndarray) -> float:
    """``S(rho||sigma) = Tr rho (log rho - log sigma)`` in nats; ``inf`` when supp rho is not
    inside supp sigma."""
    r_vals = np.linalg.eigvalsh(rho)
    s_vals, s_vecs = np.linalg.eigh(sigma)
    overlap = np.einsum("ai,ab,bi->i", s_vecs.conj(), rho, s_vecs).real
    null = s_vals <= ENTROPY_FLOOR
    if np.any(overlap[null] > 1e3 * ENTROPY_FLOOR):
        return float("inf")
    cross = float(overlap[~null] @ np.log(s_vals[~null]))
    return -entropy_of_spectrum(r_vals) - cross


def _psd_sqrt(a: np.ndarray) -> np.ndarray:
    vals, vecs = np.linalg.eigh(a)
    return (vecs * np.sqrt(np.clip(vals, 0.0, None))) @ vecs.conj().T


def fidelity(rho: np.ndarray, sigma: np.ndarray) -> float:
    """Uhlmann fidelity ``F = (Tr sqrt(sqrt(rho) sigma sqrt(rho)))^2`` (squared convention)."""
    root = _psd_sqrt(rho)
    inner = root @ sigma @ root
    vals = np.linalg.eigvalsh(0.5 * (inner + inner.conj().T))
    return float(np.clip(np.sqrt(np.clip(vals, 0.0, None)).sum() ** 2, 0.0, 1.0))


def trace_distance(rho: np.ndarray, sigma: np.ndarray) -> float:
    """``T = (1/2) ||rho - sigma||_1``."""
    diff = rho - sigma
    return 0.5 * float(np.abs(np.linalg.eigvalsh(0.5 * (diff + diff.conj().T))).sum())


def moment_residuals(model) -> np.ndarray:
    """``m_j - <P_j>_sigma`` for a fitted model: zero at the unpenalised optimum."""
    return model.target_moments_ - model.moments()

