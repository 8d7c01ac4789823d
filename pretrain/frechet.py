"""Fréchet derivatives of matrix functions of Hermitian matrices (Daleckii-Krein formula).

For Hermitian ``X = V diag(l) V^dag`` and a smooth scalar function f, the derivative of the
matrix function in direction E is

    Df(X)[E] = V (Gamma o (V^dag E V)) V^dag,
    Gamma_ab = (f(l_a) - f(l_b)) / (l_a - l_b)   (l_a != l_b),   f'(l_a)   (l_a = l_b),

with ``o`` the elementwise (Hadamard) product (Daleckii & Krein, "Integration and
differentiation of functions of Hermitian operators", 1965; Bhatia, *Matrix Analysis*, 1997,
chapter V.3). Gamma is symmetric, so Df(X) is self-adjoint under ``<A, B> = Tr(A^dag B)``:
``Tr(A Df(X)[B]) = Tr(Df(X)[A] B)``. The gradients of the hidden-qubit models rely on that.

The divided differences are written so that nearly equal eigenvalues lose no accuracy:

- exp: with ``hi = max(l_a, l_b)``, ``delta = |l_a - l_b|``,
  ``Gamma_ab = e^hi (1 - e^{-delta}) / delta = -e^hi expm1(-delta) / delta`` (``e^hi`` at 0);
- log (``l > 0``): with ``lo = min(l_a, l_b)``,
  ``Gamma_ab = log1p(delta / lo) / delta`` (``1 / lo`` at 0).

Both quotients share the one rounded ``delta`` in numerator and denominator, so they stay
accurate to a few ulps however close the eigenvalues are (the naive quotient of differences
loses every digit when ``delta`` is near round-off).
"""

from __future__ import annotations

import numpy as np

from .errors import ThermoseedError
from .linalg import eigh


def _spectra(values) -> np.ndarray:
    v = np.asarray(values, dtype=float)
    if v.ndim < 1:
        raise ThermoseedError(f"eigenvalues must be an array (..., n), got shape {v.shape}")
    return v


def exp_divided_differences(values) -> np.ndarray:
    """``Gamma_ab = (e^{l_a} - e^{l_b}) / (l_a - l_b)`` (``e^{l_a}`` on ties), by the expm1
    form ``-e^hi expm1(-delta) / delta`` that stays exact for nearly equal eigenvalues.
    A stack ``(..., n)`` of spectra gives a stack ``(..., n, n)`` (in-place passes: this runs
    on every block of the block engine)."""
    v = _spectra(values)
    delta = v[..., :, None] - v[..., None, :]
    np.abs(delta, out=delta)
    num = np.negative(delta)
    np.expm1(num, out=num)
    np.negative(num, out=num)
    ratio = np.ones_like(delta)
    np.divide(num, delta, out=ratio, where=delta > 0)
    gamma = np.maximum(v[..., :, None], v[..., None, :])
    np.exp(gamma, out=gamma)
    gamma *= ratio
    return gamma


def log_divided_differences(values) -> np.ndarray:
    """``Gamma_ab = (log l_a - log l_b) / (l_a - l_b)`` (``1/l_a`` on ties) for ``l > 0``, by
    the log1p form ``log1p(delta / lo) / delta``."""
    v = _spectra(values)
    if np.any(v <= 0):
        raise ThermoseedError(
            f"the logarithm needs positive eigenvalues; the smallest is {v.min():.3g} "
            "(pass a positive definite matrix)"
        )
    lo = np.minimum(v[..., :, None], v[..., None, :])
    delta = np.abs(v[..., :, None] - v[..., None, :])
    gamma = 1.0 / lo
    np.divide(np.log1p(delta / lo), delta, out=gamma, where=delta > 0)
    return gamma


def daleckii_krein(vectors: np.ndarray, gamma: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """``V (Gamma o (V^dag E V)) V^dag`` for eigenvectors ``V`` (columns) and divided
    differences ``Gamma`` of the eigenvalues."""
    v = np.asarray(vectors)
    e = np.asarray(direction)
    if e.shape != (v.shape[0], v.shape[0]) or gamma.shape != (v.shape[1], v.shape[1]):
        raise ThermoseedError(
            f"direction {e.shape}, eigenvectors {v.shape} and divided differences "
            f"{gamma.shape} do not fit together; give square matrices of one size"
        )
    inner = v.conj().T @ e @ v
    return v @ (gamma * inner) @ v.conj().T


def _hermitian(matrix, what: str) -> np.ndarray:
    a = np.asarray(matrix)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ThermoseedError(f"{what} must be a square matrix, got shape {a.shape}")
    scale = max(1.0, float(np.abs(a).max(initial=0.0)))
    if np.abs(a - a.conj().T).max(initial=0.0) > 1e-10 * scale:
        raise ThermoseedError(f"{what} is not Hermitian; pass (X + X^dag) / 2")
    return a


def frechet_exp(matrix: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """``D exp(X)[E]`` for Hermitian X by one ``eigh`` and the Daleckii-Krein formula."""
    x = _hermitian(matrix, "X")
    vals, vecs = eigh(x)
    return daleckii_krein(vecs, exp_divided_differences(vals), np.asarray(direction))


def frechet_log(matrix: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """``D log(X)[E]`` for Hermitian positive definite X (Daleckii-Krein formula)."""
    x = _hermitian(matrix, "X")
    vals, vecs = eigh(x)
    return daleckii_krein(vecs, log_divided_differences(vals), np.asarray(direction))
