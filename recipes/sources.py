"""Where a run's labelled data and downstream circuit come from: the built-in scenarios, the
user's data files, a user's generator function, a user's quantum function.

Every source goes through the same checks before any work: finite states of unit norm (or
valid density matrices) on the expected number of qubits, integer labels, and both classes
of the binary task (labels 0 and 1) present in the training and the held-out part.
A user's function is named ``"module:function"`` and imported from ``sys.path``
(``PYTHONPATH``); a generator is called as ``function(n_qubits, seed)`` and returns a
``LabelledData`` or a pair ``(states, labels)`` (split here by ``stratified_split``).
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping

import numpy as np

from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import LabelledData, load_labelled, split_labelled
from thermoseed.recipes.config import Recipe, data_sizes

#: The labels of the binary classification task every classification recipe runs.
CLASSES = (0, 1)


def entry_point(spec: str, what: str) -> Callable:
    """The callable named ``"module:function"``; one-line errors name ``what`` and ``spec``."""
    module_name, _, name = spec.partition(":")
    try:
        module = importlib.import_module(module_name)
    except ImportError as err:
        raise ThermoseedError(
            f"{what} {spec!r}: cannot import module {module_name!r} ({err}); put its folder "
            "on PYTHONPATH") from err
    except SyntaxError as err:
        raise ThermoseedError(f"{what} {spec!r}: module {module_name!r} has a syntax error "
                              f"(line {err.lineno}: {err.msg})") from err
    function = getattr(module, name, None)
    if not callable(function):
        raise ThermoseedError(f"{what} {spec!r}: module {module_name!r} has no function "
                              f"{name!r}; check the name after the colon")
    return function


def checked_labelled(data: LabelledData, n_qubits: int | None, what: str) -> LabelledData:
    """``data`` after ``LabelledData.check(n_qubits)`` and the two-class check; messages are
    prefixed with ``what`` (the file or function the data came from)."""
    try:
        data = LabelledData(*data).check(n_qubits)
    except ThermoseedError as err:
        raise ThermoseedError(f"{what}: {err}") from err
    for part in ("train", "test"):
        seen = {int(v) for v in np.unique(getattr(data, f"{part}_labels"))}
        if seen != set(CLASSES):
            raise ThermoseedError(
                f"{what}: the {part} part holds labels {sorted(seen)}; the task needs both "
                f"classes {list(CLASSES)} in the training and the held-out part")
    return data


def labelled_file(path, n_qubits: int | None, what: str, *, test_fraction: float = 0.25,
                  seed: int = 0) -> LabelledData:
    """Labelled data from a file (``load_labelled``: a labelled-data record or a plain
    ``.npz`` split here), checked; ``n_qubits`` (when given) must match the file's states."""
    try:
        data = load_labelled(path, test_fraction=test_fraction, seed=seed)
    except ThermoseedError as err:
        raise ThermoseedError(f"{what}: {err}") from err
    if n_qubits is not None and data.n_qubits != n_qubits:
        raise ThermoseedError(
            f"{what}: {str(path)!r} holds {data.n_qubits}-qubit states, not {n_qubits}; give "
            f"it the qubit count {data.n_qubits} or the file made for {n_qubits} qubits")
    return checked_labelled(data, n_qubits, what)


def labelled_files(files: Mapping[int | None, str], *, what: str, test_fraction: float = 0.25,
                   seed: int = 0) -> dict[int, LabelledData]:
    """``{n: LabelledData}`` from files keyed by their qubit count (``None``: read it from
    the file); a qubit count given twice is refused."""
    out: dict[int, LabelledData] = {}
    for n, path in files.items():
        label = f"{what} {path}" if n is None else f"{what} {n}={path}"
        data = labelled_file(path, n, label, test_fraction=test_fraction, seed=seed)
        if data.n_qubits in out:
            raise ThermoseedError(f"{label}: a second file for n = {data.n_qubits}; give one "
                                  "file per qubit count")
        out[data.n_qubits] = data
    return out


def generated_data(spec: str, n_qubits: int, seed: int, *,
                   test_fraction: float = 0.25) -> LabelledData:
    """``function(n_qubits, seed)`` of the entry point ``spec``, checked."""
    what = f"[data] generator {spec!r} at n = {n_qubits}"
    made = entry_point(spec, "[data] generator")(n_qubits, seed)
    if isinstance(made, LabelledData):
        return checked_labelled(made, n_qubits, what)
    if isinstance(made, tuple) and len(made) == 2:
        try:
            data = split_labelled(made[0], made[1], test_fraction=test_fraction, seed=seed)
        except ThermoseedError as err:
            raise ThermoseedError(f"{what}: {err}") from err
        return checked_labelled(data, n_qubits, what)
    raise ThermoseedError(f"{what} returned {type(made).__name__}; return LabelledData(...) "
                          "or a pair (states, labels)")


def scenario_data(scenario: str, n: int, samples: int, test_fraction: float,
                  seed: int) -> LabelledData:
    """Seeded built-in scenario data at ``n`` qubits, split into train / test (stratified)."""
    if scenario == "magnet-phase":
        from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data

        batch = magnet_phase_data(n, samples, seed=seed)
        states = batch.states
    else:
        from thermoseed.recipes.scenarios.probe_drift import probe_drift_data

        batch = probe_drift_data(n, samples, seed=seed)
        states = batch.density
    return split_labelled(states, batch.labels, test_fraction=test_fraction, seed=seed)


def recipe_data(recipe: Recipe) -> dict[int, LabelledData]:
    """Labelled data of a classification recipe at every size it needs (``data_sizes``),
    from its files, its generator or its scenario (seed ``recipe.seed + n``)."""
    d = recipe.data
    files = d.data_files()
    if files:
        return {n: labelled_file(path, n, f"recipe [data] file for n = {n}",
                                 test_fraction=d.test_fraction, seed=recipe.seed + n)
                for n, path in files.items()}
    sizes = data_sizes(recipe)
    if d.generator is not None:
        return {n: generated_data(d.generator, n, recipe.seed + n,
                                  test_fraction=d.test_fraction) for n in sizes}
    return {n: scenario_data(recipe.scenario, n, d.samples, d.test_fraction, recipe.seed + n)
            for n in sizes}


def recipe_circuit(recipe: Recipe):
    """The recipe's downstream template: the built-in name, or the ``CircuitFamily`` of its
    ``[circuit]`` quantum function (``bridge.circuit_family``), built and recorded once at
    every size the recipe runs so that a failing function stops the run before any work."""
    if recipe.circuit is None:
        return recipe.compile.template
    from thermoseed.bridge import circuit_family

    spec = recipe.circuit.function
    qfunc = entry_point(spec, "[circuit] function")
    family = circuit_family(qfunc, recipe.circuit.shape, spec)
    sizes = sorted({recipe.data.qubits, *recipe.train.sizes, *recipe.plateau.sizes})
    for n in sizes:
        try:
            family.fingerprint(n, recipe.compile.depth_for(n))
        except ThermoseedError as err:
            raise ThermoseedError(f"[circuit] function {spec!r} at n = {n}: {err}") from err
    _check_identity_head(recipe, family, sizes)
    return family


def _check_identity_head(recipe: Recipe, family, sizes) -> None:
    """Pre-trained starts put the compiled circuit under an identity head of the same
    circuit (zero parameters); refuse them at once when the circuit is not the identity
    there (``bridge.plateau.strategies.identity_head_params``)."""
    from thermoseed.bridge.plateau.strategies import identity_head_params

    wanted = sorted(set(recipe.train.strategies + recipe.plateau.strategies)
                    & {"pretrained", "pretrained_perturbed"})
    if not wanted:
        return
    for n in sizes:  # e.g. a CZ ladder repeated `depth` times is the identity at even depth
        try:
            identity_head_params(family.ansatz(n, recipe.compile.depth_for(n)))
        except ThermoseedError as err:
            raise ThermoseedError(
                f"[circuit] function {recipe.circuit.function!r} cannot serve the strategies "
                f"{', '.join(wanted)} at n = {n}: {err}") from err
