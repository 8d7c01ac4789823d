"""Training states: validation, the training density operator, target moments.

Accepted inputs: a batch of state vectors (optional weights), one density matrix, a stack of
density matrices (optional weights), a PennyLane quantum function, or a ``.npy``/``.npz`` file.
The training density operator is the weighted mixture ``rho = sum_i w_i rho_i``.

``.npz`` schema (keys): ``states`` (B, 2^n) complex, or ``density`` (2^n, 2^n) or (B, 2^n, 2^n);
optional ``weights`` (B,) positive; optional ``labels`` (B,) integers (used by bridge/).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import NamedTuple

import numpy as np

from .errors import ThermoseedError
from .files import CORRUPT_FILE_ERRORS
from .linalg import von_neumann_entropy
from .memory import LARGE_DATA_HINT, check_dense_memory
from .paulis import TermSet, expectations

#: Largest |A - A^dag| entry accepted for a density matrix.
HERMITIAN_ATOL = 1e-8
#: Most negative eigenvalue accepted for a density matrix.
PSD_ATOL = 1e-8
#: Largest |Tr rho - 1| (and |<psi|psi> - 1|) accepted without renormalisation.
TRACE_ATOL = 1e-8

DATA_KINDS = ("states", "density")


@dataclass(frozen=True)
class TrainingData:
    """The training density operator and where it came from.

    Attributes:
        rho: (2^n, 2^n) complex density matrix, the weighted mixture of the inputs.
        n_qubits: number of qubits.
        n_members: number of states mixed into ``rho``.
        labels: optional integer label per member (classification data for bridge/).
        states: optional (B, 2^n) pure states when the input was a batch of vectors.
        weights: mixture weights (sum 1).
    """

    rho: np.ndarray
    n_qubits: int
    n_members: int
    weights: np.ndarray
    labels: np.ndarray | None = None
    states: np.ndarray | None = field(default=None, repr=False)

    def moments(self, terms: TermSet) -> np.ndarray:
        """Target moments ``m_j = Tr(rho P_j)``."""
        check_qubits(self.n_qubits, terms)
        return expectations(self.rho, terms)

    def entropy(self) -> float:
        """Data entropy ``S(rho)`` in nats."""
        return von_neumann_entropy(self.rho)


def check_qubits(n_qubits: int, terms: TermSet) -> None:
    if n_qubits != terms.n_qubits:
        raise ThermoseedError(
            f"training data has {n_qubits} qubits but the term set acts on {terms.n_qubits}; "
            "build the term set for the data's qubit count"
        )


def _qubits_of(dim: int, what: str) -> int:
    n = int(round(np.log2(dim))) if dim > 0 else -1
    if dim < 2 or 2**n != dim:
        raise ThermoseedError(f"{what} has dimension {dim}, which is not a power of two (2^n)")
    return n


def _finite(arr: np.ndarray, what: str) -> np.ndarray:
    a = np.asarray(arr)
    if not np.issubdtype(a.dtype, np.number):
        raise ThermoseedError(f"{what} must be numeric, got dtype {a.dtype}")
    a = a.astype(complex)
    if not np.all(np.isfinite(a)):
        raise ThermoseedError(f"{what} contains NaN or infinite entries; clean the data first")
    return a


def _check_weights(weights, count: int) -> np.ndarray:
    """Mixture weights ``w_i / sum_k w_k``, computed as ``u_i / sum_k u_k`` with
    ``u = w / max w`` so that weights near the float maximum (1e308) do not overflow the sum
    to inf (which turned every weight, and rho, into 0)."""
    if weights is None:
        return np.full(count, 1.0 / count)
    try:
        w = np.asarray(weights, dtype=float)
    except (TypeError, ValueError) as err:
        raise ThermoseedError(f"weights must be {count} real numbers: {err}") from err
    if w.shape != (count,):
        raise ThermoseedError(f"weights have shape {w.shape}; expected ({count},), one per state")
    if not np.all(np.isfinite(w)) or np.any(w <= 0):
        bad = np.flatnonzero(~(np.isfinite(w) & (w > 0)))[:5].tolist()
        raise ThermoseedError(
            f"weights must be positive and finite; entries {bad} are not (drop those states)"
        )
    scaled = w / w.max()
    return scaled / scaled.sum()


def _check_members(count: int, shape: tuple[int, ...], what: str, expected: str) -> None:
    """A batch needs at least one member (an empty one used to divide by zero)."""
    if count < 1:
        raise ThermoseedError(
            f"{what} has shape {shape} with no members; expected {expected} with B >= 1")


def _check_labels(labels, count: int) -> np.ndarray | None:
    if labels is None:
        return None
    lab = np.asarray(labels)
    if lab.shape != (count,) or not np.issubdtype(lab.dtype, np.integer):
        raise ThermoseedError(f"labels must be {count} integers, got shape {lab.shape} {lab.dtype}")
    return lab.astype(np.int64)


#: The advice for a wrong trace where the caller offers ``renormalize`` (the default).
RENORMALIZE_HINT = "pass renormalize=True to divide by the trace"


def check_density_matrix(rho, *, renormalize: bool = False, what: str = "density matrix",
                         trace_hint: str = RENORMALIZE_HINT):
    """Validate a density matrix: square, 2^n, finite, Hermitian, PSD, unit trace.
    ``trace_hint`` is the advice given for a wrong trace (callers without a renormalize
    option pass their own)."""
    a = _finite(rho, what)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ThermoseedError(f"{what} must be a square matrix, got shape {a.shape}")
    _qubits_of(a.shape[0], what)
    asym = np.abs(a - a.conj().T).max()
    if asym > HERMITIAN_ATOL:
        raise ThermoseedError(
            f"{what} is not Hermitian: max |rho - rho^dag| = {asym:.3g} > {HERMITIAN_ATOL:g}; "
            "symmetrise it as (rho + rho^dag)/2 if this is round-off"
        )
    a = 0.5 * (a + a.conj().T)
    low = np.linalg.eigvalsh(a).min()
    if low < -PSD_ATOL:
        raise ThermoseedError(
            f"{what} has a negative eigenvalue {low:.3g} (< -{PSD_ATOL:g}); it is not a "
            "physical state (project onto the PSD cone, e.g. clip eigenvalues at 0)"
        )
    tr = np.trace(a).real
    if abs(tr - 1.0) > TRACE_ATOL:
        if not renormalize or tr <= 0:
            raise ThermoseedError(
                f"{what} has trace {tr:.12g}, not 1; {trace_hint}"
            )
        a = a / tr
    return a


def checked_states(states, weights=None, renormalize: bool = False
                   ) -> tuple[np.ndarray, np.ndarray, int]:
    """Validated ``(states (B, 2^n), weights summing to 1, n)`` of a state-vector batch."""
    s = _finite(states, "state batch")
    if s.ndim == 1:
        s = s[None, :]
    if s.ndim != 2:
        raise ThermoseedError(f"state batch must be (B, 2^n), got shape {s.shape}")
    _check_members(s.shape[0], s.shape, "state batch", "(B, 2^n) state vectors")
    n = _qubits_of(s.shape[1], "state vector")
    norms = np.linalg.norm(s, axis=1)
    off = np.flatnonzero(np.abs(norms**2 - 1.0) > TRACE_ATOL)
    if off.size:
        if not renormalize or np.any(norms[off] == 0):
            raise ThermoseedError(
                f"state vectors {off[:5].tolist()} are not normalised (|psi|^2 = "
                f"{norms[off[0]] ** 2:.12g}); pass renormalize=True to normalise them"
            )
        s = s / norms[:, None]
    return s, _check_weights(weights, s.shape[0]), n


def from_states(states, weights=None, *, labels=None, renormalize: bool = False) -> TrainingData:
    """Mixture of pure states: ``rho = sum_i w_i |psi_i><psi_i|``; ``states`` is (B, 2^n)."""
    s, w, n = checked_states(states, weights, renormalize)
    check_dense_memory(n, 1, "the dense density matrix", LARGE_DATA_HINT)
    rho = (s.T * w) @ s.conj()
    return TrainingData(rho, n, s.shape[0], w, _check_labels(labels, s.shape[0]), s)


class StateBatchSummary(NamedTuple):
    """What a fit needs of ``rho = sum_i w_i |psi_i><psi_i|``, without the d x d matrix.

    Attributes:
        n_qubits: number of qubits.
        moments: ``m_j = sum_i w_i <psi_i|P_j|psi_i>``.
        spectrum: rho's spectrum without its ``d - B`` structural zeros (B values,
            ascending, clipped at 0).
        support: orthonormal basis (d x r) of rho's range: eigenvectors with eigenvalue at or
            above ``floor``.
    """

    n_qubits: int
    moments: np.ndarray
    spectrum: np.ndarray
    support: np.ndarray


def summarize_states(states, terms: TermSet, weights=None, *, renormalize: bool = False,
                     floor: float = 1e-10) -> StateBatchSummary:
    """Moments, spectrum and range of a state mixture in O(B d (k + B)) time and O(B d)
    memory (no d x d matrix).

    With ``A = (sqrt(w_1) psi_1, ..., sqrt(w_B) psi_B)`` (d x B), ``rho = A A^dag`` and the
    Gram matrix ``G = A^dag A`` (B x B) share their nonzero eigenvalues; for ``G v = g v``,
    ``A v / sqrt(g)`` is a unit eigenvector of rho (the singular value decomposition of A).
    The moments are ``Tr(rho P) = sum_b rho[b, b^x] i^{|x&z|} (-1)^{|z&b|}`` (the x-mask
    gather of ``pauli_traces``) with ``rho[b, b^x] = sum_i w_i psi_i[b] psi_i[b^x]^*``.
    """
    s, w, n = checked_states(states, weights, renormalize)
    check_qubits(n, terms)
    idx = np.arange(terms.dim)
    moments = np.zeros(len(terms))
    for g in terms.groups:
        gathered = (w[:, None] * s * s[:, idx ^ g.x].conj()).sum(axis=0)
        moments[g.index] = (g.phase * (g.signs @ gathered)).real
    factor = s.T * np.sqrt(w)
    values, vectors = np.linalg.eigh(factor.conj().T @ factor)
    values = np.clip(values, 0.0, None)
    kept = values >= floor
    support = factor @ (vectors[:, kept] / np.sqrt(values[kept]))
    return StateBatchSummary(n, moments, values, support)


def from_density_matrices(
    rhos, weights=None, *, labels=None, renormalize: bool = False
) -> TrainingData:
    """Weighted mixture of density matrices; ``rhos`` is (2^n, 2^n) or (B, 2^n, 2^n)."""
    r = np.asarray(rhos)
    if r.ndim == 2:
        r = r[None]
    if r.ndim != 3:
        raise ThermoseedError(f"density matrices must be (B, 2^n, 2^n), got shape {r.shape}")
    _check_members(r.shape[0], r.shape, "density-matrix stack", "(B, 2^n, 2^n) matrices")
    dim = r.shape[-1]
    if dim == r.shape[-2] and dim >= 2 and dim & (dim - 1) == 0:
        check_dense_memory(dim.bit_length() - 1, len(r) + 1,
                           "the checked density matrices and their mixture", LARGE_DATA_HINT)
    checked = np.stack(
        [check_density_matrix(m, renormalize=renormalize, what=f"density matrix {i}")
         for i, m in enumerate(r)]
    )
    w = _check_weights(weights, len(checked))
    rho = np.tensordot(w, checked, axes=1)
    n = _qubits_of(rho.shape[0], "density matrix")
    return TrainingData(rho, n, len(checked), w, _check_labels(labels, len(checked)))


def from_qfunc(qfunc: Callable[[], None], n_qubits: int) -> TrainingData:
    """Run a PennyLane quantum function (no arguments, wires ``0..n-1``) on ``default.qubit``
    and train on the state it prepares (or on the ``default.mixed`` density matrix when the
    function contains noise channels)."""
    import pennylane as qml

    wires = list(range(int(n_qubits)))
    dev = qml.device("default.mixed", wires=wires)

    @qml.qnode(dev)
    def circuit():
        qfunc()
        return qml.density_matrix(wires=wires)

    try:
        rho = np.asarray(circuit())
    except Exception as err:  # noqa: BLE001 - a user's function may raise anything
        raise ThermoseedError(f"running the quantum function failed: {err}") from err
    return from_density_matrices(rho)


def square_array_kind(source) -> str | None:
    """Resolve the square 2-D ambiguity for callers that accept both forms: a Hermitian
    square array (within ``HERMITIAN_ATOL``) is one density matrix, any other square array a
    batch of state vectors; None for everything else (``as_training_data`` decides)."""
    if not isinstance(source, np.ndarray) or source.ndim != 2 or \
            source.shape[0] != source.shape[1] or not np.issubdtype(source.dtype, np.number):
        return None
    hermitian = np.all(np.isfinite(source)) and \
        np.abs(source - source.conj().T).max() <= HERMITIAN_ATOL
    return "density" if hermitian else "states"


def as_training_data(
    source, *, kind: str | None = None, weights=None, labels=None, n_qubits: int | None = None,
    renormalize: bool = False,
) -> TrainingData:
    """Dispatch any accepted input to a ``TrainingData``.

    1-D arrays are one state vector, 3-D arrays a stack of density matrices; a 2-D array is
    ambiguous when square (B states of dimension B, or one density matrix): pass
    ``kind="states"`` or ``kind="density"``. A callable needs ``n_qubits``.
    """
    if isinstance(source, TrainingData):
        return source
    if isinstance(source, (str, Path)):
        return load_training_data(source, kind=kind, renormalize=renormalize)
    if callable(source):
        if n_qubits is None:
            raise ThermoseedError("a quantum-function data source needs n_qubits=")
        return from_qfunc(source, n_qubits)
    arr = np.asarray(source)
    if kind is not None and kind not in DATA_KINDS:
        raise ThermoseedError(f"unknown data kind {kind!r}; choose one of {DATA_KINDS}")
    if kind is None:
        if arr.ndim == 1 or (arr.ndim == 2 and arr.shape[0] != arr.shape[1]):
            kind = "states"
        elif arr.ndim == 3:
            kind = "density"
        else:
            raise ThermoseedError(
                f"a square {arr.shape} array may be {arr.shape[0]} state vectors or one density "
                "matrix; pass kind='states' or kind='density'"
            )
    build = from_states if kind == "states" else from_density_matrices
    return build(arr, weights, labels=labels, renormalize=renormalize)


def stored_states(path) -> tuple[np.ndarray, np.ndarray | None] | None:
    """``(states, weights or None)`` when the ``.npz``/``.npy`` file at ``path`` holds a batch
    of state vectors (an ``.npz`` with ``states`` and no ``density``, or a 1-D or non-square
    2-D ``.npy``); None otherwise, including unreadable files (``load_training_data`` then
    says what is wrong). Lets a fit of many qubits skip the dense rho."""
    try:
        loaded = np.load(Path(path), allow_pickle=False)
        if isinstance(loaded, np.ndarray):
            flat = loaded.ndim == 1 or (loaded.ndim == 2 and loaded.shape[0] != loaded.shape[1])
            return (loaded, None) if flat else None
        with loaded:
            if "states" not in loaded.files or "density" in loaded.files:
                return None
            weights = loaded["weights"] if "weights" in loaded.files else None
            return loaded["states"], weights
    except CORRUPT_FILE_ERRORS:
        return None


def load_training_data(path, *, kind: str | None = None, renormalize: bool = False):
    """Load ``.npy`` or ``.npz`` training data (schema in the module docstring); no pickle."""
    p = Path(path)
    if not p.exists():
        raise ThermoseedError(f"data file {str(p)!r} does not exist")
    try:
        loaded = np.load(p, allow_pickle=False)
    except CORRUPT_FILE_ERRORS as err:
        raise ThermoseedError(f"cannot read data file {str(p)!r}: {err}") from err
    if isinstance(loaded, np.ndarray):
        return as_training_data(loaded, kind=kind, renormalize=renormalize)
    with loaded:
        keys = set(loaded.files)
        if {"states", "density"} <= keys:
            raise ThermoseedError(
                f"{str(p)!r} holds both 'states' and 'density'; which did you mean? Keep one "
                "of them in the file")
        if kind is not None and kind != ("states" if "states" in keys else "density"):
            raise ThermoseedError(
                f"{str(p)!r} holds {'states' if 'states' in keys else 'density'} arrays but "
                f"kind = {kind!r} was given; an .npz names its kind by its keys: leave kind "
                "out")
        try:
            weights = loaded["weights"] if "weights" in keys else None
            labels = loaded["labels"] if "labels" in keys else None
            if "states" in keys:
                return from_states(loaded["states"], weights, labels=labels,
                                   renormalize=renormalize)
            if "density" in keys:
                return from_density_matrices(loaded["density"], weights, labels=labels,
                                             renormalize=renormalize)
        except CORRUPT_FILE_ERRORS as err:
            if isinstance(err, ThermoseedError):
                raise ThermoseedError(f"{p}: {err}") from err
            raise ThermoseedError(f"cannot read data file {str(p)!r}: {err}") from err
    raise ThermoseedError(
        f"{str(p)!r} holds keys {sorted(keys)}; a data file needs 'states' or 'density' "
        "(optional 'weights', 'labels')"
    )
