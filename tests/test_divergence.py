"""Divergence of the relative-entropy fit for rank-deficient data: the ground-space
certificate, one warning with the one right piece of advice, and no warning where the
optimum is finite."""

import warnings

import numpy as np
import pytest

from thermoseed.pretrain import (
    ConvergenceWarning,
    DivergenceWarning,
    VisibleGibbsModel,
    divergence,
    graph_terms,
    load_model,
)
from thermoseed.pretrain.divergence import (
    extreme_eigenvalues,
    ground_space_certificate,
    invariant_directions,
)


def _basis_state(n: int) -> np.ndarray:
    state = np.zeros((1, 2**n), complex)
    state[0, 0] = 1.0
    return state


def _ghz(n: int) -> np.ndarray:
    state = np.zeros((1, 2**n), complex)
    state[0, 0] = state[0, -1] = 2**-0.5
    return state


def _fit(terms, data, **params):
    """Fit and return (model, warnings caught)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = VisibleGibbsModel(terms, **params).fit(data, kind="states")
    return model, [w for w in caught if issubclass(w.category, (DivergenceWarning,
                                                                 ConvergenceWarning))]


def _in_ground_space(direction, labels, state, helpers) -> float:
    """``(<psi|K|psi> - lambda_min) / spread`` for ``K = sum c_j P_j`` built from hand-written
    Kronecker products and diagonalised by numpy (independent of pretrain)."""
    k = helpers.reference_hamiltonian(direction, labels)
    values = np.linalg.eigvalsh(k)
    return float((state.conj() @ k @ state).real - values[0]) / (values[-1] - values[0])


@pytest.mark.parametrize("n", [3, 4])
@pytest.mark.parametrize("make", [_basis_state, _ghz], ids=["zeros", "ghz"])
def test_pure_multi_qubit_data_warn_once(n, make, helpers):
    terms = graph_terms(n, "line", fields="Z", couplings=("ZZ",))
    model, caught = _fit(terms, make(n))
    assert [w.category for w in caught] == [DivergenceWarning]
    assert "l2 > 0" in str(caught[0].message) and "raise max_iter" not in str(caught[0].message)
    assert model.diverging_
    cert = ground_space_certificate(terms, make(n).T, model.target_moments_, model.coef_)
    assert cert.diverges
    assert _in_ground_space(cert.direction, terms.labels, make(n)[0], helpers) < 1e-8


def test_early_stop_near_four_is_reported():
    # |0000>: the gradient falls below the default tol at |theta| ~ 4, far from any optimum
    model, caught = _fit(graph_terms(4, "line", fields="Z", couplings=("ZZ",)),
                         _basis_state(4))
    assert model.converged_ and np.abs(model.coef_).max() < 5
    assert len(caught) == 1 and "the gradient fell below tol" in str(caught[0].message)


def test_full_rank_mixed_state_has_no_warning(helpers):
    rho = helpers.random_density(8, np.random.default_rng(21))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        model = VisibleGibbsModel(graph_terms(3, "ring")).fit(rho)
    assert model.converged_ and not model.diverging_


@pytest.mark.parametrize("n", [3, 4])
def test_ghz_with_single_qubit_fields_only_has_finite_optimum(n):
    # <Z_i> = 0 on GHZ: the moments of I/2^n, reached at theta = 0 (closed form)
    terms = graph_terms(n, "line", fields="Z", couplings=())
    model, caught = _fit(terms, _ghz(n), tol=1e-10)
    assert caught == [] and not model.diverging_
    np.testing.assert_allclose(model.coef_, 0.0, atol=1e-8)


def test_generic_pure_state_with_diagonal_terms_is_certified_finite(helpers):
    # K diagonal with K psi = lambda psi on a state with every amplitude nonzero forces
    # K = lambda I, i.e. c = 0: no invariant direction, so the optimum is finite.
    terms = graph_terms(3, "line", fields="Z", couplings=("ZZ",))
    psi = helpers.random_state(8, np.random.default_rng(8))
    assert invariant_directions(terms, psi[:, None]).shape[1] == 0
    model, caught = _fit(terms, psi[None], tol=1e-9)
    assert caught == [] and model.converged_
    sigma = model.state()
    for label in terms.labels:  # moments matched, by hand-built matrices
        p = helpers.kron_pauli(label)
        assert np.trace(sigma @ p).real == pytest.approx((psi.conj() @ p @ psi).real, abs=1e-8)


def test_invariant_directions_match_the_closed_form():
    # U = |00>, terms Z0, Z1, X0: K|00> = (c0 + c1)|00> + c2|10>, so the space is
    # {(c0, c1, 0, c0 + c1)} (by hand)
    terms = graph_terms(2, "line", fields="Z", couplings=(), extra=("XI",))
    basis = invariant_directions(terms, np.eye(4)[:, :1].astype(complex))
    expected = np.array([[1.0, 0, 0, 1], [0, 1.0, 0, 1]]).T
    project = basis @ basis.T
    q, _ = np.linalg.qr(expected)
    np.testing.assert_allclose(project, q @ q.T, atol=1e-10)


def test_null_space_route_gives_the_same_directions_and_warns():
    # rho = (|00><00| + |01><01| + |10><10|)/3 is the ground space of -Z0 - Z1 + Z0 Z1
    # (energies -1, -1, -1, 3 by hand): rank 3 of 4, so the Gram matrix comes from |11>
    terms = graph_terms(2, "line", fields="Z", couplings=("ZZ",))
    eye = np.eye(4, dtype=complex)
    direct = invariant_directions(terms, eye[:, :3])
    via_null = invariant_directions(terms, eye[:, :3], eye[:, 3:])
    np.testing.assert_allclose(via_null @ via_null.T, direct @ direct.T, atol=1e-10)
    expected = np.array([-1.0, -1.0, 1.0, -1.0])  # (c, lambda) by hand
    np.testing.assert_allclose(direct @ direct.T @ expected, expected, atol=1e-10)
    with pytest.warns(DivergenceWarning, match="ground space"):
        model = VisibleGibbsModel(terms).fit(np.diag([1, 1, 1, 0]).astype(complex) / 3)
    assert model.diverging_


def test_certificate_without_the_gram_matrix(monkeypatch):
    monkeypatch.setattr(divergence, "GRAM_MAX_ENTRIES", 0)  # raw direction only
    model, caught = _fit(graph_terms(3, "line", fields="Z", couplings=("ZZ",)),
                         _basis_state(3))
    assert model.diverging_ and [w.category for w in caught] == [DivergenceWarning]


def test_extreme_eigenvalues_sparse_path_vs_numpy(monkeypatch, helpers):
    monkeypatch.setattr(divergence, "DENSE_SPECTRUM_MAX_DIM", 4)
    terms = graph_terms(4, "ring")
    coef = np.random.default_rng(2).standard_normal(len(terms))
    values = np.linalg.eigvalsh(helpers.reference_hamiltonian(coef, terms.labels))
    np.testing.assert_allclose(extreme_eigenvalues(coef, terms), (values[0], values[-1]),
                               atol=1e-9)


def test_iteration_cap_on_divergent_data_gives_only_the_divergence_advice():
    model, caught = _fit(["Z"], np.array([[1, 0]], dtype=complex), max_iter=3)
    assert not model.converged_
    assert [w.category for w in caught] == [DivergenceWarning]
    assert "more iterations (it stopped at the iteration cap) only grow" in str(caught[0].message)


def test_iteration_cap_with_finite_optimum_gives_only_the_convergence_advice(helpers):
    psi = helpers.random_state(8, np.random.default_rng(8))
    model, caught = _fit(graph_terms(3, "line", fields="Z", couplings=("ZZ",)), psi[None],
                         max_iter=1)
    assert not model.converged_ and not model.diverging_
    assert [w.category for w in caught] == [ConvergenceWarning]
    assert "raise max_iter" in str(caught[0].message)


def test_divergence_flag_is_saved(tmp_path):
    model, _ = _fit(graph_terms(3, "line", fields="Z", couplings=("ZZ",)), _basis_state(3))
    assert load_model(model.save(tmp_path / "m.npz")).diverging_ is True


def test_command_line_shows_each_message_as_one_line(tmp_path):
    import subprocess
    import sys

    np.savez(tmp_path / "empty.npz", states=np.zeros((0, 4), complex))
    np.savez(tmp_path / "pure.npz", states=_basis_state(3))
    runs = {"empty.npz": ("error", []),
            "pure.npz": ("warning", ["--l2", "0", "--max-iter", "2"])}
    for name, (kind, options) in runs.items():
        proc = subprocess.run(
            [sys.executable, "-m", "thermoseed.recipes", "fit", name, "--out", "m.npz",
             "--quiet", *options], cwd=tmp_path, capture_output=True, text=True, timeout=120)
        lines = proc.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"thermoseed: {kind}:"), proc.stderr
    assert "--l2 > 0" in lines[0] and "--max-iter" not in lines[0]
