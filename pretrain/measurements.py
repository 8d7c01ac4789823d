"""Single-shot measurements between known states: Helstrom (two classes) and the
pretty-good measurement (more), their success probabilities, and the prior check.

Helstrom, "Quantum Detection and Estimation Theory" (1976): for states sigma_0, sigma_1 with
priors p_0 + p_1 = 1, ``M_1`` projects onto the positive eigenspace of
``Gamma = p_1 sigma_1 - p_0 sigma_0`` (half of its null space added, so ``Gamma = 0`` gives
1/2 each), ``M_0 = I - M_1``; success ``P* = (1 + ||Gamma||_1)/2``, the best of any
measurement. Hausladen & Wootters, "A 'pretty good' measurement for distinguishing quantum
states" (1994): ``M_c = R p_c sigma_c R``, ``R = rho_bar^{-1/2}`` on the support of
``rho_bar = sum_c p_c sigma_c``, the complement spread evenly so ``sum_c M_c = I``.
"""

from __future__ import annotations

import numpy as np

from .checks import real_number
from .data import check_density_matrix
from .errors import ThermoseedError
from .linalg import eigh

#: Eigenvalues of rho_bar below SUPPORT_RTOL times the largest lie outside its support.
SUPPORT_RTOL = 1e-10
#: Eigenvalues of Gamma with |lambda| <= ZERO_RTOL * max|lambda| count as zero.
ZERO_RTOL = 1e-12
#: Largest |sum(priors) - 1| accepted for explicit priors.
PRIOR_ATOL = 1e-8
#: Wrong-trace advice where no renormalize option exists.
TRACE_HINT = "divide it by its trace first"


def prior_vector(priors, n_classes: int) -> np.ndarray:
    """Explicit class priors: ``n_classes`` positive finite numbers summing to 1."""
    p = np.asarray(priors, dtype=float)
    if p.shape != (n_classes,) or not np.all(np.isfinite(p)) or np.any(p <= 0):
        raise ThermoseedError(f"priors {np.asarray(priors).tolist()} must be {n_classes} "
                              "positive numbers (one per class)")
    if abs(p.sum() - 1.0) > PRIOR_ATOL:
        raise ThermoseedError(f"priors sum to {p.sum():.12g}, not 1; divide them by their sum")
    return p / p.sum()


def _state_stack(states, what: str) -> np.ndarray:
    try:
        arr = np.asarray(states)
    except ValueError as err:  # ragged: matrices of different sizes
        raise ThermoseedError(f"the {what}s have different shapes; give every one as d x d") \
            from err
    if arr.ndim != 3 or arr.shape[0] < 2:
        raise ThermoseedError(f"{what}s must be a (C, d, d) stack of C >= 2 density matrices, "
                              f"got shape {arr.shape}")
    return np.stack([check_density_matrix(m, what=f"{what} {c}", trace_hint=TRACE_HINT)
                     for c, m in enumerate(arr)])


def _check_p0(p0: float) -> float:
    value = real_number(p0, "p0")
    if not 0.0 <= value <= 1.0:
        raise ThermoseedError(f"p0 = {p0!r} must be a probability in [0, 1]")
    return value


def helstrom_measurement(sigma_0, sigma_1, p0: float = 0.5) -> np.ndarray:
    """(2, d, d) POVM: ``M_1 = Pi_+(Gamma) + Pi_0(Gamma)/2``, ``M_0 = I - M_1``,
    ``Gamma = (1 - p0) sigma_1 - p0 sigma_0``."""
    s = _state_stack([sigma_0, sigma_1], "state")
    p0 = _check_p0(p0)
    vals, vecs = eigh((1.0 - p0) * s[1] - p0 * s[0])
    zero = np.abs(vals) <= ZERO_RTOL * max(np.abs(vals).max(), np.finfo(float).tiny)
    weight = np.where(zero, 0.5, (vals > 0).astype(float))
    m1 = (vecs * weight) @ vecs.conj().T
    return np.stack([np.eye(len(vals)) - m1, m1])


def helstrom_success(sigma_0, sigma_1, p0: float = 0.5) -> float:
    """Optimal one-copy success ``(1 + ||(1 - p0) sigma_1 - p0 sigma_0||_1) / 2``."""
    s = _state_stack([sigma_0, sigma_1], "state")
    p0 = _check_p0(p0)
    gamma = (1.0 - p0) * s[1] - p0 * s[0]
    return float(0.5 * (1.0 + np.abs(np.linalg.eigvalsh(gamma)).sum()))


def pretty_good_measurement(states, priors=None) -> np.ndarray:
    """(C, d, d) POVM ``M_c = rho_bar^{-1/2} p_c sigma_c rho_bar^{-1/2} + Pi_0 / C`` (module
    docstring); ``priors`` default 1/C."""
    s = _state_stack(states, "state")
    p = np.full(len(s), 1.0 / len(s)) if priors is None else prior_vector(priors, len(s))
    weighted = p[:, None, None] * s
    vals, vecs = eigh(weighted.sum(axis=0))
    keep = vals > SUPPORT_RTOL * vals.max()
    root = vecs[:, keep] / np.sqrt(vals[keep])  # columns V_k / sqrt(lambda_k)
    inner = np.einsum("ai,cab,bj->cij", root.conj(), weighted, root)
    povm = np.einsum("ai,cij,bj->cab", vecs[:, keep], inner, vecs[:, keep].conj())
    null = vecs[:, ~keep]
    povm += (null @ null.conj().T)[None] / len(s)
    return 0.5 * (povm + povm.conj().transpose(0, 2, 1))


def success_probability(povm, states, priors=None) -> float:
    """``P = sum_c p_c Tr(M_c sigma_c)`` for a POVM and states (priors default 1/C)."""
    s = _state_stack(states, "state")
    m = np.asarray(povm)
    if m.shape != s.shape:
        raise ThermoseedError(f"POVM has shape {m.shape} but the states {s.shape}")
    p = np.full(len(s), 1.0 / len(s)) if priors is None else prior_vector(priors, len(s))
    return float(p @ np.einsum("cab,cba->c", m, s).real)


def single_shot(states, priors) -> tuple[np.ndarray, float]:
    """(POVM, success): Helstrom for two states, the pretty-good measurement for more."""
    if len(states) == 2:
        return (helstrom_measurement(states[0], states[1], priors[0]),
                helstrom_success(states[0], states[1], priors[0]))
    povm = pretty_good_measurement(states, priors)
    return povm, success_probability(povm, states, priors)
