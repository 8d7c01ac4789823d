"""Recipes: a TOML file read once into a typed, frozen ``Recipe``, validated before any work.

Top level: ``name``, ``title``, ``scenario`` (magnet-phase | probe-drift | neighbour-xxz),
``seed``; sections ``[data]``, ``[model]``, ``[compile]`` and, by scenario, ``[train]`` +
``[plateau]`` (classification) or ``[eigensolver]`` (neighbour-xxz).

Classification recipes may bring their own data and circuit: ``[data] file = "x.npz"`` (labelled
states at the recipe's qubit count), a ``[data.files]`` table ``{"4" = "a.npz", ...}`` (one
file per qubit count) or ``[data] generator = "module:function"`` (called as
``function(n_qubits, seed)``); relative paths are resolved against the recipe file's folder.
``[data] shots = N`` fits the Gibbs model from N seeded randomised Pauli measurements of the
training states instead of the exact states (0 = exact). ``[circuit] function =
"module:function"`` with ``shape = ["depth", "n", 3]`` replaces the built-in template.

Built-in recipes are the ``.toml`` files shipped in ``thermoseed.recipes`` and are found by
name. Command-line overrides (``--qubits``, ``--seed``) go through the same validation as the
file, so a value refused in a file is refused on the command line too.
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
import re
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.recipe_values import (
    MAX_QUBITS,
    MAX_SHOTS,
    STRATEGY_NAMES,  # noqa: F401 - re-exported: recipes name the strategies here
    RecipeChecker,
    circuit_values,
    listed,
    merged,
    own_data_values,
)

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

SCENARIOS = ("magnet-phase", "probe-drift", "neighbour-xxz")
BUILTIN = SCENARIOS
TEMPLATE_NAMES = ("soft", "strong", "entangler", "ladder")
GRAPH_NAMES = ("line", "ring", "complete")
COST_NAMES = ("local", "global", "classifier")
#: Upper bounds that keep a recipe within minutes-to-hours on a laptop (dense simulation).
MAX_PLATEAU_QUBITS = 12
MAX_SAMPLES, MAX_SEEDS, MAX_STEPS, MAX_DEPTH, MAX_ITER = 4096, 1000, 100_000, 64, 100_000
#: ``[data]`` keys left out of ``Recipe.as_dict`` while unset, so recipes that do not use
#: them keep their fingerprint (their run folders still resume).
OPTIONAL_DATA = {"file": None, "files": None, "generator": None, "shots": 0}


@dataclass(frozen=True)
class DataSettings:
    """``[data]``: ``qubits``; classification: ``samples``, ``test_fraction``, the user's own
    data (``file``, ``files`` as ``((n, path), ...)``, or ``generator``; absolute paths) and
    ``shots`` (0: fit the exact states); neighbour-xxz: ``source_delta``, ``target_delta``,
    ``beta``."""

    qubits: int
    samples: int | None = None
    test_fraction: float | None = None
    source_delta: float | None = None
    target_delta: float | None = None
    beta: float | None = None
    file: str | None = None
    files: tuple[tuple[int, str], ...] | None = None
    generator: str | None = None
    shots: int = 0

    def data_files(self) -> dict[int, str]:
        """The user's data files by qubit count (empty for generated data)."""
        if self.file is not None:
            return {self.qubits: self.file}
        return dict(self.files or ())


@dataclass(frozen=True)
class ModelSettings:
    """``[model]``: the Gibbs model's term set on a graph and its L2 penalty."""

    graph: str
    fields: str
    couplings: tuple[str, ...]
    l2: float
    parity: bool = False


@dataclass(frozen=True)
class CompileSettings:
    """``[compile]``: downstream template, layers per block (None: the qubit count of each
    size, ``depth_for``), compile restarts and iterations."""

    template: str
    depth: int | None
    restarts: int
    max_iter: int

    def depth_for(self, n_qubits: int) -> int:
        """Layers per block at ``n_qubits``."""
        return n_qubits if self.depth is None else self.depth


@dataclass(frozen=True)
class TrainSettings:
    """``[train]``: training curves from each strategy at each of ``sizes`` (default: the
    recipe's qubit count only); ``readout`` is the classifier's readout wire."""

    sizes: tuple[int, ...]
    strategies: tuple[str, ...]
    seeds: int
    steps: int
    learning_rate: float
    target_accuracy: float


@dataclass(frozen=True)
class PlateauSettings:
    """``[plateau]``: gradient probes over qubit counts."""

    sizes: tuple[int, ...]
    strategies: tuple[str, ...]
    seeds: int
    costs: tuple[str, ...]


@dataclass(frozen=True)
class EigensolverSettings:
    """``[eigensolver]``: runs at the neighbouring anisotropy from each strategy."""

    strategies: tuple[str, ...]
    seeds: int
    steps: int
    learning_rate: float
    tolerance: float


@dataclass(frozen=True)
class CircuitSettings:
    """``[circuit]``: the user's quantum function ``module:function`` taking
    ``(params, wires)`` and its parameter shape (ints and the words ``"n"``, ``"depth"``)."""

    function: str
    shape: tuple[int | str, ...]


@dataclass(frozen=True)
class Recipe:
    """A validated recipe; build it with ``load_recipe`` or ``validate_recipe``."""

    name: str
    title: str
    scenario: str
    seed: int
    data: DataSettings
    model: ModelSettings
    compile: CompileSettings
    train: TrainSettings | None = None
    plateau: PlateauSettings | None = None
    eigensolver: EigensolverSettings | None = None
    circuit: CircuitSettings | None = None

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-able form (run.json); sections that do not apply and unset optional
        data keys are left out."""
        out = dataclasses.asdict(self)
        out["data"] = {k: v for k, v in out["data"].items()
                       if k not in OPTIONAL_DATA or v != OPTIONAL_DATA[k]}
        return {k: v for k, v in out.items() if v is not None}

    def fingerprint(self) -> str:
        """Short hash of the settings (identifies a run folder's recipe)."""
        return hashlib.sha256(json.dumps(self.as_dict(), sort_keys=True).encode()).hexdigest()[:16]


_STRATEGIES = ["pretrained", "uniform", "small_angle", "identity_blocks"]
_COMMON = {
    "model": {"graph": "line", "fields": "XZ", "couplings": ["ZZ"], "l2": 1e-3,
              "parity": False},
    "compile": {"template": "soft", "depth": None, "restarts": 1, "max_iter": 300},
}
DEFAULTS: dict[str, dict[str, Any]] = {
    "magnet-phase": {
        "data": {"qubits": 4, "samples": 48, "test_fraction": 0.25},
        "train": {"sizes": [], "strategies": _STRATEGIES, "seeds": 3, "steps": 40,
                  "learning_rate": 0.05, "target_accuracy": 0.9},
        "plateau": {"sizes": [2, 3, 4, 5, 6], "strategies": _STRATEGIES, "seeds": 12,
                    "costs": ["local", "global"]},
    },
    "neighbour-xxz": {
        "data": {"qubits": 4, "source_delta": 0.8, "target_delta": 1.0, "beta": 4.0},
        "eigensolver": {"strategies": _STRATEGIES, "seeds": 3, "steps": 150,
                        "learning_rate": 0.05, "tolerance": 0.01},
    },
}
DEFAULTS["magnet-phase"]["data"].update(OPTIONAL_DATA)
DEFAULTS["probe-drift"] = copy.deepcopy(DEFAULTS["magnet-phase"])
DEFAULTS["probe-drift"]["data"]["qubits"] = 3
for _scenario in DEFAULTS.values():
    _scenario.update(copy.deepcopy(_COMMON))

#: What ``--quick`` shrinks to (a smoke run of every stage in about a minute).
QUICK = {
    "data": {"samples": 24},
    "compile": {"max_iter": 100},
    "train": {"sizes": [], "seeds": 2, "steps": 15},
    "plateau": {"sizes": [2, 3, 4], "seeds": 6},
    "eigensolver": {"seeds": 2, "steps": 60},
}


def _builtin_path(name: str) -> Path:
    return Path(str(resources.files("thermoseed.recipes").joinpath(f"{name}.toml")))


def load_recipe(source, *, qubits: int | None = None, seed: int | None = None,
                quick: bool = False) -> Recipe:
    """Read a recipe (built-in name or ``.toml`` path), apply overrides, validate it all."""
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
    if qubits is not None:
        raw.setdefault("data", {})["qubits"] = qubits
    if seed is not None:
        raw["seed"] = seed
    if quick:
        defaults = DEFAULTS.get(raw.get("scenario"), {})
        for section, values in QUICK.items():
            if section in defaults:
                raw.setdefault(section, {}).update(
                    {k: v for k, v in values.items() if k in defaults[section]})
    where = str(path) + (" with command-line overrides" if qubits is not None or seed is not None
                         else "")
    return validate_recipe(raw, where=where, folder=path.parent)


def validate_recipe(raw: dict, *, where: str = "recipe", folder=None) -> Recipe:
    """Fill defaults, check names, types and ranges; unknown keys are errors (typos stop
    early). Data file paths are resolved against ``folder`` (the recipe file's folder;
    default the working directory) and must exist. Returns the typed ``Recipe``."""
    if not isinstance(raw, dict):
        raise ThermoseedError(f"{where}: a recipe is a TOML table, got {type(raw).__name__}")
    scenario = raw.get("scenario")
    if scenario not in SCENARIOS:
        raise ThermoseedError(f"{where}: scenario must be one of {SCENARIOS}, got {scenario!r}")
    defaults = DEFAULTS[scenario]
    top = {"name", "title", "scenario", "seed"} | set(defaults)
    if "train" in defaults:
        top |= {"circuit"}
    unknown = set(raw) - top
    if unknown:
        raise ThermoseedError(f"{where}: unknown keys {sorted(unknown)}; allowed: {sorted(top)}")
    sections = {section: merged(raw.get(section, {}), values, section, where)
                for section, values in defaults.items()}
    name = raw.get("name", scenario)
    if not isinstance(name, str) or not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}", name) \
            or name in (".", ".."):
        raise ThermoseedError(
            f"{where}: name = {name!r} must be a plain folder name (letters, digits, '-', '_', "
            "'.'; no path separators)")
    seed = raw.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ThermoseedError(f"{where}: seed = {seed!r} must be a non-negative integer")
    check = RecipeChecker(where)
    data = sections["data"]
    n = check.integer("data", "qubits", data["qubits"], 2, MAX_QUBITS)
    comp = sections["compile"]
    depth = None if comp["depth"] is None else check.integer("compile", "depth", comp["depth"],
                                                             1, MAX_DEPTH)
    recipe = Recipe(
        name=name, title=str(raw.get("title", scenario)), scenario=scenario, seed=seed,
        data=DataSettings(**data),
        model=_model_settings(sections["model"], check),
        compile=CompileSettings(
            template=check.choice("compile", "template", comp["template"], TEMPLATE_NAMES),
            depth=depth,
            restarts=check.integer("compile", "restarts", comp["restarts"], 1, 100),
            max_iter=check.integer("compile", "max_iter", comp["max_iter"], 1, MAX_ITER)),
    )
    if scenario == "neighbour-xxz":
        for key in ("source_delta", "target_delta"):
            check.number("data", key, data[key])
        check.number("data", "beta", data["beta"], low=0.0)
        solver = sections["eigensolver"]
        return dataclasses.replace(recipe, eigensolver=EigensolverSettings(
            strategies=check.strategies("eigensolver", solver["strategies"]),
            seeds=check.integer("eigensolver", "seeds", solver["seeds"], 1, MAX_SEEDS),
            steps=check.integer("eigensolver", "steps", solver["steps"], 1, MAX_STEPS),
            learning_rate=check.number("eigensolver", "learning_rate", solver["learning_rate"],
                                       low=0.0, open_low=True),
            tolerance=check.number("eigensolver", "tolerance", solver["tolerance"], low=0.0)))
    check.integer("data", "samples", data["samples"], 4, MAX_SAMPLES)
    check.number("data", "test_fraction", data["test_fraction"], low=0.0, high=1.0,
                 open_low=True, open_high=True)
    check.integer("data", "shots", data["shots"], 0, MAX_SHOTS)
    recipe = dataclasses.replace(recipe,
                                 data=DataSettings(**own_data_values(data, n, check, folder)))
    if "circuit" in raw:
        if "template" in raw.get("compile", {}):
            raise ThermoseedError(f"{where}: [compile] template and [circuit] both name the "
                                  "circuit; keep one of them")
        function, shape = circuit_values(raw["circuit"], check)
        recipe = dataclasses.replace(recipe, circuit=CircuitSettings(function, shape))
    train, plateau = sections["train"], sections["plateau"]
    sizes = plateau["sizes"]
    if not isinstance(sizes, list) or len(sizes) < 2 or len(set(sizes)) != len(sizes):
        raise ThermoseedError(f"{where}: [plateau] sizes = {sizes!r} needs >= 2 distinct "
                              f"integers in 2..{MAX_PLATEAU_QUBITS}")
    recipe = dataclasses.replace(
        recipe,
        train=TrainSettings(
            sizes=tuple(sorted({n, *(check.integer("train", "sizes", s, 2, MAX_QUBITS)
                                     for s in listed(train["sizes"], "train", "sizes", where))})),
            strategies=check.strategies("train", train["strategies"]),
            seeds=check.integer("train", "seeds", train["seeds"], 1, MAX_SEEDS),
            steps=check.integer("train", "steps", train["steps"], 1, MAX_STEPS),
            learning_rate=check.number("train", "learning_rate", train["learning_rate"],
                                       low=0.0, open_low=True),
            target_accuracy=check.number("train", "target_accuracy", train["target_accuracy"],
                                         low=0.0, high=1.0, open_low=True)),
        plateau=PlateauSettings(
            sizes=tuple(sorted(check.integer("plateau", "sizes", s, 2, MAX_PLATEAU_QUBITS)
                               for s in sizes)),
            strategies=check.strategies("plateau", plateau["strategies"]),
            seeds=check.integer("plateau", "seeds", plateau["seeds"], 2, MAX_SEEDS),
            costs=tuple(check.choice("plateau", "costs", c, COST_NAMES)
                        for c in check.nonempty("plateau", "costs", plateau["costs"]))),
    )
    _check_data_sizes(recipe, check)
    return recipe


#: Strategies whose probes need labelled data (besides the classifier cost and training).
DATA_STRATEGIES = ("pretrained", "pretrained_perturbed", "class_models")


def data_sizes(recipe: Recipe) -> tuple[int, ...]:
    """Qubit counts at which a classification recipe needs labelled data: its own size,
    every training size and the plateau sizes whose probes see data."""
    sizes = {recipe.data.qubits, *recipe.train.sizes}
    plateau = recipe.plateau
    if "classifier" in plateau.costs or set(plateau.strategies) & set(DATA_STRATEGIES):
        sizes |= set(plateau.sizes)
    return tuple(sorted(sizes))


def _check_data_sizes(recipe: Recipe, check: RecipeChecker) -> None:
    """Files named for some sizes must cover every size that needs data."""
    files = recipe.data.data_files()
    missing = [m for m in data_sizes(recipe) if files and m not in files]
    if missing:
        raise ThermoseedError(
            f"{check.where}: the recipe needs labelled data at n = "
            f"{', '.join(map(str, missing))} ([train] sizes, [plateau] sizes with data-using "
            f"strategies or costs) but [data] names files for n = "
            f"{', '.join(map(str, sorted(files)))}; add files for those sizes or drop them")


def _model_settings(model: dict, check: RecipeChecker) -> ModelSettings:
    fields = model["fields"]
    if not isinstance(fields, str) or set(fields) - set("XYZ"):
        raise ThermoseedError(f"{check.where}: [model] fields = {fields!r} must be letters "
                              "from X, Y, Z (e.g. \"XZ\"), or \"\" for none")
    couplings = tuple(model["couplings"])
    for pair in couplings:
        if not isinstance(pair, str) or len(pair) != 2 or set(pair) - set("XYZ"):
            raise ThermoseedError(f"{check.where}: [model] couplings entry {pair!r} must be "
                                  "two letters from X, Y, Z (e.g. \"ZZ\")")
    return ModelSettings(graph=check.choice("model", "graph", model["graph"], GRAPH_NAMES),
                         fields=fields, couplings=couplings,
                         l2=check.number("model", "l2", model["l2"], low=0.0),
                         parity=model["parity"])
