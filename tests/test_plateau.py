"""Plateau probes: Haar moments, exponential decay, identity blocks, gradients, strategies.

Circuits are ``V = U(h) U(e)^dag`` (bridge.plateau). The "ladder" template (RY, RZ, CNOT
chain) is used for the statistical checks: its CNOT chain scrambles fastest, so V reaches
2-design behaviour at the depths used here.
"""

from __future__ import annotations

import numpy as np
import pennylane as qml
import pytest

from thermoseed.bridge.ansatz import make_ansatz, unitary
from thermoseed.bridge.plateau.gradients import CircuitGradient
from thermoseed.bridge.plateau.probes import (
    probe,
    probe_circuit,
    probe_seeds,
    product_state,
    train_curve,
)
from thermoseed.bridge.plateau.stats import (
    fit_decay,
    gradient_matrix,
    gradient_stats,
    summarize_curves,
)
from thermoseed.bridge.plateau.strategies import (
    PretrainSettings,
    identity_blocks,
    make_strategy,
    small_angle,
    uniform,
)
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import LabelledData
from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data, train_test_split

#: Sigmas allowed between a sample variance and its Haar value (see test_haar_variance).
HAAR_SIGMAS = 4.0
#: Absolute agreement of analytic and central-difference gradients (h = 1e-6: truncation
#: error ~ h^2 |C'''| ~ 1e-12, round-off ~ eps / h ~ 1e-10).
FD_ATOL = 1e-8
FD_STEP = 1e-6


def magnet_data(n: int, samples: int = 12, seed: int = 1) -> LabelledData:
    train, test = train_test_split(magnet_phase_data(n, samples, seed=seed), seed=seed)
    return LabelledData(train.states, train.labels, test.states, test.labels)


def gradients(strategy: str, cost: str, ns, seeds: int) -> dict:
    """(R, K) gradient matrices per n: uniform-depth-n ladder circuits, seeds 0..R-1."""
    return {n: gradient_matrix(probe_seeds(strategy, n, n, cost, range(seeds),
                                           template="ladder")) for n in ns}


@pytest.fixture(scope="module")
def small_sweep():
    """Gradients for n = 2..6, 60 seeds, computed once for the decay tests."""
    cache = {}

    def get(strategy, cost):
        if (strategy, cost) not in cache:
            cache[strategy, cost] = gradients(strategy, cost, range(2, 7), 60)
        return cache[strategy, cost]

    return get


@pytest.mark.parametrize("n", [2, 3, 4, 5, 6])
def test_haar_variance_of_local_expectation(n):
    """Var over seeds of <Z_0> after a deep uniform circuit -> 1/(2^n + 1).

    Source: second moment of the Haar measure, E[|psi><psi|^{x2}] = P_sym / binom(d+1, 2)
    (Mele, arXiv:2307.08956, second moment of the Haar measure): Var<P> = 1/(d+1)
    for a non-identity Pauli P, d = 2^n, and E<P> = 0.
    Tolerance (derived here): the fourth moment from P_sym^(4) / binom(d+3, 4) is
    E<P>^4 = Tr(P^{x4} P_sym^(4)) / binom(d+3, 4) = [d(d+2)/8] / binom(d+3, 4)
    = 3 / ((d+1)(d+3)) (only the 3 double transpositions and 6 four-cycles contribute,
    Tr P^2 = Tr P^4 = d). The sample variance of R i.i.d. draws then has standard deviation
    sqrt((E<P>^4 - Var^2) / R) to leading order; we allow HAAR_SIGMAS of it. Depth:
    ceil(3n/2) layers per half, so V has >= 3n layers.
    """
    seeds = 200
    depth = -(-3 * n // 2)
    unit = probe_circuit("ladder", n, depth)
    engine = CircuitGradient(unit, "local")
    values = []
    for seed in range(seeds):
        rng = np.random.default_rng(seed)
        values.append(engine.value(uniform()(engine.shape, rng), product_state(n, rng)))
    values = np.array(values)
    d = 2**n
    haar_var = 1.0 / (d + 1)
    fourth = 3.0 / ((d + 1) * (d + 3))
    sd_var = np.sqrt((fourth - haar_var**2) / seeds)
    assert abs(values.var(ddof=1) - haar_var) < HAAR_SIGMAS * sd_var
    assert abs(values.mean()) < HAAR_SIGMAS * np.sqrt(haar_var / seeds)


@pytest.mark.parametrize("cost", ["local", "global"])
def test_uniform_gradients_decay_exponentially(cost, small_sweep):
    """Uniform-init circuits (depth n per half) have log2 Var decaying linearly in n with
    a slope whose bootstrap interval lies below zero.

    Source: McClean et al., "Barren plateaus in quantum neural network training
    landscapes", Nat. Commun. 9, 4812 (2018); global costs: Cerezo et al., Nat. Commun. 12,
    1791 (2021). Default suite n = 2..6; n = 2..8 in the slow test.
    """
    for statistic in ("mean_var", "max_var"):
        fit = fit_decay(small_sweep("uniform", cost), statistic=statistic, seed=7)
        assert fit.high < 0, fit[:7]


def test_identity_blocks_decay_slower_than_uniform_local_cost(small_sweep):
    """Local cost: identity-block initialisation keeps the largest gradient variance from
    decaying like the uniform one (the bootstrap intervals of the slopes are disjoint).

    Source: Grant, Wossnig, Ostaszewski & Benedetti, "An initialization strategy for
    addressing barren plateaus in parametrized quantum circuits", Quantum 3, 214 (2019),
    arXiv:1903.05076. The statistic is max_k Var (parameters near the measured qubit keep
    O(1) variance at V = I); the mean over k is diluted by the ~n * depth parameters far
    from Z_0 and is not asserted on.
    """
    ident = fit_decay(small_sweep("identity_blocks", "local"), statistic="max_var", seed=7)
    unif = fit_decay(small_sweep("uniform", "local"), statistic="max_var", seed=7)
    assert ident.low > unif.high, (ident[:7], unif[:7])


@pytest.mark.slow
def test_decay_full_range_slow():
    """As above for n = 2..8, 100 seeds (sources: McClean et al. 2018; Cerezo et al. 2021;
    Grant et al. 2019)."""
    for cost in ("local", "global"):
        mats = gradients("uniform", cost, range(2, 9), 100)
        for statistic in ("mean_var", "max_var"):
            assert fit_decay(mats, statistic=statistic, seed=7).high < 0
        if cost == "local":
            unif = fit_decay(mats, statistic="max_var", seed=7)
    ident = fit_decay(gradients("identity_blocks", "local", range(2, 9), 100),
                      statistic="max_var", seed=7)
    assert ident.low > unif.high


@pytest.mark.parametrize("template", ["ladder", "soft", "strong", "entangler"])
@pytest.mark.parametrize("cost", ["local", "global"])
def test_gradients_match_central_differences(template, cost):
    """Adjoint (lightning) and backprop gradients agree with each other, and with central
    finite differences on 8 random parameters (source: the central-difference formula
    (C(x+h) - C(x-h)) / 2h, error O(h^2))."""
    n = 3
    unit = probe_circuit(template, n, 2)
    rng = np.random.default_rng(11)
    params = rng.uniform(0, 2 * np.pi, (2 * unit.n_params,))
    psi = product_state(n, rng)
    adj = CircuitGradient(unit, cost, "adjoint")
    back = CircuitGradient(unit, cost, "backprop")
    assert adj.method.startswith("adjoint") and back.method.startswith("backprop")
    value, grad = adj(params, psi)
    value_b, grad_b = back(params, psi)
    assert abs(value - value_b) < 1e-12
    np.testing.assert_allclose(grad, grad_b, atol=1e-12)
    for k in rng.choice(np.flatnonzero(adj.active), size=8, replace=False):
        step = np.zeros(params.size)
        step[k] = FD_STEP
        fd = (adj(params + step, psi)[0] - adj(params - step, psi)[0]) / (2 * FD_STEP)
        assert grad.ravel()[k] == pytest.approx(fd, abs=FD_ATOL)


def test_classifier_gradient_matches_central_differences():
    """Classifier-cost probe gradient vs central differences of DownstreamCircuit.loss
    (source: central-difference formula, error O(h^2))."""
    from thermoseed.bridge.classifier import DownstreamCircuit

    data = magnet_data(2)
    res = probe("small_angle", 2, 1, "classifier", 5, data=data, scale=0.7)
    unit = probe_circuit("soft", 2, 1)
    circuit = DownstreamCircuit(unit, unit, (0,))
    x = small_angle(0.7)((2 * unit.n_params,), np.random.default_rng(
        np.random.SeedSequence(5).spawn(3)[0]))

    def loss(z):
        return float(circuit.loss(z, data.train_states, data.train_labels))

    fd = np.array([(loss(x + e) - loss(x - e)) / (2 * FD_STEP)
                   for e in FD_STEP * np.eye(x.size)])
    assert res.value == pytest.approx(loss(x), abs=1e-12)
    np.testing.assert_allclose(res.grad, fd, atol=FD_ATOL)


def test_identity_blocks_start_at_identity():
    """V = U(h) U(e)^dag equals the identity at identity-block init (Grant et al. 2019),
    checked with the ansatz's own unitary and with PennyLane's qml.matrix."""
    n = 3
    for template in ("ladder", "soft", "strong"):
        unit = probe_circuit(template, n, 2)
        flat = identity_blocks()((2 * unit.n_params,), np.random.default_rng(4))
        pair = flat.reshape(2, *unit.shape)
        assert not np.allclose(pair[0], 0)
        v = unitary(unit, pair[1]) @ np.conj(unitary(unit, pair[0])).T
        np.testing.assert_allclose(v, np.eye(2**n), atol=1e-12)
        mat = qml.matrix(lambda p, u=unit: (u.adjoint(p[0]), u(p[1])), wire_order=range(n))(pair)
        np.testing.assert_allclose(mat, np.eye(2**n), atol=1e-12)
    # at V = I the local cost is <psi|Z_0|psi> of the input product state
    res = probe("identity_blocks", n, 2, "local", 9, template="ladder")
    psi = product_state(n, np.random.default_rng(np.random.SeedSequence(9).spawn(3)[1]))
    z0 = np.kron(np.diag([1.0, -1.0]), np.eye(2 ** (n - 1)))
    assert res.value == pytest.approx(float(np.real(psi.conj() @ z0 @ psi)), abs=1e-12)


def test_strategies_same_seed_same_numbers():
    shape = (48,)
    for strat in (uniform(), small_angle(0.2), identity_blocks()):
        a = strat(shape, np.random.default_rng(3))
        b = strat(shape, np.random.default_rng(3))
        c = strat(shape, np.random.default_rng(4))
        assert np.array_equal(a, b) and not np.array_equal(a, c)
        assert a.shape == shape
    for name in ("uniform", "small_angle", "identity_blocks"):
        r1 = probe(name, 3, 2, "local", 6)
        r2 = probe(name, 3, 2, "local", 6)
        assert np.array_equal(r1.grad, r2.grad) and r1.value == r2.value
    # one seed's numbers do not depend on the other seeds probed in the same call
    batch = probe_seeds("uniform", 3, 2, "global", [1, 6, 2])
    assert np.array_equal(batch[1].grad, probe("uniform", 3, 2, "global", 6).grad)


def test_strategy_distributions():
    big = (2 * 200 * 50,)
    u = uniform()(big, np.random.default_rng(0))
    assert 0 <= u.min() and u.max() < 2 * np.pi
    s = small_angle(0.05)(big, np.random.default_rng(0))
    assert s.std() == pytest.approx(0.05, rel=0.02)  # 20000 draws: rel. SD of std ~ 0.5%
    ib = identity_blocks()(big, np.random.default_rng(0))
    assert np.array_equal(ib[: big[0] // 2], ib[big[0] // 2:])


def test_inactive_parameters_have_zero_gradient():
    """'soft' has no CRX on the last wire: its third angle there never enters the circuit."""
    res = probe("uniform", 3, 2, "local", 1, template="soft")
    pair_shape = (2, 2, 3, 3)
    inactive = np.zeros(pair_shape, dtype=bool)
    inactive[:, :, -1, 2] = True
    assert np.array_equal(res.active, ~inactive.ravel())
    assert np.all(res.grad[~res.active] == 0)
    stats = gradient_stats(probe_seeds("uniform", 3, 2, "local", range(5)))
    assert stats.n_active == int((~inactive).sum())


def test_pretrained_strategies_are_seeded_warm_starts():
    data = magnet_data(2, samples=12)
    settings = PretrainSettings(restarts=1, compile_iter=60)
    a = probe("pretrained", 2, 1, "classifier", 0, data=data, settings=settings)
    b = probe("pretrained", 2, 1, "classifier", 0, data=data, settings=settings)
    assert np.array_equal(a.grad, b.grad) and a.strategy == "pretrained"
    unit = probe_circuit("soft", 2, 1)
    strat = make_strategy("pretrained", data=data, encoder=unit, head=unit, settings=settings)
    flat = (2 * unit.n_params,)
    pair = strat(flat, np.random.default_rng(0)).reshape(2, *unit.shape)
    assert np.all(pair[1] == 0)  # head = identity (zeros of "soft")
    other = strat(flat, np.random.default_rng(1)).reshape(2, *unit.shape)
    assert not np.array_equal(pair[0], other[0])  # a different bootstrap + compile seed
    pert = make_strategy("pretrained_perturbed", scale=0.01, data=data, encoder=unit,
                         head=unit, settings=settings)
    moved = pert(flat, np.random.default_rng(0)).reshape(2, *unit.shape)
    assert pert.name == "pretrained_perturbed"
    assert 0 < np.abs(moved - pair).max() < 0.1  # same draw + N(0, 0.01^2) noise


def test_train_curve_records_each_step():
    data = magnet_data(2)
    a = train_curve("identity_blocks", 2, 1, 3, data, steps=4)
    b = train_curve("identity_blocks", 2, 1, 3, data, steps=4)
    assert a.loss.shape == a.accuracy.shape == (5,)
    assert np.array_equal(a.loss, b.loss) and np.array_equal(a.accuracy, b.accuracy)
    assert np.all((a.accuracy >= 0) & (a.accuracy <= 1))
    summary = summarize_curves([a, train_curve("identity_blocks", 2, 1, 4, data, steps=4)],
                               target=0.0)
    assert summary.loss_q.shape == (3, 5) and summary.steps_to_target == 0


def test_fit_decay_recovers_known_slope():
    """Synthetic gradients with Var = 2^{-n} exactly in distribution: the fitted slope's
    interval covers -1 (source: the generating model)."""
    rng = np.random.default_rng(0)
    mats = {n: rng.normal(0, 2.0 ** (-n / 2), size=(400, 30)) for n in range(2, 9)}
    fit = fit_decay(mats, statistic="mean_var", n_boot=500, seed=1)
    assert fit.low < -1 < fit.high and fit.high - fit.low < 0.1
    again = fit_decay(mats, statistic="mean_var", n_boot=500, seed=1)
    assert again.low == fit.low and again.high == fit.high


@pytest.mark.parametrize("call, message", [
    (lambda: probe("sideways", 2, 1), "unknown strategy"),
    (lambda: probe("uniform", 2, 1, "entropy"), "unknown cost"),
    (lambda: probe("uniform", 2, 1, "classifier"), "needs data"),
    (lambda: probe("pretrained", 2, 1, "local"), "needs labelled data"),
    (lambda: probe("uniform", 1, 1), "n_qubits"),
    (lambda: probe("uniform", 2, 1, seed=-1), "seed"),
    (lambda: small_angle(-0.1), "scale"),
    (lambda: probe("uniform", 3, 1, "classifier", data=magnet_data(2)),
     "but 3 qubits are expected"),
    (lambda: train_curve("uniform", 2, 1, 0, None), "needs data"),
    (lambda: identity_blocks()((7,), np.random.default_rng(0)), "even length"),
    (lambda: CircuitGradient(make_ansatz("soft", 2, 1), "local", "magic"), "method"),
])
def test_bad_input_raises_thermoseed_error(call, message):
    with pytest.raises(ThermoseedError, match=message):
        call()
