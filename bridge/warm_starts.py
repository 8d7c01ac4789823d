"""Warm start: parameters for the user's circuit from fitted Gibbs models.

Two sources, two layouts:

* **Labels known** (``GibbsClassifier``, one Gibbs model sigma_c per class): the circuit as
  the user wrote it is the whole classifier, data state -> ``V(phi)`` -> readout wire(s).
  ``warm_start`` maximises the readout's success probability on the class models,
  ``sum_c p_c Tr(Pi_c V sigma_c V^dag)`` (``bridge.readout``; sigma_c =
  ``clf.class_states()``, the models at the classifier's cooling), so at step 0 the circuit
  already measures (close to) the Helstrom measurement between them.
  Class 1 is read as outcome 1 on the readout wire, i.e. ``p(class 1) = (1 - <Z>)/2``.
* **Unlabelled** (one ``VisibleGibbsModel`` or its ``CompileResult``): data state -> encoder
  ``U(phi)^dag`` -> head -> readout; the compiled ``phi`` goes in the encoder and the head
  sits at exactly the identity, so at step 0 the circuit maps the data into the latent
  basis where the model's probability concentrates.
"""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

import numpy as np
from pennylane import numpy as pnp

from thermoseed.bridge.ansatz import Ansatz
from thermoseed.bridge.circuits import TwoBlock
from thermoseed.bridge.compile import CompileResult, compile_latent
from thermoseed.bridge.compile_record import model_kind
from thermoseed.bridge.readout import readout_compile
from thermoseed.bridge.templates import TEMPLATES
from thermoseed.pretrain.classifier import GibbsClassifier
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.files import read_record, write_record


def identity_head(head: Ansatz, head_identity=None) -> np.ndarray:
    """Parameters at which ``head`` is the identity: zeros for the ``"soft"`` template, or the
    user's ``head_identity`` (checked against the head's shape)."""
    if head_identity is not None:
        return np.asarray(head.check(np.asarray(head_identity, dtype=float)))
    if head.builtin and TEMPLATES[head.name].identity_at_zero:
        return np.zeros(head.shape)
    raise ThermoseedError(
        f"head {head.name!r} is not the identity at zero parameters; use the 'soft' template or "
        "pass head_identity=<parameters at which your head is the identity>"
    )


class WarmStart(NamedTuple):
    """``warm_start(..., with_report=True)``: the parameters and how the compile went
    (``ReadoutCompileResult`` for a classifier, ``CompileReport`` otherwise)."""

    params: pnp.ndarray
    report: object


def warm_start(
    source, *, ansatz: Ansatz | None = None, head: Ansatz | None = None, head_identity=None,
    readout=None, seed: int = 0, restarts: int = 3, data=None, progress: bool = False,
    with_report: bool = False,
) -> pnp.ndarray | WarmStart:
    """Trainable warm-start parameters (``pennylane.numpy``, ``requires_grad=True``).

    Args:
        source: a fitted ``GibbsClassifier`` (labels known), a ``CompileResult``, or a fitted
            Gibbs model (compiled here into ``ansatz`` with ``seed``/``restarts``; ``data`` is
            passed on for the compile report). A ``HiddenGibbsModel`` compiles its visible
            reduced state ``sigma_v`` (``visible_view()``); ``data`` are then visible states.
        ansatz: your circuit (``user_ansatz(qfunc, shape, wires)`` or a built-in); for a
            classifier the whole circuit, else the encoder.
        head: optional head ansatz; then the result is one flat vector
            ``[encoder.ravel(), head.ravel()]`` (``bridge.circuits.TwoBlock``): for a
            model, head = identity; for a classifier, both blocks are compiled.
        head_identity: head parameters giving the identity (default zeros of ``"soft"``).
        readout: classifier only: the readout wire(s) of your circuit (default its first).
        progress: progress bar on stderr while compiling.
        with_report: return ``WarmStart(params, report)`` instead of the parameters alone.

    Returns:
        ``pnp.ndarray`` in ``ansatz.shape`` (or flat with a head), ready for your optimiser.

    Example (labels known; your circuit unchanged, only the line making ``weights`` is new)::

        clf = GibbsClassifier(graph_terms(n, "line", fields="XZ", couplings=("ZZ", "XX")),
                              l2=1e-3).fit(train_states, train_labels)
        weights = warm_start(clf, ansatz=user_ansatz(my_circuit, shape, range(n)), readout=0)
    """
    if isinstance(source, GibbsClassifier):
        return _classifier_start(source, ansatz, head, readout, seed, restarts, progress,
                                 with_report)
    if readout is not None:
        raise ThermoseedError("readout= applies to a GibbsClassifier source; a single model's "
                              "warm start reads whatever wire your head reads")
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
        if hasattr(source, "visible_view"):  # a hidden model: compile its visible state
            source = source.visible_view()
        result = compile_latent(source, ansatz, seed=seed, restarts=restarts, data=data,
                                progress=progress)
    else:
        raise ThermoseedError(
            "warm_start needs a GibbsClassifier, a CompileResult or a fitted Gibbs model, "
            f"got {type(source)!r}"
        )
    if result.form != "latent":
        raise ThermoseedError("warm starts use the latent form (encoder = U^dag); recompile")
    phi = np.asarray(result.params, dtype=float)
    if head is None:
        params = pnp.array(phi, requires_grad=True)
    else:
        params = TwoBlock(result.ansatz, head).join(phi, identity_head(head, head_identity))
    return WarmStart(params, result.report) if with_report else params


def _classifier_start(clf: GibbsClassifier, ansatz, head, readout, seed, restarts, progress,
                      with_report):
    """Compile the classifier's single-shot rule into ``ansatz`` (and ``head``)."""
    if ansatz is None:
        raise ThermoseedError(
            "warm_start from a GibbsClassifier needs ansatz=<your circuit>, e.g. "
            "user_ansatz(my_circuit, shape, wires=range(n))")
    if not hasattr(clf, "models_"):
        raise ThermoseedError("the GibbsClassifier is not fitted; call fit(states, labels) "
                              "first")
    n = clf.n_visible_
    if ansatz.n_wires != n:
        raise ThermoseedError(f"your circuit acts on {ansatz.n_wires} wires but the class "
                              f"models on {n} qubits; use a circuit on {n} wires")
    circuit = ansatz if head is None else TwoBlock(ansatz, head).as_ansatz()
    result = readout_compile(clf.class_states(), circuit, readout,
                             priors=clf.priors_, restarts=restarts, seed=seed,
                             progress=progress)
    params = pnp.array(np.asarray(result.params, dtype=float), requires_grad=True)
    return WarmStart(params, result) if with_report else params


WARM_START_KIND = "warm-start"
#: How a two-block parameter vector is laid out (``bridge.circuits.TwoBlock``).
TWO_BLOCK_LAYOUT = "flat [encoder.ravel(), head.ravel()]"


def _describe(ansatz: Ansatz) -> dict:
    return {"name": ansatz.name, "n_layers": ansatz.n_layers, "shape": list(ansatz.shape),
            "n_wires": ansatz.n_wires, "builtin": ansatz.builtin}


def describe_source(source) -> tuple[dict, dict]:
    """``(header, arrays)`` naming the model a warm start came from: ``kind``
    (``"visible-gibbs-model"``, ``"hidden-gibbs-model"`` or ``"gibbs-classifier"``),
    ``n_hidden``, ``terms`` (labels on the full register, hidden wires last), and the
    coefficients as the array ``source_coef`` ((C, K) for a classifier). A
    ``CompileResult`` is described by the model it compiled (``compile_record.model_kind``)."""
    if isinstance(source, CompileResult):
        n_hidden = model_kind(source)[1]
        labels, coef = list(source.model_terms), np.asarray(source.model_coef, float)
    elif isinstance(source, GibbsClassifier):
        if not hasattr(source, "coef_"):
            raise ThermoseedError("the GibbsClassifier is not fitted; call fit first")
        n_hidden = int(source.n_hidden_)
        labels, coef = list(source.terms_.labels), np.asarray(source.coef_, float)
    elif hasattr(source, "coef_") and hasattr(source, "terms_"):
        n_hidden = int(getattr(source, "n_hidden_", 0))
        labels, coef = list(source.terms_.labels), np.asarray(source.coef_, float)
    else:
        raise ThermoseedError(f"cannot describe a warm-start source of type {type(source)!r}; "
                              "pass a fitted model, GibbsClassifier or CompileResult")
    kind = "gibbs-classifier" if isinstance(source, GibbsClassifier) else \
        "hidden-gibbs-model" if n_hidden else "visible-gibbs-model"
    return {"kind": kind, "n_hidden": n_hidden, "terms": labels}, {"source_coef": coef}


def save_warm_start(path, params, circuit: Ansatz, head: Ansatz | None = None, *,
                    source=None, **info) -> Path:
    """Write warm-start parameters as a versioned record (kind ``"warm-start"``): the
    circuit (or encoder) and head templates, the parameter layout, ``info`` (JSON-able,
    e.g. the strategy and its quality numbers) and, given the ``source`` the parameters came
    from (model, classifier or ``CompileResult``), what it was (``describe_source``: a hidden
    model is recorded as one, with its n_hidden, labels and coefficients)."""
    params = np.asarray(params, dtype=float)
    if head is None:
        circuit.check(params)
        layout = f"the circuit's own shape {list(circuit.shape)}"
    else:
        TwoBlock(circuit, head).split(params)
        layout = TWO_BLOCK_LAYOUT
    header = {"circuit": _describe(circuit), "head": None if head is None else _describe(head),
              "layout": layout, "info": info}
    arrays = {"params": params}
    if source is not None:
        header["source"], more = describe_source(source)
        arrays.update(more)
    return write_record(path, WARM_START_KIND, header, arrays)


def load_warm_start(path) -> tuple[np.ndarray, dict]:
    """(parameters, header) from a ``"warm-start"`` record."""
    header, arrays = read_record(path, WARM_START_KIND)
    if "params" not in arrays:
        raise ThermoseedError(f"{str(path)!r} is incomplete: missing 'params'")
    return arrays["params"], header
