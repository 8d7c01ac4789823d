"""Demo scenarios: small, seeded data generators (and later their TOML recipes).

``magnet_phase``: transverse-field Ising ground / low-temperature states, ordered vs disordered.
``probe_drift``: noisy GHZ-like probe states with a drifting phase, within vs beyond tolerance.
``neighbour_xxz``: XXZ-chain terms, thermal states and ground energies for warm starts.

Recipes build on ``pretrain`` only (never ``bridge``); every generator writes the ``.npz``
schema that ``pretrain.data.load_training_data`` reads.
"""
