"""thermoseed pre-training: fit Gibbs models (quantum Boltzmann machines) to quantum data.

Numpy and scipy only; nothing here imports ``thermoseed.bridge`` or ``thermoseed.recipes``.

Layer order, lowest first (a module imports only modules before it):
    errors -> checks -> _base -> files -> linalg -> paulis -> data -> labelled -> engines ->
    optim -> models -> classifier -> term_growth -> diagnostics
"""

from .classifier import (
    GibbsClassifier,
    helstrom_measurement,
    helstrom_success,
    load_classifier,
    pretty_good_measurement,
    save_classifier,
    success_probability,
)
from .data import (
    TrainingData,
    as_training_data,
    from_density_matrices,
    from_qfunc,
    from_states,
    load_training_data,
)
from .diagnostics import fidelity, moment_residuals, relative_entropy, trace_distance
from .engines import DenseEngine, GibbsEngine, GibbsEvaluation, make_engine
from .errors import ConvergenceWarning, DivergenceWarning, NotFittedError, ThermoseedError
from .files import read_record, write_record
from .labelled import LabelledData, split_labelled, stratified_split
from .linalg import von_neumann_entropy
from .models import VisibleGibbsModel, load_model, save_model
from .optim import FitResult, adam, minimize
from .paulis import (
    PauliExpansion,
    PauliString,
    TermSet,
    dense_hamiltonian,
    expectations,
    from_pennylane,
    graph_edges,
    graph_terms,
    pauli_traces,
    sparse_hamiltonian,
    to_pennylane,
)
from .term_growth import TermGrowth, candidate_terms, grow_terms

__version__ = "0.1.0"

__all__ = [
    "adam", "as_training_data", "candidate_terms", "ConvergenceWarning", "dense_hamiltonian",
    "DenseEngine", "DivergenceWarning", "expectations", "fidelity", "FitResult",
    "from_density_matrices", "from_pennylane", "from_qfunc", "from_states", "GibbsClassifier",
    "GibbsEngine", "GibbsEvaluation", "graph_edges", "graph_terms", "grow_terms",
    "helstrom_measurement", "helstrom_success", "LabelledData", "load_classifier", "load_model",
    "load_training_data", "make_engine", "minimize", "moment_residuals", "NotFittedError",
    "pauli_traces", "PauliExpansion", "PauliString", "pretty_good_measurement", "read_record",
    "relative_entropy", "save_classifier", "save_model", "sparse_hamiltonian", "split_labelled",
    "stratified_split", "success_probability", "TermGrowth", "TermSet", "ThermoseedError",
    "to_pennylane", "trace_distance", "TrainingData", "VisibleGibbsModel", "von_neumann_entropy",
    "write_record",
]
