"""A circuit family: the user's own quantum function at every qubit count and depth.

A sweep runs one circuit at several sizes, so the user gives a *family*: the quantum function
``qfunc(params, wires)`` (PennyLane gates on any number of wires), a name, and the parameter
shape per size, either a tuple whose entries are integers or the strings ``"n"`` and
``"depth"`` (e.g. ``("depth", "n", 3)``) or a callable ``shape(n_qubits, depth)``.

Records never hold the function itself: they hold the family's name and a fingerprint per
size, the first 16 hex digits of

    ``sha256(JSON [name, shape, [[gate name, wires, angles (6 significant digits)], ...]])``

with the gates recorded (not decomposed) at the fixed angles ``0.3 + 0.01 k`` (k = 0, 1, ...
in C order). A changed function (other gates, wires, shape or angle arithmetic) gets other
fingerprints, so its results never mix with old ones.

Worker processes rebuild the circuit from the family: spawned processes import the function
by reference (its module and name), so it must live at module level of an importable file;
``require_portable`` says so in one line before any work starts.
"""

from __future__ import annotations

import hashlib
import json
import pickle
import sys
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import pennylane as qml

from thermoseed.bridge.ansatz import Ansatz, user_ansatz
from thermoseed.bridge.templates import TEMPLATES
from thermoseed.pretrain.errors import ThermoseedError

#: The symbolic entries a shape tuple may hold.
SIZE_NAMES = ("n", "depth")
#: First angle and step of the fixed parameter vector a fingerprint records the gates at.
_ANGLE0, _ANGLE_STEP = 0.3, 0.01


@dataclass(frozen=True)
class CircuitFamily:
    """The user's ``qfunc(params, wires)`` with a parameter shape per (n_qubits, depth).

    Attributes:
        name: the label records and reports show (never a built-in template name).
        qfunc: ``qfunc(params, wires)`` applying PennyLane gates on ``wires``.
        shape: a tuple of positive integers and ``"n"`` / ``"depth"``, or a callable
            ``shape(n_qubits, depth) -> tuple[int, ...]``.
    """

    name: str
    qfunc: Callable
    shape: tuple | Callable
    _fingerprints: dict = field(default_factory=dict, init=False, repr=False,
                                compare=False, hash=False)

    def param_shape(self, n_qubits: int, depth: int) -> tuple[int, ...]:
        """The parameter shape at ``n_qubits`` wires and ``depth``."""
        if callable(self.shape):
            try:
                raw = self.shape(int(n_qubits), int(depth))
            except Exception as err:  # noqa: BLE001 - the user's function may raise anything
                raise ThermoseedError(
                    f"shape of circuit {self.name!r} failed at n = {n_qubits}, depth = "
                    f"{depth}: {err}") from err
        else:
            sizes = {"n": int(n_qubits), "depth": int(depth)}
            raw = tuple(sizes[s] if isinstance(s, str) else s for s in self.shape)
        return _positive_shape(raw, f"shape of circuit {self.name!r} at n = {n_qubits}, "
                                    f"depth = {depth}")

    def ansatz(self, n_qubits: int, depth: int) -> Ansatz:
        """The family's ``Ansatz`` on wires ``0..n_qubits-1`` (checked by ``user_ansatz``)."""
        shape = self.param_shape(n_qubits, depth)
        return user_ansatz(self.qfunc, shape, range(int(n_qubits)), name=self.name)

    def fingerprint(self, n_qubits: int, depth: int) -> str:
        """16 hex digits identifying the name, parameter shape and gate sequence at this size
        (module docstring); computed once per size and object."""
        key = (int(n_qubits), int(depth))
        if key not in self._fingerprints:
            self._fingerprints[key] = circuit_fingerprint(self.ansatz(*key))
        return self._fingerprints[key]


def circuit_family(qfunc: Callable, shape: tuple | Callable, name: str) -> CircuitFamily:
    """A ``CircuitFamily`` after checking its arguments (one ``ThermoseedError`` line each).

    Example: ``circuit_family(my_layers, ("depth", "n", 2), "ry-rz ladder")`` where
    ``my_layers(params, wires)`` applies ``params[l, i]`` on wire ``wires[i]`` in layer l.
    """
    if not callable(qfunc):
        raise ThermoseedError(f"qfunc must be a callable qfunc(params, wires), got {qfunc!r}")
    if not isinstance(name, str) or not name.strip():
        raise ThermoseedError(f"name must be a non-empty string, got {name!r}")
    if name in TEMPLATES:
        raise ThermoseedError(f"name {name!r} is a built-in template; give your circuit "
                              "another name")
    if not callable(shape):
        if not isinstance(shape, tuple | list) or not shape:
            raise ThermoseedError(
                f"shape must be a tuple of integers, 'n' and 'depth' (e.g. ('depth', 'n', 3)) "
                f"or a callable shape(n_qubits, depth), got {shape!r}")
        for entry in shape:
            if isinstance(entry, str):
                if entry not in SIZE_NAMES:
                    raise ThermoseedError(f"shape entry {entry!r} is neither an integer nor "
                                          f"one of {SIZE_NAMES}")
            else:
                _positive_shape((entry,), f"shape {tuple(shape)!r}")
        shape = tuple(shape)
    return CircuitFamily(name, qfunc, shape)


def _positive_shape(raw, what: str) -> tuple[int, ...]:
    """``raw`` as a tuple of integers >= 1, else one ``ThermoseedError`` line."""
    try:
        entries = tuple(raw)
    except TypeError:
        entries = None
    if not entries or not all(isinstance(s, int | np.integer) and not isinstance(s, bool)
                              and s >= 1 for s in entries):
        raise ThermoseedError(f"{what} must be a tuple of integers >= 1, got {raw!r}")
    return tuple(int(s) for s in entries)


def circuit_fingerprint(ansatz: Ansatz) -> str:
    """16 hex digits of the sha256 of the name, shape and gates of ``ansatz`` recorded at the
    fixed angles ``0.3 + 0.01 k`` (gate names, wires and angles to 6 significant digits)."""
    size = ansatz.n_params
    angles = (_ANGLE0 + _ANGLE_STEP * np.arange(size, dtype=float)).reshape(ansatz.shape)
    tape = qml.tape.make_qscript(ansatz.qfunc)(angles, list(ansatz.wires))
    gates = [[op.name, [str(w) for w in op.wires],
              [f"{float(v):.6g}" for d in op.data for v in np.ravel(np.real(d))]]
             for op in tape.operations]
    text = json.dumps([ansatz.name, list(ansatz.shape), gates])
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def template_label(template: str | CircuitFamily | Ansatz, n_qubits: int,
                   depth: int) -> tuple[str, str | None]:
    """``(name, fingerprint)`` of a job's circuit: a built-in name has no fingerprint (its
    gates are fixed by the package), a family or an ``Ansatz`` has one per size."""
    if isinstance(template, str):
        return template, None
    if isinstance(template, CircuitFamily):
        return template.name, template.fingerprint(n_qubits, depth)
    if isinstance(template, Ansatz):
        return template.name, circuit_fingerprint(template)
    raise ThermoseedError(
        f"template must be a built-in name {tuple(TEMPLATES)}, a circuit_family(...) or an "
        f"Ansatz, got {template!r}")


def require_portable(template: str | CircuitFamily | Ansatz) -> None:
    """Raise one ``ThermoseedError`` line unless spawned worker processes can rebuild
    ``template``: every function in it must be importable by module and name (no lambda, no
    function defined inside another, no interactive session without a script file)."""
    if isinstance(template, str):
        return
    parts = ([("qfunc", template.qfunc), ("shape", template.shape)]
             if isinstance(template, CircuitFamily)
             else [("qfunc", template.qfunc), ("tensor", template.tensor)])
    fix = ("define it at module level of a .py file (run the sweep under "
           "if __name__ == '__main__':) or pass workers=1")
    for role, fn in parts:
        if not callable(fn):
            continue
        label = getattr(fn, "__qualname__", repr(fn))
        if "<lambda>" in label:
            problem = "is a lambda"
        elif "<locals>" in label:
            problem = "is defined inside another function"
        elif (getattr(fn, "__module__", None) == "__main__"
              and not getattr(sys.modules.get("__main__"), "__file__", None)):
            problem = "lives in an interactive session (no script file)"
        else:
            continue
        raise ThermoseedError(f"circuit {template.name!r}: its {role} {label!r} {problem}, so "
                              f"worker processes cannot import it; {fix}")
    try:
        pickle.dumps(template)
    except Exception as err:  # noqa: BLE001 - pickle raises many kinds
        raise ThermoseedError(f"circuit {template.name!r} cannot be sent to worker processes "
                              f"({type(err).__name__}: {err}); {fix}") from err
