"""Command line and recipes end to end: outputs, reproducibility, user errors, README."""

from __future__ import annotations

import json
import re
import shlex
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from markdown_check import rendered_structure

from thermoseed.bridge.ansatz import make_ansatz
from thermoseed.bridge.compile import compile_latent
from thermoseed.bridge.compile_record import load_compile
from thermoseed.pretrain import load_model
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.cli import main
from thermoseed.recipes.config import load_recipe, validate_recipe

ROOT = Path(__file__).resolve().parents[1]

TINY = """
name = "tiny"
title = "Tiny magnet-phase run"
scenario = "magnet-phase"
seed = 3

[data]
qubits = 2
samples = 16
test_fraction = 0.25

[model]
graph = "line"
fields = "XZ"
couplings = ["ZZ"]
l2 = 1e-3

[compile]
template = "soft"
depth = 2
restarts = 1
max_iter = 40

[train]
strategies = ["pretrained", "uniform"]
seeds = 1
steps = 3

[plateau]
sizes = [2, 3]
strategies = ["uniform", "pretrained"]
seeds = 3
costs = ["local"]
"""


def _records(path: Path) -> list[dict]:
    out = []
    for line in path.read_text().splitlines():
        rec = json.loads(line)
        rec.pop("seconds")  # wall time is the only field allowed to differ
        out.append(rec)
    return sorted(out, key=lambda r: r["key"])


@pytest.fixture(scope="module")
def tiny_runs(tmp_path_factory):
    base = tmp_path_factory.mktemp("runs")
    recipe = base / "tiny.toml"
    recipe.write_text(TINY)
    codes = [main(["run", str(recipe), "--out", str(base / name), "--quiet", "--workers", "1"])
             for name in ("a", "b")]
    return base, codes


def test_recipe_run_writes_every_output(tiny_runs):
    base, codes = tiny_runs
    assert codes == [0, 0]
    run = base / "a"
    for name in ("data.npz", "model.npz", "compile.npz", "warm_start.npz", "results.jsonl",
                 "report.md", "run.json", "decay.png", "curves.png"):
        assert (run / name).stat().st_size > 0, name
    info = json.loads((run / "run.json").read_text())
    assert info["status"] == "finished"
    assert info["seeds"]["recipe"] == 3
    assert {"python", "numpy", "scipy", "pennylane", "autograd"} <= set(info["versions"])
    assert set(info["timings"]) >= {"fit", "compile", "sweep", "report", "total"}
    from matplotlib.image import imread

    assert imread(run / "decay.png").size > 0
    from thermoseed.bridge.compile_record import load_compile
    from thermoseed.pretrain import load_model

    assert load_model(run / "model.npz").coef_.shape == (5,)  # X, Z fields on 2 wires + ZZ
    assert load_compile(run / "compile.npz").params.shape == (2, 2, 3)
    with np.load(run / "warm_start.npz", allow_pickle=False) as f:
        assert f["params"].size == 2 * 12
    report = (run / "report.md").read_text()
    assert "In plain words" in report and "no hardware advantage is claimed" in report
    # Source: markdown-it-py (CommonMark + GFM tables): one title, one limits statement
    shape = rendered_structure(report)
    assert shape["h1"] == 1 and report.count("Limits:") == 1
    assert shape["tables"] == 3 and shape["images"] >= 2


def test_recipe_rerun_same_seed_reproduces_numbers(tiny_runs):
    base, _ = tiny_runs
    assert _records(base / "a" / "results.jsonl") == _records(base / "b" / "results.jsonl")
    a = json.loads((base / "a" / "run.json").read_text())
    b = json.loads((base / "b" / "run.json").read_text())
    assert a["fit"] == b["fit"] and a["compile"] == b["compile"]
    with np.load(base / "a" / "warm_start.npz") as fa, np.load(base / "b" / "warm_start.npz") as fb:
        np.testing.assert_array_equal(fa["params"], fb["params"])


def test_rerun_into_same_folder_resumes_without_rerunning_jobs(tiny_runs):
    base, _ = tiny_runs
    before = (base / "a" / "results.jsonl").read_text()
    assert main(["run", str(base / "tiny.toml"), "--out", str(base / "a"), "--quiet",
                 "--workers", "1"]) == 0
    assert (base / "a" / "results.jsonl").read_text() == before


def test_folder_of_other_recipe_is_refused(tiny_runs, capsys):
    base, _ = tiny_runs
    code = main(["run", str(base / "tiny.toml"), "--out", str(base / "a"), "--seed", "9",
                 "--quiet"])
    assert code == 1
    assert "different settings" in capsys.readouterr().err


def test_fit_compile_warm_start_inspect_commands(tmp_path, capsys):
    from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data

    magnet_phase_data(2, 12, seed=0).save_npz(tmp_path / "d.npz")
    assert main(["fit", str(tmp_path / "d.npz"), "--graph", "line", "--fields", "XZ",
                 "--couplings", "ZZ", "--l2", "1e-3", "--out", str(tmp_path / "m.npz"),
                 "--quiet"]) == 0
    fit = json.loads(capsys.readouterr().out)
    assert fit["converged"] is True and fit["terms"] == 5
    assert main(["compile", str(tmp_path / "m.npz"), "--layers", "2", "--restarts", "1",
                 "--max-iter", "30", "--out", str(tmp_path / "c.npz"), "--quiet"]) == 0
    comp = json.loads(capsys.readouterr().out)
    assert 0 <= comp["model_fidelity"] <= 1
    # the screening options reach compile_latent: the same run through the Python API
    assert main(["compile", str(tmp_path / "m.npz"), "--layers", "2", "--restarts", "2",
                 "--small-starts", "2", "--screen-iter", "5", "--max-iter", "30",
                 "--out", str(tmp_path / "s.npz"), "--quiet"]) == 0
    capsys.readouterr()
    screened = load_compile(tmp_path / "s.npz").params
    model = load_model(tmp_path / "m.npz")
    direct = compile_latent(model, make_ansatz("strong", 2, 2), restarts=2, small_starts=2,
                            screen_iter=5, max_iter=30).params
    unscreened = compile_latent(model, make_ansatz("strong", 2, 2), restarts=2,
                                max_iter=30).params
    assert np.array_equal(screened, direct)
    assert not np.allclose(unscreened, direct)  # the options change the run
    assert main(["warm-start", str(tmp_path / "c.npz"), "--head", "soft",
                 "--out", str(tmp_path / "p.npz"), "--quiet"]) == 0
    assert json.loads(capsys.readouterr().out)["shape"] == [2 * 2 * 3 + 1 * 2 * 3]
    assert main(["inspect", str(tmp_path / "m.npz")]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert shown["header"]["kind"] == "gibbs-model" and "coef" in shown["arrays"]


def test_sweep_and_report_commands(tiny_runs, tmp_path, capsys):
    base, _ = tiny_runs
    out = tmp_path / "r.jsonl"
    argv = ["sweep", "--sizes", "2,3", "--strategies", "uniform,identity_blocks", "--seeds", "4",
            "--costs", "local", "--workers", "1", "--out", str(out), "--quiet"]
    assert main(argv) == 0
    assert json.loads(capsys.readouterr().out)["ran"] == 2 * 2 * 4
    assert main(argv) == 0  # rerun resumes: nothing left to run
    assert json.loads(capsys.readouterr().out) == {"results": str(out), "jobs": 16, "ran": 0,
                                                    "skipped": 16}
    assert main(["sweep", "--sizes", "2", "--strategies", "uniform", "--costs", "classifier",
                 "--seeds", "2", "--workers", "1", "--data", str(base / "a" / "data.npz"),
                 "--out", str(tmp_path / "c.jsonl"), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["report", str(out), "--out", str(tmp_path / "rep"), "--quiet"]) == 0
    assert (tmp_path / "rep" / "decay.png").stat().st_size > 0
    assert "slope" in (tmp_path / "rep" / "report.md").read_text()


@pytest.mark.parametrize("argv, needle", [
    (["report", "missing.jsonl", "--out", "rep"], "holds no sweep records"),
    (["fit", "missing.npz", "--out", "m.npz"], "does not exist"),
    (["inspect", "missing.npz"], "does not exist"),
    (["run", "no-such-recipe"], "neither a built-in"),
])
def test_user_errors_are_one_line_exit_1(argv, needle, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 1
    err = capsys.readouterr().err.strip()
    assert needle in err and err.startswith("thermoseed: error:")
    assert len(err.splitlines()) == 1 and "Traceback" not in err


def test_bad_recipe_schema_is_one_line_exit_1(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text(TINY.replace("steps = 3", "stepz = 3"))
    assert main(["run", str(bad), "--out", str(tmp_path / "o"), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "unknown keys ['stepz']" in err and len(err.strip().splitlines()) == 1
    broken = tmp_path / "broken.toml"
    broken.write_text("name = [unclosed")
    assert main(["run", str(broken), "--quiet"]) == 1
    assert "not valid TOML" in capsys.readouterr().err


@pytest.mark.parametrize("argv", [
    ["fit", "d.npz", "--out", "m.npz", "--l2", "-1"],
    ["fit", "d.npz", "--out", "m.npz", "--no-such-option"],
    ["compile", "m.npz", "--out", "c.npz", "--layers", "zero"],
])
def test_bad_options_fail_at_parse_time_with_exit_2(argv, capsys):
    with pytest.raises(SystemExit) as info:
        main(argv)
    assert info.value.code == 2
    assert "Traceback" not in capsys.readouterr().err


def test_recipe_type_errors_name_the_key():
    raw = {"scenario": "magnet-phase", "data": {"qubits": "four"}}
    with pytest.raises(ThermoseedError, match="qubits"):
        validate_recipe(raw)
    with pytest.raises(ThermoseedError, match="scenario"):
        validate_recipe({"scenario": "weather"})


def test_builtin_recipes_load():
    for name in ("magnet-phase", "probe-drift", "neighbour-xxz"):
        recipe = load_recipe(name, quick=True)
        assert recipe.scenario == name and recipe.compile.depth_for(recipe.data.qubits) >= 1


def test_help_mentions_an_example_for_every_command(capsys):
    for command in ("fit", "compile", "warm-start", "sweep", "report", "run", "inspect"):
        with pytest.raises(SystemExit) as info:
            main([command, "--help"])
        assert info.value.code == 0
        assert "example" in capsys.readouterr().out


def _quickstart_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    block = re.search(r"## Quick start\s+```bash\n(.*?)```", text, re.S)
    assert block, "README needs a ```bash quick-start block under '## Quick start'"
    return [line for line in block.group(1).splitlines() if line.strip()]


def test_readme_quickstart_is_two_install_and_run_commands():
    commands = _quickstart_commands()
    assert len(commands) == 2
    assert all(c.startswith("pip install ") for c in commands)
    assert "thermoseed run" in commands[0] and "pytest" in commands[1]


@pytest.mark.slow
def test_readme_quickstart_main_job_runs(tmp_path):
    """Runs the README's main-job command verbatim (after its install step, which the test
    environment has already done) from an empty folder."""
    job = _quickstart_commands()[0].split("&&", 1)[1].strip()
    argv = shlex.split(job)
    assert argv[0] == "thermoseed"
    proc = subprocess.run([sys.executable, "-m", "thermoseed.recipes", *argv[1:]], cwd=tmp_path,
                          capture_output=True, text=True, timeout=1800)
    assert proc.returncode == 0, proc.stderr[-2000:]
    report = tmp_path / "thermoseed-runs" / "magnet-phase" / "report.md"
    assert "In plain words" in report.read_text()


def test_qubit_override_goes_through_the_file_rules(tmp_path):
    """--qubits is validated like the same value in a TOML file, and keeps an explicit depth."""
    for bad in (11, 1):
        with pytest.raises(ThermoseedError, match=r"qubits = \d+ must be an integer in 2..10"):
            load_recipe("magnet-phase", qubits=bad)
    assert load_recipe("magnet-phase", qubits=6).compile.depth_for(6) == 6  # follows n
    path = tmp_path / "mine.toml"
    path.write_text('scenario = "magnet-phase"\n[compile]\ndepth = 2\n')
    assert load_recipe(path, qubits=6).compile.depth == 2
    with pytest.raises(ThermoseedError, match="seed = -1 must be a non-negative integer"):
        load_recipe(path, seed=-1)


def test_version_flag(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0 and capsys.readouterr().out.startswith("thermoseed ")


@pytest.mark.parametrize("section, key, value, message", [
    ("data", "test_fraction", 1.5, "test_fraction = 1.5 must be a finite number > 0 and < 1"),
    ("data", "test_fraction", float("nan"), "test_fraction = nan"),
    ("data", "samples", 10**9, "samples = 1000000000 must be an integer in 4..4096"),
    ("compile", "max_iter", -10, "max_iter = -10 must be an integer in 1..100000"),
    ("compile", "max_iter", 0, "max_iter = 0"),
    ("compile", "template", "wavy", "template = 'wavy' is not one of"),
    ("compile", "depth", 100000, "depth = 100000 must be an integer in 1..64"),
    ("model", "l2", -1.0, "l2 = -1.0 must be a finite number >= 0"),
    ("model", "graph", "torus", "graph = 'torus' is not one of"),
    ("model", "fields", "XQ", "fields = 'XQ'"),
    ("model", "couplings", ["ZZZ"], "couplings entry 'ZZZ'"),
    ("train", "learning_rate", 0.0, "learning_rate = 0.0 must be a finite number > 0"),
    ("train", "strategies", [], "strategies must be a non-empty list"),
    ("train", "seeds", 100000000, "seeds = 100000000 must be an integer in 1..1000"),
    ("plateau", "costs", ["loud"], "costs = 'loud' is not one of"),
    ("plateau", "sizes", [4], "sizes = [4] needs >= 2 distinct integers"),
])
def test_every_recipe_value_is_checked_before_any_work(section, key, value, message):
    raw = {"scenario": "magnet-phase", section: {key: value}}
    with pytest.raises(ThermoseedError, match=re.escape(message)):
        validate_recipe(raw)


@pytest.mark.parametrize("name", ["../../x", "/tmp/abs", "a/b", "..", ""])
def test_recipe_names_are_plain_folder_names(name):
    with pytest.raises(ThermoseedError, match="must be a plain folder name"):
        validate_recipe({"scenario": "magnet-phase", "name": name})


def test_recipe_is_frozen_and_typed():
    recipe = load_recipe("magnet-phase")
    with pytest.raises(AttributeError):
        recipe.seed = 3
    assert isinstance(recipe.model.couplings, tuple) and recipe.data.qubits == 4
    assert recipe.fingerprint() == load_recipe("magnet-phase").fingerprint()
    assert recipe.fingerprint() != load_recipe("magnet-phase", seed=1).fingerprint()


def test_help_imports_no_numerical_library():
    """`thermoseed --help` stays instant: imports measured (not timed), scipy, pennylane and
    numpy's linear algebra are never loaded."""
    code = ("import sys\nfrom thermoseed.recipes.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in ('scipy', 'pennylane', 'autograd') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip().splitlines()[-1]
    assert out == "[]"


@pytest.mark.parametrize("package", ["pretrain", "bridge", "recipes"])
def test_exported_names_are_not_module_names(package):
    """A submodule imported later becomes an attribute of its package and would shadow a
    lazily exported name of the same spelling (e.g. a function warm_start in warm_start.py)."""
    root = Path(__file__).resolve().parents[1] / package
    modules = {p.stem for p in root.rglob("*.py")} | {p.name for p in root.rglob("*")
                                                      if p.is_dir()}
    import importlib

    exported = set(importlib.import_module(f"thermoseed.{package}").__all__)
    assert not exported & modules


def test_package_roots_export_lazily():
    import thermoseed.pretrain as pretrain

    assert "GibbsClassifier" in dir(pretrain) and "GibbsClassifier" in pretrain.__all__
    assert pretrain.VisibleGibbsModel.__module__ == "thermoseed.pretrain.models"
    with pytest.raises(AttributeError, match="no attribute 'Nope'"):
        pretrain.Nope  # noqa: B018


def _readme_python_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text()
    return re.findall(r"```python\n(.*?)```", text, flags=re.S)


@pytest.mark.slow
def test_readme_quickstart_python_snippets_run(tmp_path):
    """Every Python block of the README, run in order in one namespace from an empty folder
    (the 'Before' line needs the names the later blocks define, so it runs last)."""
    blocks = _readme_python_blocks()
    assert len(blocks) >= 3
    before, rest = blocks[0], blocks[1:]
    code = "\n".join(rest + [before])
    proc = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                          text=True, timeout=1800)
    assert proc.returncode == 0, proc.stderr[-3000:]
    accuracy = float(re.search(r"held-out accuracy at step 0: ([0-9.]+)", proc.stdout)[1])
    assert accuracy > 0.5  # the labelled drop-in classifies before training (magnet-phase)


def test_run_never_writes_over_foreign_files_or_into_unwritable_places(tmp_path, capsys):
    """`run --out .` in a folder with the user's own data.npz refused before any work (it
    used to overwrite it); an unwritable --out fails before any work too."""
    mine = tmp_path / "data.npz"
    mine.write_bytes(b"the user's own file")
    assert main(["run", "magnet-phase", "--quick", "--out", str(tmp_path), "--quiet"]) == 1
    assert "no run.json" in capsys.readouterr().err
    assert mine.read_bytes() == b"the user's own file"
    blocked = tmp_path / "file-not-folder"
    blocked.write_text("x")
    assert main(["run", "magnet-phase", "--quick", "--out", str(blocked / "sub"),
                 "--quiet"]) == 1
    assert "pass an --out you can write to" in capsys.readouterr().err


def test_written_files_follow_the_umask_and_json_is_strict(tmp_path):
    """Atomic writes used to leave every output at mode 0600; run.json used to hold
    Infinity (not JSON)."""
    import os

    from thermoseed.pretrain.files import atomic_write_bytes, json_text

    old = os.umask(0o022)
    try:
        path = atomic_write_bytes(tmp_path / "out.bin", b"1")
    finally:
        os.umask(old)
    assert path.stat().st_mode & 0o777 == 0o644
    text = json_text({"a": float("inf"), "b": [float("nan"), 1.5], "c": np.float64(2.0)})
    assert json.loads(text) == {"a": "inf", "b": ["nan", 1.5], "c": 2.0}


@pytest.mark.parametrize("argv", [
    ["sweep", "--sizes", "2,3", "--seeds", "1", "--out", "r.jsonl"],
    ["sweep", "--sizes", "2,3", "--strategies", "", "--out", "r.jsonl"],
])
def test_sweep_refuses_what_its_report_cannot_use(argv, capsys):
    """One seed gives no variance (the report failed later); no strategy ran 0 jobs, exit 0."""
    with pytest.raises(SystemExit) as info:
        main(argv)
    assert info.value.code == 2 and "Traceback" not in capsys.readouterr().err


def test_bare_command_prints_help(capsys):
    assert main([]) == 0
    assert "usage: thermoseed" in capsys.readouterr().out


def test_npz_with_both_kinds_or_a_contradicting_kind_is_refused(tmp_path):
    from thermoseed.pretrain import load_training_data

    states = np.eye(4, dtype=complex)[:2]
    np.savez(tmp_path / "both.npz", states=states, density=np.eye(4)[None] / 4)
    with pytest.raises(ThermoseedError, match="both 'states' and 'density'"):
        load_training_data(tmp_path / "both.npz")
    np.savez(tmp_path / "s.npz", states=states)
    with pytest.raises(ThermoseedError, match="kind = 'density' was given"):
        load_training_data(tmp_path / "s.npz", kind="density")


def test_every_option_has_help_text():
    from thermoseed.recipes.cli import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    missing = [f"{name} {opt.option_strings or opt.dest}"
               for name, p in sub.choices.items() for opt in p._actions
               if not opt.help and "--help" not in opt.option_strings]
    assert not missing


def test_fit_says_how_good_it_is_and_takes_every_graph(tmp_path, capsys):
    rng = np.random.default_rng(0)
    states = rng.standard_normal((6, 16)) + 1j * rng.standard_normal((6, 16))
    states /= np.linalg.norm(states, axis=1, keepdims=True)
    np.savez(tmp_path / "d.npz", states=states)
    argv = ["fit", str(tmp_path / "d.npz"), "--out", str(tmp_path / "m.npz"),
            "--graph", "grid", "--shape", "2x2"]
    assert main(argv) == 0
    captured = capsys.readouterr()
    assert "S(rho||sigma) =" in captured.err and "fidelity" in captured.err
    out = json.loads(captured.out)
    assert 0 < out["fidelity"] <= 1 and out["terms"] == 2 * 4 + 2 * 4  # XZ fields, ZZ,XX
    assert main(["fit", str(tmp_path / "d.npz"), "--out", str(tmp_path / "e.npz"),
                 "--graph", "edges", "--edges", "0-3,1-2", "--quiet"]) == 0
    assert json.loads(capsys.readouterr().out)["terms"] == 2 * 4 + 2 * 2


def test_recipe_template_names_are_the_registry():
    """config keeps the names as plain strings (no PennyLane import for --help); they must be
    the bridge registry's."""
    from thermoseed.bridge.templates import TEMPLATES
    from thermoseed.recipes.config import TEMPLATE_NAMES

    assert set(TEMPLATE_NAMES) == set(TEMPLATES)


def test_inspect_every_file_kind(tiny_runs, tmp_path, capsys):
    """Records show their values (model: term -> coefficient), a results .jsonl gets a summary
    (it used to be called 'pickled (object) data'), a damaged record gets the loader's own
    message (it used to be called 'plain .npz arrays')."""
    base, _ = tiny_runs
    run = base / "a"
    for name in ("model.npz", "compile.npz", "warm_start.npz", "data.npz"):
        assert main(["inspect", str(run / name)]) == 0, name
        shown = json.loads(capsys.readouterr().out)
        assert shown["header"]["format"] == "thermoseed-record"
    assert main(["inspect", str(run / "model.npz")]) == 0
    assert len(json.loads(capsys.readouterr().out)["values"]["terms"]) == 5
    assert main(["inspect", str(run / "results.jsonl")]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["records"] > 0 and summary["failures"] == 0 and summary["sizes"]
    from thermoseed.pretrain.files import read_record, write_record

    header, arrays = read_record(run / "model.npz")
    header["version"] = 99
    write_record(tmp_path / "future.npz", header.pop("kind"), header, arrays)
    assert main(["inspect", str(tmp_path / "future.npz")]) == 1
    assert "newer than this thermoseed reads" in capsys.readouterr().err


def test_cli_messages_name_cli_options_and_warnings_are_one_line(tmp_path, capsys):
    """'pass renormalize=True' reaches a CLI user as '--renormalize'; a warning is one line
    with the advice, without Python source lines or site-packages paths."""
    np.save(tmp_path / "sq.npy", np.eye(4, dtype=complex) / 2)  # square: ambiguous
    assert main(["fit", str(tmp_path / "sq.npy"), "--out", str(tmp_path / "m.npz")]) == 1
    err = capsys.readouterr().err
    assert "--kind states or --kind density" in err and "kind='states'" not in err
    np.savez(tmp_path / "d.npz", states=2 * np.eye(4, dtype=complex)[:2])
    assert main(["fit", str(tmp_path / "d.npz"), "--out", str(tmp_path / "m.npz")]) == 1
    err = capsys.readouterr().err
    assert "--renormalize" in err and "renormalize=True" not in err
    np.savez(tmp_path / "p.npz", states=np.eye(4, dtype=complex)[:1])  # 2 steps: no convergence
    assert main(["fit", str(tmp_path / "p.npz"), "--out", str(tmp_path / "m.npz"),
                 "--l2", "0", "--max-iter", "2", "--quiet"]) == 0
    warned = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert warned and all(line.startswith("thermoseed: warning: ") for line in warned)
    assert not any(".py" in line for line in warned)


def test_fit_reads_a_measurement_records_file(tmp_path, capsys):
    """`thermoseed fit records.npz`: classical-shadow moments with standard errors; the model
    file carries a standard error per coefficient."""
    from thermoseed.pretrain import load_model, save_records, simulate_shots

    psi = np.zeros(8, dtype=complex)
    psi[[0, 7]] = 1 / np.sqrt(2)
    save_records(tmp_path / "rec.npz", simulate_shots(psi, 4000, seed=1))
    assert main(["fit", str(tmp_path / "rec.npz"), "--out", str(tmp_path / "m.npz")]) == 0
    captured = capsys.readouterr()
    assert "fit from 4000 shots" in captured.err
    out = json.loads(captured.out)
    assert out["shots"] == 4000 and out["max_coef_stderr"] > 0
    model = load_model(tmp_path / "m.npz")
    assert model.coef_stderr_.shape == model.coef_.shape
