"""Label-aware Gibbs classifier: one Gibbs model per class on a shared Pauli term set.

Fitting: the training states of class c are mixed, ``rho_c = (1/B_c) sum_{i: y_i = c} rho_i``,
and a ``VisibleGibbsModel`` ``sigma_c = exp(-H_c)/Z_c``, ``H_c = sum_j theta_cj P_j``, is
fitted to ``rho_c`` by relative entropy, every class on the same terms ``P_j``.

``rule="many-copy"`` (nearest model in relative entropy; quantum Stein lemma:
Hiai & Petz, "The proper formula for relative entropy and its asymptotics in quantum
probability", 1991): a test accepting N copies of rho with fixed probability accepts N
copies of sigma_c with probability ~ ``exp(-N S(rho||sigma_c))``. The nearest model is the
likeliest source, and the score of class c is
``s_c(rho) = -[Tr(rho H_c) + log Z_c] + log p_c = -S(rho||sigma_c) - S(rho) + log p_c``,
with ``Tr(rho H_c) = sum_j theta_cj Tr(rho P_j)`` from O(d) Pauli traces. ``predict_proba``
is ``softmax_c s_c``: for commuting models and a basis state ``|x><x|`` it is the Bayes
posterior ``p_c sigma_c(x) / sum_k p_k sigma_k(x)``. For two classes
``s_1 - s_0 = -Tr(rho D)`` with the observable
``D = (H_1 + log Z_1 I) - (H_0 + log Z_0 I) - log(p_1/p_0) I`` (``decision_observable``).

``rule="single-shot"`` (one copy, one measurement). Two classes: the Helstrom measurement
(Helstrom, "Quantum Detection and Estimation Theory", 1976): ``M_1`` projects onto the
positive eigenspace of ``Gamma = p_1 sigma_1 - p_0 sigma_0`` (half of its null space is
added, so ``Gamma = 0`` gives 1/2 each), ``M_0 = I - M_1``; success ``P* = (1 + ||Gamma||_1)/2``.
More classes: the pretty-good measurement (Hausladen & Wootters, "A 'pretty good' measurement
for distinguishing quantum states", 1994) ``M_c = R p_c sigma_c R``, ``R = rho_bar^{-1/2}``
on the support of ``rho_bar = sum_c p_c sigma_c``; the complement ``Pi_0`` of that support
is spread evenly, ``M_c += Pi_0 / C``, so ``sum_c M_c = I``. Its success is at least the
square of the optimum (Barnum & Knill, "Reversing quantum dynamics with near-optimal quantum
and classical fidelity", 2002). ``predict_proba(rho)_c = Tr(M_c rho)``.

Hidden qubits (``n_hidden = k > 0``): each class model is a ``HiddenGibbsModel`` on
``n_visible + k`` wires and ``sigma_c`` above is its visible reduced state
``sigma_v,c = Tr_h exp(-H_c) / Z_c``. The many-copy score is
``s_c = Tr(rho log sigma_v,c) + log p_c = -S(rho||sigma_v,c) - S(rho) + log p_c``, with
``log sigma_v,c = -H_eff,c`` from ``HiddenGibbsModel.visible_view`` (no Pauli sum on the shared
terms exists, so ``decision_observable`` is for visible models only); the single-shot rule
and every compile of it use the (cooled) reduced states.

Bounds: ``data_success_`` is the optimal (two classes) or pretty-good single-shot success
between the class mixtures ``rho_c``; one copy of a random class-c training state is the
state rho_c, so with two classes no single-shot classifier beats it on average over the
training states at those priors. ``model_success_`` is the same between the fitted models:
what the model class believes is achievable. The two need not be ordered (the models are
other states than the data).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._base import ParamsMixin, check_is_fitted
from .checks import real_number
from .data import check_qubits
from .errors import ThermoseedError
from .files import json_scalar, read_record, write_record
from .hidden import HiddenGibbsModel
from .hidden_layout import split_register
from .labelled import StateBatch, as_state_batch, batch_mixture, batch_moments, check_labels
from .linalg import log_sum_exp_neg
from .measurements import prior_vector, single_shot
from .models import VisibleGibbsModel
from .paulis import PauliExpansion, TermSet

RULES = ("many-copy", "single-shot")
PRIOR_NAMES = ("balanced", "empirical")
CLASSIFIER_KIND = "gibbs-classifier"
#: Cooling factors ``cooling="auto"`` chooses from (by training accuracy of the rule).
COOLING_GRID = (1.0, 2.0, 4.0, 8.0, 16.0)


# ---------------------------------------------------------------- inputs


def resolve_priors(spec, counts: np.ndarray) -> np.ndarray:
    """``"balanced"`` -> 1/C, ``"empirical"`` -> class frequencies, else explicit values."""
    if isinstance(spec, str):
        if spec == "balanced":
            return np.full(len(counts), 1.0 / len(counts))
        if spec == "empirical":
            return counts / counts.sum()
        raise ThermoseedError(f"unknown priors {spec!r}; use one of {PRIOR_NAMES} or C numbers")
    return prior_vector(spec, len(counts))


def cooled_states(terms: TermSet, models, beta: float) -> np.ndarray:
    """(C, d, d) ``exp(-beta H_c) / Z_c(beta)`` of fitted class models (for hidden models
    the visible reduced state of the cooled full-register model)."""
    if beta == 1.0:
        return np.stack([m.state() for m in models])
    return np.stack([m.from_coefficients(terms, beta * m.coef_, **{
        k: v for k, v in m.get_params().items() if k != "terms"}).state() for m in models])


def _check_register(n_qubits: int, terms: TermSet, n_hidden: int) -> None:
    """States on the visible wires: ``terms`` minus ``n_hidden`` (``data.check_qubits``)."""
    if not n_hidden:
        check_qubits(n_qubits, terms)
        return
    n_v, k = split_register(terms, n_hidden)
    if n_qubits != n_v:
        raise ThermoseedError(f"the states have {n_qubits} qubits but the terms have {n_v} "
                              f"visible wires ({terms.n_qubits} wires, n_hidden = {k}); give "
                              "states on the visible wires or change n_hidden")


def _povm_values(operators: np.ndarray, batch: StateBatch) -> np.ndarray:
    """(B, C) ``Tr(A_c rho_b)`` for Hermitian ``A_c`` (``<psi_b|A_c|psi_b>`` for vectors)."""
    if batch.kind == "states":
        return np.einsum("ba,cax,bx->bc", batch.data.conj(), operators, batch.data).real
    return np.einsum("cab,kba->kc", operators, batch.data).real


def _povm_probs(povm: np.ndarray, batch: StateBatch) -> np.ndarray:
    """(B, C) outcome probabilities ``Tr(M_c rho_b)``, clipped at 0 and renormalised."""
    probs = np.clip(_povm_values(povm, batch), 0.0, None)
    return probs / probs.sum(axis=1, keepdims=True)


# ---------------------------------------------------------------- the classifier


class GibbsClassifier(ParamsMixin):
    """One Gibbs model per class on a shared term set; many-copy or single-shot decisions.

    Parameters:
        terms: the shared ``TermSet`` (or list of labels).
        rule: ``"many-copy"`` (nearest model in relative entropy) or ``"single-shot"``
            (Helstrom / pretty-good measurement between the models); module docstring.
        priors: ``"balanced"`` (1/C; empirical priors tilt the measurement towards the
            majority class), ``"empirical"`` (class frequencies) or C explicit values.
        l2, tol, max_iter, solver, engine, progress: passed to every ``VisibleGibbsModel``
            (``engine`` only: hidden models take ``hidden_engine``).
        n_hidden: 0 (default) fits ``VisibleGibbsModel``s; ``k > 0`` fits one
            ``HiddenGibbsModel`` per class on ``terms`` spanning ``n_visible + k`` wires
            (hidden last, e.g. ``hidden_terms``); the states stay on the visible wires. The
            many-copy score is then ``Tr(rho log sigma_v,c) + log p_c`` with the reduced
            states' logarithms (``ReducedGibbsView``), the single-shot rule separates the
            (cooled) reduced states.
        restarts, init_scale, seed, hidden_engine: the hidden models' ``restarts``,
            ``init_scale``, ``seed`` and ``engine`` (ignored when ``n_hidden = 0``).
        renormalize: divide unnormalised states by their norm (trace) instead of failing.
        cooling: the single-shot rule (and every compile of it) works with the class models
            cooled by a factor ``beta >= 1``, ``exp(-beta H_c) / Z_c(beta)``; ``beta = 1`` is
            the fitted models. Pure or low-rank training states fitted with an L2 penalty
            give models hotter than the data (the penalty keeps the coefficients finite);
            cooling undoes part of that. ``"auto"`` (default) takes the ``beta`` in
            ``COOLING_GRID`` whose single-shot rule classifies the training states best
            (ties: the smallest). The many-copy rule always uses the fitted models.

    Attributes:
        terms_, classes_, class_counts_, priors_: the term set, ``0..C-1``, counts, priors.
        n_hidden_, n_visible_: hidden wires of the class models and the states' qubits.
        models_: fitted ``VisibleGibbsModel`` (or ``HiddenGibbsModel``) per class.
        coef_: (C, K) coefficients. log_partition_: (C,) ``log Z_c`` (full register).
        log_states_: (C, d, d) ``log sigma_v,c`` (hidden models only, else None).
        loss_: (C,) ``S(rho_c||sigma_c)``. converged_: (C,).
        cooling_: the ``beta`` the single-shot rule uses (``class_states()``).
        povm_: (C, d, d) single-shot measurement between the cooled models.
        model_success_: single-shot success between the cooled models;
        data_success_: between the data's own class mixtures.
    """

    def __init__(self, terms, *, rule: str = "many-copy", priors="balanced", l2: float = 1e-3,
                 tol: float = 1e-6, max_iter: int = 500, solver: str = "lbfgs",
                 engine: str = "dense", renormalize: bool = False, cooling="auto",
                 progress: bool = False, n_hidden: int = 0, restarts: int = 1,
                 init_scale: float = 0.3, seed: int = 0, hidden_engine: str = "auto"):
        self.terms = terms
        self.rule = rule
        self.priors = priors
        self.l2 = l2
        self.tol = tol
        self.max_iter = max_iter
        self.solver = solver
        self.engine = engine
        self.renormalize = renormalize
        self.cooling = cooling
        self.progress = progress
        self.n_hidden = n_hidden
        self.restarts = restarts
        self.init_scale = init_scale
        self.seed = seed
        self.hidden_engine = hidden_engine

    def _model_params(self) -> dict:
        shared = {"l2": self.l2, "tol": self.tol, "max_iter": self.max_iter,
                  "solver": self.solver, "progress": self.progress}
        if not self.n_hidden:
            return {**shared, "engine": self.engine}
        return {**shared, "n_hidden": self.n_hidden, "engine": self.hidden_engine,
                "restarts": self.restarts, "init_scale": self.init_scale, "seed": self.seed}

    def _new_model(self, terms: TermSet):
        """An unfitted class model: visible, or hidden when ``n_hidden > 0``."""
        kind = HiddenGibbsModel if self.n_hidden else VisibleGibbsModel
        return kind(terms, **self._model_params())

    def fit(self, states, labels) -> GibbsClassifier:
        """Fit one model per class on that class's mixture and return self."""
        if self.rule not in RULES:
            raise ThermoseedError(f"unknown rule {self.rule!r}; choose one of {RULES}")
        terms = self.terms if isinstance(self.terms, TermSet) else TermSet(self.terms)
        batch = as_state_batch(states, renormalize=self.renormalize)
        _check_register(batch.n_qubits, terms, self.n_hidden)
        y, n_classes = check_labels(labels, batch.count)
        counts = np.bincount(y, minlength=n_classes)
        priors = resolve_priors(self.priors, counts)
        mixtures = [batch_mixture(batch.subset(y == c)) for c in range(n_classes)]
        models = [self._new_model(terms).fit(td) for td in mixtures]
        self._set_models(terms, models, priors, self._choose_cooling(terms, models, priors,
                                                                     batch, y))
        self.class_counts_ = counts
        self.loss_ = np.array([m.loss_ for m in models])
        self.converged_ = np.array([m.converged_ for m in models])
        self.data_success_ = single_shot(np.stack([td.rho for td in mixtures]), priors)[1]
        return self

    def _choose_cooling(self, terms, models, priors, batch: StateBatch, y) -> float:
        if self.cooling != "auto":
            beta = real_number(self.cooling, "cooling")
            if beta < 1:
                raise ThermoseedError(f"cooling = {self.cooling!r} must be >= 1 (1: the "
                                      "fitted models) or 'auto'")
            return beta
        best, best_hits = 1.0, -1.0
        for beta in COOLING_GRID:
            povm, _ = single_shot(cooled_states(terms, models, beta), priors)
            hits = float(np.mean(np.argmax(_povm_probs(povm, batch), axis=1) == y))
            if hits > best_hits:
                best, best_hits = beta, hits
        return best

    def _set_models(self, terms: TermSet, models: list, priors: np.ndarray,
                    cooling: float = 1.0) -> None:
        self.terms_ = terms
        self.models_ = models
        self.n_visible_, self.n_hidden_ = split_register(terms, self.n_hidden)
        self.classes_ = np.arange(len(models))
        self.priors_ = priors
        self.coef_ = np.stack([m.coef_ for m in models])
        self.log_states_ = None
        if self.n_hidden_:
            views = [m.visible_view() for m in models]
            self.log_partition_ = np.array([v.hidden_log_z_ for v in views])
            self.log_states_ = np.stack([-v.hamiltonian() - v.log_z_ * np.eye(len(v.energies_))
                                         for v in views])
        else:
            self.log_partition_ = np.array([m.log_partition() for m in models])
        self.cooling_ = float(cooling)
        self.povm_, self.model_success_ = single_shot(self.class_states(), priors)

    def class_states(self) -> np.ndarray:
        """(C, d, d) the states the single-shot rule separates: ``exp(-cooling_ H_c)/Z``."""
        check_is_fitted(self, "coef_")
        return cooled_states(self.terms_, self.models_, self.cooling_)

    # ------------------------------------------------------------------ decisions
    def _batch(self, states) -> StateBatch:
        check_is_fitted(self, "coef_")
        batch = as_state_batch(states, renormalize=self.renormalize)
        _check_register(batch.n_qubits, self.terms_, self.n_hidden_)
        return batch

    def relative_entropy_scores(self, states) -> np.ndarray:
        """(B, C) scores ``s_c = Tr(rho log sigma_c) + log p_c``: ``-[Tr(rho H_c) + log Z_c]``
        from Pauli moments for visible models, ``Tr(rho log sigma_v,c)`` from the reduced
        states' logarithms for hidden ones (either rule)."""
        batch = self._batch(states)
        if self.log_states_ is not None:
            return _povm_values(self.log_states_, batch) + np.log(self.priors_)
        moments = batch_moments(batch, self.terms_)
        return -(moments @ self.coef_.T) - self.log_partition_ + np.log(self.priors_)

    def predict_proba(self, states) -> np.ndarray:
        """(B, C): ``softmax_c s_c`` (many-copy) or ``Tr(M_c rho)`` (single-shot)."""
        if self.rule not in RULES:
            raise ThermoseedError(f"unknown rule {self.rule!r}; choose one of {RULES}")
        if self.rule == "many-copy":
            scores = self.relative_entropy_scores(states)
            return np.array([log_sum_exp_neg(-row)[1] for row in scores])
        return _povm_probs(self.povm_, self._batch(states))

    def predict(self, states) -> np.ndarray:
        """The most probable class per state (``argmax predict_proba``)."""
        probs = self.predict_proba(states)
        return self.classes_[np.argmax(probs, axis=1)]

    def score(self, states, labels) -> float:
        """Accuracy: the fraction of states whose predicted class equals the label."""
        predicted = self.predict(states)
        y, _ = check_labels(labels, len(predicted), every_class=False)
        return float(np.mean(predicted == y))

    def measurement(self) -> np.ndarray:
        """(C, d, d) single-shot POVM between the fitted models (Helstrom / pretty-good)."""
        check_is_fitted(self, "coef_")
        return self.povm_.copy()

    def decision_observable(self, *, with_priors: bool = True) -> PauliExpansion:
        """Two classes: ``D = sum_j (theta_1j - theta_0j) P_j + offset I``, offset
        ``log Z_1 - log Z_0 - log(p_1/p_0)`` (without the prior term if not ``with_priors``).
        Class 1 iff ``Tr(rho D) < 0``; many-copy ``P(1|rho) = 1 / (1 + exp(Tr(rho D)))``."""
        check_is_fitted(self, "coef_")
        if self.n_hidden_:
            raise ThermoseedError("decision_observable is a Pauli sum on the shared terms for "
                                  "visible class models only (n_hidden = 0); with hidden "
                                  "models use relative_entropy_scores")
        if len(self.classes_) != 2:
            raise ThermoseedError(f"decision_observable needs two classes, this classifier has "
                                  f"{len(self.classes_)}; use relative_entropy_scores")
        offset = float(self.log_partition_[1] - self.log_partition_[0])
        if with_priors:
            offset -= float(np.log(self.priors_[1] / self.priors_[0]))
        return PauliExpansion(self.coef_[1] - self.coef_[0], self.terms_, offset)

    def save(self, path) -> Path:
        """Write one versioned ``gibbs-classifier`` record (``save_classifier``)."""
        return save_classifier(self, path)


_METRICS = (("model_success", "model_success_"), ("data_success", "data_success_"),
            ("cooling", "cooling_"))


def save_classifier(clf: GibbsClassifier, path) -> Path:
    """Save term labels, coefficients and log Z per class, priors, rule, settings, metrics."""
    check_is_fitted(clf, "coef_")
    params = {k: json_scalar(v) for k, v in clf.get_params().items() if k != "terms"}
    if not isinstance(params["priors"], str):
        params["priors"] = np.asarray(params["priors"], float).tolist()
    metrics = {name: json_scalar(getattr(clf, attr)) for name, attr in _METRICS
               if hasattr(clf, attr)}
    arrays = {"coef": clf.coef_, "log_partition": clf.log_partition_, "priors": clf.priors_}
    for name in ("loss", "converged", "class_counts"):
        if hasattr(clf, name + "_"):
            arrays[name] = np.asarray(getattr(clf, name + "_"))
    header = {"model": type(clf).__name__, "n_qubits": clf.terms_.n_qubits,
              "terms": clf.terms_.labels, "params": params, "metrics": metrics}
    return write_record(path, CLASSIFIER_KIND, header, arrays)


def load_classifier(path) -> GibbsClassifier:
    """Load a ``save_classifier`` record; predictions equal those of the saved classifier."""
    header, arrays = read_record(path, CLASSIFIER_KIND)
    try:
        clf = GibbsClassifier(header["terms"], **header["params"])
        terms = TermSet(header["terms"])
        coef, log_z, priors = arrays["coef"], arrays["log_partition"], arrays["priors"]
        metrics = header["metrics"]
    except (KeyError, TypeError) as err:
        raise ThermoseedError(f"classifier file {str(path)!r} is incomplete: missing {err}") \
            from err
    if coef.ndim != 2 or coef.shape[1] != len(terms) or log_z.shape != priors.shape or \
            priors.shape != (coef.shape[0],):
        raise ThermoseedError(f"classifier file {str(path)!r} is inconsistent: coef "
                              f"{coef.shape}, log_partition {log_z.shape}, priors {priors.shape}")
    kind = HiddenGibbsModel if clf.n_hidden else VisibleGibbsModel
    models = [kind.from_coefficients(terms, row, **clf._model_params()) for row in coef]
    clf._set_models(terms, models, priors, float(metrics.get("cooling", 1.0)))
    clf.log_partition_ = log_z
    for name, attr in _METRICS:
        if name in metrics:
            setattr(clf, attr, metrics[name])
    for name in ("loss", "converged", "class_counts"):
        if name in arrays:
            setattr(clf, name + "_", arrays[name])
    return clf
