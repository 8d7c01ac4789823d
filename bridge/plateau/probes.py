"""Gradient probes and training curves for the barren-plateau comparison.

Probe circuit (every strategy, every cost): one ansatz U with ``depth`` layers on n wires,
used twice in the downstream orientation,

    ``V(e, h) = U(h) U(e)^dag``,  flat parameters ``phi = [e.ravel(), h.ravel()]``

(``bridge.circuits.TwoBlock``), i.e. data -> encoder^dag -> head with the head the same template
as the encoder. ``V`` has ``2 * depth`` layers. This is one identity block in the sense of
Grant et al. (Quantum 3, 214 (2019), arXiv:1903.05076): ``h = e`` gives ``V = I`` for any e.

Costs at initialisation:
    ``local``       ``C = <psi| V^dag Z_0 V |psi>``
    ``global``      ``C = 1 - |<0...0| V |psi>|^2``
    ``classifier``  ``C = DownstreamCircuit.loss`` (mean cross-entropy) on the training batch
For local/global, ``|psi>`` is a seeded random product state (each qubit uniform on the
Bloch sphere), not ``|0...0>``: at ``V = I`` a basis-state input is a stationary point.

Gradients: ``lightning.qubit`` adjoint differentiation run on the device's own tape (a
marker pass maps every decomposed gate angle back to ``+-phi_k``), else ``default.qubit``
backprop (autograd); the result names the method. Parameters that never enter the circuit
(e.g. the third angle of the last wire in ``"soft"``, which has no CRX) have identically zero
gradient; ``ProbeResult.active`` marks the others and the statistics use only those.
"""

from __future__ import annotations

from typing import NamedTuple

import autograd
import numpy as np
from pennylane import numpy as pnp

from thermoseed.bridge.ansatz import Ansatz, make_ansatz
from thermoseed.bridge.classifier import DownstreamCircuit, train_classifier
from thermoseed.bridge.families import CircuitFamily
from thermoseed.bridge.plateau.gradients import CircuitGradient, active_mask
from thermoseed.bridge.plateau.strategies import PretrainSettings, Strategy, make_strategy
from thermoseed.pretrain.checks import integer_in, seed_value
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import LabelledData

COSTS = ("local", "global", "classifier")


# ---------------------------------------------------------------------------- circuits


def probe_circuit(template: str | CircuitFamily | Ansatz, n_qubits: int,
                  depth: int) -> Ansatz:
    """The ansatz U of ``V = U(h) U(e)^dag``: a built-in template name with ``depth`` layers,
    the user's ``CircuitFamily`` at (n_qubits, depth), or the user's fixed-size Ansatz as it
    is (``depth`` is then only a label in the results)."""
    if isinstance(template, CircuitFamily):
        return template.ansatz(n_qubits, depth)
    if isinstance(template, Ansatz):
        if template.n_wires != n_qubits:
            raise ThermoseedError(f"ansatz acts on {template.n_wires} wires, not n = {n_qubits}")
        return template.on(range(n_qubits))
    return make_ansatz(template, n_qubits, depth)


def product_state(n_qubits: int, rng: np.random.Generator) -> np.ndarray:
    """``(x)_i (cos(t_i/2)|0> + e^{i f_i} sin(t_i/2)|1>)``, ``cos t_i ~ U[-1,1]``,
    ``f_i ~ U[0, 2 pi)``: each qubit uniform on the Bloch sphere; wire 0 leftmost."""
    t = np.arccos(1.0 - 2.0 * rng.uniform(size=n_qubits))
    f = rng.uniform(0.0, 2 * np.pi, size=n_qubits)
    psi = np.ones(1, dtype=complex)
    for a, b in zip(t, f, strict=True):
        psi = np.kron(psi, np.array([np.cos(a / 2), np.exp(1j * b) * np.sin(a / 2)]))
    return psi


# ---------------------------------------------------------------------------- probes


class ProbeResult(NamedTuple):
    """Gradient of one cost at initialisation (one seed). ``grad`` and ``active`` are flat
    over ``phi = [e, h]`` (encoder first, C order)."""

    strategy: str
    cost: str
    n_qubits: int
    depth: int
    seed: int
    template: str
    value: float
    grad: np.ndarray
    active: np.ndarray
    method: str


def _streams(seed: int) -> tuple[np.random.Generator, ...]:
    """Independent generators for the initial angles, the input state and the minibatch
    order of one seed."""
    seed = seed_value(seed)
    return tuple(np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(3))


def _check_size(n_qubits: int, depth: int) -> tuple[int, int]:
    return integer_in(n_qubits, "n_qubits", 2), integer_in(depth, "depth", 1)


def _resolve(strategy, unit: Ansatz, data, scale, settings, readout=(0,)) -> Strategy:
    if isinstance(strategy, Strategy):
        return strategy
    return make_strategy(str(strategy), scale=scale, data=data, encoder=unit, head=unit,
                         settings=settings, readout=tuple(readout))


def _classifier_value_and_grad(circuit, params: np.ndarray, data: LabelledData):
    value, grad = autograd.value_and_grad(
        lambda p: circuit.loss(p, data.train_states, data.train_labels))(
        pnp.array(params, requires_grad=True))
    return float(value), np.asarray(grad, dtype=float)


def probe_seeds(strategy: str | Strategy, n_qubits: int, depth: int, cost: str = "local",
                seeds=(0,), *, template: str | CircuitFamily | Ansatz = "soft",
                scale: float | None = None, data: LabelledData | None = None,
                settings: PretrainSettings | None = None, readout: tuple = (0,),
                method: str = "auto") -> list[ProbeResult]:
    """Gradient ``dC/dphi`` of ``cost`` at the initialisation ``strategy`` draws, per seed.

    ``V = U(h) U(e)^dag`` with U = ``template`` (``depth`` layers on ``n_qubits`` wires); see
    the module docstring for the costs. ``data`` is needed by the classifier cost and the
    pretrained strategies; ``scale`` sets the small-angle / perturbation deviation. Seed r
    gives the same numbers whichever other seeds are probed in the same call (the circuit
    is prepared once and reused).
    """
    n, depth = _check_size(n_qubits, depth)
    if cost not in COSTS:
        raise ThermoseedError(f"unknown cost {cost!r}; choose one of {COSTS}")
    if cost == "classifier" and data is None:
        raise ThermoseedError("cost 'classifier' needs data=LabelledData(...)")
    if data is not None:
        data.check(n)
    unit = probe_circuit(template, n, depth)
    strat = _resolve(strategy, unit, data, scale, settings, readout)
    if cost == "classifier":
        circuit = DownstreamCircuit(unit, unit, tuple(readout))
        active, used = active_mask(circuit.blocks), "backprop/autograd"
    else:
        engine = CircuitGradient(unit, cost, method)
        active, used = np.ravel(engine.active), engine.method
    out = []
    for seed in seeds:
        init_rng, input_rng, _ = _streams(seed)
        params = np.asarray(strat((2 * unit.n_params,), init_rng), dtype=float)
        if cost == "classifier":
            value, grad = _classifier_value_and_grad(circuit, params, data)
        else:
            value, grad = engine(params, product_state(n, input_rng))
        out.append(ProbeResult(strat.name, cost, n, depth, int(seed), unit.name, value,
                               np.ravel(grad), active, used))
    return out


def probe(strategy: str | Strategy, n_qubits: int, depth: int, cost: str = "local",
          seed: int = 0, **options) -> ProbeResult:
    """``probe_seeds`` for one seed (same keyword options)."""
    return probe_seeds(strategy, n_qubits, depth, cost, (seed,), **options)[0]


# ---------------------------------------------------------------------------- training


class TrainCurve(NamedTuple):
    """Training loss and held-out accuracy after ``t = 0..steps`` Adam steps (one seed)."""

    strategy: str
    n_qubits: int
    depth: int
    seed: int
    template: str
    loss: np.ndarray
    accuracy: np.ndarray


def train_curve(strategy: str | Strategy, n_qubits: int, depth: int, seed: int,
                data: LabelledData, *, steps: int = 50, learning_rate: float = 0.05,
                batch_size: int | None = None,
                template: str | CircuitFamily | Ansatz = "soft",
                scale: float | None = None, settings: PretrainSettings | None = None,
                readout: tuple = (0,)) -> TrainCurve:
    """Train the downstream circuit from ``strategy``'s initialisation for ``seed`` with
    ``bridge.discriminative.train_classifier`` (Adam; full batch unless ``batch_size``),
    recording the training loss and the held-out accuracy at every step."""
    n, depth = _check_size(n_qubits, depth)
    integer_in(steps, "steps", 1)
    if not isinstance(data, LabelledData):
        raise ThermoseedError("train_curve needs data=LabelledData(...) with a held-out set")
    data.check(n)
    unit = probe_circuit(template, n, depth)
    init_rng, _, batch_rng = _streams(seed)
    strat = _resolve(strategy, unit, data, scale, settings, readout)
    circuit = DownstreamCircuit(unit, unit, tuple(readout))
    params = np.asarray(strat(circuit.blocks.shape, init_rng), dtype=float)
    run = train_classifier(
        circuit, params, data.train_states,
        data.train_labels, data.test_states, data.test_labels, steps=int(steps),
        batch_size=len(data.train_states) if batch_size is None else int(batch_size),
        learning_rate=learning_rate, seed=int(batch_rng.integers(2**31)))
    return TrainCurve(strat.name, n, depth, int(seed), unit.name, np.array(run.loss),
                      np.array(run.test_accuracy))
