"""Neighbour warm start: the XXZ chain, its thermal states and ground energies.

Open chain of n qubits, ``H(Delta) = J sum_i (X_i X_{i+1} + Y_i Y_{i+1} + Delta Z_i Z_{i+1})``
with J > 0 (antiferromagnetic sign; ``J < 0`` is the same model at ``-Delta`` after rotating
every other spin by Z). A recipe pre-trains on ``exp(-beta H(Delta))/Z`` at one anisotropy and
warm-starts a variational eigensolver for ``H(Delta')`` at a nearby one; this module supplies
the terms, coefficients, thermal states and exact ground energies. Nothing here is random.

Phase label of an anisotropy (thermodynamic-limit phases for J > 0): 0 = ferromagnet
(``Delta <= -1``), 1 = critical XY phase (``-1 < Delta <= 1``, the Heisenberg point
included), 2 = Neel antiferromagnet (``Delta > 1``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from thermoseed.pretrain.checks import inverse_temperature, qubit_count, real_number
from thermoseed.pretrain.engines import DenseEngine
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.paulis import TermSet, dense_hamiltonian, graph_terms
from thermoseed.recipes.scenarios.record import ScenarioRecord

#: Largest chain handled (dense 2^n x 2^n diagonalisation).
MAX_QUBITS = 12


@dataclass(frozen=True, eq=False)
class XXZThermalData(ScenarioRecord):
    """Thermal states of the XXZ chain.

    Attributes:
        n_qubits: chain length n.
        coupling: J.
        deltas: (B,) anisotropies Delta.
        betas: (B,) inverse temperatures (units of 1/J).
        labels: (B,) int64 phase labels of each Delta (see :func:`xxz_phase`).
        density: (B, 2^n, 2^n) Gibbs states ``exp(-beta H(Delta)) / Z``.
    """

    n_qubits: int
    coupling: float
    deltas: np.ndarray
    betas: np.ndarray
    labels: np.ndarray
    density: np.ndarray


def _check_coupling(coupling: float) -> float:
    j = real_number(coupling, "coupling J")
    if j <= 0:
        raise ThermoseedError(
            f"coupling J = {coupling!r} must be > 0; for J < 0 use |J| with delta -> -delta"
        )
    return j


def xxz_terms(n_qubits: int) -> TermSet:
    """Term set ``[X_i X_{i+1}]_i + [Y_i Y_{i+1}]_i + [Z_i Z_{i+1}]_i`` on the open line."""
    return graph_terms(_check_qubits(n_qubits), "line", fields="", couplings=("XX", "YY", "ZZ"))


def xxz_coefficients(n_qubits: int, delta: float, J: float = 1.0) -> np.ndarray:  # noqa: N803
    """Coefficients ``[J] * (n-1) + [J] * (n-1) + [J * Delta] * (n-1)`` for ``xxz_terms(n)``."""
    bonds = _check_qubits(n_qubits) - 1
    j = _check_coupling(J)
    d = real_number(delta, "delta")
    return np.concatenate([np.full(2 * bonds, j), np.full(bonds, j * d)])


def xxz_hamiltonian(n_qubits: int, delta: float, J: float = 1.0) -> np.ndarray:  # noqa: N803
    """Dense real symmetric ``H(Delta)`` (2^n x 2^n)."""
    return dense_hamiltonian(xxz_coefficients(n_qubits, delta, J), xxz_terms(n_qubits))


def ground_energy(n_qubits: int, delta: float, J: float = 1.0) -> float:  # noqa: N803
    """Exact ground energy ``min eig H(Delta)`` by dense diagonalisation."""
    return float(np.linalg.eigvalsh(xxz_hamiltonian(n_qubits, delta, J))[0])


def xxz_phase(delta) -> np.ndarray:
    """Phase labels (int64): 0 if ``Delta <= -1``, 1 if ``-1 < Delta <= 1``, 2 if ``Delta > 1``."""
    d = np.asarray(delta, dtype=float)
    return (d > -1).astype(np.int64) + (d > 1).astype(np.int64)


def thermal_state(n_qubits: int, delta: float, beta: float, J: float = 1.0) -> np.ndarray:  # noqa: N803
    """``exp(-beta H(Delta)) / Z`` as one dense density matrix (dense engine: one eigh,
    spectrum shifted by its minimum)."""
    theta = _check_beta(beta) * xxz_coefficients(n_qubits, delta, J)
    return DenseEngine(xxz_terms(n_qubits)).evaluate(theta, want_state=True).state


def thermal_states(n_qubits: int, delta, beta, J: float = 1.0) -> XXZThermalData:  # noqa: N803
    """Thermal states for every pair of the broadcast ``delta`` and ``beta`` (scalars or 1-D
    arrays), as a record with ``density`` of shape (B, 2^n, 2^n)."""
    n = _check_qubits(n_qubits)
    j = _check_coupling(J)
    try:
        deltas, betas = (np.atleast_1d(a).astype(float) for a in np.broadcast_arrays(delta, beta))
    except (TypeError, ValueError) as err:
        raise ThermoseedError(
            f"delta {np.shape(delta)} and beta {np.shape(beta)} must be numbers or 1-D arrays "
            "of equal length (or one of them a scalar)"
        ) from err
    if deltas.ndim != 1:
        raise ThermoseedError(f"delta and beta must be scalars or 1-D arrays, got {deltas.shape}")
    density = np.array([thermal_state(n, d, b, j) for d, b in zip(deltas, betas, strict=True)])
    return XXZThermalData(n, j, deltas, betas, xxz_phase(deltas), density)


def _check_qubits(n_qubits: int) -> int:
    return qubit_count(n_qubits, MAX_QUBITS)


def _check_beta(beta: float) -> float:
    return inverse_temperature(beta, " (inverse temperature, units 1/J)")
