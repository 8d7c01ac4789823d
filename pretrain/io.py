"""Versioned record files: a JSON header plus named arrays in one ``.npz`` (no pickle).

The header is stored as a unicode array under ``__header__`` and holds ``format``,
``version``, ``kind`` and the kind's own fields. Writes are atomic (temp file + rename).
Fitted Gibbs models are the ``"gibbs-model"`` kind; bridge/ stores its results the same way.
"""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path
from typing import Any

import numpy as np

from .errors import ThermoseedError
from .files import atomic_save_npz, load_npz

FORMAT = "thermoseed-record"
FORMAT_VERSION = 1
_HEADER_KEY = "__header__"
MODEL_KIND = "gibbs-model"


def write_record(path, kind: str, header: dict[str, Any], arrays: dict[str, np.ndarray]) -> Path:
    """Atomically write a record of ``kind`` with a JSON-able ``header`` and arrays."""
    full = {"format": FORMAT, "version": FORMAT_VERSION, "kind": kind,
            "written": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")}
    full.update(header)
    try:
        text = json.dumps(full, sort_keys=True, allow_nan=True)
    except TypeError as err:
        raise ThermoseedError(f"record header is not JSON-serialisable: {err}") from err
    if _HEADER_KEY in arrays:
        raise ThermoseedError(f"array name {_HEADER_KEY!r} is reserved")
    return atomic_save_npz(path, {_HEADER_KEY: np.array(text), **arrays})


def read_record(path, kind: str | None = None) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read a record; check format, version and (if given) kind. Returns (header, arrays)."""
    arrays = load_npz(path, what="record file")
    if _HEADER_KEY not in arrays:
        raise ThermoseedError(f"{str(path)!r} is not a thermoseed record (no header)")
    try:
        header = json.loads(str(arrays.pop(_HEADER_KEY)))
    except (json.JSONDecodeError, ValueError) as err:
        raise ThermoseedError(f"{str(path)!r} has a corrupt header: {err}") from err
    if not isinstance(header, dict) or header.get("format") != FORMAT:
        raise ThermoseedError(f"{str(path)!r} is not a thermoseed record file")
    version = header.get("version")
    if not isinstance(version, int) or version > FORMAT_VERSION:
        raise ThermoseedError(
            f"{str(path)!r} has format version {version!r}, newer than this thermoseed reads "
            f"({FORMAT_VERSION}); upgrade thermoseed"
        )
    if kind is not None and header.get("kind") != kind:
        raise ThermoseedError(
            f"{str(path)!r} holds a {header.get('kind')!r} record, not a {kind!r} one"
        )
    return header, arrays


def save_model(model, path) -> Path:
    """Save a fitted ``VisibleGibbsModel`` (term labels, coefficients, settings, metrics)."""
    from ._base import check_is_fitted

    check_is_fitted(model, "coef_")
    params = {k: v for k, v in model.get_params().items() if k != "terms"}
    metrics = {
        name: _jsonable(getattr(model, attr))
        for name, attr in [("loss", "loss_"), ("grad_norm", "grad_norm_"), ("n_iter", "n_iter_"),
                           ("converged", "converged_"), ("data_entropy", "data_entropy_")]
        if hasattr(model, attr)
    }
    header = {"model": type(model).__name__, "n_qubits": model.terms_.n_qubits,
              "terms": model.terms_.labels, "params": params, "metrics": metrics}
    arrays = {"coef": np.asarray(model.coef_, float)}
    if hasattr(model, "target_moments_"):
        arrays["target_moments"] = np.asarray(model.target_moments_, float)
    if hasattr(model, "history_"):
        arrays["history_loss"] = np.asarray(model.history_["loss"], float)
        arrays["history_grad_norm"] = np.asarray(model.history_["grad_norm"], float)
    return write_record(path, MODEL_KIND, header, arrays)


def load_model(path):
    """Load a model file written by ``save_model``; the result answers every fitted query."""
    from .models import VisibleGibbsModel

    header, arrays = read_record(path, MODEL_KIND)
    try:
        model = VisibleGibbsModel.from_coefficients(header["terms"], arrays["coef"],
                                                    **header["params"])
        metrics = header["metrics"]
    except (KeyError, TypeError) as err:
        raise ThermoseedError(f"model file {str(path)!r} is incomplete: missing {err}") from err
    for name, attr in [("loss", "loss_"), ("grad_norm", "grad_norm_"), ("n_iter", "n_iter_"),
                       ("converged", "converged_"), ("data_entropy", "data_entropy_")]:
        if name in metrics:
            setattr(model, attr, metrics[name])
    if "target_moments" in arrays:
        model.target_moments_ = arrays["target_moments"]
    if "history_loss" in arrays:
        if "history_grad_norm" not in arrays:
            raise ThermoseedError(f"model file {str(path)!r} is incomplete: missing "
                                  "'history_grad_norm'")
        model.history_ = {"loss": arrays["history_loss"].tolist(),
                          "grad_norm": arrays["history_grad_norm"].tolist()}
    return model


def _jsonable(value):
    if isinstance(value, np.generic):
        return value.item()
    return value
