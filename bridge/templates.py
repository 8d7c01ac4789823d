"""The built-in template registry and the tensor kernels that apply gates to a block of states.

One registry, ``TEMPLATES``: name -> ``Template`` holding the PennyLane quantum function, the
parameter shape ``(n_layers, n_wires) -> shape``, the gate list of the fast form, the minimum
wire count and whether all-zero parameters give exactly the identity.

Fast form: a block ``S`` (d x k, d = 2^n) is kept as a (d, k) array whose row index carries
the wires, wire 0 = most significant bit. A built-in is a list of gates (one-wire rotation
products, controlled one-wire rotations, CNOT patterns as one row permutation) run by
``bridge.gate_sweep``, whose gradient is one backward pass over the list. No circuit is built
per evaluation; every template is checked against ``qml.matrix`` in the tests. The kernels
below (one-wire and q-wire products, row permutations, all autograd-differentiable) run the
user's recorded circuits in ``bridge.ansatz``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache, partial
from types import MappingProxyType

import autograd.numpy as anp
import numpy as np
import pennylane as qml
from autograd.extend import defvjp, primitive

from thermoseed.bridge.gate_sweep import (
    Permutation,
    WireGate,
    apply_gates,
    permutation,
    rotation_chain,
)

# ------------------------------------------------------------------------- tensor kernels


def apply_1q(block, mat, wire: int):
    """``(I (x) mat on wire (x) I) @ block`` for a (d, k) block: one batched 2x2 product."""
    shape = block.shape
    return anp.reshape(anp.matmul(mat, anp.reshape(block, (2**wire, 2, -1))), shape)


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


@lru_cache(maxsize=256)
def _cnot_pattern(n: int, pairs: tuple) -> Permutation:
    """Row gather for the CNOTs ``(control, target)`` applied in order: ``block[perm]``."""
    idx = np.arange(2**n)
    perm = idx.copy()
    for control, target in pairs:
        cbit, tbit = 1 << (n - 1 - control), 1 << (n - 1 - target)
        perm = perm[np.where(idx & cbit, idx ^ tbit, idx)]
    return permutation(perm)


def _ring(n: int) -> tuple:
    return tuple((i, (i + 1) % n) for i in range(n))


def _wire_gates(axes: str, angles: np.ndarray, first: int, stride: int, n: int) -> list:
    """One-wire gates ``rotation_chain(axes)`` on wires 0..n-1 of one layer; the angles of
    wire w have flat parameter indices ``first + w * stride + (0, 1, ...)``."""
    mats, derivs = rotation_chain(axes, angles)
    return [WireGate(w, mats[w], derivs[w],
                     tuple(first + w * stride + j for j in range(len(axes))))
            for w in range(n)]


def _strong_gates(params: np.ndarray, n: int) -> list:
    """Rot = RZ(omega) RY(theta) RZ(phi) on every wire, then CNOTs (i, i + r mod n),
    r = (layer mod (n - 1)) + 1."""
    gates = []
    for index in range(params.shape[0]):
        gates += _wire_gates("ZYZ", params[index], index * n * 3, 3, n)
        if n > 1:
            r = (index % (n - 1)) + 1
            gates.append(_cnot_pattern(n, tuple((i, (i + r) % n) for i in range(n))))
    return gates


def _entangler_gates(params: np.ndarray, n: int) -> list:
    gates = []
    for index in range(params.shape[0]):
        gates += _wire_gates("Y", params[index][:, None], index * n, 1, n)
        if n > 1:
            gates.append(_cnot_pattern(n, ((0, 1),) if n == 2 else _ring(n)))
    return gates


def _ladder_gates(params: np.ndarray, n: int) -> list:
    chain = tuple((i, i + 1) for i in range(n - 1))
    gates = []
    for index in range(params.shape[0]):
        gates += _wire_gates("YZ", params[index], index * n * 2, 2, n)
        gates.append(_cnot_pattern(n, chain))
    return gates


def _soft_gates(params: np.ndarray, n: int) -> list:
    """RY then RZ on every wire, then CRX(t_k) on (k, k + 1) for k = 0..n-2 (the last
    wire's third angle is unused)."""
    gates = []
    for index in range(params.shape[0]):
        first = index * n * 3
        gates += _wire_gates("YZ", params[index][:, :2], first, 3, n)
        mats, derivs = rotation_chain("X", params[index][:, 2:3])
        gates += [WireGate(k + 1, mats[k], derivs[k], (first + k * 3 + 2,), control=k)
                  for k in range(n - 1)]
    return gates


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


# ------------------------------------------------------------------------------ registry


@dataclass(frozen=True)
class Template:
    """A built-in template.

    Attributes:
        name: registry key.
        qfunc: ``qfunc(params, wires)`` queuing the PennyLane gates.
        shape: ``shape(n_layers, n_wires)`` -> parameter shape.
        gates: the fast form, ``gates(params, n_wires)`` -> list of ``bridge.gate_sweep``
            gates (parameters as a plain array).
        min_wires: fewest wires the template is defined on.
        identity_at_zero: all-zero parameters give exactly the identity.
        description: one line for listings.
    """

    name: str
    qfunc: Callable
    shape: Callable[[int, int], tuple[int, ...]]
    gates: Callable
    min_wires: int
    identity_at_zero: bool
    description: str

    def apply(self, params, n_wires: int, block):
        """``U(params) @ block`` for a (2^n, k) ``block``, differentiable in ``params`` and
        ``block`` (one backward pass over the gate list for the gradient)."""
        return apply_gates(params, block, partial(self.gates, n=int(n_wires)))


TEMPLATES: MappingProxyType[str, Template] = MappingProxyType({t.name: t for t in (
    Template("strong", _strong_qfunc, lambda layers, n: (layers, n, 3), _strong_gates, 1,
             False, "StronglyEntanglingLayers (Rot on every wire, CNOT ring of range r)"),
    Template("entangler", _entangler_qfunc, lambda layers, n: (layers, n), _entangler_gates, 1,
             False, "BasicEntanglerLayers with RY (RY on every wire, CNOT ring)"),
    Template("ladder", _ladder_qfunc, lambda layers, n: (layers, n, 2), _ladder_gates, 2,
             False, "RY, RZ on every wire, then a CNOT ladder 0-1, 1-2, ..."),
    Template("soft", _soft_qfunc, lambda layers, n: (layers, n, 3), _soft_gates, 2,
             True, "RY, RZ on every wire, then a CRX ladder (identity at zero)"),
)})
