"""Labelled classifier data: states with integer labels, split into training and held-out.

``StateBatch`` (``as_state_batch``) is a validated batch of states, vectors or density
matrices, with its per-state moments and its mixture; ``check_labels`` the labels' check.

``LabelledData`` is the one container for labelled states in thermoseed (sweeps, probes,
recipes, the command line); ``stratified_split`` the one train / held-out split. The states
are checked like the fit's data: finite, (B, 2^n) unit vectors or (B, 2^n, 2^n) density
matrices (Hermitian, PSD, trace one), labels integers 0..C-1.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import NamedTuple

import numpy as np

from .checks import real_number, seed_value
from .data import (
    TrainingData,
    check_density_matrix,
    check_qubits,
    checked_states,
    from_density_matrices,
    from_states,
    square_array_kind,
)
from .errors import ThermoseedError
from .files import RECORD_HEADER, load_npz, read_record, write_record
from .paulis import TermSet, expectations

#: Largest deviation of a state vector's norm from one that is accepted as round-off.
NORM_ATOL = 1e-8


def stratified_split(labels, test_fraction: float = 0.25,
                     seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Seeded, label-stratified ``(train, test)`` index split (the one split in thermoseed).

    One permutation of the samples from ``np.random.default_rng(seed)``; from each label class
    the first ``max(1, round(test_fraction * count))`` permuted members go to the test set
    (at least one stays for training), the rest to the training set, both in permuted order.
    """
    lab = np.asarray(labels)
    if lab.ndim != 1 or not np.issubdtype(lab.dtype, np.integer):
        raise ThermoseedError(f"labels must be a 1-D integer array, got shape {lab.shape} "
                              f"dtype {lab.dtype}")
    fraction = real_number(test_fraction, "test_fraction")
    if not 0 < fraction < 1:
        raise ThermoseedError(f"test_fraction = {test_fraction!r} must lie strictly in (0, 1)")
    order = np.random.default_rng(seed_value(seed)).permutation(len(lab))
    test_mask = np.zeros(len(lab), dtype=bool)
    for label in np.unique(lab):
        members = order[lab[order] == label]
        if len(members) < 2:
            raise ThermoseedError(
                f"class {int(label)} has {len(members)} sample; a held-out split needs at "
                "least two per class (add samples of that class)")
        k = min(max(1, int(round(fraction * len(members)))), len(members) - 1)
        test_mask[members[:k]] = True
    return order[~test_mask[order]], order[test_mask[order]]


def check_state_batch(states, n_qubits: int | None = None, *, what: str = "states"):
    """(B, 2^n) unit vectors or (B, 2^n, 2^n) density matrices, finite; returns the array.

    ``n_qubits`` (when given) must match; messages name the offending state and the fix.
    """
    arr = np.asarray(states)
    if not np.issubdtype(arr.dtype, np.number):
        raise ThermoseedError(f"{what} must be numeric arrays, got dtype {arr.dtype}")
    if arr.ndim not in (2, 3) or len(arr) < 1 or (arr.ndim == 3 and arr.shape[1] != arr.shape[2]):
        raise ThermoseedError(f"{what} must be (B, 2^n) state vectors or (B, 2^n, 2^n) density "
                              f"matrices with B >= 1, got shape {arr.shape}")
    d = arr.shape[1]
    n = int(round(np.log2(d))) if d > 0 else -1
    if d < 2 or 2**n != d:
        raise ThermoseedError(f"{what} have dimension {d}, not a power of two 2^n")
    if n_qubits is not None and n != n_qubits:
        raise ThermoseedError(f"{what} are {n}-qubit states but {n_qubits} qubits are "
                              "expected; pass the data generated for this qubit count")
    bad = np.flatnonzero(~np.all(np.isfinite(arr.reshape(len(arr), -1)), axis=1))
    if bad.size:
        raise ThermoseedError(f"{what} {int(bad[0])} contains NaN or inf ({bad.size} such); "
                              "remove or repair those states")
    if arr.ndim == 2:
        norms = np.linalg.norm(arr, axis=1)
        off = np.flatnonzero(np.abs(norms - 1.0) > NORM_ATOL)
        if off.size:
            raise ThermoseedError(f"{what} {int(off[0])} has norm {norms[off[0]]:.12g}, not 1 "
                                  f"({off.size} such); normalise each state vector")
    else:
        for b, rho in enumerate(arr):
            check_density_matrix(rho, what=f"{what} {b}")
    return arr


class LabelledData(NamedTuple):
    """Training and held-out states with integer labels (see the module docstring)."""

    train_states: np.ndarray
    train_labels: np.ndarray
    test_states: np.ndarray
    test_labels: np.ndarray

    @property
    def n_qubits(self) -> int:
        return int(np.log2(np.shape(self.train_states)[1]))

    def check(self, n_qubits: int | None = None) -> LabelledData:
        """Raise ``ThermoseedError`` unless both parts are valid n-qubit labelled states."""
        n = self.n_qubits if n_qubits is None else n_qubits
        for part in ("train", "test"):
            states = check_state_batch(getattr(self, f"{part}_states"), n,
                                       what=f"{part}_states")
            labels = np.asarray(getattr(self, f"{part}_labels"))
            if labels.shape != (len(states),) or not np.issubdtype(labels.dtype, np.integer) \
                    or labels.min() < 0:
                raise ThermoseedError(
                    f"{part}_labels must be {len(states)} integers >= 0 (one per state), got "
                    f"shape {labels.shape} dtype {labels.dtype}")
        return self

    def fingerprint(self) -> str:
        """sha256 of the four arrays (identifies the data in sweep records)."""
        digest = hashlib.sha256()
        for arr in self:
            a = np.ascontiguousarray(arr)
            digest.update(f"{a.dtype}{a.shape}".encode())
            digest.update(a.tobytes())
        return digest.hexdigest()[:16]


def split_labelled(states, labels, *, test_fraction: float = 0.25,
                   seed: int = 0) -> LabelledData:
    """Checked ``LabelledData`` from one labelled batch by ``stratified_split``."""
    arr = check_state_batch(states)
    lab = np.asarray(labels)
    if lab.shape != (len(arr),):
        raise ThermoseedError(f"labels must be {len(arr)} integers (one per state), got shape "
                              f"{lab.shape}")
    train, test = stratified_split(lab, test_fraction, seed)
    return LabelledData(arr[train], lab[train], arr[test], lab[test]).check()


LABELLED_KIND = "labelled-data"
_PARTS = ("train_states", "train_labels", "test_states", "test_labels")


def save_labelled(data: LabelledData, path) -> Path:
    """Write ``data`` as one versioned record (kind ``"labelled-data"``)."""
    data.check()
    return write_record(path, LABELLED_KIND, {"n_qubits": data.n_qubits,
                                              "train": len(data.train_labels),
                                              "held_out": len(data.test_labels)},
                        {k: np.asarray(v) for k, v in zip(_PARTS, data, strict=True)})


def load_labelled(path, *, test_fraction: float = 0.25, seed: int = 0) -> LabelledData:
    """Labelled data from a ``"labelled-data"`` record, or from a plain ``.npz`` in the
    training-data schema (``states`` or ``density``, plus ``labels``), which is split here
    by ``stratified_split(test_fraction, seed)``; held-out arrays ``test_states`` /
    ``test_density`` + ``test_labels`` in the plain file are used as given instead."""
    arrays = load_npz(path, what="labelled data file")
    if RECORD_HEADER in arrays:
        _, arrays = read_record(path, LABELLED_KIND)
        missing = [k for k in _PARTS if k not in arrays]
        if missing:
            raise ThermoseedError(f"{str(path)!r} is incomplete: missing {missing}")
        return LabelledData(*(arrays[k] for k in _PARTS)).check()
    keys = [k for k in ("states", "density") if k in arrays]
    if len(keys) != 1 or "labels" not in arrays:
        raise ThermoseedError(
            f"{str(path)!r} holds {sorted(arrays)}; labelled data needs exactly one of "
            "'states' (B, 2^n) or 'density' (B, 2^n, 2^n), and 'labels' (B,) integers")
    key = keys[0]
    if f"test_{key}" in arrays and "test_labels" in arrays:
        return LabelledData(arrays[key], arrays["labels"], arrays[f"test_{key}"],
                            arrays["test_labels"]).check()
    return split_labelled(arrays[key], arrays["labels"], test_fraction=test_fraction,
                          seed=seed)


# ---------------------------------------------------------------- state batches


class StateBatch(NamedTuple):
    """Validated states: ``kind`` "states" ((B, d) unit vectors) or "density" ((B, d, d))."""

    kind: str
    data: np.ndarray
    n_qubits: int

    @property
    def count(self) -> int:
        return int(self.data.shape[0])

    def subset(self, index) -> StateBatch:
        return StateBatch(self.kind, self.data[index], self.n_qubits)


def as_state_batch(states, *, renormalize: bool = False) -> StateBatch:
    """Validate (B, 2^n) state vectors or (B, 2^n, 2^n) density matrices (data.py checks)."""
    arr = np.asarray(states)
    if arr.ndim in (2, 3) and arr.shape[0] == 0:
        raise ThermoseedError("the state batch is empty; pass at least one state")
    if arr.ndim in (1, 2):
        try:
            vectors, _, n = checked_states(arr, renormalize=renormalize)
        except ThermoseedError as err:
            if square_array_kind(arr) == "density":  # a lone density matrix, read as vectors
                raise ThermoseedError(f"{err}; a (d, d) array is read as d state vectors: pass "
                                      "one density matrix as rho[None]") from err
            raise
        return StateBatch("states", vectors, n)
    if arr.ndim == 3:
        checked = np.stack([check_density_matrix(m, renormalize=renormalize,
                                                 what=f"density matrix {i}")
                            for i, m in enumerate(arr)])
        return StateBatch("density", checked, int(round(np.log2(arr.shape[1]))))
    raise ThermoseedError(f"states must be (B, 2^n) state vectors or (B, 2^n, 2^n) density "
                          f"matrices, got shape {arr.shape}")


def batch_moments(batch: StateBatch, terms: TermSet) -> np.ndarray:
    """(B, K) moments ``m_ij = Tr(rho_i P_j)`` (``<psi_i|P_j|psi_i>`` for vectors)."""
    check_qubits(batch.n_qubits, terms)
    if batch.kind == "states":
        return np.array([expectations(np.outer(v, v.conj()), terms) for v in batch.data])
    return np.array([expectations(r, terms) for r in batch.data])


def batch_mixture(batch: StateBatch) -> TrainingData:
    """The equal-weight mixture ``(1/B) sum_i rho_i`` of a batch."""
    build = from_states if batch.kind == "states" else from_density_matrices
    return build(batch.data)


def check_labels(labels, count: int, *, every_class: bool = True) -> tuple[np.ndarray, int]:
    """Integer labels ``0..C-1``, one per state; ``every_class``: all C >= 2 classes present."""
    lab = np.asarray(labels)
    if lab.ndim != 1 or lab.shape[0] != count:
        raise ThermoseedError(f"got {count} states but labels of shape {lab.shape}; pass one "
                              "integer label per state")
    if lab.dtype == bool or not np.issubdtype(lab.dtype, np.integer):
        raise ThermoseedError(f"labels must be integers 0..C-1, got dtype {lab.dtype}; convert "
                              "them, e.g. np.unique(labels, return_inverse=True)[1]")
    if lab.min() < 0:
        raise ThermoseedError(f"label {int(lab.min())} is negative; number the classes 0..C-1")
    n_classes = int(lab.max()) + 1
    if every_class:
        missing = sorted(set(range(n_classes)) - set(lab.tolist()))
        if missing:
            raise ThermoseedError(f"labels run 0..{n_classes - 1} but classes {missing[:5]} have "
                                  "no states; renumber the classes 0..C-1 with each present")
        if n_classes < 2:
            raise ThermoseedError("every label is 0 (one class only); a classifier needs "
                                  "states of at least two classes")
    return lab.astype(np.int64), n_classes
