"""Visible Gibbs model (quantum Boltzmann machine without hidden qubits).

``sigma(theta) = exp(-H(theta)) / Z``, ``H = sum_j theta_j P_j``. Fitting minimises
``L(theta) = S(rho||sigma) + (l2/2)|theta|^2 = -S(rho) + theta.m + log Z + (l2/2)|theta|^2``
with exact gradient ``m - <P>_sigma + l2 theta``, ``m_j = Tr(rho P_j)``. L is convex, so
L-BFGS reaches the maximum-entropy state whose moments equal the data's, when one exists:
rank-deficient data lying in the ground space of some ``sum_j c_j P_j`` have their optimum at
``|theta| -> infinity`` (``pretrain.divergence`` certifies it; a DivergenceWarning says so and
``l2 > 0`` restores a finite optimum).

Measurement records give noisy moments ``m`` with a covariance (``records.from_records``);
S(rho) is then unknown and the loss reported is the cross entropy
``-Tr(rho log sigma) = theta.m + log Z``. The fit then stops once the gradient norm is below
``NOISE_TOL_FRACTION`` of the smallest standard error (further digits are below the noise),
reports the residuals ``(m_j - <P_j>_sigma) / SE_j`` and propagates the noise into
``Cov(theta) = (F + l2 I)^{-1} Cov(m) (F + l2 I)^{-1}`` (``pretrain.uncertainty``).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

from ._base import ParamsMixin, check_is_fitted
from .data import (
    TrainingData,
    as_training_data,
    check_density_matrix,
    check_qubits,
    square_array_kind,
    stored_states,
    summarize_states,
)
from .divergence import ground_space_certificate, warn_divergence
from .engines import AUTO_DENSE_MAX_QUBITS, ENGINES, GibbsEngine, choose_engine, make_engine
from .errors import ThermoseedError
from .files import json_scalar, read_record, write_record
from .linalg import entropy_of_spectrum, von_neumann_entropy
from .memory import LARGE_DATA_HINT, announce_dense_cost, check_dense_memory
from .optim import SOLVERS, Callback, minimize, warn_unconverged
from .paulis import TermSet, check_coefficients, dense_hamiltonian, expectations
from .records import BasisCounts, PauliShots, from_records, is_records_file
from .shadows import MomentEstimates
from .uncertainty import coefficient_covariance, log_partition_hessian

#: Moment data only (no rho to certify with): |theta| entries above this mean weights
#: e^{-|theta|} below ~1e-11, the mark of moments no Gibbs state reaches (use l2 > 0).
DIVERGENCE_COEF = 25.0
#: Smallest data eigenvalue below which the data count as rank-deficient; states data are
#: then tested with ``divergence.ground_space_certificate`` (full-rank data never diverge).
RANK_FLOOR = 1e-10
#: State-vector arrays on at least this many qubits (where ``engine="auto"`` is typicality)
#: are summarised without the dense rho (``data.summarize_states``).
MATRIX_FREE_FROM_QUBITS = AUTO_DENSE_MAX_QUBITS + 1
#: Dense complex matrices the data's eigendecomposition allocates besides rho (a working copy,
#: the eigenvectors, LAPACK workspace of about one more).
DATA_SPECTRUM_MATRICES = 3
#: With noisy moments the fit stops at |grad| <= max(tol, NOISE_TOL_FRACTION * min SE_j):
#: every residual is then below 1% of its standard error.
NOISE_TOL_FRACTION = 1e-2
#: Fitted arrays saved in model files beside ``coef`` (present when the data carried errors).
NOISE_ARRAYS = {"target_stderr": "target_stderr_", "moment_zscores": "moment_zscores_",
                "coef_stderr": "coef_stderr_", "coef_covariance": "coef_covariance_"}


class VisibleGibbsModel(ParamsMixin):
    """Gibbs model over a fixed Pauli term set, fitted by relative-entropy minimisation.

    Parameters:
        terms: the ``TermSet`` (or list of labels) spanning H.
        solver: ``"lbfgs"`` (exact gradient, default) or ``"adam"``. With measurement records
            either works on the (deterministic) estimated moments; noisy moments can fall
            where no finite theta reaches them: then use ``l2 > 0`` (the covariance of theta
            accounts for the penalty).
        l2: L2 penalty strength ``lam`` in ``(lam/2)|theta|^2``.
        tol: stop when the gradient norm is at most ``tol``.
        max_iter: iteration cap.
        learning_rate: Adam step size.
        engine: ``"auto"`` (dense up to ``engines.AUTO_DENSE_MAX_QUBITS`` qubits, typicality
            above), ``"dense"``, ``"typicality"``, or a dict ``{"name": ..., **options}``
            (e.g. ``{"name": "typicality", "vectors": 16}``); a stochastic engine's random
            vectors take ``seed`` unless the options give one.
        init_scale: standard deviation of the random initial coefficients (0 = start at 0).
        seed: seed for the initial coefficients.
        progress: show a progress bar on stderr.
        checkpoint: optional ``.npz`` path; the fit saves there and resumes from it.

    Attributes:
        coef_: fitted coefficients theta.
        target_moments_: data moments m.
        data_entropy_: S(rho) in nats (nan for moment data such as records).
        loss_: final S(rho||sigma) (without the penalty); for moment data the cross entropy
            ``theta.m + log Z``.
        target_stderr_, moment_zscores_: (moment data) standard errors of m and the fit's
            residuals ``(m_j - <P_j>_sigma) / SE_j``.
        coef_covariance_, coef_stderr_: (moment data, ``coef_errors=True``) Cov(theta) from
            the moment noise (plus the engine's own, for typicality) and its diagonal's root.
        grad_norm_: final gradient norm (with the penalty).
        n_iter_: iterations used. converged_: whether ``grad_norm_ <= tol``.
        diverging_: whether the optimum lies at |theta| -> infinity (a DivergenceWarning
            says so; ``l2 > 0`` is the fix): certified for states data, coefficient size
            for moment data.
        history_: dict of per-iteration ``loss`` and ``grad_norm`` lists.

    Examples:
        >>> from pretrain import VisibleGibbsModel, graph_terms
        >>> import numpy as np
        >>> terms = graph_terms(2, "line", fields="Z", couplings=("ZZ",))
        >>> rho = np.diag([0.4, 0.3, 0.2, 0.1]).astype(complex)
        >>> model = VisibleGibbsModel(terms).fit(rho)
        >>> bool(model.converged_)
        True
    """

    def __init__(
        self,
        terms,
        *,
        solver: str = "lbfgs",
        l2: float = 0.0,
        tol: float = 1e-6,
        max_iter: int = 500,
        learning_rate: float = 0.05,
        engine: str | dict = "auto",
        init_scale: float = 0.0,
        seed: int | None = 0,
        progress: bool = False,
        checkpoint: str | None = None,
    ):
        self.terms = terms
        self.solver = solver
        self.l2 = l2
        self.tol = tol
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.engine = engine
        self.init_scale = init_scale
        self.seed = seed
        self.progress = progress
        self.checkpoint = checkpoint

    # ------------------------------------------------------------------ fitting
    def _term_set(self) -> TermSet:
        return self.terms if isinstance(self.terms, TermSet) else TermSet(self.terms)

    def _check_settings(self) -> None:
        if self.solver not in SOLVERS:
            raise ThermoseedError(f"solver must be one of {SOLVERS}, got {self.solver!r}")
        for name in ("l2", "init_scale"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0:
                raise ThermoseedError(f"{name} must be a finite number >= 0, got {value!r}")
        if not (np.isfinite(self.tol) and self.tol > 0):
            raise ThermoseedError(f"tol must be > 0, got {self.tol!r}")
        if int(self.max_iter) < 1:
            raise ThermoseedError(f"max_iter must be >= 1, got {self.max_iter!r}")
        self._engine_spec()

    def _fingerprint(self, terms: TermSet, moments: np.ndarray) -> str:
        """sha256 of what a checkpoint is of: term labels, target moments, hyperparameters
        (not the path, the progress bar, or the stopping rule: resuming with a higher
        max_iter or another tol is what checkpoints are for)."""
        digest = hashlib.sha256("|".join(terms.labels).encode())
        digest.update(np.ascontiguousarray(moments, dtype=float).tobytes())
        params = {k: v for k, v in self.get_params().items()
                  if k not in ("terms", "checkpoint", "progress", "max_iter", "tol")}
        digest.update(repr(sorted(params.items(), key=str)).encode())
        return digest.hexdigest()[:16]

    def _engine_spec(self) -> tuple[str, dict]:
        """``(name, options)`` from ``engine`` (a name or ``{"name": ..., **options}``)."""
        spec = self.engine
        if isinstance(spec, dict):
            if not isinstance(spec.get("name"), str):
                raise ThermoseedError(f"engine dict {spec!r} needs a 'name', e.g. "
                                      "{'name': 'typicality', 'vectors': 16}")
            options = {k: v for k, v in spec.items() if k != "name"}
            return spec["name"], options
        if not isinstance(spec, str):
            raise ThermoseedError(f"engine must be a name or a dict, got {spec!r}")
        return spec, {}

    def _make_engine(self, terms: TermSet) -> GibbsEngine:
        name, options = self._engine_spec()
        cls = ENGINES[choose_engine(name, terms.n_qubits)]
        if getattr(cls, "stochastic", False):
            options.setdefault("seed", 0 if self.seed is None else self.seed)
        return make_engine(name, terms, **options)

    def loss_and_grad(self, theta: np.ndarray, moments: np.ndarray, data_entropy: float):
        """``(L(theta), dL/dtheta)`` for target moments ``m`` (penalty included)."""
        if not hasattr(self, "_engine"):
            self._engine = self._make_engine(self._term_set())
        ev = self._engine.evaluate(theta)
        self._last_evaluation = (np.array(theta, dtype=float), ev)
        loss = -data_entropy + float(theta @ moments) + ev.log_z
        loss += 0.5 * self.l2 * float(theta @ theta)
        return loss, moments - ev.moments + self.l2 * theta

    def _moment_estimates(self, data, terms: TermSet) -> MomentEstimates | None:
        """The data as moments with errors (records, estimates), or None for states."""
        if isinstance(data, (str, Path)) and is_records_file(data):
            data = from_records(data, terms)
        elif isinstance(data, (PauliShots, BasisCounts)):
            data = from_records(data, terms)
        if not isinstance(data, MomentEstimates):
            return None
        if data.terms != terms:
            raise ThermoseedError(
                "the moment estimates were made for another term set "
                f"({len(data.terms)} terms on {data.n_qubits} qubits); estimate them for the "
                "model's terms: from_records(records, model.terms)")
        return data

    def fit(self, data, *, callback: Callback | None = None, kind: str | None = None,
            coef_errors: bool = True):
        """Fit to training data and return self.

        ``data``: anything ``as_training_data`` accepts, measurement records (``PauliShots``,
        ``BasisCounts`` or a records file; estimated with ``from_records`` defaults) or
        ``MomentEstimates``. A square 2-D array is read as one density matrix when Hermitian,
        else as a batch of state vectors (``square_array_kind``); ``kind`` says which.
        ``coef_errors``: with moment data, compute ``coef_covariance_``/``coef_stderr_``
        (exact on the dense engine; on typicality ``len(terms) + 1`` evaluations with its
        symmetric estimator, about a third of a fit evaluation each).
        """
        self._check_settings()
        self.__dict__.pop("_last_evaluation", None)
        terms = self._term_set()
        estimates = self._moment_estimates(data, terms)
        tol = self.tol
        if estimates is None:
            if kind is None:
                kind = square_array_kind(data)
            batch = self._large_state_batch(data, kind, terms)
            if batch is not None:
                summary = summarize_states(batch[0], terms, batch[1], floor=RANK_FLOOR)
                moments, support = summary.moments, (summary.support, None)
                entropy = entropy_of_spectrum(summary.spectrum)
                self._announce_cost(terms, False, stacklevel=2)
            else:
                moments, entropy, support = self._dense_data(data, kind, terms)
        else:
            moments, entropy, support = estimates.values.copy(), 0.0, None
            self._announce_cost(terms, False, stacklevel=2)
            positive = estimates.stderr[estimates.stderr > 0]
            if positive.size:
                tol = max(tol, NOISE_TOL_FRACTION * float(positive.min()))
        self._engine = engine = self._make_engine(terms)
        rng = np.random.default_rng(self.seed)
        theta0 = self.init_scale * rng.standard_normal(len(terms))
        result = minimize(
            lambda th: self.loss_and_grad(th, moments, entropy),
            theta0,
            solver=self.solver,
            tol=tol,
            max_iter=int(self.max_iter),
            learning_rate=self.learning_rate,
            callback=callback,
            progress=self.progress,
            checkpoint=self.checkpoint,
            fingerprint=self._fingerprint(terms, moments) if self.checkpoint else "",
            warn=False,
        )
        self.terms_ = terms
        self.coef_ = result.x
        self.target_moments_ = moments
        self.data_entropy_ = entropy if estimates is None else float("nan")
        self.loss_ = result.loss - 0.5 * self.l2 * float(result.x @ result.x)
        self.grad_norm_ = result.grad_norm
        self.n_iter_ = result.n_iter
        self.converged_ = result.converged
        self.history_ = result.history
        if estimates is not None:
            seen, final = getattr(self, "_last_evaluation", (None, None))
            if not np.array_equal(seen, result.x):
                final = engine.evaluate(result.x)
            self._noise_report(estimates, final, coef_errors)
        self.diverging_ = self._diverges(terms, support, moments, estimates is None)
        if self.diverging_:
            warn_divergence(self.coef_, self.n_iter_, result.stop, from_states=estimates is None)
        else:
            warn_unconverged(result, tol, stacklevel=2)
        return self

    def _diverges(self, terms: TermSet, support, moments: np.ndarray, from_states: bool
                  ) -> bool:
        """Whether the optimum lies at |theta| -> infinity. ``support``: (range basis,
        null-space basis) of the data (None for moment data). States data: only rank-deficient
        data without a penalty can diverge, and only when they lie in the ground space of a
        direction the fit moves along (``divergence.ground_space_certificate``). Moment data
        (no rho): coefficients above ``DIVERGENCE_COEF``."""
        if not from_states:
            return bool(np.abs(self.coef_).max() > DIVERGENCE_COEF)
        if self.l2 > 0 or support[0].shape[1] == terms.dim:
            return False
        return ground_space_certificate(terms, support[0], moments, self.coef_,
                                        support[1]).diverges

    @staticmethod
    def _large_state_batch(data, kind: str | None, terms: TermSet):
        """``(states, weights)`` of state-vector data (array or file) above
        ``MATRIX_FREE_FROM_QUBITS`` qubits, which ``summarize_states`` handles without the
        2^n x 2^n matrix; None for everything else."""
        if terms.n_qubits < MATRIX_FREE_FROM_QUBITS:
            return None
        if isinstance(data, (str, Path)):
            return stored_states(data) if kind in (None, "states") else None
        if not isinstance(data, (np.ndarray, list)):
            return None
        arr = np.asarray(data)
        flat = arr.ndim == 1 or (arr.ndim == 2 and (
            kind == "states" or (kind is None and arr.shape[0] != arr.shape[1])))
        return (arr, None) if flat else None

    def _dense_data(self, data, kind: str | None, terms: TermSet):
        """``(moments, S(rho), (range basis, null-space basis))`` from the dense rho and one
        eigendecomposition (refused when it does not fit in memory, announced when slow)."""
        td: TrainingData = as_training_data(data, kind=kind)
        check_qubits(td.n_qubits, terms)
        moments = td.moments(terms)
        check_dense_memory(td.n_qubits, DATA_SPECTRUM_MATRICES,
                           "the data's eigendecomposition", LARGE_DATA_HINT)
        self._announce_cost(terms, True, stacklevel=3)
        values, vectors = np.linalg.eigh(td.rho)  # one decomposition: entropy + rank
        kept = values >= RANK_FLOOR
        return moments, entropy_of_spectrum(values), (vectors[:, kept], vectors[:, ~kept])

    def _announce_cost(self, terms: TermSet, data_spectrum: bool, stacklevel: int) -> None:
        """One SlowDenseWarning before long dense work (``memory``): the data's
        eigendecomposition (``data_spectrum``) and/or dense-engine steps."""
        name, _ = self._engine_spec()
        work = ["the data's eigendecomposition (once)"] if data_spectrum else []
        if choose_engine(name, terms.n_qubits) == "dense":
            work.append("each dense-engine step")
        if work:
            announce_dense_cost(terms.n_qubits, " and ".join(work), stacklevel=stacklevel + 2)

    def _noise_report(self, estimates: MomentEstimates, final, coef_errors: bool) -> None:
        """Residuals in standard errors and, if asked, Cov(theta) (module docstring)."""
        self.target_stderr_ = estimates.stderr
        self.moment_zscores_ = estimates.zscores(final.moments)
        if not coef_errors:
            return
        cov_m = estimates.covariance
        engine_cov = getattr(final, "moment_covariance", None)
        if engine_cov is not None:  # the engine's own statistical error moves theta too
            cov_m = cov_m + engine_cov
        engine, base = self._engine, final
        if hasattr(engine, "with_estimator"):  # differences need no gradient: the cheap one
            engine, base = engine.with_estimator("symmetric"), None
        hessian = log_partition_hessian(engine, self.coef_, base)
        self.coef_covariance_ = coefficient_covariance(hessian, cov_m, self.l2)
        self.coef_stderr_ = np.sqrt(np.clip(np.diag(self.coef_covariance_), 0.0, None))

    @classmethod
    def from_coefficients(cls, terms, coef, **params) -> VisibleGibbsModel:
        """A model with given coefficients, as if fitted (for known Hamiltonians and files)."""
        model = cls(terms, **params)
        model.terms_ = model._term_set()
        model.coef_ = check_coefficients(coef, model.terms_)
        return model

    # ------------------------------------------------------------------ fitted queries
    def evaluate(self, want_state: bool = False):
        """One engine evaluation at ``coef_``: ``GibbsEvaluation(log_z, moments, energies,
        state)`` (``state`` only when asked). Callers needing several of these take them all
        from one call: each call is one eigendecomposition on the dense engine. A state asked
        of a model fitted with a stochastic engine comes from the dense engine (exact sigma at
        ``coef_``) while n allows it."""
        check_is_fitted(self, "coef_")
        if not hasattr(self, "_engine"):
            self._engine = self._make_engine(self.terms_)
        dense = ENGINES["dense"]
        if want_state and getattr(self._engine, "stochastic", False) and \
                self.terms_.n_qubits <= dense.max_qubits:
            return dense(self.terms_).evaluate(self.coef_, want_state=True)
        return self._engine.evaluate(self.coef_, want_state=want_state)

    def hamiltonian(self) -> np.ndarray:
        """Dense ``H(theta) = sum_j theta_j P_j``."""
        check_is_fitted(self, "coef_")
        return dense_hamiltonian(self.coef_, self.terms_)

    def state(self) -> np.ndarray:
        """The model density matrix ``sigma = exp(-H)/Z`` (complex, 2^n x 2^n)."""
        return self.evaluate(want_state=True).state.astype(complex)

    def moments(self) -> np.ndarray:
        """Model moments ``<P_j>_sigma``."""
        return self.evaluate().moments

    def log_partition(self) -> float:
        """``log Z(theta)``."""
        return self.evaluate().log_z

    def spectrum(self) -> np.ndarray:
        """Eigenvalues of H(theta), ascending (from the dense engine, n <= 14)."""
        energies = self.evaluate().energies
        return self.evaluate(want_state=True).energies if energies is None else energies

    def relative_entropy(self, rho) -> float:
        """``S(rho||sigma) = -S(rho) + Tr(rho H) + log Z`` for any density matrix rho."""
        check_is_fitted(self, "coef_")
        r = check_density_matrix(rho)
        if r.shape[0] != self.terms_.dim:
            raise ThermoseedError(
                f"density matrix is {r.shape[0]}x{r.shape[0]} but the model acts on "
                f"{self.terms_.n_qubits} qubits"
            )
        m = expectations(r, self.terms_)
        return -von_neumann_entropy(r) + float(self.coef_ @ m) + self.log_partition()

    def save(self, path) -> Path:
        """Write a versioned model file (``save_model``)."""
        return save_model(self, path)


MODEL_KIND = "gibbs-model"


def save_model(model, path) -> Path:
    """Save a fitted ``VisibleGibbsModel`` (term labels, coefficients, settings, metrics)."""
    check_is_fitted(model, "coef_")
    params = {k: v for k, v in model.get_params().items() if k != "terms"}
    metrics = {
        name: json_scalar(getattr(model, attr))
        for name, attr in [("loss", "loss_"), ("grad_norm", "grad_norm_"), ("n_iter", "n_iter_"),
                           ("converged", "converged_"), ("diverging", "diverging_"),
                 ("data_entropy", "data_entropy_")]
        if hasattr(model, attr)
    }
    header = {"model": type(model).__name__, "n_qubits": model.terms_.n_qubits,
              "terms": model.terms_.labels, "params": params, "metrics": metrics}
    arrays = {"coef": np.asarray(model.coef_, float)}
    if hasattr(model, "target_moments_"):
        arrays["target_moments"] = np.asarray(model.target_moments_, float)
    if hasattr(model, "history_"):
        arrays["history_loss"] = np.asarray(model.history_["loss"], float)
        arrays["history_grad_norm"] = np.asarray(model.history_["grad_norm"], float)
    for key, attr in NOISE_ARRAYS.items():
        if hasattr(model, attr):
            arrays[key] = np.asarray(getattr(model, attr), float)
    return write_record(path, MODEL_KIND, header, arrays)


def load_model(path):
    """Load a model file written by ``save_model``; the result answers every fitted query."""
    header, arrays = read_record(path, MODEL_KIND)
    try:
        model = VisibleGibbsModel.from_coefficients(header["terms"], arrays["coef"],
                                                    **header["params"])
        metrics = header["metrics"]
    except (KeyError, TypeError) as err:
        raise ThermoseedError(f"model file {str(path)!r} is incomplete: missing {err}") from err
    for name, attr in [("loss", "loss_"), ("grad_norm", "grad_norm_"), ("n_iter", "n_iter_"),
                       ("converged", "converged_"), ("diverging", "diverging_"),
                 ("data_entropy", "data_entropy_")]:
        if name in metrics:
            setattr(model, attr, metrics[name])
    if "target_moments" in arrays:
        model.target_moments_ = arrays["target_moments"]
    if "history_loss" in arrays:
        if "history_grad_norm" not in arrays:
            raise ThermoseedError(f"model file {str(path)!r} is incomplete: missing "
                                  "'history_grad_norm'")
        model.history_ = {"loss": arrays["history_loss"].tolist(),
                          "grad_norm": arrays["history_grad_norm"].tolist()}
    for key, attr in NOISE_ARRAYS.items():
        if key in arrays:
            setattr(model, attr, arrays[key])
    return model
