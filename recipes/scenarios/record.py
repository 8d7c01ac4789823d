"""Shared behaviour of the scenario data records: length and atomic ``.npz`` export."""

from __future__ import annotations

from dataclasses import fields
from pathlib import Path

import numpy as np

from thermoseed.pretrain.files import atomic_save_npz


class ScenarioRecord:
    """Mixin for frozen dataclasses with ``labels`` and an ``arrays()`` payload method."""

    labels: np.ndarray

    def __len__(self) -> int:
        return len(self.labels)

    def arrays(self) -> dict[str, np.ndarray]:
        """The ``.npz`` payload: every field but ``n_qubits`` (``density``, ``labels`` and
        the per-sample parameters), scalars as 0-d arrays."""
        return {f.name: np.asarray(getattr(self, f.name)) for f in fields(self)
                if f.name != "n_qubits"}

    def save_npz(self, path) -> Path:
        """Write the schema of ``pretrain.data`` atomically; returns the path."""
        return atomic_save_npz(path, self.arrays())
