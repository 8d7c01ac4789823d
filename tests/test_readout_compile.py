"""Compile a class decision rule into a circuit: objective, gradient, bounds, optimum, inputs.

Independent references: the success probability recomputed from ``qml.matrix`` and
hand-built Kronecker projectors, or from ``<Z>`` on PennyLane's ``default.mixed`` device;
the trace norm as a sum of singular values (``scipy.linalg.svdvals``); closed forms for pure
and commuting states; central finite differences for gradients.
"""

from __future__ import annotations

from functools import reduce

import autograd
import numpy as np
import pennylane as qml
import pytest
import scipy.linalg
from conftest import random_density, random_state
from numerics import central_differences

from thermoseed.bridge.ansatz import make_ansatz, user_ansatz
from thermoseed.bridge.readout import (
    ReadoutCompileResult,
    helstrom_success,
    pgm_success,
    readout_bounds,
    readout_compile,
    readout_objective,
)
from thermoseed.pretrain import VisibleGibbsModel, graph_terms
from thermoseed.pretrain.errors import ConvergenceWarning, ThermoseedError

#: Two exact dense computations of the same quantity in double precision.
DENSE_ATOL = 1e-10
#: Central differences (step 1e-6): truncation and round-off both near 1e-10 for O(1) P.
FD_ATOL = 1e-7


def _sel(params, wires):
    qml.StronglyEntanglingLayers(params, wires=wires)


def _projector(pattern: int, readout_positions, n: int) -> np.ndarray:
    """Pi on the readout wires' pattern (first readout wire = most significant bit), identity
    elsewhere, as a hand-built Kronecker product (wire 0 = leftmost factor)."""
    m = len(readout_positions)
    factors = [np.eye(2)] * n
    for j, pos in enumerate(readout_positions):
        bit = (pattern >> (m - 1 - j)) & 1
        factors[pos] = np.diag([1.0 - bit, float(bit)])
    return reduce(np.kron, factors)


def _direct_success(ansatz, params, states, priors, readout) -> float:
    """sum_c p_c Tr(Pi_c U sigma_c U^dag) with U from qml.matrix (Source: PennyLane)."""
    u = qml.matrix(lambda p: ansatz(p), wire_order=list(ansatz.wires))(params)
    positions = [list(ansatz.wires).index(w) for w in readout]
    return float(sum(p * np.trace(_projector(c, positions, ansatz.n_wires)
                                  @ u @ s @ u.conj().T).real
                     for c, (p, s) in enumerate(zip(priors, states, strict=True))))


# ------------------------------------------------------------------------------ gradient


@pytest.mark.parametrize("case", ["builtin-binary", "user-binary", "three-classes"])
def test_success_gradient_matches_finite_differences(case):
    rng = np.random.default_rng({"builtin-binary": 1, "user-binary": 2, "three-classes": 3}[case])
    if case == "user-binary":
        ansatz = user_ansatz(_sel, (2, 3, 3), [0, 1, 2])
    else:
        ansatz = make_ansatz("strong", 3, 2)
    n_classes = 3 if case == "three-classes" else 2
    states = [random_density(8, rng, rank=2) for _ in range(n_classes)]
    priors = rng.dirichlet(np.ones(n_classes))
    readout = (2, 0) if n_classes == 3 else (1,)
    success = readout_objective(states, ansatz, readout, priors)
    params = ansatz.random_params(4)
    # the objective is the success probability (Source: qml.matrix and explicit projectors)
    assert float(success(params)) == pytest.approx(
        _direct_success(ansatz, params, states, priors, readout), abs=DENSE_ATOL)
    grad = autograd.grad(success)(params)
    # Source: central finite differences of the same function.
    fd = central_differences(lambda p: float(success(p)), params)
    np.testing.assert_allclose(grad, fd, atol=FD_ATOL, rtol=0)
    assert np.abs(fd).max() > 1e-3


# ------------------------------------------------------------------------------- bounds


def test_helstrom_of_two_pure_states_matches_closed_form():
    rng = np.random.default_rng(7)
    for d, p0 in ((2, 0.5), (4, 0.3), (8, 0.8)):
        a, b = random_state(d, rng), random_state(d, rng)
        sa, sb = np.outer(a, a.conj()), np.outer(b, b.conj())
        # Source: Helstrom 1976, pure states: 1/2 (1 + sqrt(1 - 4 p0 p1 |<a|b>|^2)).
        closed = 0.5 * (1 + np.sqrt(1 - 4 * p0 * (1 - p0) * abs(np.vdot(a, b)) ** 2))
        assert helstrom_success(sa, sb, p0) == pytest.approx(closed, abs=DENSE_ATOL)
        bound, pgm, attainable = readout_bounds([sa, sb], np.array([p0, 1 - p0]))
        assert bound == pytest.approx(closed, abs=DENSE_ATOL)
        assert pgm <= bound + DENSE_ATOL
        # Gamma has one positive and one negative eigenvalue: a rank-d/2 projector suffices
        assert attainable == pytest.approx(closed, abs=DENSE_ATOL)


def test_pretty_good_measurement_references():
    # Source (from memory): for the three symmetric "trine" qubit states with equal priors the
    # pretty-good measurement is optimal with success 2/3 (Ban, Kurokawa, Momose and Hirota,
    # Optimum measurements for discrimination among symmetric quantum states, 1997).
    trine = [np.array([np.cos(2 * np.pi * k / 3), np.sin(2 * np.pi * k / 3)]) for k in range(3)]
    states = [np.outer(v, v) for v in trine]
    assert pgm_success(states, np.full(3, 1 / 3)) == pytest.approx(2 / 3, abs=DENSE_ATOL)
    bound, pgm, attainable = readout_bounds(states, np.full(3, 1 / 3))
    assert bound == pytest.approx(np.sqrt(2 / 3)) and attainable is None
    # two pure states, equal priors: the PGM reaches Helstrom (same reference)
    rng = np.random.default_rng(8)
    a, b = random_state(4, rng), random_state(4, rng)
    pair = [np.outer(a, a.conj()), np.outer(b, b.conj())]
    assert pgm_success(pair, [0.5, 0.5]) == pytest.approx(helstrom_success(*pair), abs=1e-9)


def test_achieved_success_never_exceeds_the_bound_on_random_instances():
    rng = np.random.default_rng(11)
    checked = 0
    for trial in range(6):
        n, n_classes = (2, 2) if trial < 3 else (3, 3 if trial % 2 else 2)
        d = 2**n
        states = [random_density(d, rng, rank=int(rng.integers(1, d + 1)))
                  for _ in range(n_classes)]
        priors = rng.dirichlet(np.ones(n_classes))
        ansatz = make_ansatz("strong", n, 2)
        result = readout_compile(states, ansatz, priors=priors, restarts=2, seed=trial)
        assert result.success <= result.bound + 1e-12
        if result.attainable is not None:
            assert result.success <= result.attainable + 1e-12
            assert result.attainable <= result.bound + 1e-12
        if n_classes == 2:
            # Source: trace norm = sum of singular values (scipy), Helstrom 1976.
            gamma = priors[1] * states[1] - priors[0] * states[0]
            helstrom = 0.5 * (1 + scipy.linalg.svdvals(gamma).sum())
            assert result.bound == pytest.approx(helstrom, abs=DENSE_ATOL)
        # the reported success is what the compiled circuit achieves (Source: qml.matrix)
        assert result.success == pytest.approx(
            _direct_success(ansatz, result.params, states, priors, result.readout),
            abs=DENSE_ATOL)
        checked += 1
    assert checked == 6


def test_binary_readout_is_the_z_expectation_on_default_mixed():
    rng = np.random.default_rng(12)
    states = [random_density(4, rng, rank=2) for _ in range(2)]
    priors = np.array([0.4, 0.6])
    ansatz = user_ansatz(_sel, (2, 2, 3), ["a", "b"])
    result = readout_compile(states, ansatz, readout="b", priors=priors, restarts=1, seed=1)
    assert result.readout == ("b",)
    dev = qml.device("default.mixed", wires=["a", "b"])

    @qml.qnode(dev)
    def z(sigma):
        qml.QubitDensityMatrix(sigma, wires=["a", "b"])
        ansatz(result.params)
        return qml.expval(qml.PauliZ("b"))

    # Source: PennyLane default.mixed; class 1 <-> outcome 1, p(1) = (1 - <Z>)/2.
    direct = priors[0] * (1 + z(states[0])) / 2 + priors[1] * (1 - z(states[1])) / 2
    assert result.success == pytest.approx(float(direct), abs=DENSE_ATOL)


# ------------------------------------------------------------------------------ optimum


def test_reaches_helstrom_for_two_pure_states():
    rng = np.random.default_rng(21)
    a, b = random_state(4, rng), random_state(4, rng)
    states = [np.outer(a, a.conj()), np.outer(b, b.conj())]
    p0 = 0.35
    # Source: Helstrom 1976 closed form for pure states.
    closed = 0.5 * (1 + np.sqrt(1 - 4 * p0 * (1 - p0) * abs(np.vdot(a, b)) ** 2))
    result = readout_compile(states, make_ansatz("strong", 2, 4), priors=[p0, 1 - p0], seed=0)
    assert isinstance(result, ReadoutCompileResult)
    assert result.params.shape == (4, 2, 3) and result.converged
    assert abs(result.success - closed) < 1e-6
    assert result.history[-1] == pytest.approx(result.success, abs=1e-12)
    assert np.all(np.diff(result.history) >= -1e-12)  # L-BFGS iterates only improve


def test_reaches_helstrom_for_states_diagonal_in_a_rotated_basis():
    rng = np.random.default_rng(22)
    v, _ = np.linalg.qr(rng.standard_normal((4, 4)) + 1j * rng.standard_normal((4, 4)))
    a = np.array([0.5, 0.3, 0.15, 0.05])
    b = a[::-1]
    states = [(v * a) @ v.conj().T, (v * b) @ v.conj().T]
    # Source: commuting states, the maximum-likelihood rule: P* = sum_i max(p0 a_i, p1 b_i).
    closed = float(np.maximum(0.5 * a, 0.5 * b).sum())
    ansatz = user_ansatz(_sel, (4, 2, 3), [0, 1])
    result = readout_compile(states, ansatz, seed=1)
    assert closed == pytest.approx(0.8)
    assert result.bound == pytest.approx(closed, abs=DENSE_ATOL)
    assert abs(result.success - closed) < 1e-6
    assert result.success == pytest.approx(
        _direct_success(ansatz, result.params, states, [0.5, 0.5], (0,)), abs=DENSE_ATOL)


def test_fitted_models_are_accepted_and_give_the_same_result():
    terms = graph_terms(2, "line", fields="XZ", couplings=("ZZ",))
    rng = np.random.default_rng(31)
    models = [VisibleGibbsModel.from_coefficients(terms, rng.normal(0, 1, len(terms)))
              for _ in range(2)]
    ansatz = make_ansatz("strong", 2, 2)
    from_models = readout_compile(models, ansatz, restarts=1, seed=3)
    from_arrays = readout_compile([m.state() for m in models], ansatz, restarts=1, seed=3)
    np.testing.assert_allclose(from_models.params, from_arrays.params, atol=1e-12)
    assert from_models.bound == pytest.approx(helstrom_success(*[m.state() for m in models]))


def test_progress_bar_goes_to_stderr(capsys):
    rng = np.random.default_rng(41)
    states = [random_density(4, rng) for _ in range(2)]
    with pytest.warns(ConvergenceWarning, match="raise max_iter"):  # 5 iterations: too few
        readout_compile(states, make_ansatz("strong", 2, 1), restarts=1, max_iter=5,
                        progress=True)
    assert "readout compile" in capsys.readouterr().err


# --------------------------------------------------------------------------- validation


def test_input_errors_name_the_problem():
    rng = np.random.default_rng(51)
    ansatz = make_ansatz("strong", 2, 1)
    good = [random_density(4, rng) for _ in range(2)]
    cases = [
        ([random_density(8, rng), good[1]], {}, r"class 0: .*\(8, 8\).*expected \(4, 4\)"),
        ([good[0], good[1] + np.triu(np.ones((4, 4)), 1)], {}, "class 1 .*not Hermitian"),
        ([2 * good[0], good[1]], {}, "class 0 .*trace 2.*divide it by its trace first"),
        ([good[0], np.diag([1.5, -0.5, 0, 0])], {}, "class 1 .*negative eigenvalue"),
        ([good[0]], {}, "at least 2 class states"),
        (good, {"priors": [0.2, 0.2]}, "sum to 0.4, not 1"),
        (good, {"priors": [1.0]}, "one per class"),
        (good, {"readout": 5}, r"readout wires \(5,\) must be"),
        (good + [good[0]] * 3, {"readout": [0]}, "5 classes need at least 3 readout wires"),
    ]
    for states, kwargs, message in cases:
        with pytest.raises(ThermoseedError, match=message):
            readout_compile(states, ansatz, **kwargs)
    with pytest.raises(ThermoseedError, match="must be an Ansatz"):
        readout_compile(good, "strong")
    with pytest.raises(ThermoseedError, match="expects parameters of shape"):
        readout_compile(good, ansatz, init=np.zeros(3))
    with pytest.raises(ThermoseedError, match="no starting point"):
        readout_compile(good, ansatz, restarts=0, small_angle=None)
