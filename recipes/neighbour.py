"""Eigensolver runs from each initialisation strategy (neighbour-warm-start comparison).

Circuit ``psi = U(h) U(e)^dag |0>`` on the compile's template U (the same two-block circuit
as the plateau probes). ``pretrained``: ``e`` = the template's identity point (zeros of
``"soft"``), ``h`` = compiled ``phi``, so ``psi = U(phi)|0>`` starts on the fitted model's most
probable eigenvector; ``pretrained_perturbed`` adds N(0, 0.05^2); the other strategies come
from ``bridge.plateau`` with the same seeds.
"""

from __future__ import annotations

import sys
from itertools import product

import numpy as np
from tqdm.auto import tqdm

from thermoseed.bridge.circuits import TwoBlock
from thermoseed.bridge.compile import CompileResult
from thermoseed.bridge.eigensolver import run_eigensolver
from thermoseed.bridge.plateau.strategies import PERTURBATION_SCALE, make_strategy
from thermoseed.bridge.warm_starts import identity_head


def energy_runs(result: CompileResult, hamiltonian: np.ndarray, target: float, strategies,
                seeds, *, steps: int, learning_rate: float, progress: bool = False) -> list:
    """One record per (strategy, seed): energies per step and steps to ``target``."""
    unit = result.ansatz
    blocks = TwoBlock(unit, unit)
    records = []
    grid = list(product(strategies, seeds))
    for name, seed in tqdm(grid, disable=not progress, file=sys.stderr, desc="eigensolver",
                           unit="run", leave=False):
        rng = np.random.default_rng(seed)
        if name.startswith("pretrained"):
            params = np.asarray(blocks.join(identity_head(unit), result.params), float)
            if name == "pretrained_perturbed":
                params = params + PERTURBATION_SCALE * rng.standard_normal(blocks.shape)
        else:
            params = np.asarray(make_strategy(name).init(blocks.shape, rng), dtype=float)
        run = run_eigensolver(blocks, hamiltonian, params, steps=steps,
                              learning_rate=learning_rate, target=target)
        records.append({"strategy": name, "seed": int(seed), "energies": run.energies,
                        "steps_to_target": run.steps_to_target})
    return records
