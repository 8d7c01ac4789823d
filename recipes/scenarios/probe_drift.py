"""Probe-drift watch: noisy GHZ-like probe states with a drifting phase, labelled by drift.

Ideal probe on n qubits: ``|GHZ_phi> = (|0..0> + e^{i phi} |1..1>) / sqrt2``. Noise, on every
qubit, by numpy Kraus operators:

- dephasing with probability p: ``K = {sqrt(1-p) I, sqrt(p) Z}``, i.e.
  ``rho -> (1-p) rho + p Z rho Z``;
- depolarising with probability q (PennyLane's ``DepolarizingChannel`` convention):
  ``K = {sqrt(1-q) I, sqrt(q/3) X, sqrt(q/3) Y, sqrt(q/3) Z}``, which shrinks the qubit's
  Bloch vector by ``1 - 4q/3`` (q = 3/4 fully depolarises).

``rho(phi, p, q) = Dep_q^{(x)n} Deph_p^{(x)n} (|GHZ_phi><GHZ_phi|)``; both are Pauli channels,
so they commute and the order does not matter. Phases are wrapped to ``[-pi, pi)`` and
``label = 1`` when ``|phi| > tolerance`` (drift beyond tolerance), else 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from thermoseed.pretrain.checks import integer_in, real_number
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.scenarios.record import ScenarioRecord

#: Largest probe handled (dense 2^n x 2^n density matrices per sample).
MAX_QUBITS = 10

_I2 = np.eye(2, dtype=complex)
_X2 = np.array([[0, 1], [1, 0]], dtype=complex)
_Y2 = np.array([[0, -1j], [1j, 0]], dtype=complex)
_Z2 = np.array([[1, 0], [0, -1]], dtype=complex)


@dataclass(frozen=True, eq=False)
class ProbeDriftData(ScenarioRecord):
    """A batch of noisy probe density matrices with drift labels.

    Attributes:
        n_qubits: probe size n.
        tolerance: largest tolerated ``|phi|`` (radians).
        phases: (B,) phases phi, wrapped to ``[-pi, pi)``.
        dephasing: (B,) dephasing probabilities p per qubit.
        depolarising: (B,) depolarising probabilities q per qubit.
        labels: (B,) int64, 1 when ``|phi| > tolerance``, else 0.
        density: (B, 2^n, 2^n) complex density matrices.
    """

    n_qubits: int
    tolerance: float
    phases: np.ndarray
    dephasing: np.ndarray
    depolarising: np.ndarray
    labels: np.ndarray
    density: np.ndarray


# ---------------------------------------------------------------- checks


def _check_probability(p: float, what: str) -> float:
    value = real_number(p, what)
    if not 0 <= value <= 1:
        raise ThermoseedError(f"{what} = {p!r} is not a probability; use a value in [0, 1]")
    return value


def _probability_range(spec, what: str) -> tuple[float, float]:
    """A fixed probability ``p`` or a range ``(low, high)``, as ``(low, high)``."""
    if np.ndim(spec) == 0:
        p = _check_probability(spec, what)
        return p, p
    if np.shape(spec) != (2,):
        raise ThermoseedError(f"{what} = {spec!r} must be a probability or a pair (low, high)")
    lo, hi = (_check_probability(v, what) for v in spec)
    if lo > hi:
        raise ThermoseedError(f"{what} = {spec!r} has low > high; give (low, high)")
    return lo, hi


def _per_sample(values, count: int, what: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as err:
        raise ThermoseedError(f"{what} = {values!r} must be numbers in [0, 1]") from err
    if arr.ndim == 0:
        arr = np.full(count, float(arr))
    if arr.shape != (count,):
        raise ThermoseedError(f"{what} has shape {arr.shape}; give a scalar or ({count},) values")
    for v in arr:
        _check_probability(v, what)
    return arr.copy()


# ---------------------------------------------------------------- states and channels


def wrap_phase(phases) -> np.ndarray:
    """Phases mapped to ``[-pi, pi)``: ``(phi + pi) mod 2 pi - pi``."""
    return np.mod(np.asarray(phases, dtype=float) + np.pi, 2 * np.pi) - np.pi


def ghz_state(n_qubits: int, phase: float) -> np.ndarray:
    """``(|0..0> + e^{i phi} |1..1>) / sqrt2`` as a (2^n,) complex vector."""
    n = integer_in(n_qubits, "n_qubits", 2, MAX_QUBITS)
    psi = np.zeros(2**n, dtype=complex)
    psi[0] = 1.0
    psi[-1] = np.exp(1j * real_number(phase, "phase"))
    return psi / np.sqrt(2.0)


def dephasing_kraus(p: float) -> np.ndarray:
    """Kraus operators ``[sqrt(1-p) I, sqrt(p) Z]``, shape (2, 2, 2)."""
    p = _check_probability(p, "dephasing probability p")
    return np.array([np.sqrt(1 - p) * _I2, np.sqrt(p) * _Z2])


def depolarising_kraus(q: float) -> np.ndarray:
    """Kraus operators ``[sqrt(1-q) I, sqrt(q/3) X, sqrt(q/3) Y, sqrt(q/3) Z]``, (4, 2, 2)."""
    q = _check_probability(q, "depolarising probability q")
    return np.array([np.sqrt(1 - q) * _I2] + [np.sqrt(q / 3) * m for m in (_X2, _Y2, _Z2)])


def apply_channel(rho: np.ndarray, kraus: np.ndarray, wire: int) -> np.ndarray:
    """``sum_k K_k rho K_k^dag`` with the one-qubit Kraus operators acting on ``wire``
    (wire 0 = most significant bit). Returns a new array."""
    r = np.asarray(rho)
    d = r.shape[0] if r.ndim == 2 else 0
    n = int(round(np.log2(d))) if d > 1 else 0
    if r.shape != (d, d) or n < 1 or 2**n != d:
        raise ThermoseedError(f"rho has shape {r.shape}; expected a (2^n, 2^n) density matrix")
    k = np.asarray(kraus)
    if k.ndim != 3 or k.shape[1:] != (2, 2):
        raise ThermoseedError(f"kraus has shape {k.shape}; expected (K, 2, 2) one-qubit operators")
    wire = integer_in(wire, "wire", 0, n - 1)
    left, right = 2**wire, 2 ** (n - wire - 1)
    t = r.reshape(left, 2, right, left, 2, right)
    out = np.einsum("kij,ajbcmd,klm->aibcld", k, t, k.conj())
    return out.reshape(d, d)


def noisy_probe(n_qubits: int, phase: float, dephasing: float, depolarising: float) -> np.ndarray:
    """``Dep_q^{(x)n} Deph_p^{(x)n} (|GHZ_phi><GHZ_phi|)`` as a (2^n, 2^n) density matrix."""
    psi = ghz_state(n_qubits, phase)
    rho = np.outer(psi, psi.conj())
    for kraus in (dephasing_kraus(dephasing), depolarising_kraus(depolarising)):
        for wire in range(n_qubits):
            rho = apply_channel(rho, kraus, wire)
    return rho


def probe_states(
    n_qubits: int,
    phases,
    *,
    dephasing=0.0,
    depolarising=0.0,
    tolerance: float = 0.3,
) -> ProbeDriftData:
    """Noisy probes for given phases (deterministic; no randomness).

    ``dephasing`` and ``depolarising`` are one probability for all samples or one per phase.
    Phases are wrapped to ``[-pi, pi)``; ``label = 1`` when ``|phi| > tolerance``.
    """
    n = integer_in(n_qubits, "n_qubits", 2, MAX_QUBITS)
    phi = wrap_phase(np.atleast_1d(np.asarray(phases, dtype=float)))
    if phi.ndim != 1 or phi.size == 0 or not np.all(np.isfinite(phi)):
        raise ThermoseedError(f"phases must be a non-empty 1-D array of finite numbers, got "
                              f"shape {np.shape(phases)}")
    tol = real_number(tolerance, "tolerance")
    if not 0 < tol < np.pi:
        raise ThermoseedError(f"tolerance = {tolerance!r} must lie in (0, pi) radians")
    p = _per_sample(dephasing, phi.size, "dephasing")
    q = _per_sample(depolarising, phi.size, "depolarising")
    density = np.array([noisy_probe(n, a, b, c) for a, b, c in zip(phi, p, q, strict=True)])
    labels = (np.abs(phi) > tol).astype(np.int64)
    return ProbeDriftData(n, tol, phi, p, q, labels, density)


# ---------------------------------------------------------------- seeded generators


def drift_walk(
    n_steps: int, *, step: float = 0.05, start: float = 0.0, seed: int = 0
) -> np.ndarray:
    """A drifting phase over time: ``phi_t = wrap(start + sum_{s<=t} step * xi_s)``,
    ``xi_s ~ N(0, 1)`` (seeded); shape (n_steps,)."""
    steps = integer_in(n_steps, "n_steps", 1)
    sigma = real_number(step, "step")
    if sigma < 0:
        raise ThermoseedError(f"step = {step!r} must be >= 0 (standard deviation per step)")
    rng = np.random.default_rng(integer_in(seed, "seed", 0))
    return wrap_phase(real_number(start, "start") + np.cumsum(sigma * rng.standard_normal(steps)))


def probe_drift_data(
    n_qubits: int = 3,
    n_samples: int = 64,
    *,
    tolerance: float = 0.3,
    max_phase: float = 1.0,
    margin: float = 0.0,
    dephasing=(0.0, 0.1),
    depolarising=(0.0, 0.05),
    seed: int = 0,
) -> ProbeDriftData:
    """Seeded batch of noisy probes with balanced drift labels.

    ``labels = permutation(arange(B) % 2)`` (counts differ by at most one); then
    ``|phi| ~ U[0, tolerance - margin]`` for label 0 and ``U[tolerance + margin, max_phase]``
    for label 1, with a random sign. ``p ~ U[dephasing]``, ``q ~ U[depolarising]`` per sample
    (a single number fixes it).
    """
    n = integer_in(n_qubits, "n_qubits", 2, MAX_QUBITS)
    count = integer_in(n_samples, "n_samples", 1)
    tol, top, gap = (real_number(tolerance, "tolerance"), real_number(max_phase, "max_phase"),
                     real_number(margin, "margin"))
    if gap < 0 or not 0 < tol - gap or not tol + gap < top <= np.pi:
        raise ThermoseedError(
            f"need margin >= 0 and 0 < tolerance - margin < tolerance + margin < max_phase <= pi;"
            f" got tolerance={tolerance!r}, margin={margin!r}, max_phase={max_phase!r}"
        )
    p_lo, p_hi = _probability_range(dephasing, "dephasing")
    q_lo, q_hi = _probability_range(depolarising, "depolarising")
    rng = np.random.default_rng(integer_in(seed, "seed", 0))
    labels = rng.permutation(np.arange(count) % 2).astype(np.int64)
    inside = rng.uniform(0.0, tol - gap, size=count)
    beyond = rng.uniform(tol + gap, top, size=count)
    sign = rng.choice([-1.0, 1.0], size=count)
    phases = sign * np.where(labels == 1, beyond, inside)
    p = rng.uniform(p_lo, p_hi, size=count)
    q = rng.uniform(q_lo, q_hi, size=count)
    return probe_states(n, phases, dephasing=p, depolarising=q, tolerance=tol)
