"""Shared behaviour of the scenario data records: length and atomic ``.npz`` export."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from thermoseed.pretrain.files import atomic_save_npz


class ScenarioRecord:
    """Mixin for frozen dataclasses with ``labels`` and an ``arrays()`` payload method."""

    labels: np.ndarray

    def __len__(self) -> int:
        return len(self.labels)

    def arrays(self) -> dict[str, np.ndarray]:  # pragma: no cover - defined by each record
        raise NotImplementedError

    def save_npz(self, path) -> Path:
        """Write the schema of ``pretrain.data`` atomically; returns the path."""
        return atomic_save_npz(path, self.arrays())
