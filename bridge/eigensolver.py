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
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.optim import adam


class EnergyRun(NamedTuple):
    """Energies per step (index 0 = initial) and the first step within ``target``."""

    params: np.ndarray
    energies: list[float]
    steps_to_target: int | None


def energy(ansatz: Ansatz, params, hamiltonian: np.ndarray):
    """``E(phi) = <0|U(phi)^dag H U(phi)|0>`` (autograd-differentiable)."""
    psi = ansatz_columns(ansatz, params, [0])[0]
    return anp.real(anp.dot(anp.conj(psi), anp.dot(hamiltonian, psi)))


def pair_energy(ansatz: Ansatz, pair, hamiltonian: np.ndarray):
    """``E(e, h) = <psi|H|psi>`` with ``psi = U(h) U(e)^dag |0>`` (the plateau probes'
    two-block circuit; ``h = e`` is an identity block, ``e`` = identity gives ``U(h)|0>``)."""
    rows_e = ansatz_columns(ansatz, pair[0])
    start = anp.conj(rows_e[:, 0])  # U^dag|0> = conj of U's first row
    psi = anp.dot(anp.transpose(ansatz_columns(ansatz, pair[1])), start)
    return anp.real(anp.dot(anp.conj(psi), anp.dot(hamiltonian, psi)))


def run_eigensolver(
    ansatz: Ansatz, hamiltonian: np.ndarray, params0, *, steps: int = 200,
    learning_rate: float = 0.05, target: float | None = None, progress: bool = False,
    paired: bool = False,
) -> EnergyRun:
    """Adam on ``E(phi)`` for ``steps`` steps; ``target`` is an energy threshold
    (the step count to reach ``E <= target`` is recorded, the run continues).
    ``paired``: parameters have shape ``(2, *ansatz.shape)`` and the energy is
    ``pair_energy``."""
    h = np.asarray(hamiltonian)
    d = 2**ansatz.n_wires
    if h.shape != (d, d) or not np.allclose(h, h.conj().T):
        raise ThermoseedError(f"the Hamiltonian must be a Hermitian {d}x{d} matrix, got {h.shape}")
    params = np.asarray(params0, dtype=float).copy()
    if paired:
        if params.shape != (2, *ansatz.shape):
            raise ThermoseedError(
                f"paired parameters must have shape {(2, *ansatz.shape)}, got {params.shape}")
        ansatz.check(params[0])
        value_and_grad = autograd.value_and_grad(lambda p: pair_energy(ansatz, p, h))
    else:
        ansatz.check(params)
        value_and_grad = autograd.value_and_grad(lambda p: energy(ansatz, p, h))
    opt = adam(learning_rate)
    state = opt.init(params)
    energies: list[float] = []
    reached = None
    for step in tqdm(range(steps + 1), disable=not progress, file=sys.stderr, desc="eigensolver",
                     leave=False):
        value, grad = value_and_grad(params)
        energies.append(float(value))
        if reached is None and target is not None and value <= target:
            reached = step
        if step == steps:
            break
        delta, state = opt.update(np.asarray(grad, dtype=float), state)
        params = params + delta
    return EnergyRun(params, energies, reached)
