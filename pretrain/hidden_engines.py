"""Loss and exact gradient of hidden-qubit Gibbs models: a dense and a block engine.

Register = visible (dim d) x hidden (dim d_h), hidden wires last. Model
``sigma_v = Tr_h exp(-H) / Z``, ``H = sum_j theta_j P_j``, ``Z = Tr exp(-H)``; loss
``L = S(rho||sigma_v) = -S(rho) - Tr(rho log sigma_v)``. The engines return the cross term
``-Tr(rho log sigma_v)``; the caller adds ``-S(rho)``.

**Adjoint gradient** (any hidden model). With ``A = Tr_h exp(-H)``, ``G = Dlog(A)[rho]``,
``K = Dexp(-H)[G (x) I_h]`` (Fréchet derivatives, ``frechet.py``):

    dL/dtheta_j = Tr(K P_j) - <P_j>_sigma = Tr((K - sigma) P_j).

(``dA = -Tr_h Dexp(-H)[P_j]``; the self-adjointness of Dlog and Dexp moves both onto the
fixed operators G and G (x) I.) Scale invariance: evaluating at ``A/Z = sigma_v`` multiplies
G by Z while ``Dexp(-H - log Z)`` divides by it, so K is the same; the engines use the
normalised ``sigma_v`` and ``x = -E - log Z`` (all ``e^x <= 1``). With no hidden qubits
``K = Dexp(log A)[Dlog(A)[rho]] = rho`` (chain rule) and the gradient is ``m - <P>_sigma``.
In the eigenbasis ``H = U diag(E) U^dag``: ``K - sigma = U (Gamma o U^dag (G (x) I) U -
diag(p)) U^dag`` with Gamma the exp divided differences at x: one full-register ``eigh``,
three full-register products (``U^dag [(G (x) I) U]``, ``U X``, ``(U X) U^dag``; ``(G (x) I) U``
is d_h times cheaper) and O(D) traces per x-mask group, whatever the number of terms.
(Traces taken from the factors ``U X`` and ``U`` without the last product measured slower at
d = 256 in the block engine: numpy's elementwise reductions lose to one BLAS product.) Real
term sets (even Y count) use ``Re rho``: the loss depends on rho only through it, so every
array stays real.

**Block engine** (every term diagonal on the hidden wires, ``hidden_layout.block_structure``):
``H = sum_h H_v(h) (x) |h><h|``, ``H_v(h) = H'_v(h) + E(h)``, so
``A = sum_h e^{-E(h)} exp(-H'_v(h))``: ``d_h`` eigendecompositions of size d, never the
d*d_h matrix. ``K`` is block diagonal with ``K_h = Dexp(-H_v(h))[G]``, hence

    dL/dtheta_j = sum_h s_j(h) Tr((K_h - sigma_h) P_j^v),   sigma_h = e^{-H_v(h)} / Z,

which covers visible coefficients (s = 1), couplings (s = s_k(h)), hidden biases and
hidden-hidden ZZ (``P^v = I``: ``Tr(K_h) = Tr(G e^{-H_v(h)}) / Z``).
Cost per block: one ``eigh`` (about 60% of the time at d = 256), five d x d products
(``sigma_v`` as one ``W W^dag`` per chunk, ``U^dag (G U)``, ``(U X) U^dag``) and O(d^2)
elementwise work: the blocks are built by one scatter per x-mask group for a whole chunk
(``stacked_hamiltonians``) and Gamma by a direct quotient of the weights already at hand
(``stacked_exp_divided_differences``; the expm1 form only on near ties). ``workers`` threads
share one pool per query and take whole chunks (eigh, products and traces release the GIL);
run them with one BLAS thread each.

**Bound** (block engine, device-estimable). Operator concavity of log gives
``S(rho||sigma_v) <= -S(rho) + log Z - log sum_h exp(-F(h))``, ``F(h) = E(h) +
Tr(rho H'_v(h))``, with gradient ``sum_h alpha_h dF(h)/dtheta_j - <P_j>_sigma``,
``alpha = softmax(-F)``, ``dF(h)/dtheta_j = s_j(h) Tr(rho P_j^v)``: data moments and Gibbs
expectation values only.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from typing import NamedTuple

import numpy as np
import scipy.special

from .checks import integer_in
from .errors import ThermoseedError
from .frechet import exp_divided_differences, log_divided_differences
from .hidden_layout import block_structure, split_register
from .linalg import WEIGHT_CUTOFF, eigh, log_sum_exp_neg
from .paulis import TermSet, check_coefficients, dense_hamiltonian, expectations

#: Largest full register the dense hidden engine accepts (2^12 x 2^12 complex arrays).
MAX_DENSE_QUBITS = 12
#: Largest visible register of the block engine; its stored block eigenvectors
#: (d_h * d^2 numbers) must also fit in MAX_BLOCK_BYTES.
MAX_BLOCK_VISIBLE = 12
MAX_BLOCK_BYTES = 2**31
#: Blocks are processed in chunks of about this many matrix entries: bounds the temporaries,
#: and chunks that stay in cache measured ~7% less CPU time at d = 256 (2^18 vs 2^21).
CHUNK_ENTRIES = 2**18
#: Visible registers below this dimension run their blocks serially whatever ``workers``.
MIN_THREAD_DIM = 64
#: Spectral gaps below this use the expm1 form of the exp divided differences (the direct
#: quotient loses ~eps / gap relative accuracy).
TIE_GAP = 1e-2
#: Eigenvalues of sigma_v are floored here before the logarithm (a Gibbs marginal is full
#: rank; only underflow can bring one to zero).
LOG_FLOOR = np.finfo(float).tiny


class HiddenEvaluation(NamedTuple):
    """One evaluation of a hidden model against data rho.

    Attributes:
        log_z: ``log Tr exp(-H)``.
        cross_entropy: ``-Tr(rho log sigma_v)``; the loss is ``-S(rho) + cross_entropy``.
        gradient: ``dL/dtheta`` (None when not requested).
        state: the visible reduced state ``sigma_v``.
    """

    log_z: float
    cross_entropy: float
    gradient: np.ndarray | None
    state: np.ndarray


def stacked_traces(stack: np.ndarray, terms: TermSet) -> np.ndarray:
    """``Tr(A_i P_j)`` for a stack ``(n, dim, dim)`` of matrices: ``paulis.pauli_traces``
    (``sum_b A[b, b^x] i^{|x&z|} (-1)^{|z&b|}``) with the gather done once per x-mask group
    for the whole stack. Complex ``(n, n_terms)``."""
    idx = np.arange(terms.dim)
    out = np.zeros((stack.shape[0], len(terms)), dtype=complex)
    for g in terms.groups:
        out[:, g.index] = (stack[:, idx, idx ^ g.x] @ g.signs.T) * g.phase
    return out


def stacked_hamiltonians(coef: np.ndarray, terms: TermSet) -> np.ndarray:
    """``H_i = sum_j coef[j, i] P_j`` for every column i of ``coef`` (``(n_terms, n)``), as an
    ``(n, dim, dim)`` stack: ``paulis.dense_hamiltonian`` with the entries
    ``H_i[b^x, b] = sum_{j in group x} coef[j, i] i^{|x&z_j|} (-1)^{|z_j&b|}`` scattered once per
    x-mask group for the whole stack (real when ``terms.is_real``)."""
    idx = np.arange(terms.dim)
    n = coef.shape[1]
    out = np.zeros((n, terms.dim, terms.dim), dtype=float if terms.is_real else complex)
    for g in terms.groups:
        values = (coef[g.index].T * g.phase) @ g.signs  # (n, dim)
        out[:, idx ^ g.x, idx] += values.real if terms.is_real else values
    return out


def stacked_exp_divided_differences(x: np.ndarray, p: np.ndarray) -> np.ndarray:
    """``Gamma[i, a, b] = (e^{x_ia} - e^{x_ib}) / (x_ia - x_ib)`` (``e^{x_ia}`` on ties) for a
    stack of spectra ``x`` (``(n, dim)``, each row sorted as ``eigh`` returns it) with
    ``p = e^x`` given. The direct quotient (no transcendental per entry; relative error
    ~eps / gap) is replaced by the expm1 form of ``frechet.exp_divided_differences``,
    ``e^hi (-expm1(-gap)) / gap``, on the pairs closer than ``TIE_GAP``: in sorted rows they
    lie on the first few diagonals, which are visited until one has no such pair."""
    n, dim = x.shape
    delta = np.subtract(x[:, :, None], x[:, None, :])
    gamma = np.subtract(p[:, :, None], p[:, None, :])
    diag = np.arange(dim)
    delta[:, diag, diag] = 1.0
    with np.errstate(divide="ignore", invalid="ignore"):  # exact ties: replaced below
        gamma /= delta
    gamma[:, diag, diag] = p
    for k in range(1, dim):
        gap = np.abs(x[:, k:] - x[:, :-k])
        i, a = np.nonzero(gap < TIE_GAP)
        if i.size == 0:
            break
        g = gap[i, a]
        ratio = np.ones_like(g)
        np.divide(-np.expm1(-g), g, out=ratio, where=g > 0)
        value = np.exp(np.maximum(x[i, a], x[i, a + k])) * ratio
        gamma[i, a, a + k] = value
        gamma[i, a + k, a] = value
    return gamma


def _check_rho(rho: np.ndarray, dim: int, real: bool) -> np.ndarray:
    r = np.asarray(rho)
    if r.shape != (dim, dim):
        raise ThermoseedError(
            f"data density matrix has shape {r.shape} but the visible register needs "
            f"{(dim, dim)}; give data on the visible qubits only"
        )
    return r.real if real else r


def log_adjoint(sigma_v: np.ndarray, rho: np.ndarray) -> tuple[float, np.ndarray]:
    """``(-Tr(rho log sigma_v), G = Dlog(sigma_v)[rho])`` from one ``eigh`` of sigma_v."""
    mu, vecs = eigh(sigma_v)
    mu = np.maximum(mu, LOG_FLOOR)
    inner = vecs.conj().T @ rho @ vecs
    cross = -float(np.real(np.diagonal(inner)) @ np.log(mu))
    g = vecs @ (log_divided_differences(mu) * inner) @ vecs.conj().T
    return cross, g


class DenseHiddenEngine:
    """Any hidden model, by full-register diagonalisation (up to MAX_DENSE_QUBITS wires)."""

    def __init__(self, terms: TermSet, n_hidden: int):
        self.n_visible, self.n_hidden = split_register(terms, n_hidden)
        if terms.n_qubits > MAX_DENSE_QUBITS:
            raise ThermoseedError(
                f"the dense hidden engine handles at most {MAX_DENSE_QUBITS} wires, got "
                f"{terms.n_qubits}; use a commuting-hidden term set (block engine) or fewer "
                "hidden qubits"
            )
        self.terms = terms

    def eigensystem(self, theta) -> tuple[np.ndarray, np.ndarray]:
        """Eigenvalues (ascending) and eigenvectors of the full-register H(theta)."""
        return eigh(dense_hamiltonian(theta, self.terms))

    def _reduced(self, vectors, probs) -> tuple[np.ndarray, np.ndarray]:
        """``(sigma_v, W)``: ``W = U sqrt(p)`` (weights above the cutoff), ``sigma = W W^dag``
        and ``sigma_v[a, b] = sum_{h, k} W[(a, h), k] conj(W[(b, h), k])``."""
        keep = probs > WEIGHT_CUTOFF * probs.max()
        w = vectors[:, keep] * np.sqrt(probs[keep])
        flat = w.reshape(2**self.n_visible, -1)  # rows (v, h) -> v, columns (h, k)
        return flat @ flat.conj().T, w

    def reduced_state(self, theta) -> np.ndarray:
        """``sigma_v = Tr_h exp(-H)/Z``."""
        energies, vectors = self.eigensystem(theta)
        return self._reduced(vectors, log_sum_exp_neg(energies)[1])[0]

    def moments(self, theta) -> np.ndarray:
        """Full-register model moments ``<P_j>_sigma``."""
        energies, vectors = self.eigensystem(theta)
        w = self._reduced(vectors, log_sum_exp_neg(energies)[1])[1]
        return expectations(w @ w.conj().T, self.terms)

    def _parts(self, theta, rho):
        rho = _check_rho(rho, 2**self.n_visible, self.terms.is_real)
        energies, vectors = self.eigensystem(theta)
        log_z, probs = log_sum_exp_neg(energies)
        sigma_v = self._reduced(vectors, probs)[0]
        cross, g = log_adjoint(sigma_v, rho)
        return energies, vectors, log_z, probs, sigma_v, cross, g

    def evaluate(self, theta, rho, *, gradient: bool = True) -> HiddenEvaluation:
        """Cross entropy, gradient (adjoint formula) and sigma_v at theta."""
        energies, vectors, log_z, probs, sigma_v, cross, g = self._parts(theta, rho)
        grad = None
        if gradient:
            x = self._inner(vectors, energies, log_z, probs, g)
            grad = expectations((vectors @ x) @ vectors.conj().T, self.terms)
        return HiddenEvaluation(log_z, cross, grad, sigma_v)

    def _inner(self, vectors, energies, log_z, probs, g) -> np.ndarray:
        """``X = Gamma o (U^dag (G (x) I) U) - diag(p)`` so that ``K - sigma = U X U^dag``."""
        dim = vectors.shape[0]
        lifted = (g @ vectors.reshape(2**self.n_visible, -1)).reshape(dim, dim)
        x = exp_divided_differences(-energies - log_z) * (vectors.conj().T @ lifted)
        x[np.diag_indices(dim)] -= probs
        return x

    def adjoint_operator(self, theta, rho) -> np.ndarray:
        """The full-register ``K = Dexp(-H)[G (x) I]`` at the normalised scale (equals rho
        with no hidden qubits)."""
        energies, vectors, log_z, probs, _, _, g = self._parts(theta, rho)
        x = self._inner(vectors, energies, log_z, probs, g)
        x[np.diag_indices(len(probs))] += probs
        return vectors @ x @ vectors.conj().T


class BlockHiddenEngine:
    """Commuting-hidden models by ``d_h`` visible-size eigendecompositions (see module doc).

    ``workers > 1`` spreads the blocks over that many threads (LAPACK and BLAS release the
    GIL); the block eigendecompositions dominate the cost, so this scales with idle cores.
    """

    def __init__(self, terms: TermSet, n_hidden: int, *, workers: int = 1):
        self.n_visible, self.n_hidden = split_register(terms, n_hidden)
        if self.n_visible > MAX_BLOCK_VISIBLE:
            raise ThermoseedError(
                f"the block engine handles at most {MAX_BLOCK_VISIBLE} visible qubits, got "
                f"{self.n_visible}"
            )
        self.structure = block_structure(terms, self.n_hidden)
        dim, blocks = 2**self.n_visible, 2**self.n_hidden
        need = blocks * dim * dim * (8 if terms.is_real else 16)
        if need > MAX_BLOCK_BYTES:
            raise ThermoseedError(
                f"{blocks} blocks of {dim}x{dim} eigenvectors need {need / 2**30:.1f} GiB "
                f"(limit {MAX_BLOCK_BYTES / 2**30:.0f} GiB); use fewer hidden or visible qubits"
            )
        self.workers = integer_in(workers, "workers", 1)
        self.terms = terms

    # ---------------------------------------------------------------- blocks
    def block_coefficients(self, theta) -> tuple[np.ndarray, np.ndarray]:
        """``(c, E)``: visible coefficients ``c[v, h]`` of ``H'_v(h)`` and energies ``E(h)``."""
        s = self.structure
        theta = check_coefficients(theta, self.terms)
        weighted = theta[:, None] * s.signs
        vis = s.visible_index >= 0
        coef = np.zeros((0 if s.visible is None else len(s.visible), s.signs.shape[1]))
        np.add.at(coef, s.visible_index[vis], weighted[vis])
        return coef, weighted[~vis].sum(axis=0)

    def _parts(self) -> list[slice]:
        blocks, dim = 2**self.n_hidden, 2**self.n_visible
        step = max(1, min(CHUNK_ENTRIES // (dim * dim), -(-blocks // self.workers)))
        return [slice(a, min(a + step, blocks)) for a in range(0, blocks, step)]

    @contextmanager
    def _runner(self):
        """``run(fn, items) -> list``: serial, or over one pool of ``workers`` threads kept
        for a whole query (registers below ``MIN_THREAD_DIM`` stay serial: starting threads
        costs more than their blocks)."""
        if self.workers == 1 or 2**self.n_visible < MIN_THREAD_DIM:
            yield lambda fn, items: [fn(item) for item in items]
            return
        with ThreadPoolExecutor(max_workers=self.workers) as pool:
            yield lambda fn, items: list(pool.map(fn, items))

    def _solve(self, theta, run):
        """Eigendecompose every block: ``(chunks, lam, E)`` with ``chunks`` a list of
        ``(slice of h, U stack)`` kept apart (no copy of the d_h d^2 numbers).

        The stacks go through ``numpy.linalg.eigh`` (LAPACK syevd/heevd per block): at
        d = 256 it measured ~20% faster than ``linalg.eigh``'s evr driver, which wins only
        from d ~ 1024 on."""
        coef, energy = self.block_coefficients(theta)
        dim = 2**self.n_visible
        vis = self.structure.visible
        parts = self._parts()
        if vis is None:
            eye = np.eye(dim)
            stacks = [np.broadcast_to(eye, (p.stop - p.start, dim, dim)) for p in parts]
            return list(zip(parts, stacks, strict=True)), np.zeros((len(energy), dim)), energy

        def solve(part: slice):
            return np.linalg.eigh(stacked_hamiltonians(coef[:, part], vis))

        solved = run(solve, parts)
        lam = np.concatenate([vals for vals, _ in solved])
        return [(p, v) for p, (_, v) in zip(parts, solved, strict=True)], lam, energy

    def eigensystem(self, theta) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(lam, U, E)``: ``H'_v(h) = U_h diag(lam_h) U_h^dag`` for every hidden basis state h
        (arrays ``(d_h, d)``, ``(d_h, d, d)``) and the hidden energies ``E(h)``."""
        with self._runner() as run:
            chunks, lam, energy = self._solve(theta, run)
        return lam, np.concatenate([u for _, u in chunks]), energy

    def _weights(self, theta, run):
        """``(chunks, x, log Z)`` with ``x[h, a] = -lam_{h,a} - E(h) - log Z``."""
        chunks, lam, energy = self._solve(theta, run)
        x = -(lam + energy[:, None])
        log_z = float(scipy.special.logsumexp(x))
        return chunks, x - log_z, log_z

    def _signed(self, per_block: np.ndarray, identity: np.ndarray) -> np.ndarray:
        """``out_j = sum_h s_j(h) T[h, v(j)]`` with ``T[h, -1] = identity[h]``."""
        s = self.structure
        table = np.concatenate([per_block, identity[:, None]], axis=1)
        cols = np.where(s.visible_index >= 0, s.visible_index, table.shape[1] - 1)
        return np.einsum("jh,hj->j", s.signs, table[:, cols])

    @staticmethod
    def _block_states(u: np.ndarray, probs: np.ndarray) -> np.ndarray:
        """``sigma_h = U_h diag(p_h) U_h^dag`` for a stack of blocks."""
        w = u * np.sqrt(probs)[:, None, :]
        return np.matmul(w, w.conj().transpose(0, 2, 1))

    def _reduced(self, chunks, probs, run) -> np.ndarray:
        """``sum_h U_h diag(p_h) U_h^dag`` as one product per chunk: ``W W^dag`` with the
        chunk's ``U_h sqrt(p_h)`` side by side in ``W`` (d x (blocks d))."""
        def part(chunk):
            piece, u = chunk
            w = (u * np.sqrt(probs[piece])[:, None, :]).transpose(1, 0, 2).reshape(
                u.shape[1], -1)
            return w @ w.conj().T

        return sum(run(part, chunks))

    def _moments(self, chunks, probs, run) -> np.ndarray:
        vis = self.structure.visible

        def traces(chunk):
            part, u = chunk
            if vis is None:
                return np.zeros((part.stop - part.start, 0))
            return stacked_traces(self._block_states(u, probs[part]), vis).real

        per_block = np.concatenate(run(traces, chunks))
        return self._signed(per_block, probs.sum(axis=1))

    # ---------------------------------------------------------------- queries
    def reduced_state(self, theta) -> np.ndarray:
        """``sigma_v = sum_h e^{-E(h)} exp(-H'_v(h)) / Z``."""
        with self._runner() as run:
            chunks, x, _ = self._weights(theta, run)
            return self._reduced(chunks, np.exp(x), run)

    def moments(self, theta) -> np.ndarray:
        """Full-register model moments ``<P_j>_sigma = sum_h s_j(h) Tr(sigma_h P_j^v)``."""
        with self._runner() as run:
            chunks, x, _ = self._weights(theta, run)
            return self._moments(chunks, np.exp(x), run)

    def evaluate(self, theta, rho, *, gradient: bool = True) -> HiddenEvaluation:
        """Cross entropy, gradient (block adjoint formula) and sigma_v at theta."""
        rho = _check_rho(rho, 2**self.n_visible, self.terms.is_real)
        with self._runner() as run:
            chunks, x, log_z = self._weights(theta, run)
            probs = np.exp(x)
            sigma_v = self._reduced(chunks, probs, run)
            cross, g = log_adjoint(sigma_v, rho)
            if not gradient:
                return HiddenEvaluation(log_z, cross, None, sigma_v)
            done = run(lambda chunk: self._block_gradient(chunk, g, x, probs), chunks)
        grad = self._signed(np.concatenate([t for t, _ in done]),
                            np.concatenate([i for _, i in done]))
        return HiddenEvaluation(log_z, cross, grad, sigma_v)

    def _block_gradient(self, chunk, g, x, probs) -> tuple[np.ndarray, np.ndarray]:
        """Per block of the chunk: ``Tr((K_h - sigma_h) P_v)`` for the visible parts and
        ``Tr(K_h - sigma_h)``, from ``X_h = Gamma_h o (U_h^dag G U_h) - diag(p_h)``
        (``K_h - sigma_h = U_h X_h U_h^dag``): four products per block."""
        vis = self.structure.visible
        part, u = chunk
        u_dag = u.conj().transpose(0, 2, 1)
        xmat = np.matmul(u_dag, np.matmul(g, u))
        xmat *= stacked_exp_divided_differences(x[part], probs[part])
        diag = np.arange(probs.shape[1])
        xmat[:, diag, diag] -= probs[part]
        identity = np.einsum("hkk->h", xmat).real
        if vis is None:
            return np.zeros((len(identity), 0)), identity
        kmat = np.matmul(np.matmul(u, xmat), u_dag)
        return stacked_traces(kmat, vis).real, identity

    def bound(self, theta, visible_moments) -> tuple[float, np.ndarray]:
        """``(B, dB/dtheta)`` with ``B = log Z - log sum_h exp(-F(h))`` (the bound on the loss
        is ``-S(rho) + B``); ``visible_moments[v] = Tr(rho P_v)`` over ``structure.visible``."""
        s = self.structure
        coef, energy = self.block_coefficients(theta)
        n_vis = 0 if s.visible is None else len(s.visible)
        m = np.asarray(visible_moments, dtype=float)
        if m.shape != (n_vis,):
            raise ThermoseedError(
                f"visible moments have shape {m.shape}; the block structure has {n_vis} "
                "visible parts (structure.visible)"
            )
        free = -(energy + m @ coef)
        log_norm = float(scipy.special.logsumexp(free))
        with self._runner() as run:
            chunks, x, log_z = self._weights(theta, run)
            moments = self._moments(chunks, np.exp(x), run)
        dfree = np.append(m, 1.0)[s.visible_index]  # index -1: identity part, dF = s_j(h)
        grad = (s.signs @ np.exp(free - log_norm)) * dfree - moments
        return log_z - log_norm, grad
