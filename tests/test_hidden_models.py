"""Hidden-qubit Gibbs models: Fréchet derivatives, exact and bound gradients (dense and block
engines), the estimator, its files, and the wash-out / fit diagnostics.

References used below: scipy.linalg.expm / logm / expm_frechet as reference libraries,
hand-built Kronecker-product Pauli matrices (tests/numerics.py), central finite differences,
Page's formula (Page, Phys. Rev. Lett. 71, 1291 (1993)) against sampled Haar states.
"""

import warnings

import numpy as np
import pytest
import scipy.linalg
from numerics import central_differences

from thermoseed.pretrain import (
    BlockHiddenEngine,
    ConvergenceWarning,
    DenseHiddenEngine,
    HiddenGibbsModel,
    TermSet,
    ThermoseedError,
    VisibleGibbsModel,
    WashoutWarning,
    block_structure,
    exp_divided_differences,
    frechet_exp,
    frechet_log,
    graph_terms,
    hidden_fit_report,
    hidden_terms,
    load_hidden_model,
    log_divided_differences,
    page_entropy,
    save_model,
    term_roles,
    von_neumann_entropy,
    washout_report,
)
from thermoseed.pretrain.hidden_engines import (
    MIN_THREAD_DIM,
    stacked_exp_divided_differences,
    stacked_hamiltonians,
)
from thermoseed.pretrain.optim import minimize
from thermoseed.pretrain.paulis import dense_hamiltonian

FD_STEP = 1e-5  # truncation ~1e-10 and round-off ~1e-11 for these O(1) losses


def _quiet(fn, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return fn(*args, **kwargs)


def _reference_loss(theta, labels, n_hidden, rho, helpers):
    """S(rho||Tr_h e^{-H}/Z) from hand-built Paulis, scipy expm/logm and an einsum partial
    trace (wire order: visible first, hidden last)."""
    h = helpers.reference_hamiltonian(theta, labels)
    e = scipy.linalg.expm(-h)
    d, dh = rho.shape[0], 2**n_hidden
    a = np.einsum("ahbh->ab", e.reshape(d, dh, d, dh))
    sigma = a / np.trace(a).real
    return np.trace(rho @ (scipy.linalg.logm(rho) - scipy.linalg.logm(sigma))).real


def _general_terms(n_v, n_h):
    """Y letters (complex H), X on hidden wires (not block diagonal), all three roles."""
    return hidden_terms(n_v, n_h, visible_fields="XY", visible_couplings=("ZZ",),
                        couplings=("XX", "YZ"), hidden_fields="X", hidden_couplings=("ZZ",))


def _commuting_terms(n_v, n_h):
    """Complex visible parts, visible-hidden ZZ and XZ, hidden biases, hidden-hidden ZZ."""
    return hidden_terms(n_v, n_h, visible_fields="XYZ", visible_couplings=("ZZ", "XY"),
                        couplings=("ZZ", "XZ"), hidden_fields="Z", hidden_couplings=("ZZ",))


def _cross(engine, rho):
    return lambda t: engine.evaluate(t, rho, gradient=False).cross_entropy


# ---------------------------------------------------------------- Fréchet derivatives


@pytest.mark.parametrize("gaps", ["random", "near-degenerate"])
def test_frechet_exp_matches_scipy_expm_frechet(gaps, helpers):
    rng = np.random.default_rng(1 if gaps == "random" else 2)
    d = 6
    vecs = np.linalg.qr(rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d)))[0]
    vals = rng.normal(size=d) if gaps == "random" else \
        np.array([0.3, 0.3 + 1e-13, 0.3 + 2e-10, -1.0, -1.0 + 1e-15, 2.0])
    x = (vecs * vals) @ vecs.conj().T
    x = 0.5 * (x + x.conj().T)
    e = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))  # any direction
    # Source: scipy.linalg.expm_frechet (block-triangular / Pade method, Al-Mohy & Higham 2009).
    ref = scipy.linalg.expm_frechet(x, e, compute_expm=False)
    assert np.abs(frechet_exp(x, e) - ref).max() < 1e-12 * np.abs(ref).max() * 10


@pytest.mark.parametrize("gaps", ["random", "near-degenerate"])
def test_frechet_log_matches_finite_differences_of_logm(gaps):
    rng = np.random.default_rng(3 if gaps == "random" else 4)
    d = 5
    vecs = np.linalg.qr(rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d)))[0]
    vals = rng.uniform(0.2, 2.0, size=d) if gaps == "random" else \
        np.array([0.5, 0.5 + 1e-12, 0.5 + 1e-9, 1.5, 0.9])
    x = (vecs * vals) @ vecs.conj().T
    x = 0.5 * (x + x.conj().T)
    e = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
    e = 0.5 * (e + e.conj().T)
    h = 1e-5
    # Source: central differences of scipy.linalg.logm (inverse scaling and squaring).
    ref = (scipy.linalg.logm(x + h * e) - scipy.linalg.logm(x - h * e)) / (2 * h)
    assert np.abs(frechet_log(x, e) - ref).max() < 1e-8


def test_divided_differences_on_ties_and_tiny_gaps():
    a, delta = 0.7, 1e-13
    # Source: Taylor series (e^{a+delta} - e^a)/delta = e^a (1 + delta/2 + ...), and
    # (log(a+delta) - log a)/delta = (1/a)(1 - delta/(2a) + ...); ties give f'(a).
    gamma = exp_divided_differences(np.array([a, a + delta, a]))
    assert gamma[0, 1] == pytest.approx(np.exp(a) * (1 + delta / 2), rel=1e-14)
    assert gamma[0, 2] == pytest.approx(np.exp(a), rel=1e-15)
    lg = log_divided_differences(np.array([a, a + delta, a]))
    assert lg[0, 1] == pytest.approx((1 - delta / (2 * a)) / a, rel=1e-14)
    assert lg[0, 2] == pytest.approx(1 / a, rel=1e-15)
    with pytest.raises(ThermoseedError, match="positive"):
        log_divided_differences(np.array([1.0, 0.0]))


# ---------------------------------------------------------------- exact gradients


@pytest.mark.parametrize("n_v,n_h", [(2, 1), (2, 3), (3, 2), (4, 1)])
def test_general_hidden_loss_and_gradient(n_v, n_h, helpers):
    rng = np.random.default_rng(10 * n_v + n_h)
    terms = _general_terms(n_v, n_h)
    rho = helpers.random_density(2**n_v, rng)
    theta = rng.normal(scale=0.5, size=len(terms))
    engine = DenseHiddenEngine(terms, n_h)
    ev = engine.evaluate(theta, rho)
    ref = _reference_loss(theta, terms.labels, n_h, rho, helpers)
    assert -von_neumann_entropy(rho) + ev.cross_entropy == pytest.approx(ref, abs=1e-10)
    # Source: central finite differences of the loss.
    fd = central_differences(_cross(engine, rho), theta, FD_STEP)
    assert np.abs(ev.gradient - fd).max() < 1e-7


@pytest.mark.parametrize("n_v,n_h", [(2, 1), (3, 2), (2, 3), (4, 3)])
def test_commuting_hidden_loss_and_gradient(n_v, n_h, helpers):
    rng = np.random.default_rng(100 + 10 * n_v + n_h)
    terms = _commuting_terms(n_v, n_h)
    rho = helpers.random_density(2**n_v, rng)
    theta = rng.normal(scale=0.5, size=len(terms))
    engine = BlockHiddenEngine(terms, n_h)
    ev = engine.evaluate(theta, rho)
    if n_v + n_h <= 5:
        ref = _reference_loss(theta, terms.labels, n_h, rho, helpers)
        assert -von_neumann_entropy(rho) + ev.cross_entropy == pytest.approx(ref, abs=1e-10)
    # Source: central finite differences of the loss.
    fd = central_differences(_cross(engine, rho), theta, FD_STEP)
    assert np.abs(ev.gradient - fd).max() < 1e-7


@pytest.mark.parametrize("engine_class", [DenseHiddenEngine, BlockHiddenEngine])
def test_gradient_at_near_degenerate_spectra(engine_class, helpers):
    """Equal fields and couplings of 1e-9: H and sigma_v are degenerate up to ~1e-9."""
    rng = np.random.default_rng(7)
    n_v, n_h = 3, 2
    terms = _commuting_terms(n_v, n_h)
    theta = 1e-9 * rng.normal(size=len(terms))
    for j, role in enumerate(term_roles(terms, n_h)):
        if terms[j].label.count("Z") == 1 and role != "coupling":
            theta[j] = 0.6  # every single-wire Z field equal
    rho = helpers.random_density(2**n_v, rng)
    engine = engine_class(terms, n_h)
    assert np.diff(np.linalg.eigvalsh(engine.reduced_state(theta))).min() < 1e-8
    # Source: central finite differences of the loss.
    fd = central_differences(_cross(engine, rho), theta, FD_STEP)
    assert np.abs(engine.evaluate(theta, rho).gradient - fd).max() < 1e-7


@pytest.mark.parametrize("n_v,n_h,workers", [(3, 2, 1), (2, 3, 2), (4, 1, 1)])
def test_block_engine_equals_dense_engine(n_v, n_h, workers, helpers):
    rng = np.random.default_rng(20 + n_v)
    terms = _commuting_terms(n_v, n_h)
    rho = helpers.random_density(2**n_v, rng)
    theta = rng.normal(scale=0.8, size=len(terms))
    block = BlockHiddenEngine(terms, n_h, workers=workers).evaluate(theta, rho)
    # Source: the general engine on the full register (checked against scipy expm/logm and
    # finite differences above).
    dense = DenseHiddenEngine(terms, n_h).evaluate(theta, rho)
    assert abs(block.cross_entropy - dense.cross_entropy) < 1e-9
    assert abs(block.log_z - dense.log_z) < 1e-9
    assert np.abs(block.gradient - dense.gradient).max() < 1e-9
    assert np.abs(block.state - dense.state).max() < 1e-12


def test_threaded_block_engine_equals_serial_and_dense(helpers):
    """Above MIN_THREAD_DIM the blocks really are spread over the worker threads."""
    rng = np.random.default_rng(31)
    n_v, n_h = 6, 2
    assert 2**n_v >= MIN_THREAD_DIM
    terms = hidden_terms(n_v, n_h, visible_fields="XZ", couplings=("ZZ",), hidden_fields="Z")
    rho = helpers.random_density(2**n_v, rng)
    theta = rng.normal(scale=0.5, size=len(terms))
    threaded = BlockHiddenEngine(terms, n_h, workers=2).evaluate(theta, rho)
    serial = BlockHiddenEngine(terms, n_h, workers=1).evaluate(theta, rho)
    assert abs(threaded.cross_entropy - serial.cross_entropy) < 1e-13  # other chunk sums
    assert np.abs(threaded.gradient - serial.gradient).max() < 1e-13
    # Source: the general engine on the full register (256 x 256).
    dense = DenseHiddenEngine(terms, n_h).evaluate(theta, rho)
    assert abs(threaded.cross_entropy - dense.cross_entropy) < 1e-10
    assert np.abs(threaded.gradient - dense.gradient).max() < 1e-10


def test_stacked_exp_divided_differences_match_the_expm1_form():
    rng = np.random.default_rng(5)
    wide = np.sort(rng.normal(scale=4.0, size=40))[::-1]
    close = np.sort(np.concatenate([rng.normal(scale=0.01, size=20), [0.3, 0.3, 0.3 + 1e-12,
                                                                         0.3 + 2e-3]]))
    for spectrum in (wide, close, close[::-1] - 30.0):
        x = spectrum[None, :]
        got = stacked_exp_divided_differences(x, np.exp(x))[0]
        # Source: frechet.exp_divided_differences (the expm1 form, checked against
        # scipy.linalg.expm_frechet and the Taylor series above).
        ref = exp_divided_differences(spectrum)
        assert np.abs(got / ref - 1).max() < 1e-12


def test_stacked_hamiltonians_match_dense_hamiltonians():
    terms = TermSet(["XY", "YI", "ZZ", "IZ", "XX", "YZ"])
    coef = np.random.default_rng(8).normal(size=(len(terms), 3))
    stack = stacked_hamiltonians(coef, terms)
    for i in range(3):
        # Source: paulis.dense_hamiltonian (checked against PennyLane matrices in test_paulis).
        assert np.abs(stack[i] - dense_hamiltonian(coef[:, i], terms)).max() < 1e-14
    real = TermSet(["XI", "ZZ", "IX"])
    assert stacked_hamiltonians(np.ones((3, 2)), real).dtype == float


def test_no_hidden_qubits_adjoint_is_rho_and_gradient_is_visible(helpers):
    rng = np.random.default_rng(5)
    labels = helpers.random_labels(3, 9, rng)
    terms = TermSet(labels)
    rho = helpers.random_density(8, rng)
    theta = rng.normal(scale=0.6, size=len(terms))
    engine = DenseHiddenEngine(terms, 0)
    assert np.abs(engine.adjoint_operator(theta, rho) - rho).max() < 1e-10
    # Source: visible formula m_j - <P_j>_sigma with hand-built Paulis and scipy expm.
    e = scipy.linalg.expm(-helpers.reference_hamiltonian(theta, labels))
    sigma = e / np.trace(e).real
    paulis = [helpers.kron_pauli(lab) for lab in labels]
    visible = np.array([np.trace((rho - sigma) @ p).real for p in paulis])
    assert np.abs(engine.evaluate(theta, rho).gradient - visible).max() < 1e-10


# ---------------------------------------------------------------- bound


def test_bound_is_above_the_loss_and_its_gradient_is_exact(helpers):
    rng = np.random.default_rng(11)
    for trial in range(8):
        n_v, n_h = 2 + trial % 2, 1 + trial % 3
        terms = _commuting_terms(n_v, n_h)
        engine = BlockHiddenEngine(terms, n_h)
        rho = helpers.random_density(2**n_v, rng)
        m = np.array([np.trace(rho @ helpers.kron_pauli(p.label)).real
                      for p in engine.structure.visible])
        theta = rng.normal(scale=1.0, size=len(terms))
        value, grad = engine.bound(theta, m)
        # Source: operator concavity of log (Jensen's operator inequality) => bound >= loss.
        assert value >= engine.evaluate(theta, rho, gradient=False).cross_entropy - 1e-12
        if trial < 3:  # Source: central finite differences of the bound.
            fd = central_differences(lambda t, e=engine, m=m: e.bound(t, m)[0], theta, FD_STEP)
            assert np.abs(grad - fd).max() < 1e-7


def test_minimising_the_bound_lowers_the_exact_loss(helpers):
    rng = np.random.default_rng(12)
    n_v, n_h = 3, 2
    terms = _commuting_terms(n_v, n_h)
    engine = BlockHiddenEngine(terms, n_h)
    rho = helpers.random_density(2**n_v, rng)
    m = np.array([np.trace(rho @ helpers.kron_pauli(p.label)).real
                  for p in engine.structure.visible])
    theta0 = rng.normal(scale=0.8, size=len(terms))
    result = _quiet(minimize, lambda t: engine.bound(t, m), theta0, max_iter=300)
    before = _reference_loss(theta0, terms.labels, n_h, rho, helpers)
    after = _reference_loss(result.x, terms.labels, n_h, rho, helpers)
    assert after < before - 0.1


# ---------------------------------------------------------------- estimator


def _parity_data(n_v):
    """Diagonal data with a 3-body correlation, p(z) ~ exp(1.5 z1 z2 z3 + 0.3 z1): no model
    with Z fields and ZZ couplings holds a z1 z2 z3 term (maximum entropy, Jaynes 1957)."""
    z = 1 - 2 * ((np.arange(2**n_v)[:, None] >> np.arange(n_v - 1, -1, -1)) & 1)
    p = np.exp(1.5 * z[:, 0] * z[:, 1] * z[:, 2] + 0.3 * z[:, 0])
    return np.diag(p / p.sum()).astype(complex)


def test_hidden_qubits_beat_the_visible_model_on_higher_order_data():
    rho = _parity_data(3)
    visible = VisibleGibbsModel(hidden_terms(3, 0, visible_fields="Z")).fit(rho)
    terms = hidden_terms(3, 2, visible_fields="Z", couplings=("ZZ",), hidden_fields="Z")
    model = _quiet(HiddenGibbsModel(terms, n_hidden=2, restarts=3, seed=1).fit, rho)
    assert model.engine_ == "block"
    assert model.restart_losses_.shape == (3,)
    assert model.loss_ == pytest.approx(model.restart_losses_.min())
    assert model.loss_ < visible.loss_ - 0.3  # 0.467 nats -> below 1e-6 here
    # Source: scipy logm of the model state against the data.
    sigma = model.state()
    ref = np.trace(rho @ (scipy.linalg.logm(rho) - scipy.linalg.logm(sigma))).real
    assert model.loss_ == pytest.approx(ref, abs=1e-8)
    report = hidden_fit_report(model, rho)
    assert report.relative_entropy == pytest.approx(model.loss_, abs=1e-8)
    assert report.fidelity > 0.999 and report.trace_distance < 1e-2
    assert np.isnan(report.moment_residuals["ZIIZI"])
    assert abs(report.moment_residuals["ZIIII"]) < 1e-5
    bounded = _quiet(HiddenGibbsModel(terms, n_hidden=2, objective="bound", seed=1).fit, rho)
    assert bounded.bound_ >= bounded.loss_ - 1e-12


def test_zero_hidden_qubits_reproduce_the_visible_model(helpers):
    rng = np.random.default_rng(9)
    terms = graph_terms(3, "line", fields="XZ", couplings=("ZZ", "XX"))
    rho = helpers.random_density(8, rng)
    # Source: VisibleGibbsModel (checked against scipy in test_visible_model.py).
    visible = VisibleGibbsModel(terms, init_scale=0.3, seed=4).fit(rho)
    hidden = HiddenGibbsModel(terms, n_hidden=0, init_scale=0.3, seed=4).fit(rho)
    assert np.array_equal(hidden.coef_, visible.coef_)
    assert hidden.loss_ == visible.loss_ and hidden.n_iter_ == visible.n_iter_
    assert np.abs(hidden.state() - visible.state()).max() < 1e-12


def test_general_model_fit_save_load_and_washout_report(tmp_path, helpers):
    rng = np.random.default_rng(13)
    terms = _general_terms(2, 1)
    rho = helpers.random_density(4, rng)
    # l2 keeps theta finite: without it this fit drifts to |theta| ~ 1e5 (a zero-temperature
    # limit of the hidden model) while the loss creeps down by 1e-4.
    model = _quiet(HiddenGibbsModel(terms, n_hidden=1, restarts=2, seed=3, l2=1e-3).fit, rho)
    assert model.engine_ == "dense" and model.bound_ is None
    assert len(model.history_["loss"]) == model.n_iter_
    path = model.save(tmp_path / "hidden.npz")
    loaded = load_hidden_model(path)
    assert np.array_equal(loaded.coef_, model.coef_)
    assert np.array_equal(loaded.restart_losses_, model.restart_losses_)
    assert loaded.restart_spread_ == model.restart_spread_ and loaded.engine_ == "dense"
    assert loaded.relative_entropy(rho) == pytest.approx(model.loss_, abs=1e-12)
    visible_file = save_model(VisibleGibbsModel(graph_terms(2, "line")).fit(
        np.eye(4) / 4), tmp_path / "visible.npz")
    with pytest.raises(ThermoseedError, match="not a 'hidden-gibbs-model'"):
        load_hidden_model(visible_file)
    report = washout_report(loaded, top=4, warn=False)
    assert report.product_states is None and report.entropies.shape == (4,)
    assert np.all(report.entropies <= report.max_entropy + 1e-12)
    # Source: ground state of the hand-built H, partial trace by einsum, entropy by eigvalsh.
    vals, vecs = np.linalg.eigh(helpers.reference_hamiltonian(model.coef_, terms.labels))
    psi = vecs[:, 0].reshape(4, 2)
    assert report.energies[0] == pytest.approx(vals[0], abs=1e-10)
    assert report.entropies[0] == pytest.approx(von_neumann_entropy(psi @ psi.conj().T),
                                                abs=1e-9)


def test_fit_accepts_state_vectors_like_the_visible_model(helpers):
    rng = np.random.default_rng(17)
    states = np.array([helpers.random_state(8, rng) for _ in range(3)])  # (3, 8): vectors
    terms = hidden_terms(3, 1, visible_fields="XZ")
    model = _quiet(HiddenGibbsModel(terms, n_hidden=1, l2=1e-3, max_iter=80).fit, states)
    # Source: the equal-weight mixture built by hand, S(rho||sigma_v) by scipy logm.
    rho = sum(np.outer(v, v.conj()) for v in states) / 3
    sigma = model.state()
    ref = np.trace(rho @ (scipy.linalg.logm(rho + 1e-14 * np.eye(8)) -
                          scipy.linalg.logm(sigma))).real
    assert model.loss_ == pytest.approx(ref, abs=1e-6)


def test_bad_input_is_refused_with_the_fix():
    general = _general_terms(2, 1)
    rho = np.eye(4) / 4
    with pytest.raises(ThermoseedError, match="n_hidden = 3 is out of range"):
        HiddenGibbsModel(general, n_hidden=3).fit(rho)
    with pytest.raises(ThermoseedError, match="set n_hidden = 1"):
        HiddenGibbsModel(general, n_hidden=2).fit(rho)
    with pytest.raises(ThermoseedError, match="engine='dense'"):
        HiddenGibbsModel(general, n_hidden=1, engine="block").fit(rho)
    with pytest.raises(ThermoseedError, match="objective='exact'"):
        HiddenGibbsModel(general, n_hidden=1, objective="bound").fit(rho)
    with pytest.raises(ThermoseedError, match="objective must be one of"):
        HiddenGibbsModel(general, n_hidden=1, objective="tight").fit(rho)
    with pytest.raises(ThermoseedError, match="visible qubits only"):
        DenseHiddenEngine(general, 1).evaluate(np.zeros(len(general)), np.eye(8) / 8)
    with pytest.raises(ThermoseedError, match="hidden wires"):
        block_structure(general, 1)


def test_hidden_terms_builds_the_documented_labels():
    terms = hidden_terms(2, 1, visible_fields="Z", visible_couplings=("XX",),
                         couplings=("ZZ",), hidden_fields="Z")
    # Source: hand-written labels (visible wires 0-1, hidden wire 2).
    assert terms.labels == ["ZII", "IZI", "XXI", "ZIZ", "IZZ", "IIZ"]
    assert term_roles(terms, 1) == ["visible"] * 3 + ["coupling"] * 2 + ["hidden"]


# ---------------------------------------------------------------- wash-out diagnostic


@pytest.mark.parametrize("m,n", [(2, 2), (2, 8), (4, 4), (4, 16)])
def test_page_formula_against_sampled_random_states(m, n):
    rng = np.random.default_rng(m * 100 + n)
    samples = 3000
    vecs = rng.standard_normal((samples, m, n)) + 1j * rng.standard_normal((samples, m, n))
    probs = np.linalg.svd(vecs, compute_uv=False) ** 2
    probs /= probs.sum(axis=1, keepdims=True)
    entropies = -(probs * np.log(probs)).sum(axis=1)
    # Source: Page, Phys. Rev. Lett. 71, 1291 (1993); Haar states as normalised Gaussians.
    assert abs(entropies.mean() - page_entropy(m, n)) < 4 * entropies.std() / np.sqrt(samples)
    assert page_entropy(2, 2) == pytest.approx(1 / 3, abs=1e-14)  # 1/3 + 1/4 - 1/4


def _all_strings(n):
    letters = np.array(list("IXYZ"))
    codes = np.arange(1, 4**n)
    return ["".join(letters[(c // 4 ** np.arange(n - 1, -1, -1)) % 4]) for c in codes]


def test_washout_report_approaches_page_for_random_hamiltonians():
    """Random Hamiltonians over every Pauli string (GUE-like): eigenvectors look Haar random,
    so their entanglement tends to Page's value as hidden qubits are added."""
    ratios, distances = [], []
    for n_h in (1, 2, 4):
        labels = _all_strings(2 + n_h)
        rng = np.random.default_rng(n_h)
        # Small coefficients: the 16 top weights are nearly equal, so the weighted mean
        # averages 16 vectors instead of following the ground state's fluctuation.
        model = HiddenGibbsModel.from_coefficients(
            labels, rng.normal(scale=0.02, size=len(labels)), n_hidden=n_h)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            report = washout_report(model, top=16)
        ratios.append(report.page_ratio)
        distances.append(report.trace_distances.mean())
        assert report.washed_out == any(issubclass(w.category, WashoutWarning) for w in caught)
    # Source: Page's value (page_entropy, checked against sampling above) as the limit.
    assert abs(ratios[-1] - 1) < 0.03 and abs(ratios[-1] - 1) < abs(ratios[0] - 1)
    assert distances[0] > distances[1] > distances[2]
    assert report.washed_out


def test_commuting_hidden_eigenvectors_are_products_and_do_not_warn(helpers):
    rng = np.random.default_rng(21)
    terms = _commuting_terms(3, 3)
    model = HiddenGibbsModel.from_coefficients(terms, rng.normal(size=len(terms)), n_hidden=3)
    with warnings.catch_warnings():
        warnings.simplefilter("error", WashoutWarning)
        report = washout_report(model)
    assert report.product_states is True and report.residual < 1e-10
    assert report.entropies.max() < 1e-9 and not report.washed_out
    # Source: lowest eigenvalues of the hand-built full-register H (numpy eigvalsh).
    vals = np.linalg.eigvalsh(helpers.reference_hamiltonian(model.coef_, terms.labels))
    assert np.allclose(report.energies, vals[: len(report.energies)], atol=1e-10)
