"""Gradients of the local and global probe costs of ``V = U(h) U(e)^dag`` on an input state.

``lightning.qubit`` adjoint differentiation, run on the device's own preprocessed tape: the
circuit is decomposed once with marker angles, so every decomposed gate angle is known to be
``+-phi_k`` (or a constant) and each evaluation only binds new angles and runs the device.
Fallback: ``default.qubit`` backprop (autograd). Measured at n = 12, depth 12 ("soft"):
about 0.05 s per gradient once set up, against about 0.3 s through an autograd QNode.
"""

from __future__ import annotations

import autograd
import numpy as np
import pennylane as qml
from pennylane import numpy as pnp
from pennylane.devices import ExecutionConfig

from thermoseed.bridge.ansatz import Ansatz
from thermoseed.bridge.circuits import TwoBlock
from thermoseed.pretrain.errors import ThermoseedError

METHODS = ("auto", "adjoint", "backprop")
#: First marker angle of the parameter map (markers are 3, 4, 5, ...: no common constant
#: angle such as pi/2 or pi is an integer or an integer plus one half).
_MARKER0 = 3.0


def _observable(cost: str, n: int):
    if cost == "local":
        return qml.PauliZ(0)
    return qml.Projector(np.zeros(n, dtype=int), wires=range(n))


def _pair_tape(blocks: TwoBlock, params, psi, observable) -> qml.tape.QuantumScript:
    with qml.queuing.AnnotatedQueue() as queue:
        qml.StatePrep(psi, wires=range(blocks.n_wires))
        blocks(params)
        qml.expval(observable)
    return qml.tape.QuantumScript.from_queue(queue)


class _NoAdjoint(Exception):
    """The device-level adjoint path does not apply; use backprop."""


def _basic(op) -> bool:
    """Stop decomposing at state preparation and at non-adjoint gates on <= 2 wires."""
    if isinstance(op, qml.StatePrep):
        return True
    return not isinstance(op, qml.ops.op_math.Adjoint) and len(op.wires) <= 2


def _device_tape(dev, config, tape):
    """Adjoints and templates to basic gates first (lightning's adjoint method rejects e.g.
    ``Adjoint(Rot)``, which its own preprocessing leaves alone), then the device's program."""
    (tape,), _ = qml.transforms.decompose(tape, stopping_condition=_basic)
    tapes, _ = dev.preprocess_transforms(config)((tape,))
    if len(tapes) != 1 or not isinstance(tapes[0].operations[0], qml.StatePrep):
        raise _NoAdjoint("preprocessing split the tape or moved the state preparation")
    return tapes[0]


def _marker_map(tape, offset: float, size: int):
    """Positions of scalar angles equal to ``+-(offset + k)`` -> (positions, k, sign), and
    the remaining (constant) parameters by position."""
    positions, index, sign, constants = [], [], [], {}
    for pos, v in enumerate(tape.get_parameters(trainable_only=False)):
        if pos > 0 and np.ndim(v) == 0:
            k = int(round(abs(float(v)) - offset))
            if 0 <= k < size and abs(float(v)) == offset + k:
                positions.append(pos)
                index.append(k)
                sign.append(1.0 if float(v) > 0 else -1.0)
                continue
        if pos > 0:
            constants[pos] = np.asarray(v)
    return positions, np.array(index, dtype=int), np.array(sign), constants


class CircuitGradient:
    """Reusable ``(C, dC/dphi, active)`` of the local or global cost of ``V = U(h) U(e)^dag``
    on an input state ``psi``, for the flat parameters ``[e, h]`` of ``TwoBlock(unit, unit)``.

    ``adjoint``: the circuit is decomposed and preprocessed for ``lightning.qubit`` once,
    with marker angles (3, 4, 5, ... and again 3.5, 4.5, ...); both passes must agree that
    every decomposed angle is ``+-phi_k`` or a constant. Each call then binds the real angles
    into that tape and runs the device's adjoint Jacobian. ``backprop``: ``default.qubit``.
    ``method="auto"`` takes adjoint when lightning is installed and the check passes.
    """

    def __init__(self, unit: Ansatz, cost: str, method: str = "auto"):
        if cost not in ("local", "global"):
            raise ThermoseedError(f"cost {cost!r} is not a circuit cost; use 'local' or 'global'")
        if method not in METHODS:
            raise ThermoseedError(f"unknown gradient method {method!r}; choose one of {METHODS}")
        self.unit, self.cost = unit, cost
        self.blocks = TwoBlock(unit, unit)
        self.shape = self.blocks.shape
        self.observable = _observable(cost, unit.n_wires)
        self.active = active_mask(self.blocks)
        self.method = "backprop/default.qubit"
        if method in ("auto", "adjoint"):
            try:
                self._setup_adjoint()
                self.method = "adjoint/lightning.qubit"
            except _NoAdjoint as err:
                if method == "adjoint":
                    raise ThermoseedError(f"adjoint differentiation unavailable: {err}; "
                                          "use method='backprop'") from err
        if self.method.startswith("backprop"):
            self._setup_backprop()

    def _setup_adjoint(self) -> None:
        try:
            self._dev = qml.device("lightning.qubit", wires=self.unit.n_wires)
        except (ImportError, qml.DeviceError) as err:
            raise _NoAdjoint(str(err)) from err
        self._config = self._dev.setup_execution_config(
            ExecutionConfig(gradient_method="adjoint"))
        size = int(np.prod(self.shape))
        psi = np.eye(2**self.unit.n_wires)[0]
        maps = []
        for offset in (_MARKER0, _MARKER0 + 0.5):
            angles = (offset + np.arange(size, dtype=float)).reshape(self.shape)
            tape = _device_tape(self._dev, self._config,
                                _pair_tape(self.blocks, angles, psi, self.observable))
            maps.append((tape, _marker_map(tape, offset, size)))
        (tape, (pos, index, sign, const)), (tape2, (pos2, index2, sign2, const2)) = maps
        same = ([op.name for op in tape.operations] == [op.name for op in tape2.operations]
                and pos == pos2 and np.array_equal(index, index2)
                and np.array_equal(sign, sign2) and const.keys() == const2.keys()
                and all(np.allclose(const[k], const2[k]) for k in const))
        if not same:
            raise _NoAdjoint("a decomposed gate angle is not +-phi_k or a constant")
        self._tape, self._positions, self._index, self._sign = tape, pos, index, sign

    def _setup_backprop(self) -> None:
        blocks, observable = self.blocks, self.observable

        @qml.qnode(qml.device("default.qubit", wires=blocks.n_wires), interface="autograd",
                   diff_method="backprop")
        def run(p, psi):
            qml.StatePrep(psi, wires=range(blocks.n_wires))
            blocks(p)
            return qml.expval(observable)

        self._qnode = run

    def value(self, params, psi) -> float:
        """``C`` alone (one forward run, no derivatives)."""
        params = self._check(params)
        if self.method.startswith("adjoint"):
            new = [np.asarray(psi)] + list(self._sign * params.ravel()[self._index])
            tape = self._tape.bind_new_parameters(new, [0, *self._positions])
            value = float(np.real(self._dev.execute((tape,), self._config)[0]))
        else:
            value = float(self._qnode(params, np.asarray(psi)))
        return 1.0 - value if self.cost == "global" else value

    def _check(self, params) -> np.ndarray:
        params = np.asarray(params, dtype=float)
        if params.shape != self.shape:
            raise ThermoseedError(f"expected parameters of shape {self.shape}, "
                                  f"got {params.shape}")
        return params

    def __call__(self, params, psi) -> tuple[float, np.ndarray]:
        """``(C, dC/dphi)`` at the flat ``params`` for input ``psi``."""
        params = self._check(params)
        if self.method.startswith("adjoint"):
            new = [np.asarray(psi)] + list(self._sign * params.ravel()[self._index])
            tape = self._tape.bind_new_parameters(new, [0, *self._positions])
            tape.trainable_params = self._positions
            values, jac = self._dev.execute_and_compute_derivatives((tape,), self._config)
            grad = np.zeros(params.size)
            np.add.at(grad, self._index, self._sign * np.asarray(jac[0], dtype=float).ravel())
            value, grad = float(np.real(values[0])), grad.reshape(self.shape)
        else:
            value, grad = autograd.value_and_grad(self._qnode)(
                pnp.array(params, requires_grad=True), np.asarray(psi))
            value, grad = float(value), np.asarray(grad, dtype=float)
        if self.cost == "global":
            return 1.0 - value, -grad
        return value, grad


def active_mask(blocks: TwoBlock) -> np.ndarray:
    """Parameters that reach a gate: queue ``V`` with marker angles ``3, 4, ...`` and keep
    the markers that appear (up to sign) among the queued operations' parameters."""
    markers = _MARKER0 + np.arange(blocks.n_params, dtype=float)
    with qml.queuing.AnnotatedQueue() as queue:
        blocks(markers)
    found: list[float] = []
    for op in queue.queue:
        for v in getattr(op, "parameters", []):
            found.extend(np.abs(np.ravel(np.asarray(v, dtype=float))).tolist())
    return np.isin(markers, found)
