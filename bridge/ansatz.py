"""Parameterised unitaries U(phi): built-in templates and the user's own quantum function.

An ``Ansatz`` is structure only: a quantum function ``qfunc(params, wires)``, its parameter
shape and its wires. ``apply_ansatz`` returns ``U(params) @ block`` differentiably (autograd)
in one pass; ``ansatz_columns`` and ``unitary`` are its column and full-matrix views.

* Built-in templates (``bridge.templates.TEMPLATES``): their fast tensor forms.
* A user's function: the gates are recorded on a tape (decomposed until every operation has a
  matrix), and each gate matrix, autograd-differentiable in the parameters, is applied to the
  (d, k) block with the tensor kernels of ``bridge.templates``: runs of one-wire gates on a wire
  are multiplied into one 2x2 matrix first, consecutive parameter-free gates with one non-zero
  per row (CNOT, CZ, SWAP, Toffoli, ...) compose into one row permutation times phases, any
  other gate is one tensor contraction. Parametrised gates of one kind are evaluated as one
  broadcast ``compute_matrix`` call.
* Operations without a matrix are decomposed (templates); a parameter-free one with only a
  sparse matrix is densified. Fallback, when an operation has none of these: ``columns``,
  one broadcast ``default.qubit`` backprop run with ``StatePrep`` of the basis vectors.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import autograd.numpy as anp
import numpy as np
import pennylane as qml
from pennylane.ops.qubit.attributes import supports_broadcasting

from thermoseed.bridge.templates import (
    TEMPLATES,
    apply_1q,
    apply_gate,
    permute_rows,
)
from thermoseed.pretrain.errors import ThermoseedError


@dataclass(frozen=True)
class Ansatz:
    """A parameterised unitary on ``wires``.

    Attributes:
        name: template name, or the user's label for their own function.
        qfunc: ``qfunc(params, wires)`` applying U(params) (PennyLane gates only).
        shape: parameter shape.
        wires: the wires U acts on (a tuple).
        n_layers: layer count for built-ins (None for user functions).
        tensor: optional fast form ``tensor(params, block) -> U(params) @ block``
            (autograd-differentiable), used instead of recording the gates; composite
            circuits built from built-ins (``TwoBlock.as_ansatz``) supply one.
    """

    name: str
    qfunc: Callable
    shape: tuple[int, ...]
    wires: tuple
    n_layers: int | None = None
    tensor: Callable | None = None

    @property
    def n_wires(self) -> int:
        return len(self.wires)

    @property
    def n_params(self) -> int:
        return int(np.prod(self.shape))

    @property
    def builtin(self) -> bool:
        return self.name in TEMPLATES and self.n_layers is not None

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
        return dataclasses.replace(self, wires=tuple(wires))

    def random_params(self, seed: int, scale: float = 2 * np.pi) -> np.ndarray:
        """Uniform parameters on ``[0, scale)`` from ``seed``."""
        return np.random.default_rng(seed).uniform(0.0, scale, size=self.shape)


def make_ansatz(name: str, n_wires: int, n_layers: int, wires: Sequence | None = None) -> Ansatz:
    """A built-in template (``bridge.templates.TEMPLATES``) with ``n_layers`` layers."""
    if name not in TEMPLATES:
        raise ThermoseedError(f"unknown ansatz {name!r}; built-ins are {tuple(TEMPLATES)}")
    if int(n_wires) < 1 or int(n_layers) < 1:
        raise ThermoseedError(f"need n_wires >= 1 and n_layers >= 1, got {n_wires}, {n_layers}")
    template = TEMPLATES[name]
    if int(n_wires) < template.min_wires:
        raise ThermoseedError(f"ansatz {name!r} needs at least {template.min_wires} wires")
    wires = tuple(range(int(n_wires))) if wires is None else tuple(wires)
    if len(wires) != int(n_wires):
        raise ThermoseedError(f"got {len(wires)} wires for n_wires = {n_wires}")
    return Ansatz(name, template.qfunc, template.shape(int(n_layers), int(n_wires)), wires,
                  int(n_layers))


def user_ansatz(qfunc: Callable, shape: Sequence[int], wires: Sequence,
                name: str = "user") -> Ansatz:
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


def columns(gates: Callable[[object], None], params, n_wires: int, basis=None) -> object:
    """States ``G(params)|x>`` for basis indices ``x`` (default all) as rows, differentiably.

    ``gates(params)`` applies a circuit on wires ``0..n_wires-1``. One broadcast
    ``default.qubit`` run with ``StatePrep`` of the basis vectors (backprop, autograd); the
    device is built per call. The fallback for operations without a matrix.
    """
    d = 2**n_wires
    basis = np.arange(d) if basis is None else np.asarray(basis)
    inputs = np.eye(d)[basis]

    @qml.qnode(qml.device("default.qubit", wires=n_wires), interface="autograd",
               diff_method="backprop")
    def run(p):
        qml.StatePrep(inputs, wires=range(n_wires))
        gates(p)
        return qml.state()

    out = run(params)
    # StatePrep of a (1, d) block is broadcast with batch size 1 and already gives (1, d)
    return out if qml.math.ndim(out) == 2 else out[None, :]


# ------------------------------------------------------------- the user's circuit as tensors


def circuit_operations(ansatz: Ansatz, params) -> list | None:
    """The gates of ``ansatz(params)`` in order as (operation, matrix or None) pairs.

    An operation without a matrix is decomposed (templates), a parameter-free one with only a
    sparse matrix gets that matrix densified; None when some operation has neither (the caller
    then falls back to ``columns``).
    """
    tape = qml.tape.make_qscript(ansatz.qfunc)(params, list(ansatz.wires))
    out, stack = [], list(reversed(tape.operations))
    while stack:
        op = stack.pop()
        if op.has_matrix:
            out.append((op, None))
        elif op.has_decomposition:
            stack.extend(reversed(op.decomposition()))
        elif op.has_sparse_matrix and not op.num_params:
            out.append((op, op.sparse_matrix().toarray()))
        else:
            return None
    return out


def _gate_matrices(ops) -> list:
    """The matrix of each ``(op, matrix or None)``; parametrised gates of one kind (no
    hyperparameters, in PennyLane's broadcasting set) come from one broadcast
    ``compute_matrix`` call, autograd-differentiable in their parameters."""
    mats: list = [None] * len(ops)
    groups: dict[str, list[int]] = {}
    for i, (op, given) in enumerate(ops):
        if given is not None:
            mats[i] = given
        elif op.num_params and not op.hyperparameters and op.name in supports_broadcasting:
            groups.setdefault(op.name, []).append(i)
        else:
            mats[i] = op.matrix() if op.num_params else np.asarray(op.matrix())
    for members in groups.values():
        first = ops[members[0]][0]
        if len(members) == 1:
            mats[members[0]] = first.matrix()
            continue
        stacked = [anp.stack([ops[i][0].data[j] for i in members])
                   for j in range(first.num_params)]
        batch = type(first).compute_matrix(*stacked)
        for b, i in enumerate(members):
            mats[i] = batch[b]
    return mats


def _monomial(mat: np.ndarray, positions, n: int):
    """(src, phase) with ``gate @ block = phase[:, None] * block[src]`` when the parameter-free
    ``mat`` has one non-zero per row and column, else None."""
    nonzero = np.abs(mat) > 0
    if not (np.all(nonzero.sum(axis=0) == 1) and np.all(nonzero.sum(axis=1) == 1)):
        return None
    q, idx = len(positions), np.arange(2**n)
    shifts = [n - 1 - p for p in positions]
    local = np.zeros_like(idx)
    for j, s in enumerate(shifts):
        local |= ((idx >> s) & 1) << (q - 1 - j)
    col = np.argmax(nonzero, axis=1)[local]
    src = idx.copy()
    for j, s in enumerate(shifts):
        src = (src & ~(1 << s)) | (((col >> (q - 1 - j)) & 1) << s)
    return src, mat[local, col]


def circuit_apply(ops: list, wires: Sequence, block) -> object:
    """``G_m ... G_1 @ block`` for the gates ``ops`` from ``circuit_operations`` on ``wires``.

    Gates are held back while that is exact: one-wire gates multiply into a pending 2x2 per
    wire, parameter-free monomial gates compose into one pending ``phase * block[src]`` map;
    a pending one-wire gate is never on a wire of the pending map (invariant), so the two
    commute, and a gate is applied as soon as a later gate shares its wires.
    """
    n = len(wires)
    index = {w: i for i, w in enumerate(wires)}
    identity = np.arange(2**n)
    out = block + 0j
    pending: dict[int, object] = {}  # wire -> product of one-wire gates not yet applied
    src, phase, mapped = identity, np.ones(2**n, complex), set()  # pending monomial map

    def flush_1q(positions):
        nonlocal out
        for p in positions:
            if p in pending:
                out = apply_1q(out, pending.pop(p), p)

    def flush_map():
        nonlocal out, src, phase, mapped
        ones = bool(np.all(phase == 1))
        if not (ones and np.array_equal(src, identity)):
            out = permute_rows(out, src, None if ones else phase)
        src, phase, mapped = identity, np.ones(2**n, complex), set()

    for (op, _), mat in zip(ops, _gate_matrices(ops), strict=True):
        positions = [index[w] for w in op.wires]
        if not positions:  # a global phase
            out = out * anp.reshape(mat, ())
            continue
        if len(positions) == 1:
            p = positions[0]
            if p in mapped:
                flush_map()
            pending[p] = mat if p not in pending else anp.matmul(mat, pending[p])
            continue
        flush_1q(positions)
        monomial = None if op.num_params else _monomial(np.asarray(mat), positions, n)
        if monomial is not None:  # G o M: x -> phase_G * phase_M[src_G] * x[src_M[src_G]]
            g_src, g_phase = monomial
            src, phase = src[g_src], g_phase * phase[g_src]
            mapped.update(positions)
            continue
        if mapped.intersection(positions):
            flush_map()
        out = apply_gate(out, mat, positions, n)
    flush_map()
    flush_1q(list(pending))
    return out


def apply_ansatz(ansatz: Ansatz, params, block) -> object:
    """``U(params) @ block`` for a (2^n, k) ``block``, differentiably (autograd), one pass.

    Built-ins use their tensor form; a user's function its recorded gates (``circuit_apply``),
    or ``columns`` when an operation has no matrix and no decomposition.
    """
    ansatz.check(params)
    n = ansatz.n_wires
    if ansatz.builtin:
        return TEMPLATES[ansatz.name].apply(params, n, block)
    if ansatz.tensor is not None:
        return ansatz.tensor(params, block)
    ops = circuit_operations(ansatz, params)
    if ops is not None:
        return circuit_apply(ops, ansatz.wires, block)
    rows = columns(lambda p: ansatz(p, range(n)), params, n)  # rows U|x>, x = 0..d-1
    return anp.dot(anp.transpose(rows), block)


def ansatz_columns(ansatz: Ansatz, params, basis=None) -> object:
    """Rows ``U(params)|x>`` for basis indices ``x`` (default all), differentiably."""
    d = 2**ansatz.n_wires
    block = np.eye(d) if basis is None else np.eye(d)[:, np.asarray(basis)]
    return anp.transpose(apply_ansatz(ansatz, params, block))


def unitary(ansatz: Ansatz, params) -> object:
    """The full matrix ``U(params)`` on the ansatz's wires, differentiably (autograd)."""
    return apply_ansatz(ansatz, params, np.eye(2**ansatz.n_wires))
