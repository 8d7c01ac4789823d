"""Value checks of recipe tables, with one message style: ``<file>: [section] key = value ...``.

``RecipeChecker`` holds the range, choice, file and entry-point checks; ``merged`` fills a
section's defaults and refuses unknown keys and kinds; ``own_data_values`` and
``circuit_values`` check the user's own data (``[data] file``, ``[data.files]``,
``generator``) and circuit (``[circuit] function``, ``shape``).
"""

from __future__ import annotations

import copy
import math
import re
from pathlib import Path

from thermoseed.pretrain.errors import ThermoseedError

#: Initialisation strategies a recipe may compare (names of ``bridge.plateau.probes``).
STRATEGY_NAMES = ("pretrained", "pretrained_perturbed", "class_models", "uniform",
                  "small_angle", "identity_blocks")
#: Largest ``[data] shots``.
MAX_SHOTS = 10_000_000
#: Largest qubit count of a recipe's data.
MAX_QUBITS = 10
#: ``module:function`` (a dotted module path importable from ``sys.path``, then a name).
ENTRY_POINT = re.compile(r"[A-Za-z_]\w*(\.[A-Za-z_]\w*)*:[A-Za-z_]\w*", re.ASCII)
#: Words a ``[circuit] shape`` entry may hold besides positive integers.
SHAPE_WORDS = ("n", "depth")


class RecipeChecker:
    """Range checks with one message style: ``<file>: [section] key = value ...``."""

    def __init__(self, where: str):
        self.where = where

    def integer(self, section: str, key: str, value, low: int, high: int) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
            raise ThermoseedError(f"{self.where}: [{section}] {key} = {value!r} must be an "
                                  f"integer in {low}..{high}")
        return value

    def number(self, section: str, key: str, value, *, low: float | None = None,
               high: float | None = None, open_low: bool = False,
               open_high: bool = False) -> float:
        ok = isinstance(value, (int, float)) and not isinstance(value, bool) and \
            math.isfinite(value)
        if ok and low is not None:
            ok = value > low if open_low else value >= low
        if ok and high is not None:
            ok = value < high if open_high else value <= high
        if not ok:
            lo = "" if low is None else f"{'>' if open_low else '>='} {low:g}"
            hi = "" if high is None else f"{'<' if open_high else '<='} {high:g}"
            bounds = " and ".join(b for b in (lo, hi) if b) or "finite"
            raise ThermoseedError(f"{self.where}: [{section}] {key} = {value!r} must be a "
                                  f"finite number {bounds}")
        return float(value)

    def choice(self, section: str, key: str, value, allowed) -> str:
        if value not in allowed:
            raise ThermoseedError(f"{self.where}: [{section}] {key} = {value!r} is not one of "
                                  f"{', '.join(allowed)}")
        return value

    def existing_file(self, section: str, key: str, value, base: Path) -> str:
        """An existing file's absolute path (a relative one is taken from ``base``)."""
        if not isinstance(value, str) or not value:
            raise ThermoseedError(f"{self.where}: [{section}] {key} = {value!r} must be a "
                                  "file path")
        path = Path(value).expanduser()
        path = (path if path.is_absolute() else base / path).resolve()
        if not path.is_file():
            raise ThermoseedError(f"{self.where}: [{section}] {key} = {value!r} does not exist "
                                  f"(looked for {str(path)!r}); give a path relative to the "
                                  "recipe's folder or an absolute one")
        return str(path)

    def entry_point(self, section: str, key: str, value) -> str:
        if not isinstance(value, str) or not ENTRY_POINT.fullmatch(value):
            raise ThermoseedError(f"{self.where}: [{section}] {key} = {value!r} must name a "
                                  "function as \"module:function\" (module importable from "
                                  "PYTHONPATH)")
        return value

    def nonempty(self, section: str, key: str, values) -> list:
        if not isinstance(values, list) or not values:
            raise ThermoseedError(f"{self.where}: [{section}] {key} must be a non-empty list")
        return values

    def strategies(self, section: str, values) -> tuple[str, ...]:
        names = [self.choice(section, "strategies", v, STRATEGY_NAMES)
                 for v in self.nonempty(section, "strategies", values)]
        if len(set(names)) != len(names):
            raise ThermoseedError(f"{self.where}: [{section}] strategies lists a name twice")
        return tuple(names)


def listed(value, section: str, key: str, where: str) -> list:
    if not isinstance(value, list):
        raise ThermoseedError(f"{where}: [{section}] {key} must be a list")
    return value


def merged(given, values: dict, section: str, where: str) -> dict:
    """Defaults of ``section`` updated by the file's table; unknown keys and kinds refused."""
    if not isinstance(given, dict):
        raise ThermoseedError(f"{where}: [{section}] must be a table")
    bad = set(given) - set(values)
    if bad:
        raise ThermoseedError(
            f"{where}: unknown keys {sorted(bad)} in [{section}]; allowed: {sorted(values)}")
    merged = copy.deepcopy(values)
    for key, value in given.items():
        default = values[key]
        if default is not None and not same_kind(value, default):
            raise ThermoseedError(
                f"{where}: [{section}] {key} = {value!r} should be a "
                f"{type(default).__name__} like {default!r}")
        merged[key] = value
    return merged


def same_kind(value, default) -> bool:
    if isinstance(default, bool):
        return isinstance(value, bool)
    if isinstance(default, float):
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    return isinstance(value, type(default)) and not (
        isinstance(value, bool) and not isinstance(default, bool))


def own_data_values(data: dict, n: int, check: RecipeChecker, folder) -> dict:
    """``[data]`` with the user's own data checked: at most one of ``file``, ``files``,
    ``generator``; files exist (paths made absolute, ``files`` as sorted ``(n, path)``
    pairs); the generator's entry point is well formed."""
    given = [k for k in ("file", "files", "generator") if data[k] is not None]
    if len(given) > 1:
        raise ThermoseedError(f"{check.where}: [data] gives {' and '.join(given)}; name the "
                              "data one way only")
    base = Path.cwd() if folder is None else Path(folder)
    out = dict(data)
    if data["file"] is not None:
        out["file"] = check.existing_file("data", "file", data["file"], base)
    if data["files"] is not None:
        table = data["files"]
        if not isinstance(table, dict) or not table:
            raise ThermoseedError(f"{check.where}: [data.files] must be a table of qubit "
                                  "counts and files, e.g. \"4\" = \"four.npz\"")
        pairs = []
        for size, path in table.items():
            if not re.fullmatch(r"[0-9]+", str(size)):
                raise ThermoseedError(f"{check.where}: [data.files] key {size!r} must be a "
                                      f"qubit count in 2..{MAX_QUBITS}, e.g. \"4\"")
            m = check.integer("data.files", "size", int(size), 2, MAX_QUBITS)
            pairs.append((m, check.existing_file("data.files", str(size), path, base)))
        out["files"] = tuple(sorted(pairs))
        if n not in dict(pairs):
            raise ThermoseedError(
                f"{check.where}: [data] qubits = {n} has no file in [data.files] (sizes "
                f"{', '.join(str(m) for m, _ in sorted(pairs))}); set qubits to one of them")
    if data["generator"] is not None:
        out["generator"] = check.entry_point("data", "generator", data["generator"])
    return out


def circuit_values(table, check: RecipeChecker) -> tuple[str, tuple[int | str, ...]]:
    """``[circuit]``: ``function`` (entry point) and ``shape`` (ints >= 1, "n", "depth")."""
    if not isinstance(table, dict):
        raise ThermoseedError(f"{check.where}: [circuit] must be a table")
    bad = set(table) - {"function", "shape"}
    if bad or "function" not in table or "shape" not in table:
        raise ThermoseedError(
            f"{check.where}: [circuit] takes exactly the keys function and shape, got "
            f"{sorted(table)}; e.g. function = \"mycircuits:layer\", shape = [\"depth\", "
            "\"n\", 3]")
    shape = table["shape"]
    entries = check.nonempty("circuit", "shape", shape)
    for entry in entries:
        ok = entry in SHAPE_WORDS if isinstance(entry, str) else (
            isinstance(entry, int) and not isinstance(entry, bool) and 1 <= entry <= 4096)
        if not ok:
            raise ThermoseedError(
                f"{check.where}: [circuit] shape entry {entry!r} must be a positive integer or "
                f"one of {', '.join(repr(w) for w in SHAPE_WORDS)}")
    return check.entry_point("circuit", "function", table["function"]), tuple(entries)
