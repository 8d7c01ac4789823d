"""Magnet-phase sorting: transverse-field Ising chain states labelled ordered / disordered.

Open chain of n qubits, ``H(g) = -J sum_i Z_i Z_{i+1} - g sum_i X_i`` (J > 0). Each sample draws
a field ``g`` (seeded) on one side of the transition ``g = J``, keeping out of a window
``|g/J - 1| < gap`` so the label is meaningful: ``label = 1`` (ordered) when ``g < J``,
``label = 0`` (disordered) when ``g > J`` (thermodynamic-limit rule, also used at small n).

States are exact ground states (``beta=None``) or Gibbs states ``exp(-beta H)/Z`` (density
matrices, ``beta`` in units of 1/J).

Ground-state degeneracy: on the ordered side the two lowest levels are split only by about
``J (g/J)^n``, one in each sector of the parity ``P = X^{(x)n}`` (which commutes with H). We
return the Z2-symmetric ground state, i.e. the lowest state of the even sector ``P = +1``,
obtained by diagonalising H in that sector, so the near-degenerate odd state can never be
mixed in by round-off. For g > 0 this is the unique ground state (H is stoquastic and
irreducible; Perron-Frobenius), with all amplitudes >= 0, which also fixes its global sign.
No symmetry-breaking field is added: deep in the ordered phase the state is cat-like,
``(|0..0> + |1..1>)/sqrt2``. Gibbs states need no choice: they mix both sectors thermally.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from thermoseed.pretrain.checks import (
    integer_in,
    inverse_temperature,
    qubit_count,
    real_number,
    seed_value,
)
from thermoseed.pretrain.engines import DenseEngine
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import stratified_split
from thermoseed.pretrain.linalg import eigh
from thermoseed.pretrain.paulis import TermSet, dense_hamiltonian, graph_terms
from thermoseed.recipes.scenarios.record import ScenarioRecord

#: Largest chain handled (dense 2^n x 2^n diagonalisation per sample).
MAX_QUBITS = 12


@dataclass(frozen=True, eq=False)
class MagnetPhaseData(ScenarioRecord):
    """A batch of transverse-field Ising states with phase labels.

    Attributes:
        n_qubits: chain length n.
        coupling: J (same for every sample).
        fields: (B,) transverse fields g.
        labels: (B,) int64, 1 = ordered (g < J), 0 = disordered (g > J).
        energies: (B,) ground energies E0(g).
        beta: inverse temperature of the Gibbs states, or None for ground states.
        states: (B, 2^n) complex ground states when ``beta is None``, else None.
        density: (B, 2^n, 2^n) Gibbs states when ``beta`` is given, else None.
    """

    n_qubits: int
    coupling: float
    fields: np.ndarray
    labels: np.ndarray
    energies: np.ndarray
    beta: float | None = None
    states: np.ndarray | None = None
    density: np.ndarray | None = None


    def subset(self, index: np.ndarray) -> MagnetPhaseData:
        """The samples at ``index`` (a new record; arrays are copied)."""
        idx = np.asarray(index, dtype=np.int64)
        return MagnetPhaseData(
            n_qubits=self.n_qubits,
            coupling=self.coupling,
            fields=self.fields[idx].copy(),
            labels=self.labels[idx].copy(),
            energies=self.energies[idx].copy(),
            beta=self.beta,
            states=None if self.states is None else self.states[idx].copy(),
            density=None if self.density is None else self.density[idx].copy(),
        )

    def arrays(self) -> dict[str, np.ndarray]:
        """The ``.npz`` payload: ``states`` or ``density``, ``labels``, plus parameters."""
        out: dict[str, np.ndarray] = {}
        if self.states is not None:
            out["states"] = self.states
        else:
            out["density"] = self.density
            out["beta"] = np.asarray(self.beta, dtype=float)
        out["labels"] = self.labels
        out["fields"] = self.fields
        out["energies"] = self.energies
        out["coupling"] = np.asarray(self.coupling, dtype=float)
        return out



def _check_coupling(coupling: float) -> float:
    if real_number(coupling, "coupling J") <= 0:
        raise ThermoseedError(
            f"coupling J = {coupling!r} must be positive (ferromagnetic chain); pass J > 0"
        )
    return float(coupling)


def tfim_terms(n_qubits: int) -> TermSet:
    """Term set ``[X_0 .. X_{n-1}, Z_0 Z_1 .. Z_{n-2} Z_{n-1}]`` of the open chain."""
    return graph_terms(_check_qubits(n_qubits), "line", fields="X", couplings=("ZZ",))


def tfim_coefficients(n_qubits: int, field: float, coupling: float = 1.0) -> np.ndarray:
    """Coefficients ``[-g] * n + [-J] * (n - 1)`` matching ``tfim_terms(n)``."""
    n = _check_qubits(n_qubits)
    g = real_number(field, "field g")
    return np.concatenate([np.full(n, -g), np.full(n - 1, -_check_coupling(coupling))])


def ground_state(n_qubits: int, field: float, coupling: float = 1.0) -> tuple[float, np.ndarray]:
    """Z2-symmetric ground state: lowest eigenpair of H in the even sector of ``X^{(x)n}``.

    Even basis ``|b>_+ = (|b> + |~b>)/sqrt2`` for the ``d/2`` indices b with wire 0 = 0
    (``~b`` flips every bit, index ``d-1-b``); there ``H_+ = H[:h,:h] + H[:h, ~b]``. Returns
    ``(E0, psi)`` with psi a real unit vector whose amplitudes sum to a positive number.
    """
    terms = tfim_terms(n_qubits)
    h = dense_hamiltonian(tfim_coefficients(n_qubits, field, coupling), terms)
    half = terms.dim // 2
    h_even = h[:half, :half] + h[:half, half:][:, ::-1]
    energies, vectors = eigh(h_even)
    u = vectors[:, 0]
    psi = np.concatenate([u, u[::-1]]) / np.sqrt(2.0)
    if psi.sum() < 0:
        psi = -psi
    return float(energies[0]), psi


def gibbs_state(n_qubits: int, field: float, beta: float, coupling: float = 1.0) -> np.ndarray:
    """``exp(-beta H(g)) / Z`` as a dense density matrix (dense engine, shifted spectrum)."""
    b = _check_beta(beta)
    terms = tfim_terms(n_qubits)
    theta = b * tfim_coefficients(n_qubits, field, coupling)
    return DenseEngine(terms).evaluate(theta, want_state=True).state


def _check_fields(field_range: tuple[float, float], gap: float) -> tuple[float, float, float]:
    try:
        lo, hi = (real_number(v, "field_range entry") for v in field_range)
    except (TypeError, ValueError) as err:
        raise ThermoseedError(f"field_range = {field_range!r} must be a pair (low, high)") from err
    gap = real_number(gap, "gap")
    if not 0 <= gap < 1:
        raise ThermoseedError(f"gap = {gap!r} must satisfy 0 <= gap < 1 (in units of J)")
    if not 0 <= lo < 1 - gap or hi <= 1 + gap:
        raise ThermoseedError(
            f"field_range = {field_range!r} (in units of J) must straddle the transition outside "
            f"the window |g/J - 1| < {gap}: need 0 <= low < {1 - gap:g} and high > {1 + gap:g}"
        )
    return lo, hi, float(gap)


def magnet_phase_data(
    n_qubits: int = 4,
    n_samples: int = 64,
    *,
    coupling: float = 1.0,
    field_range: tuple[float, float] = (0.2, 2.0),
    gap: float = 0.1,
    beta: float | None = None,
    seed: int = 0,
) -> MagnetPhaseData:
    """Seeded batch of Ising-chain states with ordered / disordered labels.

    Labels are exactly balanced: ``labels = permutation(arange(B) % 2)`` (counts differ by at
    most one). Then ``g/J ~ U[low, 1 - gap)`` for label 1 and ``U[1 + gap, high)`` for label 0
    (``field_range = (low, high)``, in units of J). Ground states by
    :func:`ground_state` (``beta=None``) or Gibbs states by :func:`gibbs_state`.
    """
    n = _check_qubits(n_qubits)
    integer_in(n_samples, "n_samples", 1)
    j = _check_coupling(coupling)
    lo, hi, gap = _check_fields(field_range, gap)
    beta = None if beta is None else _check_beta(beta)
    rng = np.random.default_rng(seed_value(seed))
    labels = rng.permutation(np.arange(n_samples) % 2).astype(np.int64)
    ordered = rng.uniform(lo, 1.0 - gap, size=n_samples)
    disordered = rng.uniform(1.0 + gap, hi, size=n_samples)
    fields = j * np.where(labels == 1, ordered, disordered)
    pairs = [ground_state(n, g, j) for g in fields]
    energies = np.array([e for e, _ in pairs])
    if beta is None:
        states = np.array([psi for _, psi in pairs], dtype=complex)
        return MagnetPhaseData(n, j, fields, labels, energies, None, states, None)
    density = np.array([gibbs_state(n, g, beta, j) for g in fields])
    return MagnetPhaseData(n, j, fields, labels, energies, float(beta), None, density)


def train_test_split(
    data: MagnetPhaseData, *, test_fraction: float = 0.25, seed: int = 0
) -> tuple[MagnetPhaseData, MagnetPhaseData]:
    """Seeded, label-stratified split into ``(train, test)``.

    ``thermoseed.pretrain.labelled.stratified_split`` on the labels.
    """
    train_idx, test_idx = stratified_split(data.labels, test_fraction, seed)
    return data.subset(train_idx), data.subset(test_idx)


def _check_qubits(n_qubits: int) -> int:
    return qubit_count(n_qubits, MAX_QUBITS)


def _check_beta(beta: float) -> float:
    return inverse_temperature(beta, " (use beta=None for exact ground states)")
