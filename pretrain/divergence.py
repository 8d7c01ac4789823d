"""Does the relative-entropy fit of rank-deficient data have a finite optimum? A certificate.

The fit minimises ``L(theta) = theta.m + log Z(theta) - S(rho)`` over the exponential family
``sigma(theta) = exp(-sum_j theta_j P_j) / Z``. Its gradient ``m - <P>_sigma`` vanishes only
where the moments of a (full-rank) Gibbs state equal the data's, and those moments fill the
interior of the convex set ``M = {(Tr(tau P_j))_j : tau a state}``; so a minimiser exists iff
``m`` is interior (Wainwright and Jordan, "Graphical Models, Exponential Families, and
Variational Inference", Sec. 3.4, from memory, in the classical setting; the quantum case
runs the same way with ``log Z`` strictly convex for linearly independent strings).

``m`` lies on the boundary of ``M`` iff some hyperplane supports ``M`` there: a direction
``c != 0`` with ``c.m = min_tau Tr(tau K) = lambda_min(K)``, ``K = sum_j c_j P_j``. Since
``Tr(rho (K - lambda_min)) = 0`` with ``K - lambda_min >= 0``, this says the data ``rho`` lie
in the ground space of K: ``K U = lambda U`` for a basis U of rho's range and
``lambda = lambda_min(K)``. Along ``theta + t c`` the loss then falls for every t (its
slope ``c.m - <K>_sigma`` is negative) towards an infimum reached only as ``t -> infinity``:
the coefficients diverge. A full-rank rho has no such direction (``Tr(rho (K - lambda_min))
> 0`` for every non-constant K), and with an L2 penalty the loss is coercive: both have
a finite optimum.

``ground_space_certificate`` finds such a direction from the fit itself. The directions with
``K U = lambda U`` form a linear space V (the null space of the real Gram matrix of
``(P_1 U, ..., P_k U, -U)``). V = {0} proves the optimum finite. Otherwise the fitted theta
(whose growing part runs along the divergent direction) is projected onto V, and the
projection is a certificate when its eigenvalue on U is the lowest of K up to
``GROUND_TOL`` of K's spectral width. The raw direction ``theta / |theta|`` (with
``lambda = c.m = Tr(rho K)``) is tested too, and alone when the Gram matrix would be too
large (``GRAM_MAX_ENTRIES``). A direction that fails proves nothing: the answer is then "no
divergence seen" (the fit's own gradient test stands).
"""

from __future__ import annotations

import warnings
from typing import NamedTuple

import numpy as np
import scipy.sparse.linalg

from .errors import DivergenceWarning
from .paulis import TermSet, apply_hamiltonian, dense_hamiltonian, sparse_hamiltonian

#: Eigenvalue of the (norm-scaled) Gram matrix below which a direction counts as keeping the
#: data's range invariant.
INVARIANT_TOL = 1e-9
#: ``(lambda - lambda_min(K)) / (lambda_max(K) - lambda_min(K))`` below which the data count
#: as lying in K's ground space.
GROUND_TOL = 1e-8
#: Largest number of complex entries in the stacked ``P_j U`` (k d r; 2^23 = 128 MiB).
GRAM_MAX_ENTRIES = 2**23
#: Largest dimension whose extreme eigenvalues come from a dense ``eigvalsh``.
DENSE_SPECTRUM_MAX_DIM = 1024


class DivergenceCertificate(NamedTuple):
    """Outcome of ``ground_space_certificate``.

    Attributes:
        diverges: True when the data provably lie in the ground space of ``direction``.
        finite: True when no direction keeps the data's range invariant (finite optimum).
        direction: unit coefficient vector c of K (None when there is none to test).
        ground_gap: ``(lambda - lambda_min(K)) / (lambda_max(K) - lambda_min(K))``.
    """

    diverges: bool
    finite: bool
    direction: np.ndarray | None
    ground_gap: float


def invariant_directions(terms: TermSet, support: np.ndarray,
                         null_space: np.ndarray | None = None) -> np.ndarray | None:
    """Basis (columns of length ``k + 1``: c then lambda) of ``{(c, lambda): K_c U = lambda U}``
    for an orthonormal ``support`` U (d x r); None when the Gram matrix exceeds the budget.

    The Gram matrix of ``A = (P_1 U, ..., P_k U, -U)`` is ``G = Re(A^dag A)``, and
    ``|A v|^2 = |(K_c - lambda) U|_F^2`` vanishes exactly on the space sought. Given the
    complement ``W`` (``null_space``, d x (d - r)) and ``d - r < r``, the same G comes
    cheaper from ``Tr(U^dag P_j P_l U) = d delta_jl - Tr(W^dag P_j P_l W)`` (distinct Pauli
    strings are trace-orthogonal): ``G = d I - Re(B^dag B)``, ``B = (P_1 W, ..., -W)``.
    """
    d, r = support.shape
    k = len(terms)
    use_null = null_space is not None and null_space.shape[1] < r
    block = null_space if use_null else support
    if k * d * block.shape[1] > GRAM_MAX_ENTRIES:
        return None
    columns = [apply_hamiltonian(np.eye(k)[j], terms, block).ravel() for j in range(k)]
    columns.append(-block.ravel())
    stacked = np.stack(columns, axis=1)
    gram = (stacked.conj().T @ stacked).real
    if use_null:
        gram = d * np.eye(k + 1) - gram
    values, vectors = np.linalg.eigh(gram / r)  # ||P_j U||_F^2 = ||U||_F^2 = r
    return vectors[:, values <= INVARIANT_TOL * max(1.0, float(values.max()))]


def extreme_eigenvalues(coef: np.ndarray, terms: TermSet) -> tuple[float, float]:
    """``(lambda_min, lambda_max)`` of ``sum_j c_j P_j`` (dense eigvalsh for small d, else
    Lanczos via ``scipy.sparse.linalg.eigsh`` on the sparse matrix)."""
    if terms.dim <= DENSE_SPECTRUM_MAX_DIM:
        values = np.linalg.eigvalsh(dense_hamiltonian(coef, terms))
        return float(values[0]), float(values[-1])
    matrix = sparse_hamiltonian(coef, terms)
    low = scipy.sparse.linalg.eigsh(matrix, k=1, which="SA", return_eigenvectors=False)
    high = scipy.sparse.linalg.eigsh(matrix, k=1, which="LA", return_eigenvectors=False)
    return float(low[0]), float(high[0])


def ground_space_certificate(terms: TermSet, support: np.ndarray, moments: np.ndarray,
                             theta: np.ndarray, null_space: np.ndarray | None = None
                             ) -> DivergenceCertificate:
    """Test whether data with range ``support`` (orthonormal columns; ``null_space`` its
    orthonormal complement, optional) and moments ``m`` lie in the ground space of a
    direction drawn from the fitted ``theta`` (module docstring)."""
    theta = np.asarray(theta, dtype=float)
    k = len(terms)
    basis = invariant_directions(terms, support, null_space)
    if basis is not None and basis.shape[1] == 0:
        return DivergenceCertificate(False, True, None, float("nan"))
    norm = float(np.linalg.norm(theta))
    if norm == 0.0:
        return DivergenceCertificate(False, False, None, float("nan"))
    candidates = [(theta / norm, float(theta @ moments) / norm)]
    if basis is not None:
        weights = np.linalg.lstsq(basis[:k], theta, rcond=None)[0]
        projected = basis @ weights
        size = float(np.linalg.norm(projected[:k]))
        if size > 1e-6 * norm:  # theta moves along an invariant direction: test that one
            candidates.insert(0, (projected[:k] / size, float(projected[k]) / size))
    best = DivergenceCertificate(False, False, None, float("inf"))
    for direction, level in candidates:
        low, high = extreme_eigenvalues(direction, terms)
        gap = (level - low) / (high - low) if high > low else float("inf")
        if gap < best.ground_gap:
            best = DivergenceCertificate(bool(gap <= GROUND_TOL), False, direction, float(gap))
    return best


def warn_divergence(theta: np.ndarray, n_iter: int, stop: str, *, from_states: bool) -> None:
    """One DivergenceWarning with the one fix (a penalty): more iterations do not help.
    ``stop`` is the optimiser's reason (``optim.FitResult.stop``); ``from_states`` says the
    data were states (certified) rather than noisy moments."""
    largest = float(np.abs(theta).max())
    why = ("the data lie in the ground space of the Hamiltonian the coefficients grow along, "
           "so the relative entropy only approaches its infimum as |theta| -> infinity"
           if from_states else "the noisy moments may lie where no Gibbs state of these terms "
           "reaches (too few shots for near-pure data)")
    where = "a callback's request" if stop == "callback" else stop
    stopped = ("the gradient fell below tol there only because the loss flattens"
               if stop == "tolerance" else
               f"more iterations (it stopped at {where}) only grow them further")
    warnings.warn(
        f"coefficients are diverging (largest |theta| = {largest:.3g} after {n_iter} "
        f"iterations): {why}, and {stopped}; set l2 > 0 (e.g. 1e-3) for a finite optimum",
        DivergenceWarning,
        stacklevel=3,
    )
