"""GibbsClassifier, single-shot measurements and term-set growth (pretrain/classifier.py,
pretrain/term_growth.py)."""

from __future__ import annotations

import numpy as np
import pytest
from numerics import kron_pauli
from scipy.special import logsumexp, softmax

from thermoseed.pretrain import (
    GibbsClassifier,
    NotFittedError,
    ThermoseedError,
    VisibleGibbsModel,
    candidate_terms,
    graph_terms,
    grow_terms,
    helstrom_measurement,
    helstrom_success,
    load_classifier,
    pretty_good_measurement,
    save_model,
    success_probability,
)


def random_density(d, rng, rank=None):
    k = d if rank is None else rank
    g = rng.standard_normal((d, k)) + 1j * rng.standard_normal((d, k))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def random_state(d, rng):
    v = rng.standard_normal(d) + 1j * rng.standard_normal(d)
    return v / np.linalg.norm(v)


def near_basis_states(index, count, rng, n=3, noise=0.35):
    """Mixed states ``(1 - noise)|index><index| + noise * random`` on n qubits."""
    d = 2**n
    out = []
    for _ in range(count):
        e = np.zeros((d, d), complex)
        e[index, index] = 1.0
        out.append((1 - noise) * e + noise * random_density(d, rng))
    return np.array(out)


def separable_task(rng, count=20):
    x = np.concatenate([near_basis_states(0, count, rng), near_basis_states(7, count, rng)])
    return x, np.repeat([0, 1], count)


TERMS3 = graph_terms(3, "line", fields="XZ", couplings=("ZZ",))


@pytest.fixture(scope="module")
def fitted():
    rng = np.random.default_rng(11)
    x, y = separable_task(rng)
    return {rule: GibbsClassifier(TERMS3, rule=rule).fit(x, y)
            for rule in ("many-copy", "single-shot")}


# ---------------------------------------------------------------- Helstrom and PGM


@pytest.mark.parametrize("p0", [0.5, 0.3, 0.8, 0.05])
def test_helstrom_pure_states_closed_form(p0):
    # Source: Helstrom, Quantum Detection and Estimation Theory (1976):
    # P* = 1/2 (1 + sqrt(1 - 4 p0 p1 |<a|b>|^2)) for two pure states.
    rng = np.random.default_rng(1)
    a, b = random_state(4, rng), random_state(4, rng)
    expected = 0.5 * (1 + np.sqrt(1 - 4 * p0 * (1 - p0) * abs(np.vdot(a, b)) ** 2))
    sa, sb = np.outer(a, a.conj()), np.outer(b, b.conj())
    assert helstrom_success(sa, sb, p0) == pytest.approx(expected, abs=1e-12)
    povm = helstrom_measurement(sa, sb, p0)
    assert success_probability(povm, [sa, sb], [p0, 1 - p0]) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("p0", [0.5, 0.2])
def test_helstrom_commuting_states_is_the_classical_bayes_rate(p0):
    # Source: classical Bayes decision rule (from memory): success sum_x max(p0 q0(x), p1 q1(x)),
    # at equal priors 1/2 (1 + TV(q0, q1)) with TV = 1/2 sum_x |q0(x) - q1(x)|.
    rng = np.random.default_rng(2)
    q0, q1 = rng.dirichlet(np.ones(8)), rng.dirichlet(np.ones(8))
    bayes = np.maximum(p0 * q0, (1 - p0) * q1).sum()
    if p0 == 0.5:
        assert bayes == pytest.approx(0.5 * (1 + 0.5 * np.abs(q0 - q1).sum()), abs=1e-14)
    assert helstrom_success(np.diag(q0), np.diag(q1), p0) == pytest.approx(bayes, abs=1e-12)


def test_pretty_good_measurement_is_a_povm():
    rng = np.random.default_rng(3)
    mixed = [random_density(4, rng) for _ in range(3)]
    pure = [np.outer(v, v.conj()) for v in (random_state(4, rng) for _ in range(3))]
    for states, priors in [(mixed, [0.2, 0.3, 0.5]), (pure, None)]:  # pure: rank-3 rho_bar
        povm = pretty_good_measurement(states, priors)
        assert povm.shape == (3, 4, 4)
        for m in povm:
            assert np.allclose(m, m.conj().T, atol=1e-12)
            assert np.linalg.eigvalsh(m).min() > -1e-10
        assert np.allclose(povm.sum(axis=0), np.eye(4), atol=1e-10)
        p = np.full(3, 1 / 3) if priors is None else np.array(priors)
        success = success_probability(povm, states, priors)
        assert p.max() - 1e-12 <= success <= 1.0 + 1e-12  # at least guessing the likeliest


def test_pretty_good_measurement_equals_helstrom_for_two_equiprobable_pure_states():
    # Source: Hausladen & Wootters, "A 'pretty good' measurement for distinguishing quantum
    # states" (1994): for two equiprobable pure states the PGM is the optimal (Helstrom) one.
    rng = np.random.default_rng(4)
    a, b = random_state(4, rng), random_state(4, rng)
    states = [np.outer(a, a.conj()), np.outer(b, b.conj())]
    pgm = pretty_good_measurement(states)
    hel = helstrom_measurement(*states)
    np.testing.assert_allclose(pgm, hel, atol=1e-9)
    closed = 0.5 * (1 + np.sqrt(1 - abs(np.vdot(a, b)) ** 2))  # Helstrom (1976), p0 = p1
    assert success_probability(pgm, states) == pytest.approx(closed, abs=1e-10)


def test_measurement_input_errors():
    rho = np.eye(2) / 2
    with pytest.raises(ThermoseedError, match="p0"):
        helstrom_success(rho, rho, 1.5)
    with pytest.raises(ThermoseedError, match="sum to"):
        pretty_good_measurement([rho, rho, rho], [0.5, 0.5, 0.5])
    with pytest.raises(ThermoseedError, match="trace"):
        helstrom_success(rho, 2 * rho)


# ---------------------------------------------------------------- many-copy rule


def test_many_copy_on_commuting_models_is_the_classical_log_likelihood_rule():
    # Source: classical Bayes / log-likelihood-ratio rule (from memory): for diagonal sigma_c
    # the score is sum_x rho_xx log sigma_c(x) + log p_c; sigma_c from hand-built Z matrices.
    rng = np.random.default_rng(5)
    labels = ["ZII", "IZI", "IIZ", "ZZI", "IZZ", "ZIZ", "ZZZ"]
    centres = [rng.dirichlet(np.ones(8)) for _ in range(3)]
    counts = [12, 6, 9]
    x = np.array([np.diag(rng.dirichlet(40 * centres[c])) for c in range(3)
                  for _ in range(counts[c])])
    y = np.repeat([0, 1, 2], counts)
    clf = GibbsClassifier(labels, priors="empirical").fit(x, y)
    np.testing.assert_allclose(clf.priors_, np.array(counts) / sum(counts))
    log_sigma = []
    for theta in clf.coef_:
        h = sum(t * kron_pauli(lab) for t, lab in zip(theta, labels, strict=True))
        energies = np.diag(h).real
        log_sigma.append(-energies - logsumexp(-energies))
    test_diag = [rng.dirichlet(np.ones(8)) for _ in range(10)]
    test_vecs = [random_state(8, rng) for _ in range(5)]
    scores = [[p @ ls + np.log(prior) for ls, prior in zip(log_sigma, clf.priors_, strict=True)]
              for p in test_diag + [abs(v) ** 2 for v in test_vecs]]
    by_hand = np.array(scores)
    got = np.concatenate([clf.predict_proba(np.array([np.diag(p) for p in test_diag])),
                          clf.predict_proba(np.array(test_vecs))])
    np.testing.assert_allclose(got, softmax(by_hand, axis=1), atol=1e-10)
    assert np.array_equal(np.argmax(by_hand, axis=1),
                          np.concatenate([clf.predict(np.array([np.diag(p) for p in test_diag])),
                                          clf.predict(np.array(test_vecs))]))


def test_decision_observable_gives_the_two_class_posterior(fitted):
    # Tr(rho D) from hand-built Pauli matrices (tests/numerics.py), not from pauli_traces.
    clf = fitted["many-copy"]
    rng = np.random.default_rng(6)
    rhos = np.array([random_density(8, rng) for _ in range(5)])
    d = clf.decision_observable()
    dense = sum(c * kron_pauli(lab) for c, lab in zip(d.coeffs, d.terms.labels, strict=True)) \
        + d.offset * np.eye(8)
    expval = np.einsum("ab,kba->k", dense, rhos).real
    np.testing.assert_allclose(clf.predict_proba(rhos)[:, 1], 1 / (1 + np.exp(expval)),
                               atol=1e-10)
    np.testing.assert_allclose(d.coeffs, clf.coef_[1] - clf.coef_[0])


# ---------------------------------------------------------------- fitting and predictions


@pytest.mark.parametrize("rule", ["many-copy", "single-shot"])
def test_fit_separates_a_small_task_on_held_out_states(fitted, rule):
    clf = fitted[rule]
    rng = np.random.default_rng(12)
    x_test, y_test = separable_task(rng, count=25)
    assert clf.score(x_test, y_test) >= 0.9  # chance is 0.5
    probs = clf.predict_proba(x_test)
    assert probs.min() >= 0 and np.allclose(probs.sum(axis=1), 1.0, atol=1e-12)
    vecs = np.array([random_state(8, rng) for _ in range(4)])
    assert np.allclose(clf.predict_proba(vecs).sum(axis=1), 1.0, atol=1e-12)
    assert clf.coef_.shape == (2, len(TERMS3)) and clf.log_partition_.shape == (2,)
    assert all(isinstance(m, VisibleGibbsModel) for m in clf.models_)
    assert 0.5 < clf.model_success_ <= 1.0 and 0.5 < clf.data_success_ <= 1.0


def test_single_shot_measurement_and_data_bound():
    rng = np.random.default_rng(13)
    x, y = separable_task(rng, count=10)
    clf = GibbsClassifier(TERMS3, rule="single-shot").fit(x, y)
    povm = clf.measurement()
    assert np.allclose(povm.sum(axis=0), np.eye(8), atol=1e-10)
    assert np.allclose(povm[1] @ povm[1], povm[1], atol=1e-8)  # Helstrom: a projector
    np.testing.assert_allclose(clf.predict_proba(x), np.einsum("cab,kba->kc", povm, x).real,
                               atol=1e-12)
    # Source: Helstrom (1976), P* = 1/2 (1 + ||p1 rho_1 - p0 rho_0||_1), on the class means.
    gamma = 0.5 * x[y == 1].mean(axis=0) - 0.5 * x[y == 0].mean(axis=0)
    expected = 0.5 * (1 + np.abs(np.linalg.eigvalsh(gamma)).sum())
    assert clf.data_success_ == pytest.approx(expected, abs=1e-10)
    # The data bound holds for this classifier's own measurement on the training states.
    assert np.mean(clf.predict_proba(x)[np.arange(len(y)), y]) <= clf.data_success_ + 1e-12


def test_three_classes_use_the_pretty_good_measurement():
    rng = np.random.default_rng(14)
    x = np.concatenate([near_basis_states(k, 6, rng) for k in (0, 3, 7)])
    y = np.repeat([0, 1, 2], 6)
    clf = GibbsClassifier(TERMS3, rule="single-shot", priors=[0.2, 0.3, 0.5]).fit(x, y)
    assert clf.measurement().shape == (3, 8, 8)
    assert np.allclose(clf.measurement().sum(axis=0), np.eye(8), atol=1e-9)
    assert clf.score(x, y) > 0.8
    assert 0.5 <= clf.model_success_ <= 1.0
    with pytest.raises(ThermoseedError, match="two classes"):
        clf.decision_observable()


def test_priors_validation():
    rng = np.random.default_rng(15)
    x, y = separable_task(rng, count=4)
    for priors, message in [([0.5, 0.3, 0.2], "2 positive"), ([1.2, -0.2], "2 positive"),
                            ([0.6, 0.6], "sum to"), ("uniform", "unknown priors")]:
        with pytest.raises(ThermoseedError, match=message):
            GibbsClassifier(TERMS3, priors=priors).fit(x, y)
    clf = GibbsClassifier(TERMS3, priors=[0.25, 0.75]).fit(x, y)
    np.testing.assert_allclose(clf.priors_, [0.25, 0.75])
    assert clf.priors == [0.25, 0.75]  # hyperparameter stored unchanged


def test_bad_input_errors():
    rng = np.random.default_rng(16)
    x, y = separable_task(rng, count=4)
    clf = GibbsClassifier(TERMS3)
    with pytest.raises(NotFittedError, match="not fitted"):
        clf.predict(x)
    cases = [
        (x, y[:-1], "labels of shape"),
        (x, np.zeros(len(y), int), "one class only"),
        (x, y.astype(float), "integers"),
        (x, np.where(y == 1, 2, 0), r"classes \[1\]"),
        (x, y - 1, "negative"),
        (np.where(np.arange(8) == 0, np.nan, x), y, "NaN"),
        (np.tile(np.eye(4) / 4, (len(y), 1, 1)), y, "qubits"),
        (x[..., None], y, "shape"),
    ]
    for states, labels, message in cases:
        with pytest.raises(ThermoseedError, match=message):
            clf.fit(states, labels)
    with pytest.raises(ThermoseedError, match="rule"):
        GibbsClassifier(TERMS3, rule="majority").fit(x, y)
    clf.fit(x, y)
    with pytest.raises(ThermoseedError, match="qubits"):
        clf.predict(np.eye(4, dtype=complex)[:2])


def test_save_load_round_trip(tmp_path, fitted):
    rng = np.random.default_rng(17)
    x_test, _ = separable_task(rng, count=5)
    for rule, clf in fitted.items():
        path = clf.save(tmp_path / f"{rule}.npz")
        loaded = load_classifier(path)
        assert loaded.get_params() | {"terms": None} == clf.get_params() | {"terms": None}
        assert loaded.terms_ == clf.terms_
        np.testing.assert_allclose(loaded.predict_proba(x_test), clf.predict_proba(x_test),
                                   rtol=0, atol=1e-12)
        assert np.array_equal(loaded.predict(x_test), clf.predict(x_test))
        assert loaded.data_success_ == clf.data_success_
        assert loaded.model_success_ == pytest.approx(clf.model_success_, abs=1e-12)
    model_path = save_model(fitted["many-copy"].models_[0], tmp_path / "model.npz")
    with pytest.raises(ThermoseedError, match="gibbs-classifier"):
        load_classifier(model_path)


# ---------------------------------------------------------------- term growth


def xx_task(rng, count):
    """3-qubit states ``(I + a X0X1 + sum_k b_k Q_k)/8``: classes differ only in a = +-0.4;
    sum of |coefficients| < 1 keeps every state positive (each Pauli has eigenvalues +-1)."""
    others = ["ZII", "IZZ", "IXI", "YIY", "IIX"]
    out = []
    for sign in (1, -1):
        for _ in range(count):
            a = sign * 0.4 + rng.uniform(-0.05, 0.05)
            m = np.eye(8) + a * kron_pauli("XXI")
            m = m + sum(rng.uniform(-0.1, 0.1) * kron_pauli(q) for q in others)
            out.append(m / 8)
    return np.array(out), np.repeat([0, 1], count)


def test_grow_terms_picks_the_discriminating_term_first_and_is_seeded():
    rng = np.random.default_rng(18)
    x, y = xx_task(rng, 15)
    pool = candidate_terms(3, 2, "line")
    first = grow_terms(x, y, pool, max_terms=4, seed=3)
    assert first.terms.labels[0] == "XXI"
    assert first.accuracy.max() >= 0.9 and len(first.accuracy) <= 4
    assert first.scores[0] == max(first.scores)
    again = grow_terms(x, y, pool, max_terms=4, seed=3)
    assert again.terms == first.terms
    assert np.array_equal(again.accuracy, first.accuracy)
    assert np.array_equal(again.scores, first.scores)
    with pytest.raises(ThermoseedError, match="unknown parameter"):
        grow_terms(x, y, pool, classifier={"copies": 3})
    with pytest.raises(ThermoseedError, match="test_fraction"):
        grow_terms(x, y, pool, test_fraction=1.0)


def test_candidate_terms_counts_and_parity():
    # Count by hand: line on 4 qubits, weight <= 2: 4 sites * 3 + 3 edges * 9 = 39; parity:
    # ZZZZ plus the 2^3 = 8 XY strings with an even number of Y.
    terms = candidate_terms(4, 2, "line")
    assert len(terms) == 39 + 1 + 8
    parity = [lab for lab in terms.labels if "I" not in lab]
    assert parity[0] == "ZZZZ" and "XXXX" in parity
    assert all(lab.count("Y") % 2 == 0 and "Z" not in lab for lab in parity[1:])
    assert "XIIX" not in terms.labels and "XIIX" in candidate_terms(4, 2, "ring").labels
    assert all(p.weight <= 2 for p in candidate_terms(4, 2, "line", parity=False))
    capped = candidate_terms(4, 2, "line", max_count=10)
    assert capped.labels == terms.labels[:10]


def test_cooled_class_states_and_the_auto_choice():
    """cooling = beta: the single-shot rule separates exp(-beta H_c)/Tr (checked against
    scipy.linalg.expm); "auto" takes the grid value whose rule classifies the training states
    best (checked by refitting at every grid value)."""
    import scipy.linalg

    from thermoseed.pretrain.classifier import COOLING_GRID
    from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data

    batch = magnet_phase_data(3, 24, seed=2)
    terms = graph_terms(3, "line", fields="XZ", couplings=("ZZ",))
    fixed = GibbsClassifier(terms, rule="single-shot", cooling=4.0).fit(batch.states,
                                                                         batch.labels)
    for c, model in enumerate(fixed.models_):
        cooled = scipy.linalg.expm(-4.0 * model.hamiltonian())
        np.testing.assert_allclose(fixed.class_states()[c], cooled / np.trace(cooled),
                                   atol=1e-10)
    scores = {beta: GibbsClassifier(terms, rule="single-shot", cooling=beta).fit(
        batch.states, batch.labels).score(batch.states, batch.labels) for beta in COOLING_GRID}
    auto = GibbsClassifier(terms, rule="single-shot").fit(batch.states, batch.labels)
    best = max(scores.values())
    assert auto.cooling_ == min(b for b, s in scores.items() if s == best)
    assert auto.score(batch.states, batch.labels) == best
    with pytest.raises(ThermoseedError, match="cooling = 0.5 must be >= 1"):
        GibbsClassifier(terms, cooling=0.5).fit(batch.states, batch.labels)
