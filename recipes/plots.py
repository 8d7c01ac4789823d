"""Convergence plots: the fit's loss and gradient norm per iteration, the compile's objective
per iteration (PNG files, written atomically; matplotlib's ``Figure``, no pyplot).

Fit: ``VisibleGibbsModel.history_`` = ``{"loss": [...], "grad_norm": [...]}``; the loss is
``S(rho||sigma)`` for states (cross entropy ``theta.m + log Z`` for moment data), the gradient
norm ``|grad|`` includes the L2 penalty. Compile: ``CompileResult.history``, the objective of
the best restart per iteration on a log axis, with the report's floor (the smallest value the
latent truncation allows, ``-log`` of the captured weight) as a dashed line.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from thermoseed.bridge.plateau.report import _save
from thermoseed.pretrain.errors import ThermoseedError

#: Values shown on log axes are clipped from below at this (an exact zero has no logarithm).
LOG_FLOOR = 1e-16


def _series(values, what: str) -> np.ndarray:
    arr = np.asarray(values, dtype=float).ravel()
    if arr.size == 0:
        raise ThermoseedError(f"{what} is empty: nothing to plot (did the stage run?)")
    return arr


def plot_fit_history(history: Mapping[str, Sequence[float]], path, *,
                     title: str = "Gibbs model fit") -> Path:
    """PNG of the fit's loss (linear axis) and ``|grad|`` (log axis) per iteration."""
    from matplotlib.figure import Figure

    if not isinstance(history, Mapping) or not {"loss", "grad_norm"} <= set(history):
        raise ThermoseedError("a fit history is a dict with 'loss' and 'grad_norm' lists "
                              "(VisibleGibbsModel.history_); fit the model first")
    loss = _series(history["loss"], "the fit history's loss")
    grad = _series(history["grad_norm"], "the fit history's grad_norm")
    fig = Figure(figsize=(7.0, 4.2), layout="constrained")
    top, bottom = fig.subplots(2, 1, sharex=True)
    top.plot(np.arange(loss.size), loss, marker=".", color="#1f77b4")
    top.set_ylabel("loss with L2 penalty (nats)")
    top.set_title(title)
    bottom.plot(np.arange(grad.size), np.maximum(grad, LOG_FLOOR), marker=".", color="#d62728")
    bottom.set_yscale("log")
    bottom.set_ylabel("|grad| (log axis)")
    bottom.set_xlabel("iteration")
    for ax in (top, bottom):
        ax.grid(alpha=0.3)
    return _save(fig, path)


def plot_compile_history(history: Sequence[float], path, *, floor: float = 0.0,
                         title: str = "Compile") -> Path:
    """PNG of the compile objective per iteration (log axis) and its ``floor`` (dashed)."""
    from matplotlib.figure import Figure

    values = _series(history, "the compile history")
    if not np.isfinite(floor):
        raise ThermoseedError(f"floor = {floor!r} must be a finite number")
    fig = Figure(figsize=(7.0, 3.4), layout="constrained")
    ax = fig.subplots()
    ax.plot(np.arange(values.size), np.maximum(values, LOG_FLOOR), marker=".", color="#2ca02c",
            label="objective")
    if floor > LOG_FLOOR:
        ax.axhline(floor, color="black", linestyle="--", linewidth=1, label="floor")
    ax.set_yscale("log")
    ax.set_xlabel("iteration (best restart)")
    ax.set_ylabel("objective (nats, log axis)")
    ax.legend(fontsize=8)
    ax.set_title(title)
    ax.grid(alpha=0.3)
    return _save(fig, path)
