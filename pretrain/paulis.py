"""Pauli strings as bit masks, term sets from graphs, and matrix-free Pauli algebra.

Convention (wire 0 = most significant bit, PennyLane's order): a string is
``P = i^{|x&z|} X^x Z^z`` so that ``P|b> = i^{|x&z|} (-1)^{|z&b|} |b XOR x>``.
Hence ``Tr(A P) = sum_b A[b, b XOR x] i^{|x&z|} (-1)^{|z&b|}``: O(d) per term, and terms
sharing an x-mask share one gather of ``A``. No d x d Pauli matrix is ever built.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from functools import cached_property
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from .errors import ThermoseedError

LETTERS = "IXYZ"
_LETTER_BITS = {"I": (0, 0), "X": (1, 0), "Y": (1, 1), "Z": (0, 1)}
_I_POWERS = np.array([1, 1j, -1, -1j])
GRAPH_KINDS = ("line", "ring", "grid", "complete", "edges")


def popcount(values: np.ndarray | int) -> np.ndarray:
    """Number of set bits, elementwise (``np.bitwise_count`` on numpy >= 2)."""
    arr = np.asarray(values, dtype=np.int64)
    if hasattr(np, "bitwise_count"):
        return np.bitwise_count(arr).astype(np.int64)
    out = np.zeros_like(arr)
    while np.any(arr):
        out += arr & 1
        arr = arr >> 1
    return out


@dataclass(frozen=True)
class PauliString:
    """One Pauli string on ``n_qubits`` wires, stored as x/z bit masks."""

    x: int
    z: int
    n_qubits: int

    @classmethod
    def from_label(cls, label: str) -> PauliString:
        """Parse a label such as ``"XIZY"`` (letter k acts on wire k)."""
        if not isinstance(label, str) or not label:
            raise ThermoseedError(f"Pauli label must be a non-empty string, got {label!r}")
        x = z = 0
        n = len(label)
        for k, letter in enumerate(label.upper()):
            if letter not in _LETTER_BITS:
                raise ThermoseedError(
                    f"unknown Pauli letter {letter!r} at position {k} of {label!r}; "
                    f"use only the letters {LETTERS}"
                )
            bx, bz = _LETTER_BITS[letter]
            bit = n - 1 - k
            x |= bx << bit
            z |= bz << bit
        return cls(x, z, n)

    @property
    def label(self) -> str:
        letters = []
        for k in range(self.n_qubits):
            bit = self.n_qubits - 1 - k
            letters.append("IZXY"[((self.x >> bit) & 1) * 2 + ((self.z >> bit) & 1)])
        return "".join(letters)

    @property
    def n_y(self) -> int:
        return int(popcount(self.x & self.z))

    @property
    def weight(self) -> int:
        return int(popcount(self.x | self.z))

    def matrix(self) -> np.ndarray:
        """Dense 2^n x 2^n matrix (small n; for tests and conversions only)."""
        d = 2**self.n_qubits
        idx = np.arange(d)
        out = np.zeros((d, d), dtype=complex)
        out[idx ^ self.x, idx] = _I_POWERS[self.n_y % 4] * (-1.0) ** popcount(idx & self.z)
        return out

    def __str__(self) -> str:
        return self.label


class _XGroup(NamedTuple):
    """Terms sharing one x-mask: their indices, phases i^{n_y}, and sign table (-1)^{|z&b|}."""

    x: int
    index: np.ndarray
    phase: np.ndarray
    signs: np.ndarray


class TermSet(Sequence):
    """An ordered, duplicate-free set of Pauli strings on a fixed number of qubits."""

    def __init__(self, strings: Iterable[PauliString | str], n_qubits: int | None = None):
        parsed: list[PauliString] = []
        seen: set[tuple[int, int]] = set()
        for s in strings:
            p = PauliString.from_label(s) if isinstance(s, str) else s
            if not isinstance(p, PauliString):
                raise ThermoseedError(f"expected a Pauli label or PauliString, got {s!r}")
            if n_qubits is None:
                n_qubits = p.n_qubits
            if p.n_qubits != n_qubits:
                raise ThermoseedError(
                    f"Pauli string {p.label!r} acts on {p.n_qubits} qubits but the term set has "
                    f"{n_qubits}; give every label the same length"
                )
            if p.x == 0 and p.z == 0:
                raise ThermoseedError(
                    f"identity string {p.label!r} only shifts energies and cancels in a Gibbs "
                    "state; leave it out of the term set"
                )
            if (p.x, p.z) not in seen:
                seen.add((p.x, p.z))
                parsed.append(p)
        if not parsed:
            raise ThermoseedError("a term set needs at least one non-identity Pauli string")
        self._strings = tuple(parsed)
        self.n_qubits = int(n_qubits)

    def __len__(self) -> int:
        return len(self._strings)

    def __getitem__(self, i):
        return self._strings[i]

    def __iter__(self) -> Iterator[PauliString]:
        return iter(self._strings)

    def __eq__(self, other) -> bool:
        return isinstance(other, TermSet) and self._strings == other._strings

    def __hash__(self) -> int:
        return hash(self._strings)

    def __repr__(self) -> str:
        shown = ", ".join(self.labels[:6]) + (", ..." if len(self) > 6 else "")
        return f"TermSet(n_qubits={self.n_qubits}, {len(self)} terms: {shown})"

    @property
    def dim(self) -> int:
        return 2**self.n_qubits

    @cached_property
    def labels(self) -> list[str]:
        return [p.label for p in self._strings]

    @cached_property
    def is_real(self) -> bool:
        """True when every string has an even number of Y letters (real symmetric H)."""
        return all(p.n_y % 2 == 0 for p in self._strings)

    def index(self, label: str) -> int:
        target = PauliString.from_label(label)
        for i, p in enumerate(self._strings):
            if (p.x, p.z) == (target.x, target.z):
                return i
        raise ThermoseedError(f"{label!r} is not in this term set")

    @cached_property
    def groups(self) -> tuple[_XGroup, ...]:
        """Terms grouped by x-mask with phase and sign tables (built once, on first use)."""
        idx = np.arange(self.dim)
        by_x: dict[int, list[int]] = {}
        for j, p in enumerate(self._strings):
            by_x.setdefault(p.x, []).append(j)
        out = []
        for x, members in by_x.items():
            zs = np.array([self._strings[j].z for j in members], dtype=np.int64)
            signs = 1.0 - 2.0 * (popcount(zs[:, None] & idx[None, :]) & 1)
            phase = np.array([_I_POWERS[self._strings[j].n_y % 4] for j in members])
            out.append(_XGroup(x, np.array(members), phase, signs))
        return tuple(out)


def _check_square(matrix: np.ndarray, terms: TermSet) -> np.ndarray:
    a = np.asarray(matrix)
    if a.shape != (terms.dim, terms.dim):
        raise ThermoseedError(
            f"matrix has shape {a.shape} but the term set acts on {terms.n_qubits} qubits "
            f"(expected {(terms.dim, terms.dim)})"
        )
    return a


def pauli_traces(matrix: np.ndarray, terms: TermSet) -> np.ndarray:
    """``Tr(A P_j)`` for every term, O(d) per term (complex; real part for Hermitian A)."""
    a = _check_square(matrix, terms)
    idx = np.arange(terms.dim)
    out = np.zeros(len(terms), dtype=complex)
    for g in terms.groups:
        gathered = a[idx, idx ^ g.x]
        out[g.index] = g.phase * (g.signs @ gathered)
    return out


def expectations(matrix: np.ndarray, terms: TermSet) -> np.ndarray:
    """Real ``Tr(A P_j)`` for a Hermitian ``A`` (e.g. moments of a density matrix)."""
    return pauli_traces(matrix, terms).real


def _group_columns(coeffs: np.ndarray, terms: TermSet):
    coeffs = check_coefficients(coeffs, terms)
    for g in terms.groups:
        values = (coeffs[g.index] * g.phase) @ g.signs
        yield g.x, values


def check_coefficients(coeffs, terms: TermSet) -> np.ndarray:
    """Validate a real, finite coefficient vector of length ``len(terms)``."""
    c = np.asarray(coeffs)
    if c.shape != (len(terms),):
        raise ThermoseedError(
            f"coefficient vector has shape {c.shape}; the term set has {len(terms)} terms"
        )
    if np.iscomplexobj(c):
        if np.any(np.abs(c.imag) > 0):
            raise ThermoseedError("coefficients must be real for a Hermitian Hamiltonian")
        c = c.real
    c = c.astype(float)
    if not np.all(np.isfinite(c)):
        bad = np.flatnonzero(~np.isfinite(c))[:5].tolist()
        raise ThermoseedError(f"coefficients at positions {bad} are not finite")
    return c


def dense_hamiltonian(coeffs, terms: TermSet, *, real: bool | None = None) -> np.ndarray:
    """``H = sum_j c_j P_j`` as a dense array; real symmetric dtype when no odd-Y terms."""
    real = terms.is_real if real is None else real
    d = terms.dim
    idx = np.arange(d)
    h = np.zeros((d, d), dtype=float if real else complex)
    for x, values in _group_columns(coeffs, terms):
        h[idx ^ x, idx] += values.real if real else values
    return h


def sparse_hamiltonian(coeffs, terms: TermSet) -> sp.csr_matrix:
    """``H = sum_j c_j P_j`` as a scipy CSR matrix (one nonzero per column per x-mask)."""
    d = terms.dim
    idx = np.arange(d)
    rows, cols, vals = [], [], []
    for x, values in _group_columns(coeffs, terms):
        rows.append(idx ^ x)
        cols.append(idx)
        vals.append(values)
    data = np.concatenate(vals)
    if terms.is_real:
        data = data.real
    return sp.csr_matrix((data, (np.concatenate(rows), np.concatenate(cols))), shape=(d, d))


def apply_hamiltonian(coeffs, terms: TermSet, vectors: np.ndarray) -> np.ndarray:
    """``H @ V`` matrix-free for a vector or a (d, k) block ``V``."""
    v = np.asarray(vectors)
    if v.shape[0] != terms.dim:
        raise ThermoseedError(f"vector length {v.shape[0]} does not match dimension {terms.dim}")
    idx = np.arange(terms.dim)
    out = np.zeros(v.shape, dtype=np.result_type(v, complex if not terms.is_real else float))
    for x, values in _group_columns(coeffs, terms):
        vals = values.real if terms.is_real else values
        out[idx ^ x] += vals.reshape((-1,) + (1,) * (v.ndim - 1)) * v
    return out


# ---------------------------------------------------------------- term sets from graphs


def graph_edges(
    kind: str, n_qubits: int, *, shape: tuple[int, int] | None = None, edges=None
) -> list[tuple[int, int]]:
    """Edges of a line, ring, 2-D grid (``shape=(rows, cols)``), complete graph or edge list.

    ``qml.spin`` builds lattices as well; these few edge lists are written here because
    ``pretrain`` depends on numpy and scipy only (PennyLane enters at ``bridge``).
    """
    if kind not in GRAPH_KINDS:
        raise ThermoseedError(f"unknown graph {kind!r}; choose one of {GRAPH_KINDS}")
    n = int(n_qubits)
    if n < 1:
        raise ThermoseedError(f"n_qubits must be >= 1, got {n_qubits}")
    if kind == "line":
        out = [(i, i + 1) for i in range(n - 1)]
    elif kind == "ring":
        out = [(i, (i + 1) % n) for i in range(n)] if n > 2 else [(i, i + 1) for i in range(n - 1)]
    elif kind == "complete":
        out = [(i, j) for i in range(n) for j in range(i + 1, n)]
    elif kind == "grid":
        if shape is None or shape[0] * shape[1] != n:
            raise ThermoseedError(
                f"grid needs shape=(rows, cols) with rows*cols = {n}, got {shape}"
            )
        rows, cols = shape
        out = []
        for r in range(rows):
            for c in range(cols):
                q = r * cols + c
                if c + 1 < cols:
                    out.append((q, q + 1))
                if r + 1 < rows:
                    out.append((q, q + cols))
    else:
        if edges is None:
            raise ThermoseedError("graph 'edges' needs edges=[(i, j), ...]")
        out = [(int(i), int(j)) for i, j in edges]
    for i, j in out:
        if not (0 <= i < n and 0 <= j < n) or i == j:
            raise ThermoseedError(f"edge {(i, j)} is invalid for {n} qubits")
    return out


def graph_terms(
    n_qubits: int,
    graph: str = "ring",
    *,
    fields: str = "XYZ",
    couplings: Sequence[str] = ("XX", "YY", "ZZ"),
    shape: tuple[int, int] | None = None,
    edges=None,
    extra: Sequence[str] = (),
    parity: bool = False,
) -> TermSet:
    """Single-qubit ``fields`` on every wire, letter-pair ``couplings`` on every edge, plus
    ``extra`` labels, plus (``parity``) the global strings ``parity_labels(n)``. A pair
    ``"AB"`` on edge (i, j) puts A on wire i and B on wire j."""
    n = int(n_qubits)
    labels = []
    for letter in fields:
        for q in range(n):
            labels.append(_label_with({q: letter}, n))
    for pair in couplings:
        if len(pair) != 2:
            raise ThermoseedError(f"coupling {pair!r} must be two Pauli letters, e.g. 'ZZ'")
        for i, j in graph_edges(graph, n, shape=shape, edges=edges):
            labels.append(_label_with({i: pair[0], j: pair[1]}, n))
    labels.extend(extra)
    if parity:
        labels.extend(label for label in parity_labels(n) if label not in labels)
    return TermSet(labels, n_qubits=n)


def parity_labels(n_qubits: int) -> list[str]:
    """Global n-body strings: ``Z...Z`` and every string over X and Y with an even number of
    Y (``2^(n-1) + 1`` labels). They see coherences between ``|0...0>`` and ``|1...1>`` (a
    GHZ phase), which no 1- or 2-body term does."""
    n = int(n_qubits)
    out = ["Z" * n]
    for letters in itertools.product("XY", repeat=n):
        if letters.count("Y") % 2 == 0:
            out.append("".join(letters))
    return out


def _label_with(letters: dict[int, str], n: int) -> str:
    chars = ["I"] * n
    for q, letter in letters.items():
        chars[q] = letter
    return "".join(chars)


# ---------------------------------------------------------------- PennyLane conversions


class PauliExpansion(NamedTuple):
    """A Hermitian operator as ``offset * I + sum_j coeffs[j] * terms[j]``."""

    coeffs: np.ndarray
    terms: TermSet
    offset: float


def to_pennylane(coeffs, terms: TermSet, wires: Sequence | None = None):
    """``sum_j c_j P_j`` as a PennyLane operator (letter k of each label on ``wires[k]``)."""
    import pennylane as qml

    c = check_coefficients(coeffs, terms)
    wires = list(range(terms.n_qubits)) if wires is None else list(wires)
    if len(wires) != terms.n_qubits:
        raise ThermoseedError(f"got {len(wires)} wires for a {terms.n_qubits}-qubit term set")
    sentence = qml.pauli.PauliSentence()
    for cj, p in zip(c, terms, strict=True):
        word = qml.pauli.PauliWord({wires[k]: ch for k, ch in enumerate(p.label) if ch != "I"})
        sentence[word] = sentence.get(word, 0.0) + float(cj)
    return sentence.operation(wire_order=wires)


def from_pennylane(
    operator, wires: Sequence | None = None, *, atol: float = 1e-12
) -> PauliExpansion:
    """Expand a PennyLane operator into Pauli strings on ``wires`` (default: its own wires)."""
    import pennylane as qml

    try:
        sentence = qml.pauli.pauli_sentence(operator)
    except (ValueError, TypeError, AttributeError) as err:
        raise ThermoseedError(f"cannot expand {operator!r} into Pauli strings: {err}") from err
    wires = list(operator.wires) if wires is None else list(wires)
    position = {w: k for k, w in enumerate(wires)}
    offset = 0.0
    labels, coeffs = [], []
    for word, coeff in sentence.items():
        if abs(np.imag(coeff)) > atol:
            raise ThermoseedError(f"term {word} has complex coefficient {coeff}: not Hermitian")
        chars = ["I"] * len(wires)
        for w, letter in word.items():
            if w not in position:
                raise ThermoseedError(f"operator acts on wire {w!r}, which is not in {wires}")
            chars[position[w]] = letter
        if all(ch == "I" for ch in chars):
            offset += float(np.real(coeff))
            continue
        if abs(coeff) <= atol:
            continue
        labels.append("".join(chars))
        coeffs.append(float(np.real(coeff)))
    terms = TermSet(labels, n_qubits=len(wires))
    summed = np.zeros(len(terms))
    for label, cj in zip(labels, coeffs, strict=True):
        summed[terms.index(label)] += cj
    return PauliExpansion(summed, terms, offset)
