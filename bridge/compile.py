"""Compile a fitted Gibbs model sigma = exp(-H)/Z into a parameterised circuit.

Latent form: ``sigma~ = U diag(q) U^dag`` with q on a few basis states. Objective
    ``S(sigma~||sigma) = -H(q) + sum_x q_x <x|U^dag H U|x> + log Z  (>= 0)``,
zero exactly when U maps latent basis state x_i to the i-th eigenvector and q matches the
spectrum. ``latent="spectrum"``: q = top-k eigenvalues of sigma (sorted, renormalised, on the
basis states ``latent_order`` gives: wire 0 varies fastest); its floor is
``-log(captured weight)``. ``latent="product"``: q a product of Bernoulli(p_k) with trainable
logits (the variational-quantum-thermalizer form).

Eigenvector start (spectrum latent, default): each restart first fits the latent columns to
sigma's eigenvectors, minimising the weighted infidelity
    ``sum_i q_i (1 - |<v_i|U|x_i>|^2)``,
then minimises S from there. Both objectives are zero-loss exactly at U|x_i> = v_i (up to
phases), but S weighs an excited component v_j by its energy gap, ``S ~ sum_j (E_j - E_i)
|<v_j|U|x_i>|^2`` near the optimum, so its valley is as ill-conditioned as the spectrum is wide
(Hessian eigenvalues spanning 1e-4 to 7e2 on the benchmark's n = 8 chain), while the
infidelity weighs every excited direction alike. The eigenvectors come from the one
eigendecomposition the compile already does.

Purified form: a circuit W on visible + ancilla wires from |0...0>, objective
``S(Tr_anc W|0><0|W^dag || sigma) = -S(rho_v) + Tr(rho_v H) + log Z``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import NamedTuple

import autograd
import autograd.numpy as anp
import numpy as np
import scipy.sparse
from autograd.extend import defvjp, primitive
from tqdm.auto import tqdm

from thermoseed.bridge.ansatz import Ansatz, ansatz_columns
from thermoseed.bridge.latent import (
    LATENT_KINDS,
    Latent,
    bernoulli_product,
    eigenvector_classes,
    spectrum_latent,
)
from thermoseed.pretrain.diagnostics import fidelity, relative_entropy, trace_distance
from thermoseed.pretrain.errors import ConvergenceWarning, ThermoseedError
from thermoseed.pretrain.linalg import (
    ENTROPY_FLOOR,
    entropy_of_spectrum,
    von_neumann_entropy,
)
from thermoseed.pretrain.optim import minimize

FORMS = ("latent", "purified")
#: Width of the uniform starting angles ``[0, SMALL_START)`` of the first ``small_starts``
#: restarts, near the template's all-zero point (the others start on ``[0, init_scale)``).
#: Measured on a low-temperature transverse-field Ising model (n = 8, 'strong' template, 16
#: layers, 300 L-BFGS iterations): S = 0.55 from [0, 0.1) against 1.57 from [0, 2 pi), where
#: gradients are exponentially small (barren plateau); a small n = 3, k = 2 case does better
#: from [0, 2 pi), hence by default one small start and the rest wide.
SMALL_START = 0.1


class CompileReport(NamedTuple):
    """How close the compiled state is to the model sigma and to the training data rho."""

    objective: float
    floor: float
    model_relative_entropy: float
    model_fidelity: float
    model_trace_distance: float
    data_relative_entropy: float | None
    data_fidelity: float | None
    data_trace_distance: float | None
    converged: bool
    restarts: int


def compiled_state(form: str, ansatz: Ansatz, params, latent: Latent | None,
                   n_visible: int) -> np.ndarray:
    """Latent form ``U diag(q) U^dag``; purified form ``Tr_anc W|0><0|W^dag``."""
    if form == "latent":
        rows = np.asarray(ansatz_columns(ansatz, params, latent.basis))
        return (rows.T * latent.probs) @ rows.conj()
    psi = np.asarray(ansatz_columns(ansatz, params, [0]))[0]
    m = psi.reshape(2**n_visible, -1)
    return m @ m.conj().T


@dataclass
class CompileResult:
    """Output of ``compile_latent`` / ``compile_purified``.

    Attributes:
        form: ``"latent"`` or ``"purified"``.
        ansatz: the circuit template (on the visible wires, or visible + ancilla wires).
        params: compiled parameters, shape ``ansatz.shape``.
        latent: the latent distribution (latent form) or None.
        report: distances to the model and the data.
        n_visible: number of visible qubits.
        model_terms / model_coef: the Gibbs model compiled (labels and coefficients).
        history: per-iteration objective of the best restart.
    """

    form: str
    ansatz: Ansatz
    params: np.ndarray
    latent: Latent | None
    report: CompileReport
    n_visible: int
    model_terms: list[str]
    model_coef: np.ndarray
    history: list[float] = field(default_factory=list)

    def state(self) -> np.ndarray:
        """The compiled density matrix on the visible wires."""
        return compiled_state(self.form, self.ansatz, self.params, self.latent, self.n_visible)

    def preparation(self, seed: int | None = None):
        """A quantum function preparing the compiled state on wires ``0..n-1``.

        Latent form: samples x from q with ``seed`` (one shot of the classical mixture), then
        prepares |x> and applies U. Purified form: W on visible + ancilla wires (deterministic).
        """
        if self.form == "purified":
            return lambda: self.ansatz(self.params, range(self.ansatz.n_wires))
        rng = np.random.default_rng(seed)
        x = int(rng.choice(self.latent.basis, p=self.latent.probs))
        bits = [(x >> (self.n_visible - 1 - k)) & 1 for k in range(self.n_visible)]

        def prepare():
            import pennylane as qml

            qml.BasisState(np.array(bits), wires=range(self.n_visible))
            self.ansatz(self.params, range(self.n_visible))

        return prepare

    def mixed_preparation(self):
        """Quantum function on ``2n`` wires whose visible reduced state is exactly sigma~:
        ``sum_x sqrt(q_x)|x>|x>`` (StatePrep + CNOT copies onto ancillas n..2n-1), then U."""
        if self.form != "latent":
            raise ThermoseedError("mixed_preparation is for the latent form; use preparation()")
        n = self.n_visible
        amp = np.zeros(2**n)
        amp[self.latent.basis] = np.sqrt(self.latent.probs)

        def prepare():
            import pennylane as qml

            qml.StatePrep(amp, wires=range(n))
            for k in range(n):
                qml.CNOT(wires=[k, n + k])
            self.ansatz(self.params, range(n))

        return prepare

    def encoder(self):
        """Quantum function ``encoder(wires=None)`` applying ``U(params)^dag`` (data -> latent)."""
        if self.form != "latent":
            raise ThermoseedError("the encoder orientation exists for the latent form only")
        return lambda wires=None: self.ansatz.adjoint(self.params, wires)


# ------------------------------------------------------------------------------ objectives


@primitive
def _entropy_of_factor(m):
    """``S(M M^dag)`` in nats for a complex matrix M (von Neumann entropy of rho = M M^dag)."""
    return entropy_of_spectrum(np.linalg.eigvalsh(m @ m.conj().T))


def _entropy_vjp(ans, m):
    rho = m @ m.conj().T
    vals, vecs = np.linalg.eigh(0.5 * (rho + rho.conj().T))
    logs = np.log(np.maximum(vals, ENTROPY_FLOOR)) + 1.0
    # dS = -Tr((log rho + I) d rho); autograd's gradient for real f of complex M is 2 df/dM.
    lm = (vecs * logs) @ vecs.conj().T @ m
    return lambda g: -2.0 * g * np.conj(lm)


defvjp(_entropy_of_factor, _entropy_vjp)


#: A Hamiltonian with at most this fraction of nonzero entries is applied as a sparse matrix
#: (a Pauli-string H has at most (number of distinct x-masks) nonzeros per row).
SPARSE_FILL = 0.1


def _operator(h: np.ndarray):
    """``h`` as CSR when it is sparse enough (one O(d^2) scan), else as it is."""
    if np.count_nonzero(h) <= SPARSE_FILL * h.size:
        return scipy.sparse.csr_matrix(h)
    return h


def _applied(h, rows: np.ndarray) -> np.ndarray:
    """Rows ``H c_i`` for rows ``c_i`` (dense or sparse Hermitian ``h``)."""
    return np.asarray(h @ rows.T).T


@primitive
def _energies(rows, h):
    """``E_i = <c_i|H|c_i>`` for rows ``c_i``; autograd primitive (dense or sparse ``h``)."""
    return np.real(np.sum(np.conj(rows) * _applied(h, rows), axis=1))


def _energies_vjp(ans, rows, h):
    # dE_i = 2 Re(<dc_i|H|c_i>); autograd's gradient for real f of complex c is 2 df/dc,
    # and df/dc_i = conj(H c_i) for Hermitian H.
    applied = _applied(h, rows)
    return lambda g: 2.0 * g[:, None] * np.conj(applied)


defvjp(_energies, _energies_vjp)


def _visible(model):
    """A hidden-qubit model compiles as its visible reduced state (``visible_view``)."""
    return model.visible_view() if hasattr(model, "visible_view") else model


def _check_model(model, ansatz: Ansatz, n_wires: int):
    if not hasattr(model, "coef_") or not hasattr(model, "terms_"):
        raise ThermoseedError("compile needs a fitted Gibbs model (call fit, or load_model)")
    n = model.terms_.n_qubits
    if n_wires != n:
        raise ThermoseedError(
            f"the ansatz acts on {n_wires} wires but the model has {n} visible qubits"
        )
    return n


def _restart_inits(ansatz: Ansatz, extra: int, restarts: int, seed: int, init_scale: float,
                   small_starts: int = 0):
    """Seeded starts: the first ``small_starts`` uniform on ``[0, SMALL_START)``, the others
    on ``[0, init_scale)``; ``extra`` trailing zeros (latent logits)."""
    if restarts < 1:
        raise ThermoseedError(f"restarts must be >= 1, got {restarts}")
    if small_starts < 0:
        raise ThermoseedError(f"small_starts must be >= 0, got {small_starts}")
    for i, child in enumerate(np.random.SeedSequence(seed).spawn(restarts)):
        rng = np.random.default_rng(child)
        scale = SMALL_START if i < small_starts else init_scale
        yield np.concatenate([rng.uniform(0, scale, ansatz.n_params), np.zeros(extra)])


def _loss_and_grad(objective):
    value_and_grad = autograd.value_and_grad(objective)

    def loss_and_grad(x):
        value, grad = value_and_grad(x)
        return float(value), np.asarray(grad, dtype=float)

    return loss_and_grad


def _eigenvector_infidelity(ansatz: Ansatz, lat: Latent, vectors: np.ndarray):
    """``x -> sum_i q_i (1 - |<v_i|U(x)|x_i>|^2)`` for latent slots i and eigenvectors v_i."""
    conj_targets = np.conj(vectors.T)  # row i: conj(v_i)

    def infidelity(x):
        rows = ansatz_columns(ansatz, anp.reshape(x[:ansatz.n_params], ansatz.shape), lat.basis)
        overlaps = anp.sum(rows * conj_targets, axis=1)
        return anp.dot(lat.probs, 1.0 - anp.abs(overlaps) ** 2)

    return infidelity


def _optimise(objective, inits, *, max_iter, tol, progress, desc, first_stage=None,
              screen_iter=None):
    """Best of L-BFGS runs (up to ``max_iter`` iterations each) from ``inits``. With
    ``first_stage`` (an objective with the same minimiser) every start first minimises that
    for ``screen_iter`` iterations (default ``max_iter``), the best goes on with it up to
    ``max_iter`` in all, and then minimises ``objective`` from there."""
    starts = list(inits)
    screen = max_iter if screen_iter is None else min(int(screen_iter), max_iter)
    total = len(starts) * max_iter if first_stage is None else \
        len(starts) * screen + (max_iter - screen) + max_iter
    with tqdm(total=total, desc=desc, disable=not progress, leave=False) as bar:

        def tick(step, x, loss, grad):
            bar.update(1)
            bar.set_postfix(objective=f"{loss:.4g}", refresh=False)

        def best_run(loss_and_grad, x0s, iters):
            best = None
            for x0 in x0s:
                with warnings.catch_warnings():
                    # one restart that stops short is normal; the best one is judged below
                    warnings.simplefilter("ignore", ConvergenceWarning)
                    result = minimize(loss_and_grad, x0, tol=tol, max_iter=iters,
                                      callback=tick)
                bar.update(iters - result.n_iter)  # an early stop skips its share's rest
                if best is None or result.loss < best.loss:
                    best = result
            return best

        if first_stage is not None:
            fit = _loss_and_grad(first_stage)
            best = best_run(fit, starts, screen)
            rest = max_iter - screen
            if rest and not best.converged:
                best = best_run(fit, [best.x], rest)
            else:
                bar.update(rest)
        best = best_run(_loss_and_grad(objective),
                        starts if first_stage is None else [best.x], max_iter)
    if not best.converged:
        warnings.warn(
            f"the compile's best of {len(starts)} restart(s) stopped after {best.n_iter} "
            f"iterations with |grad| = {best.grad_norm:.2g} > tol = {tol:g}; raise max_iter "
            "or restarts (the report's objective against its floor says how far off it is)",
            ConvergenceWarning, stacklevel=3)
    return best


def _report(compiled: np.ndarray, objective: float, floor: float, converged: bool,
            restarts: int, gibbs, h: np.ndarray, data_rho) -> CompileReport:
    """Distances of the compiled state to the model (from the one engine evaluation
    ``gibbs``) and to the data."""
    data = (None, None, None)
    if data_rho is not None:
        data = (relative_entropy(data_rho, compiled), fidelity(compiled, data_rho),
                trace_distance(compiled, data_rho))
    # S(c||sigma) = -S(c) + Tr(c H) + log Z: exact for a Gibbs state, whose dense sigma can
    # hold eigenvalues that underflowed to ~0 at low temperature (the dense formula then
    # reports inf although the true value is finite)
    model_rel = -von_neumann_entropy(compiled) + float(np.real(np.sum(compiled.T * h))) \
        + gibbs.log_z
    return CompileReport(
        objective, floor, max(0.0, model_rel), fidelity(compiled, gibbs.state),
        trace_distance(compiled, gibbs.state), *data, converged, restarts)


def compile_latent(
    model, ansatz: Ansatz, *, latent: str = "spectrum", k: int | None = None,
    weight: float = 0.999, restarts: int = 3, seed: int = 0, max_iter: int = 300,
    tol: float = 1e-6, init_scale: float = 2 * np.pi, small_starts: int = 1, data=None,
    progress: bool = False, class_data=None, readout: int = 0, eigenvector_start: bool = True,
    screen_iter: int | None = None,
) -> CompileResult:
    """Latent-form compile of a fitted model into ``ansatz`` (see module docstring); a
    hidden-qubit model compiles as its visible reduced state.

    ``data``: optional training density matrix (or ``TrainingData``) for the report.
    ``class_data``: optional ``(states, labels)`` with two classes 0/1; each latent
    eigenvector is then placed on a basis state whose ``readout`` bit is the class that holds
    more (class-balanced) weight on it, so a classifier reading that wire starts on the
    labels' side instead of an arbitrary one (``labelled_order``).
    Restarts start from uniform parameters on ``[0, init_scale)``, the first ``small_starts``
    of them on ``[0, SMALL_START)`` near the template's zero point; the best is kept.
    ``eigenvector_start`` (spectrum latent): every restart first fits the latent columns to
    sigma's eigenvectors for ``screen_iter`` iterations (default ``max_iter``; see module
    docstring), the best fit goes on up to ``max_iter`` in all and then minimises S (up to
    ``max_iter`` more); ``history`` is that last stage's. A short ``screen_iter`` with many
    restarts spends the budget on the start that fits best early.
    """
    if latent not in LATENT_KINDS:
        raise ThermoseedError(f"latent must be one of {LATENT_KINDS}, got {latent!r}")
    if screen_iter is not None and int(screen_iter) < 1:
        raise ThermoseedError(f"screen_iter must be >= 1 (or None for max_iter), got "
                              f"{screen_iter}")
    model = _visible(model)
    n = _check_model(model, ansatz, ansatz.n_wires)
    data_rho = _data_rho(data, n)
    h = np.asarray(model.hamiltonian())
    h_op = _operator(h)
    gibbs = model.evaluate(want_state=True)  # the one eigendecomposition of H
    energies, log_z = np.asarray(gibbs.energies), gibbs.log_z

    npar = ansatz.n_params
    classes, first_stage = None, None
    if class_data is not None:
        if latent != "spectrum":
            raise ThermoseedError("class_data places the spectrum latent; use latent='spectrum'")
        states, labels = class_data
        labels = np.asarray(labels)
        if set(np.unique(labels).tolist()) != {0, 1}:
            raise ThermoseedError(
                f"class_data needs labels 0 and 1 (two classes), got {sorted(set(labels))}")
        if not 0 <= int(readout) < n:
            raise ThermoseedError(f"readout wire {readout} is not in 0..{n - 1}")
        classes = eigenvector_classes(gibbs.vectors, states, labels)
    if latent == "spectrum":
        lat = spectrum_latent(energies, k=k, weight=weight, classes=classes,
                              readout=int(readout))
        q = lat.probs
        neg_entropy = -entropy_of_spectrum(q)

        def objective(x):
            rows = ansatz_columns(ansatz, anp.reshape(x, ansatz.shape), lat.basis)
            return neg_entropy + anp.dot(q, _energies(rows, h_op)) + log_z

        extra, floor = 0, max(0.0, -float(np.log(lat.captured)))
        if eigenvector_start:
            slots = np.argsort(energies, kind="stable")[:len(q)]  # most probable first
            first_stage = _eigenvector_infidelity(ansatz, lat, gibbs.vectors[:, slots])
    else:

        def objective(x):
            rows = ansatz_columns(ansatz, anp.reshape(x[:npar], ansatz.shape))
            qx, ent = bernoulli_product(x[npar:], n)
            return -ent + anp.dot(qx, _energies(rows, h_op)) + log_z

        extra, floor = n, 0.0

    best = _optimise(objective,
                     _restart_inits(ansatz, extra, restarts, seed, init_scale, small_starts),
                     max_iter=max_iter, tol=tol, progress=progress, desc="compile",
                     first_stage=first_stage, screen_iter=screen_iter)
    params = best.x[:npar].reshape(ansatz.shape)
    if latent == "product":
        qx, _ = bernoulli_product(best.x[npar:], n)
        keep = np.flatnonzero(np.asarray(qx) > 0)
        lat = Latent("product", keep, np.asarray(qx)[keep] / np.sum(qx), 1.0)
    report = _report(compiled_state("latent", ansatz, params, lat, n), best.loss, floor,
                     best.converged, restarts, gibbs, h, data_rho)
    return CompileResult("latent", ansatz, params, lat, report, n, list(model.terms_.labels),
                         np.asarray(model.coef_, float), best.history["loss"])


def compile_purified(
    model, ansatz: Ansatz, *, n_visible: int | None = None, restarts: int = 3, seed: int = 0,
    max_iter: int = 300, tol: float = 1e-6, init_scale: float = 2 * np.pi,
    small_starts: int = 1, data=None, progress: bool = False,
) -> CompileResult:
    """Purified-form compile: ``ansatz`` acts on visible wires 0..n-1 plus ancillas n..;
    minimises ``S(rho_v || sigma)`` of the visible reduced state of ``W|0...0>``. Restarts
    start as in ``compile_latent`` (the first ``small_starts`` near zero)."""
    model = _visible(model)
    n = model.terms_.n_qubits if n_visible is None else int(n_visible)
    _check_model(model, ansatz, n)
    if ansatz.n_wires <= n:
        raise ThermoseedError(
            f"the purified form needs ancilla wires: the ansatz has {ansatz.n_wires} wires for "
            f"{n} visible qubits; use an ansatz on {2 * n} wires"
        )
    data_rho = _data_rho(data, n)
    h = np.asarray(model.hamiltonian())
    h_op = _operator(h)
    gibbs = model.evaluate(want_state=True)  # the one eigendecomposition of H
    log_z = gibbs.log_z
    dv = 2**n

    def objective(x):
        psi = ansatz_columns(ansatz, anp.reshape(x, ansatz.shape), [0])[0]
        m = anp.reshape(psi, (dv, -1))  # Tr(m^dag H m): the energies of m's columns
        energy = anp.sum(_energies(anp.transpose(m), h_op))
        return -_entropy_of_factor(m) + energy + log_z

    best = _optimise(objective,
                     _restart_inits(ansatz, 0, restarts, seed, init_scale, small_starts),
                     max_iter=max_iter, tol=tol, progress=progress, desc="compile")
    params = best.x.reshape(ansatz.shape)
    report = _report(compiled_state("purified", ansatz, params, None, n), best.loss, 0.0,
                     best.converged, restarts, gibbs, h, data_rho)
    return CompileResult("purified", ansatz, params, None, report, n,
                         list(model.terms_.labels), np.asarray(model.coef_, float),
                         best.history["loss"])


def _data_rho(data, n_qubits: int):
    """The data's density matrix, checked against the model's qubit count before any work."""
    if data is None:
        return None
    from thermoseed.pretrain.data import as_training_data, square_array_kind

    rho = as_training_data(data, kind=square_array_kind(data)).rho
    if rho.shape[0] != 2**n_qubits:
        raise ThermoseedError(
            f"the data are {int(np.log2(rho.shape[0]))}-qubit states but the model has "
            f"{n_qubits} qubits; pass the data the model was fitted on")
    return rho
