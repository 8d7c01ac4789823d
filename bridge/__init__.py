"""thermoseed bridge: from a fitted Gibbs model to a warm-started PennyLane circuit.

Layering (each module imports only from those before it, and from pretrain/): ansatz,
compile, seed, discriminative, plateau, sweep, report, cli.
"""
