"""Measurement records: randomised Pauli-basis shots and computational-basis counts.

A shot of a randomised Pauli measurement is one basis letter per qubit (X, Y or Z, drawn
uniformly) and one outcome bit per qubit (0 = eigenvalue +1 of that Pauli, 1 = -1). Wire k is
column k; in basis-state indices wire 0 is the most significant bit. ``from_records`` turns
records into ``MomentEstimates`` (moments with a covariance) for a term set; that is what
``VisibleGibbsModel.fit`` needs instead of a density matrix.

File schema: a thermoseed record (``files.write_record``) of kind ``"measurement-records"``,
version 1, header fields ``n_qubits``, ``n_shots``, ``scheme`` and ``basis_codes = "XYZ"``:

- ``scheme = "pauli"``: ``bases`` (S, n) uint8, codes 0 = X, 1 = Y, 2 = Z; ``outcomes``
  (S, n) uint8 in {0, 1}. Shots stay in recorded order (median of means batches by order).
- ``scheme = "counts"``: ``states`` (K,) int64 basis-state indices, ``counts`` (K,) int64 >= 1.

A plain ``.npz`` is read too: ``bases`` + ``outcomes``, or PennyLane's ``recipes`` + ``bits``
(what ``qml.classical_shadow`` returns, same codes), or ``counts`` (a length-2^n histogram).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .checks import integer_in, seed_value
from .data import check_density_matrix
from .errors import ThermoseedError
from .files import RECORD_HEADER, load_npz, read_record, write_record
from .paulis import TermSet
from .shadows import MomentEstimates, counts_estimates, shadow_estimates

RECORDS_KIND = "measurement-records"
BASIS_LETTERS = "XYZ"
#: Masks are int64: at most this many qubits.
MAX_RECORD_QUBITS = 62
#: Largest |<psi|psi> - 1| accepted by the simulator.
NORM_ATOL = 1e-8
_ROTATIONS = (  # U with U P U^dag = Z for P = X, Y: measuring P is U then Z
    np.array([[1, 1], [1, -1]]) / np.sqrt(2),
    np.array([[1, -1j], [1, 1j]]) / np.sqrt(2),
)


@dataclass(frozen=True)
class PauliShots:
    """Randomised single-qubit Pauli measurements: ``bases`` (S, n) codes 0/1/2 = X/Y/Z and
    ``outcomes`` (S, n) bits, one row per shot (build with ``pauli_shots``)."""

    bases: np.ndarray
    outcomes: np.ndarray

    @property
    def n_qubits(self) -> int:
        return int(self.bases.shape[1])

    @property
    def n_shots(self) -> int:
        return int(self.bases.shape[0])

    def masks(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per shot: x mask (X or Y measured), z mask (Y or Z), outcome mask; wire 0 = MSB."""
        weights = np.left_shift(1, np.arange(self.n_qubits - 1, -1, -1, dtype=np.int64))
        bx = (self.bases <= 1) @ weights
        bz = (self.bases >= 1) @ weights
        return bx, bz, self.outcomes.astype(np.int64) @ weights


@dataclass(frozen=True)
class BasisCounts:
    """Computational-basis counts: ``counts[i]`` shots gave basis state ``states[i]``."""

    states: np.ndarray
    counts: np.ndarray
    n_qubits: int

    @property
    def n_shots(self) -> int:
        return int(self.counts.sum())


def _check_qubits(n: int, n_qubits: int | None, what: str) -> int:
    if n < 1 or n > MAX_RECORD_QUBITS:
        raise ThermoseedError(f"{what} cover {n} qubits; records hold 1 to "
                              f"{MAX_RECORD_QUBITS} qubits")
    if n_qubits is not None and int(n_qubits) != n:
        raise ThermoseedError(f"{what} cover {n} qubits but n_qubits = {n_qubits}; give one "
                              "letter and one bit per qubit for every shot")
    return n


def _basis_codes(bases) -> np.ndarray:
    arr = np.asarray(bases)
    if arr.size == 0:
        raise ThermoseedError("the records are empty: no shots; record at least one shot")
    if arr.dtype.kind in "US":
        if arr.ndim == 1:  # one string per shot, e.g. "XZY"
            lengths = {len(str(s)) for s in arr}
            if len(lengths) != 1:
                raise ThermoseedError(f"basis strings have different lengths {sorted(lengths)}; "
                                      "give one letter per qubit for every shot")
            arr = np.array([list(str(s)) for s in arr])
        upper = np.char.upper(arr.astype(str))
        bad = ~np.isin(upper, list(BASIS_LETTERS))
        if bad.any():
            where = tuple(int(i) for i in np.argwhere(bad)[0])
            raise ThermoseedError(
                f"basis letter {str(arr[where])!r} at shot {where[0]}, qubit {where[1]} is not one "
                f"of {BASIS_LETTERS!r}; record the measured Pauli basis per qubit")
        arr = np.searchsorted(np.array(list(BASIS_LETTERS)), upper)
    elif arr.dtype.kind in "iub":
        bad = (arr < 0) | (arr > 2)
        if bad.any():
            where = tuple(int(i) for i in np.argwhere(bad)[0])
            raise ThermoseedError(f"basis code {int(arr[where])} at {where} is not 0, 1 or 2 "
                                  "(X, Y, Z)")
    else:
        raise ThermoseedError(f"bases must be letters {BASIS_LETTERS!r} or codes 0/1/2, got "
                              f"dtype {arr.dtype}")
    if arr.ndim != 2:
        raise ThermoseedError(f"bases must be (shots, qubits), got shape {arr.shape}")
    return arr.astype(np.uint8)


def pauli_shots(bases, outcomes, *, n_qubits: int | None = None) -> PauliShots:
    """Validated ``PauliShots``: ``bases`` as (S, n) letters, S strings of n letters, or
    (S, n) codes 0/1/2 (PennyLane's recipes); ``outcomes`` (S, n) bits 0/1."""
    codes = _basis_codes(bases)
    bits = np.asarray(outcomes)
    if bits.shape != codes.shape:
        raise ThermoseedError(f"outcomes have shape {bits.shape} but bases {codes.shape}; give "
                              "one outcome bit per measured qubit, (shots, qubits)")
    if bits.dtype.kind not in "iub" or np.any((bits != 0) & (bits != 1)):
        raise ThermoseedError("outcomes must be bits 0/1 (0 = eigenvalue +1); convert "
                              "eigenvalues e = +-1 with (1 - e) // 2")
    _check_qubits(codes.shape[1], n_qubits, "the shots")
    return PauliShots(codes, bits.astype(np.uint8))


def basis_counts(counts, *, states=None, n_qubits: int | None = None) -> BasisCounts:
    """Validated ``BasisCounts`` from ``{"0101": 12, ...}`` (bit strings, wire 0 first), a
    length-2^n histogram array, or ``counts`` beside ``states`` (basis-state indices, with
    ``n_qubits``)."""
    if isinstance(counts, dict):
        keys = list(counts)
        if not keys:
            raise ThermoseedError("the counts are empty; record at least one shot")
        if not all(isinstance(k, str) for k in keys):
            raise ThermoseedError("count keys must be bit strings such as '0101'; for integer "
                                  "indices pass states=[...] and counts=[...] with n_qubits")
        widths = {len(k) for k in keys}
        if len(widths) != 1 or any(set(k) - {"0", "1"} for k in keys):
            raise ThermoseedError("count keys must be bit strings of one length, e.g. '0101'")
        n = _check_qubits(widths.pop(), n_qubits, "the count keys")
        idx = np.array([int(k, 2) for k in keys], dtype=np.int64)
        values = np.array([counts[k] for k in keys])
    elif states is not None:
        if n_qubits is None:
            raise ThermoseedError("counts given per basis-state index need n_qubits=")
        n = _check_qubits(integer_in(n_qubits, "n_qubits", 1), None, "the counts")
        idx, values = np.asarray(states), np.asarray(counts)
        if idx.ndim != 1 or idx.shape != values.shape or idx.size == 0:
            raise ThermoseedError(f"states {idx.shape} and counts {values.shape} must be two "
                                  "non-empty 1-D arrays of one length")
        if idx.dtype.kind not in "iu" or np.any((idx < 0) | (idx >= 2**n)) or \
                np.unique(idx).size != idx.size:
            raise ThermoseedError(f"states must be distinct basis-state indices in "
                                  f"[0, 2^{n})")
    else:
        values = np.asarray(counts)
        if values.ndim != 1 or values.size < 2 or values.size & (values.size - 1):
            raise ThermoseedError(f"a counts histogram must have length 2^n, got shape "
                                  f"{values.shape}")
        n = _check_qubits(values.size.bit_length() - 1, n_qubits, "the histogram")
        idx = np.arange(values.size, dtype=np.int64)
    if values.dtype.kind not in "iu" or np.any(values < 0):
        raise ThermoseedError("counts must be non-negative integers")
    keep = values > 0
    if not keep.any():
        raise ThermoseedError("the counts are empty (all zero); record at least one shot")
    return BasisCounts(idx[keep].astype(np.int64), values[keep].astype(np.int64), n)


Records = PauliShots | BasisCounts


def save_records(path, records: Records) -> Path:
    """Write records as a versioned ``measurement-records`` file (schema above)."""
    if isinstance(records, PauliShots):
        header = {"scheme": "pauli", "n_qubits": records.n_qubits,
                  "n_shots": records.n_shots, "basis_codes": BASIS_LETTERS}
        arrays = {"bases": records.bases, "outcomes": records.outcomes}
    elif isinstance(records, BasisCounts):
        header = {"scheme": "counts", "n_qubits": records.n_qubits,
                  "n_shots": records.n_shots, "basis_codes": BASIS_LETTERS}
        arrays = {"states": records.states, "counts": records.counts}
    else:
        raise ThermoseedError(f"expected PauliShots or BasisCounts, got {type(records).__name__}")
    return write_record(path, RECORDS_KIND, header, arrays)


def load_records(path) -> Records:
    """Read a ``measurement-records`` file or a plain ``.npz`` (schema above)."""
    arrays = load_npz(path, what="records file")
    n_qubits = None
    if RECORD_HEADER in arrays:
        header, arrays = read_record(path, RECORDS_KIND)
        n_qubits = header.get("n_qubits")
    try:
        if "counts" in arrays and "states" in arrays:
            return basis_counts(arrays["counts"], states=arrays["states"], n_qubits=n_qubits)
        if "counts" in arrays:
            return basis_counts(arrays["counts"], n_qubits=n_qubits)
        for bases, bits in (("bases", "outcomes"), ("recipes", "bits")):
            if bases in arrays and bits in arrays:
                return pauli_shots(arrays[bases], arrays[bits], n_qubits=n_qubits)
    except ThermoseedError as err:
        raise ThermoseedError(f"{str(path)!r}: {err}") from err
    raise ThermoseedError(
        f"{str(path)!r} holds arrays {sorted(arrays)}; a records file needs 'bases' + "
        "'outcomes' (or 'recipes' + 'bits'), or 'counts' (+ 'states')")


def is_records_file(path) -> bool:
    """True when ``path`` is an ``.npz`` that ``load_records`` reads (checks names only)."""
    p = Path(path)
    if p.suffix != ".npz" or not p.is_file():
        return False
    try:
        with np.load(p, allow_pickle=False) as loaded:
            names = set(loaded.files)
            if RECORD_HEADER in names:
                return f'"kind": "{RECORDS_KIND}"' in str(loaded[RECORD_HEADER])
    except (OSError, ValueError, EOFError):
        return False
    return bool({"bases", "outcomes"} <= names or {"recipes", "bits"} <= names
                or "counts" in names)


def from_records(records, terms, *, groups: int = 1, missing: str = "error"
                 ) -> MomentEstimates:
    """Moments with errors for ``terms`` from records (``PauliShots``, ``BasisCounts`` or a
    records file): classical shadows for Pauli shots, frequencies for counts (Z/I terms).

    ``groups``: odd number of median-of-means batches (1 = mean; see ``pretrain.shadows``).
    ``missing``: ``"error"`` or ``"warn"`` for terms no shot measured in their bases.
    """
    if isinstance(records, (str, Path)):
        records = load_records(records)
    terms = terms if isinstance(terms, TermSet) else TermSet(terms)
    if not isinstance(records, (PauliShots, BasisCounts)):
        raise ThermoseedError(f"expected PauliShots, BasisCounts or a records file, got "
                              f"{type(records).__name__}; build them with pauli_shots(...)")
    if records.n_qubits != terms.n_qubits:
        raise ThermoseedError(f"the records cover {records.n_qubits} qubits but the term set "
                              f"acts on {terms.n_qubits}; build the term set for the records")
    if isinstance(records, BasisCounts):
        if groups != 1:
            raise ThermoseedError("counts carry no shot order: use groups=1 (the mean)")
        return counts_estimates(records.states, records.counts, terms)
    bx, bz, out = records.masks()
    return shadow_estimates(bx, bz, out, terms, groups=groups, missing=missing)


# ---------------------------------------------------------------- simulator


def _state_factor(state) -> np.ndarray:
    """``W`` with ``rho = W W^dag``: the vector itself, or ``V sqrt(lambda)`` of rho."""
    arr = np.asarray(state)
    if arr.ndim == 1:
        if arr.size < 2 or arr.size & (arr.size - 1):
            raise ThermoseedError(f"state vector has length {arr.size}, not 2^n")
        norm = np.vdot(arr, arr).real
        if abs(norm - 1.0) > NORM_ATOL:
            raise ThermoseedError(f"state vector has |psi|^2 = {norm:.12g}, not 1; normalise it")
        return arr.astype(complex)[:, None]
    rho = check_density_matrix(arr, trace_hint="divide the matrix by its trace")
    vals, vecs = np.linalg.eigh(rho)
    keep = vals > 1e-14 * vals.max()
    return vecs[:, keep] * np.sqrt(vals[keep])


def simulate_shots(state, shots: int, *, seed: int = 0) -> PauliShots:
    """Seeded randomised Pauli measurements of a state vector or density matrix: per shot
    a uniform basis letter per qubit, then the outcome drawn from ``|<b|U|psi>|^2`` (or the
    diagonal of ``U rho U^dag = U W W^dag U^dag``), U rotating each measured Pauli to Z.
    Settings are visited depth first (a rotated prefix is shared by every setting that
    extends it); cost about ``min(shots, 3^n) * 2^n * rank``."""
    w = _state_factor(state)
    d = w.shape[0]
    n = d.bit_length() - 1
    s = integer_in(shots, "shots", 1)
    rng = np.random.default_rng(seed_value(seed))
    codes = rng.integers(0, 3, size=(s, n)).astype(np.uint8)
    setting = codes.astype(np.int64) @ (3 ** np.arange(n - 1, -1, -1, dtype=np.int64))
    order = np.argsort(setting, kind="stable")
    ordered = codes[order]
    drawn = np.empty(s, dtype=np.int64)

    def visit(psi: np.ndarray, wire: int, lo: int, hi: int) -> None:
        if wire == n:
            probs = (np.abs(psi) ** 2).sum(axis=1)
            drawn[order[lo:hi]] = rng.choice(d, size=hi - lo, p=probs / probs.sum())
            return
        column = ordered[lo:hi, wire]  # sorted: the shots under this prefix, by letter
        for code in np.unique(column):
            a, b = lo + np.searchsorted(column, code), lo + np.searchsorted(column, code, "right")
            rotated = psi
            if code < 2:  # measure X or Y: rotate that wire to Z
                view = psi.reshape(2**wire, 2, -1)
                rotated = np.matmul(_ROTATIONS[code], view).reshape(d, -1)
            visit(rotated, wire + 1, a, b)

    visit(w, 0, 0, s)
    bits = (drawn[:, None] >> np.arange(n - 1, -1, -1)) & 1
    return PauliShots(codes, bits.astype(np.uint8))


def simulate_counts(state, shots: int, *, seed: int = 0) -> BasisCounts:
    """Seeded computational-basis counts: ``multinomial(shots, diag rho)``."""
    w = _state_factor(state)
    probs = (np.abs(w) ** 2).sum(axis=1)
    rng = np.random.default_rng(seed_value(seed))
    counts = rng.multinomial(integer_in(shots, "shots", 1), probs / probs.sum())
    keep = np.flatnonzero(counts)
    return BasisCounts(keep.astype(np.int64), counts[keep].astype(np.int64),
                       w.shape[0].bit_length() - 1)
