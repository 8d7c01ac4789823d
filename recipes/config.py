"""Recipe files: TOML with a fixed schema, validated before any work starts.

Top level: ``name``, ``title``, ``scenario`` (magnet-phase | probe-drift | neighbour-xxz),
``seed``; sections ``[data]``, ``[model]``, ``[compile]`` and, by scenario, ``[train]`` +
``[plateau]`` (classification) or ``[eigensolver]`` (neighbour-xxz). Built-in recipes are
the ``.toml`` files shipped in ``recipes/`` and are found by name.
"""

from __future__ import annotations

import copy
import hashlib
import json
from importlib import resources
from pathlib import Path
from typing import Any

from thermoseed.pretrain.errors import ThermoseedError

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

SCENARIOS = ("magnet-phase", "probe-drift", "neighbour-xxz")
BUILTIN = SCENARIOS

_STRATEGIES = ["pretrained", "uniform", "small_angle", "identity_blocks"]
_COMMON = {
    "model": {"graph": "line", "fields": "XZ", "couplings": ["ZZ"], "l2": 1e-3},
    "compile": {"template": "soft", "depth": None, "restarts": 1, "max_iter": 300},
}
DEFAULTS: dict[str, dict[str, Any]] = {
    "magnet-phase": {
        "data": {"qubits": 4, "samples": 48, "test_fraction": 0.25},
        "train": {"strategies": _STRATEGIES, "seeds": 3, "steps": 40, "learning_rate": 0.05,
                  "target_accuracy": 0.9},
        "plateau": {"sizes": [2, 3, 4, 5, 6], "strategies": _STRATEGIES, "seeds": 12,
                    "costs": ["local", "global"]},
    },
    "neighbour-xxz": {
        "data": {"qubits": 4, "source_delta": 0.8, "target_delta": 1.0, "beta": 4.0},
        "eigensolver": {"strategies": _STRATEGIES, "seeds": 3, "steps": 150,
                        "learning_rate": 0.05, "tolerance": 0.01},
    },
}
DEFAULTS["probe-drift"] = copy.deepcopy(DEFAULTS["magnet-phase"])
DEFAULTS["probe-drift"]["data"]["qubits"] = 3
for _scenario in DEFAULTS.values():
    _scenario.update(copy.deepcopy(_COMMON))

#: What ``--quick`` shrinks to (a smoke run of every stage in about a minute).
QUICK = {
    "data": {"samples": 24},
    "compile": {"max_iter": 100},
    "train": {"seeds": 2, "steps": 15},
    "plateau": {"sizes": [2, 3, 4], "seeds": 6},
    "eigensolver": {"seeds": 2, "steps": 60},
}


def _builtin_path(name: str) -> Path:
    return Path(str(resources.files("thermoseed.recipes").joinpath(f"{name}.toml")))


def load_recipe(source, *, qubits: int | None = None, seed: int | None = None,
                quick: bool = False) -> dict[str, Any]:
    """Read and validate a recipe (built-in name or ``.toml`` path); apply overrides."""
    path = _builtin_path(source) if source in BUILTIN else Path(source)
    if not path.is_file():
        raise ThermoseedError(
            f"recipe {str(source)!r} is neither a built-in ({', '.join(BUILTIN)}) nor a file"
        )
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise ThermoseedError(f"recipe {str(path)!r} is not valid TOML: {err}") from err
    raw = copy.deepcopy(raw)
    if qubits is not None:  # overrides go through the same validation as the file
        raw.setdefault("data", {})["qubits"] = qubits
        raw.setdefault("compile", {})
        if "depth" not in raw["compile"]:
            raw["compile"]["depth"] = None  # the default depth follows the new size
    if seed is not None:
        raw["seed"] = seed
    recipe = validate_recipe(raw, where=f"{path} with command-line overrides"
                             if qubits is not None or seed is not None else str(path))
    if quick:
        for section, values in QUICK.items():
            if section in recipe:
                recipe[section].update({k: v for k, v in values.items()
                                        if k in recipe[section]})
    if recipe["compile"]["depth"] is None:
        recipe["compile"]["depth"] = recipe["data"]["qubits"]
    return recipe


def validate_recipe(raw: dict, *, where: str = "recipe") -> dict[str, Any]:
    """Fill defaults and check names and types; unknown keys are errors (typos stop early)."""
    scenario = raw.get("scenario")
    if scenario not in SCENARIOS:
        raise ThermoseedError(f"{where}: scenario must be one of {SCENARIOS}, got {scenario!r}")
    defaults = DEFAULTS[scenario]
    top = {"name", "title", "scenario", "seed"} | set(defaults)
    unknown = set(raw) - top
    if unknown:
        raise ThermoseedError(f"{where}: unknown keys {sorted(unknown)}; allowed: {sorted(top)}")
    recipe: dict[str, Any] = {
        "name": str(raw.get("name", scenario)), "title": str(raw.get("title", scenario)),
        "scenario": scenario, "seed": raw.get("seed", 0),
    }
    if not isinstance(recipe["seed"], int) or recipe["seed"] < 0:
        raise ThermoseedError(f"{where}: seed must be a non-negative integer")
    for section, values in defaults.items():
        given = raw.get(section, {})
        if not isinstance(given, dict):
            raise ThermoseedError(f"{where}: [{section}] must be a table")
        bad = set(given) - set(values)
        if bad:
            raise ThermoseedError(
                f"{where}: unknown keys {sorted(bad)} in [{section}]; allowed: {sorted(values)}"
            )
        merged = copy.deepcopy(values)
        for key, value in given.items():
            default = values[key]
            if default is not None and not _same_kind(value, default):
                raise ThermoseedError(
                    f"{where}: [{section}] {key} = {value!r} should be a "
                    f"{type(default).__name__} like {default!r}"
                )
            merged[key] = value
        recipe[section] = merged
    _check_values(recipe, where)
    return recipe


def _same_kind(value, default) -> bool:
    if isinstance(default, bool):
        return isinstance(value, bool)
    if isinstance(default, float):
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    return isinstance(value, type(default)) and not (
        isinstance(value, bool) and not isinstance(default, bool))


def _check_values(recipe: dict, where: str) -> None:
    data = recipe["data"]
    if not isinstance(data["qubits"], int) or not 2 <= data["qubits"] <= 10:
        raise ThermoseedError(f"{where}: [data] qubits must be an integer in 2..10")
    depth = recipe["compile"]["depth"]
    if depth is not None and (not isinstance(depth, int) or depth < 1):
        raise ThermoseedError(f"{where}: [compile] depth must be a positive integer")
    for section in ("train", "eigensolver", "plateau"):
        if section in recipe:
            for name in recipe[section]["strategies"]:
                if name not in _STRATEGIES + ["pretrained_perturbed"]:
                    raise ThermoseedError(
                        f"{where}: [{section}] unknown strategy {name!r}; choose from "
                        f"{_STRATEGIES + ['pretrained_perturbed']}"
                    )
            if recipe[section]["seeds"] < 1:
                raise ThermoseedError(f"{where}: [{section}] seeds must be >= 1")
    if "plateau" in recipe:
        sizes = recipe["plateau"]["sizes"]
        if len(sizes) < 2 or any(not isinstance(s, int) or not 2 <= s <= 12 for s in sizes):
            raise ThermoseedError(f"{where}: [plateau] sizes needs >= 2 integers in 2..12")


def fingerprint(recipe: dict) -> str:
    """Short hash of a validated recipe (identifies a run folder's settings)."""
    text = json.dumps(recipe, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()[:16]
