"""Argument checks (integers, seeds, real numbers): one place, one message style, used by
every layer."""

from __future__ import annotations

import numpy as np

from .errors import ThermoseedError


def real_number(value, what: str) -> float:
    """``float(value)`` when it is a finite real number, else a ThermoseedError naming it."""
    try:
        out = float(value)
    except (TypeError, ValueError) as err:
        raise ThermoseedError(f"{what} = {value!r} must be a real number") from err
    if not np.isfinite(out):
        raise ThermoseedError(f"{what} = {value!r} must be finite")
    return out


def integer_in(value, what: str, low: int, high: int | None = None) -> int:
    """``int(value)`` when it is an integer in ``[low, high]``."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ThermoseedError(f"{what} must be an integer, got {value!r}")
    if value < low or (high is not None and value > high):
        upper = "" if high is None else f" and <= {high}"
        raise ThermoseedError(f"{what} = {value} is out of range; use >= {low}{upper}")
    return int(value)


def qubit_count(n_qubits, max_qubits: int) -> int:
    """A chain length in ``2..max_qubits``."""
    return integer_in(n_qubits, "n_qubits", 2, max_qubits)


def inverse_temperature(beta, hint: str = "") -> float:
    """``beta >= 0`` (``hint`` is appended to the error message)."""
    b = real_number(beta, "beta")
    if b < 0:
        raise ThermoseedError(f"beta = {beta!r} must be >= 0{hint}")
    return b


def seed_value(seed) -> int:
    """A non-negative integer seed for ``numpy.random.default_rng``."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ThermoseedError(f"seed = {seed!r} must be a non-negative integer")
    return int(seed)
