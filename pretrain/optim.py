"""Optimisers for smooth losses with exact gradients: L-BFGS (scipy) and Adam.

Adam is a pure (init, update) pair over an immutable state record; a checkpoint is that
record plus the iterate and history in an ``.npz``, and resuming is loading it. The driver
``minimize`` sees only a ``loss_and_grad(x) -> (loss, grad)`` callable, never a model.
"""

from __future__ import annotations

import sys
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import NamedTuple

import numpy as np
import scipy.optimize
from tqdm.auto import tqdm

from .errors import ConvergenceWarning, ThermoseedError
from .files import atomic_save_npz, load_npz

SOLVERS = ("lbfgs", "adam")
#: Relative loss-change floor handed to L-BFGS-B; the real stop is the gradient norm.
LBFGS_FTOL = 1e-15

LossAndGrad = Callable[[np.ndarray], tuple[float, np.ndarray]]
#: ``callback(step, x, loss, grad)``; returning True stops the fit early.
Callback = Callable[[int, np.ndarray, float, np.ndarray], "bool | None"]


class AdamState(NamedTuple):
    step: int
    mean: np.ndarray
    second: np.ndarray


class Stepper(NamedTuple):
    """A pure optimiser: ``init(x) -> state``, ``update(grad, state) -> (delta, state)``."""

    init: Callable
    update: Callable


def adam(learning_rate: float = 0.05, b1: float = 0.9, b2: float = 0.999, eps: float = 1e-8):
    """Adam: ``delta = -lr * mhat / (sqrt(vhat) + eps)`` with bias-corrected moments."""

    def init(x: np.ndarray) -> AdamState:
        return AdamState(0, np.zeros_like(x), np.zeros_like(x))

    def update(grad: np.ndarray, state: AdamState) -> tuple[np.ndarray, AdamState]:
        step = state.step + 1
        mean = b1 * state.mean + (1 - b1) * grad
        second = b2 * state.second + (1 - b2) * grad**2
        mhat = mean / (1 - b1**step)
        vhat = second / (1 - b2**step)
        return -learning_rate * mhat / (np.sqrt(vhat) + eps), AdamState(step, mean, second)

    return Stepper(init, update)


class AdamStep(NamedTuple):
    """One Adam step: ``loss`` and ``grad`` at the previous iterate, ``x`` after the update."""

    step: int
    x: np.ndarray
    loss: float
    grad: np.ndarray
    state: AdamState


def adam_steps(
    loss_and_grad: LossAndGrad, x0: np.ndarray, *, learning_rate: float = 0.05,
    state: AdamState | None = None,
) -> Iterator[AdamStep]:
    """The one Adam loop: ``x_{t+1} = x_t + adam_update(grad L(x_t))``, forever.

    Every optimiser run in thermoseed that uses Adam (Gibbs fits, classifier training, the
    eigensolver) consumes this iterator and stops it when it likes; ``loss_and_grad`` may be
    stochastic (minibatches) as long as it is seeded. ``state`` resumes a run.
    """
    opt = adam(learning_rate)
    x = np.asarray(x0, dtype=float).copy()
    state = opt.init(x) if state is None else state
    while True:
        loss, grad = loss_and_grad(x)
        grad = np.asarray(grad, dtype=float)
        delta, state = opt.update(grad, state)
        x = x + delta
        yield AdamStep(state.step, x, float(loss), grad, state)


class FitResult(NamedTuple):
    """``stop``: why the run ended: ``"tolerance"``, ``"iteration cap"``, ``"stalled line
    search"`` or ``"callback"``."""

    x: np.ndarray
    loss: float
    grad_norm: float
    n_iter: int
    converged: bool
    history: dict[str, list[float]]
    stop: str = "tolerance"


def warn_unconverged(result: FitResult, tol: float, *, stacklevel: int = 2) -> None:
    """ConvergenceWarning (raise max_iter) for a run that stopped short of ``tol`` by itself;
    nothing for a converged run or one a callback stopped."""
    if result.converged or result.stop == "callback":
        return
    warnings.warn(
        f"stopped at {result.stop} after {result.n_iter} iterations with |grad| = "
        f"{result.grad_norm:.3g} > tol = {tol:g}; raise max_iter or loosen tol (tol near 1e-8 "
        "hits round-off)",
        ConvergenceWarning,
        stacklevel=stacklevel + 1,
    )


class _Recorder:
    """Keeps history, drives the progress bar and callback, writes checkpoints."""

    def __init__(self, callback, progress, max_iter, checkpoint, checkpoint_every, history, step,
                 fingerprint: str = ""):
        self.callback = callback
        self.fingerprint = fingerprint
        self.history = history
        self.step = step
        self.checkpoint = checkpoint
        self.checkpoint_every = checkpoint_every
        self.stopped_by_callback = False
        self.last_extra: dict[str, np.ndarray] = {}
        self.bar = tqdm(total=max_iter, initial=step, disable=not progress, file=sys.stderr,
                        desc="fit", leave=False)

    def record(self, x, loss, grad, extra: dict[str, np.ndarray] | None = None) -> bool:
        self.step += 1
        self.last_extra = extra or {}
        gnorm = float(np.linalg.norm(grad))
        self.history["loss"].append(float(loss))
        self.history["grad_norm"].append(gnorm)
        self.bar.update(1)
        self.bar.set_postfix(loss=f"{loss:.3e}", grad=f"{gnorm:.1e}", refresh=False)
        if self.checkpoint is not None and self.step % self.checkpoint_every == 0:
            save_checkpoint(self.checkpoint, x, self.step, self.history, extra or {},
                            self.fingerprint)
        stop = self.callback(self.step, x, float(loss), grad) if self.callback else False
        self.stopped_by_callback = bool(stop)
        return bool(stop)

    def close(self):
        self.bar.close()


def save_checkpoint(path, x, step, history, extra: dict[str, np.ndarray],
                    fingerprint: str = "") -> None:
    """Write iterate, step count, history, optimiser state and the fit's ``fingerprint``
    (what the fit is of: data, terms, settings) atomically."""
    arrays = {
        "fingerprint": np.array(fingerprint),
        "x": np.asarray(x, float),
        "step": np.array(step),
        "history_loss": np.asarray(history["loss"], float),
        "history_grad_norm": np.asarray(history["grad_norm"], float),
    }
    arrays.update({f"opt_{k}": np.asarray(v) for k, v in extra.items()})
    atomic_save_npz(path, arrays)


def load_checkpoint(path, size: int, fingerprint: str | None = None
                    ) -> tuple[np.ndarray, int, dict, dict]:
    """Read a checkpoint written by ``save_checkpoint``; checks the iterate size and, given a
    ``fingerprint``, that the checkpoint was written by a fit of the same one (a checkpoint
    of other data or settings with the same number of terms used to be resumed silently)."""
    arrays = load_npz(path, what="checkpoint")
    try:
        x = arrays["x"]
        step = int(arrays["step"])
        history = {"loss": arrays["history_loss"].tolist(),
                   "grad_norm": arrays["history_grad_norm"].tolist()}
    except KeyError as err:
        raise ThermoseedError(f"checkpoint {str(path)!r} lacks array {err}; delete it") from err
    if x.shape != (size,):
        raise ThermoseedError(
            f"checkpoint {str(path)!r} holds {x.size} parameters but the fit has {size}; "
            "delete the checkpoint or point to the right one"
        )
    stored = str(arrays["fingerprint"]) if "fingerprint" in arrays else None
    if fingerprint is not None and stored != fingerprint:
        raise ThermoseedError(
            f"checkpoint {str(path)!r} was written by a fit of other data, terms or settings; "
            "delete it (or pass another --checkpoint) to start this fit afresh")
    extra = {k[4:]: v for k, v in arrays.items() if k.startswith("opt_")}
    return x, step, history, extra


def minimize(
    loss_and_grad: LossAndGrad,
    x0: np.ndarray,
    *,
    solver: str = "lbfgs",
    tol: float = 1e-6,
    max_iter: int = 500,
    learning_rate: float = 0.05,
    callback: Callback | None = None,
    progress: bool = False,
    checkpoint: str | Path | None = None,
    checkpoint_every: int = 25,
    fingerprint: str = "",
    warn: bool = True,
) -> FitResult:
    """Minimise until ``|grad| <= tol`` or ``max_iter`` iterations.

    With ``checkpoint`` set, state is saved every ``checkpoint_every`` iterations and an
    existing checkpoint is resumed from (L-BFGS restarts its curvature memory on resume),
    only when it carries the same ``fingerprint`` (what the caller says the fit is of).
    ``warn=False`` leaves the ConvergenceWarning to the caller (``warn_unconverged``), which
    may know a better reason (a divergent fit).
    """
    if solver not in SOLVERS:
        raise ThermoseedError(f"unknown solver {solver!r}; choose one of {SOLVERS}")
    x = np.asarray(x0, dtype=float).copy()
    history: dict[str, list[float]] = {"loss": [], "grad_norm": []}
    step = 0
    extra: dict[str, np.ndarray] = {}
    if checkpoint is not None and Path(checkpoint).exists():
        x, step, history, extra = load_checkpoint(checkpoint, x.size, fingerprint)
    rec = _Recorder(callback, progress, max_iter, checkpoint, checkpoint_every, history, step,
                    fingerprint)
    try:
        if solver == "adam":
            x = _run_adam(loss_and_grad, x, rec, tol, max_iter, learning_rate, extra)
        else:
            x = _run_lbfgs(loss_and_grad, x, rec, tol, max_iter)
    finally:
        rec.close()
    loss, grad = loss_and_grad(x)
    gnorm = float(np.linalg.norm(grad))
    converged = gnorm <= tol
    if converged:
        stop = "tolerance"
    elif rec.stopped_by_callback:
        stop = "callback"
    else:
        stop = "the iteration cap" if rec.step >= max_iter else "a stalled line search"
    if checkpoint is not None:
        save_checkpoint(checkpoint, x, rec.step, rec.history, rec.last_extra or extra,
                        fingerprint)
    result = FitResult(x, float(loss), gnorm, rec.step, converged, rec.history, stop)
    if warn:
        warn_unconverged(result, tol, stacklevel=3)
    return result


def _run_adam(loss_and_grad, x, rec, tol, max_iter, learning_rate, extra) -> np.ndarray:
    state = None
    if "mean" in extra:
        state = AdamState(int(extra["step"]), extra["mean"], extra["second"])
    if rec.step >= max_iter:
        return x
    for item in adam_steps(loss_and_grad, x, learning_rate=learning_rate, state=state):
        if np.linalg.norm(item.grad) <= tol:
            break  # x is the iterate the small gradient was measured at
        x = item.x
        if rec.record(x, item.loss, item.grad, item.state._asdict()) or rec.step >= max_iter:
            break
    return x


def _run_lbfgs(loss_and_grad, x, rec, tol, max_iter) -> np.ndarray:
    last: dict[str, object] = {}

    def fun(z):
        loss, grad = loss_and_grad(z)
        last.update(x=z.copy(), loss=loss, grad=grad)
        return loss, grad

    def on_iteration(intermediate_result):
        z = intermediate_result.x
        if "x" in last and np.array_equal(last["x"], z):
            loss, grad = last["loss"], last["grad"]
        else:
            loss, grad = fun(z)
        stop = rec.record(z, loss, grad)
        if stop or np.linalg.norm(grad) <= tol or rec.step >= max_iter:
            raise StopIteration

    remaining = max_iter - rec.step
    if remaining <= 0:
        return x
    res = scipy.optimize.minimize(
        fun, x, jac=True, method="L-BFGS-B", callback=on_iteration,
        options={"maxiter": remaining, "gtol": 0.0, "ftol": LBFGS_FTOL, "maxcor": 20},
    )
    return np.asarray(res.x, dtype=float)
