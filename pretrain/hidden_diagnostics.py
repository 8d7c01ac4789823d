"""Diagnostics of hidden-qubit Gibbs models: wash-out by entanglement, fit quality.

**Wash-out.** Take the ``top`` most probable eigenvectors |psi_a> of H (weights
``p_a = e^{-E_a}/Z``). For each, the Schmidt coefficients across the visible/hidden cut give

- the entanglement entropy ``S_a = -sum_i s_i^2 log s_i^2`` (nats), and
- the trace distance of its visible reduced state from the maximally mixed one,
  ``T_a = (1/2) sum_i |s_i^2 - 1/d|`` over d visible eigenvalues (zeros padded).

Beside them stands Page's mean entanglement entropy of a random pure state on C^m (x) C^n,
``m <= n`` (Page, "Average entropy of a subsystem", Phys. Rev. Lett. 71, 1291, 1993; proved by
Sen, 1996):

    S_Page(m, n) = sum_{k=n+1}^{mn} 1/k - (m - 1)/(2n) = psi(mn + 1) - psi(n + 1) - (m-1)/(2n),

psi the digamma function. **Threshold:** the model counts as washed out when the
weight-averaged entropy of the top eigenvectors reaches ``WASHOUT_FRACTION`` (0.9) of Page's
value: its heavy eigenvectors are then nearly as entangled as random states, their visible
reduced states sit close to maximally mixed, and tracing out the hidden qubits leaves little
of H's structure in sigma_v. ``WashoutWarning`` is emitted there.

For commuting-hidden models (block engine) the eigenvectors are ``|u_{h,a}> (x) |h>``: the
report builds them, checks numerically that each satisfies ``H psi = E psi`` (matrix-free
residual) and that its Schmidt rank is one (``product_states``), rather than assuming it.

**Fit report.** Relative entropy, Uhlmann fidelity and trace distance of sigma_v to the data,
and the moment residuals ``m_j - <P_j>_sigma`` of the visible-only terms (NaN for terms that
touch hidden wires: the data have no moment for them).
"""

from __future__ import annotations

import warnings
from typing import NamedTuple

import numpy as np
import scipy.special

from .checks import integer_in
from .data import as_training_data, square_array_kind
from .diagnostics import fidelity, relative_entropy, trace_distance
from .errors import ThermoseedError, WashoutWarning
from .hidden_engines import BlockHiddenEngine
from .hidden_layout import visible_only_terms
from .linalg import entropy_of_spectrum, log_sum_exp_neg
from .paulis import apply_hamiltonian, expectations

#: Weighted top-eigenvector entropy at or above this fraction of Page's value = washed out.
WASHOUT_FRACTION = 0.9
#: Number of most probable eigenvectors examined by default.
DEFAULT_TOP = 8
#: Schmidt entropy (nats) below which a vector counts as a product state, and the largest
#: relative eigen-equation residual accepted for the block eigenvectors.
PRODUCT_ATOL = 1e-9


def page_entropy(dim_a: int, dim_b: int) -> float:
    """Page's mean entanglement entropy (nats) of a Haar-random pure state on C^a (x) C^b:
    ``psi(mn+1) - psi(n+1) - (m-1)/(2n)`` with ``m = min, n = max`` of the dimensions."""
    m, n = sorted((integer_in(dim_a, "dim_a", 1), integer_in(dim_b, "dim_b", 1)))
    return float(scipy.special.digamma(m * n + 1) - scipy.special.digamma(n + 1)
                 - (m - 1) / (2 * n))


class WashoutReport(NamedTuple):
    """Entanglement of the most probable eigenvectors of H across the visible/hidden cut.

    Attributes: ``weights`` (Gibbs weights p_a), ``energies``, ``entropies`` (S_a, nats),
    ``trace_distances`` (T_a), ``page_entropy`` (S_Page for d and d_h), ``mean_entropy``
    (weight-averaged S_a), ``page_ratio`` (mean_entropy / page_entropy, NaN without hidden
    qubits), ``max_entropy`` (log min(d, d_h)), ``product_states`` (commuting-hidden models:
    every vector numerically a product eigenvector; else None), ``residual`` (largest
    relative eigen-equation residual of the block eigenvectors; else None), ``washed_out``.
    """

    weights: np.ndarray
    energies: np.ndarray
    entropies: np.ndarray
    trace_distances: np.ndarray
    page_entropy: float
    mean_entropy: float
    page_ratio: float
    max_entropy: float
    product_states: bool | None
    residual: float | None
    washed_out: bool


def _schmidt(vector: np.ndarray, dim: int) -> tuple[float, float]:
    """``(S, T)`` of one pure state on (visible dim) x (hidden dim) from its singular values."""
    probs = np.linalg.svd(vector.reshape(dim, -1), compute_uv=False) ** 2
    probs = probs / probs.sum()
    padded = np.zeros(dim)
    padded[: min(dim, probs.size)] = probs[:dim]
    return entropy_of_spectrum(probs), 0.5 * float(np.abs(padded - 1.0 / dim).sum())


def _block_vectors(model, engine: BlockHiddenEngine, top: int):
    lam, vecs, energy = engine.eigensystem(model.coef_)
    total = lam + energy[:, None]
    order = np.argsort(total, axis=None)[:top]
    blocks, levels = np.unravel_index(order, total.shape)
    dim_h = total.shape[0]
    out = np.zeros((vecs.shape[1] * dim_h, len(order)), dtype=vecs.dtype)
    for col, (h, a) in enumerate(zip(blocks, levels, strict=True)):
        out[:, col] = np.kron(vecs[h][:, a], np.eye(dim_h)[h])  # |u_{h,a}> (x) |h>
    log_z = log_sum_exp_neg(total.ravel())[0]
    return total.ravel()[order], out, log_z


def washout_report(model, *, top: int = DEFAULT_TOP, warn: bool = True) -> WashoutReport:
    """Entanglement of the ``top`` most probable eigenvectors of a fitted (or
    ``from_coefficients``) ``HiddenGibbsModel``; warns (``WashoutWarning``) when washed out."""
    top = integer_in(top, "top", 1)
    engine = model._engine_for_queries()
    dim, dim_h = 2**model.n_visible_, 2**model.n_hidden_
    block = isinstance(engine, BlockHiddenEngine)
    if block:
        energies, vectors, log_z = _block_vectors(model, engine, top)
        applied = apply_hamiltonian(model.coef_, model.terms_, vectors)
        scale = max(1.0, float(np.abs(energies).max()))
        residual = float(np.abs(applied - vectors * energies).max()) / scale
    else:
        all_energies, all_vectors = engine.eigensystem(model.coef_)
        log_z = log_sum_exp_neg(all_energies)[0]
        energies, vectors = all_energies[:top], all_vectors[:, :top]
        residual = None
    weights = np.exp(-energies - log_z)
    pairs = [_schmidt(vectors[:, a], dim) for a in range(vectors.shape[1])]
    entropies = np.array([s for s, _ in pairs])
    distances = np.array([t for _, t in pairs])
    mean_entropy = float(weights @ entropies / weights.sum())
    page = page_entropy(dim, dim_h)
    ratio = mean_entropy / page if page > 0 else float("nan")
    washed = bool(page > 0 and mean_entropy >= WASHOUT_FRACTION * page)
    product = bool(entropies.max() < PRODUCT_ATOL and residual < PRODUCT_ATOL) if block else None
    if washed and warn:
        warnings.warn(
            f"the {len(entropies)} most probable eigenvectors of H carry entanglement entropy "
            f"{mean_entropy:.3g} nats across the visible/hidden cut, {ratio:.0%} of a random "
            f"state's (Page: {page:.3g}): the hidden qubits wash the visible state out; use "
            "fewer or commuting (Z-coupled) hidden qubits, or a larger l2",
            WashoutWarning, stacklevel=2)
    return WashoutReport(weights, energies, entropies, distances, page, mean_entropy, ratio,
                         float(np.log(min(dim, dim_h))), product, residual, washed)


class HiddenFitReport(NamedTuple):
    """Distances of sigma_v to the data and per-term moment residuals (NaN: hidden terms)."""

    relative_entropy: float
    fidelity: float
    trace_distance: float
    moment_residuals: dict[str, float]


def hidden_fit_report(model, data, *, kind: str | None = None) -> HiddenFitReport:
    """Relative entropy ``S(rho||sigma_v)``, fidelity and trace distance of a fitted hidden
    model's visible state to the data, and ``m_j - <P_j>_sigma`` per term label."""
    td = as_training_data(data, kind=square_array_kind(data) if kind is None else kind)
    if td.n_qubits != model.n_visible_:
        raise ThermoseedError(
            f"data have {td.n_qubits} qubits but the model has {model.n_visible_} visible "
            "qubits; pass data on the visible register"
        )
    sigma = model.state()
    targets = np.full(len(model.terms_), np.nan)
    index, parts = visible_only_terms(model.terms_, model.n_hidden_)
    if parts is not None:
        targets[index] = expectations(td.rho, parts)
    residuals = targets - model.moments()
    return HiddenFitReport(
        relative_entropy(td.rho, sigma), fidelity(td.rho, sigma), trace_distance(td.rho, sigma),
        dict(zip(model.terms_.labels, residuals.tolist(), strict=True)))
