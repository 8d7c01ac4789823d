"""Warm start (bridge/seed.py) and the downstream classifier (bridge/discriminative.py).

External references: PennyLane ``qml.matrix`` and ``default.qubit``/``default.mixed``
simulation of the emitted circuits, and central finite differences for gradients.
"""

from __future__ import annotations

import autograd
import numpy as np
import pennylane as qml
import pytest
from conftest import random_density, random_state
from numerics import central_differences
from pennylane import numpy as pnp

from thermoseed.bridge.ansatz import make_ansatz, unitary, user_ansatz
from thermoseed.bridge.classifier import DownstreamCircuit, train_classifier
from thermoseed.bridge.compile import compile_latent, compile_purified
from thermoseed.bridge.warm_starts import identity_head, warm_start
from thermoseed.pretrain import VisibleGibbsModel, graph_terms
from thermoseed.pretrain.errors import ThermoseedError

IDENTITY_ATOL = 1e-12


def _bits(x, n):
    return [(x >> (n - 1 - k)) & 1 for k in range(n)]


@pytest.fixture(scope="module")
def model3():
    """A Gibbs model fitted to a random 3-qubit density matrix."""
    rho = random_density(8, np.random.default_rng(30))
    terms = graph_terms(3, "line", fields="XZ", couplings=("ZZ", "XX"))
    return VisibleGibbsModel(terms, l2=1e-3).fit(rho)


@pytest.fixture(scope="module")
def compiled3(model3):
    """k = 3 latent states; quality does not matter for the identities tested here."""
    return compile_latent(model3, make_ansatz("strong", 3, 2), k=3, restarts=1, seed=0,
                          max_iter=40)


def _circuit(result, head_layers=1, readout=(0,), n_classes=2):
    head = make_ansatz("soft", result.n_visible, head_layers)
    return DownstreamCircuit(result.ansatz, head, readout=readout, n_classes=n_classes), head


# ----------------------------------------------------------------------- identity head


@pytest.mark.parametrize("n", [2, 3, 4])
@pytest.mark.parametrize("layers", [1, 2])
def test_head_is_identity_at_warm_start(n, layers):
    head = make_ansatz("soft", n, layers)
    params = identity_head(head)
    assert params.shape == head.shape
    np.testing.assert_allclose(np.asarray(unitary(head, params)), np.eye(2**n),
                               atol=IDENTITY_ATOL, rtol=0)
    # Source: PennyLane's own gate matrices via qml.matrix.
    ref = qml.matrix(lambda: head(params), wire_order=list(range(n)))()
    np.testing.assert_allclose(ref, np.eye(2**n), atol=IDENTITY_ATOL, rtol=0)


def test_warm_started_circuit_is_the_encoder_adjoint(compiled3):
    circuit, head = _circuit(compiled3, head_layers=2)
    flat = warm_start(compiled3, head=head)
    assert flat.shape == (circuit.n_params,)
    enc, head_params = circuit.split(flat)
    assert np.array_equal(np.asarray(enc), compiled3.params)
    assert np.array_equal(np.asarray(head_params), np.zeros(head.shape))
    # Source: qml.matrix of U(phi) from PennyLane; W = I U^dag at the warm start.
    u = qml.matrix(lambda: compiled3.ansatz(compiled3.params), wire_order=[0, 1, 2])()
    np.testing.assert_allclose(np.asarray(circuit.unitary(np.asarray(flat))), u.conj().T,
                               atol=1e-12)


def test_identity_head_choices():
    with pytest.raises(ThermoseedError, match="not the identity at zero"):
        identity_head(make_ansatz("strong", 2, 1))

    def rx_head(params, wires):
        for k, w in enumerate(wires):
            qml.RX(params[k], wires=w)

    head = user_ansatz(rx_head, (2,), wires=[0, 1])
    np.testing.assert_array_equal(identity_head(head, head_identity=[0.0, 4 * np.pi]),
                                  [0.0, 4 * np.pi])
    with pytest.raises(ThermoseedError, match=r"\(2,\), got \(3,\)"):
        identity_head(head, head_identity=[0.0, 0.0, 0.0])


# ----------------------------------------------------------------------- readout statistics


def test_readout_of_the_compiled_state_is_the_latent_population(compiled3):
    """W rho~ W^dag = U^dag U diag(q) U^dag U = diag(q) at the warm start (identity head)."""
    n, lat = 3, compiled3.latent
    rho = compiled3.state()[None]
    q = np.zeros(2**n)
    q[lat.basis] = lat.probs
    full, head = _circuit(compiled3, readout=(0, 1, 2), n_classes=8)
    flat = np.asarray(warm_start(compiled3, head=head))
    np.testing.assert_allclose(np.asarray(full.probabilities(flat, rho))[0], q, atol=1e-8)
    # marginals on readout (2, 0): P(b2, b0) = sum of q over x with those bits
    marg, _ = _circuit(compiled3, readout=(2, 0), n_classes=4)
    expected = np.zeros(4)
    for x in range(2**n):
        b = _bits(x, n)
        expected[2 * b[2] + b[0]] += q[x]
    np.testing.assert_allclose(np.asarray(marg.probabilities(flat, rho))[0], expected,
                               atol=1e-8)

    # Source: default.mixed simulation of rho~ -> U^dag -> identity head -> probs.
    @qml.qnode(qml.device("default.mixed", wires=n))
    def run():
        qml.QubitDensityMatrix(compiled3.state(), wires=range(n))
        compiled3.ansatz.adjoint(compiled3.params, range(n))
        head(identity_head(head), range(n))
        return qml.probs(wires=[0, 1, 2])

    np.testing.assert_allclose(run(), q, atol=1e-8)


@pytest.mark.parametrize("readout", [(0,), (2, 0), (1, 2)])
def test_probabilities_match_pennylane_qfunc(compiled3, readout):
    circuit, head = _circuit(compiled3, head_layers=2, readout=readout,
                             n_classes=2 ** len(readout))
    rng = np.random.default_rng(sum(readout) + 50)
    params = rng.uniform(0, 2 * np.pi, circuit.n_params)
    states = np.array([random_state(8, rng) for _ in range(3)])
    seeded = np.asarray(warm_start(compiled3, head=head))
    for p_circuit in (params, seeded):
        ours = np.asarray(circuit.probabilities(p_circuit, states))
        qnode = qml.QNode(circuit.qfunc(p_circuit), qml.device("default.qubit", wires=3))
        for psi, p in zip(states, ours, strict=True):
            # Source: PennyLane simulation of the emitted circuit.
            np.testing.assert_allclose(p, qnode(psi), atol=1e-10)
    ours = np.asarray(circuit.probabilities(params, states))
    # the same states as density matrices give the same probabilities
    dens = np.einsum("bi,bj->bij", states, states.conj())
    np.testing.assert_allclose(np.asarray(circuit.probabilities(params, dens)), ours,
                               atol=1e-12)


# ----------------------------------------------------------------------- losses and gradients


@pytest.mark.parametrize(("readout", "n_classes", "density"),
                         [((0,), 2, False), ((1,), 2, True), ((0, 2), 3, True),
                          ((2, 1), 4, False)])
def test_loss_gradient_matches_finite_differences(compiled3, readout, n_classes, density):
    circuit, _ = _circuit(compiled3, readout=readout, n_classes=n_classes)
    rng = np.random.default_rng(60 + n_classes)
    states = np.array([random_state(8, rng) for _ in range(5)])
    if density:
        states = np.array([random_density(8, rng, rank=2) for _ in range(5)])
    labels = rng.integers(0, n_classes, 5)
    params = rng.uniform(0, 2 * np.pi, circuit.n_params)
    grad = autograd.grad(circuit.loss)(params, states, labels)
    fd = central_differences(lambda p: float(circuit.loss(p, states, labels)), params)
    np.testing.assert_allclose(grad, fd, atol=1e-6, rtol=0)  # Source: central FD.
    assert np.abs(grad).max() > 1e-3
    # the loss is the mean cross-entropy of the class probabilities
    p = np.asarray(circuit.probabilities(params, states))
    expected = -np.mean(np.log(p[np.arange(5), labels]))
    assert float(circuit.loss(params, states, labels)) == pytest.approx(expected, rel=1e-9)


# ----------------------------------------------------------------------- multi-class


@pytest.mark.parametrize("n_classes", [3, 4])
def test_multiclass_readout(n_classes):
    """Identity circuit (soft templates at zero) on basis states: class = first two bits."""
    n = 3
    soft = make_ansatz("soft", n, 1)
    circuit = DownstreamCircuit(soft, soft, readout=(0, 1), n_classes=n_classes)
    zero = np.zeros(circuit.n_params)
    xs = [x for x in range(2**n) if (x >> 1) < n_classes]
    states = np.eye(2**n)[xs].astype(complex)
    labels = np.array([x >> 1 for x in xs])
    p = np.asarray(circuit.probabilities(zero, states))
    assert p.shape == (len(xs), n_classes)
    np.testing.assert_allclose(p, np.eye(n_classes)[labels], atol=1e-12)
    assert circuit.accuracy(zero, states, labels) == 1.0
    assert abs(float(circuit.loss(zero, states, labels))) < 1e-9
    # class probabilities = PennyLane readout probabilities renormalised over the first C
    rng = np.random.default_rng(70 + n_classes)
    params = rng.uniform(0, 2 * np.pi, circuit.n_params)
    qnode = qml.QNode(circuit.qfunc(params), qml.device("default.qubit", wires=n))
    psi = random_state(8, rng)
    raw = qnode(psi)[:n_classes]  # Source: PennyLane simulation.
    np.testing.assert_allclose(np.asarray(circuit.probabilities(params, psi[None]))[0],
                               raw / raw.sum(), atol=1e-10)
    # training from a seeded random start lowers the loss on this data
    run = train_classifier(circuit, params, states, labels, steps=30, batch_size=4,
                           learning_rate=0.1, seed=0)
    assert run.loss[-1] < run.loss[0] - 0.1
    assert len(run.loss) == len(run.train_accuracy) == 31 and run.test_accuracy == []


def test_training_is_seeded_and_stoppable(compiled3):
    circuit, head = _circuit(compiled3)
    rng = np.random.default_rng(80)
    states = np.array([random_state(8, rng) for _ in range(8)])
    labels = np.arange(8) % 2
    p0 = warm_start(compiled3, head=head)
    a = train_classifier(circuit, p0, states, labels, states, labels, steps=6, batch_size=3,
                         seed=4)
    b = train_classifier(circuit, p0, states, labels, states, labels, steps=6, batch_size=3,
                         seed=4)
    assert np.array_equal(a.params, b.params) and a.loss == b.loss
    assert len(a.test_accuracy) == 7
    assert a.loss[0] == pytest.approx(float(circuit.loss(np.asarray(p0), states, labels)))
    stopped = train_classifier(circuit, p0, states, labels, steps=6, batch_size=3, seed=4,
                               callback=lambda step, params, loss, grad: step == 2)
    assert len(stopped.loss) == 3
    np.testing.assert_array_equal(np.asarray(p0), np.asarray(warm_start(compiled3, head=head)))


# ----------------------------------------------------------------------- bad input


def test_bad_inputs_raise(compiled3):
    circuit, head = _circuit(compiled3)
    rng = np.random.default_rng(90)
    states = np.array([random_state(8, rng) for _ in range(4)])
    labels = np.array([0, 1, 0, 1])
    params = np.asarray(warm_start(compiled3, head=head))
    with pytest.raises(ThermoseedError, match=r"labels must lie in 0\.\.1"):
        circuit.loss(params, states, np.array([0, 1, 2, 0]))
    with pytest.raises(ThermoseedError, match="labels must be 4 integers"):
        circuit.loss(params, states, np.array([0.0, 1.0, 0.0, 1.0]))
    with pytest.raises(ThermoseedError, match="labels must be 4 integers"):
        circuit.loss(params, states, np.array([0, 1]))
    with pytest.raises(ThermoseedError, match=r"\(B, 8\) state vectors.*got shape \(4, 4\)"):
        circuit.loss(params, states[:, :4], labels)
    assert circuit.n_params == 18 + 9  # strong (2, 3, 3) encoder + soft (1, 3, 3) head
    with pytest.raises(ThermoseedError, match=r"length 27 .*got shape \(26,\)"):
        circuit.loss(params[:-1], states, labels)
    bad = params.copy()
    bad[3] = np.nan
    with pytest.raises(ThermoseedError, match="NaN or inf"):
        circuit.loss(bad, states, labels)
    with pytest.raises(ThermoseedError, match="NaN or inf"):
        train_classifier(circuit, bad, states, labels, steps=1)
    with pytest.raises(ThermoseedError, match=r"params0 must have shape \(27,\)"):
        train_classifier(circuit, params[:5], states, labels, steps=1)
    with pytest.raises(ThermoseedError, match="head acts on 2 wires but the encoder on 3"):
        DownstreamCircuit(compiled3.ansatz, make_ansatz("soft", 2, 1))
    with pytest.raises(ThermoseedError, match="readout wires"):
        DownstreamCircuit(compiled3.ansatz, head, readout=(3,))
    with pytest.raises(ThermoseedError, match="readout wires"):
        DownstreamCircuit(compiled3.ansatz, head, readout=(1, 1))
    with pytest.raises(ThermoseedError, match="n_classes = 3 needs 2..2"):
        DownstreamCircuit(compiled3.ansatz, head, readout=(0,), n_classes=3)


# ----------------------------------------------------------------------- warm_start


def _user_encoder(params, wires):
    for layer in params:
        for k, w in enumerate(wires):
            qml.RY(layer[k, 0], wires=w)
            qml.RZ(layer[k, 1], wires=w)
        for a, b in zip(wires, wires[1:], strict=False):
            qml.CNOT(wires=[a, b])


def test_warm_start_from_a_model_with_a_user_ansatz():
    rho = random_density(4, np.random.default_rng(31))
    model = VisibleGibbsModel(graph_terms(2, "line", fields="XZ", couplings=("ZZ",)),
                              l2=1e-3).fit(rho)
    ansatz = user_ansatz(_user_encoder, (2, 2, 2), wires=[0, 1], name="mine")
    params = warm_start(model, ansatz=ansatz, seed=3, restarts=1)
    assert isinstance(params, pnp.tensor) and params.requires_grad
    assert params.shape == (2, 2, 2)
    # it is the compile of that model into that ansatz (same seed, same restarts)
    direct = compile_latent(model, ansatz, seed=3, restarts=1)
    assert np.array_equal(np.asarray(params), direct.params)
    # with a head: one flat vector, head part exactly zero
    head = make_ansatz("soft", 2, 1)
    flat = warm_start(direct, ansatz=ansatz, head=head)
    assert isinstance(flat, pnp.tensor) and flat.requires_grad
    assert flat.shape == (8 + 6,)
    assert np.array_equal(np.asarray(flat[:8]), direct.params.ravel())
    assert not np.any(np.asarray(flat[8:]))
    # the user's circuit runs with them in PennyLane and autograd differentiates through it
    dev = qml.device("default.qubit", wires=2)

    @qml.qnode(dev, interface="autograd")
    def energy(p):
        qml.adjoint(_user_encoder)(p, [0, 1])
        return qml.expval(qml.PauliZ(0))

    grad = qml.grad(energy)(params)
    assert grad.shape == (2, 2, 2) and np.all(np.isfinite(grad))


def test_warm_start_from_a_compile_result(compiled3):
    params = warm_start(compiled3)
    assert isinstance(params, pnp.tensor) and params.requires_grad
    assert params.shape == compiled3.ansatz.shape
    assert np.asarray(params).tobytes() == compiled3.params.tobytes()


def test_warm_start_errors(model3, compiled3):
    with pytest.raises(ThermoseedError, match="needs ansatz="):
        warm_start(model3)
    with pytest.raises(ThermoseedError, match=r"shape \(2, 3, 3\).*has shape \(1, 3, 3\)"):
        warm_start(compiled3, ansatz=make_ansatz("strong", 3, 1))
    with pytest.raises(ThermoseedError, match="CompileResult or a fitted Gibbs model"):
        warm_start(np.zeros(3))
    with pytest.raises(ThermoseedError, match="not the identity at zero"):
        warm_start(compiled3, head=make_ansatz("strong", 3, 1))
    purified = compile_purified(model3, make_ansatz("strong", 4, 1), restarts=1, max_iter=3)
    with pytest.raises(ThermoseedError, match="latent form"):
        warm_start(purified)
