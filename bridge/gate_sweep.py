"""Reverse-mode sweep over a gate list: ``U(params) @ block`` and its exact gradient by hand.

A built-in template is a list of gates on a (d, k) block (row index = wires, wire 0 most
significant): one-wire gates ``M(t)`` on a wire, one-wire gates acting where a control wire
is 1, and row permutations (CNOT patterns). ``apply_gates`` is an autograd primitive whose
vector-Jacobian product runs the circuit backwards once, instead of recording every small
array operation:

    forward   B_m = G_m B_{m-1},  B_0 = block,  out = B_M
    backward  Lambda_M = g,  Lambda_{m-1} = G_m^T Lambda_m,  B_{m-1} = G_m^dag B_m
    gradient  df/dt_p = Re sum(Lambda_m * (dG_m/dt_p) B_{m-1})
                      = Re sum_ab (dM/dt_p)_ab C_ab,  C_ab = sum_ij Lambda_{i a j} B_{i b j}

(``g`` is autograd's cotangent of ``out``; for a linear map ``out = G block`` autograd's
product is ``G^T g``, so the same sweep gives the block's cotangent ``Lambda_0``.) This is the
adjoint method of reversible simulation (Jones & Gacon, "Efficient calculation of gradients
in classical simulations of variational quantum algorithms", 2020): one forward and one
backward pass for all parameters, states rebuilt by the inverse gates instead of stored.

A one-wire gate is a product of elementary rotations ``R_s(t) = exp(-i t s / 2)``,
``s in {X, Y, Z}``, applied in the listed order, each with its parameter's flat index;
``dM/dt_k = R_K ... R_{k+1} (-i s_k / 2) R_k ... R_1``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
from autograd.extend import defvjp, primitive

PAULI = {
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]]),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


class WireGate(NamedTuple):
    """``M`` on ``wire`` (where ``control`` is 1, when given); ``derivs[p]`` is
    ``dM/dt`` of the parameter with flat index ``index[p]``."""

    wire: int
    matrix: np.ndarray
    derivs: np.ndarray
    index: tuple[int, ...]
    control: int | None = None


class Permutation(NamedTuple):
    """Rows ``block[perm]`` (a CNOT pattern); ``inverse`` undoes it."""

    perm: np.ndarray
    inverse: np.ndarray


def permutation(perm: np.ndarray) -> Permutation:
    inverse = np.empty_like(perm)
    inverse[perm] = np.arange(perm.size)
    return Permutation(perm, inverse)


def rotation_chain(axes: str, angles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``M = R_{a_K}(t_K) ... R_{a_1}(t_1)`` and ``dM/dt_k`` for rotations applied in the
    order of ``axes`` (e.g. ``"ZYZ"`` is PennyLane's ``Rot``), vectorised over wires:
    ``angles`` is (w, K); returns (w, 2, 2) and (w, K, 2, 2)."""
    angles = np.asarray(angles, dtype=float)
    w, count = angles.shape
    eye = np.broadcast_to(np.eye(2, dtype=complex), (w, 2, 2))
    singles, gens = [], []
    for k, axis in enumerate(axes):
        s = PAULI[axis]
        c, sn = np.cos(angles[:, k] / 2), np.sin(angles[:, k] / 2)
        singles.append(c[:, None, None] * np.eye(2) - 1j * sn[:, None, None] * s)
        gens.append(-0.5j * s)
    prefix = [eye]  # R_k ... R_1
    for r in singles:
        prefix.append(r @ prefix[-1])
    suffix = [eye]  # R_K ... R_{k+1}, built from the end
    for r in reversed(singles):
        suffix.append(suffix[-1] @ r)
    suffix = suffix[::-1]
    derivs = np.stack([suffix[k + 1] @ gens[k] @ prefix[k + 1] for k in range(count)], axis=1)
    return prefix[-1], derivs


def _position(gate: WireGate) -> int:
    """The target's position among the wires that index the rows the gate acts on (all
    wires, or all but the control)."""
    return gate.wire - int(gate.control is not None and gate.wire > gate.control)


def _control_rows(block: np.ndarray, control: int) -> np.ndarray:
    """The rows where wire ``control`` is 1, as a (2^control, rest) view."""
    return block.reshape(2**control, 2, -1)[:, 1, :]


def _act(block: np.ndarray, gate: WireGate, matrix: np.ndarray) -> np.ndarray:
    """``matrix`` on the gate's wire (control-1 rows only when controlled); a new array."""
    if gate.control is None:
        return np.matmul(matrix, block.reshape(2**gate.wire, 2, -1)).reshape(block.shape)
    out = block.copy()
    part = _control_rows(out, gate.control)
    part[...] = np.matmul(matrix, part.reshape(2 ** _position(gate), 2, -1)).reshape(part.shape)
    return out


def _correlation(lam: np.ndarray, state: np.ndarray, gate: WireGate) -> np.ndarray:
    """``C_ab = sum_ij Lambda_{i a j} B_{i b j}`` over the rows the gate acts on."""
    if gate.control is not None:
        lam, state = _control_rows(lam, gate.control), _control_rows(state, gate.control)
    pos = _position(gate)
    return np.einsum("iaj,ibj->ab", lam.reshape(2**pos, 2, -1), state.reshape(2**pos, 2, -1))


def forward(gates: Sequence, block: np.ndarray) -> np.ndarray:
    """``B_M = G_M ... G_1 block`` (plain numpy)."""
    out = np.array(block, dtype=complex)
    for gate in gates:
        out = out[gate.perm] if isinstance(gate, Permutation) else _act(out, gate, gate.matrix)
    return out


def backward(gates: Sequence, out: np.ndarray, cotangent: np.ndarray, n_params: int
             ) -> tuple[np.ndarray, np.ndarray]:
    """Parameter gradient ``Re sum(g * d out / dt)`` and the block's cotangent ``G^T g``."""
    grad = np.zeros(n_params)
    state = np.array(out, dtype=complex)
    lam = np.array(cotangent, dtype=complex)
    for gate in reversed(gates):
        if isinstance(gate, Permutation):
            state, lam = state[gate.inverse], lam[gate.inverse]
            continue
        state = _act(state, gate, gate.matrix.conj().T)
        corr = _correlation(lam, state, gate)
        np.add.at(grad, list(gate.index), np.real(np.einsum("pab,ab->p", gate.derivs, corr)))
        lam = _act(lam, gate, gate.matrix.T)
    return grad, lam


#: The last gate list built, ``(build, params bytes, gates)``: the forward pass and its
#: vector-Jacobian product see the same ``build`` and parameters, so the list is built once
#: (the entry is replaced whole, so a caller only ever gets the list of its own key).
_LAST_BUILT: list = [(None, b"", [])]


def _gates(build, params) -> list:
    """``build(params)``, reusing the list the forward pass just built."""
    x = np.asarray(params, float)
    key = x.tobytes()
    last_build, last_key, gates = _LAST_BUILT[0]
    if last_build is not build or last_key != key:
        gates = build(x)
        _LAST_BUILT[0] = (build, key, gates)
    return gates


@primitive
def apply_gates(params, block, build) -> np.ndarray:
    """``U(params) @ block`` with ``build(params) -> gate list`` (autograd primitive)."""
    return forward(_gates(build, params), block)


def _vjp_params(out, params, block, build):
    gates = _gates(build, params)
    shape = np.shape(params)
    size = int(np.prod(shape))
    return lambda g: backward(gates, out, g, size)[0].reshape(shape)


def _vjp_block(out, params, block, build):
    gates = _gates(build, params)
    size = int(np.prod(np.shape(params)))
    return lambda g: backward(gates, out, g, size)[1]


defvjp(apply_gates, _vjp_params, _vjp_block)
