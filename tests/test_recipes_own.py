"""Recipes and the command line with the researcher's own data and circuit; convergence plots;
coefficient standard errors in reports; no conclusion from a stage below its threshold."""

from __future__ import annotations

import dataclasses
import json
import re

import numpy as np
import pytest

from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import save_labelled
from thermoseed.recipes.cli import main
from thermoseed.recipes.config import load_recipe, validate_recipe
from thermoseed.recipes.findings import MIN_COMPILE_FIDELITY, stage_problems
from thermoseed.recipes.pipeline import run_recipe
from thermoseed.recipes.sources import generated_data, recipe_data, scenario_data

#: A small magnet-phase recipe: fit, compile, a short training curve and a two-size probe.
SMALL = """
name = "small"
scenario = "{scenario}"
seed = 5

[data]
qubits = 2
samples = 16
{data}

[model]
couplings = ["ZZ"]

[compile]
depth = 2
max_iter = 40

[train]
strategies = ["pretrained", "uniform"]
seeds = 1
steps = 2

[plateau]
sizes = [2, 3]
strategies = ["uniform"]
seeds = 4
costs = ["local"]
{extra}
"""

#: The user's generator: cat-like states cos(a)|0..0> + sin(a)|1..1>, label = (a > pi/4).
GENERATOR = '''
import numpy as np


def cats(n_qubits, seed):
    rng = np.random.default_rng(seed)
    angles = np.concatenate([rng.uniform(0.0, 0.6, 8), rng.uniform(1.0, 1.5, 8)])
    states = np.zeros((16, 2**n_qubits), dtype=complex)
    states[:, 0], states[:, -1] = np.cos(angles), np.sin(angles)
    return states, (angles > np.pi / 4).astype(np.int64)


def nan_states(n_qubits, seed):
    states, labels = cats(n_qubits, seed)
    states[3, 0] = np.nan
    return states, labels


def one_class(n_qubits, seed):
    states, labels = cats(n_qubits, seed)
    return states, np.zeros_like(labels)


def not_data(n_qubits, seed):
    return 42
'''

#: The user's circuits, per layer: RY on every wire, then a CZ ladder (not the identity at
#: zero angles), or then a controlled-RZ ladder (the identity at zero angles).
CIRCUIT = '''
import pennylane as qml


def ry_cz(params, wires):
    for layer in params:
        for angle, wire in zip(layer, wires):
            qml.RY(angle, wires=wire)
        for a, b in zip(wires[:-1], wires[1:]):
            qml.CZ(wires=[a, b])


def ry_crz(params, wires):
    for layer in params:
        for (turn, twist), wire in zip(layer, wires):
            qml.RY(turn, wires=wire)
        for (turn, twist), a, b in zip(layer, wires[:-1], wires[1:]):
            qml.CRZ(twist, wires=[a, b])
'''


def _recipe(tmp_path, data: str = "", extra: str = "", scenario: str = "magnet-phase"):
    path = tmp_path / "recipe.toml"
    path.write_text(SMALL.format(scenario=scenario, data=data, extra=extra))
    return path


@pytest.fixture
def user_modules(tmp_path, monkeypatch):
    """The generator and circuit modules in a folder on sys.path (and PYTHONPATH, for the
    spawned sweep workers)."""
    folder = tmp_path / "mods"
    folder.mkdir()
    (folder / "labdata.py").write_text(GENERATOR)
    (folder / "labcircuit.py").write_text(CIRCUIT)
    monkeypatch.syspath_prepend(str(folder))
    monkeypatch.setenv("PYTHONPATH", str(folder))
    return folder


def _labelled_files(folder, sizes=(2, 3)):
    for n in sizes:
        save_labelled(scenario_data("magnet-phase", n, 16, 0.25, seed=n), folder / f"d{n}.npz")


def _one_line_error(capsys, needle: str) -> str:
    err = capsys.readouterr().err.strip()
    assert err.startswith("thermoseed: error:") and len(err.splitlines()) == 1, err
    assert needle in err, err
    return err


# --------------------------------------------------------------------- own data in recipes


def test_recipe_with_its_own_data_file_runs_on_that_data(tmp_path):
    folder = tmp_path / "lab"
    folder.mkdir()
    _labelled_files(folder, sizes=(2,))
    recipe = load_recipe(_recipe(folder, data='file = "d2.npz"'))
    assert recipe.data.file == str((folder / "d2.npz").resolve())  # relative to the recipe
    out = tmp_path / "run"
    run_recipe(recipe, out, progress=False, workers=1)
    from thermoseed.pretrain.labelled import load_labelled

    mine, used = load_labelled(folder / "d2.npz"), load_labelled(out / "data.npz")
    for a, b in zip(mine, used, strict=True):
        np.testing.assert_array_equal(a, b)


def test_recipe_data_files_table_must_cover_every_size_that_needs_data(tmp_path):
    _labelled_files(tmp_path)
    table = '\n[data.files]\n2 = "d2.npz"\n3 = "d3.npz"\n'
    recipe = load_recipe(_recipe(tmp_path, data=table))
    assert dict(recipe.data.files) == {2: str(tmp_path / "d2.npz"), 3: str(tmp_path / "d3.npz")}
    assert sorted(recipe_data(recipe)) == [2, 3]
    short = _recipe(tmp_path, data='\n[data.files]\n2 = "d2.npz"\n',
                    extra="").read_text().replace('strategies = ["uniform"]\nseeds = 4',
                                                  'strategies = ["pretrained"]\nseeds = 4')
    (tmp_path / "short.toml").write_text(short)
    with pytest.raises(ThermoseedError, match=r"needs labelled data at n = 3 .* files for n = 2"):
        load_recipe(tmp_path / "short.toml")


def test_recipe_with_a_generator_module(tmp_path, user_modules):
    recipe = load_recipe(_recipe(tmp_path, data='generator = "labdata:cats"'))
    data = recipe_data(recipe)
    assert sorted(data) == [2]
    assert set(data[2].train_labels) == {0, 1} and data[2].n_qubits == 2
    again = generated_data("labdata:cats", 2, recipe.seed + 2, test_fraction=0.25)
    np.testing.assert_array_equal(data[2].train_states, again.train_states)  # seeded
    out = tmp_path / "run"
    assert main(["run", str(tmp_path / "recipe.toml"), "--out", str(out), "--quiet",
                 "--workers", "1"]) == 0
    assert json.loads((out / "run.json").read_text())["status"] == "finished"


@pytest.mark.parametrize("entry, needle", [
    ("nowhere_module:cats", "[data] generator 'nowhere_module:cats': cannot import module"),
    ("labdata:missing", "has no function 'missing'"),
    ("labdata:not_data", "returned int; return LabelledData(...) or a pair (states, labels)"),
    ("labdata:nan_states", "contains NaN or inf"),
    ("labdata:one_class", "the task needs both classes [0, 1]"),
])
def test_bad_generators_are_one_line_errors_before_any_work(tmp_path, user_modules, capsys,
                                                            entry, needle):
    recipe = _recipe(tmp_path, data=f'generator = "{entry}"')
    out = tmp_path / "run"
    assert main(["run", str(recipe), "--out", str(out), "--quiet", "--workers", "1"]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith("thermoseed: error:") and len(err.splitlines()) == 1, err
    assert entry in err and needle in err, err
    assert not out.exists()  # nothing was written


def test_one_class_data_is_refused_naming_the_task(tmp_path):
    from thermoseed.pretrain.labelled import LabelledData
    from thermoseed.recipes.sources import checked_labelled

    states = np.eye(4, dtype=complex)
    data = LabelledData(states[:2], np.array([1, 1]), states[2:], np.array([0, 1]))
    with pytest.raises(ThermoseedError, match=r"train part holds labels \[1\]; the task needs "
                                              r"both classes \[0, 1\]"):
        checked_labelled(data, 2, "my data")


@pytest.mark.parametrize("data, message", [
    ('file = "absent.npz"', "[data] file = 'absent.npz' does not exist"),
    ('file = "d2.npz"\ngenerator = "labdata:cats"', "[data] gives file and generator"),
    ('generator = "no colon"', "must name a function as \"module:function\""),
    ('\n[data.files]\nfour = "d2.npz"\n', "[data.files] key 'four' must be a qubit count"),
    ('\n[data.files]\n3 = "d2.npz"\n', "[data] qubits = 2 has no file in [data.files]"),
    ("shots = -1", "[data] shots = -1 must be an integer in 0..10000000"),
])
def test_own_data_values_are_checked_by_the_recipe_validation(tmp_path, data, message):
    _labelled_files(tmp_path, sizes=(2,))
    with pytest.raises(ThermoseedError, match=re.escape(message)):
        load_recipe(_recipe(tmp_path, data=data))


def test_data_file_of_another_qubit_count_is_one_line(tmp_path, capsys):
    _labelled_files(tmp_path, sizes=(3,))
    recipe = _recipe(tmp_path, data='file = "d3.npz"')
    assert main(["run", str(recipe), "--out", str(tmp_path / "run"), "--quiet"]) == 1
    _one_line_error(capsys, "holds 3-qubit states, not 2")


# --------------------------------------------------------------------- own circuit


@pytest.mark.parametrize("circuit, message", [
    ('function = "labcircuit:ry_cz"', "[circuit] takes exactly the keys function and shape"),
    ('function = "labcircuit"\nshape = ["depth", "n"]', "must name a function as"),
    ('function = "labcircuit:ry_cz"\nshape = ["depth", "wires"]', "shape entry 'wires'"),
    ('function = "labcircuit:ry_cz"\nshape = []', "shape must be a non-empty list"),
])
def test_circuit_section_is_validated(tmp_path, circuit, message):
    with pytest.raises(ThermoseedError, match=re.escape(message)):
        load_recipe(_recipe(tmp_path, extra=f"\n[circuit]\n{circuit}\n"))


def test_circuit_and_template_together_are_refused(tmp_path):
    text = _recipe(tmp_path, extra='\n[circuit]\nfunction = "m:f"\nshape = ["n"]\n').read_text()
    (tmp_path / "both.toml").write_text(text.replace("depth = 2", 'depth = 2\ntemplate = "soft"'))
    with pytest.raises(ThermoseedError, match="keep one of them"):
        load_recipe(tmp_path / "both.toml")


def test_recipe_with_its_own_circuit_runs_it_in_the_compile_and_the_probes(tmp_path,
                                                                          user_modules):
    recipe = load_recipe(_recipe(tmp_path, extra='\n[circuit]\nfunction = "labcircuit:ry_crz"'
                                                  '\nshape = ["depth", "n", 2]\n'))
    out = tmp_path / "run"
    run_recipe(recipe, out, progress=False, workers=1)
    from thermoseed.bridge.compile_record import load_compile
    from thermoseed.recipes.sources import recipe_circuit

    unit = recipe_circuit(recipe).ansatz(2, 2)
    assert unit.shape == (2, 2, 2)  # ("depth", "n", 2) at n = 2, depth 2
    assert load_compile(out / "compile.npz", ansatz=unit).report.model_fidelity > 0
    jobs = [json.loads(line)["job"] for line in (out / "results.jsonl").read_text().splitlines()]
    assert {j["template"] for j in jobs} == {"labcircuit:ry_crz"}
    assert {j["strategy"] for j in jobs} == {"pretrained", "uniform"}
    with np.load(out / "warm_start.npz", allow_pickle=False) as f:  # encoder + identity head
        assert f["params"].size == 2 * unit.n_params


def test_circuit_that_cannot_serve_pretrained_starts_is_refused_before_any_work(
        tmp_path, user_modules, capsys):
    recipe = _recipe(tmp_path, extra='\n[circuit]\nfunction = "labcircuit:ry_cz"\n'
                                     'shape = [3, "n"]\n')  # three CZ layers: CZ, not I
    out = tmp_path / "run"
    assert main(["run", str(recipe), "--out", str(out), "--quiet"]) == 1
    _one_line_error(capsys, "cannot serve the strategies pretrained at n = 2")
    assert not out.exists()
    # depth = n: CZ^n is the identity at n = 2 but not at the plateau's n = 3
    by_size = recipe.read_text().replace("depth = 2\n", "").replace('[3, "n"]', '["depth", "n"]')
    (tmp_path / "by_size.toml").write_text(by_size.replace('strategies = ["uniform"]',
                                                           'strategies = ["pretrained"]'))
    assert main(["run", str(tmp_path / "by_size.toml"), "--out", str(out), "--quiet"]) == 1
    _one_line_error(capsys, "cannot serve the strategies pretrained at n = 3")
    assert not out.exists()


# --------------------------------------------------------------------- command line


def test_sweep_and_report_take_one_data_file_per_qubit_count(tmp_path, capsys):
    _labelled_files(tmp_path)
    out = tmp_path / "cls.jsonl"
    argv = ["sweep", "--sizes", "2,3", "--strategies", "uniform", "--costs", "classifier",
            "--seeds", "4", "--workers", "1", "--quiet", "--out", str(out),
            "--data", f"2={tmp_path / 'd2.npz'},3={tmp_path / 'd3.npz'}"]
    assert main(argv) == 0
    assert json.loads(capsys.readouterr().out)["ran"] == 2 * 4
    records = [json.loads(line) for line in out.read_text().splitlines()]
    from thermoseed.pretrain.labelled import load_labelled

    ids = {n: load_labelled(tmp_path / f"d{n}.npz").fingerprint() for n in (2, 3)}
    assert {(r["job"]["n_qubits"], r["data"]) for r in records} == set(ids.items())
    assert main(["report", str(out), "--out", str(tmp_path / "rep"), "--quiet"]) == 0
    assert "| 3 |" in (tmp_path / "rep" / "report.md").read_text()


def test_sweep_data_label_must_match_the_file(tmp_path, capsys):
    _labelled_files(tmp_path, sizes=(2,))
    assert main(["sweep", "--sizes", "3", "--strategies", "uniform", "--costs", "classifier",
                 "--seeds", "2", "--workers", "1", "--quiet", "--out", str(tmp_path / "x.jsonl"),
                 "--data", f"3={tmp_path / 'd2.npz'}"]) == 1
    _one_line_error(capsys, "holds 2-qubit states, not 3")


def test_sweep_model_options_are_checked_before_any_job(tmp_path, capsys):
    out = tmp_path / "r.jsonl"
    assert main(["sweep", "--sizes", "2", "--strategies", "uniform", "--seeds", "2",
                 "--workers", "1", "--quiet", "--out", str(out), "--fields", "XQ"]) == 1
    _one_line_error(capsys, "unknown Pauli letter 'Q'")
    assert not out.exists()


@pytest.mark.parametrize("value", ["x=a.npz", "4=", "2=a.npz,2=b.npz"])
def test_sweep_data_pairs_fail_at_parse_time(value, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["sweep", "--sizes", "2", "--out", "r.jsonl", "--data", value])
    assert stop.value.code == 2


def test_sweep_model_options_reach_the_job_settings(tmp_path, capsys):
    out = tmp_path / "r.jsonl"
    assert main(["sweep", "--sizes", "2,3", "--strategies", "uniform", "--seeds", "2",
                 "--costs", "local", "--workers", "1", "--quiet", "--out", str(out),
                 "--graph", "ring", "--fields", "XYZ", "--couplings", "ZZ,YY", "--l2", "0.02",
                 "--parity"]) == 0
    settings = {json.dumps(json.loads(line)["job"]["settings"], sort_keys=True)
                for line in out.read_text().splitlines()}
    assert len(settings) == 1
    got = json.loads(settings.pop())
    assert (got["graph"], got["fields"], got["couplings"], got["l2"], got["parity"]) == \
        ("ring", "XYZ", ["ZZ", "YY"], 0.02, True)


def test_fit_and_compile_write_convergence_plots(tmp_path, capsys):
    from matplotlib.image import imread

    data = scenario_data("magnet-phase", 2, 16, 0.25, seed=1)
    np.savez(tmp_path / "states.npz", states=data.train_states)
    assert main(["fit", str(tmp_path / "states.npz"), "--out", str(tmp_path / "m.npz"),
                 "--quiet", "--convergence-plot", str(tmp_path / "fit.png")]) == 0
    assert json.loads(capsys.readouterr().out)["convergence_plot"] == str(tmp_path / "fit.png")
    assert main(["compile", str(tmp_path / "m.npz"), "--out", str(tmp_path / "c.npz"),
                 "--quiet", "--max-iter", "20", "--restarts", "1",
                 "--convergence-plot", str(tmp_path / "compile.png")]) == 0
    for name in ("fit.png", "compile.png"):
        image = imread(tmp_path / name)  # a readable PNG: rows x columns x RGBA
        assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100


def test_plots_refuse_an_empty_history(tmp_path):
    from thermoseed.recipes.plots import plot_compile_history, plot_fit_history

    with pytest.raises(ThermoseedError, match="fit history's loss is empty"):
        plot_fit_history({"loss": [], "grad_norm": []}, tmp_path / "a.png")
    with pytest.raises(ThermoseedError, match="'loss' and 'grad_norm'"):
        plot_fit_history([1.0, 2.0], tmp_path / "a.png")
    with pytest.raises(ThermoseedError, match="compile history is empty"):
        plot_compile_history([], tmp_path / "b.png")


# --------------------------------------------------------------------- reports


@pytest.fixture(scope="module")
def shot_runs(tmp_path_factory):
    """The probe-drift scenario fitted from simulated shots, run twice with one seed."""
    base = tmp_path_factory.mktemp("shots")
    path = base / "drift.toml"
    path.write_text(SMALL.format(scenario="probe-drift", data="shots = 20000", extra="")
                    .replace('couplings = ["ZZ"]', 'couplings = ["ZZ", "XX"]'))
    recipe = load_recipe(path)
    for name in ("a", "b"):
        run_recipe(recipe, base / name, progress=False, workers=1)
    return base


def test_probe_drift_recipe_fits_from_shots_with_standard_errors(shot_runs):
    from matplotlib.image import imread

    run = json.loads((shot_runs / "a" / "run.json").read_text())
    fit = run["fit"]
    assert fit["shots"] == 20000 and (shot_runs / "a" / "records.npz").exists()
    rows = fit["coefficients"]
    assert [r["term"] for r in rows] == ["XI", "IX", "ZI", "IZ", "ZZ", "XX"]
    assert all(r["stderr"] > 0 for r in rows)
    report = (shot_runs / "a" / "report.md").read_text()
    assert "| term | coefficient | standard error | moment residual (standard errors) |" \
        in report
    assert "fitted from 20000 simulated measurement shots" in report
    for r in rows:
        assert f"| {r['term']} | {r['coef']:+.4f} | {r['stderr']:.4f} |" in report
    # the shot-noise residuals of a converged fit: within a few standard errors (from memory:
    # a least-squares residual is at most the noise, |z| <= 3 for Gaussian errors)
    assert fit["converged"] and fit["max_abs_residual_in_stderr"] < 3
    for name in ("fit_history.png", "compile_history.png"):
        assert imread(shot_runs / "a" / name).ndim == 3
        assert f"]({name})" in report


def test_same_seed_gives_the_same_coefficients_and_errors(shot_runs):
    a = json.loads((shot_runs / "a" / "run.json").read_text())["fit"]
    b = json.loads((shot_runs / "b" / "run.json").read_text())["fit"]
    assert a["coefficients"] == b["coefficients"]


def test_shot_noise_standard_errors_shrink_as_one_over_root_shots():
    """From memory: moment estimates from N shots have standard errors ~ 1/sqrt(N), and the
    coefficient covariance is linear in the moment covariance, so 4x the shots halve them."""
    from thermoseed.pretrain import VisibleGibbsModel
    from thermoseed.pretrain.records import simulate_shots
    from thermoseed.recipes.pipeline import _training_data, pretrain_settings

    recipe = validate_recipe({"scenario": "probe-drift", "data": {"qubits": 2}})
    td = _training_data(scenario_data("probe-drift", 2, 24, 0.25, seed=0))
    terms = pretrain_settings(recipe).terms(2)
    errors = [VisibleGibbsModel(terms, l2=1e-3).fit(simulate_shots(td.rho, shots, seed=1))
              .coef_stderr_ for shots in (20000, 80000)]
    ratio = np.median(errors[0] / errors[1])
    assert 1.6 < ratio < 2.5, ratio


def test_poor_compile_draws_no_conclusion_about_the_pretrained_start(tmp_path):
    recipe = load_recipe(_recipe(tmp_path))
    poor = dataclasses.replace(recipe, compile=dataclasses.replace(recipe.compile, max_iter=1))
    with pytest.warns(UserWarning):  # the compile's own convergence warning
        run_recipe(poor, tmp_path / "run", progress=False, workers=1)
    run = json.loads((tmp_path / "run" / "run.json").read_text())
    fidelity = run["compile"]["model_fidelity"]
    assert fidelity < MIN_COMPILE_FIDELITY
    report = (tmp_path / "run" / "report.md").read_text()
    assert (f"the compile stage reached fidelity {fidelity:.2f} < 0.9: no conclusion about the "
            "pre-trained start is drawn") in report
    assert "pre-trained warm start (not assessed: stage quality)" in report
    assert "no later than any other start" not in report


@pytest.mark.parametrize("fit, compile, needle", [
    ({"converged": False, "iterations": 500, "grad_norm": 0.3, "relative_entropy": 0.1},
     {"model_fidelity": 0.99}, "the fit stage stopped unconverged after 500 iterations"),
    ({"converged": True, "relative_entropy": "inf"}, {"model_fidelity": 0.99},
     "the fit stage ended with loss inf"),
    ({"converged": True, "relative_entropy": 0.1}, {"model_fidelity": float("nan")},
     "the compile stage reached fidelity nan < 0.9"),
    ({"converged": True, "relative_entropy": 0.1}, None, "the compile stage did not finish"),
    ({"converged": True, "diverging": True, "relative_entropy": 0.1},
     {"model_fidelity": 0.99}, "the fit stage diverges"),
])
def test_stage_problems_name_the_failed_stage(fit, compile, needle):
    assert any(needle in p for p in stage_problems({"fit": fit, "compile": compile}))
    assert stage_problems({"fit": {"converged": True, "relative_entropy": 0.1},
                           "compile": {"model_fidelity": 0.95}}) == []


def test_eigensolver_report_marks_pretrained_rows_when_the_compile_failed():
    from thermoseed.recipes.findings import eigensolver_findings

    recipe = load_recipe("neighbour-xxz")
    runs = [{"strategy": s, "seed": 0, "energies": [0.0, -1.0], "steps_to_target": 1}
            for s in ("pretrained", "uniform")]
    good = {"fit": {"converged": True, "relative_entropy": 0.1, "terms": 3},
            "compile": {"model_fidelity": 0.97, "converged": True}}
    bad = {**good, "compile": {"model_fidelity": 0.06}}
    text = eigensolver_findings(recipe, bad, runs, -2.0, -1.9)
    assert "the compile stage reached fidelity 0.06 < 0.9: no conclusion" in text
    assert "| pre-trained warm start (not assessed) |" in text
    assert "| uniform on [0, 2pi) |" in text
    fine = eigensolver_findings(recipe, good, runs, -2.0, -1.9)
    assert "not assessed" not in fine and "reached fidelity 0.970 >= 0.9" in fine


def test_readme_documents_own_data_circuit_and_plots():
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    for needle in ("[data.files]", 'generator = "', "[circuit]", "--data 4=",
                   "--convergence-plot", "shots ="):
        assert needle in readme, needle


def test_class_model_start_is_judged_on_its_own_chain_when_the_compile_fell_short():
    """The class-model start fits its own per-class models; a failed unlabelled compile marks
    only the starts built from it, and the class-model comparison leaves those out."""
    from types import SimpleNamespace

    from thermoseed.recipes.findings import _size_lines

    def summary(start, steps):
        return SimpleNamespace(start_accuracy=start, steps_to_target=steps, reached=2,
                               n_seeds=2, last_accuracy=start, best_accuracy=start)

    summaries = {"class_models": summary(1.0, 2), "pretrained": summary(1.0, 0),
                 "uniform": summary(0.5, 6)}
    text = "\n".join(_size_lines(3, summaries, None, 0.9, judged=False))
    assert "- class-model warm start: held-out" in text
    assert "pre-trained warm start (not assessed: stage quality)" in text
    # compared with the uniform start only (the pre-trained one reached it at step 0)
    assert "reached the target no later than any other start" in text
