"""Measurement records: the classical-shadow estimator (unbiased, variance bound, PennyLane's
estimator on the same bits), counts, files, bad input, and fitting from records with error
bars on the coefficients (end to end, and the 68% coverage of refits)."""

import itertools
import warnings

import numpy as np
import pennylane as qml
import pytest

from thermoseed.pretrain import (
    MomentEstimates,
    TermSet,
    ThermoseedError,
    UnmeasuredTermWarning,
    VisibleGibbsModel,
    basis_counts,
    expectations,
    from_records,
    graph_terms,
    is_records_file,
    load_model,
    load_records,
    pauli_shots,
    save_records,
    simulate_counts,
    simulate_shots,
)
from thermoseed.pretrain.shadows import BasisBiasWarning, median_variance_factor


def all_strings(n: int, max_weight: int) -> TermSet:
    labels = ["".join(p) for p in itertools.product("IXYZ", repeat=n)
              if 0 < sum(c != "I" for c in p) <= max_weight]
    return TermSet(labels)


def hkp_covariance(rho: np.ndarray, terms: TermSet, shots: int) -> np.ndarray:
    """Exact covariance of the shadow means (Huang, Kueng & Preskill, Nat. Phys. 16, 1050
    (2020)): E[X(P) X(Q)] = 3^{|S_P & S_Q|} Tr(rho P Q) when P and Q agree letter by letter
    where both act, else 0; written here from the labels and hand-built matrices."""
    from numerics import kron_pauli

    labels = terms.labels
    m = np.array([np.trace(rho @ kron_pauli(lab)).real for lab in labels])
    second = np.zeros((len(labels), len(labels)))
    for j, a in enumerate(labels):
        for k, b in enumerate(labels):
            both = [(x, y) for x, y in zip(a, b, strict=True) if x != "I" and y != "I"]
            if any(x != y for x, y in both):
                continue
            product = "".join(x if y == "I" else y if x == "I" else "I"
                              for x, y in zip(a, b, strict=True))
            value = 1.0 if set(product) == {"I"} else np.trace(rho @ kron_pauli(product)).real
            second[j, k] = 3.0 ** len(both) * value
    return (second - np.outer(m, m)) / shots


# ---------------------------------------------------------------- the estimator


def test_shadow_unbiased_and_variance_within_3_to_the_w(helpers):
    rng = np.random.default_rng(1)
    n, shots = 3, 30000
    rho = helpers.random_density(2**n, rng)
    terms = all_strings(n, 3)
    est = from_records(simulate_shots(rho, shots, seed=2), terms)
    exact = expectations(rho, terms)
    # Source: HKP 2020, the snapshot estimator is unbiased: 63 strings within 4 SE.
    assert np.all(np.abs(est.values - exact) <= 4 * est.stderr)
    # Same source: Var X(P) = 3^w - Tr(rho P)^2 <= 3^w per snapshot (sampled to ~2-4%).
    weights = np.array([p.weight for p in terms])
    per_shot = est.stderr**2 * shots
    assert np.all(per_shot <= 1.1 * 3.0**weights)
    np.testing.assert_allclose(per_shot, 3.0**weights - exact**2, rtol=0.1)
    assert est.method == "shadow" and est.n_shots == shots
    # About 1/3^w of the shots measure a weight-w string in its own bases.
    np.testing.assert_allclose(est.matched / shots, 3.0**-weights, rtol=0.1)


def test_shadow_covariance_matches_the_hkp_formula(helpers):
    rng = np.random.default_rng(3)
    n, shots = 2, 40000
    rho = helpers.random_density(2**n, rng)
    terms = all_strings(n, 2)
    est = from_records(simulate_shots(rho, shots, seed=4), terms)
    exact = hkp_covariance(rho, terms, shots)
    scale = np.sqrt(np.outer(np.diag(exact), np.diag(exact)))
    # Sample covariance of 40k snapshots: off by a few percent of the diagonal scale.
    assert np.abs(est.covariance - exact).max() <= 0.05 * scale.max()


@pytest.mark.parametrize("groups", [1, 5])
def test_estimates_equal_pennylane_classical_shadow(groups, helpers):
    rng = np.random.default_rng(5)
    n = 3
    records = simulate_shots(helpers.random_density(2**n, rng), 5001, seed=6)
    terms = graph_terms(n, "ring", fields="XYZ", couplings=("XX", "YZ"), extra=["XYZ"])
    ours = from_records(records, terms, groups=groups).values
    # Source: PennyLane's estimator (qml.ClassicalShadow.expval, median of means over k
    # contiguous batches) on the same bits and recipes.
    shadow = qml.ClassicalShadow(records.outcomes.astype(int), records.bases.astype(int))
    paulis = {"X": qml.PauliX, "Y": qml.PauliY, "Z": qml.PauliZ}
    for j, label in enumerate(terms.labels):
        obs = qml.prod(*[paulis[c](w) for w, c in enumerate(label) if c != "I"])
        assert float(shadow.expval(obs, k=groups)) == pytest.approx(ours[j], abs=1e-12)


def test_pennylane_measured_shadow_reads_correctly():
    n = 3
    dev = qml.device("default.qubit", wires=n, seed=11)

    def prepare():
        qml.RY(0.7, wires=0)
        qml.CNOT(wires=[0, 1])
        qml.RX(1.1, wires=2)
        qml.CRZ(0.5, wires=[1, 2])
        qml.S(wires=1)

    @qml.set_shots(20000)
    @qml.qnode(dev)
    def shadow():
        prepare()
        return qml.classical_shadow(wires=range(n))

    @qml.qnode(qml.device("default.qubit", wires=n))
    def state():
        prepare()
        return qml.state()

    bits, recipes = shadow()
    records = pauli_shots(np.asarray(recipes), np.asarray(bits))
    terms = all_strings(n, 2)
    est = from_records(records, terms)
    psi = np.asarray(state())
    exact = expectations(np.outer(psi, psi.conj()), terms)
    # Source: qml.classical_shadow's bits/recipes (wire order, outcome 0 = eigenvalue +1)
    # against the exact expectations of the state PennyLane prepared.
    assert np.all(np.abs(est.values - exact) <= 4 * est.stderr)


def test_median_of_means_factor_and_error_bars():
    # Source: seeded Monte Carlo of the median of K standard normals (from scratch here).
    rng = np.random.default_rng(12)
    for k in (3, 5):
        medians = np.median(rng.standard_normal((400000, k)), axis=1)
        assert median_variance_factor(k) == pytest.approx(k * medians.var(), rel=0.01)
    assert median_variance_factor(1) == pytest.approx(1.0)
    # The reported standard error of a median-of-means estimate matches its spread over
    # independent record sets (one qubit, <X> = 0.6).
    rho = np.array([[0.5, 0.3], [0.3, 0.5]], dtype=complex)
    terms = TermSet(["X"])
    runs = [from_records(simulate_shots(rho, 3000, seed=s), terms, groups=5)
            for s in range(300)]
    values = np.array([r.values[0] for r in runs])
    stderr = np.mean([r.stderr[0] for r in runs])
    assert values.std() == pytest.approx(stderr, rel=0.15)
    assert abs(values.mean() - 0.6) < 4 * stderr / np.sqrt(len(runs)) + 0.01


def test_counts_estimate_diagonal_terms(helpers):
    rng = np.random.default_rng(13)
    n = 3
    rho = helpers.random_density(2**n, rng)
    terms = graph_terms(n, "ring", fields="Z", couplings=("ZZ",), extra=["ZZZ"])
    counts = simulate_counts(rho, 20000, seed=14)
    est = from_records(counts, terms)
    exact = expectations(rho, terms)
    # Source: Tr(rho Z_S) = sum_b rho_bb (-1)^{|S & b|}; multinomial sampling error.
    assert np.all(np.abs(est.values - exact) <= 4 * est.stderr)
    probs = np.diag(rho).real
    signs = np.array([[(-1) ** bin(b & p.z).count("1") for p in terms] for b in range(8)])
    exact_cov = (signs.T * probs) @ signs - np.outer(exact, exact)
    np.testing.assert_allclose(est.covariance * 20000, exact_cov, atol=0.03)
    with pytest.raises(ThermoseedError, match="only strings of Z and I.*XI"):
        from_records(counts, ["ZII", "XII"])
    as_dict = basis_counts({"000": 3, "101": 1})
    assert as_dict.n_qubits == 3 and as_dict.n_shots == 4
    est = from_records(as_dict, ["ZII", "IIZ", "ZIZ"])
    np.testing.assert_allclose(est.values, [0.5, 0.5, 1.0])


def test_simulator_is_seeded(helpers):
    rho = helpers.random_density(4, np.random.default_rng(15))
    a, b, c = (simulate_shots(rho, 500, seed=s) for s in (1, 1, 2))
    np.testing.assert_array_equal(a.bases, b.bases)
    np.testing.assert_array_equal(a.outcomes, b.outcomes)
    assert not np.array_equal(a.outcomes, c.outcomes)
    psi = np.array([1, 0, 0, 0], dtype=complex)
    shots = simulate_shots(psi, 300, seed=3)
    z_rows = np.all(shots.bases == 2, axis=1)
    assert np.all(shots.outcomes[z_rows] == 0)  # |00> measured in Z always reads 00


# ---------------------------------------------------------------- files


def test_records_files_round_trip(tmp_path, helpers):
    rho = helpers.random_density(8, np.random.default_rng(16))
    shots = simulate_shots(rho, 200, seed=1)
    path = save_records(tmp_path / "shots.npz", shots)
    assert is_records_file(path)
    back = load_records(path)
    np.testing.assert_array_equal(back.bases, shots.bases)
    np.testing.assert_array_equal(back.outcomes, shots.outcomes)
    counts = simulate_counts(rho, 100, seed=2)
    back = load_records(save_records(tmp_path / "counts.npz", counts))
    np.testing.assert_array_equal(back.counts, counts.counts)
    assert back.n_qubits == 3
    # A plain npz in PennyLane's names (recipes, bits) and a plain histogram.
    np.savez(tmp_path / "plain.npz", recipes=shots.bases.astype(int), bits=shots.outcomes)
    assert is_records_file(tmp_path / "plain.npz")
    np.testing.assert_array_equal(load_records(tmp_path / "plain.npz").bases, shots.bases)
    np.savez(tmp_path / "hist.npz", counts=np.array([3, 0, 1, 0]))
    assert load_records(tmp_path / "hist.npz").n_shots == 4
    np.savez(tmp_path / "states.npz", states=np.eye(2))
    assert not is_records_file(tmp_path / "states.npz")
    with pytest.raises(ThermoseedError, match="needs 'bases'"):
        load_records(tmp_path / "states.npz")


# ---------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    "bases,outcomes,kwargs,match",
    [
        (["XQZ"], [[0, 1, 0]], {}, r"basis letter 'Q' at shot 0, qubit 1"),
        ([[0, 3]], [[0, 1]], {}, "basis code 3"),
        (["XYZ", "XY"], [[0, 0, 0], [0, 0, 0]], {}, "different lengths"),
        (["XYZ"], [[0, 1]], {}, r"outcomes have shape \(1, 2\) but bases \(1, 3\)"),
        (["XYZ"], [0, 1, 0], {}, "outcomes have shape"),
        (["XYZ"], [[0, 2, 0]], {}, "bits 0/1"),
        ([], [], {}, "empty"),
        (["XYZ"], [[0, 1, 0]], {"n_qubits": 4}, "cover 3 qubits but n_qubits = 4"),
    ],
)
def test_bad_records_are_refused(bases, outcomes, kwargs, match):
    with pytest.raises(ThermoseedError, match=match):
        pauli_shots(bases, outcomes, **kwargs)


def test_bad_estimation_requests(helpers):
    rho = helpers.random_density(8, np.random.default_rng(17))
    shots = simulate_shots(rho, 50, seed=1)
    with pytest.raises(ThermoseedError, match="records cover 3 qubits but the term set acts "
                                              "on 4"):
        from_records(shots, ["ZZII"])
    with pytest.raises(ThermoseedError, match="must be odd"):
        from_records(shots, ["ZII"], groups=4)
    with pytest.raises(ThermoseedError, match="empty batch"):
        from_records(shots, ["ZII"], groups=49)
    with pytest.raises(ThermoseedError, match="counts are empty"):
        basis_counts(np.zeros(4, dtype=int))
    # Only X on wire 0: a term with Z there was never measured in its bases.
    only_x = pauli_shots(["XZ"] * 10, np.zeros((10, 2), dtype=int))
    with pytest.raises(ThermoseedError, match="never measured.*ZI.*missing='warn'"):
        from_records(only_x, ["XI", "ZI"])
    with pytest.warns(UnmeasuredTermWarning, match="ZI"):
        est = from_records(only_x, ["XI", "ZI"], missing="warn")
    assert est.values[1] == 0.0 and est.stderr[1] == 1.0
    with pytest.raises(ThermoseedError, match="another term set"):
        VisibleGibbsModel(["XI", "IZ"]).fit(est)
    # Fixed bases break the estimator's assumption (uniformly random letters): warned.
    with pytest.warns(BasisBiasWarning, match="wire 0 .*1/3"):
        from_records(pauli_shots(["XZ"] * 300, np.zeros((300, 2), dtype=int)), ["XI"])


# ---------------------------------------------------------------- fitting from records


def test_records_end_to_end_recovers_coefficients(tmp_path):
    n, shots = 6, 20000
    terms = graph_terms(n, "line", fields="XZ", couplings=("ZZ", "XX"))
    rng = np.random.default_rng(18)
    theta = rng.normal(scale=0.4, size=len(terms))
    truth = VisibleGibbsModel.from_coefficients(terms, theta)
    rho = truth.state()
    path = save_records(tmp_path / "records.npz", simulate_shots(rho, shots, seed=19))
    model = VisibleGibbsModel(terms).fit(path)
    # Tolerance from the shot count: Cov(theta) = F^-1 C F^-1 with C the exact HKP
    # covariance of the shadow means for 20k shots (hkp_covariance) and F = -d<P>/dtheta by
    # central differences of the model's moments (delta method).
    exact_c = hkp_covariance(rho, terms, shots)

    def predicted_stderr(at):
        step = 1e-5
        f = np.empty((len(terms), len(terms)))
        for k in range(len(terms)):
            e = np.zeros(len(terms))
            e[k] = step
            up = VisibleGibbsModel.from_coefficients(terms, at + e).moments()
            down = VisibleGibbsModel.from_coefficients(terms, at - e).moments()
            f[:, k] = -(up - down) / (2 * step)
        inv = np.linalg.inv(0.5 * (f + f.T))
        return np.sqrt(np.diag(inv @ exact_c @ inv))

    assert np.all(np.abs(model.coef_ - theta) <= 4 * predicted_stderr(theta))
    # The reported errors use F at the fitted coefficients (the truth is unknown there); the
    # curvature changes over one standard error, so compare at the same point.
    np.testing.assert_allclose(model.coef_stderr_, predicted_stderr(model.coef_), rtol=0.1)
    assert model.converged_ and np.isnan(model.data_entropy_)
    assert np.abs(model.moment_zscores_).max() < 0.05  # unpenalised: moments matched
    back = load_model(model.save(tmp_path / "model.npz"))
    np.testing.assert_array_equal(back.coef_stderr_, model.coef_stderr_)
    np.testing.assert_array_equal(back.coef_covariance_, model.coef_covariance_)
    np.testing.assert_array_equal(back.moment_zscores_, model.moment_zscores_)
    # With a penalty the residuals are no longer zero: the penalty's pull in standard errors.
    ridge = VisibleGibbsModel(terms, l2=0.05).fit(load_records(path))
    assert np.abs(ridge.moment_zscores_).max() > 0.1
    np.testing.assert_allclose(ridge.target_moments_ - ridge.moments(),
                               ridge.moment_zscores_ * ridge.target_stderr_, atol=1e-12)


def test_coefficient_errors_cover_68_percent_of_refits():
    n, shots, repeats = 3, 3000, 400
    terms = graph_terms(n, "line", fields="XZ", couplings=("ZZ", "XY"))
    theta = np.random.default_rng(20).normal(scale=0.5, size=len(terms))
    rho = VisibleGibbsModel.from_coefficients(terms, theta).state()
    fits, errors = [], []
    for r in range(repeats):
        model = VisibleGibbsModel(terms).fit(simulate_shots(rho, shots, seed=100 + r))
        fits.append(model.coef_)
        errors.append(model.coef_stderr_)
    fits, errors = np.array(fits), np.array(errors)
    inside = np.abs(fits - theta) <= errors
    # Source: a normal error covers 68.3% within one standard deviation; 4000 draws
    # (correlated within a fit; binomial sd 2.3% per coefficient), pooled tolerance 4 points.
    assert abs(inside.mean() - 0.683) < 0.04
    spread = fits.std(axis=0) / errors.mean(axis=0)  # sd of the ratio ~ 1/sqrt(800) = 3.5%
    assert np.all((spread > 0.85) & (spread < 1.15))


def test_fit_accepts_estimates_and_shot_objects(helpers):
    rho = helpers.random_density(4, np.random.default_rng(21))
    terms = graph_terms(2, "line")
    shots = simulate_shots(rho, 4000, seed=22)
    est = from_records(shots, terms)
    assert isinstance(est, MomentEstimates)
    a = VisibleGibbsModel(terms).fit(est)
    b = VisibleGibbsModel(terms).fit(shots)
    np.testing.assert_allclose(a.coef_, b.coef_)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        c = VisibleGibbsModel(terms, solver="adam", max_iter=4000, learning_rate=0.02,
                              tol=1e-4).fit(est, coef_errors=False)
    assert not hasattr(c, "coef_stderr_")
    assert np.abs(c.coef_ - a.coef_).max() < 5e-3
