"""File primitives: atomic writes, pickle-free array loading, versioned record files.

A record is a JSON header plus named arrays in one ``.npz`` (no pickle). The header is stored
as a unicode array under ``__header__`` and holds ``format``, ``version``, ``kind`` and the
kind's own fields. Writes are atomic (temp file + rename). Every file thermoseed writes is a
record of some kind; the kinds live beside the objects they store.
"""

from __future__ import annotations

import datetime as _dt
import io
import json
import os
import tempfile
import tokenize
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from .errors import ThermoseedError

#: What numpy/zipfile raise on a damaged file: truncated members (EOFError), mangled zip
#: headers (NotImplementedError: "compression method"; RuntimeError: "encrypted"), a mangled
#: ``.npy`` header dict (tokenize.TokenError, SyntaxError).
CORRUPT_FILE_ERRORS = (
    ValueError, OSError, EOFError, KeyError, zipfile.BadZipFile, NotImplementedError,
    RuntimeError, tokenize.TokenError, SyntaxError,
)


def _umask() -> int:
    """The process umask (read by setting and restoring it; there is no getter)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def atomic_write_bytes(path, payload: bytes) -> Path:
    """Write ``payload`` to ``path`` via a temp file in the same folder and ``os.replace``.
    The file gets the permissions a plain ``open`` would give it (0666 minus the umask), not
    the temp file's private 0600: collaborators on a shared machine can read the results."""
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        os.chmod(tmp, 0o666 & ~_umask())
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


FORMAT = "thermoseed-record"
FORMAT_VERSION = 1
RECORD_HEADER = "__header__"


def write_record(path, kind: str, header: dict[str, Any], arrays: dict[str, np.ndarray]) -> Path:
    """Atomically write a record of ``kind`` with a JSON-able ``header`` and arrays."""
    full = {"format": FORMAT, "version": FORMAT_VERSION, "kind": kind,
            "written": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")}
    full.update(header)
    try:
        text = json.dumps(full, sort_keys=True, allow_nan=True)
    except TypeError as err:
        raise ThermoseedError(f"record header is not JSON-serialisable: {err}") from err
    if RECORD_HEADER in arrays:
        raise ThermoseedError(f"array name {RECORD_HEADER!r} is reserved")
    return atomic_save_npz(path, {RECORD_HEADER: np.array(text), **arrays})


def read_record(path, kind: str | None = None) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read a record; check format, version and (if given) kind. Returns (header, arrays)."""
    arrays = load_npz(path, what="record file")
    if RECORD_HEADER not in arrays:
        raise ThermoseedError(f"{str(path)!r} is not a thermoseed record (no header)")
    try:
        header = json.loads(str(arrays.pop(RECORD_HEADER)))
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


def json_text(payload, indent: int | None = None) -> str:
    """JSON that every parser reads: non-finite floats written as the strings "inf", "-inf",
    "nan" (plain ``json.dumps`` writes ``Infinity``/``NaN``, which is not JSON)."""

    def clean(value):
        if isinstance(value, (float, np.floating)) and not np.isfinite(value):
            return str(float(value))
        if isinstance(value, dict):
            return {k: clean(v) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [clean(v) for v in value]
        return json_scalar(value)

    return json.dumps(clean(payload), default=str, indent=indent, sort_keys=indent is not None,
                      allow_nan=False)


def json_scalar(value):
    """A numpy scalar as the plain Python value JSON can hold; anything else unchanged."""
    if isinstance(value, np.generic):
        return value.item()
    return value
