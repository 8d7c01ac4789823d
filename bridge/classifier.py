"""The downstream classifier circuit and its training loop.

Circuit: data state (vector or density matrix) -> encoder ``U(phi)^dag`` -> head ``V(h)`` ->
readout wires. With ``W = V(h) U(phi)^dag`` the outcome probabilities are
``P_a = |(W psi)_a|^2`` or ``(W rho W^dag)_aa``, marginalised onto the readout wires; class c
gets ``P_c / sum_{c' < C} P_c'`` (C classes on the first C readout outcomes). The loss is the
mean cross-entropy ``-log p_label``. Everything is autograd-differentiable.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Sequence
from typing import NamedTuple

import autograd
import autograd.numpy as anp
import numpy as np
from pennylane import numpy as pnp
from tqdm.auto import tqdm

from thermoseed.bridge.ansatz import Ansatz, ansatz_columns
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.optim import adam

#: Added inside the log of the cross-entropy so a zero probability gives a finite loss.
LOG_FLOOR = 1e-12


class DownstreamCircuit:
    """Encoder (adjoint orientation) + head + readout; parameters are one flat vector.

    Args:
        encoder: ansatz U applied as ``U^dag`` (warm-started from a compile).
        head: ansatz V on the same wires (identity at its warm-start parameters).
        readout: wires read out (positions 0..n-1).
        n_classes: number of classes, at most ``2**len(readout)``.
    """

    def __init__(self, encoder: Ansatz, head: Ansatz, readout: Sequence[int] = (0,),
                 n_classes: int = 2):
        if head.n_wires != encoder.n_wires:
            raise ThermoseedError(
                f"head acts on {head.n_wires} wires but the encoder on {encoder.n_wires}"
            )
        readout = tuple(int(r) for r in readout)
        if not readout or any(not 0 <= r < encoder.n_wires for r in readout) or \
                len(set(readout)) != len(readout):
            raise ThermoseedError(
                f"readout wires {readout} must be distinct positions in 0..{encoder.n_wires - 1}"
            )
        if not 2 <= int(n_classes) <= 2 ** len(readout):
            raise ThermoseedError(
                f"n_classes = {n_classes} needs 2..{2 ** len(readout)} with {len(readout)} "
                "readout wires"
            )
        self.encoder, self.head = encoder, head
        self.readout, self.n_classes = readout, int(n_classes)

    @property
    def n_wires(self) -> int:
        return self.encoder.n_wires

    @property
    def n_params(self) -> int:
        return self.encoder.n_params + self.head.n_params

    def split(self, params):
        """Flat vector -> (encoder params, head params) in their own shapes."""
        if tuple(np.shape(params)) != (self.n_params,):
            raise ThermoseedError(
                f"expected a flat parameter vector of length {self.n_params}, "
                f"got shape {tuple(np.shape(params))}"
            )
        k = self.encoder.n_params
        return (anp.reshape(params[:k], self.encoder.shape),
                anp.reshape(params[k:], self.head.shape))

    def join(self, encoder_params, head_params) -> pnp.ndarray:
        """(encoder params, head params) -> one trainable flat vector."""
        flat = np.concatenate([np.ravel(self.encoder.check(encoder_params)),
                               np.ravel(self.head.check(head_params))])
        return pnp.array(flat, requires_grad=True)

    def unitary(self, params):
        """``W = V(head) U(encoder)^dag`` as a d x d matrix."""
        enc, head = self.split(params)
        u = anp.transpose(ansatz_columns(self.encoder, enc))
        v = anp.transpose(ansatz_columns(self.head, head))
        return anp.dot(v, anp.conj(anp.transpose(u)))

    def _outcomes(self, params, states):
        w = self.unitary(params)
        states = np.asarray(states)
        d = 2**self.n_wires
        if states.ndim == 2 and states.shape[1] == d:
            amps = anp.dot(states, anp.transpose(w))
            full = anp.real(amps * anp.conj(amps))
        elif states.ndim == 3 and states.shape[1:] == (d, d):
            full = anp.real(anp.einsum("ai,bij,aj->ba", w, states, anp.conj(w)))
        else:
            raise ThermoseedError(
                f"data must be (B, {d}) state vectors or (B, {d}, {d}) density matrices, "
                f"got shape {states.shape}"
            )
        others = tuple(1 + k for k in range(self.n_wires) if k not in self.readout)
        marg = anp.sum(anp.reshape(full, (-1,) + (2,) * self.n_wires), axis=others)
        order = sorted(range(len(self.readout)), key=lambda i: self.readout[i])
        marg = anp.transpose(marg, (0,) + tuple(1 + order.index(i)
                                                for i in range(len(self.readout))))
        return anp.reshape(marg, (-1, 2 ** len(self.readout)))

    def probabilities(self, params, states):
        """Class probabilities, shape (B, n_classes)."""
        p = self._outcomes(params, states)[:, : self.n_classes]
        return p / anp.sum(p, axis=1, keepdims=True)

    def loss(self, params, states, labels):
        """Mean cross-entropy ``-(1/B) sum_b log p_{label_b}``."""
        labels = _labels(labels, len(states), self.n_classes)
        p = self.probabilities(params, states)
        picked = p[np.arange(len(labels)), labels]
        return -anp.mean(anp.log(picked + LOG_FLOOR))

    def accuracy(self, params, states, labels) -> float:
        labels = _labels(labels, len(states), self.n_classes)
        p = np.asarray(self.probabilities(params, states))
        return float(np.mean(np.argmax(p, axis=1) == labels))

    def qfunc(self, params):
        """A PennyLane quantum function ``f(state)`` that loads a state vector, applies the
        circuit and returns readout probabilities (for running on any device)."""
        import pennylane as qml

        enc, head = self.split(params)

        def circuit(state):
            qml.StatePrep(state, wires=range(self.n_wires))
            self.encoder.adjoint(enc, range(self.n_wires))
            self.head(head, range(self.n_wires))
            return qml.probs(wires=list(self.readout))

        return circuit


def _labels(labels, count: int, n_classes: int) -> np.ndarray:
    lab = np.asarray(labels)
    if lab.shape != (count,) or not np.issubdtype(lab.dtype, np.integer):
        raise ThermoseedError(f"labels must be {count} integers, got shape {lab.shape}")
    if lab.size and (lab.min() < 0 or lab.max() >= n_classes):
        raise ThermoseedError(f"labels must lie in 0..{n_classes - 1}, got {sorted(set(lab))}")
    return lab.astype(np.int64)


class TrainingRun(NamedTuple):
    """Per-step record of a training run (index 0 = before the first update)."""

    params: np.ndarray
    loss: list[float]
    train_accuracy: list[float]
    test_accuracy: list[float]


def train_classifier(
    circuit: DownstreamCircuit, params0, train_states, train_labels, test_states=None,
    test_labels=None, *, steps: int = 100, batch_size: int = 32, learning_rate: float = 0.05,
    seed: int = 0, progress: bool = False,
    callback: Callable[[int, np.ndarray, float], bool | None] | None = None,
) -> TrainingRun:
    """Adam on minibatches (seeded shuffles, a new permutation every epoch).

    Records the full-training-set loss and accuracy and the held-out accuracy at every step.
    """
    if steps < 0 or batch_size < 1:
        raise ThermoseedError(f"need steps >= 0 and batch_size >= 1, got {steps}, {batch_size}")
    train_states = np.asarray(train_states)
    train_labels = _labels(train_labels, len(train_states), circuit.n_classes)
    params = np.asarray(params0, dtype=float).copy()
    if params.shape != (circuit.n_params,):
        raise ThermoseedError(f"params0 must have shape ({circuit.n_params},), got {params.shape}")
    if not np.all(np.isfinite(params)):
        raise ThermoseedError("params0 contains NaN or inf")
    rng = np.random.default_rng(seed)
    grad_fn = autograd.grad(circuit.loss)
    opt = adam(learning_rate)
    state = opt.init(params)
    order = np.array([], dtype=int)
    record = TrainingRun(params, [], [], [])

    def log(p):
        record.loss.append(float(circuit.loss(p, train_states, train_labels)))
        record.train_accuracy.append(circuit.accuracy(p, train_states, train_labels))
        if test_states is not None:
            record.test_accuracy.append(circuit.accuracy(p, test_states, test_labels))

    log(params)
    for step in tqdm(range(1, steps + 1), disable=not progress, file=sys.stderr,
                     desc="train", leave=False):
        if order.size < batch_size:
            order = np.concatenate([order, rng.permutation(len(train_states))])
        batch, order = order[:batch_size], order[batch_size:]
        grad = np.asarray(grad_fn(params, train_states[batch], train_labels[batch]))
        delta, state = opt.update(grad, state)
        params = params + delta
        log(params)
        if callback is not None and callback(step, params, record.loss[-1]):
            break
    return record._replace(params=params)
