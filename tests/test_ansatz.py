"""Template registry, the tensor simulation of built-ins and of user circuits, the wrapper.

External reference throughout: PennyLane's own gate and template definitions, read through
``qml.matrix`` (an independent route: PennyLane decomposes the templates and multiplies gate
matrices; ``bridge.templates`` and ``bridge.ansatz`` apply hand-written tensor contractions).
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
    apply_ansatz,
    circuit_operations,
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


@pytest.mark.parametrize("name", tuple(TEMPLATES))
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


@pytest.mark.parametrize("name", tuple(TEMPLATES))
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


# ------------------------------------------------------------------------ template registry


def test_registry_entries_agree_with_pennylane():
    assert {name for name, t in TEMPLATES.items() if t.min_wires == 2} == set(TWO_WIRE_TEMPLATES)
    # Source: PennyLane's own template shape functions.
    assert TEMPLATES["strong"].shape(3, 4) == qml.StronglyEntanglingLayers.shape(3, 4)
    assert TEMPLATES["entangler"].shape(3, 4) == qml.BasicEntanglerLayers.shape(3, 4)
    for name, template in TEMPLATES.items():
        assert template.name == name
        n = max(template.min_wires, 3)
        ansatz = make_ansatz(name, n, 2)
        # Source: qml.matrix at all-zero parameters; the flag says whether that is I.
        at_zero = _pennylane_matrix(ansatz, np.zeros(ansatz.shape))
        assert np.allclose(at_zero, np.eye(2**n), atol=1e-12) == template.identity_at_zero
        if template.min_wires > 1:
            with pytest.raises(ThermoseedError, match=f"at least {template.min_wires} wires"):
                make_ansatz(name, template.min_wires - 1, 1)


# ---------------------------------------------------------------- user circuits as tensors


def _mixed_qfunc(params, wires):
    """Every branch of the user-circuit simulation: runs of one-wire gates on a wire, monomial
    gates with and without phases (CZ, CY, SWAP, Toffoli, CNOT), general two- and three-wire
    gates, a global phase, adjoint and controlled gates, a barrier, a template to decompose."""
    a, b, c, d = wires
    qml.Hadamard(a)
    qml.RX(params[0], b)
    qml.CZ([a, b])
    qml.S(c)
    qml.RY(params[1], c)
    qml.SWAP([a, d])
    qml.Toffoli([a, b, c])
    qml.CRX(params[2], [c, d])
    qml.IsingZZ(params[3], [a, c])
    qml.T(d)
    qml.CY([d, a])
    qml.PhaseShift(params[4], b)
    qml.GlobalPhase(params[5])
    qml.adjoint(qml.Rot)(params[6], params[7], params[8], wires=a)
    qml.ctrl(qml.RZ, control=b)(params[9], wires=d)
    qml.Barrier(wires=[a, b])
    qml.QFT(wires=[b, c, d])
    qml.CNOT([c, a])
    qml.CNOT([b, d])
    qml.RX(2 * params[10], a)
    qml.MultiRZ(params[11], wires=[a, b, d])
    qml.StronglyEntanglingLayers(anp.reshape(params, (1, 4, 3)), wires=wires)
    qml.RZ(params[1], a)


def test_user_circuit_unitary_matches_pennylane_on_every_gate_kind():
    wires = ["w0", 3, "x", 1]
    ansatz = user_ansatz(_mixed_qfunc, (12,), wires)
    params = np.random.default_rng(3).uniform(0, 2 * np.pi, 12)
    # Source: PennyLane qml.matrix of the user's function, in the ansatz's wire order.
    ref = _pennylane_matrix(ansatz, params)
    np.testing.assert_allclose(np.asarray(unitary(ansatz, params)), ref, atol=MATRIX_ATOL)
    block = np.random.default_rng(4).standard_normal((16, 3))
    np.testing.assert_allclose(np.asarray(apply_ansatz(ansatz, params, block)), ref @ block,
                               atol=MATRIX_ATOL)


# PennyLane's GlobalPhase matrix casts its real angle to complex; autograd's reverse cast of
# the gradient (keeping the real part, the right gradient of a real parameter) warns.
@pytest.mark.filterwarnings("ignore:Casting complex values to real")
def test_user_circuit_gradient_matches_finite_differences():
    ansatz = user_ansatz(_mixed_qfunc, (12,), [0, 1, 2, 3])
    rng = np.random.default_rng(5)
    params = rng.uniform(0, 2 * np.pi, 12)
    block = rng.standard_normal((16, 3)) + 1j * rng.standard_normal((16, 3))
    weights = rng.standard_normal((16, 3))

    def scalar(p):
        y = apply_ansatz(ansatz, p, block)
        return anp.sum(weights * anp.real(y * anp.conj(y)))

    grad = autograd.grad(scalar)(params)
    # Source: central finite differences of the same scalar.
    fd = central_differences(lambda p: float(scalar(p)), params)
    np.testing.assert_allclose(grad, fd, atol=FD_ATOL * np.abs(fd).max(), rtol=0)
    assert np.abs(grad).max() > 1e-2


def test_strongly_entangling_user_circuit_matches_pennylane_and_builtin():
    def circuit(params, wires):
        qml.StronglyEntanglingLayers(params, wires=wires)

    ansatz = user_ansatz(circuit, (3, 4, 3), range(4))
    params = ansatz.random_params(8)
    # Source: PennyLane qml.matrix of the template.
    ref = _pennylane_matrix(ansatz, params)
    u = np.asarray(unitary(ansatz, params))
    np.testing.assert_allclose(u, ref, atol=MATRIX_ATOL)
    np.testing.assert_allclose(u, np.asarray(unitary(make_ansatz("strong", 4, 3), params)),
                               atol=MATRIX_ATOL)


class _SparseSwap(qml.operation.Operation):
    """A parameter-free gate known only by its sparse matrix."""

    num_wires = 2
    num_params = 0

    @staticmethod
    def compute_sparse_matrix(*params, **hyperparameters):
        import scipy.sparse

        return scipy.sparse.csr_matrix(_SWAP)


class _SparsePhase(qml.operation.Operation):
    """A parametrised one-wire phase gate known only by its sparse matrix."""

    num_wires = 1
    num_params = 1

    @staticmethod
    def compute_sparse_matrix(t, **hyperparameters):
        import scipy.sparse

        return scipy.sparse.csr_matrix(np.diag([1.0, np.exp(1j * t)]))


# Source: textbook gate matrices (e.g. Nielsen & Chuang, section 4.2), written out by hand.
_SWAP = np.array([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]], dtype=complex)
_CNOT = np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]], dtype=complex)


def _rx(t):
    return np.array([[np.cos(t / 2), -1j * np.sin(t / 2)], [-1j * np.sin(t / 2), np.cos(t / 2)]])


def _ry(t):
    return np.array([[np.cos(t / 2), -np.sin(t / 2)], [np.sin(t / 2), np.cos(t / 2)]])


def test_parameter_free_sparse_gate_is_densified_and_differentiable():
    def circuit(p, wires):
        qml.RX(p[0], wires[0])
        qml.RY(p[1], wires[1])
        _SparseSwap(wires=wires)
        qml.RX(p[2], wires[0])

    ansatz = user_ansatz(circuit, (3,), [0, 1])
    x = np.array([0.3, 1.1, -0.7])
    assert circuit_operations(ansatz, x) is not None  # the tensor path, not the fallback
    expected = np.kron(_rx(x[2]), np.eye(2)) @ _SWAP @ np.kron(_rx(x[0]), _ry(x[1]))
    np.testing.assert_allclose(np.asarray(unitary(ansatz, x)), expected, atol=MATRIX_ATOL)

    def scalar(p):
        return anp.real(unitary(ansatz, p)[1, 2] * anp.conj(unitary(ansatz, p)[0, 0]))

    fd = central_differences(lambda p: float(scalar(p)), x)  # Source: central FD.
    np.testing.assert_allclose(autograd.grad(scalar)(x), fd, atol=FD_ATOL, rtol=0)
    assert np.abs(fd).max() > 1e-2


def test_gate_without_dense_matrix_or_decomposition_falls_back_to_default_qubit():
    def circuit(p, wires):
        qml.RX(p[0], wires[0])
        _SparsePhase(0.4, wires=wires[1])
        qml.CNOT(wires)

    ansatz = user_ansatz(circuit, (1,), [0, 1])
    x = np.array([0.2])
    assert circuit_operations(ansatz, x) is None  # parametrised and sparse only: fallback
    expected = _CNOT @ np.kron(_rx(0.2), np.diag([1.0, np.exp(0.4j)]))
    np.testing.assert_allclose(np.asarray(unitary(ansatz, x)), expected, atol=MATRIX_ATOL)
    rows = np.asarray(ansatz_columns(ansatz, x, [3, 1]))
    np.testing.assert_allclose(rows, expected[:, [3, 1]].T, atol=MATRIX_ATOL)
