"""Label-aware warm start end to end: one Gibbs model per class -> the Helstrom rule compiled
into the user's own circuit -> the user's own PennyLane script, unchanged.

Scenario (recipes.scenarios.magnet_phase): 96 exact ground states of the open transverse-field
Ising chain at n = 4, labels ordered / disordered, stratified split 72 / 24. The user's circuit
is three ``qml.StronglyEntanglingLayers`` read out as ``p(class 1) = (1 - <Z_0>)/2``, run on
PennyLane's ``default.qubit`` (the reference: none of thermoseed's simulation is used to score).
"""

from __future__ import annotations

import numpy as np
import pennylane as qml
import pytest
import scipy.stats

from thermoseed.bridge import user_ansatz, warm_start
from thermoseed.bridge.warm_starts import WarmStart
from thermoseed.pretrain import GibbsClassifier, ThermoseedError, graph_terms, split_labelled
from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data

N = 4
SHAPE = qml.StronglyEntanglingLayers.shape(n_layers=3, n_wires=N)


def my_circuit(weights, wires):
    qml.StronglyEntanglingLayers(weights, wires=wires)


@pytest.fixture(scope="module")
def task():
    batch = magnet_phase_data(N, 96, seed=0)
    data = split_labelled(batch.states, batch.labels, test_fraction=0.25, seed=0)
    terms = graph_terms(N, "line", fields="XZ", couplings=("ZZ", "XX"))
    clf = GibbsClassifier(terms, l2=1e-3).fit(data.train_states, data.train_labels)
    return data, clf


def _user_accuracy(weights, states, labels):
    """The user's own script: state in, their circuit, <Z_0> out (PennyLane default.qubit)."""

    @qml.qnode(qml.device("default.qubit", wires=N))
    def model(state):
        qml.StatePrep(state, wires=range(N))
        my_circuit(weights, range(N))
        return qml.expval(qml.PauliZ(0))

    p1 = np.array([(1 - float(model(s))) / 2 for s in states])
    return float(np.mean((p1 > 0.5) == (labels == 1)))


def test_class_warm_start_classifies_at_step_zero(task):
    data, clf = task
    start = warm_start(clf, ansatz=user_ansatz(my_circuit, SHAPE, range(N)), readout=0,
                       with_report=True)
    assert isinstance(start, WarmStart) and start.params.shape == SHAPE
    assert start.params.requires_grad
    report = start.report
    assert report.success <= report.bound + 1e-9
    accuracy = _user_accuracy(np.asarray(start.params), data.test_states, data.test_labels)
    # Margin from the test-set size: a coin's number of correct answers is Binomial(24, 1/2);
    # demand more than its 99.9% quantile (one-sided test at 0.1%, scipy.stats.binom).
    m = len(data.test_labels)
    needed = (scipy.stats.binom.isf(1e-3, m, 0.5) + 1) / m
    assert accuracy >= needed, (accuracy, needed)


def test_class_warm_start_is_seeded_and_checks_its_inputs(task):
    _, clf = task
    ansatz = user_ansatz(my_circuit, SHAPE, range(N))
    a = warm_start(clf, ansatz=ansatz, readout=0, restarts=1, seed=3)
    b = warm_start(clf, ansatz=ansatz, readout=0, restarts=1, seed=3)
    np.testing.assert_array_equal(a, b)
    with pytest.raises(ThermoseedError, match="needs ansatz=<your circuit>"):
        warm_start(clf)
    with pytest.raises(ThermoseedError, match="acts on 3 wires but the class models on 4"):
        warm_start(clf, ansatz=user_ansatz(my_circuit, (1, 3, 3), range(3)))
    with pytest.raises(ThermoseedError, match="readout wires"):
        warm_start(clf, ansatz=ansatz, readout=7)
    with pytest.raises(ThermoseedError, match="not fitted"):
        warm_start(GibbsClassifier(clf.terms), ansatz=ansatz)


def test_many_copy_rule_as_an_observable_readout(task):
    """The many-copy rule is the observable D = sum_j (theta_1j - theta_0j) P_j + offset:
    measured with PennyLane's qml.expval on default.qubit (the reference), 1/(1 + e^<D>) is
    the classifier's probability of class 1 for every held-out state."""
    from thermoseed.pretrain import to_pennylane

    data, clf = task
    clf = GibbsClassifier(clf.terms, l2=1e-3).fit(data.train_states, data.train_labels)
    d = clf.decision_observable()
    observable = to_pennylane(d.coeffs, d.terms)

    @qml.qnode(qml.device("default.qubit", wires=N))
    def measure(state):
        qml.StatePrep(state, wires=range(N))
        return qml.expval(observable)

    expected = clf.predict_proba(data.test_states)[:, 1]
    got = np.array([1 / (1 + np.exp(float(measure(s)) + d.offset)) for s in data.test_states])
    np.testing.assert_allclose(got, expected, atol=1e-9)
