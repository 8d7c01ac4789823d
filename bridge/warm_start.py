"""Warm start: parameters for the downstream circuit from a compiled Gibbs model.

Downstream layout: data state -> encoder ``U(phi)^dag`` -> head -> readout.
The warm start puts the compiled ``phi`` in the encoder and the head at exactly the identity,
so at step 0 the circuit maps the data into the latent basis where the model's probability
concentrates. With no head, the parameters are the compiled ``phi`` in the ansatz's own shape.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from pennylane import numpy as pnp

from thermoseed.bridge.ansatz import Ansatz
from thermoseed.bridge.circuits import TwoBlock
from thermoseed.bridge.compile import CompileResult, compile_latent
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.files import read_record, write_record

#: Built-in heads whose all-zero parameters are exactly the identity.
IDENTITY_AT_ZERO = ("soft",)


def identity_head(head: Ansatz, head_identity=None) -> np.ndarray:
    """Parameters at which ``head`` is the identity: zeros for the ``"soft"`` template, or the
    user's ``head_identity`` (checked against the head's shape)."""
    if head_identity is not None:
        return np.asarray(head.check(np.asarray(head_identity, dtype=float)))
    if head.builtin and head.name in IDENTITY_AT_ZERO:
        return np.zeros(head.shape)
    raise ThermoseedError(
        f"head {head.name!r} is not the identity at zero parameters; use the 'soft' template or "
        "pass head_identity=<parameters at which your head is the identity>"
    )


def warm_start(
    source, *, ansatz: Ansatz | None = None, head: Ansatz | None = None, head_identity=None,
    seed: int = 0, restarts: int = 3, data=None,
) -> pnp.ndarray:
    """Trainable warm-start parameters (``pennylane.numpy``, ``requires_grad=True``).

    Args:
        source: a ``CompileResult``, or a fitted Gibbs model (compiled here into ``ansatz``
            with ``seed``/``restarts``; ``data`` is passed on for the compile report).
        ansatz: the encoder ansatz (needed when ``source`` is a model).
        head: optional head ansatz; then the result is one flat vector
            ``[phi.ravel(), head_identity.ravel()]``, else ``phi`` in ``ansatz.shape``.
        head_identity: head parameters giving the identity (default zeros of ``"soft"``).

    Returns:
        ``pnp.ndarray`` ready for the user's optimiser.
    """
    if isinstance(source, CompileResult):
        result = source
        if ansatz is not None and ansatz.shape != result.ansatz.shape:
            raise ThermoseedError(
                f"the compile result is for parameter shape {result.ansatz.shape}, but the "
                f"given ansatz has shape {ansatz.shape}"
            )
    elif hasattr(source, "coef_"):
        if ansatz is None:
            raise ThermoseedError("warm_start from a fitted model needs ansatz=<encoder ansatz>")
        result = compile_latent(source, ansatz, seed=seed, restarts=restarts, data=data)
    else:
        raise ThermoseedError(
            f"warm_start needs a CompileResult or a fitted Gibbs model, got {type(source)!r}"
        )
    if result.form != "latent":
        raise ThermoseedError("warm starts use the latent form (encoder = U^dag); recompile")
    phi = np.asarray(result.params, dtype=float)
    if head is None:
        return pnp.array(phi, requires_grad=True)
    flat = np.concatenate([phi.ravel(), identity_head(head, head_identity).ravel()])
    return pnp.array(flat, requires_grad=True)


WARM_START_KIND = "warm-start"
#: How a two-block parameter vector is laid out (``bridge.circuits.TwoBlock``).
TWO_BLOCK_LAYOUT = "flat [encoder.ravel(), head.ravel()]"


def _describe(ansatz: Ansatz) -> dict:
    return {"name": ansatz.name, "n_layers": ansatz.n_layers, "shape": list(ansatz.shape),
            "n_wires": ansatz.n_wires, "builtin": ansatz.builtin}


def save_warm_start(path, params, circuit: Ansatz, head: Ansatz | None = None,
                    **info) -> Path:
    """Write warm-start parameters as a versioned record (kind ``"warm-start"``): the
    circuit (or encoder) and head templates, the parameter layout, and ``info`` (JSON-able,
    e.g. the strategy and its quality numbers)."""
    params = np.asarray(params, dtype=float)
    if head is None:
        circuit.check(params)
        layout = f"the circuit's own shape {list(circuit.shape)}"
    else:
        TwoBlock(circuit, head).split(params)
        layout = TWO_BLOCK_LAYOUT
    header = {"circuit": _describe(circuit), "head": None if head is None else _describe(head),
              "layout": layout, "info": info}
    return write_record(path, WARM_START_KIND, header, {"params": params})


def load_warm_start(path) -> tuple[np.ndarray, dict]:
    """(parameters, header) from a ``"warm-start"`` record."""
    header, arrays = read_record(path, WARM_START_KIND)
    if "params" not in arrays:
        raise ThermoseedError(f"{str(path)!r} is incomplete: missing 'params'")
    return arrays["params"], header
