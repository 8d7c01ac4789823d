"""The hand-written reverse sweep of the built-in templates (bridge.gate_sweep).

Values are checked against PennyLane's own matrices (qml.matrix of the template's quantum
function, or of the single gate); gradients against central finite differences.
"""

import autograd
import autograd.numpy as anp
import numpy as np
import pennylane as qml
import pytest
from numerics import central_differences

from thermoseed.bridge.ansatz import make_ansatz
from thermoseed.bridge.gate_sweep import (
    WireGate,
    apply_gates,
    forward,
    permutation,
    rotation_chain,
)
from thermoseed.bridge.templates import TEMPLATES


def _random_block(rng, d, k):
    return rng.standard_normal((d, k)) + 1j * rng.standard_normal((d, k))


def _objective(apply, weights):
    """f = Re sum(W * out): a real scalar that depends on every entry of the output."""
    return lambda params, block: anp.real(anp.sum(weights * apply(params, block)))


@pytest.mark.parametrize("name", sorted(TEMPLATES))
@pytest.mark.parametrize("n", [2, 3])
def test_template_gradient_matches_finite_differences(name, n):
    rng = np.random.default_rng(7)
    template = TEMPLATES[name]
    ansatz = make_ansatz(name, n, 2)
    params = rng.uniform(0, 2 * np.pi, ansatz.shape)
    block = _random_block(rng, 2**n, 3)
    weights = _random_block(rng, 2**n, 3)
    f = _objective(lambda p, b: template.apply(p, n, b), weights)
    # values: the fast form equals PennyLane's matrix of the template's quantum function
    u = qml.matrix(template.qfunc, wire_order=range(n))(params, list(range(n)))
    assert np.allclose(template.apply(params, n, block), u @ block, atol=1e-12)
    # parameter gradient against central finite differences
    grad = autograd.grad(f, 0)(params, block)
    reference = central_differences(lambda p: float(f(p, block)), params)
    assert np.allclose(grad, reference, atol=1e-7)
    # the block's cotangent: df/dRe(b) - i df/dIm(b) (autograd's convention for complex input)
    grad_block = autograd.grad(f, 1)(params, block)
    re = central_differences(lambda r: float(f(params, r + 1j * block.imag)), block.real.copy())
    im = central_differences(lambda i: float(f(params, block.real + 1j * i)), block.imag.copy())
    assert np.allclose(grad_block, re - 1j * im, atol=1e-7)


@pytest.mark.parametrize(("control", "target"), [(0, 2), (2, 0), (1, 2), (2, 1)])
def test_controlled_rotation_either_wire_order(control, target):
    """A controlled RY on any wire pair against qml.matrix(qml.CRY), value and gradient."""
    n, angle = 3, 0.83
    rng = np.random.default_rng(3)

    def gates(p):
        mats, derivs = rotation_chain("Y", np.reshape(p, (1, 1)))
        return [WireGate(target, mats[0], derivs[0], (0,), control=control),
                permutation(np.array([1, 0, 3, 2, 5, 4, 7, 6]))]

    block = _random_block(rng, 2**n, 2)
    expected = qml.matrix(qml.CRY(angle, wires=[control, target]), wire_order=range(n))
    flip = np.eye(2**n)[[1, 0, 3, 2, 5, 4, 7, 6]]
    assert np.allclose(forward(gates(np.array([angle])), block), flip @ expected @ block,
                       atol=1e-12)
    weights = _random_block(rng, 2**n, 2)
    f = _objective(lambda p, b: apply_gates(p, b, gates), weights)
    grad = autograd.grad(f, 0)(np.array([angle]), block)
    reference = central_differences(lambda p: float(f(p, block)), np.array([angle]))
    assert np.allclose(grad, reference, atol=1e-7)


def test_rotation_chain_is_pennylane_rot():
    """``ZYZ`` with angles (phi, theta, omega) is qml.Rot(phi, theta, omega)."""
    angles = np.array([[0.3, 1.1, -0.7], [2.0, 0.1, 0.4]])
    mats, derivs = rotation_chain("ZYZ", angles)
    for row, mat in zip(angles, mats, strict=True):
        assert np.allclose(mat, qml.matrix(qml.Rot(*row, wires=0)), atol=1e-14)
    eps = 1e-6
    for j in range(3):
        step = np.zeros_like(angles)
        step[:, j] = eps
        plus, _ = rotation_chain("ZYZ", angles + step)
        minus, _ = rotation_chain("ZYZ", angles - step)
        assert np.allclose(derivs[:, j], (plus - minus) / (2 * eps), atol=1e-8)
