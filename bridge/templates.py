"""The built-in template registry and the tensor kernels that apply gates to a block of states.

One registry, ``TEMPLATES``: name -> ``Template`` holding the PennyLane quantum function, the
parameter shape ``(n_layers, n_wires) -> shape``, the fast tensor form, the minimum wire count
and whether all-zero parameters give exactly the identity.

Fast tensor form: a block ``S`` (d x k, d = 2^n) is kept as a (d, k) array whose row index
carries the wires, wire 0 = most significant bit. A one-wire gate ``m`` on wire ``w`` acts on
``S.reshape(2^w, 2, -1)`` along its middle axis; a CNOT pattern is one row permutation (its
vector-Jacobian product is the inverse permutation, no scatter); CRX acts on the control-1
half. No circuit is built per evaluation; every template is checked against ``qml.matrix``
in the tests, and the same kernels run the user's circuits in ``bridge.ansatz``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from types import MappingProxyType

import autograd.numpy as anp
import numpy as np
import pennylane as qml
from autograd.extend import defvjp, primitive

# ------------------------------------------------------------------------- tensor kernels


def _stack2(a, b, c, d):
    """(m, 2, 2) stack of 2x2 matrices [[a, b], [c, d]] from length-m vectors."""
    return anp.stack([anp.stack([a, b], axis=-1), anp.stack([c, d], axis=-1)], axis=-2)


def ry_matrices(t):
    """``RY(t) = [[cos t/2, -sin t/2], [sin t/2, cos t/2]]`` for each entry of ``t``."""
    c, s = anp.cos(t / 2) + 0j, anp.sin(t / 2) + 0j
    return _stack2(c, -s, s, c)


def rz_matrices(t):
    """``RZ(t) = diag(e^{-it/2}, e^{it/2})`` for each entry of ``t``."""
    e = anp.exp(-0.5j * t)
    zero = 0.0 * e
    return _stack2(e, zero, zero, anp.conj(e))


def rx_matrices(t):
    """``RX(t) = [[cos t/2, -i sin t/2], [-i sin t/2, cos t/2]]`` for each entry of ``t``."""
    c, s = anp.cos(t / 2) + 0j, -1j * anp.sin(t / 2)
    return _stack2(c, s, s, c)


def rot_matrices(phi, theta, omega):
    """PennyLane ``Rot(phi, theta, omega) = RZ(omega) RY(theta) RZ(phi)``, vectorised."""
    c, s = anp.cos(theta / 2), anp.sin(theta / 2)
    plus, minus = 0.5 * (phi + omega), 0.5 * (phi - omega)
    return _stack2(anp.exp(-1j * plus) * c, -anp.exp(1j * minus) * s,
                   anp.exp(-1j * minus) * s, anp.exp(1j * plus) * c)


def apply_1q(block, mat, wire: int):
    """``(I (x) mat on wire (x) I) @ block`` for a (d, k) block: one batched 2x2 product."""
    shape = block.shape
    return anp.reshape(anp.matmul(mat, anp.reshape(block, (2**wire, 2, -1))), shape)


def _contract_1q(block, mat, wire: int):
    """The same product as ``apply_1q`` as one (2 x 2) @ (2 x d k / 2) contraction: slower
    for large blocks, but the built-ins keep the rounding of their first release, so
    compiles reproduce earlier results bit for bit."""
    shape = block.shape
    out = anp.tensordot(mat, anp.reshape(block, (2**wire, 2, -1)), axes=([1], [1]))
    return anp.reshape(anp.moveaxis(out, 0, 1), shape)


def apply_gate(block, mat, positions, n_wires: int):
    """A 2^q x 2^q gate ``mat`` (its wires in order ``positions``) applied to a (d, k) block."""
    q = len(positions)
    shape = block.shape
    tensor = anp.reshape(block, (2,) * n_wires + (shape[1],))
    gate = anp.reshape(mat, (2,) * (2 * q))
    out = anp.tensordot(gate, tensor, axes=(list(range(q, 2 * q)), list(positions)))
    return anp.reshape(anp.moveaxis(out, list(range(q)), list(positions)), shape)


@primitive
def permute_rows(block, perm, phase=None):
    """``block[perm]``, times ``phase[:, None]`` when given, for a permutation ``perm``."""
    return block[perm] if phase is None else phase[:, None] * block[perm]


def _permute_rows_vjp(ans, block, perm, phase=None):
    inverse = np.empty_like(perm)
    inverse[perm] = np.arange(perm.size)
    if phase is None:
        return lambda g: g[inverse]
    return lambda g: (phase[:, None] * g)[inverse]


defvjp(permute_rows, _permute_rows_vjp)


def _cnot_permutation(n: int, pairs) -> np.ndarray:
    """Row-gather index ``perm``: applying the CNOTs ``(control, target)`` in order maps
    ``block`` to ``block[perm]``."""
    idx = np.arange(2**n)
    perm = idx.copy()
    for control, target in pairs:
        cbit, tbit = 1 << (n - 1 - control), 1 << (n - 1 - target)
        perm = perm[np.where(idx & cbit, idx ^ tbit, idx)]
    return perm


def _controlled_1q(block, mat, control: int, target: int):
    """Apply ``mat`` on wire ``target > control`` where wire ``control`` is 1."""
    k = block.shape[1]
    halves = anp.reshape(block, (2**control, 2, -1))
    off, on = halves[:, 0], halves[:, 1]
    on = anp.reshape(_contract_1q(anp.reshape(on, (-1, k)), mat, target - 1), off.shape)
    return anp.reshape(anp.stack([off, on], axis=1), (-1, k))


def _rotations(block, mats):
    for wire in range(mats.shape[0]):
        block = _contract_1q(block, mats[wire], wire)
    return block


def _ring(n: int):
    return [(i, (i + 1) % n) for i in range(n)]


# ------------------------------------------------------------------- quantum functions


def _strong_qfunc(params, wires):
    qml.StronglyEntanglingLayers(params, wires=wires)


def _entangler_qfunc(params, wires):
    qml.BasicEntanglerLayers(params, wires=wires, rotation=qml.RY)


def _ladder_qfunc(params, wires):
    for layer in params:
        for k, w in enumerate(wires):
            qml.RY(layer[k][0], wires=w)
            qml.RZ(layer[k][1], wires=w)
        for a, b in zip(wires[:-1], wires[1:], strict=True):
            qml.CNOT(wires=[a, b])


def _soft_qfunc(params, wires):
    for layer in params:
        for k, w in enumerate(wires):
            qml.RY(layer[k][0], wires=w)
            qml.RZ(layer[k][1], wires=w)
        for k, (a, b) in enumerate(zip(wires[:-1], wires[1:], strict=True)):
            qml.CRX(layer[k][2], wires=[a, b])


# ------------------------------------------------------------------ fast tensor layers


def _strong_layer(block, layer, n, index):
    block = _rotations(block, rot_matrices(layer[:, 0], layer[:, 1], layer[:, 2]))
    if n == 1:
        return block
    r = (index % (n - 1)) + 1
    return permute_rows(block, _cnot_permutation(n, [(i, (i + r) % n) for i in range(n)]))


def _entangler_layer(block, layer, n, index):
    block = _rotations(block, ry_matrices(layer))
    if n == 1:
        return block
    return permute_rows(block, _cnot_permutation(n, [(0, 1)] if n == 2 else _ring(n)))


def _ladder_layer(block, layer, n, index):
    block = _rotations(block, anp.matmul(rz_matrices(layer[:, 1]), ry_matrices(layer[:, 0])))
    return permute_rows(block, _cnot_permutation(n, [(i, i + 1) for i in range(n - 1)]))


def _soft_layer(block, layer, n, index):
    block = _rotations(block, anp.matmul(rz_matrices(layer[:, 1]), ry_matrices(layer[:, 0])))
    crx = rx_matrices(layer[:, 2])
    for k in range(n - 1):
        block = _controlled_1q(block, crx[k], k, k + 1)
    return block


# ------------------------------------------------------------------------------ registry


@dataclass(frozen=True)
class Template:
    """A built-in template.

    Attributes:
        name: registry key.
        qfunc: ``qfunc(params, wires)`` queuing the PennyLane gates.
        shape: ``shape(n_layers, n_wires)`` -> parameter shape.
        layer: fast tensor form of one layer, ``layer(block, params[l], n_wires, l)``.
        min_wires: fewest wires the template is defined on.
        identity_at_zero: all-zero parameters give exactly the identity.
        description: one line for listings.
    """

    name: str
    qfunc: Callable
    shape: Callable[[int, int], tuple[int, ...]]
    layer: Callable
    min_wires: int
    identity_at_zero: bool
    description: str

    def apply(self, params, n_wires: int, block):
        """``U(params) @ block`` for a (2^n, k) ``block``, differentiable in ``params``."""
        out = block + 0j
        for index in range(params.shape[0]):
            out = self.layer(out, params[index], n_wires, index)
        return out


TEMPLATES: MappingProxyType[str, Template] = MappingProxyType({t.name: t for t in (
    Template("strong", _strong_qfunc, lambda layers, n: (layers, n, 3), _strong_layer, 1,
             False, "StronglyEntanglingLayers (Rot on every wire, CNOT ring of range r)"),
    Template("entangler", _entangler_qfunc, lambda layers, n: (layers, n), _entangler_layer, 1,
             False, "BasicEntanglerLayers with RY (RY on every wire, CNOT ring)"),
    Template("ladder", _ladder_qfunc, lambda layers, n: (layers, n, 2), _ladder_layer, 2,
             False, "RY, RZ on every wire, then a CNOT ladder 0-1, 1-2, ..."),
    Template("soft", _soft_qfunc, lambda layers, n: (layers, n, 3), _soft_layer, 2,
             True, "RY, RZ on every wire, then a CRX ladder (identity at zero)"),
)})
