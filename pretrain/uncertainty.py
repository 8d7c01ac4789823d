"""Error bars on fitted coefficients from the noise in the data moments.

A fit solves ``g(theta, m) = m - mu(theta) + lam theta = 0`` with ``mu_j = <P_j>_sigma``.
Since ``d mu / d theta = -F`` with F the Hessian of log Z, the implicit function theorem gives
``d theta / d m = (F + lam I)^{-1}`` and, to first order in the noise (delta method),

    Cov(theta) ~= (F + lam I)^{-1} Cov(m) (F + lam I)^{-1}.

F is the Kubo-Mori (Bogoliubov) covariance of the terms under sigma,
``F_jk = int_0^1 Tr(sigma^s dP_j sigma^{1-s} dP_k) ds`` with ``dP = P - <P>``. In the eigenbasis
of H (energies E_a, weights ``p_a = e^{-E_a}/Z``, ``A_j = V^dag P_j V``):

    F_jk = sum_ab K_ab conj(A_j)_ab (A_k)_ab - mu_j mu_k,
    K_ab = (p_a - p_b) / (E_b - E_a) = max(p_a, p_b) (1 - e^{-|E_a - E_b|}) / |E_a - E_b|,

``K_aa = p_a`` (the divided difference of ``e^{-E}/Z``; Daleckii-Krein). That is exact on the
dense engine. Any other engine gets F from forward differences of its own moments,
``F[:, k] ~= -(mu(theta + h e_k) - mu(theta)) / h`` (len(theta) extra evaluations; with the
typicality engine the fixed random vectors make mu smooth in theta).
"""

from __future__ import annotations

import warnings

import numpy as np

from .errors import ConvergenceWarning
from .frechet import exp_divided_differences
from .paulis import TermSet

#: Forward-difference step for the Hessian (error O(h) relative, round-off ~1e-12/h).
HESSIAN_STEP = 1e-5
#: Bytes of the (terms x rows x d) block held at once by ``kubo_mori_hessian``.
BLOCK_BYTES = 1 << 28
#: Eigenvalues of F + lam I below this fraction of the largest count as zero (directions in
#: which the data do not pin the coefficients down).
SINGULAR_RTOL = 1e-10


def kubo_mori_hessian(energies: np.ndarray, vectors: np.ndarray, log_z: float,
                      moments: np.ndarray, terms: TermSet) -> np.ndarray:
    """Exact ``F = d^2 log Z / d theta^2`` from the eigendecomposition of H (formula above);
    about ``len(terms) * d^3`` flops, memory bounded by ``BLOCK_BYTES``."""
    d = terms.dim
    idx = np.arange(d)
    real = np.isrealobj(vectors) and terms.is_real
    dtype = float if real else complex
    v = vectors.astype(dtype, copy=False)
    # Kubo-Mori weights max(p_a, p_b) (1 - e^{-|E_a - E_b|}) / |E_a - E_b|: the divided
    # differences of exp at l = -E - log Z
    weights = exp_divided_differences(-np.asarray(energies, float) - log_z)
    m = len(terms)
    images = np.empty((m, d, d), dtype=dtype) if m * d * d * 16 <= 4 * BLOCK_BYTES else None
    rows = max(1, int(BLOCK_BYTES // (m * d * 16)))
    gram = np.zeros((m, m))

    def image(j: int) -> np.ndarray:  # P_j V, rows (P V)[c] = phase (-1)^{z.b} V[b], b = c^x
        for g in terms.groups:
            hit = np.flatnonzero(g.index == j)
            if hit.size:
                k = hit[0]
                phase = g.phase[k].real if real else g.phase[k]
                return phase * (g.signs[k][:, None] * v)[idx ^ g.x]
        raise AssertionError(j)

    if images is not None:
        for j in range(m):
            images[j] = image(j)
    for start in range(0, d, rows):
        sl = slice(start, min(start + rows, d))
        root = np.sqrt(weights[sl])
        block = np.empty((m, sl.stop - sl.start, d), dtype=dtype)
        for j in range(m):
            pv = images[j] if images is not None else image(j)
            block[j] = (v[:, sl].conj().T @ pv) * root
        flat = block.reshape(m, -1)
        gram += (flat.conj() @ flat.T).real
    return gram - np.outer(moments, moments)


def hessian_by_differences(engine, theta: np.ndarray, base_moments: np.ndarray | None = None,
                           step: float = HESSIAN_STEP) -> np.ndarray:
    """``F[:, k] = -(mu(theta + h e_k) - mu(theta)) / h`` from any engine, symmetrised."""
    theta = np.asarray(theta, dtype=float)
    mu0 = engine.evaluate(theta).moments if base_moments is None else base_moments
    f = np.empty((theta.size, theta.size))
    for k in range(theta.size):
        shifted = theta.copy()
        shifted[k] += step
        f[:, k] = -(engine.evaluate(shifted).moments - mu0) / step
    return 0.5 * (f + f.T)


def log_partition_hessian(engine, theta: np.ndarray, evaluation=None) -> np.ndarray:
    """F at theta: exact from eigenvectors when the engine gives them (dense), else by
    forward differences of the engine's moments."""
    ev = evaluation
    if (ev is None or ev.vectors is None) and not getattr(engine, "stochastic", False):
        ev = engine.evaluate(theta, want_state=True)
    if ev is not None and ev.vectors is not None and ev.energies is not None:
        return kubo_mori_hessian(ev.energies, ev.vectors, ev.log_z, ev.moments, engine.terms)
    return hessian_by_differences(engine, theta, None if ev is None else ev.moments)


def coefficient_covariance(hessian: np.ndarray, moment_covariance: np.ndarray,
                           l2: float = 0.0) -> np.ndarray:
    """``(F + lam I)^{-1} Cov(m) (F + lam I)^{-1}``; directions where ``F + lam I`` is
    singular are dropped (pseudo-inverse) with a warning, since the data fix no value there."""
    a = 0.5 * (hessian + hessian.T) + l2 * np.eye(len(hessian))
    vals, vecs = np.linalg.eigh(a)
    keep = vals > SINGULAR_RTOL * max(vals.max(), 0.0)
    if not keep.all():
        warnings.warn(
            f"{int((~keep).sum())} direction(s) of the coefficients are not determined by the "
            "data (Hessian of log Z singular there): their spread is unbounded and left out "
            "of the standard errors; add l2 > 0 or drop redundant terms",
            ConvergenceWarning, stacklevel=2)
    inv = (vecs[:, keep] / vals[keep]) @ vecs[:, keep].T
    cov = inv @ moment_covariance @ inv
    return 0.5 * (cov + cov.T)
