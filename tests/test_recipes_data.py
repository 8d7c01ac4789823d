"""Data generators of the three demo scenarios (recipes/): physics checks, schema, seeding.

Reference Hamiltonians here are built from hand-written 2x2 Pauli matrices and Kronecker
products (wire 0 = leftmost factor), never through pretrain.paulis.
"""

from __future__ import annotations

from functools import reduce

import numpy as np
import pennylane as qml
import pytest
import scipy.linalg
from numerics import PAULI_2x2, kron_pauli

from thermoseed.pretrain.data import check_density_matrix, load_training_data
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.scenarios import magnet_phase, neighbour_xxz, probe_drift


def on_wires(n: int, letters: dict[int, str]) -> np.ndarray:
    return kron_pauli("".join(letters.get(q, "I") for q in range(n)))


def tfim_reference(n: int, g: float, j: float = 1.0) -> np.ndarray:
    """H = -J sum Z_i Z_{i+1} - g sum X_i, open chain, by Kronecker products."""
    h = sum(-j * on_wires(n, {i: "Z", i + 1: "Z"}) for i in range(n - 1))
    return h + sum(-g * on_wires(n, {i: "X"}) for i in range(n))


def xxz_reference(n: int, delta: float, j: float = 1.0) -> np.ndarray:
    """H = J sum (XX + YY + Delta ZZ), open chain, by Kronecker products."""
    return sum(
        j * (on_wires(n, {i: "X", i + 1: "X"}) + on_wires(n, {i: "Y", i + 1: "Y"})
             + delta * on_wires(n, {i: "Z", i + 1: "Z"}))
        for i in range(n - 1)
    )


def tfim_free_fermion_levels(n: int, g: float, j: float = 1.0) -> np.ndarray:
    """Single-particle energies L_k = sqrt(eig((A-B)(A+B))), matrices of the free-fermion
    solution (Lieb, Schultz & Mattis 1961)."""
    a = np.zeros((n, n))
    b = np.zeros((n, n))
    for i in range(n):
        a[i, i] = 2 * g
        if i + 1 < n:
            a[i, i + 1] = a[i + 1, i] = -j
            b[i, i + 1], b[i + 1, i] = -j, j
    return np.sqrt(np.clip(np.linalg.eigvals((a - b) @ (a + b)).real, 0.0, None))


def assert_valid_densities(stack: np.ndarray) -> None:
    for rho in stack:
        check_density_matrix(rho)  # Hermitian, PSD, unit trace (raises otherwise)


def assert_balanced(labels: np.ndarray) -> None:
    # Rule stated in the generators: labels = permutation(arange(B) % 2), so the class counts
    # differ by at most one.
    counts = np.bincount(labels, minlength=2)
    assert len(counts) == 2 and abs(counts[1] - counts[0]) <= 1


# ---------------------------------------------------------------- magnet-phase sorting


@pytest.mark.parametrize("n", [4, 5, 6])
@pytest.mark.parametrize("g", [0.3, 1.0, 1.7])
def test_tfim_ground_energy_matches_free_fermions(n, g):
    # Source: transverse-field Ising chain with open ends (Lieb, Schultz &
    # Mattis 1961; Pfeuty 1970): E0 = -sum_k L_k / 2.
    e0, psi = magnet_phase.ground_state(n, g, 1.0)
    expected = -tfim_free_fermion_levels(n, g).sum() / 2
    assert e0 == pytest.approx(expected, abs=1e-10)
    h = tfim_reference(n, g)
    assert np.linalg.eigvalsh(h)[0] == pytest.approx(e0, abs=1e-10)  # the true ground level
    assert np.linalg.norm(psi) == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(h @ psi, e0 * psi, atol=1e-10)  # H psi = E0 psi


def test_tfim_terms_and_coefficients_build_the_reference_hamiltonian():
    from thermoseed.pretrain.paulis import dense_hamiltonian

    n, g, j = 4, 0.7, 1.3
    h = dense_hamiltonian(magnet_phase.tfim_coefficients(n, g, j), magnet_phase.tfim_terms(n))
    np.testing.assert_allclose(h, tfim_reference(n, g, j), atol=1e-13)


def test_tfim_ground_state_is_z2_symmetric_even_deep_in_the_ordered_phase():
    # At g = 0.05, n = 6 the two lowest levels (one per sector of X^n) are ~3e-8 apart.
    n = 6
    _, psi = magnet_phase.ground_state(n, 0.05)
    parity = kron_pauli("X" * n)
    assert np.vdot(psi, parity @ psi).real == pytest.approx(1.0, abs=1e-12)
    assert np.all(psi >= -1e-12) and psi.sum() > 0  # Perron-Frobenius sign convention
    cat = np.zeros(2**n)
    cat[[0, -1]] = 1 / np.sqrt(2)
    assert abs(np.vdot(cat, psi)) ** 2 > 0.99


def test_magnet_phase_data_states_labels_and_fields():
    data = magnet_phase.magnet_phase_data(4, 40, coupling=1.5, seed=3)
    assert data.states.shape == (40, 16) and data.density is None
    assert data.labels.dtype == np.int64
    ratio = data.fields / data.coupling
    assert np.all((ratio >= 0.2) & (ratio <= 2.0)) and np.all(np.abs(ratio - 1) >= 0.1)
    np.testing.assert_array_equal(data.labels, (data.fields < data.coupling).astype(np.int64))
    assert_balanced(data.labels)
    np.testing.assert_allclose(np.linalg.norm(data.states, axis=1), 1.0, atol=1e-12)
    for g, e0, psi in zip(data.fields[:6], data.energies[:6], data.states[:6], strict=True):
        h = tfim_reference(4, g, 1.5)
        np.testing.assert_allclose(h @ psi, e0 * psi, atol=1e-10)


@pytest.mark.parametrize("count", [2, 7, 50])
def test_magnet_labels_balanced(count):
    assert_balanced(magnet_phase.magnet_phase_data(3, count, seed=count).labels)


def test_magnet_gibbs_states_match_expm_and_free_fermion_energy():
    n, beta = 5, 2.0
    data = magnet_phase.magnet_phase_data(n, 6, beta=beta, seed=1)
    assert data.states is None and data.density.shape == (6, 32, 32)
    assert_valid_densities(data.density)
    for g, rho in zip(data.fields, data.density, strict=True):
        h = tfim_reference(n, g)
        ref = scipy.linalg.expm(-beta * h)
        np.testing.assert_allclose(rho, ref / np.trace(ref), atol=1e-12)
        # Source: free-fermion solution of the open TFIM (Pfeuty 1970):
        # U = -sum_k (L_k/2) tanh(beta L_k/2).
        levels = tfim_free_fermion_levels(n, g)
        u = -(levels / 2 * np.tanh(beta * levels / 2)).sum()
        assert np.trace(rho @ h).real == pytest.approx(u, abs=1e-10)


def test_magnet_seeding():
    a = magnet_phase.magnet_phase_data(4, 20, seed=5)
    b = magnet_phase.magnet_phase_data(4, 20, seed=5)
    c = magnet_phase.magnet_phase_data(4, 20, seed=6)
    for key, value in a.arrays().items():
        np.testing.assert_array_equal(value, b.arrays()[key])
    assert not np.array_equal(a.fields, c.fields)
    assert not np.array_equal(a.states, c.states)


def test_train_test_split_is_seeded_stratified_and_disjoint():
    data = magnet_phase.magnet_phase_data(3, 40, seed=2)
    train, test = magnet_phase.train_test_split(data, test_fraction=0.25, seed=9)
    assert len(train) == 30 and len(test) == 10
    assert np.bincount(test.labels).tolist() == [5, 5]
    joined = np.sort(np.concatenate([train.fields, test.fields]))
    np.testing.assert_array_equal(joined, np.sort(data.fields))
    assert not set(train.fields) & set(test.fields)
    again = magnet_phase.train_test_split(data, test_fraction=0.25, seed=9)
    np.testing.assert_array_equal(again[1].fields, test.fields)
    other = magnet_phase.train_test_split(data, test_fraction=0.25, seed=10)
    assert not np.array_equal(other[1].fields, test.fields)
    for part in (train, test):  # states still belong to their fields
        for g, psi in zip(part.fields[:3], part.states[:3], strict=True):
            np.testing.assert_allclose(psi, magnet_phase.ground_state(3, g)[1], atol=1e-12)


@pytest.mark.parametrize("beta", [None, 3.0])
def test_magnet_npz_round_trip(tmp_path, beta):
    data = magnet_phase.magnet_phase_data(3, 8, beta=beta, seed=4)
    path = data.save_npz(tmp_path / "magnet.npz")
    loaded = load_training_data(path)
    np.testing.assert_array_equal(loaded.labels, data.labels)
    if beta is None:
        rho = np.mean([np.outer(s, s.conj()) for s in data.states], axis=0)
    else:
        rho = data.density.mean(axis=0)
    np.testing.assert_allclose(loaded.rho, rho, atol=1e-14)
    with np.load(path, allow_pickle=False) as raw:
        np.testing.assert_array_equal(raw["fields"], data.fields)


@pytest.mark.parametrize(
    "kwargs",
    [
        {"n_qubits": 1},
        {"n_samples": 0},
        {"coupling": -1.0},
        {"field_range": (0.95, 2.0)},
        {"field_range": (0.2, 1.05)},
        {"gap": -0.1},
        {"beta": -1.0},
        {"seed": -3},
        {"seed": 1.5},
    ],
)
def test_magnet_bad_arguments(kwargs):
    with pytest.raises(ThermoseedError):
        magnet_phase.magnet_phase_data(**{"n_qubits": 3, "n_samples": 4, **kwargs})


def test_magnet_split_bad_fraction():
    data = magnet_phase.magnet_phase_data(3, 4, seed=0)
    for frac in (0.0, 1.0, -0.2, float("nan")):
        with pytest.raises(ThermoseedError):
            magnet_phase.train_test_split(data, test_fraction=frac)


# ---------------------------------------------------------------- probe-drift watch


def ghz_reference(n: int, phi: float) -> np.ndarray:
    psi = np.zeros(2**n, dtype=complex)
    psi[0], psi[-1] = 1 / np.sqrt(2), np.exp(1j * phi) / np.sqrt(2)
    return psi


@pytest.mark.parametrize("phi", [0.0, 0.4, -1.2, 2.9])
def test_noiseless_probe_is_ghz_with_x_parity_cos_phi(phi):
    n = 3
    rho = probe_drift.noisy_probe(n, phi, 0.0, 0.0)
    psi = ghz_reference(n, phi)
    assert np.vdot(psi, rho @ psi).real == pytest.approx(1.0, abs=1e-12)  # fidelity 1
    x_all = kron_pauli("X" * n)
    # Closed form from memory: <X^{(x)n}> = cos(phi) for this GHZ state. Confirmed here
    # by direct computation on the hand-built state vector, then checked on rho.
    direct = np.vdot(psi, x_all @ psi).real
    assert direct == pytest.approx(np.cos(phi), abs=1e-12)
    assert np.trace(rho @ x_all).real == pytest.approx(np.cos(phi), abs=1e-12)


def pennylane_probe(n: int, phi: float, p: float, q: float) -> np.ndarray:
    """Independent construction: GHZ circuit plus PennyLane's PhaseFlip / DepolarizingChannel."""
    dev = qml.device("default.mixed", wires=n)

    @qml.qnode(dev)
    def circuit():
        qml.Hadamard(wires=0)
        for w in range(n - 1):
            qml.CNOT(wires=[w, w + 1])
        qml.PhaseShift(phi, wires=0)  # e^{i phi} on the |1..1> branch
        for w in range(n):
            qml.PhaseFlip(p, wires=w)
        for w in range(n):
            qml.DepolarizingChannel(q, wires=w)
        return qml.density_matrix(wires=list(range(n)))

    return np.asarray(circuit())


@pytest.mark.parametrize(("n", "p", "q"), [(2, 0.1, 0.0), (3, 0.0, 0.2), (3, 0.07, 0.05)])
def test_noisy_probe_matches_pennylane_default_mixed(n, p, q):
    phi = 0.37
    ours = probe_drift.noisy_probe(n, phi, p, q)
    np.testing.assert_allclose(ours, pennylane_probe(n, phi, p, q), atol=1e-12)


@pytest.mark.parametrize(("n", "p"), [(2, 0.1), (3, 0.25), (4, 0.05)])
def test_dephasing_shrinks_ghz_coherence_by_one_minus_two_p_to_the_n(n, p):
    phi = 0.8
    rho = probe_drift.noisy_probe(n, phi, p, 0.0)
    # Closed form from memory: per-qubit dephasing multiplies the |0..0><1..1| coherence by
    # (1-2p)^n. Confirmed independently by applying every one of the 2^n Kraus products
    # (built by Kronecker products) to the ideal state.
    psi = ghz_reference(n, phi)
    ideal = np.outer(psi, psi.conj())
    brute = np.zeros_like(ideal)
    for bits in range(2**n):
        ops = [np.sqrt(p) * PAULI_2x2["Z"] if (bits >> k) & 1 else np.sqrt(1 - p) * PAULI_2x2["I"]
               for k in range(n)]
        k_op = reduce(np.kron, ops)
        brute += k_op @ ideal @ k_op.conj().T
    np.testing.assert_allclose(rho, brute, atol=1e-13)
    assert rho[0, -1] == pytest.approx((1 - 2 * p) ** n * ideal[0, -1], abs=1e-13)
    np.testing.assert_allclose(np.diag(rho), np.diag(ideal), atol=1e-13)  # populations kept


def test_kraus_sets_are_complete():
    for kraus in (probe_drift.dephasing_kraus(0.3), probe_drift.depolarising_kraus(0.6)):
        total = sum(k.conj().T @ k for k in kraus)
        np.testing.assert_allclose(total, np.eye(2), atol=1e-14)


def test_probe_drift_data_labels_validity_and_parameters():
    data = probe_drift.probe_drift_data(3, 30, tolerance=0.3, max_phase=1.0, margin=0.05,
                                        dephasing=(0.0, 0.1), depolarising=0.02, seed=7)
    assert data.density.shape == (30, 8, 8) and data.labels.dtype == np.int64
    assert_valid_densities(data.density)
    assert_balanced(data.labels)
    np.testing.assert_array_equal(data.labels, (np.abs(data.phases) > 0.3).astype(np.int64))
    assert np.all(np.abs(np.abs(data.phases) - 0.3) >= 0.05) and np.all(np.abs(data.phases) < 1)
    assert np.all((data.dephasing >= 0) & (data.dephasing <= 0.1))
    np.testing.assert_array_equal(data.depolarising, 0.02)
    for i in range(3):
        ref = probe_drift.noisy_probe(3, data.phases[i], data.dephasing[i], 0.02)
        np.testing.assert_array_equal(data.density[i], ref)


@pytest.mark.parametrize("count", [2, 9, 40])
def test_probe_labels_balanced(count):
    assert_balanced(probe_drift.probe_drift_data(2, count, seed=count).labels)


def test_probe_seeding_and_drift_walk():
    a = probe_drift.probe_drift_data(2, 12, seed=1)
    b = probe_drift.probe_drift_data(2, 12, seed=1)
    c = probe_drift.probe_drift_data(2, 12, seed=2)
    for key, value in a.arrays().items():
        np.testing.assert_array_equal(value, b.arrays()[key])
    assert not np.array_equal(a.phases, c.phases)
    assert not np.array_equal(a.density, c.density)
    walk = probe_drift.drift_walk(50, step=0.1, seed=3)
    np.testing.assert_array_equal(walk, probe_drift.drift_walk(50, step=0.1, seed=3))
    assert not np.array_equal(walk, probe_drift.drift_walk(50, step=0.1, seed=4))
    assert walk.shape == (50,) and np.all((walk >= -np.pi) & (walk < np.pi))
    watched = probe_drift.probe_states(2, walk, dephasing=0.05, tolerance=0.2)
    assert_valid_densities(watched.density)
    np.testing.assert_array_equal(watched.labels, (np.abs(walk) > 0.2).astype(np.int64))


def test_probe_phase_wrapping():
    data = probe_drift.probe_states(2, [2 * np.pi + 0.1, -2 * np.pi - 0.5], tolerance=0.3)
    np.testing.assert_allclose(data.phases, [0.1, -0.5], atol=1e-12)
    np.testing.assert_array_equal(data.labels, [0, 1])


def test_probe_npz_round_trip(tmp_path):
    data = probe_drift.probe_drift_data(2, 6, seed=0)
    loaded = load_training_data(data.save_npz(tmp_path / "probe.npz"))
    np.testing.assert_array_equal(loaded.labels, data.labels)
    np.testing.assert_allclose(loaded.rho, data.density.mean(axis=0), atol=1e-14)


@pytest.mark.parametrize(
    "kwargs",
    [
        {"n_qubits": 1},
        {"dephasing": -0.1},
        {"dephasing": (0.2, 0.1)},
        {"depolarising": 1.5},
        {"depolarising": (0.0, -0.01)},
        {"tolerance": 0.0},
        {"margin": -0.1},
        {"max_phase": 4.0},
        {"n_samples": -1},
        {"seed": -1},
    ],
)
def test_probe_bad_arguments(kwargs):
    with pytest.raises(ThermoseedError):
        probe_drift.probe_drift_data(**{"n_qubits": 2, "n_samples": 4, **kwargs})


def test_probe_bad_channel_arguments():
    with pytest.raises(ThermoseedError):
        probe_drift.dephasing_kraus(-0.01)
    with pytest.raises(ThermoseedError):
        probe_drift.noisy_probe(3, 0.1, 0.0, 1.01)
    with pytest.raises(ThermoseedError):
        probe_drift.probe_states(2, [0.1, 0.2], dephasing=[0.1, 0.2, 0.3])
    with pytest.raises(ThermoseedError):
        probe_drift.apply_channel(np.eye(4) / 4, probe_drift.dephasing_kraus(0.1), wire=2)


# ---------------------------------------------------------------- neighbour warm start


def test_heisenberg_dimer_ground_energy_is_minus_three():
    # XX + YY + ZZ = 2 SWAP - I: singlet (SWAP = -1) at -3, triplet at +1. Checked here by
    # diagonalising the hand-built 4x4 matrix as well.
    assert neighbour_xxz.ground_energy(2, 1.0, J=1.0) == pytest.approx(-3.0, abs=1e-12)
    assert np.linalg.eigvalsh(xxz_reference(2, 1.0)).tolist() == pytest.approx([-3, 1, 1, 1])


@pytest.mark.parametrize("n", [3, 4, 5])
def test_xx_chain_ground_energy_matches_free_fermions(n):
    # From memory (Jordan-Wigner for the open XX chain): XX + YY = 2 (s+ s- + h.c.) gives
    # hopping 2 and single-particle energies 4 cos(k pi / (n+1)), k = 1..n; E0 = sum of the
    # negative ones. Confirmed below against exact diagonalisation of the hand-built matrix.
    levels = 4 * np.cos(np.arange(1, n + 1) * np.pi / (n + 1))
    expected = levels[levels < 0].sum()
    assert np.linalg.eigvalsh(xxz_reference(n, 0.0))[0] == pytest.approx(expected, abs=1e-10)
    assert neighbour_xxz.ground_energy(n, 0.0) == pytest.approx(expected, abs=1e-10)


@pytest.mark.parametrize(("n", "delta", "j"), [(3, 0.5, 1.0), (4, -1.3, 0.7), (4, 2.0, 1.0)])
def test_xxz_terms_coefficients_and_ground_energy(n, delta, j):
    h = neighbour_xxz.xxz_hamiltonian(n, delta, j)
    ref = xxz_reference(n, delta, j)
    np.testing.assert_allclose(h, ref, atol=1e-13)
    assert neighbour_xxz.ground_energy(n, delta, j) == pytest.approx(
        np.linalg.eigvalsh(ref)[0], abs=1e-10)
    terms = neighbour_xxz.xxz_terms(n)
    assert len(terms) == 3 * (n - 1)
    assert neighbour_xxz.xxz_coefficients(n, delta, j).shape == (len(terms),)


def test_xxz_thermal_states_match_expm():
    n = 3
    data = neighbour_xxz.thermal_states(n, [0.5, 1.0, 1.5], 1.7)
    assert data.density.shape == (3, 8, 8)
    assert_valid_densities(data.density)
    np.testing.assert_array_equal(data.betas, 1.7)
    for delta, rho in zip(data.deltas, data.density, strict=True):
        ref = scipy.linalg.expm(-1.7 * xxz_reference(n, delta))
        np.testing.assert_allclose(rho, ref / np.trace(ref), atol=1e-12)
    np.testing.assert_allclose(neighbour_xxz.thermal_state(n, 0.3, 0.0), np.eye(8) / 8,
                               atol=1e-15)


def test_heisenberg_dimer_thermal_weights():
    # Singlet energy -3, triplet +1 (as above): Z = e^{3 beta} + 3 e^{-beta}.
    beta = 0.8
    rho = neighbour_xxz.thermal_state(2, 1.0, beta)
    z = np.exp(3 * beta) + 3 * np.exp(-beta)
    singlet = np.array([0, 1, -1, 0]) / np.sqrt(2)
    assert singlet @ rho.real @ singlet == pytest.approx(np.exp(3 * beta) / z, abs=1e-12)
    assert np.linalg.eigvalsh(rho) == pytest.approx(sorted([np.exp(-beta) / z] * 3
                                                           + [np.exp(3 * beta) / z]))


def test_xxz_phase_labels_and_round_trip(tmp_path):
    np.testing.assert_array_equal(
        neighbour_xxz.xxz_phase([-2.0, -1.0, -0.5, 1.0, 1.01]), [0, 0, 1, 1, 2])
    data = neighbour_xxz.thermal_states(2, [-1.5, 0.0, 2.0], [1.0, 2.0, 3.0])
    np.testing.assert_array_equal(data.labels, [0, 1, 2])
    loaded = load_training_data(data.save_npz(tmp_path / "xxz.npz"))
    np.testing.assert_array_equal(loaded.labels, data.labels)
    np.testing.assert_allclose(loaded.rho, data.density.mean(axis=0), atol=1e-14)


def test_xxz_bad_arguments():
    bad_calls = [
        lambda: neighbour_xxz.xxz_terms(1),
        lambda: neighbour_xxz.xxz_coefficients(3, 1.0, J=-1.0),
        lambda: neighbour_xxz.xxz_coefficients(3, float("nan")),
        lambda: neighbour_xxz.thermal_state(3, 1.0, -0.5),
        lambda: neighbour_xxz.thermal_states(3, [0.1, 0.2], [1.0, 2.0, 3.0]),
        lambda: neighbour_xxz.ground_energy(0, 1.0),
    ]
    for call in bad_calls:
        with pytest.raises(ThermoseedError):
            call()
