"""Ansatz templates, the closed-form template simulation and the user-ansatz wrapper.

External reference throughout: PennyLane's own gate and template definitions, read through
``qml.matrix`` (an independent route: PennyLane decomposes the templates and multiplies gate
matrices; ``bridge.unitaries`` applies hand-written tensor contractions).
"""

from __future__ import annotations

import autograd
import autograd.numpy as anp
import numpy as np
import pennylane as qml
import pytest
import scipy.linalg
from numerics import central_differences

from thermoseed.bridge.ansatz import (
    TEMPLATES,
    ansatz_columns,
    columns,
    make_ansatz,
    unitary,
    user_ansatz,
)
from thermoseed.pretrain.errors import ThermoseedError

TWO_WIRE_TEMPLATES = ("ladder", "soft")
#: Agreement of two exact matrix computations in double precision.
MATRIX_ATOL = 1e-12
#: Central finite differences (tests/numerics.py, step 1e-6) have O(step^2) truncation error
#: plus round-off ~1e-16 / step; both stay below FD_ATOL for these O(1) functions.
FD_ATOL = 1e-7


def _cases():
    for name in TEMPLATES:
        for n in range(1, 5):
            if name in TWO_WIRE_TEMPLATES and n == 1:
                continue
            yield name, n


def _pennylane_matrix(ansatz, params):
    return qml.matrix(lambda p: ansatz(p), wire_order=list(ansatz.wires))(params)


def _custom_qfunc(params, wires):
    """A user's circuit: Rot on every wire, a CZ ring, then RY on every wire."""
    for k, w in enumerate(wires):
        qml.Rot(params[k, 0], params[k, 1], params[k, 2], wires=w)
    for a, b in zip(wires, wires[1:], strict=False):
        qml.CZ(wires=[a, b])
    for k, w in enumerate(wires):
        qml.RY(params[k, 3], wires=w)


@pytest.mark.parametrize(("name", "n"), list(_cases()))
def test_template_matrix_matches_pennylane(name, n):
    rng = np.random.default_rng(100 + n)
    # 3 layers also exercise the "strong" entangler range r = l % (n - 1) + 1
    for n_layers in (1, 3):
        ansatz = make_ansatz(name, n, n_layers)
        params = rng.uniform(0, 2 * np.pi, ansatz.shape)
        ours = np.asarray(unitary(ansatz, params))
        # Source: PennyLane's gate/template definitions via qml.matrix.
        ref = _pennylane_matrix(ansatz, params)
        assert ours.shape == (2**n, 2**n)
        np.testing.assert_allclose(ours, ref, atol=MATRIX_ATOL, rtol=0)
        np.testing.assert_allclose(ours @ ours.conj().T, np.eye(2**n), atol=MATRIX_ATOL)


def test_template_on_named_wires_matches_pennylane():
    ansatz = make_ansatz("strong", 3, 2, wires=["a", "b", "c"])
    params = ansatz.random_params(7)
    # Source: PennyLane qml.matrix with the ansatz's own wire labels as wire order.
    ref = _pennylane_matrix(ansatz, params)
    np.testing.assert_allclose(np.asarray(unitary(ansatz, params)), ref, atol=MATRIX_ATOL)


@pytest.mark.parametrize("name", TEMPLATES)
def test_columns_on_a_basis_subset(name):
    ansatz = make_ansatz(name, 3, 2)
    params = ansatz.random_params(3)
    # Source: PennyLane qml.matrix; column x of U is U|x>.
    full = _pennylane_matrix(ansatz, params)
    for basis in ([5], [0, 3], [7, 1, 2]):
        rows = np.asarray(ansatz_columns(ansatz, params, basis))
        assert rows.shape == (len(basis), 8)
        np.testing.assert_allclose(rows, full[:, basis].T, atol=MATRIX_ATOL)


def test_columns_helper_runs_a_pennylane_circuit():
    params = np.random.default_rng(4).uniform(0, 2 * np.pi, (2, 4))

    def gates(p):
        _custom_qfunc(p, [0, 1])

    full = qml.matrix(gates, wire_order=[0, 1])(params)  # Source: PennyLane qml.matrix.
    np.testing.assert_allclose(np.asarray(columns(gates, params, 2)), full.T, atol=MATRIX_ATOL)
    # a single basis state still comes back as one row of shape (1, d)
    one = np.asarray(columns(gates, params, 2, [2]))
    assert one.shape == (1, 4)
    np.testing.assert_allclose(one[0], full[:, 2], atol=MATRIX_ATOL)


@pytest.mark.parametrize("name", TEMPLATES)
def test_unitary_gradient_matches_finite_differences(name):
    n = 3
    ansatz = make_ansatz(name, n, 2)
    rng = np.random.default_rng(11)
    params = ansatz.random_params(12)
    a = rng.standard_normal((2**n, 2**n)) + 1j * rng.standard_normal((2**n, 2**n))
    v = rng.standard_normal(2**n) + 1j * rng.standard_normal(2**n)

    def scalar(p):
        u = unitary(ansatz, p)
        # Re Tr(A U) plus |<v|U|v>|^2: linear and quadratic dependence on U
        amp = anp.dot(anp.conj(v), anp.dot(u, v))
        return anp.real(anp.sum(anp.transpose(a) * u)) + anp.real(amp * anp.conj(amp)) / 50

    grad = autograd.grad(scalar)(params)
    assert grad.shape == ansatz.shape
    # Source: central finite differences of the same scalar.
    fd = central_differences(lambda p: float(scalar(p)), params)
    np.testing.assert_allclose(grad, fd, atol=FD_ATOL * np.abs(fd).max(), rtol=0)
    assert np.abs(grad).max() > 1e-3  # a non-trivial gradient was compared


def test_user_ansatz_unitary_matches_pennylane_and_has_gradient():
    ansatz = user_ansatz(_custom_qfunc, (3, 4), wires=[0, 1, 2], name="mine")
    assert not ansatz.builtin and ansatz.shape == (3, 4) and ansatz.n_params == 12
    params = np.random.default_rng(5).uniform(0, 2 * np.pi, (3, 4))
    # Source: PennyLane qml.matrix of the user's function.
    ref = _pennylane_matrix(ansatz, params)
    np.testing.assert_allclose(np.asarray(unitary(ansatz, params)), ref, atol=MATRIX_ATOL)

    def scalar(p):
        return anp.real(unitary(ansatz, p)[1, 2] * anp.conj(unitary(ansatz, p)[3, 0]))

    grad = autograd.grad(scalar)(params)
    fd = central_differences(lambda p: float(scalar(p)), params)  # Source: central FD.
    np.testing.assert_allclose(grad, fd, atol=FD_ATOL, rtol=0)
    assert np.abs(grad).max() > 1e-3


def test_user_ansatz_through_compile():
    from thermoseed.bridge.compile import compile_latent
    from thermoseed.pretrain import VisibleGibbsModel, graph_terms

    terms = graph_terms(2, "line", fields="XZ", couplings=("ZZ",))
    coef = np.random.default_rng(21).normal(0.0, 0.8, len(terms))
    model = VisibleGibbsModel.from_coefficients(terms, coef)
    ansatz = user_ansatz(_custom_qfunc, (2, 4), wires=[0, 1])
    result = compile_latent(model, ansatz, k=1, restarts=1, seed=2, max_iter=150)
    assert result.params.shape == (2, 4)
    assert result.ansatz is ansatz
    # the compiled state is U|0><0|U^dag with U the user's circuit (Source: qml.matrix)
    u = _pennylane_matrix(ansatz, result.params)
    np.testing.assert_allclose(result.state(), np.outer(u[:, 0], u[:, 0].conj()), atol=1e-10)
    # S(|psi><psi| || sigma) = -<psi|log sigma|psi> (Source: scipy.linalg.logm), and >= 0
    # (Klein's inequality)
    psi = u[:, 0]
    expected = -np.real(psi.conj() @ scipy.linalg.logm(model.state()) @ psi)
    assert result.report.objective == pytest.approx(expected, abs=1e-9)
    assert result.report.objective >= -1e-10


def test_bad_shape_message_names_expected_and_got():
    ansatz = make_ansatz("strong", 2, 2)
    with pytest.raises(ThermoseedError, match=r"\(2, 2, 3\).*got \(2, 3\)"):
        unitary(ansatz, np.zeros((2, 3)))
    user = user_ansatz(_custom_qfunc, (2, 4), wires=[0, 1])
    with pytest.raises(ThermoseedError, match=r"\(2, 4\).*got \(8,\)"):
        ansatz_columns(user, np.zeros(8))


def test_user_function_failing_on_its_declared_shape():
    def needs_more(params, wires):
        qml.RX(params[5], wires=wires[0])

    with pytest.raises(ThermoseedError, match=r"shape \(2,\)"):
        user_ansatz(needs_more, (2,), wires=[0])


def test_user_function_touching_other_wires():
    def strays(params, wires):
        qml.RX(params[0], wires=wires[0])
        qml.CNOT(wires=[wires[0], 5])

    with pytest.raises(ThermoseedError, match=r"wires \[5\] outside \(0, 1\)"):
        user_ansatz(strays, (1,), wires=[0, 1])


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_parameters(bad):
    ansatz = make_ansatz("soft", 2, 1)
    params = np.zeros(ansatz.shape)
    params[0, 1, 2] = bad
    with pytest.raises(ThermoseedError, match="NaN or inf"):
        unitary(ansatz, params)
    user = user_ansatz(_custom_qfunc, (2, 4), wires=[0, 1])
    p = np.zeros((2, 4))
    p[1, 3] = bad
    with pytest.raises(ThermoseedError, match="NaN or inf"):
        unitary(user, p)


def test_non_callable_and_bad_templates():
    with pytest.raises(ThermoseedError, match="callable"):
        user_ansatz("not a function", (2,), wires=[0])
    with pytest.raises(ThermoseedError, match="unknown ansatz"):
        make_ansatz("nope", 2, 1)
    with pytest.raises(ThermoseedError, match="at least 2 wires"):
        make_ansatz("ladder", 1, 1)
    with pytest.raises(ThermoseedError, match="n_layers >= 1"):
        make_ansatz("strong", 2, 0)
    with pytest.raises(ThermoseedError, match="got 3 wires for n_wires = 2"):
        make_ansatz("strong", 2, 1, wires=[0, 1, 2])


def test_wrong_number_of_wires_when_applied():
    ansatz = make_ansatz("strong", 2, 1)
    with pytest.raises(ThermoseedError, match=r"acts on 2 wires, got 3"):
        with qml.queuing.AnnotatedQueue():
            ansatz(np.zeros(ansatz.shape), wires=[0, 1, 2])
    with pytest.raises(ThermoseedError, match="need 2 wires, got 1"):
        ansatz.on([4])
    moved = ansatz.on([4, 5])
    assert moved.wires == (4, 5) and moved.shape == ansatz.shape
