"""Initialisation strategies for the plateau comparison: ``init(shape, rng) -> ndarray``.

Every strategy draws the flat parameters ``[e, h]`` of the two-block probe circuit
``V = U(h) U(e)^dag`` (``bridge.circuits.TwoBlock``) from a seeded generator:

    ``uniform``          every angle uniform on ``[0, 2 pi)``
    ``small_angle``      every angle ``N(0, scale^2)``
    ``identity_blocks``  ``e`` uniform, ``h = e`` (``V = I``)
    ``pretrained``       one Gibbs model on a bootstrap resample of the training states,
                         compiled into the encoder (latent form); head = identity (zero
                         parameters: the circuit must be the identity there, checked)
    ``pretrained_perturbed``  the same plus ``N(0, scale^2)`` on every angle
    ``class_models``     one Gibbs model per class on a bootstrap resample (stratified),
                         the single-shot rule between them (Helstrom) compiled into the whole
                         circuit V with the classifier's readout wire(s)
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from contextlib import contextmanager
from typing import NamedTuple

import numpy as np

from thermoseed.bridge.ansatz import Ansatz, apply_ansatz
from thermoseed.bridge.circuits import TwoBlock
from thermoseed.bridge.compile import compile_latent
from thermoseed.bridge.readout import readout_compile
from thermoseed.bridge.templates import TEMPLATES
from thermoseed.bridge.warm_starts import warm_start
from thermoseed.pretrain import GibbsClassifier, VisibleGibbsModel, as_training_data, graph_terms
from thermoseed.pretrain.errors import ConvergenceWarning, ThermoseedError
from thermoseed.pretrain.labelled import LabelledData

STRATEGIES = ("uniform", "small_angle", "identity_blocks", "pretrained", "pretrained_perturbed",
              "class_models")
#: Default standard deviation of the small-angle strategy (radians).
SMALL_ANGLE_SCALE = 0.1
#: Default standard deviation of the perturbation added by ``pretrained_perturbed`` (radians).
PERTURBATION_SCALE = 0.05

#: Success-probability gap to the attainable value at which a class-model compile stops.
WARM_START_GAP = 1e-3
#: Accepted deviation of ``|<psi|U(0)|psi>|`` from 1 (and between two such phases) for
#: ``U(0) = I`` up to a global phase (double-precision round-off of a few hundred gates).
IDENTITY_TOL = 1e-9

Init = Callable[[tuple, np.random.Generator], np.ndarray]


class Strategy(NamedTuple):
    """A named initialisation: ``init(shape, rng) -> ndarray`` (deterministic given rng)."""

    name: str
    init: Init
    options: dict

    def __call__(self, shape, rng: np.random.Generator) -> np.ndarray:
        return self.init(tuple(shape), rng)


def uniform() -> Strategy:
    """Every angle i.i.d. uniform on ``[0, 2 pi)``."""
    return Strategy("uniform", lambda shape, rng: rng.uniform(0.0, 2 * np.pi, size=shape), {})


def small_angle(scale: float = SMALL_ANGLE_SCALE) -> Strategy:
    """Every angle i.i.d. ``N(0, scale^2)`` (Zhang et al., arXiv:2203.09376, who take
    ``scale^2 ~ 1/depth``)."""
    s = _positive(scale, "scale")
    return Strategy("small_angle", lambda shape, rng: s * rng.standard_normal(shape),
                    {"scale": s})


def identity_blocks() -> Strategy:
    """Grant et al. (arXiv:1903.05076): ``e`` uniform on ``[0, 2 pi)`` and ``h = e``, so
    ``V = U(h) U(e)^dag = I`` at initialisation. Needs the flat parameters of a two-block
    circuit whose blocks share one template (an even length ``2 k``)."""

    def init(shape, rng):
        if len(shape) != 1 or shape[0] % 2:
            raise ThermoseedError(
                f"identity_blocks needs the flat parameters [e, h] of a two-block circuit with "
                f"one template for both blocks (even length), got shape {shape}"
            )
        e = rng.uniform(0.0, 2 * np.pi, size=shape[0] // 2)
        return np.concatenate([e, e])

    return Strategy("identity_blocks", init, {})


class PretrainSettings(NamedTuple):
    """Gibbs model and compile options of the pretrained strategies (all JSON-able)."""

    graph: str = "line"
    fields: str = "XZ"
    couplings: tuple = ("ZZ",)
    l2: float = 1e-3
    restarts: int = 1
    compile_iter: int = 300
    parity: bool = False
    cooling: str | float = "auto"

    def terms(self, n_qubits: int):
        """The Gibbs models' term set at ``n_qubits`` (``graph_terms`` of these settings)."""
        return graph_terms(n_qubits, self.graph, fields=self.fields,
                           couplings=tuple(self.couplings), parity=bool(self.parity))


def zero_is_identity(unit: Ansatz) -> bool:
    """Whether ``U(0) = e^{ia} I``: a built-in's registry flag; for the user's circuit,
    ``z_j = <psi_j|U(0)|psi_j>`` on two seeded random states (seed 0) with ``|z_j| = 1`` and
    ``z_1 = z_2`` (within ``IDENTITY_TOL``): a random state is an eigenvector of a unitary
    other than ``cI`` with probability 0."""
    if unit.builtin:
        return bool(TEMPLATES[unit.name].identity_at_zero)
    d = 2**unit.n_wires
    rng = np.random.default_rng(0)
    psi = rng.standard_normal((d, 2)) + 1j * rng.standard_normal((d, 2))
    psi /= np.linalg.norm(psi, axis=0)
    image = np.asarray(apply_ansatz(unit, np.zeros(unit.shape), psi))
    z = np.sum(psi.conj() * image, axis=0)
    return bool(np.all(np.abs(np.abs(z) - 1.0) < IDENTITY_TOL)
                and abs(z[0] - z[1]) < IDENTITY_TOL)


def identity_head_params(head: Ansatz) -> np.ndarray:
    """Zero parameters when the head is the identity there (``zero_is_identity``), else one
    ``ThermoseedError`` line (the pretrained strategies need an identity head)."""
    if not zero_is_identity(head):
        raise ThermoseedError(
            f"the pretrained strategies need a head that is the identity at zero parameters; "
            f"circuit {head.name!r} is not (e.g. a fixed CNOT): build it from rotations and "
            "controlled rotations, or compare identity_blocks / class_models instead")
    return np.zeros(head.shape)


def pretrained(data: LabelledData, encoder: Ansatz, head: Ansatz,
               settings: PretrainSettings | None = None,
               perturbation: float = 0.0) -> Strategy:
    """Warm start from an independent pre-training run per draw.

    ``init((n_params,), rng)`` (flat ``[e, h]``): bootstrap-resample the training states
    (B draws with replacement, from rng), fit ``VisibleGibbsModel`` on them,
    ``compile_latent`` into the encoder (compile seed from rng), ``warm_start``
    (head = zeros = identity), then add
    ``N(0, perturbation^2)`` to every angle when ``perturbation > 0``.
    """
    settings = PretrainSettings() if settings is None else settings
    n = encoder.n_wires
    terms = settings.terms(n)
    states = np.asarray(data.train_states)
    blocks = TwoBlock(encoder, head)
    head_zero = identity_head_params(head)
    pert = float(perturbation)
    if not np.isfinite(pert) or pert < 0:
        raise ThermoseedError(f"perturbation must be a finite number >= 0, got {perturbation!r}")

    def init(shape, rng):
        if tuple(shape) != blocks.shape:
            raise ThermoseedError(
                f"pretrained init is for the flat shape {blocks.shape}, got {shape}"
            )
        boot = rng.integers(0, len(states), size=len(states))
        kind = "states" if states.ndim == 2 else "density"
        td = as_training_data(states[boot], kind=kind)
        model = VisibleGibbsModel(terms, l2=settings.l2).fit(td)
        with _bounded_compile():
            result = compile_latent(model, encoder, seed=int(rng.integers(2**31)),
                                    restarts=int(settings.restarts),
                                    max_iter=int(settings.compile_iter))
        out = np.asarray(warm_start(result, head=head, head_identity=head_zero), dtype=float)
        if pert > 0:
            out = out + pert * rng.standard_normal(shape)
        return out

    name = "pretrained_perturbed" if pert > 0 else "pretrained"
    return Strategy(name, init, {"perturbation": pert, **settings._asdict()})


@contextmanager
def _bounded_compile():
    """A draw's compile is bounded by ``compile_iter`` on purpose: its quality shows in the
    numbers the sweep records (gradients, step-0 accuracy), not in a warning per draw."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        yield


def class_models(data: LabelledData, encoder: Ansatz, head: Ansatz,
                 settings: PretrainSettings | None = None, readout: tuple = (0,)) -> Strategy:
    """Label-aware warm start from an independent pre-training run per draw.

    ``init((n_params,), rng)``: resample the training states with replacement within each
    class (from rng), fit a ``GibbsClassifier`` (one Gibbs model per class on the settings'
    term set, balanced priors, the settings' cooling), and maximise the readout's success
    probability on its ``class_states()``
    ``sum_c p_c Tr(Pi_c V sigma_c V^dag)`` by ``readout_compile`` (restarts and iterations
    from the settings, seed from rng; stopped ``WARM_START_GAP`` short of the attainable
    value, on the components of the class models holding all but ``WARM_START_GAP`` of
    their weight). When the encoder is the identity at zero parameters (``"soft"``) the rule
    goes into the head, ``V = U(h)``, with the encoder at zero (the mirror image of
    ``pretrained``); otherwise into the whole circuit ``V = U(h) U(e)^dag``.
    """
    settings = PretrainSettings() if settings is None else settings
    n = encoder.n_wires
    terms = settings.terms(n)
    states, labels = np.asarray(data.train_states), np.asarray(data.train_labels)
    blocks = TwoBlock(encoder, head)
    head_only = encoder.builtin and TEMPLATES[encoder.name].identity_at_zero
    circuit = head if head_only else blocks.as_ansatz()

    def init(shape, rng):
        if tuple(shape) != blocks.shape:
            raise ThermoseedError(
                f"class_models init is for the flat shape {blocks.shape}, got {shape}")
        boot = np.concatenate([rng.choice(np.flatnonzero(labels == c),
                                          size=int(np.sum(labels == c)))
                               for c in np.unique(labels)])
        clf = GibbsClassifier(terms, l2=settings.l2, rule="single-shot",
                              cooling=settings.cooling).fit(states[boot], labels[boot])
        with _bounded_compile():
            result = readout_compile(clf.class_states(), circuit,
                                     tuple(readout), priors=clf.priors_,
                                     restarts=int(settings.restarts),
                                     seed=int(rng.integers(2**31)),
                                     max_iter=int(settings.compile_iter),
                                     gap=WARM_START_GAP, truncate=WARM_START_GAP)
        params = np.asarray(result.params, dtype=float).ravel()
        return np.concatenate([np.zeros(encoder.n_params), params]) if head_only else params

    return Strategy("class_models", init, {"readout": list(readout), **settings._asdict()})


def make_strategy(name: str, *, scale: float | None = None, data: LabelledData | None = None,
                  encoder: Ansatz | None = None, head: Ansatz | None = None,
                  settings: PretrainSettings | None = None, readout: tuple = (0,)) -> Strategy:
    """A strategy by name (``STRATEGIES``); ``scale`` is the small-angle or perturbation
    standard deviation; the pretrained ones need ``data``, ``encoder`` and ``head``;
    ``readout`` is the classifier's readout wire(s) (``class_models``)."""
    if name == "uniform":
        return uniform()
    if name == "small_angle":
        return small_angle(SMALL_ANGLE_SCALE if scale is None else scale)
    if name == "identity_blocks":
        return identity_blocks()
    if name in ("pretrained", "pretrained_perturbed"):
        if data is None or encoder is None or head is None:
            raise ThermoseedError(f"strategy {name!r} needs labelled data (data=LabelledData)")
        pert = 0.0 if name == "pretrained" else (PERTURBATION_SCALE if scale is None else scale)
        if name == "pretrained_perturbed":
            _positive(pert, "scale")
        return pretrained(data, encoder, head, settings, pert)
    if name == "class_models":
        if data is None or encoder is None or head is None:
            raise ThermoseedError(f"strategy {name!r} needs labelled data (data=LabelledData)")
        return class_models(data, encoder, head, settings, readout)
    raise ThermoseedError(f"unknown strategy {name!r}; choose one of {STRATEGIES}")


def _positive(value, what: str) -> float:
    v = float(value)
    if not np.isfinite(v) or v <= 0:
        raise ThermoseedError(f"{what} must be a finite number > 0, got {value!r}")
    return v
