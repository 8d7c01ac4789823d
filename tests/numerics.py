"""Numerical helpers shared by tests (importable because pytest puts tests/ on sys.path)."""

from __future__ import annotations

from functools import reduce

import numpy as np

#: Default step: truncation error O(step^2) and round-off ~1e-16/step, both ~1e-10 for O(1)
#: functions (common practice for double precision).
FD_STEP = 1e-6


def central_differences(f, x, step: float = FD_STEP) -> np.ndarray:
    """Gradient of scalar ``f`` at ``x`` (any shape) by ``(f(x + h e_i) - f(x - h e_i)) / 2h``,
    returned in the shape of ``x``."""
    x = np.asarray(x, dtype=float)
    out = np.zeros(x.size)
    for i in range(x.size):
        e = np.zeros(x.size)
        e[i] = step
        out[i] = (f(x + e.reshape(x.shape)) - f(x - e.reshape(x.shape))) / (2 * step)
    return out.reshape(x.shape)


# Source: textbook Pauli matrices (e.g. Nielsen & Chuang, section 2.1.3).
PAULI_2x2 = {
    "I": np.eye(2, dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


def kron_pauli(label: str) -> np.ndarray:
    """Dense matrix of a Pauli label; letter 0 is the leftmost Kronecker factor (MSB)."""
    return reduce(np.kron, [PAULI_2x2[ch] for ch in label])
