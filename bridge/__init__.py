"""thermoseed bridge: from a fitted Gibbs model to a warm-started PennyLane circuit.

Layering (each module imports at module level only from those before it, and from
pretrain/): unitaries, ansatz, compile, compile_io, seed, discriminative, eigensolver,
plateau_grad, plateau, plateau_stats, sweep, report, findings, neighbour, recipe_config,
pipeline, cli, __main__.
"""
