"""Hidden-qubit Gibbs model (quantum Boltzmann machine with hidden units) and its files.

Terms act on ``n_visible + n_hidden`` wires, the hidden ones last. The model state on the
visible wires is ``sigma_v = Tr_h exp(-H) / Z``, ``H = sum_j theta_j P_j``, and fitting
minimises

    L(theta) = S(rho||sigma_v) + (l2/2)|theta|^2 = -S(rho) - Tr(rho log sigma_v) + ...

with the exact adjoint gradient of ``hidden_engines`` (``objective="exact"``), or, for
commuting-hidden term sets, the upper bound
``S(rho||sigma_v) <= -S(rho) + log Z - log sum_h exp(-E(h) - Tr(rho H'_v(h)))`` whose gradient
needs only data moments and Gibbs expectation values (``objective="bound"``). The engine is
chosen automatically: ``block`` when every term is diagonal (I or Z) on the hidden wires,
``dense`` otherwise. With ``n_hidden = 0`` the loss and gradient are the visible model's
(``VisibleGibbsModel``), evaluated by the same engine, so the two fits agree exactly.

L is not convex once hidden qubits are present (and ``theta = 0`` is a stationary point of
every hidden coupling): the fit starts from ``restarts`` seeded random points
``theta_0 ~ N(0, init_scale^2)`` and keeps the lowest final objective; the final losses of
every restart are kept in ``restart_losses_``.

``visible_view()`` presents a fitted model to code written for visible models (the bridge's
compile and warm start, the classifier's rules): ``sigma_v`` is the Gibbs state of
``H_eff = -log sigma_v`` (``ReducedGibbsView``), whose records keep the hidden model's labels,
coefficients and ``n_hidden``.
"""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import NamedTuple

import numpy as np

from ._base import ParamsMixin, check_is_fitted
from .checks import integer_in, real_number, seed_value
from .data import as_training_data, check_density_matrix, square_array_kind
from .engines import GibbsEvaluation, make_engine
from .errors import DivergenceWarning, ThermoseedError
from .files import json_scalar, read_record, write_record
from .hidden_engines import BlockHiddenEngine, DenseHiddenEngine, HiddenEvaluation
from .hidden_layout import non_diagonal_hidden_terms, split_register, visible_only_terms
from .linalg import WEIGHT_CUTOFF, eigh, log_sum_exp_neg, von_neumann_entropy
from .models import DIVERGENCE_COEF
from .optim import SOLVERS, Callback, minimize
from .paulis import TermSet, check_coefficients, dense_hamiltonian, expectations

ENGINE_CHOICES = ("auto", "dense", "block")
OBJECTIVES = ("exact", "bound")


class HiddenGibbsModel(ParamsMixin):
    """Gibbs model with hidden qubits, fitted by relative-entropy minimisation.

    Parameters:
        terms: ``TermSet`` (or labels) on ``n_visible + n_hidden`` wires, hidden wires last
            (``hidden_terms`` builds one on a graph).
        n_hidden: number of hidden qubits k (0 reproduces ``VisibleGibbsModel``).
        objective: ``"exact"`` (relative entropy) or ``"bound"`` (commuting-hidden only).
        engine: ``"auto"``, ``"dense"`` (full register) or ``"block"`` (commuting-hidden).
        solver, l2, tol, max_iter, learning_rate: as for ``VisibleGibbsModel``.
        init_scale: standard deviation of the random starting coefficients.
        restarts: number of seeded starting points; the lowest final objective is kept.
        seed: seed for the starting points.
        workers: threads for the block engine.
        progress: show a progress bar per restart on stderr.

    Attributes:
        coef_, loss_ (S(rho||sigma_v), no penalty), objective_value_ (final objective without
        penalty), bound_ (the bound at coef_, block engine only, else None), grad_norm_,
        n_iter_, converged_, history_ (best restart), restart_losses_ and
        restart_objectives_ (one per restart), restart_spread_ (max - min of
        restart_losses_), best_restart_, engine_ (name used),
        target_moments_ (data moments of visible-only terms, NaN for terms touching hidden
        wires), data_entropy_, n_visible_, n_hidden_, terms_.
    """

    def __init__(
        self,
        terms,
        *,
        n_hidden: int = 1,
        objective: str = "exact",
        engine: str = "auto",
        solver: str = "lbfgs",
        l2: float = 0.0,
        tol: float = 1e-6,
        max_iter: int = 500,
        learning_rate: float = 0.05,
        init_scale: float = 0.3,
        restarts: int = 1,
        seed: int = 0,
        workers: int = 1,
        progress: bool = False,
    ):
        self.terms = terms
        self.n_hidden = n_hidden
        self.objective = objective
        self.engine = engine
        self.solver = solver
        self.l2 = l2
        self.tol = tol
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.init_scale = init_scale
        self.restarts = restarts
        self.seed = seed
        self.workers = workers
        self.progress = progress

    # ------------------------------------------------------------------ set-up
    def _term_set(self) -> TermSet:
        return self.terms if isinstance(self.terms, TermSet) else TermSet(self.terms)

    def _check_settings(self) -> None:
        for name, choices in (("objective", OBJECTIVES), ("engine", ENGINE_CHOICES),
                              ("solver", SOLVERS)):
            if getattr(self, name) not in choices:
                raise ThermoseedError(f"{name} must be one of {choices}, got "
                                      f"{getattr(self, name)!r}")
        for name in ("l2", "init_scale"):
            if real_number(getattr(self, name), name) < 0:
                raise ThermoseedError(f"{name} must be >= 0, got {getattr(self, name)!r}")
        if real_number(self.tol, "tol") <= 0:
            raise ThermoseedError(f"tol must be > 0, got {self.tol!r}")
        integer_in(self.max_iter, "max_iter", 1)
        integer_in(self.restarts, "restarts", 1)
        integer_in(self.workers, "workers", 1)
        seed_value(self.seed)

    def _engine_name(self, terms: TermSet) -> str:
        _, k = split_register(terms, self.n_hidden)
        diagonal = not non_diagonal_hidden_terms(terms, k)
        name = self.engine
        if name == "auto":
            name = "block" if diagonal and (k > 0 or self.objective == "bound") else "dense"
        if self.objective == "bound" and not diagonal:
            bad = non_diagonal_hidden_terms(terms, k)[:3]
            raise ThermoseedError(
                f"objective='bound' needs a commuting-hidden term set (I or Z on the hidden "
                f"wires), but {bad} have X or Y there; use objective='exact'"
            )
        if self.objective == "bound" and name == "dense":
            raise ThermoseedError("objective='bound' runs on the block engine; use "
                                  "engine='auto' or engine='block'")
        return name

    def _make_engine(self, terms: TermSet, name: str):
        if name == "block":
            return BlockHiddenEngine(terms, self.n_hidden, workers=self.workers)
        return DenseHiddenEngine(terms, self.n_hidden)

    # ------------------------------------------------------------------ fitting
    def _objective(self, terms: TermSet, rho: np.ndarray, entropy: float):
        """``theta -> (objective + (l2/2)|theta|^2, gradient)`` for the chosen objective."""
        lam = float(self.l2)
        engine = self._hidden_engine
        if self.n_hidden == 0 and self.objective == "exact":
            visible = make_engine("dense", terms)  # the visible model's own loss, exactly
            moments = expectations(rho, terms)

            def value(theta):
                ev = visible.evaluate(theta)
                return -entropy + float(theta @ moments) + ev.log_z, moments - ev.moments
        elif self.objective == "bound":
            vis = engine.structure.visible
            m = np.zeros(0) if vis is None else expectations(rho, vis)

            def value(theta):
                b, grad = engine.bound(theta, m)
                return -entropy + b, grad
        else:
            def value(theta):
                ev = engine.evaluate(theta, rho)
                return -entropy + ev.cross_entropy, ev.gradient

        def with_penalty(theta):
            loss, grad = value(theta)
            return loss + 0.5 * lam * float(theta @ theta), grad + lam * theta

        return with_penalty

    def fit(self, data, *, callback: Callback | None = None, kind: str | None = None):
        """Fit to visible-register training data (anything ``as_training_data`` accepts)."""
        self._check_settings()
        terms = self._term_set()
        n_v, k = split_register(terms, self.n_hidden)
        td = as_training_data(data, kind=square_array_kind(data) if kind is None else kind)
        if td.n_qubits != n_v:
            raise ThermoseedError(
                f"training data have {td.n_qubits} qubits but the term set has {n_v} visible "
                f"wires ({terms.n_qubits} wires, n_hidden = {k}); set n_hidden = "
                f"{terms.n_qubits - td.n_qubits} or build the terms for the data"
            )
        name = self._engine_name(terms)
        self._hidden_engine = self._make_engine(terms, name)
        rho = td.rho
        entropy = td.entropy()
        with_penalty = self._objective(terms, rho, entropy)
        rng = np.random.default_rng(self.seed)
        runs = []
        for _ in range(int(self.restarts)):
            theta0 = self.init_scale * rng.standard_normal(len(terms))
            result = minimize(with_penalty, theta0, solver=self.solver, tol=self.tol,
                              max_iter=int(self.max_iter), learning_rate=self.learning_rate,
                              callback=callback, progress=self.progress)
            objective = result.loss - 0.5 * self.l2 * float(result.x @ result.x)
            runs.append((objective, result))
        best = int(np.argmin([obj for obj, _ in runs]))
        self.terms_, self.n_visible_, self.n_hidden_, self.engine_ = terms, n_v, k, name
        self.data_entropy_ = entropy
        self.target_moments_ = np.full(len(terms), np.nan)
        index, parts = visible_only_terms(terms, k)
        if parts is not None:
            self.target_moments_[index] = expectations(rho, parts)
        self.restart_objectives_ = np.array([obj for obj, _ in runs])
        self.restart_losses_ = self.restart_objectives_.copy() if self.objective == "exact" \
            else np.array([self._exact_loss(r.x, rho, entropy) for _, r in runs])
        self.restart_spread_ = float(np.ptp(self.restart_losses_))
        objective, result = runs[best]
        self.best_restart_ = best
        self.coef_ = result.x
        self.objective_value_ = objective
        self.loss_ = float(self.restart_losses_[best])
        self.grad_norm_ = result.grad_norm
        self.n_iter_ = result.n_iter
        self.converged_ = result.converged
        self.history_ = result.history
        self.bound_ = self._bound_value(rho, entropy)
        largest = float(np.abs(self.coef_).max())
        if largest > DIVERGENCE_COEF:
            warnings.warn(
                f"coefficients are diverging (largest |theta| = {largest:.3g}): the best fit "
                "lies at infinity (rank-deficient data, or a zero-temperature limit of the "
                "hidden model); set l2 > 0 (e.g. 1e-3) for a finite model",
                DivergenceWarning, stacklevel=2)
        return self

    def _exact_loss(self, theta, rho, entropy) -> float:
        return -entropy + self._hidden_engine.evaluate(theta, rho, gradient=False).cross_entropy

    def _bound_value(self, rho, entropy) -> float | None:
        engine = self._engine_for_queries()
        if not isinstance(engine, BlockHiddenEngine):
            return None
        vis = engine.structure.visible
        m = np.zeros(0) if vis is None else expectations(rho, vis)
        return -entropy + engine.bound(self.coef_, m)[0]

    @classmethod
    def from_coefficients(cls, terms, coef, **params) -> HiddenGibbsModel:
        """A model with given coefficients, as if fitted (known Hamiltonians and files)."""
        model = cls(terms, **params)
        model._check_settings()
        model.terms_ = model._term_set()
        model.n_visible_, model.n_hidden_ = split_register(model.terms_, model.n_hidden)
        model.engine_ = model._engine_name(model.terms_)
        model.coef_ = check_coefficients(coef, model.terms_)
        return model

    # ------------------------------------------------------------------ fitted queries
    def _engine_for_queries(self):
        check_is_fitted(self, "coef_")
        if not hasattr(self, "_hidden_engine"):
            self._hidden_engine = self._make_engine(self.terms_, self.engine_)
        return self._hidden_engine

    def evaluate(self, rho, *, gradient: bool = True) -> HiddenEvaluation:
        """Cross entropy ``-Tr(rho log sigma_v)``, gradient and sigma_v at ``coef_``."""
        r = self._visible_rho(rho)
        return self._engine_for_queries().evaluate(self.coef_, r, gradient=gradient)

    def _visible_rho(self, rho) -> np.ndarray:
        r = check_density_matrix(rho)
        if r.shape[0] != 2**self.n_visible_:
            raise ThermoseedError(
                f"density matrix is {r.shape[0]}x{r.shape[0]} but the model has "
                f"{self.n_visible_} visible qubits"
            )
        return r

    def state(self) -> np.ndarray:
        """The visible reduced state ``sigma_v = Tr_h exp(-H)/Z`` (complex, 2^n_v square)."""
        return self._engine_for_queries().reduced_state(self.coef_).astype(complex)

    def moments(self) -> np.ndarray:
        """Full-register model moments ``<P_j>_sigma``."""
        return self._engine_for_queries().moments(self.coef_)

    def hamiltonian(self) -> np.ndarray:
        """Dense full-register ``H(theta)`` (small registers only)."""
        check_is_fitted(self, "coef_")
        return dense_hamiltonian(self.coef_, self.terms_)

    def visible_view(self) -> ReducedGibbsView:
        """This model seen from its visible wires: ``sigma_v`` as the Gibbs state of
        ``H_eff = -log sigma_v`` (``ReducedGibbsView``), for anything taking a visible model
        (``bridge.compile_latent``, ``bridge.warm_start``)."""
        return ReducedGibbsView(self)

    def relative_entropy(self, rho) -> float:
        """``S(rho||sigma_v) = -S(rho) - Tr(rho log sigma_v)`` for a visible density matrix."""
        r = self._visible_rho(rho)
        return -von_neumann_entropy(r) + self.evaluate(r, gradient=False).cross_entropy

    def save(self, path) -> Path:
        """Write a versioned model file (``save_hidden_model``)."""
        return save_hidden_model(self, path)


class ReducedTerms(NamedTuple):
    """The term labels of a hidden model (full register, hidden wires last) beside the
    register its reduced state lives on: ``n_qubits`` counts the VISIBLE wires."""

    labels: list[str]
    n_qubits: int
    n_hidden: int


class ReducedGibbsView:
    """A fitted ``HiddenGibbsModel`` presented as a visible Gibbs model.

    ``sigma_v = Tr_h exp(-H)/Z = V diag(p) V^dag`` is itself the Gibbs state of
    ``H_eff = -log sigma_v = V diag(-log p) V^dag`` (``log Z_eff = log sum_i p_i = 0``).
    Eigenvalues below ``WEIGHT_CUTOFF`` times the largest are round-off of the reduced state
    and are raised to that floor before the logarithm (``log_z`` is then ``log sum`` of the
    floored values, within ~d 1e-16 of 0, so ``exp(-H_eff - log_z)`` stays a unit-trace
    state). Built once from the model's coefficients (a snapshot: refit, then ask again).

    Attributes:
        model: the hidden model. terms_: ``ReducedTerms`` (the hidden model's labels,
        ``n_qubits`` = visible wires, ``n_hidden``). coef_: its coefficients.
        n_hidden_, n_visible_: register sizes. energies_: ``-log p_i`` ascending.
        vectors_: eigenvectors of sigma_v (columns, order of ``energies_``).
        state_: ``sigma_v``. log_z_: as above. hidden_log_z_: ``log Tr exp(-H)`` of the
        full register.
    """

    def __init__(self, model: HiddenGibbsModel):
        check_is_fitted(model, "coef_")
        self.model = model
        self.coef_ = np.asarray(model.coef_, float)
        self.n_visible_, self.n_hidden_ = model.n_visible_, model.n_hidden_
        self.terms_ = ReducedTerms(list(model.terms_.labels), self.n_visible_, self.n_hidden_)
        dim = 2**self.n_visible_
        full = model.evaluate(np.eye(dim) / dim, gradient=False)
        probs, vectors = eigh(full.state)
        probs, self.vectors_ = probs[::-1], vectors[:, ::-1]  # energies ascending
        probs = np.maximum(probs, WEIGHT_CUTOFF * probs[0])
        self.energies_ = -np.log(probs)
        self.log_z_ = log_sum_exp_neg(self.energies_)[0]
        self.hidden_log_z_ = float(full.log_z)
        self.state_ = (self.vectors_ * np.exp(-self.energies_ - self.log_z_)) \
            @ self.vectors_.conj().T

    def hamiltonian(self) -> np.ndarray:
        """Dense ``H_eff = V diag(-log p) V^dag`` on the visible wires."""
        return (self.vectors_ * self.energies_) @ self.vectors_.conj().T

    def state(self) -> np.ndarray:
        """``sigma_v`` (from the floored spectrum)."""
        return self.state_.copy()

    def log_partition(self) -> float:
        """``log Tr exp(-H_eff)`` (0 up to the floor)."""
        return self.log_z_

    def evaluate(self, want_state: bool = False) -> GibbsEvaluation:
        """``GibbsEvaluation`` of ``exp(-H_eff)``: log Z_eff, the hidden model's full-register
        moments ``<P_j>_sigma`` (its terms), energies, and state and vectors on request."""
        return GibbsEvaluation(self.log_z_, self.model.moments(), self.energies_,
                               self.state() if want_state else None,
                               self.vectors_ if want_state else None)


HIDDEN_MODEL_KIND = "hidden-gibbs-model"
_METRICS = [("loss", "loss_"), ("objective_value", "objective_value_"), ("bound", "bound_"),
            ("grad_norm", "grad_norm_"), ("n_iter", "n_iter_"), ("converged", "converged_"),
            ("data_entropy", "data_entropy_"), ("best_restart", "best_restart_"),
            ("restart_spread", "restart_spread_")]
_ARRAYS = [("target_moments", "target_moments_"), ("restart_losses", "restart_losses_"),
           ("restart_objectives", "restart_objectives_")]


def save_hidden_model(model: HiddenGibbsModel, path) -> Path:
    """Save a fitted ``HiddenGibbsModel`` (labels, n_hidden, coefficients, settings, metrics,
    per-restart losses, history) as a ``hidden-gibbs-model`` record."""
    check_is_fitted(model, "coef_")
    params = {k: v for k, v in model.get_params().items() if k != "terms"}
    metrics = {name: json_scalar(getattr(model, attr)) for name, attr in _METRICS
               if hasattr(model, attr)}
    header = {"model": type(model).__name__, "n_qubits": model.terms_.n_qubits,
              "n_hidden": model.n_hidden_, "engine": model.engine_,
              "terms": model.terms_.labels, "params": params, "metrics": metrics}
    arrays = {"coef": np.asarray(model.coef_, float)}
    arrays.update({name: np.asarray(getattr(model, attr), float) for name, attr in _ARRAYS
                   if hasattr(model, attr)})
    if hasattr(model, "history_"):
        arrays["history_loss"] = np.asarray(model.history_["loss"], float)
        arrays["history_grad_norm"] = np.asarray(model.history_["grad_norm"], float)
    return write_record(path, HIDDEN_MODEL_KIND, header, arrays)


def load_hidden_model(path) -> HiddenGibbsModel:
    """Load a file written by ``save_hidden_model``; the result answers every fitted query."""
    header, arrays = read_record(path, HIDDEN_MODEL_KIND)
    try:
        model = HiddenGibbsModel.from_coefficients(header["terms"], arrays["coef"],
                                                   **header["params"])
        metrics = header["metrics"]
    except (KeyError, TypeError) as err:
        raise ThermoseedError(f"model file {str(path)!r} is incomplete: missing {err}") from err
    for name, attr in _METRICS:
        if name in metrics:
            setattr(model, attr, metrics[name])
    for name, attr in _ARRAYS:
        if name in arrays:
            setattr(model, attr, arrays[name])
    if "history_loss" in arrays and "history_grad_norm" in arrays:
        model.history_ = {"loss": arrays["history_loss"].tolist(),
                          "grad_norm": arrays["history_grad_norm"].tolist()}
    return model
