"""VisibleGibbsModel: gradient, recovery, maximum entropy, solvers, estimator contract,
checkpoints, divergence warnings and callbacks."""

import warnings

import numpy as np
import pytest
import scipy.linalg

from thermoseed.pretrain import (
    ConvergenceWarning,
    DivergenceWarning,
    NotFittedError,
    TermSet,
    ThermoseedError,
    VisibleGibbsModel,
    expectations,
    graph_terms,
    moment_residuals,
    von_neumann_entropy,
)
from thermoseed.pretrain.optim import load_checkpoint


def _quiet_fit(model, data, **kwargs):
    """Fit while ignoring ConvergenceWarning (tests that assert on it do so explicitly)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return model.fit(data, **kwargs)


# ---------------------------------------------------------------- gradient


@pytest.mark.parametrize("n", [2, 3, 4, 5])
@pytest.mark.parametrize("odd_y", [True, False])
@pytest.mark.parametrize("l2", [0.0, 0.3])
def test_loss_and_grad_vs_finite_differences(n, odd_y, l2, helpers):
    rng = np.random.default_rng(10 * n + 2 * odd_y + int(10 * l2))
    labels = helpers.random_labels(n, 2 * n + 3, rng, odd_y=odd_y)
    if odd_y and all(lab.count("Y") % 2 == 0 for lab in labels):
        labels[0] = "Y" + labels[0][1:].replace("Y", "X")
    terms = TermSet(labels)
    assert terms.is_real is not odd_y
    rho = helpers.random_density(2**n, rng)
    m = expectations(rho, terms)
    s_rho = von_neumann_entropy(rho)
    model = VisibleGibbsModel(terms, l2=l2)
    theta = rng.normal(scale=0.7, size=len(terms))
    loss, grad = model.loss_and_grad(theta, m, s_rho)

    # Source: scipy expm/logm of the hand-built Hamiltonian, L = S(rho||sigma) + l2/2 |theta|^2.
    h = helpers.reference_hamiltonian(theta, labels)
    e = scipy.linalg.expm(-h)
    sigma = e / np.trace(e).real
    ref = np.trace(rho @ (scipy.linalg.logm(rho) - scipy.linalg.logm(sigma))).real
    assert loss == pytest.approx(ref + 0.5 * l2 * theta @ theta, abs=1e-9)

    step = 1e-5
    fd = np.empty_like(theta)
    for j in range(len(theta)):
        e_j = np.zeros_like(theta)
        e_j[j] = step
        fd[j] = (model.loss_and_grad(theta + e_j, m, s_rho)[0]
                 - model.loss_and_grad(theta - e_j, m, s_rho)[0]) / (2 * step)
    np.testing.assert_allclose(grad, fd, atol=2e-8)


# ---------------------------------------------------------------- recovery and max entropy


@pytest.mark.parametrize("n", [4, 5, 6])
def test_recovers_coefficients_of_exact_gibbs_data(n, helpers):
    rng = np.random.default_rng(40 + n)
    labels = helpers.random_labels(n, 3 * n + 4, rng)
    theta = rng.normal(scale=0.5, size=len(labels))
    rho = VisibleGibbsModel.from_coefficients(labels, theta).state()
    # tol = 1e-8: L-BFGS-B's line search works on loss values whose round-off (~1e-15) is
    # comparable to the decrease left at |grad| ~ 1e-8, so it may stop at a "stalled line
    # search" a little above tol (reported; e.g. n = 5 here stops at ~2e-8).
    model = _quiet_fit(VisibleGibbsModel(labels, tol=1e-8, max_iter=1000), rho)
    assert model.grad_norm_ < 5e-8
    np.testing.assert_allclose(model.coef_, theta, atol=1e-5)
    assert model.loss_ <= 1e-8
    assert model.loss_ >= -1e-12  # Source: Klein's inequality, S(rho||sigma) >= 0 (Klein 1931).


def test_maximum_entropy_moment_matching(helpers):
    rng = np.random.default_rng(50)
    n = 3
    terms = graph_terms(n, "line", fields="XZ", couplings=("XX", "ZZ", "XY"))
    rho = helpers.random_density(2**n, rng)  # generic: outside the model class
    model = _quiet_fit(VisibleGibbsModel(terms, tol=1e-8, max_iter=1000), rho)
    sigma = model.state()
    # Source: maximum entropy (Jaynes, Phys. Rev. 106, 620 (1957)): the optimum matches
    # every moment.
    assert np.abs(moment_residuals(model)).max() < 1e-6
    assert np.abs(expectations(rho, terms) - expectations(sigma, terms)).max() < 1e-6
    # Same source: sigma has the largest entropy among states with these moments, and
    # S(rho||sigma) = S(sigma) - S(rho) there (Tr rho log sigma = Tr sigma log sigma).
    assert von_neumann_entropy(sigma) > von_neumann_entropy(rho)
    s_ref = np.trace(rho @ (scipy.linalg.logm(rho) - scipy.linalg.logm(sigma))).real
    assert model.loss_ == pytest.approx(s_ref, abs=1e-9)
    assert model.loss_ == pytest.approx(
        von_neumann_entropy(sigma) - von_neumann_entropy(rho), abs=1e-7)
    assert model.loss_ > 1e-3  # data really are outside the model class


def test_adam_reduces_loss_and_reaches_tolerance(helpers):
    rng = np.random.default_rng(60)
    terms = graph_terms(2, "line")
    rho = helpers.random_density(4, rng)
    model = VisibleGibbsModel(terms, solver="adam", learning_rate=0.05, tol=1e-4,
                              max_iter=5000)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)
        model.fit(rho)
    assert model.converged_ and model.grad_norm_ <= 1e-4
    loss = np.array(model.history_["loss"])
    assert loss[-1] < loss[0] - 0.05
    assert model.n_iter_ == len(loss) < 5000
    exact = _quiet_fit(VisibleGibbsModel(terms, tol=1e-9), rho)
    # |grad| <= 1e-4 with a Hessian bounded below puts the loss within ~1e-7 of the optimum.
    assert model.loss_ - exact.loss_ < 1e-6


# ---------------------------------------------------------------- estimator contract


def test_params_repr_and_set_params():
    terms = graph_terms(2, "line")
    model = VisibleGibbsModel(terms, l2=0.1, solver="adam")
    params = model.get_params()
    assert list(params) == ["terms", "solver", "l2", "tol", "max_iter", "learning_rate",
                            "engine", "init_scale", "seed", "progress", "checkpoint"]
    assert params["l2"] == 0.1 and params["terms"] is terms
    text = repr(model)
    assert text.startswith("VisibleGibbsModel(terms=TermSet(")
    assert "l2=0.1" in text and "solver='adam'" in text and "tol=" not in text
    assert model.set_params(tol=1e-3, seed=7) is model
    assert (model.tol, model.seed) == (1e-3, 7)
    with pytest.raises(ThermoseedError, match="unknown parameter 'alpha'"):
        model.set_params(alpha=1.0)


def test_not_fitted_errors(tmp_path):
    model = VisibleGibbsModel(graph_terms(2, "line"))
    for call in (model.state, model.moments, model.log_partition, model.spectrum,
                 model.hamiltonian, lambda: model.relative_entropy(np.eye(4) / 4),
                 lambda: model.save(tmp_path / "m.npz")):
        with pytest.raises(NotFittedError, match="call fit"):
            call()
    assert not (tmp_path / "m.npz").exists()


def test_fit_returns_self_and_keeps_input(helpers):
    rng = np.random.default_rng(70)
    rho = helpers.random_density(4, rng)
    keep = rho.copy()
    model = VisibleGibbsModel(["ZI", "IZ", "XX"])
    assert model.fit(rho) is model
    np.testing.assert_array_equal(rho, keep)
    assert model.terms_ == TermSet(["ZI", "IZ", "XX"])
    assert model.coef_.shape == (3,) and model.n_iter_ == len(model.history_["loss"])
    assert model.data_entropy_ == pytest.approx(von_neumann_entropy(rho))


def test_same_seed_same_numbers(helpers):
    rng = np.random.default_rng(80)
    rho = helpers.random_density(8, rng)
    terms = graph_terms(3, "ring")

    def run(seed):
        return _quiet_fit(VisibleGibbsModel(terms, solver="adam", init_scale=0.5, seed=seed,
                                            max_iter=30, tol=1e-12), rho)

    a, b, c = run(3), run(3), run(4)
    np.testing.assert_array_equal(a.coef_, b.coef_)
    assert a.history_ == b.history_
    assert not np.array_equal(a.coef_, c.coef_)


@pytest.mark.parametrize(
    "params,match",
    [
        ({"solver": "sgd"}, "solver"),
        ({"l2": -1.0}, "l2"),
        ({"init_scale": np.nan}, "init_scale"),
        ({"tol": 0.0}, "tol"),
        ({"max_iter": 0}, "max_iter"),
        ({"engine": "magic"}, "unknown engine"),
    ],
)
def test_settings_checked_in_fit(params, match):
    model = VisibleGibbsModel(graph_terms(2, "line"), **params)  # __init__ does not check
    with pytest.raises(ThermoseedError, match=match):
        model.fit(np.eye(4) / 4)


def test_qubit_mismatch_in_fit():
    with pytest.raises(ThermoseedError, match="qubits"):
        VisibleGibbsModel(graph_terms(3, "line")).fit(np.eye(4) / 4)


# ---------------------------------------------------------------- checkpoints


def test_adam_checkpoint_resume_matches_uninterrupted(tmp_path, helpers):
    rng = np.random.default_rng(90)
    rho = helpers.random_density(8, rng)
    terms = graph_terms(3, "line")
    params = {"solver": "adam", "tol": 1e-12, "learning_rate": 0.05}
    full = _quiet_fit(VisibleGibbsModel(terms, max_iter=40, **params), rho)
    ck = tmp_path / "ck.npz"
    first = _quiet_fit(VisibleGibbsModel(terms, max_iter=12, checkpoint=str(ck), **params), rho)
    x, step, history, extra = load_checkpoint(ck, len(terms))
    assert step == 12 and set(extra) == {"step", "mean", "second"}
    np.testing.assert_array_equal(x, first.coef_)
    resumed = _quiet_fit(VisibleGibbsModel(terms, max_iter=40, checkpoint=str(ck), **params),
                         rho)
    np.testing.assert_array_equal(resumed.coef_, full.coef_)
    assert resumed.history_ == full.history_
    assert resumed.n_iter_ == 40


def test_lbfgs_checkpoint_resumes_from_saved_iterate(tmp_path, helpers):
    rng = np.random.default_rng(91)
    rho = helpers.random_density(8, rng)
    terms = graph_terms(3, "ring")
    ck = tmp_path / "ck.npz"
    first = _quiet_fit(VisibleGibbsModel(terms, max_iter=3, checkpoint=str(ck)), rho)
    saved, step, _, _ = load_checkpoint(ck, len(terms))
    assert step == 3
    np.testing.assert_array_equal(saved, first.coef_)

    resumed = VisibleGibbsModel(terms, max_iter=200, tol=1e-8, checkpoint=str(ck))
    seen = []
    original = resumed.loss_and_grad

    def spy(theta, m, s):
        seen.append(np.array(theta))
        return original(theta, m, s)

    resumed.loss_and_grad = spy
    _quiet_fit(resumed, rho)
    np.testing.assert_array_equal(seen[0], saved)  # first evaluation at the saved iterate
    assert resumed.history_["loss"][:3] == first.history_["loss"]
    assert resumed.n_iter_ > 3
    direct = _quiet_fit(VisibleGibbsModel(terms, max_iter=200, tol=1e-8), rho)
    np.testing.assert_allclose(resumed.coef_, direct.coef_, atol=1e-6)


def test_checkpoint_of_wrong_size_refused(tmp_path, helpers):
    rho = helpers.random_density(8, np.random.default_rng(92))
    ck = tmp_path / "ck.npz"
    _quiet_fit(VisibleGibbsModel(graph_terms(3, "line"), max_iter=2, checkpoint=str(ck)), rho)
    with pytest.raises(ThermoseedError, match="parameters"):
        VisibleGibbsModel(graph_terms(3, "ring"), checkpoint=str(ck)).fit(rho)


# ---------------------------------------------------------------- divergence and stopping


def _pure_00():
    return np.array([[1, 0, 0, 0]], dtype=complex)


def test_divergence_warning_for_pure_data_without_penalty():
    terms = graph_terms(2, "line", fields="Z", couplings=("ZZ",))  # |00> is its tau -> 0 limit
    with pytest.warns(DivergenceWarning, match="l2 > 0"):
        model = _quiet_fit(VisibleGibbsModel(terms, tol=1e-10, max_iter=2000), _pure_00())
    assert np.all(model.coef_ < -5)


def test_no_divergence_warning_with_penalty():
    terms = graph_terms(2, "line", fields="Z", couplings=("ZZ",))
    with warnings.catch_warnings():
        warnings.simplefilter("error", DivergenceWarning)
        model = _quiet_fit(VisibleGibbsModel(terms, l2=1e-2, tol=1e-10, max_iter=2000),
                           _pure_00())
    assert np.abs(model.coef_).max() < 5


def test_no_divergence_warning_when_optimum_is_finite():
    # |00> has <X_i> = 0: the X-field family fits it at theta = 0 (sigma = I/4).
    terms = graph_terms(2, "line", fields="X", couplings=())
    with warnings.catch_warnings():
        warnings.simplefilter("error", DivergenceWarning)
        model = VisibleGibbsModel(terms, tol=1e-10).fit(_pure_00())
    np.testing.assert_allclose(model.coef_, 0.0, atol=1e-8)


def test_divergence_warning_when_coefficients_exceed_threshold():
    # Adam's first step has length learning_rate whatever the gradient size, so a step of 30
    # lands past the threshold (|theta| > 25), where round-off has zeroed the gradient.
    model = VisibleGibbsModel(["Z"], solver="adam", learning_rate=30.0, tol=1e-300,
                              max_iter=50)
    with pytest.warns(DivergenceWarning, match="largest"):
        _quiet_fit(model, np.array([[1, 0]], dtype=complex))
    assert np.abs(model.coef_).max() > 25


def test_convergence_warning_at_iteration_cap(helpers):
    rho = helpers.random_density(8, np.random.default_rng(93))
    with pytest.warns(ConvergenceWarning, match="iteration cap"):
        model = VisibleGibbsModel(graph_terms(3, "ring"), max_iter=2).fit(rho)
    assert model.n_iter_ == 2 and not model.converged_


@pytest.mark.parametrize("solver", ["lbfgs", "adam"])
def test_callback_stops_early(solver, helpers):
    rho = helpers.random_density(8, np.random.default_rng(94))
    calls = []

    def callback(step, x, loss, grad):
        calls.append((step, loss, float(np.linalg.norm(grad))))
        return step >= 3

    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)  # a requested stop is not a failure
        model = VisibleGibbsModel(graph_terms(3, "ring"), solver=solver, tol=1e-12).fit(
            rho, callback=callback)
    assert [c[0] for c in calls] == [1, 2, 3]
    assert model.n_iter_ == 3 and not model.converged_
    assert [c[1] for c in calls] == model.history_["loss"]
    assert [c[2] for c in calls] == model.history_["grad_norm"]


def test_checkpoint_of_other_data_refused(tmp_path, helpers):
    """Fit on data A with a checkpoint, then on data B (same term count) with the same file:
    refused with one line (it used to return A's coefficients, 'iterations: 3')."""
    rng = np.random.default_rng(93)
    terms = graph_terms(3, "line")
    ck = tmp_path / "ck.npz"
    _quiet_fit(VisibleGibbsModel(terms, max_iter=3, checkpoint=str(ck)),
               helpers.random_density(8, rng))
    with pytest.raises(ThermoseedError, match="other data, terms or settings"):
        VisibleGibbsModel(terms, max_iter=3, checkpoint=str(ck)).fit(
            helpers.random_density(8, rng))
    with pytest.raises(ThermoseedError, match="other data, terms or settings"):
        VisibleGibbsModel(terms, l2=0.5, max_iter=3, checkpoint=str(ck)).fit(
            helpers.random_density(8, np.random.default_rng(93)))
