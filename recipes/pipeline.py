"""Run a recipe end to end into a run folder.

Classification scenarios (magnet-phase, probe-drift): generate data -> fit a Gibbs model ->
compile it into the downstream template -> warm-start parameters -> training curves from
each initialisation strategy -> gradient probes over qubit counts -> report. Neighbour-xxz:
thermal data at one anisotropy -> fit -> compile -> eigensolver at the neighbouring
anisotropy from each strategy -> report.

Classification recipes take their data from the scenario, the user's files or generator and
their circuit from the template registry or the user's ``[circuit]`` (``recipes.sources``);
the user's data and circuit are loaded and checked before the run folder is touched. With
``[data] shots = N`` the Gibbs model is fitted from N seeded randomised Pauli measurements of
the training states (``records.npz``); the report gives each coefficient's standard error.

Run folder: ``data.npz``, ``model.npz``, ``compile.npz``, ``warm_start.npz``,
``results.jsonl`` (sweep records; classification), ``energies.json`` (neighbour-xxz),
``fit_history.png`` and ``compile_history.png`` (convergence), other PNG plots, ``report.md``
and ``run.json`` (versions, seeds, settings, timings). Rerunning the same recipe into the
same folder resumes: finished sweep jobs are skipped.
"""

from __future__ import annotations

import json
import platform
import time
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np

from thermoseed.bridge.ansatz import Ansatz, make_ansatz
from thermoseed.bridge.compile import compile_latent
from thermoseed.bridge.compile_record import save_compile
from thermoseed.bridge.plateau.report import write_report
from thermoseed.bridge.plateau.strategies import PretrainSettings, zero_is_identity
from thermoseed.bridge.plateau.sweep import make_grid, run_sweep
from thermoseed.bridge.warm_starts import save_warm_start, warm_start
from thermoseed.pretrain import (
    GibbsClassifier,
    VisibleGibbsModel,
    from_density_matrices,
    from_states,
)
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.files import atomic_save_npz, atomic_write_bytes, json_text
from thermoseed.pretrain.labelled import LabelledData, save_labelled
from thermoseed.pretrain.records import save_records, simulate_shots
from thermoseed.recipes.config import Recipe
from thermoseed.recipes.plots import plot_compile_history, plot_fit_history
from thermoseed.recipes.sources import recipe_circuit, recipe_data

RUN_FILE = "run.json"
#: Strategies whose circuits are compiled for the classification task's readout.
LABEL_AWARE = ("class_models",)


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for pkg in ("thermoseed", "numpy", "scipy", "pennylane", "autograd"):
        try:
            out[pkg] = metadata.version(pkg)
        except metadata.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def _write_json(path: Path, payload: dict) -> None:
    atomic_write_bytes(path, json_text(payload, indent=2).encode())


def _claim_folder(out: Path, recipe: Recipe) -> dict:
    """Create or reopen a run folder; refuse one that holds a different recipe's run or
    anything that is not a thermoseed run (a run never writes over a user's own files), and
    an unwritable place, before any work."""
    run_path = out / RUN_FILE
    if out.is_dir() and any(out.iterdir()) and not run_path.exists():
        foreign = sorted(p.name for p in out.iterdir())[:4]
        raise ThermoseedError(
            f"run folder {str(out)!r} already holds {foreign} but no {RUN_FILE}: a run only "
            "writes into an empty folder or its own earlier run; pass a new --out")
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = out / f".{RUN_FILE}.write-check"
        probe.write_bytes(b"")
        probe.unlink()
    except OSError as err:
        raise ThermoseedError(f"cannot write into {str(out)!r} ({err.strerror}); pass an "
                              "--out you can write to") from err
    fp = recipe.fingerprint()
    if run_path.exists():
        try:
            previous = json.loads(run_path.read_text())
        except (json.JSONDecodeError, UnicodeDecodeError) as err:
            raise ThermoseedError(
                f"{run_path} is corrupt ({err}); delete it to start over") from err
        if not isinstance(previous, dict):
            raise ThermoseedError(f"{run_path} is not a thermoseed run record (not a JSON "
                                  "object); delete it to start over")
        if previous.get("fingerprint") != fp:
            raise ThermoseedError(
                f"run folder {str(out)!r} holds a run of different settings; pass another "
                "--out or delete the folder"
            )
    run = {"fingerprint": fp, "recipe": recipe.as_dict(), "versions": _versions(),
           "status": "running", "seeds": {"recipe": recipe.seed}, "timings": {}, "files": {}}
    _write_json(run_path, run)
    return run


class _Stage:
    """Times a stage and records it in run.json."""

    def __init__(self, run: dict, out: Path, name: str):
        self.run, self.out, self.name = run, out, name

    def __enter__(self):
        self.start = time.perf_counter()
        return self

    def __exit__(self, *exc):
        self.run["timings"][self.name] = round(time.perf_counter() - self.start, 3)
        _write_json(self.out / RUN_FILE, self.run)
        return False


# ------------------------------------------------------------------------------ data


def pretrain_settings(recipe: Recipe) -> PretrainSettings:
    """The recipe's model and compile settings in the form sweeps carry to their workers."""
    m, comp = recipe.model, recipe.compile
    return PretrainSettings(m.graph, m.fields, m.couplings, m.l2, comp.restarts, comp.max_iter,
                            m.parity)


def class_rule_accuracies(data: LabelledData, settings: PretrainSettings) -> dict[str, float]:
    """Held-out accuracy of the exact decision rules of one Gibbs model per class (fitted on
    the training part with the recipe's term set and penalty, balanced priors), and the
    single-shot bounds: Helstrom success between the fitted models and between the data's
    own class mixtures."""
    clf = GibbsClassifier(settings.terms(data.n_qubits), l2=settings.l2,
                          cooling=settings.cooling).fit(
        data.train_states, data.train_labels)
    many = clf.score(data.test_states, data.test_labels)
    single = clf.set_params(rule="single-shot").score(data.test_states, data.test_labels)
    return {"many_copy_accuracy": float(many), "single_shot_accuracy": float(single),
            "cooling": clf.cooling_, "model_success": float(clf.model_success_),
            "data_success": float(clf.data_success_), "held_out": len(data.test_labels)}


def _training_data(data: LabelledData):
    states = np.asarray(data.train_states)
    return from_states(states) if states.ndim == 2 else from_density_matrices(states)


# ------------------------------------------------------------------------------ stages


def downstream_ansatz(template, n_qubits: int, depth: int) -> Ansatz:
    """One block of the downstream circuit: a built-in template name or a user's family."""
    if isinstance(template, str):
        return make_ansatz(template, n_qubits, depth)
    return template.ansatz(n_qubits, depth)


def _fit_summary(model: VisibleGibbsModel, shots: int) -> dict:
    """run.json's fit entry; from records also each coefficient with its standard error and
    the moment residual in standard errors."""
    fit = {"iterations": model.n_iter_, "converged": bool(model.converged_),
           "diverging": bool(model.diverging_), "grad_norm": float(model.grad_norm_),
           "terms": len(model.terms_)}
    if not shots:
        return {"relative_entropy": model.loss_, **fit}
    rows = zip(model.terms_.labels, model.coef_, model.coef_stderr_, model.moment_zscores_,
               strict=True)
    return {"cross_entropy": model.loss_, "shots": shots, **fit,
            "max_abs_residual_in_stderr": float(np.abs(model.moment_zscores_).max()),
            "coefficients": [{"term": term, "coef": float(c), "stderr": float(se),
                              "residual_in_stderr": float(z)} for term, c, se, z in rows]}


def _pretrain_chain(recipe: Recipe, out: Path, run: dict, terms, td, progress: bool,
                    template=None):
    """Fit (from the exact training states, or from ``[data] shots`` simulated measurement
    records of them), compile, warm start at the recipe's size; writes the files and the
    convergence plots."""
    n = terms.n_qubits
    comp, shots = recipe.compile, recipe.data.shots
    with _Stage(run, out, "fit"):
        fit_data = td
        if shots:
            fit_data = simulate_shots(td.rho, shots, seed=recipe.seed)
            save_records(out / "records.npz", fit_data)
            run["files"]["records"] = "records.npz"
        model = VisibleGibbsModel(terms, l2=recipe.model.l2, seed=recipe.seed,
                                  progress=progress).fit(fit_data)
        model.save(out / "model.npz")
    unit = downstream_ansatz(comp.template if template is None else template, n,
                             comp.depth_for(n))
    with _Stage(run, out, "compile"):
        result = compile_latent(model, unit, restarts=comp.restarts, max_iter=comp.max_iter,
                                seed=recipe.seed, data=td.rho, progress=progress)
        save_compile(result, out / "compile.npz")
    head = unit if zero_is_identity(unit) else None  # else: the encoder's parameters only
    params = warm_start(result, head=head, head_identity=None if head is None
                        else np.zeros(unit.shape))
    save_warm_start(out / "warm_start.npz", params, unit, head, source=result,
                    strategy="pretrained", model_fidelity=result.report.model_fidelity)
    plot_fit_history(model.history_, out / "fit_history.png")
    plot_compile_history(result.history, out / "compile_history.png",
                         floor=result.report.floor)
    run["fit"] = _fit_summary(model, shots)
    run["compile"] = {**result.report._asdict(), "latent_states": int(len(result.latent.basis)),
                      "iterations": len(result.history)}
    run["files"].update({"model": "model.npz", "compile": "compile.npz",
                         "warm_start": "warm_start.npz", "fit_plot": "fit_history.png",
                         "compile_plot": "compile_history.png"})
    return model, result


def run_classification(recipe: Recipe, out: Path, run: dict, progress: bool,
                       workers: int | None, data: dict[int, LabelledData] | None, template):
    """The classification stages on ``data`` (``recipe_data``; None: made here) with the
    downstream ``template`` (``recipe_circuit``)."""
    comp = recipe.compile
    n, seed = recipe.data.qubits, recipe.seed
    plateau, train = recipe.plateau, recipe.train
    with _Stage(run, out, "data"):
        data = recipe_data(recipe) if data is None else data
        main = data[n]
        save_labelled(main, out / "data.npz")
    run["files"]["data"] = "data.npz"
    settings = pretrain_settings(recipe)
    _pretrain_chain(recipe, out, run, settings.terms(n), _training_data(main), progress,
                    template)
    with _Stage(run, out, "rules"):
        run["class_rules"] = {str(m): class_rule_accuracies(data[m], settings)
                              for m in train.sizes}
    seeds = range(seed, seed + train.seeds)
    jobs = []
    for m in train.sizes:
        jobs += make_grid([m], train.strategies, seeds, task="training",
                          depths=[comp.depth_for(m)], template=template,
                          steps=train.steps, learning_rate=train.learning_rate,
                          settings=settings)
    for m in plateau.sizes:
        for strategy in plateau.strategies:
            # label-aware starts are built for the task's readout: probed on its cost only
            costs = [c for c in plateau.costs if strategy not in LABEL_AWARE or
                     c == "classifier"]
            jobs += make_grid([m], [strategy], range(seed, seed + plateau.seeds), costs=costs,
                              depths=[comp.depth_for(m)], template=template,
                              settings=settings)
    with _Stage(run, out, "sweep"):
        result = run_sweep(jobs, out / "results.jsonl", data=data,
                           workers=workers, progress=progress)
    run["files"]["results"] = "results.jsonl"
    run["sweep"] = {"jobs": len(jobs), "ran": result.ran, "skipped": result.skipped}
    with _Stage(run, out, "report"):
        from thermoseed.recipes.findings import classification_findings

        write_report(result.records, out, title="Plateau comparison in detail",
                     target=train.target_accuracy, seed=seed,
                     preamble=classification_findings(recipe, run, result.records))
    run["files"]["report"] = "report.md"


def run_eigensolver_recipe(recipe: Recipe, out: Path, run: dict, progress: bool):
    from thermoseed.recipes.findings import eigensolver_findings, plot_energy_runs
    from thermoseed.recipes.neighbour import energy_runs
    from thermoseed.recipes.scenarios.neighbour_xxz import (
        ground_energy,
        thermal_state,
        xxz_hamiltonian,
        xxz_terms,
    )

    data_cfg, solver = recipe.data, recipe.eigensolver
    n = data_cfg.qubits
    with _Stage(run, out, "data"):
        rho = thermal_state(n, data_cfg.source_delta, data_cfg.beta)
        atomic_save_npz(out / "data.npz", {"density": rho})
    run["files"]["data"] = "data.npz"
    td = from_density_matrices(rho)
    _, result = _pretrain_chain(recipe, out, run, xxz_terms(n), td, progress)
    target_h = xxz_hamiltonian(n, data_cfg.target_delta)
    e0 = ground_energy(n, data_cfg.target_delta)
    target = e0 + solver.tolerance * abs(e0)
    with _Stage(run, out, "eigensolver"):
        runs = energy_runs(result, target_h, target, solver.strategies,
                           range(recipe.seed, recipe.seed + solver.seeds),
                           steps=solver.steps, learning_rate=solver.learning_rate,
                           progress=progress)
        _write_json(out / "energies.json", {"ground_energy": e0, "target": target,
                                            "runs": runs})
    with _Stage(run, out, "report"):
        plot_energy_runs(runs, e0, target, out / "energies.png")
        text = eigensolver_findings(recipe, run, runs, e0, target)
        atomic_write_bytes(out / "report.md", text.encode("utf-8"))
    run["files"].update({"energies": "energies.json", "plot": "energies.png",
                         "report": "report.md"})


def run_recipe(recipe: Recipe, out, *, progress: bool = True,
               workers: int | None = None) -> dict[str, Any]:
    """Run a validated recipe (``load_recipe``) into folder ``out``; returns run.json's data.
    The data and circuit are loaded and checked first: a bad file, generator or circuit
    stops the run before the folder is touched."""
    out = Path(out)
    classification = recipe.scenario != "neighbour-xxz"
    if classification:  # the user's own inputs first; the scenario's data in its stage
        template = recipe_circuit(recipe)
        own = recipe.data.data_files() or recipe.data.generator is not None
        data = recipe_data(recipe) if own else None
    run = _claim_folder(out, recipe)
    start = time.perf_counter()
    if classification:
        run_classification(recipe, out, run, progress, workers, data, template)
    else:
        run_eigensolver_recipe(recipe, out, run, progress)
    run["timings"]["total"] = round(time.perf_counter() - start, 3)
    run["status"] = "finished"
    _write_json(out / RUN_FILE, run)
    return {"folder": str(out), "status": run["status"], "timings": run["timings"],
            "files": run["files"]}
