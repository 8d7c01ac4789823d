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
