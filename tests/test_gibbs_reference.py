"""Gibbs states, partition functions and distances against closed forms and other libraries."""

import numpy as np
import pennylane as qml
import pytest
import qutip
import scipy.linalg
import scipy.special

from thermoseed.pretrain import (
    TermSet,
    VisibleGibbsModel,
    fidelity,
    graph_terms,
    relative_entropy,
    trace_distance,
)


def _model(labels_or_terms, theta):
    return VisibleGibbsModel.from_coefficients(labels_or_terms, np.asarray(theta, float))


def _qobj(m):
    n = int(np.log2(m.shape[0]))
    return qutip.Qobj(m, dims=[[2] * n, [2] * n])


# ---------------------------------------------------------------- random instances


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_gibbs_state_and_log_z_vs_scipy_and_qutip(n, helpers):
    rng = np.random.default_rng(1000 + n)
    labels = helpers.random_labels(n, min(4**n - 1, 3 * n + 2), rng)
    theta = rng.normal(scale=0.8, size=len(labels))
    model = _model(labels, theta)
    h = helpers.reference_hamiltonian(theta, labels)
    # Source: scipy.linalg.expm of the hand-built Kronecker-product Hamiltonian.
    e = scipy.linalg.expm(-h)
    sigma_ref = e / np.trace(e).real
    np.testing.assert_allclose(model.log_partition(), np.log(np.trace(e).real), rtol=1e-12)
    np.testing.assert_allclose(model.state(), sigma_ref, atol=1e-12)
    # Source: QuTiP Qobj.expm of the same Hamiltonian.
    q = (-_qobj(h)).expm()
    np.testing.assert_allclose(model.state(), (q / q.tr()).full(), atol=1e-12)
    np.testing.assert_allclose(model.spectrum(), np.linalg.eigvalsh(h), atol=1e-12)
    np.testing.assert_allclose(model.moments(),
                               [np.trace(sigma_ref @ helpers.kron_pauli(lab)).real
                                for lab in labels], atol=1e-12)

    rho = helpers.random_density(2**n, rng)
    # Source: scipy.linalg.logm, S(rho||sigma) = Tr rho (log rho - log sigma).
    s_ref = np.trace(rho @ (scipy.linalg.logm(rho) - scipy.linalg.logm(sigma_ref))).real
    # Source: QuTiP entropy_relative, natural log (base=e is its default).
    s_qutip = qutip.entropy_relative(_qobj(rho), _qobj(sigma_ref))
    assert s_qutip == pytest.approx(s_ref, abs=1e-9)
    assert model.relative_entropy(rho) == pytest.approx(s_ref, abs=1e-9)
    assert relative_entropy(rho, model.state()) == pytest.approx(s_ref, abs=1e-9)


def test_log_z_is_stable_at_large_coefficients(helpers):
    rng = np.random.default_rng(5)
    labels = helpers.random_labels(3, 8, rng)
    theta = 400.0 * rng.standard_normal(len(labels))  # exp(-E) overflows without a shift
    model = _model(labels, theta)
    energies = np.linalg.eigvalsh(helpers.reference_hamiltonian(theta, labels))
    # Source: scipy.special.logsumexp of -E over numpy eigenvalues.
    assert model.log_partition() == pytest.approx(scipy.special.logsumexp(-energies), rel=1e-12)
    sigma = model.state()
    assert np.all(np.isfinite(sigma))
    assert np.trace(sigma).real == pytest.approx(1.0, abs=1e-12)


# ---------------------------------------------------------------- closed forms


@pytest.mark.parametrize("a", [(0.3, -0.4, 1.2), (2.0, 0.0, 0.0), (0.0, -3.0, 0.5), (1e-3, 0, 0)])
def test_single_qubit_closed_form(a):
    a = np.array(a)
    model = _model(["X", "Y", "Z"], a)
    r = np.linalg.norm(a)
    # Source: textbook two-level system: Z = 2 cosh|a|,
    # sigma = (I - tanh|a| (a/|a|).sigma)/2, <sigma_k> = -tanh|a| a_k/|a|.
    assert model.log_partition() == pytest.approx(np.log(2 * np.cosh(r)), rel=1e-13)
    paulis = [np.array([[0, 1], [1, 0]]), np.array([[0, -1j], [1j, 0]]), np.diag([1, -1])]
    sigma = 0.5 * (np.eye(2) - np.tanh(r) * sum(ak / r * p for ak, p in zip(a, paulis,
                                                                             strict=True)))
    np.testing.assert_allclose(model.state(), sigma, atol=1e-14)
    np.testing.assert_allclose(model.moments(), -np.tanh(r) * a / r, atol=1e-14)


@pytest.mark.parametrize("n", range(3, 11))
def test_classical_ising_ring_zero_field(n):
    j = 0.37 + 0.05 * n
    # E = -J sum s_i s_{i+1}; Z_i has eigenvalue s = +1 on |0>, so theta_ZZ = -J.
    terms = graph_terms(n, "ring", fields="", couplings=("ZZ",))
    model = _model(terms, np.full(len(terms), -j))
    # Source: transfer-matrix solution of the 1-D Ising model (Baxter 1982):
    # Z = (2 cosh J)^N + (2 sinh J)^N.
    want = np.log((2 * np.cosh(j)) ** n + (2 * np.sinh(j)) ** n)
    assert model.log_partition() == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize("n,j,h", [(3, 0.5, 0.2), (5, -0.8, 0.7), (8, 1.1, -0.3), (10, 0.4, 1.5)])
def test_classical_ising_ring_with_field(n, j, h):
    terms = graph_terms(n, "ring", fields="Z", couplings=("ZZ",))
    theta = np.concatenate([np.full(n, -h), np.full(n, -j)])
    model = _model(terms, theta)
    # Source: transfer-matrix solution of the 1-D Ising model (Baxter 1982):
    # Z = l+^N + l-^N, l+- = e^J cosh h +- sqrt(e^{2J} sinh^2 h + e^{-2J}).
    root = np.sqrt(np.exp(2 * j) * np.sinh(h) ** 2 + np.exp(-2 * j))
    lp, lm = np.exp(j) * np.cosh(h) + root, np.exp(j) * np.cosh(h) - root
    assert model.log_partition() == pytest.approx(np.log(lp**n + lm**n), rel=1e-12)


def _tfim_free_fermion_log_z(n, j, g, beta):
    """Free-fermion log Z of H = -J sum Z_i Z_{i+1} - g sum X_i, open ends."""
    a = np.diag(np.full(n, 2.0 * g)) - j * (np.eye(n, k=1) + np.eye(n, k=-1))
    b = -j * np.eye(n, k=1) + j * np.eye(n, k=-1)
    lam = np.sqrt(np.clip(np.linalg.eigvals((a - b) @ (a + b)).real, 0.0, None))
    return float(np.sum(np.log(2 * np.cosh(beta * lam / 2)))), lam


@pytest.mark.parametrize("n", [4, 5, 6])
@pytest.mark.parametrize("beta", [0.3, 1.0, 4.0])
def test_transverse_field_ising_open_chain_free_fermions(n, beta):
    j, g = 1.0, 0.7 + 0.1 * n
    terms = graph_terms(n, "line", fields="X", couplings=("ZZ",))
    theta = beta * np.concatenate([np.full(n, -g), np.full(n - 1, -j)])
    model = _model(terms, theta)
    # Source: free-fermion solution (Lieb, Schultz & Mattis 1961; Pfeuty 1970):
    # log Z(beta) = sum_k log(2 cosh(beta L_k / 2)), L_k = sqrt(eig((A-B)(A+B))).
    want, lam = _tfim_free_fermion_log_z(n, j, g, beta)
    assert model.log_partition() == pytest.approx(want, rel=1e-11)
    # Source: same reference, ground energy E0 = -sum_k L_k / 2.
    assert model.spectrum()[0] / beta == pytest.approx(-lam.sum() / 2, rel=1e-11)


# ---------------------------------------------------------------- distances


@pytest.mark.parametrize("n", [1, 2, 3])
def test_distances_vs_pennylane_and_qutip(n, helpers):
    rng = np.random.default_rng(2000 + n)
    d = 2**n
    for rank_r, rank_s in [(None, None), (1, None), (1, 1), (2, None)]:
        rho = helpers.random_density(d, rng, rank_r)
        sigma = helpers.random_density(d, rng, rank_s)
        qr, qs = _qobj(rho), _qobj(sigma)
        # Source: PennyLane qml.math.fidelity (squared Uhlmann convention, see its docstring)
        # and QuTiP fidelity (Nielsen & Chuang, square-root convention, hence **2).
        # Square roots of round-off eigenvalues of rank-deficient states limit every
        # implementation to ~1e-8 here, hence 1e-7.
        f = fidelity(rho, sigma)
        assert f == pytest.approx(float(qml.math.fidelity(rho, sigma)), abs=1e-7)
        assert f == pytest.approx(qutip.fidelity(qr, qs) ** 2, abs=1e-7)
        assert fidelity(sigma, rho) == pytest.approx(f, abs=1e-7)
        if rank_s == 1:
            # Source: fidelity with a pure state, F = <psi|rho|psi> (Nielsen & Chuang 9.2.2).
            vals, vecs = np.linalg.eigh(sigma)
            psi = vecs[:, -1]
            assert f == pytest.approx((psi.conj() @ rho @ psi).real, abs=1e-7)
        # Source: PennyLane qml.math.trace_distance and QuTiP tracedist, (1/2)||rho-sigma||_1.
        t = trace_distance(rho, sigma)
        assert t == pytest.approx(float(qml.math.trace_distance(rho, sigma)), abs=1e-10)
        # QuTiP takes sqrt of eigenvalues of diff^2: ~1e-8 error at near-zero eigenvalues.
        assert t == pytest.approx(qutip.tracedist(qr, qs), abs=1e-7)
        if rank_s is None:
            # Source: PennyLane qml.math.relative_entropy (base=None is the natural log) and
            # QuTiP entropy_relative (base=e by default); base 2 checks the nats/bits factor.
            # PennyLane takes log of rho's eigenvalues as they come (nan for round-off
            # negatives), so it is compared on full-rank rho only; QuTiP handles both.
            s = relative_entropy(rho, sigma)
            assert s == pytest.approx(qutip.entropy_relative(qr, qs), abs=1e-8)
            assert s / np.log(2) == pytest.approx(qutip.entropy_relative(qr, qs, base=2),
                                                  abs=1e-8)
            if rank_r is None:
                assert s == pytest.approx(float(qml.math.relative_entropy(rho, sigma)),
                                          abs=1e-8)
                assert s / np.log(2) == pytest.approx(
                    float(qml.math.relative_entropy(rho, sigma, base=2)), abs=1e-8)


@pytest.mark.filterwarnings("ignore:divide by zero:RuntimeWarning")
def test_relative_entropy_infinite_outside_support(helpers):
    rng = np.random.default_rng(3)
    sigma = np.diag([1.0, 0.0]).astype(complex)
    rho = helpers.random_density(2, rng)
    # Source: PennyLane qml.math.relative_entropy docstring: non-overlapping support gives inf.
    assert np.isinf(float(qml.math.relative_entropy(rho, sigma)))
    assert relative_entropy(rho, sigma) == np.inf
    assert relative_entropy(sigma, sigma) == pytest.approx(0.0, abs=1e-12)


def test_klein_inequality_random_pairs(helpers):
    rng = np.random.default_rng(4)
    for _ in range(40):
        d = 2 ** int(rng.integers(1, 4))
        rho = helpers.random_density(d, rng, rank=int(rng.integers(1, d + 1)))
        sigma = helpers.random_density(d, rng)
        # Source: Klein's inequality (Klein 1931) S(rho||sigma) >= 0, equality iff equal.
        assert relative_entropy(rho, sigma) >= -1e-12
        assert relative_entropy(sigma, sigma) == pytest.approx(0.0, abs=1e-10)
        assert relative_entropy(rho, sigma) > 1e-6  # distinct random states differ


def test_model_relative_entropy_and_fidelity_to_itself(helpers):
    rng = np.random.default_rng(6)
    labels = helpers.random_labels(2, 6, rng)
    model = _model(TermSet(labels), rng.standard_normal(6))
    sigma = model.state()
    assert model.relative_entropy(sigma) == pytest.approx(0.0, abs=1e-12)
    assert fidelity(sigma, sigma) == pytest.approx(1.0, abs=1e-10)
    assert trace_distance(sigma, sigma) == pytest.approx(0.0, abs=1e-14)
