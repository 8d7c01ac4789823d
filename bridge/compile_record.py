"""Compile-result files: the ``"compile-result"`` record kind (JSON header + npz, no pickle).

A built-in ansatz is rebuilt from its name and layer count; a user's ansatz cannot be
serialised, so loading such a file needs the same ansatz passed in (its shape is checked).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from thermoseed.bridge.ansatz import Ansatz, make_ansatz
from thermoseed.bridge.compile import CompileReport, CompileResult
from thermoseed.bridge.latent import Latent
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.files import json_scalar, read_record, write_record

COMPILE_KIND = "compile-result"


def model_kind(result: CompileResult) -> tuple[str, int]:
    """``("hidden-gibbs-model", n_hidden)`` when the compiled model was a hidden model (its
    labels span ``n_visible + n_hidden`` wires: ``HiddenGibbsModel.visible_view``), else
    ``("visible-gibbs-model", 0)``."""
    width = len(result.model_terms[0]) if len(result.model_terms) else result.n_visible
    n_hidden = width - result.n_visible
    if n_hidden < 0:
        raise ThermoseedError(f"the compiled model's labels span {width} wires, fewer than "
                              f"its {result.n_visible} visible qubits; the result is damaged")
    return ("hidden-gibbs-model" if n_hidden else "visible-gibbs-model"), n_hidden


def save_compile(result: CompileResult, path) -> Path:
    """Write a compile result atomically; the header's ``model`` block says what was
    compiled (``model_kind``: a hidden model's visible state, or a visible model)."""
    a = result.ansatz
    header = {
        "form": result.form,
        "ansatz": {"name": a.name, "n_layers": a.n_layers, "shape": list(a.shape),
                   "n_wires": a.n_wires, "builtin": a.builtin},
        "n_visible": result.n_visible,
        "model_terms": list(result.model_terms),
        "model": dict(zip(("kind", "n_hidden"), model_kind(result), strict=True)),
        "report": {k: json_scalar(v) for k, v in result.report._asdict().items()},
    }
    arrays = {"params": np.asarray(result.params, float),
              "model_coef": np.asarray(result.model_coef, float),
              "history": np.asarray(result.history, float)}
    if result.latent is not None:
        header["latent"] = {"kind": result.latent.kind, "captured": result.latent.captured}
        arrays["latent_basis"] = np.asarray(result.latent.basis, np.int64)
        arrays["latent_probs"] = np.asarray(result.latent.probs, float)
    return write_record(path, COMPILE_KIND, header, arrays)


def load_compile(path, ansatz: Ansatz | None = None) -> CompileResult:
    """Read a compile result; pass ``ansatz`` when it was compiled into a user's ansatz."""
    header, arrays = read_record(path, COMPILE_KIND)
    try:
        spec = header["ansatz"]
        shape = tuple(spec["shape"])
        if ansatz is None:
            if not spec["builtin"]:
                raise ThermoseedError(
                    f"{str(path)!r} was compiled into the user ansatz {spec['name']!r}; "
                    "pass the same ansatz to load it"
                )
            ansatz = make_ansatz(spec["name"], spec["n_wires"], spec["n_layers"])
        if ansatz.shape != shape:
            raise ThermoseedError(
                f"{str(path)!r} holds parameters of shape {shape}, but the given ansatz "
                f"expects {ansatz.shape}"
            )
        latent = None
        if "latent" in header:
            latent = Latent(header["latent"]["kind"], arrays["latent_basis"],
                            arrays["latent_probs"], header["latent"]["captured"])
        report = CompileReport(**header["report"])
        return CompileResult(header["form"], ansatz, ansatz.check(arrays["params"]), latent,
                             report, header["n_visible"], header["model_terms"],
                             arrays["model_coef"], arrays["history"].tolist())
    except (KeyError, TypeError) as err:
        raise ThermoseedError(f"compile file {str(path)!r} is incomplete: {err}") from err
