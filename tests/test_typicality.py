"""Typicality engine: against the dense engine (moments, log Z, honest error bars, a full
fit), gradient consistency, the transverse-field Ising chain against its free-fermion
solution, engine choice by size, fitting records with it, and bad options."""

import warnings

import numpy as np
import pytest
import scipy.stats

from thermoseed.pretrain import (
    DenseEngine,
    TermSet,
    ThermoseedError,
    TypicalityEngine,
    VisibleGibbsModel,
    graph_terms,
    make_engine,
    simulate_shots,
)
from thermoseed.pretrain.engines.typicality import TypicalityEvaluation


def xz_ring(n: int) -> TermSet:
    return graph_terms(n, "ring", fields="XZ", couplings=("ZZ", "XX", "YY"))


def tfim_chain(n: int) -> tuple[TermSet, np.ndarray]:
    """Open transverse-field Ising chain H = -J sum Z_i Z_{i+1} - g sum X_i: terms and the
    coefficient vector for J = 1, g = 0.8."""
    zz = ["I" * i + "ZZ" + "I" * (n - i - 2) for i in range(n - 1)]
    x = ["I" * i + "X" + "I" * (n - i - 1) for i in range(n)]
    return TermSet(zz + x), np.r_[-np.ones(n - 1), -0.8 * np.ones(n)]


def free_fermion(n: int, coupling: float, field: float, beta: float) -> tuple[float, float]:
    """log Z and energy of the open chain (Lieb, Schultz & Mattis, Ann. Phys. 16, 407 (1961);
    Pfeuty, Ann. Phys. 57, 79 (1970)): A_ii = 2g, A_{i,i+-1} = -J, B_{i,i+1} = -J,
    B_{i+1,i} = J, L_k = sqrt(eig((A - B)(A + B))), log Z = sum log(2 cosh(beta L_k / 2)),
    U = -sum (L_k / 2) tanh(beta L_k / 2)."""
    a, b = np.diag(np.full(n, 2.0 * field)), np.zeros((n, n))
    for i in range(n - 1):
        a[i, i + 1] = a[i + 1, i] = -coupling
        b[i, i + 1], b[i + 1, i] = -coupling, coupling
    levels = np.sqrt(np.clip(np.linalg.eigvals((a - b) @ (a + b)).real, 0.0, None))
    return (float(np.sum(np.log(2 * np.cosh(beta * levels / 2)))),
            float(-np.sum(levels / 2 * np.tanh(beta * levels / 2))))


def _fisher_by_differences(terms, coef, step: float = 1e-5) -> np.ndarray:
    """F = Hessian of log Z = -d<P>/d theta, by central differences of the dense model's
    moments, symmetrised."""
    f = np.empty((len(terms), len(terms)))
    for k in range(len(terms)):
        e = np.zeros(len(terms))
        e[k] = step
        f[:, k] = -(VisibleGibbsModel.from_coefficients(terms, coef + e).moments()
                    - VisibleGibbsModel.from_coefficients(terms, coef - e).moments()) / (2 * step)
    return 0.5 * (f + f.T)


# ---------------------------------------------------------------- against the dense engine


def test_error_bars_are_honest_against_dense():
    vectors, seeds = 16, 40
    z_moments, z_log_z = [], []
    for n in (8, 9):
        terms = xz_ring(n)
        theta = np.random.default_rng(n).normal(scale=0.3, size=len(terms))
        exact = DenseEngine(terms).evaluate(theta)
        for seed in range(seeds):
            ev = TypicalityEngine(terms, vectors=vectors, seed=seed).evaluate(theta)
            z_moments.append((ev.moments - exact.moments) / ev.moment_errors)
            z_log_z.append((ev.log_z - exact.log_z) / ev.log_z_error)
    z_moments, z_log_z = np.concatenate(z_moments), np.array(z_log_z)
    # Source: an error bar estimated from R vectors makes the standardised error a Student t
    # with R - 1 degrees of freedom (normal limit 68.3% / 95.4%); 15 dof: 66.7% / 93.6%.
    t = scipy.stats.t(vectors - 1)
    inside1, inside2 = t.cdf(1) - t.cdf(-1), t.cdf(2) - t.cdf(-2)
    assert abs(np.mean(np.abs(z_moments) < 1) - inside1) < 0.06
    assert abs(np.mean(np.abs(z_moments) < 2) - inside2) < 0.04
    assert abs(np.mean(np.abs(z_log_z) < 1) - inside1) < 0.15  # 80 draws
    assert abs(z_moments.mean()) < 0.15  # no visible bias


def test_n10_within_error_bars_and_deterministic():
    terms = xz_ring(10)
    theta = np.random.default_rng(10).normal(scale=0.3, size=len(terms))
    exact = DenseEngine(terms).evaluate(theta)
    engine = make_engine("typicality", terms, vectors=8, seed=3)
    ev = engine.evaluate(theta)
    assert isinstance(ev, TypicalityEvaluation) and ev.n_vectors == 8
    assert np.all(np.abs(ev.moments - exact.moments) <= 4.5 * ev.moment_errors)
    assert abs(ev.log_z - exact.log_z) <= 4.5 * ev.log_z_error
    again = make_engine("typicality", terms, vectors=8, seed=3).evaluate(theta)
    np.testing.assert_array_equal(again.moments, ev.moments)  # same seed, same numbers
    assert again.log_z == ev.log_z
    # Vector r depends on (seed, r) only, not on how vectors are split between threads.
    serial = make_engine("typicality", terms, vectors=8, seed=3, workers=1).evaluate(theta)
    np.testing.assert_allclose(serial.moments, ev.moments, rtol=1e-12, atol=1e-14)
    other = make_engine("typicality", terms, vectors=8, seed=4).evaluate(theta)
    assert not np.array_equal(other.moments, ev.moments)
    # One vector per block (a tiny memory budget) gives the same numbers.
    blocked = make_engine("typicality", terms, vectors=8, seed=3, memory_gib=1e-6)
    np.testing.assert_allclose(blocked.evaluate(theta).moments, ev.moments, rtol=1e-12,
                               atol=1e-14)
    # The symmetric estimator <v|P|v>/<v|v> on the same vectors: another estimate, as good.
    sym = make_engine("typicality", terms, vectors=8, seed=3, estimator="symmetric")
    sev = sym.evaluate(theta)
    assert np.all(np.abs(sev.moments - exact.moments) <= 4.5 * sev.moment_errors)
    assert sev.log_z == ev.log_z and not np.array_equal(sev.moments, ev.moments)


def test_moments_are_the_gradient_of_the_estimated_log_z():
    terms = TermSet(["XYZI", "ZZII", "IXXI", "IIYY", "ZIIZ", "IZIX"])  # odd-Y strings too
    theta = np.random.default_rng(2).normal(scale=0.7, size=len(terms))
    engine = TypicalityEngine(terms, vectors=4, seed=5)
    ev = engine.evaluate(theta)
    step = 1e-5
    for j in range(len(terms)):
        e = np.zeros(len(terms))
        e[j] = step
        fd = (engine.evaluate(theta + e).log_z - engine.evaluate(theta - e).log_z) / (2 * step)
        assert -fd == pytest.approx(ev.moments[j], abs=1e-7)


def test_diagonal_hamiltonian_is_exact():
    # Random-phase vectors: <r|D|r> = Tr D for diagonal D, so every vector is exact.
    terms = graph_terms(6, "ring", fields="Z", couplings=("ZZ",))
    theta = np.random.default_rng(3).normal(size=len(terms))
    exact = DenseEngine(terms).evaluate(theta)
    ev = TypicalityEngine(terms, vectors=2, seed=0).evaluate(theta)
    np.testing.assert_allclose(ev.moments, exact.moments, atol=1e-9)
    assert ev.log_z == pytest.approx(exact.log_z, abs=1e-9)


@pytest.mark.slow
def test_full_fit_lands_near_the_dense_fit(helpers):
    n = 8
    terms = graph_terms(n, "line", fields="XZ", couplings=("ZZ", "XX"))
    theta = np.random.default_rng(4).normal(scale=0.3, size=len(terms))
    rho = VisibleGibbsModel.from_coefficients(terms, theta, engine="dense").state()
    dense = VisibleGibbsModel(terms, engine="dense", tol=1e-7).fit(rho)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # converges: the gradient is the objective's own
        typical = VisibleGibbsModel(terms, engine={"name": "typicality", "vectors": 16},
                                    tol=1e-6).fit(rho)
    assert typical.converged_
    # Tolerance from the engine's own error: theta moves by F^-1 (moment error), F the
    # Hessian of log Z (dense, by central differences of the dense moments).
    ev = typical.evaluate()
    inv = np.linalg.inv(_fisher_by_differences(terms, dense.coef_))
    engine_stderr = np.sqrt(np.diag(inv @ ev.moment_covariance @ inv))
    assert np.all(np.abs(typical.coef_ - dense.coef_) <= 4 * engine_stderr)
    assert np.abs(typical.coef_ - dense.coef_).max() < 0.1


# ---------------------------------------------------------------- free fermions


@pytest.mark.parametrize("n,vectors", [(14, 16), (16, 8)])
def test_transverse_field_ising_against_free_fermions(n, vectors):
    beta = 1.0
    terms, coef = tfim_chain(n)
    ev = TypicalityEngine(terms, vectors=vectors, seed=n).evaluate(beta * coef)
    log_z, energy = free_fermion(n, 1.0, 0.8, beta)
    energy_est = float(coef @ ev.moments)
    energy_err = float(np.sqrt(coef @ ev.moment_covariance @ coef))
    # Source: free-fermion solution of the open chain (free_fermion's docstring).
    assert abs(ev.log_z - log_z) <= 4 * ev.log_z_error
    assert abs(energy_est - energy) <= 4 * energy_err
    assert abs(energy_est - energy) / abs(energy) < 0.02
    assert ev.log_z_error < 0.01 * log_z


# ---------------------------------------------------------------- engine choice, records


def test_auto_engine_by_size_with_override():
    small = VisibleGibbsModel(xz_ring(12))
    assert isinstance(small._make_engine(xz_ring(12)), DenseEngine)
    terms = xz_ring(13)
    engine = VisibleGibbsModel(terms, seed=7)._make_engine(terms)
    assert isinstance(engine, TypicalityEngine) and engine.seed == 7
    forced = VisibleGibbsModel(terms, engine="dense")._make_engine(terms)
    assert isinstance(forced, DenseEngine)
    options = VisibleGibbsModel(terms, engine={"name": "auto", "vectors": 4, "seed": 2})
    assert options._make_engine(terms).vectors == 4 and options._make_engine(terms).seed == 2
    # Past the dense engine's size a state cannot be formed at all: a clear error.
    wide = TermSet(["Z" + "I" * 14, "XX" + "I" * 13, "I" * 14 + "X"])
    big = VisibleGibbsModel.from_coefficients(wide, [0.3, -0.2, 0.1])
    assert isinstance(big.evaluate(), TypicalityEvaluation)
    with pytest.raises(ThermoseedError, match="never forms sigma.*engine='dense'"):
        big.state()
    with pytest.raises(ThermoseedError, match="never forms sigma"):
        big.spectrum()


def test_state_of_a_typicality_model_is_the_exact_one():
    terms = xz_ring(6)
    theta = np.random.default_rng(8).normal(scale=0.5, size=len(terms))
    typical = VisibleGibbsModel.from_coefficients(terms, theta, engine="typicality")
    exact = VisibleGibbsModel.from_coefficients(terms, theta, engine="dense")
    np.testing.assert_allclose(typical.state(), exact.state(), atol=1e-13)
    np.testing.assert_allclose(typical.spectrum(), exact.spectrum(), atol=1e-12)
    assert isinstance(typical.evaluate(), TypicalityEvaluation)


@pytest.mark.slow
def test_records_fit_with_typicality_reports_errors():
    n = 8
    terms = graph_terms(n, "line", fields="XZ", couplings=("ZZ",))
    theta = np.random.default_rng(6).normal(scale=0.3, size=len(terms))
    rho = VisibleGibbsModel.from_coefficients(terms, theta, engine="dense").state()
    records = simulate_shots(rho, 20000, seed=7)
    dense = VisibleGibbsModel(terms, engine="dense").fit(records)
    typical = VisibleGibbsModel(terms, engine={"name": "typicality", "vectors": 16}
                                ).fit(records)
    # The typicality errors add the engine's own moment noise to the records' (F from forward
    # differences of its moments). Check against the same sum built from outside pieces:
    # the dense fit's errors (exact F, records only) and F^-1 Cov_engine F^-1 with F by
    # central differences of the dense moments.
    inv = np.linalg.inv(_fisher_by_differences(terms, typical.coef_))
    engine_var = np.diag(inv @ typical.evaluate().moment_covariance @ inv)
    combined = np.sqrt(dense.coef_stderr_**2 + engine_var)
    np.testing.assert_allclose(typical.coef_stderr_, combined, rtol=0.25)
    assert np.all(np.abs(typical.coef_ - theta) <= 4 * typical.coef_stderr_)


# ---------------------------------------------------------------- bad options


@pytest.mark.parametrize(
    "options,match",
    [
        ({"vectors": 1}, "vectors = 1 is out of range"),
        ({"tol": 2.0}, "tol = 2.0"),
        ({"memory_gib": 0}, "memory_gib"),
        ({"seed": -1}, "seed"),
        ({"colour": "red"}, "does not take options"),
        ({"estimator": "median"}, "estimator = 'median'"),
    ],
)
def test_bad_options(options, match):
    with pytest.raises(ThermoseedError, match=match):
        make_engine("typicality", xz_ring(4), **options)


def test_bad_sizes_and_names():
    with pytest.raises(ThermoseedError, match="at most 22 qubits"):
        TypicalityEngine(TermSet(["Z" + "I" * 22]))
    with pytest.raises(ThermoseedError, match="unknown engine 'fast'"):
        make_engine("fast", xz_ring(4))
    with pytest.raises(ThermoseedError, match="needs a 'name'"):
        VisibleGibbsModel(xz_ring(4), engine={"vectors": 4}).fit(np.eye(16) / 16)
