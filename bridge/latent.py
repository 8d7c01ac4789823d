"""Latent distributions of the latent-form compile: which basis states carry which weight.

``spectrum_latent``: the top-k eigenvalues of sigma (sorted, renormalised) placed on basis
states in ``latent_order`` (wire 0 varies fastest, so the two most probable eigenvectors
differ on wire 0, the default readout), or, given each eigenvector's class, in
``labelled_order`` (the readout bit of each slot is its class). ``bernoulli_product``: a
product of Bernoulli(p_k) over the wires with trainable logits (the variational-quantum-
thermalizer form).
"""

from __future__ import annotations

from typing import NamedTuple

import autograd.numpy as anp
import numpy as np

from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.linalg import log_sum_exp_neg

LATENT_KINDS = ("spectrum", "product")


class Latent(NamedTuple):
    """Latent distribution: probabilities ``probs`` on basis indices ``basis``."""

    kind: str
    basis: np.ndarray
    probs: np.ndarray
    captured: float  # weight of sigma's spectrum the latent support can hold (spectrum form)


def bernoulli_product(logits, n):
    """q_x = prod_k p_k^{1-x_k} (1-p_k)^{x_k}, p_k = sigmoid(logit_k); bit k = wire k (MSB)."""
    p = 1.0 / (1.0 + anp.exp(-logits))
    bits = (np.arange(2**n)[:, None] >> (n - 1 - np.arange(n))[None, :]) & 1
    factors = (1 - bits) * p + bits * (1.0 - p)
    q = anp.prod(factors, axis=1)
    ent = -anp.sum(p * anp.log(p + 1e-300) + (1 - p) * anp.log(1 - p + 1e-300))
    return q, ent


def latent_order(k: int, n_qubits: int) -> np.ndarray:
    """Basis states for latent slots 0..k-1 with wire 0 varying fastest: slot i goes to the
    bit-reversal of i. The two most probable eigenvectors then differ on wire 0 (the
    default readout), instead of all of the first 2^(n-1) slots sharing wire 0 = 0."""
    slots = np.arange(k)
    out = np.zeros(k, dtype=np.int64)
    for bit in range(n_qubits):
        out |= ((slots >> bit) & 1) << (n_qubits - 1 - bit)
    return out


def labelled_order(classes: np.ndarray, n_qubits: int, readout: int = 0) -> np.ndarray:
    """Basis states for latent slots whose readout bit carries the slot's class.

    Slot i (the i-th most probable eigenvector) has class ``classes[i]`` in {0, 1}; it goes to
    the next unused basis state, in ``latent_order`` (wire 0 fastest), whose bit on wire
    ``readout`` equals that class. A downstream circuit that starts at this compile then
    reads, on the readout wire, the class each eigenvector holds more weight of.
    """
    pool = latent_order(2**n_qubits, n_qubits)
    bit = (pool >> (n_qubits - 1 - readout)) & 1
    queues = [list(pool[bit == 0]), list(pool[bit == 1])]
    out = []
    for c in np.asarray(classes, dtype=int):
        side = c if queues[c] else 1 - c  # a full half: the other half takes the slot
        out.append(queues[side].pop(0))
    return np.asarray(out, dtype=np.int64)


def eigenvector_classes(vectors: np.ndarray, states, labels) -> np.ndarray:
    """For each eigenvector v (columns), the class c whose training states hold more weight
    on it, by the mean class overlap ``(1/B_c) sum_{b in c} <v|rho_b|v>`` (balanced)."""
    states = np.asarray(states)
    labels = np.asarray(labels)
    if states.ndim == 2:
        overlaps = np.abs(states.conj() @ vectors) ** 2  # (B, k)
    else:
        overlaps = np.real(np.einsum("ia,bij,ja->ba", vectors.conj(), states, vectors))
    means = np.stack([overlaps[labels == c].mean(axis=0) for c in (0, 1)])
    return np.argmax(means, axis=0)


def spectrum_latent(model_energies: np.ndarray, *, k: int | None = None,
                    weight: float = 0.999, classes: np.ndarray | None = None,
                    readout: int = 0) -> Latent:
    """Top-k eigenvalues of sigma (k given, or the fewest reaching cumulative ``weight``),
    renormalised and placed on the basis states ``latent_order(k, n)``, or, given the
    class of each of the top eigenvectors (``classes``, most probable first), on
    ``labelled_order`` so the ``readout`` bit of each slot is its class."""
    _, probs = log_sum_exp_neg(model_energies)
    order = np.sort(probs)[::-1]
    if k is None:
        if not 0 < weight <= 1:
            raise ThermoseedError(f"weight must be in (0, 1], got {weight}")
        k = int(np.searchsorted(np.cumsum(order), weight - 1e-12) + 1)
    k = int(min(max(k, 1), len(order)))
    top = order[:k]
    n_qubits = int(round(np.log2(len(order))))
    basis = latent_order(k, n_qubits) if classes is None else \
        labelled_order(np.asarray(classes)[:k], n_qubits, readout)
    return Latent("spectrum", basis, top / top.sum(), float(top.sum()))
