"""Error and warning classes shared by every thermoseed layer."""

from __future__ import annotations


class ThermoseedError(ValueError):
    """A user-facing error: bad input, bad file, bad option. The message names the fix."""


class NotFittedError(ThermoseedError):
    """A method that needs a fitted estimator was called before ``fit``."""


class DivergenceWarning(UserWarning):
    """Coefficients grow without bound (data at or near rank deficiency)."""


class ConvergenceWarning(UserWarning):
    """An optimiser stopped at its iteration cap before meeting its tolerance."""


class SlowDenseWarning(UserWarning):
    """A dense step (one 2^n x 2^n eigendecomposition) is estimated to take long on this
    machine; the message gives the estimate."""


class WashoutWarning(UserWarning):
    """A hidden-qubit model's most probable eigenvectors are about as entangled across the
    visible/hidden cut as random states: tracing out the hidden qubits washes the model out."""
