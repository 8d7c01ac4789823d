"""Size limits of the dense path: refuse what cannot fit in memory, announce what will be slow.

A dense n-qubit operator is a ``d x d`` complex128 array, ``d = 2^n``: ``16 d^2`` bytes
(16 GiB at n = 15, 16 TiB at n = 20). ``check_dense_memory`` compares what a step holds at
once (``count`` such matrices) with the memory the machine reports available (Linux
``MemAvailable`` in ``/proc/meminfo``, else ``os.sysconf`` available pages) and refuses with
one line naming both numbers and the way out, before anything large is allocated.

A dense Hermitian eigendecomposition costs ``O(d^3)``. ``dense_eigh_seconds`` times one on a
small matrix here and scales it by ``(d / d_small)^3``; ``announce_dense_cost`` warns once
(``SlowDenseWarning``) when that estimate passes ``SLOW_DENSE_SECONDS``, instead of minutes
of silence.
"""

from __future__ import annotations

import os
import time
import warnings
from pathlib import Path

import numpy as np

from .errors import SlowDenseWarning, ThermoseedError

#: Bytes per complex128 entry.
COMPLEX_BYTES = 16
#: Where Linux reports the memory available to new allocations.
MEMINFO = Path("/proc/meminfo")
#: Matrix size of the timed eigendecomposition the cost estimate is scaled from.
TIMING_DIM = 256
#: Timed runs of the small eigendecomposition (the fastest counts).
TIMING_REPEATS = 3
#: Smallest qubit count whose dense cost is estimated (and possibly announced).
TIMED_FROM_QUBITS = 12
#: Estimated seconds of one dense eigendecomposition above which a notice is given.
SLOW_DENSE_SECONDS = 10.0
#: The way out for data too large for dense matrices (named in every refusal about data);
#: "12" is ``models.MATRIX_FREE_FROM_QUBITS - 1`` (a test keeps the two together).
LARGE_DATA_HINT = (
    "fit the state vectors themselves (VisibleGibbsModel.fit takes their moments without a "
    "dense matrix above 12 qubits and fits with engine='typicality') or measurement records "
    "(thermoseed.pretrain.simulate_shots)")


def available_memory_bytes() -> int | None:
    """Bytes the machine can hand out now: ``MemAvailable`` from ``/proc/meminfo`` (kB), else
    ``SC_AVPHYS_PAGES * SC_PAGE_SIZE``; None when neither is known (then nothing is refused)."""
    try:
        for line in MEMINFO.read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def format_bytes(count: float) -> str:
    """``count`` bytes in binary units, e.g. ``17592186044416 -> '16 TiB'``."""
    value = float(count)
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if value < 1024 or unit == "PiB":
            return f"{value:.3g} {unit}"
        value /= 1024
    raise AssertionError("unreachable")  # pragma: no cover - the loop returns at PiB


def dense_matrix_bytes(n_qubits: int, count: int = 1) -> int:
    """``count * 16 * 4^n``: bytes of ``count`` dense complex128 n-qubit matrices."""
    return int(count) * COMPLEX_BYTES * 4 ** int(n_qubits)


def check_dense_memory(n_qubits: int, count: int, what: str, way_out: str) -> None:
    """Refuse (ThermoseedError) when ``count`` dense n-qubit matrices exceed the available
    memory; ``what`` names them, ``way_out`` is the advice."""
    need = dense_matrix_bytes(n_qubits, count)
    have = available_memory_bytes()
    if have is None or need <= have:
        return
    raise ThermoseedError(
        f"n = {n_qubits} qubits needs {format_bytes(need)} for {what}; this machine has "
        f"{format_bytes(have)} available: {way_out}")


def dense_eigh_seconds(n_qubits: int) -> float:
    """Estimated seconds of one complex ``d x d`` Hermitian eigendecomposition here: the fastest
    of ``TIMING_REPEATS`` timed ``numpy.linalg.eigh`` of size ``TIMING_DIM``, scaled by
    ``(d / TIMING_DIM)^3``. A rough figure (within a factor of about 3 on a loaded machine)."""
    rng = np.random.default_rng(0)
    a = rng.standard_normal((TIMING_DIM, TIMING_DIM)) + 1j * rng.standard_normal(
        (TIMING_DIM, TIMING_DIM))
    a = a + a.conj().T
    elapsed = float("inf")
    for _ in range(TIMING_REPEATS):  # the fastest run: the others waited for a busy machine
        start = time.perf_counter()
        np.linalg.eigh(a)
        elapsed = min(elapsed, time.perf_counter() - start)
    return elapsed * (2 ** int(n_qubits) / TIMING_DIM) ** 3


def announce_dense_cost(n_qubits: int, what: str, *, stacklevel: int = 3) -> float | None:
    """Warn once (``SlowDenseWarning``) when ``what`` (one dense eigendecomposition per use)
    is estimated above ``SLOW_DENSE_SECONDS``; returns the estimate (None below
    ``TIMED_FROM_QUBITS``, where nothing is timed: a fit there takes seconds)."""
    if int(n_qubits) < TIMED_FROM_QUBITS:
        return None
    seconds = dense_eigh_seconds(n_qubits)
    if seconds > SLOW_DENSE_SECONDS:
        warnings.warn(
            f"n = {n_qubits} qubits: {what} takes about {seconds:.0f} s on this machine (one "
            f"{2 ** int(n_qubits)} x {2 ** int(n_qubits)} eigendecomposition each)",
            SlowDenseWarning, stacklevel=stacklevel)
    return seconds
