"""Compile a class decision rule into a circuit: maximise the success probability of a readout.

Given per-class density matrices sigma_c (c = 0..C-1, e.g. fitted Gibbs states), priors p_c,
a parameterised unitary U(phi) and readout wires, maximise
    ``P(phi) = sum_c p_c Tr(Pi_c U(phi) sigma_c U(phi)^dag)``,
where ``Pi_c`` projects the readout wires onto the computational-basis pattern c (first
readout wire = most significant bit; patterns >= C decide no class). With two classes and one
readout wire (class 1 <-> outcome 1, ``p(class 1) = (1 - <Z>)/2``):
    ``P = p_0 + Tr((Pi_1 (x) I) U Gamma U^dag)``,  ``Gamma = p_1 sigma_1 - p_0 sigma_0``.

Evaluation: with ``sigma_c = sum_j l_cj |v_cj><v_cj|`` (or Gamma's eigenvectors in the binary
case) only the block ``Y = U [v]`` (d x rank) is needed, ``P = const + sum_ij A_ij |Y_ij|^2``
with ``A_ij`` = weight of column j on rows i whose readout pattern is column j's class. ``Y``
comes from one pass of ``bridge.ansatz.apply_ansatz`` and its gradient from autograd.

Bounds reported alongside:
  * two classes: Helstrom ``P* = 1/2 (1 + ||p_1 sigma_1 - p_0 sigma_0||_1)``, the best of any
    measurement (C. W. Helstrom, Quantum Detection and Estimation Theory, 1976);
  * more classes: the pretty-good-measurement success ``P_pgm = sum_c Tr((p_c sigma_c
    rho^{-1/2})^2)``, ``rho = sum_c p_c sigma_c`` (P. Hausladen and W. K. Wootters, A 'pretty
    good' measurement for distinguishing quantum states, 1994), a lower bound on the optimum,
    and the upper bound ``sqrt(P_pgm)`` (H. Barnum and E. Knill, Reversing quantum dynamics
    with near-optimal quantum and classical fidelity, 2002), reported as ``bound``;
  * two classes on one readout wire: ``Pi_1 (x) I`` has rank d/2, so no circuit beats
    ``p_0 + (sum of the d/2 largest eigenvalues of Gamma)`` (Ky Fan's maximum principle,
    K. Fan, On a theorem of Weyl concerning eigenvalues of linear transformations, 1949),
    reported as ``attainable``; it equals Helstrom when Gamma has at most d/2 positive and at
    most d/2 negative eigenvalues.
"""

from __future__ import annotations

import sys
import time
import warnings
from collections.abc import Callable, Sequence
from typing import NamedTuple

import autograd
import autograd.numpy as anp
import numpy as np
from tqdm.auto import tqdm

from thermoseed.bridge.ansatz import Ansatz, apply_ansatz
from thermoseed.pretrain.data import check_density_matrix
from thermoseed.pretrain.errors import ConvergenceWarning, ThermoseedError
from thermoseed.pretrain.measurements import (
    TRACE_HINT,
    helstrom_success,
    pretty_good_measurement,
    prior_vector,
    success_probability,
)
from thermoseed.pretrain.optim import minimize

#: Eigen-directions of a state (or of Gamma) with |weight| at or below this are dropped: the
#: objective moves by at most d times this.
RANK_CUT = 1e-13
#: A start that comes this close to ``attainable`` (or ``bound``) ends the search.
TARGET_GAP = 1e-10


class ReadoutCompileResult(NamedTuple):
    """Output of ``readout_compile``.

    ``params`` (ansatz shape) reach success ``success``; ``bound`` is an upper bound on any
    measurement's success (Helstrom for two classes), ``attainable`` the best any circuit
    reaches with this readout (two classes on one wire, else None), ``pgm`` the
    pretty-good-measurement success. ``history``: success per iteration of the best start.
    """

    params: np.ndarray
    success: float
    bound: float
    readout: tuple
    priors: np.ndarray
    history: list[float]
    converged: bool
    iterations: int
    seconds: float
    attainable: float | None
    pgm: float
    starts: int


# ------------------------------------------------------------------------------ validation


def _as_states(states, d: int) -> list[np.ndarray]:
    """Class states as checked d x d density matrices (``check_density_matrix``)."""
    if isinstance(states, np.ndarray) and states.ndim == 3:
        states = list(states)
    states = [s.state() if callable(getattr(s, "state", None)) else s for s in states]
    if len(states) < 2:
        raise ThermoseedError(f"need at least 2 class states, got {len(states)}")
    out = []
    for c, s in enumerate(states):
        s = np.asarray(s)
        if s.shape != (d, d):
            raise ThermoseedError(
                f"class {c}: density matrix of shape {s.shape}, but the ansatz acts on "
                f"{int(np.log2(d))} wires: expected ({d}, {d})")
        out.append(check_density_matrix(s, what=f"class {c} density matrix",
                                        trace_hint=TRACE_HINT))
    return out


def _as_priors(priors, n_classes: int) -> np.ndarray:
    return np.full(n_classes, 1.0 / n_classes) if priors is None else \
        prior_vector(priors, n_classes)


def _as_readout(readout, ansatz: Ansatz, n_classes: int) -> tuple:
    if readout is None:
        m = max(1, int(np.ceil(np.log2(n_classes))))
        if m > ansatz.n_wires:
            raise ThermoseedError(f"{n_classes} classes need {m} readout wires; the ansatz has "
                                  f"{ansatz.n_wires}")
        return tuple(ansatz.wires[:m])
    if isinstance(readout, np.ndarray):
        readout = readout.tolist()
    if isinstance(readout, (str, int, np.integer)) or not isinstance(readout, Sequence):
        readout = (readout,)
    readout = tuple(readout)
    stray = [w for w in readout if w not in ansatz.wires]
    if stray or len(set(readout)) != len(readout) or not readout:
        raise ThermoseedError(f"readout wires {readout} must be distinct wires of the ansatz "
                              f"{ansatz.wires}")
    if 2 ** len(readout) < n_classes:
        raise ThermoseedError(f"{n_classes} classes need at least "
                              f"{int(np.ceil(np.log2(n_classes)))} readout wires, got {readout}")
    return readout


def _patterns(ansatz: Ansatz, readout: tuple) -> np.ndarray:
    """Readout pattern of each basis row (first readout wire = most significant bit)."""
    n, rows = ansatz.n_wires, np.arange(2**ansatz.n_wires)
    pattern = np.zeros_like(rows)
    for w in readout:
        pattern = (pattern << 1) | ((rows >> (n - 1 - ansatz.wires.index(w))) & 1)
    return pattern


# ---------------------------------------------------------------------------- bounds


def pgm_success(states: Sequence[np.ndarray], priors) -> float:
    """Success probability of the pretty-good measurement (Hausladen & Wootters 1994)."""
    return success_probability(pretty_good_measurement(states, priors), states, priors)


def readout_bounds(states, priors, n_readout: int = 1) -> tuple[float, float, float | None]:
    """``(bound, pgm, attainable)`` as in the module docstring."""
    pgm = pgm_success(states, priors)
    if len(states) > 2:
        return min(1.0, float(np.sqrt(pgm))), pgm, None
    bound = helstrom_success(states[0], states[1], priors[0])
    if n_readout != 1:
        return bound, pgm, None
    gamma = priors[1] * states[1] - priors[0] * states[0]
    vals = np.linalg.eigvalsh(gamma)
    return bound, pgm, float(priors[0] + vals[len(vals) // 2:].sum())


# ------------------------------------------------------------------------------ objective


class _Problem(NamedTuple):
    """Validated inputs and the block form ``P = const + sum_ij weights_ij |(U block)_ij|^2``."""

    states: list
    priors: np.ndarray
    readout: tuple
    const: float
    block: np.ndarray
    weights: np.ndarray


def _keep(weights: np.ndarray, truncate: float) -> np.ndarray:
    """Mask of eigen-components to keep: above ``RANK_CUT`` in magnitude, and, dropping the
    smallest first, leaving out at most ``truncate`` of the total weight sum |w|."""
    mags = np.abs(weights)
    keep = mags > RANK_CUT
    if truncate > 0:
        order = np.argsort(mags)
        dropped = np.cumsum(mags[order]) <= truncate * mags.sum()
        keep[order[dropped]] = False
    return keep


def _problem(states, ansatz: Ansatz, readout, priors, truncate: float = 0.0) -> _Problem:
    if not isinstance(ansatz, Ansatz):
        raise ThermoseedError(f"ansatz must be an Ansatz (make_ansatz / user_ansatz), got "
                              f"{type(ansatz).__name__}")
    states = _as_states(states, 2**ansatz.n_wires)
    priors = _as_priors(priors, len(states))
    readout = _as_readout(readout, ansatz, len(states))
    pattern = _patterns(ansatz, readout)
    if len(states) == 2 and len(readout) == 1:
        vals, vecs = np.linalg.eigh(priors[1] * states[1] - priors[0] * states[0])
        keep = _keep(vals, truncate)
        weights = (pattern == 1)[:, None] * vals[keep][None, :]
        return _Problem(states, priors, readout, float(priors[0]), vecs[:, keep], weights)
    columns, parts = [], []
    for c, (p, s) in enumerate(zip(priors, states, strict=True)):
        vals, vecs = np.linalg.eigh(s)
        keep = _keep(p * vals, truncate) & (p * vals > RANK_CUT)
        columns.append(vecs[:, keep])
        parts.append((pattern == c)[:, None] * (p * vals[keep])[None, :])
    return _Problem(states, priors, readout, 0.0, np.hstack(columns), np.hstack(parts))


def _success_function(ansatz: Ansatz, problem: _Problem) -> Callable:
    const, block, weights = problem.const, problem.block, problem.weights

    def success(params):
        y = apply_ansatz(ansatz, params, block)
        return const + anp.sum(weights * anp.real(y * anp.conj(y)))

    return success


def readout_objective(states, ansatz: Ansatz, readout=None, priors=None) -> Callable:
    """``P(params)`` of the module docstring as an autograd-differentiable function of
    parameters in the ansatz shape (inputs validated here)."""
    return _success_function(ansatz, _problem(states, ansatz, readout, priors))


# ------------------------------------------------------------------------------- compile


def _starts(ansatz: Ansatz, init, small_angle, restarts: int, seed: int, init_scale: float):
    """Starts in order: ``init``, the small-angle start (seed child 0), ``restarts`` uniform
    starts (seed children 1..restarts, so start k does not depend on ``restarts``)."""
    children = np.random.SeedSequence(seed).spawn(restarts + 1)
    out = [] if init is None else [np.asarray(ansatz.check(np.asarray(init, float)), float)]
    if small_angle is not None:
        rng = np.random.default_rng(children[0])
        out.append(rng.uniform(-small_angle, small_angle, ansatz.shape))
    out += [np.random.default_rng(c).uniform(0.0, init_scale, ansatz.shape)
            for c in children[1:]]
    if not out:
        raise ThermoseedError("no starting point: use restarts >= 1, small_angle or init")
    return out


def _iteration_callback(history: list, bar, bound: float, target: float):
    """``minimize`` callback: record the success, advance the bar, stop once ``target`` is
    met."""

    def callback(step, x, loss, grad) -> bool:
        history.append(-float(loss))
        bar.update(1)
        bar.set_postfix(success=f"{history[-1]:.6f}", bound=f"{bound:.6f}", refresh=False)
        return history[-1] >= target

    return callback


def readout_compile(
    states, ansatz: Ansatz, readout=None, *, priors=None, restarts: int = 4, seed: int = 0,
    small_angle: float | None = 0.1, init=None, max_iter: int = 500, tol: float = 1e-7,
    init_scale: float = 2 * np.pi, gap: float = TARGET_GAP, truncate: float = 0.0,
    progress: bool = False,
) -> ReadoutCompileResult:
    """Maximise ``P(phi)`` (module docstring) over the ansatz parameters.

    Args:
        states: C density matrices (d x d, d = 2^ansatz.n_wires) or fitted models (their
            ``state()``), class c first.
        ansatz: built-in (``make_ansatz``) or the user's own (``user_ansatz``).
        readout: readout wire(s) of the ansatz; default its first ceil(log2 C) wires.
        priors: class priors (default uniform).
        restarts, seed, init_scale: seeded uniform starts on ``[0, init_scale)``.
        small_angle: one extra start uniform on ``[-small_angle, small_angle]`` (None: none).
        init: optional start of your own (ansatz shape), tried first.
        max_iter, tol: L-BFGS iterations per start; converged when max |dP/dphi| <= tol.
        gap: the search stops early once a start is within ``gap`` of ``attainable`` (two
            classes on one wire) or of ``bound`` (default 1e-10; a warm start needs far less:
            1e-3 of success probability changes no decision that matters).
        truncate: optimise on the eigen-components of Gamma (or of each p_c sigma_c) that
            hold all but ``truncate`` of their total weight (smallest dropped first): the
            objective then moves by at most ``truncate`` (trace-norm bound), each iteration
            touches fewer columns, and ``success`` / ``history`` are still reported exactly
            for the final parameters (the history of the truncated objective otherwise).
        progress: tqdm bar on stderr, one step per iteration.
    """
    if not gap > 0:
        raise ThermoseedError(f"gap must be > 0, got {gap!r}")
    if max_iter < 1 or tol <= 0 or restarts < 0:
        raise ThermoseedError(f"need max_iter >= 1, tol > 0, restarts >= 0; got {max_iter}, "
                              f"{tol}, {restarts}")
    if small_angle is not None and not small_angle > 0:
        raise ThermoseedError(f"small_angle must be > 0 or None, got {small_angle}")
    t0 = time.perf_counter()
    if not 0 <= truncate < 1:
        raise ThermoseedError(f"truncate must lie in [0, 1), got {truncate!r}")
    problem = _problem(states, ansatz, readout, priors, truncate)
    success = _success_function(ansatz, problem)
    exact = success if truncate == 0 else \
        _success_function(ansatz, _problem(problem.states, ansatz, problem.readout,
                                           problem.priors))
    bound, pgm, attainable = readout_bounds(problem.states, problem.priors, len(problem.readout))
    target = (attainable if attainable is not None else bound) - gap - truncate
    value_and_grad = autograd.value_and_grad(lambda x: -success(anp.reshape(x, ansatz.shape)))

    def fun(x):
        value, grad = value_and_grad(x)
        return float(value), np.asarray(grad, dtype=float)

    starts = _starts(ansatz, init, small_angle, restarts, seed, init_scale)
    best = None
    with tqdm(total=len(starts) * max_iter, desc="readout compile", file=sys.stderr,
              disable=not progress, leave=False) as bar:
        for x0 in starts:
            history: list[float] = []
            res = minimize(fun, x0.ravel(), tol=tol, max_iter=max_iter, warn=False,
                           callback=_iteration_callback(history, bar, bound, target))
            bar.update(max_iter - len(history))
            _, grad = fun(res.x)
            run = (-res.loss, res.x, history, float(np.abs(grad).max()))
            if best is None or run[0] > best[0]:
                best = run
            if best[0] >= target:
                break
    p_best, x, history, gmax = best
    if truncate > 0:
        p_best = float(exact(anp.reshape(x, ansatz.shape)))
    converged = bool(gmax <= tol or p_best >= target)
    if not converged:
        warnings.warn(f"readout compile stopped with max |dP/dphi| = {gmax:.2g} > tol = {tol:g}"
                      "; raise max_iter or restarts", ConvergenceWarning, stacklevel=2)
    return ReadoutCompileResult(
        np.asarray(x, float).reshape(ansatz.shape), float(p_best), bound, problem.readout,
        problem.priors, history, bool(converged), len(history), time.perf_counter() - t0,
        attainable, pgm, len(starts))
