"""Hyperparameter introspection derived from ``__init__`` signatures (estimator contract)."""

from __future__ import annotations

import inspect
from typing import Any

from .errors import NotFittedError, ThermoseedError


class ParamsMixin:
    """``get_params``/``set_params``/``__repr__`` from the constructor signature.

    Subclasses store every constructor argument unchanged under its own name.
    """

    @classmethod
    def _param_names(cls) -> list[str]:
        sig = inspect.signature(cls.__init__)
        return [
            p.name
            for p in sig.parameters.values()
            if p.name != "self" and p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)
        ]

    def get_params(self) -> dict[str, Any]:
        """Hyperparameters as a dict, read back from the attributes of the same name."""
        return {name: getattr(self, name) for name in self._param_names()}

    def set_params(self, **params: Any):
        """Set hyperparameters by name; unknown names raise ``ThermoseedError``."""
        valid = set(self._param_names())
        for name, value in params.items():
            if name not in valid:
                raise ThermoseedError(
                    f"unknown parameter {name!r} for {type(self).__name__}; "
                    f"valid names: {sorted(valid)}"
                )
            setattr(self, name, value)
        return self

    def __repr__(self) -> str:
        sig = inspect.signature(type(self).__init__)
        shown = []
        for name, value in self.get_params().items():
            default = sig.parameters[name].default
            if default is inspect.Parameter.empty or _differs(value, default):
                shown.append(f"{name}={value!r}")
        return f"{type(self).__name__}({', '.join(shown)})"


def _differs(value: Any, default: Any) -> bool:
    try:
        return bool(value != default)
    except (ValueError, TypeError):
        return True


def check_is_fitted(estimator: Any, attribute: str) -> None:
    """Raise ``NotFittedError`` unless ``estimator`` has the fitted ``attribute``."""
    if not hasattr(estimator, attribute):
        raise NotFittedError(
            f"this {type(estimator).__name__} is not fitted yet; call fit(data) first"
        )
