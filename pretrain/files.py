"""Atomic writes and pickle-free array loading: the only file primitives thermoseed uses."""

from __future__ import annotations

import io
import os
import tempfile
import tokenize
import zipfile
from pathlib import Path

import numpy as np

from .errors import ThermoseedError

#: What numpy/zipfile raise on a damaged file: truncated members (EOFError), mangled zip
#: headers (NotImplementedError: "compression method"; RuntimeError: "encrypted"), a mangled
#: ``.npy`` header dict (tokenize.TokenError, SyntaxError).
CORRUPT_FILE_ERRORS = (
    ValueError, OSError, EOFError, KeyError, zipfile.BadZipFile, NotImplementedError,
    RuntimeError, tokenize.TokenError, SyntaxError,
)


def atomic_write_bytes(path, payload: bytes) -> Path:
    """Write ``payload`` to ``path`` via a temp file in the same folder and ``os.replace``."""
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


def atomic_save_npz(path, arrays: dict[str, np.ndarray]) -> Path:
    """``np.savez`` to ``path`` atomically (object arrays are refused)."""
    for key, value in arrays.items():
        if np.asarray(value).dtype == object:
            raise ThermoseedError(f"array {key!r} has dtype object; refusing to save it")
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    return atomic_write_bytes(path, buffer.getvalue())


def load_npz(path, *, what: str = "file") -> dict[str, np.ndarray]:
    """Read every array of an ``.npz`` with ``allow_pickle=False``; clear error if corrupt."""
    p = Path(path)
    if not p.exists():
        raise ThermoseedError(f"{what} {str(p)!r} does not exist")
    try:
        loaded = np.load(p, allow_pickle=False)
        if isinstance(loaded, np.ndarray):
            raise ThermoseedError(f"{what} {str(p)!r} is a single .npy array, not an .npz file")
        with loaded:
            return {key: loaded[key] for key in loaded.files}
    except ThermoseedError:
        raise
    except CORRUPT_FILE_ERRORS as err:
        raise ThermoseedError(f"{what} {str(p)!r} is corrupt or not an .npz file: {err}") from err
