"""Built-in templates applied to a block of input states with plain numpy/autograd ops.

The block ``S`` (d x k) is held as a tensor of shape (2,)*n + (k,) (wire 0 = first axis =
most significant bit). A layer applies every wire's 2x2 rotation with one tensordot per wire,
then its entangler: CNOTs are basis permutations (one row gather), CRX acts on the
control-1 slice. Each layer is ~n autograd nodes on d x k data, which is measured several
times faster than building a circuit per evaluation (tests/benchmarks/bench_compile.py);
every template is checked against ``qml.matrix`` in tests.
"""

from __future__ import annotations

import autograd.numpy as anp
import numpy as np


def _stack2(a, b, c, d):
    """(m, 2, 2) stack of 2x2 matrices [[a, b], [c, d]] from length-m vectors."""
    return anp.stack([anp.stack([a, b], axis=-1), anp.stack([c, d], axis=-1)], axis=-2)


def ry_matrices(t):
    c, s = anp.cos(t / 2) + 0j, anp.sin(t / 2) + 0j
    return _stack2(c, -s, s, c)


def rz_matrices(t):
    e = anp.exp(-0.5j * t)
    zero = 0.0 * e
    return _stack2(e, zero, zero, anp.conj(e))


def rx_matrices(t):
    c, s = anp.cos(t / 2) + 0j, -1j * anp.sin(t / 2)
    return _stack2(c, s, s, c)


def rot_matrices(phi, theta, omega):
    """PennyLane ``Rot(phi, theta, omega) = RZ(omega) RY(theta) RZ(phi)``, vectorised."""
    c, s = anp.cos(theta / 2), anp.sin(theta / 2)
    plus, minus = 0.5 * (phi + omega), 0.5 * (phi - omega)
    return _stack2(anp.exp(-1j * plus) * c, -anp.exp(1j * minus) * s,
                   anp.exp(-1j * minus) * s, anp.exp(1j * plus) * c)


def _apply_1q(tensor, mat, wire):
    return anp.moveaxis(anp.tensordot(mat, tensor, axes=([1], [wire])), 0, wire)


def _apply_rotations(tensor, mats):
    for wire in range(mats.shape[0]):
        tensor = _apply_1q(tensor, mats[wire], wire)
    return tensor


def _cnot_permutation(n: int, pairs) -> np.ndarray:
    """Row-gather index ``perm``: applying the CNOTs in order maps row i to row perm[i]."""
    idx = np.arange(2**n)
    perm = idx.copy()
    for control, target in pairs:
        cbit, tbit = 1 << (n - 1 - control), 1 << (n - 1 - target)
        perm = perm[np.where(idx & cbit, idx ^ tbit, idx)]
    return perm


def _permute(tensor, perm):
    shape = tensor.shape
    flat = anp.reshape(tensor, (perm.size, -1))
    return anp.reshape(flat[perm], shape)


def _controlled_1q(tensor, mat, control, target):
    """Apply ``mat`` on ``target`` where ``control`` is 1."""
    lead = (slice(None),) * control
    off = tensor[lead + (0,)]
    on = tensor[lead + (1,)]
    t = target - 1 if target > control else target
    return anp.stack([off, _apply_1q(on, mat, t)], axis=control)


def _ring(n):
    return [(i, (i + 1) % n) for i in range(n)]


def _strong(tensor, layer, n, index):
    tensor = _apply_rotations(tensor, rot_matrices(layer[:, 0], layer[:, 1], layer[:, 2]))
    if n == 1:
        return tensor
    r = (index % (n - 1)) + 1
    return _permute(tensor, _cnot_permutation(n, [(i, (i + r) % n) for i in range(n)]))


def _entangler(tensor, layer, n, index):
    tensor = _apply_rotations(tensor, ry_matrices(layer))
    if n == 1:
        return tensor
    return _permute(tensor, _cnot_permutation(n, [(0, 1)] if n == 2 else _ring(n)))


def _ladder(tensor, layer, n, index):
    rot = anp.matmul(rz_matrices(layer[:, 1]), ry_matrices(layer[:, 0]))
    tensor = _apply_rotations(tensor, rot)
    return _permute(tensor, _cnot_permutation(n, [(i, i + 1) for i in range(n - 1)]))


def _soft(tensor, layer, n, index):
    tensor = _apply_rotations(tensor, anp.matmul(rz_matrices(layer[:, 1]),
                                                 ry_matrices(layer[:, 0])))
    crx = rx_matrices(layer[:, 2])
    for k in range(n - 1):
        tensor = _controlled_1q(tensor, crx[k], k, k + 1)
    return tensor


LAYERS = {"strong": _strong, "entangler": _entangler, "ladder": _ladder, "soft": _soft}


def template_apply(name: str, params, n_wires: int, block):
    """``U(params) @ block`` for a built-in template; ``block`` is (2^n, k)."""
    layer = LAYERS[name]
    k = block.shape[1]
    tensor = anp.reshape(block + 0j, (2,) * n_wires + (k,))
    for index in range(params.shape[0]):
        tensor = layer(tensor, params[index], n_wires, index)
    return anp.reshape(tensor, (2**n_wires, k))


def template_matrix(name: str, params, n_wires: int):
    """The full matrix ``U(params)`` of a built-in template."""
    return template_apply(name, params, n_wires, np.eye(2**n_wires))
