"""Shared seeded helpers for the test suite.

The Pauli matrices here are written out by hand (textbook 2x2 matrices, Kronecker products with
wire 0 as the leftmost factor) so that reference Hamiltonians do not go through pretrain code.
"""

from __future__ import annotations

import numpy as np
import pytest
from numerics import PAULI_2x2, kron_pauli  # noqa: F401 - re-exported via helpers


def reference_hamiltonian(coeffs, labels) -> np.ndarray:
    """``sum_j c_j P_j`` from hand-written Kronecker products."""
    return sum(c * kron_pauli(lab) for c, lab in zip(coeffs, labels, strict=True))


def random_hermitian(d: int, rng: np.random.Generator, scale: float = 1.0) -> np.ndarray:
    a = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
    return scale * 0.5 * (a + a.conj().T)


def random_density(d: int, rng: np.random.Generator, rank: int | None = None) -> np.ndarray:
    """Random density matrix of the given rank (full rank by default), trace 1."""
    k = d if rank is None else rank
    g = rng.standard_normal((d, k)) + 1j * rng.standard_normal((d, k))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def random_state(d: int, rng: np.random.Generator) -> np.ndarray:
    v = rng.standard_normal(d) + 1j * rng.standard_normal(d)
    return v / np.linalg.norm(v)


def random_labels(n: int, count: int, rng: np.random.Generator, *, odd_y: bool = True):
    """``count`` distinct non-identity labels on n qubits; ``odd_y=False`` keeps H real."""
    out: list[str] = []
    seen = set()
    tries = 0
    while len(out) < count:
        tries += 1
        if tries > 10_000:
            raise RuntimeError("could not draw enough distinct labels")
        lab = "".join(rng.choice(list("IXYZ"), size=n))
        if set(lab) == {"I"} or lab in seen:
            continue
        if not odd_y and lab.count("Y") % 2:
            continue
        seen.add(lab)
        out.append(lab)
    return out


@pytest.fixture
def helpers():
    """Bundle of the seeded helper functions above."""

    class _H:
        kron_pauli = staticmethod(kron_pauli)
        reference_hamiltonian = staticmethod(reference_hamiltonian)
        random_hermitian = staticmethod(random_hermitian)
        random_density = staticmethod(random_density)
        random_state = staticmethod(random_state)
        random_labels = staticmethod(random_labels)

    return _H
