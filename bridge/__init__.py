"""thermoseed bridge: from a fitted Gibbs model to a warm-started PennyLane circuit.

The PennyLane library proper (template registry, ansatz, compile, warm start, classifier
circuit, eigensolver) and, on top of it, the plateau lab in ``bridge.plateau`` (strategies,
gradient probes, statistics, sweeps, reports). It imports ``thermoseed.pretrain`` and never
``thermoseed.recipes``.

Layer order, lowest first (a module imports only modules before it):
    templates -> ansatz -> circuits -> compile -> readout_compile -> compile_record ->
    warm_start -> classifier -> eigensolver -> plateau.gradients -> plateau.strategies ->
    plateau.probes -> plateau.stats -> plateau.sweep -> plateau.report
"""
