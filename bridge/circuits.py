"""The two-block circuit ``V(e, h) = U_head(h) U_enc(e)^dag``, written once.

Data state -> encoder block ``U_enc(e)^dag`` (maps data into the latent basis of a compiled
Gibbs model) -> head block ``U_head(h)`` -> readout. The classifier, the eigensolver and the
plateau probes all use this one circuit.

Canonical parameter layout (the only one in thermoseed): one flat vector
``[e.ravel(), h.ravel()]`` of length ``n_enc + n_head``. When both blocks are the same
template, ``h = e`` gives ``V = I`` for any ``e`` (one identity block in the sense of Grant,
Wossnig, Ostaszewski & Benedetti, "An initialization strategy for addressing barren plateaus
in parametrized quantum circuits", Quantum 3, 214 (2019)).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import autograd.numpy as anp
import numpy as np
from pennylane import numpy as pnp

from thermoseed.bridge.ansatz import Ansatz, ansatz_columns
from thermoseed.pretrain.errors import ThermoseedError


@dataclass(frozen=True)
class TwoBlock:
    """``V(e, h) = U_head(h) U_enc(e)^dag`` on the encoder's wires.

    Attributes:
        encoder: ansatz applied as its adjoint.
        head: ansatz applied after it, on the same number of wires.
    """

    encoder: Ansatz
    head: Ansatz

    def __post_init__(self):
        if self.head.n_wires != self.encoder.n_wires:
            raise ThermoseedError(
                f"head acts on {self.head.n_wires} wires but the encoder on "
                f"{self.encoder.n_wires}; use one wire count for both blocks"
            )

    @property
    def n_wires(self) -> int:
        return self.encoder.n_wires

    @property
    def n_params(self) -> int:
        return self.encoder.n_params + self.head.n_params

    @property
    def shape(self) -> tuple[int]:
        return (self.n_params,)

    def split(self, params):
        """Flat vector -> (encoder params, head params) in their own shapes (autograd-safe)."""
        if tuple(np.shape(params)) != self.shape:
            raise ThermoseedError(
                f"expected a flat parameter vector of length {self.n_params} "
                f"(encoder {self.encoder.shape} then head {self.head.shape}), "
                f"got shape {tuple(np.shape(params))}"
            )
        k = self.encoder.n_params
        return (anp.reshape(params[:k], self.encoder.shape),
                anp.reshape(params[k:], self.head.shape))

    def join(self, encoder_params, head_params) -> pnp.ndarray:
        """(encoder params, head params) -> one trainable flat vector."""
        flat = np.concatenate([np.ravel(self.encoder.check(np.asarray(encoder_params, float))),
                               np.ravel(self.head.check(np.asarray(head_params, float)))])
        return pnp.array(flat, requires_grad=True)

    def unitary(self, params):
        """``V = U_head(h) U_enc(e)^dag`` as a d x d matrix, autograd-differentiable."""
        enc, head = self.split(params)
        u = anp.transpose(ansatz_columns(self.encoder, enc))
        v = anp.transpose(ansatz_columns(self.head, head))
        return anp.dot(v, anp.conj(anp.transpose(u)))

    def as_ansatz(self) -> Ansatz:
        """This circuit as one ``Ansatz`` over the flat parameters (for compiles that take an
        ansatz, e.g. a readout compile of the whole classifier circuit)."""
        return Ansatz(f"two-block {self.encoder.name}/{self.head.name}", self.__call__,
                      self.shape, self.encoder.wires, None,
                      lambda params, block: anp.dot(self.unitary(params), block))

    def __call__(self, params, wires: Sequence | None = None) -> None:
        """Queue ``U_enc(e)^dag`` then ``U_head(h)`` on ``wires`` (PennyLane gates)."""
        enc, head = self.split(params)
        self.encoder.adjoint(enc, wires)
        self.head(head, wires)
