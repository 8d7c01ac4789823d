"""Moment estimates with error bars from measurement shots (classical shadows, counts).

**Random Pauli bases.** Shot s measured wire i in basis ``B_si`` in {X, Y, Z} (chosen uniformly
at random) and saw bit ``o_si`` (0 = eigenvalue +1). For a Pauli string P with support S,
``w = |S|``, the snapshot value is

    X_s(P) = 3^w * prod_{i in S} [B_si = P_i] (-1)^{o_si},

the Pauli expectation in the classical shadow ``(x)_i (3 U_i^dag |o_i><o_i| U_i - I)``: unbiased,
``E X_s(P) = Tr(rho P)``, with ``E X_s(P)^2 = 3^w`` (so ``Var <= 3^w``) and, for two strings,
``E X_s(P) X_s(Q) = 3^{|S_P & S_Q|} Tr(rho P Q)`` when they agree letter by letter where both
act, else 0 (Huang, Kueng & Preskill, "Predicting many properties of a quantum system from
very few measurements", Nature Physics 16, 1050 (2020)).

**Computational-basis counts** estimate strings of Z and I only: ``X_s(P) = (-1)^{|z & b_s|}``.

**Estimate and errors.** With ``groups = K = 1`` (default) the estimate is the mean over the S
shots, ``m_j = mean_s X_s(P_j)``, and ``Cov(m) = Cov_s(X(P_j), X(P_k)) / S`` (sample
covariance): unbiased and the smallest variance, which is what a fit wants. ``K > 1`` (odd)
gives the median of means of HKP: the shots in record order are cut into K contiguous batches
of ``ceil(S/K)`` shots (PennyLane's ``qml.shadows.median_of_means`` convention) and the median
batch mean is reported. Its failure probability falls exponentially in K, at the price of a
variance ``c_K Var(X)/S`` with ``c_K = K Var(median of K standard normals)`` (1 at K = 1,
pi/2 as K grows; computed by quadrature of the median's order-statistic density) and a bias
of order ``skew * sqrt(K/S)`` for skewed snapshot values; the off-diagonal covariance is
scaled by the same ``c_K`` (an approximation).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.integrate
import scipy.special
import scipy.stats

from .checks import integer_in
from .errors import ThermoseedError
from .paulis import TermSet, popcount

MISSING_MODES = ("error", "warn")
#: Standard error given to a moment no shot measured (``missing="warn"``): any moment of a
#: Pauli string lies in [-1, 1], so the estimate 0 is off by at most 1.
UNMEASURED_STDERR = 1.0
#: Allowed bias of the basis frequencies from 1/3 beyond sampling noise (device imperfection).
BASIS_SLACK = 0.02
#: Shots handled per pass (bounds the (shots, terms) value table in memory).
SHOT_CHUNK = 1 << 16


class UnmeasuredTermWarning(UserWarning):
    """A term's support was never measured in its own bases: its moment is unknown."""


class BasisBiasWarning(UserWarning):
    """The recorded bases are not uniform over X, Y, Z: the shadow estimator is biased."""


def _check_uniform_bases(basis_x: np.ndarray, basis_z: np.ndarray, n_qubits: int) -> None:
    """Warn when some wire's letter frequencies sit further from 1/3 than
    ``5 sqrt(2/9/S) + BASIS_SLACK`` (5 binomial standard deviations plus a small slack)."""
    s = basis_x.size
    limit = 5.0 * np.sqrt(2.0 / 9.0 / s) + BASIS_SLACK
    for wire in range(n_qubits):
        bit = np.int64(1) << (n_qubits - 1 - wire)
        x, z = (basis_x & bit) != 0, (basis_z & bit) != 0
        freq = np.array([np.mean(x & ~z), np.mean(x & z), np.mean(~x & z)])
        if np.abs(freq - 1.0 / 3.0).max() > limit:
            warnings.warn(
                f"wire {wire} was measured in X, Y, Z with frequencies "
                f"{np.round(freq, 3).tolist()}, not 1/3 each: the classical-shadow estimator "
                "assumes uniformly random bases and is biased otherwise",
                BasisBiasWarning, stacklevel=4)
            return


@dataclass(frozen=True)
class MomentEstimates:
    """Estimated moments ``m_j ~= Tr(rho P_j)`` of a term set with their covariance.

    Attributes:
        terms: the term set estimated.
        values: the estimates ``m_j``.
        covariance: estimated ``Cov(m)`` (terms x terms).
        n_shots: shots used.
        matched: per term, the shots whose bases matched the term on its support.
        method: ``"shadow"`` (random Pauli bases) or ``"counts"`` (computational basis).
        groups: batches in the median of means (1 = plain mean).
    """

    terms: TermSet
    values: np.ndarray
    covariance: np.ndarray
    n_shots: int
    matched: np.ndarray
    method: str
    groups: int = 1

    @property
    def n_qubits(self) -> int:
        return self.terms.n_qubits

    @property
    def stderr(self) -> np.ndarray:
        """Standard error per moment, ``sqrt(diag Cov(m))``."""
        return np.sqrt(np.clip(np.diag(self.covariance), 0.0, None))

    def zscores(self, moments: np.ndarray) -> np.ndarray:
        """``(m_j - mu_j) / SE_j``: how far ``moments`` sit from the data, in standard errors."""
        mu = np.asarray(moments, dtype=float)
        if mu.shape != self.values.shape:
            raise ThermoseedError(
                f"got {mu.shape[0] if mu.ndim else 0} moments for {len(self.terms)} terms")
        se = self.stderr
        return np.divide(self.values - mu, se, out=np.full_like(se, np.inf),
                         where=se > 0)


def median_variance_factor(groups: int) -> float:
    """``c_K = K Var(median of K iid N(0, 1))`` for odd K: the second moment of the middle
    order statistic, density ``K! / (r!)^2 Phi^r (1 - Phi)^r phi`` (``K = 2r + 1``), by
    Simpson's rule on [-12, 12] (the integrand is below 1e-30 outside)."""
    k = integer_in(groups, "groups", 1)
    if k % 2 == 0:
        raise ThermoseedError(f"groups = {k} must be odd (the median is then one batch's mean)")
    if k == 1:
        return 1.0
    r = (k - 1) // 2
    x = np.linspace(-12.0, 12.0, 4801)
    log_density = (scipy.special.gammaln(k + 1) - 2 * scipy.special.gammaln(r + 1)
                   + r * (scipy.stats.norm.logcdf(x) + scipy.stats.norm.logsf(x))
                   + scipy.stats.norm.logpdf(x))
    return float(k * scipy.integrate.simpson(x * x * np.exp(log_density), x=x))


def _term_tables(terms: TermSet):
    xs = np.array([p.x for p in terms], dtype=np.int64)
    zs = np.array([p.z for p in terms], dtype=np.int64)
    return xs, zs, xs | zs, np.array([p.weight for p in terms])


def _check_missing(missing: str) -> None:
    if missing not in MISSING_MODES:
        raise ThermoseedError(f"missing = {missing!r}; choose one of {MISSING_MODES}")


def _handle_unmeasured(terms: TermSet, matched: np.ndarray, missing: str, why: str):
    never = np.flatnonzero(matched == 0)
    if never.size == 0:
        return never
    names = ", ".join(terms.labels[j] for j in never[:5]) + (" ..." if never.size > 5 else "")
    message = (f"{never.size} term(s) were never measured {why}: {names}; record more shots "
               "(or drop these terms)")
    if missing == "error":
        raise ThermoseedError(message + ", or pass missing='warn' to give them moment 0 "
                                        f"with standard error {UNMEASURED_STDERR:g}")
    warnings.warn(message + f"; their moments are set to 0 +- {UNMEASURED_STDERR:g}",
                  UnmeasuredTermWarning, stacklevel=3)
    return never


def shadow_estimates(basis_x: np.ndarray, basis_z: np.ndarray, outcomes: np.ndarray,
                     terms: TermSet, *, groups: int = 1, missing: str = "error"
                     ) -> MomentEstimates:
    """Classical-shadow estimates of every term from per-shot bit masks.

    ``basis_x``/``basis_z`` (S,) hold each shot's bases as Pauli masks (X = x bit, Y = both,
    Z = z bit; wire 0 = most significant bit), ``outcomes`` (S,) the outcome bits in the
    same layout. Estimator and errors: module docstring.
    """
    _check_missing(missing)
    _check_uniform_bases(basis_x, basis_z, terms.n_qubits)
    k = integer_in(groups, "groups", 1)
    c_k = median_variance_factor(k)
    s = basis_x.size
    batch = -(-s // k)
    if k > 1 and batch * (k - 1) >= s:
        raise ThermoseedError(f"groups = {k} leaves an empty batch for {s} shots; use fewer "
                              "groups (at most the number of shots, e.g. 2 log(2M/delta))")
    xs, zs, support, weight = _term_tables(terms)
    scale = 3.0 ** weight
    m = len(terms)
    total = np.zeros(m)
    cross = np.zeros((m, m))
    matched = np.zeros(m, dtype=np.int64)
    batch_sums = np.zeros((k, m))
    for start in range(0, s, SHOT_CHUNK):
        sl = slice(start, min(start + SHOT_CHUNK, s))
        bx, bz, out = basis_x[sl, None], basis_z[sl, None], outcomes[sl, None]
        hit = ((bx & support) == xs) & ((bz & support) == zs)
        sign = 1.0 - 2.0 * (popcount(out & support) & 1)
        values = np.where(hit, sign * scale, 0.0)
        matched += hit.sum(axis=0)
        total += values.sum(axis=0)
        cross += values.T @ values
        if k > 1:
            ids, first = np.unique(np.arange(sl.start, sl.stop) // batch, return_index=True)
            batch_sums[ids] += np.add.reduceat(values, first, axis=0)
    mean = total / s
    cov = (cross - s * np.outer(mean, mean)) / (s - 1) / s if s > 1 else np.zeros((m, m))
    if k > 1:
        sizes = np.bincount(np.arange(s) // batch, minlength=k)[:, None]
        estimate = np.median(batch_sums / sizes, axis=0)
        cov = c_k * cov
    else:
        estimate = mean
    never = _handle_unmeasured(terms, matched, missing, "in their own bases")
    estimate[never] = 0.0
    cov[never, :] = 0.0
    cov[:, never] = 0.0
    cov[never, never] = UNMEASURED_STDERR**2
    return MomentEstimates(terms, estimate, cov, s, matched, "shadow", k)


def counts_estimates(states: np.ndarray, counts: np.ndarray, terms: TermSet
                     ) -> MomentEstimates:
    """Estimates of Z/I strings from computational-basis counts: ``m_j = sum_b f_b
    (-1)^{|z_j & b|}`` (f = frequencies), ``Cov(m)_jk = (<Z_j Z_k> - m_j m_k) / (S - 1)``
    with ``Z_j Z_k`` the string of mask ``z_j ^ z_k`` (sample covariance of the mean)."""
    xs, zs, _, _ = _term_tables(terms)
    off = np.flatnonzero(xs != 0)
    if off.size:
        names = ", ".join(terms.labels[j] for j in off[:5])
        raise ThermoseedError(
            f"computational-basis counts estimate only strings of Z and I; {names} act with "
            "X or Y (measure in random Pauli bases, or drop those terms)")
    s = int(counts.sum())
    freq = counts / s
    signs = 1.0 - 2.0 * (popcount(states[:, None] & zs[None, :]) & 1)
    mean = freq @ signs
    second = (signs * freq[:, None]).T @ signs
    cov = (second - np.outer(mean, mean)) / (s - 1) if s > 1 else np.zeros((len(terms),) * 2)
    return MomentEstimates(terms, mean, cov, s, np.full(len(terms), s, dtype=np.int64),
                           "counts", 1)
