"""Variational eigensolver on a built-in or user ansatz: minimise ``E(phi) = <0|U^dag H U|0>``.

Used by the neighbour-warm-start scenario: a compile of a Gibbs model fitted at one
Hamiltonian gives ``phi`` with ``U(phi)|0>`` near that model's most probable eigenvector,
which seeds the eigensolver for a nearby Hamiltonian.
"""

from __future__ import annotations

import sys
from typing import NamedTuple

import autograd
import autograd.numpy as anp
import numpy as np
from tqdm.auto import tqdm

from thermoseed.bridge.ansatz import Ansatz, ansatz_columns
from thermoseed.bridge.circuits import TwoBlock
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.optim import adam_steps


class EnergyRun(NamedTuple):
    """Energies per step (index 0 = initial) and the first step within ``target``."""

    params: np.ndarray
    energies: list[float]
    steps_to_target: int | None


def energy(ansatz: Ansatz, params, hamiltonian: np.ndarray):
    """``E(phi) = <0|U(phi)^dag H U(phi)|0>`` (autograd-differentiable)."""
    psi = ansatz_columns(ansatz, params, [0])[0]
    return anp.real(anp.dot(anp.conj(psi), anp.dot(hamiltonian, psi)))


def two_block_energy(blocks: TwoBlock, params, hamiltonian: np.ndarray):
    """``E = <psi|H|psi>`` with ``psi = U(h) U(e)^dag |0>`` (``TwoBlock``, flat parameters;
    ``h = e`` is an identity block, ``e`` at the identity point gives ``U(h)|0>``)."""
    psi = blocks.unitary(params)[:, 0]
    return anp.real(anp.dot(anp.conj(psi), anp.dot(hamiltonian, psi)))


def run_eigensolver(
    circuit: Ansatz | TwoBlock, hamiltonian: np.ndarray, params0, *, steps: int = 200,
    learning_rate: float = 0.05, target: float | None = None, progress: bool = False,
) -> EnergyRun:
    """Adam on ``E(phi)`` for ``steps`` steps; ``target`` is an energy threshold
    (the step count to reach ``E <= target`` is recorded, the run continues).
    ``circuit`` is an ``Ansatz`` (``energy``) or a ``TwoBlock`` (``two_block_energy``, flat
    parameters)."""
    d = 2**circuit.n_wires
    h = np.asarray(hamiltonian)
    if h.shape != (d, d) or not np.allclose(h, h.conj().T):
        raise ThermoseedError(f"the Hamiltonian must be a Hermitian {d}x{d} matrix, got {h.shape}")
    params = np.asarray(params0, dtype=float).copy()
    if isinstance(circuit, TwoBlock):
        circuit.split(params)
        value_and_grad = autograd.value_and_grad(lambda p: two_block_energy(circuit, p, h))
    else:
        circuit.check(params)
        value_and_grad = autograd.value_and_grad(lambda p: energy(circuit, p, h))
    energies: list[float] = []
    reached = None
    bar = tqdm(total=steps + 1, disable=not progress, file=sys.stderr, desc="eigensolver",
               leave=False)

    def note(value: float) -> None:
        nonlocal reached
        energies.append(float(value))
        if reached is None and target is not None and value <= target:
            reached = len(energies) - 1
        bar.update(1)

    for item in (adam_steps(value_and_grad, params, learning_rate=learning_rate)
                 if steps else ()):
        note(item.loss)  # energy at the iterate before this step
        params = item.x
        if item.step >= steps:
            break
    note(value_and_grad(params)[0])
    bar.close()
    return EnergyRun(params, energies, reached)
