"""thermoseed pre-training: fit Gibbs models (quantum Boltzmann machines) to quantum data.

Numpy and scipy only; nothing here imports ``thermoseed.bridge`` or ``thermoseed.recipes``.

Layer order, lowest first (a module imports only modules before it):
    lazy -> errors -> checks -> memory -> _base -> files -> linalg -> frechet -> paulis ->
    data -> shadows -> records -> uncertainty -> labelled -> engines -> optim -> divergence ->
    models -> hidden_layout -> hidden_engines -> hidden -> measurements -> classifier ->
    term_growth -> diagnostics -> hidden_diagnostics
"""

from thermoseed.pretrain.lazy import lazy_exports

#: Public names by defining module, imported on first use (PEP 562): ``import
#: thermoseed.pretrain`` stays cheap (the command line's ``--help`` never loads scipy).
EXPORTS = {
    "classifier": ("GibbsClassifier", "load_classifier", "save_classifier"),
    "data": ("as_training_data", "from_density_matrices", "from_qfunc", "from_states",
        "load_training_data", "TrainingData"),
    "diagnostics": ("fidelity", "moment_residuals", "relative_entropy", "trace_distance"),
    "engines": ("DenseEngine", "GibbsEngine", "GibbsEvaluation", "make_engine",
        "TypicalityEngine"),
    "errors": ("ConvergenceWarning", "DivergenceWarning", "NotFittedError", "SlowDenseWarning",
        "ThermoseedError", "WashoutWarning"),
    "files": ("read_record", "write_record"),
    "frechet": ("daleckii_krein", "exp_divided_differences", "frechet_exp", "frechet_log",
        "log_divided_differences"),
    "hidden": ("HiddenGibbsModel", "ReducedGibbsView", "ReducedTerms", "load_hidden_model",
        "save_hidden_model"),
    "hidden_diagnostics": ("HiddenFitReport", "hidden_fit_report", "page_entropy",
        "WashoutReport", "washout_report"),
    "hidden_engines": ("BlockHiddenEngine", "DenseHiddenEngine", "HiddenEvaluation"),
    "hidden_layout": ("block_structure", "hidden_terms", "term_roles"),
    "measurements": ("helstrom_measurement", "helstrom_success", "pretty_good_measurement",
        "success_probability"),
    "labelled": ("LabelledData", "split_labelled", "stratified_split"),
    "linalg": ("von_neumann_entropy",),
    "models": ("load_model", "save_model", "VisibleGibbsModel"),
    "optim": ("adam", "FitResult", "minimize"),
    "paulis": ("dense_hamiltonian", "expectations", "from_pennylane", "graph_edges",
        "graph_terms", "pauli_traces", "PauliExpansion", "PauliString", "sparse_hamiltonian",
        "TermSet", "to_pennylane"),
    "records": ("basis_counts", "BasisCounts", "from_records", "is_records_file",
        "load_records", "pauli_shots", "PauliShots", "save_records", "simulate_counts",
        "simulate_shots"),
    "shadows": ("BasisBiasWarning", "MomentEstimates", "UnmeasuredTermWarning"),
    "term_growth": ("candidate_terms", "grow_terms", "TermGrowth"),
    "uncertainty": ("coefficient_covariance", "kubo_mori_hessian", "log_partition_hessian"),
}

__version__ = "0.1.0"
__getattr__, __dir__, __all__ = lazy_exports(__name__, EXPORTS)
