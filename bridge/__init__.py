"""thermoseed bridge: from a fitted Gibbs model to a warm-started PennyLane circuit.

The PennyLane library proper (template registry, ansatz, compile, warm start, classifier
circuit, eigensolver) and, on top of it, the plateau lab in ``bridge.plateau`` (strategies,
gradient probes, statistics, sweeps, reports). It imports ``thermoseed.pretrain`` and never
``thermoseed.recipes``.

Layer order, lowest first (a module imports only modules before it):
    gate_sweep -> templates -> ansatz -> families -> circuits -> latent -> compile -> readout ->
    compile_record -> warm_starts -> classifier -> eigensolver -> plateau.gradients ->
    plateau.strategies -> plateau.probes -> plateau.stats -> plateau.executors ->
    plateau.sweep -> plateau.report
"""

from thermoseed.pretrain.lazy import lazy_exports

#: Public names by defining module, imported on first use (PEP 562).
EXPORTS = {
    "ansatz": ("Ansatz", "make_ansatz", "unitary", "user_ansatz"),
    "circuits": ("TwoBlock",),
    "classifier": ("DownstreamCircuit", "train_classifier"),
    "compile": ("CompileResult", "compile_latent", "compile_purified"),
    "compile_record": ("load_compile", "save_compile"),
    "eigensolver": ("run_eigensolver",),
    "families": ("CircuitFamily", "circuit_family"),
    "readout": ("readout_compile",),
    "templates": ("TEMPLATES",),
    "warm_starts": ("WarmStart", "load_warm_start", "save_warm_start", "warm_start"),
    "plateau.probes": ("probe", "probe_seeds", "train_curve"),
    "plateau.report": ("write_report",),
    "plateau.sweep": ("make_grid", "run_sweep"),
}
__getattr__, __dir__, __all__ = lazy_exports(__name__, EXPORTS)
