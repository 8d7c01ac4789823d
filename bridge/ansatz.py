"""Parameterised unitaries U(phi): built-in templates and the user's own quantum function.

An ``Ansatz`` is structure only: a quantum function ``qfunc(params, wires)``, its parameter
shape and its wires. Building the circuit is a pure function of (params, wires); ``unitary``
returns the full matrix ``U(phi)`` differentiably (autograd): built-in templates through the
closed-form simulation in ``bridge.unitaries``, a user's function through one broadcast
``default.qubit`` run with ``StatePrep(I)``.

Built-in templates (``n_layers`` layers on ``n`` wires):
    ``"strong"``    StronglyEntanglingLayers, shape (L, n, 3)
    ``"entangler"`` BasicEntanglerLayers with RY, shape (L, n)
    ``"ladder"``    RY, RZ on every wire then a CNOT ladder 0-1, 1-2, ..., shape (L, n, 2)
    ``"soft"``      RY, RZ on every wire then a CRX ladder, shape (L, n, 3); all-zero
                    parameters give exactly the identity (used for classifier heads)
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pennylane as qml

from thermoseed.bridge.templates import template_apply
from thermoseed.pretrain.errors import ThermoseedError


def _ladder(params, wires):
    for layer in params:
        for k, w in enumerate(wires):
            qml.RY(layer[k][0], wires=w)
            qml.RZ(layer[k][1], wires=w)
        for a, b in zip(wires[:-1], wires[1:], strict=True):
            qml.CNOT(wires=[a, b])


def _soft(params, wires):
    for layer in params:
        for k, w in enumerate(wires):
            qml.RY(layer[k][0], wires=w)
            qml.RZ(layer[k][1], wires=w)
        for k, (a, b) in enumerate(zip(wires[:-1], wires[1:], strict=True)):
            qml.CRX(layer[k][2], wires=[a, b])


def _strong(params, wires):
    qml.StronglyEntanglingLayers(params, wires=wires)


def _entangler(params, wires):
    qml.BasicEntanglerLayers(params, wires=wires, rotation=qml.RY)


_TEMPLATES: dict[str, tuple[Callable, Callable[[int, int], tuple[int, ...]]]] = {
    "strong": (_strong, lambda layers, n: (layers, n, 3)),
    "entangler": (_entangler, lambda layers, n: (layers, n)),
    "ladder": (_ladder, lambda layers, n: (layers, n, 2)),
    "soft": (_soft, lambda layers, n: (layers, n, 3)),
}
TEMPLATES = tuple(_TEMPLATES)


@dataclass(frozen=True)
class Ansatz:
    """A parameterised unitary on ``wires``.

    Attributes:
        name: template name, or the user's label for their own function.
        qfunc: ``qfunc(params, wires)`` applying U(params) (PennyLane gates only).
        shape: parameter shape.
        wires: the wires U acts on (a tuple).
        n_layers: layer count for built-ins (None for user functions).
    """

    name: str
    qfunc: Callable
    shape: tuple[int, ...]
    wires: tuple
    n_layers: int | None = None

    @property
    def n_wires(self) -> int:
        return len(self.wires)

    @property
    def n_params(self) -> int:
        return int(np.prod(self.shape))

    @property
    def builtin(self) -> bool:
        return self.name in _TEMPLATES and self.n_layers is not None

    def check(self, params):
        """Raise ``ThermoseedError`` unless ``params`` has this ansatz's shape and is finite."""
        shape = tuple(qml.math.shape(params))
        if shape != self.shape:
            raise ThermoseedError(
                f"ansatz {self.name!r} expects parameters of shape {self.shape}, got {shape}"
            )
        if not bool(qml.math.all(qml.math.isfinite(qml.math.real(params)))):
            raise ThermoseedError(f"parameters for ansatz {self.name!r} contain NaN or inf")
        return params

    def __call__(self, params, wires: Sequence | None = None) -> None:
        """Apply U(params) on ``wires`` (default: the ansatz's own)."""
        wires = self.wires if wires is None else tuple(wires)
        if len(wires) != self.n_wires:
            raise ThermoseedError(
                f"ansatz {self.name!r} acts on {self.n_wires} wires, got {len(wires)}: {wires}"
            )
        self.qfunc(params, list(wires))

    def adjoint(self, params, wires: Sequence | None = None) -> None:
        """Apply U(params)^dag."""
        qml.adjoint(self.__call__)(params, wires)

    def on(self, wires: Sequence) -> Ansatz:
        """The same ansatz placed on other wires."""
        if len(wires) != self.n_wires:
            raise ThermoseedError(f"need {self.n_wires} wires, got {len(wires)}")
        return Ansatz(self.name, self.qfunc, self.shape, tuple(wires), self.n_layers)

    def random_params(self, seed: int, scale: float = 2 * np.pi) -> np.ndarray:
        """Uniform parameters on ``[0, scale)`` from ``seed``."""
        return np.random.default_rng(seed).uniform(0.0, scale, size=self.shape)


def make_ansatz(name: str, n_wires: int, n_layers: int, wires: Sequence | None = None) -> Ansatz:
    """A built-in template (see module docstring) with ``n_layers`` layers."""
    if name not in _TEMPLATES:
        raise ThermoseedError(f"unknown ansatz {name!r}; built-ins are {TEMPLATES}")
    if int(n_wires) < 1 or int(n_layers) < 1:
        raise ThermoseedError(f"need n_wires >= 1 and n_layers >= 1, got {n_wires}, {n_layers}")
    if name in ("ladder", "soft") and int(n_wires) < 2:
        raise ThermoseedError(f"ansatz {name!r} needs at least 2 wires")
    qfunc, shape = _TEMPLATES[name]
    wires = tuple(range(int(n_wires))) if wires is None else tuple(wires)
    if len(wires) != int(n_wires):
        raise ThermoseedError(f"got {len(wires)} wires for n_wires = {n_wires}")
    return Ansatz(name, qfunc, shape(int(n_layers), int(n_wires)), wires, int(n_layers))


def user_ansatz(qfunc: Callable, shape: Sequence[int], wires: Sequence, name: str = "user"):
    """Wrap the user's ``qfunc(params, wires)`` with its parameter ``shape``.

    The function is checked once on zeros of that shape (it must queue gates on ``wires``
    only), so shape and wire mistakes surface here, not deep inside a fit.
    """
    if not callable(qfunc):
        raise ThermoseedError(f"the ansatz must be a callable qfunc(params, wires), got {qfunc!r}")
    shape = tuple(int(s) for s in shape)
    ansatz = Ansatz(name, qfunc, shape, tuple(wires), None)
    try:
        with qml.queuing.AnnotatedQueue() as queue:
            ansatz(np.zeros(shape))
    except ThermoseedError:
        raise
    except Exception as err:  # noqa: BLE001 - the user's function may raise anything
        raise ThermoseedError(
            f"ansatz {name!r} failed on parameters of shape {shape}: {err}"
        ) from err
    used = set()
    for op in queue.queue:
        used.update(getattr(op, "wires", []))
    stray = used - set(ansatz.wires)
    if stray:
        raise ThermoseedError(
            f"ansatz {name!r} acts on wires {sorted(stray, key=str)} outside {ansatz.wires}"
        )
    return ansatz


@lru_cache(maxsize=32)
def _device(n_wires: int):
    return qml.device("default.qubit", wires=n_wires)


def columns(gates: Callable[[object], None], params, n_wires: int, basis=None):
    """States ``G(params)|x>`` for basis indices ``x`` (default all) as rows, differentiably.

    ``gates(params)`` applies a circuit on wires ``0..n_wires-1``. One broadcast
    ``default.qubit`` run with ``StatePrep`` of the basis vectors (backprop, autograd).
    """
    d = 2**n_wires
    basis = np.arange(d) if basis is None else np.asarray(basis)
    inputs = np.eye(d)[basis]

    @qml.qnode(_device(n_wires), interface="autograd", diff_method="backprop")
    def run(p):
        qml.StatePrep(inputs, wires=range(n_wires))
        gates(p)
        return qml.state()

    out = run(params)
    # StatePrep of a (1, d) block is broadcast with batch size 1 and already gives (1, d)
    return out if qml.math.ndim(out) == 2 else out[None, :]


def ansatz_columns(ansatz: Ansatz, params, basis=None):
    """Rows ``U(params)|x>`` for basis indices ``x`` (default all), differentiably.

    Built-in templates use the closed-form tensor simulation in ``bridge.unitaries``;
    a user's function runs through ``columns`` (one broadcast ``default.qubit`` run).
    """
    ansatz.check(params)
    n = ansatz.n_wires
    if ansatz.builtin:
        d = 2**n
        block = np.eye(d) if basis is None else np.eye(d)[:, np.asarray(basis)]
        return qml.math.transpose(template_apply(ansatz.name, params, n, block))
    return columns(lambda p: ansatz(p, range(n)), params, n, basis)


def unitary(ansatz: Ansatz, params):
    """The full matrix ``U(params)`` on the ansatz's wires, differentiably (autograd)."""
    return qml.math.transpose(ansatz_columns(ansatz, params))
