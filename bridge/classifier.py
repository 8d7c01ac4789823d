"""The downstream classifier circuit and its training loop.

Circuit: data state (vector or density matrix) -> encoder ``U(phi)^dag`` -> head ``V(h)`` ->
readout wires. With ``W = V(h) U(phi)^dag`` the outcome probabilities are
``P_a = |(W psi)_a|^2`` or ``(W rho W^dag)_aa``, marginalised onto the readout wires; class c
gets ``P_c / sum_{c' < C} P_c'`` (C classes on the first C readout outcomes). The loss is the
mean cross-entropy ``-log p_label``. Everything is autograd-differentiable.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from typing import NamedTuple

import autograd
import autograd.numpy as anp
import numpy as np
from pennylane import numpy as pnp
from tqdm.auto import tqdm

from thermoseed.bridge.ansatz import Ansatz
from thermoseed.bridge.circuits import TwoBlock
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.optim import Callback, adam_steps

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
        self.blocks = TwoBlock(encoder, head)
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
        return self.blocks.n_wires

    @property
    def n_params(self) -> int:
        return self.blocks.n_params

    def split(self, params):
        """Flat vector -> (encoder params, head params) (``TwoBlock.split``)."""
        return self.blocks.split(params)

    def join(self, encoder_params, head_params) -> pnp.ndarray:
        """(encoder params, head params) -> one trainable flat vector (``TwoBlock.join``)."""
        return self.blocks.join(encoder_params, head_params)

    def unitary(self, params):
        """``W = V(head) U(encoder)^dag`` as a d x d matrix."""
        return self.blocks.unitary(params)

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

        self.split(params)  # shape check before a device ever sees the circuit

        def circuit(state):
            qml.StatePrep(state, wires=range(self.n_wires))
            self.blocks(params, range(self.n_wires))
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
    callback: Callback | None = None,
) -> TrainingRun:
    """Adam on minibatches (seeded shuffles, a new permutation every epoch).

    ``callback(step, params, loss, grad)`` (the signature every thermoseed optimiser uses;
    ``loss`` is the full training-set loss after the step, ``grad`` the minibatch gradient)
    stops the run by returning True.

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
    value_and_grad = autograd.value_and_grad(circuit.loss)
    order = np.array([], dtype=int)
    record = TrainingRun(params, [], [], [])

    def batch_loss_and_grad(p):
        nonlocal order
        if order.size < batch_size:
            order = np.concatenate([order, rng.permutation(len(train_states))])
        batch, order = order[:batch_size], order[batch_size:]
        return value_and_grad(p, train_states[batch], train_labels[batch])

    def log(p):
        record.loss.append(float(circuit.loss(p, train_states, train_labels)))
        record.train_accuracy.append(circuit.accuracy(p, train_states, train_labels))
        if test_states is not None:
            record.test_accuracy.append(circuit.accuracy(p, test_states, test_labels))

    log(params)
    bar = tqdm(total=steps, disable=not progress, file=sys.stderr, desc="train", leave=False)
    path = adam_steps(batch_loss_and_grad, params, learning_rate=learning_rate)
    for item in (path if steps else ()):
        params = item.x
        log(params)
        bar.update(1)
        if (callback is not None and callback(item.step, params, record.loss[-1], item.grad)) \
                or item.step >= steps:
            break
    bar.close()
    return record._replace(params=params)
