"""The user's own quantum function through plateau sweeps and reports (``circuit_family``).

Outside checks: the family's circuit against ``qml.matrix`` of the user's function; the probe
gradient against central finite differences of a cost built from ``qml.matrix``; the
identity-block classifier loss against the cross-entropy of the data's own wire-0
populations (at ``V = I`` the readout sees the data unchanged; closed form, from memory).
Executor checks: every run must reproduce the in-process run bit for bit.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pennylane as qml
import pytest

from thermoseed.bridge import circuit_family, make_ansatz, unitary, user_ansatz
from thermoseed.bridge.classifier import LOG_FLOOR
from thermoseed.bridge.families import circuit_fingerprint
from thermoseed.bridge.plateau.gradients import CircuitGradient
from thermoseed.bridge.plateau.report import write_report
from thermoseed.bridge.plateau.strategies import PretrainSettings, zero_is_identity
from thermoseed.bridge.plateau.sweep import make_grid, probe_results, read_records, run_sweep
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import LabelledData
from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data, train_test_split

NAME = "ry-rz ladder"


def _layers(params, wires, entangler):
    """params (depth, n, 2): RY, RZ on every wire, then ``entangler`` on neighbours."""
    for layer in params:
        for w, (a, b) in zip(wires, layer, strict=True):
            qml.RY(a, wires=w)
            qml.RZ(b, wires=w)
        for w0, w1 in zip(wires[:-1], wires[1:], strict=False):
            entangler(wires=[w0, w1])


def hardware_efficient(params, wires):
    """The user's circuit: RY, RZ layers with a CNOT ladder."""
    _layers(params, wires, qml.CNOT)


def hardware_efficient_cz(params, wires):
    """The same with CZ instead of CNOT (a changed function under the same name)."""
    _layers(params, wires, qml.CZ)


def rotation_ladder(params, wires):
    """params (depth, n, 3): RY, RZ on every wire, then CRX(params[l, k, 2]) on neighbours;
    the identity at zero parameters (what the pretrained strategies need of a head)."""
    for layer in params:
        for w, (a, b) in zip(wires, layer[:, :2], strict=True):
            qml.RY(a, wires=w)
            qml.RZ(b, wires=w)
        for k, (w0, w1) in enumerate(zip(wires[:-1], wires[1:], strict=False)):
            qml.CRX(layer[k, 2], wires=[w0, w1])


def magnet(n: int) -> LabelledData:
    train, test = train_test_split(magnet_phase_data(n, 8, seed=2), seed=2)
    return LabelledData(train.states, train.labels, test.states, test.labels)


def by_key(records) -> dict:
    return {rec["key"]: rec["result"] for rec in records}


def test_family_is_the_users_circuit_at_every_size():
    family = circuit_family(hardware_efficient, ("depth", "n", 2), NAME)
    params = np.random.default_rng(1).uniform(0, 2 * np.pi, size=(2, 3, 2))
    ansatz = family.ansatz(3, 2)
    assert ansatz.shape == (2, 3, 2) and ansatz.wires == (0, 1, 2) and ansatz.name == NAME
    # reference: PennyLane's own matrix of the user's function
    expected = qml.matrix(hardware_efficient, wire_order=[0, 1, 2])(params, [0, 1, 2])
    np.testing.assert_allclose(unitary(ansatz, params), expected, atol=1e-12)
    by_callable = circuit_family(hardware_efficient, lambda n, depth: (depth, n, 2), NAME)
    assert by_callable.fingerprint(3, 2) == family.fingerprint(3, 2)
    again = circuit_family(hardware_efficient, ("depth", "n", 2), NAME)
    assert again.fingerprint(3, 2) == family.fingerprint(3, 2)
    changed = circuit_family(hardware_efficient_cz, ("depth", "n", 2), NAME)
    renamed = circuit_family(hardware_efficient, ("depth", "n", 2), "other name")
    prints = {family.fingerprint(3, 2), family.fingerprint(2, 2), family.fingerprint(3, 1),
              changed.fingerprint(3, 2), renamed.fingerprint(3, 2)}
    assert len(prints) == 5
    assert circuit_fingerprint(ansatz) == family.fingerprint(3, 2)


@pytest.mark.parametrize("make, message", [
    (lambda: circuit_family(hardware_efficient, ("depth", "width", 2), NAME), "'width'"),
    (lambda: circuit_family(hardware_efficient, ("depth", "n", 0), NAME), "integers >= 1"),
    (lambda: circuit_family(hardware_efficient, ("depth", "n", 2), "soft"), "built-in"),
    (lambda: circuit_family(hardware_efficient, ("depth", "n", 2), ""), "non-empty"),
    (lambda: circuit_family("qfunc", ("n",), NAME), "callable"),
    (lambda: make_grid([2], ["uniform"], [0], template=circuit_family(
        hardware_efficient, ("depth", "n", 1), NAME)), "failed on parameters of shape"),
    (lambda: make_grid([2], ["uniform"], [0], template=circuit_family(
        hardware_efficient, lambda n, depth: (depth, -n), NAME)), "integers >= 1"),
    (lambda: make_grid([2, 3], ["uniform"], [0], template=user_ansatz(
        hardware_efficient, (1, 3, 2), range(3), name="mine")), "n = \\[2\\]"),
    (lambda: make_grid([2], ["uniform"], [0], template="sideways"), "unknown template"),
    (lambda: make_grid([2], ["uniform"], [0], template=42), "template must be"),
    (lambda: make_grid([2], ["pretrained"], [0], depths=[1], template=circuit_family(
        hardware_efficient, ("depth", "n", 2), NAME)), "identity at zero parameters"),
])
def test_mistakes_are_one_line_before_any_work(make, message):
    with pytest.raises(ThermoseedError, match=message) as info:
        make()
    assert "\n" not in str(info.value)


def test_probe_gradient_of_a_family_matches_finite_differences():
    """The device adjoint path maps the user's gate angles back to the parameters."""
    family = circuit_family(hardware_efficient, ("depth", "n", 2), NAME)
    unit = family.ansatz(3, 2)
    engine = CircuitGradient(unit, "local")
    assert engine.method == "adjoint/lightning.qubit"
    rng = np.random.default_rng(4)
    params = rng.uniform(0, 2 * np.pi, size=engine.shape)
    psi = rng.standard_normal(8) + 1j * rng.standard_normal(8)
    psi /= np.linalg.norm(psi)
    value, grad = engine(params, psi)
    u = qml.matrix(hardware_efficient, wire_order=[0, 1, 2])  # reference matrices
    z0 = np.kron(np.diag([1.0, -1.0]), np.eye(4))

    def cost(p):
        e, h = p[:12].reshape(2, 3, 2), p[12:].reshape(2, 3, 2)
        v = u(h, [0, 1, 2]) @ u(e, [0, 1, 2]).conj().T
        phi = v @ psi
        return float(np.real(phi.conj() @ z0 @ phi))

    step = 1e-6
    fd = np.array([(cost(params + step * d) - cost(params - step * d)) / (2 * step)
                   for d in np.eye(params.size)])
    assert value == pytest.approx(cost(params), abs=1e-12)
    np.testing.assert_allclose(np.ravel(grad), fd, atol=1e-7)


def test_readme_flow_with_a_family_workers_resume_and_a_changed_function(tmp_path):
    """The README section's flow: one and two workers give identical numbers, records hold
    the name and the fingerprint (plain JSON), the report groups by the name, a rerun
    resumes, and a changed function under the same name gets new keys."""
    family = circuit_family(hardware_efficient, ("depth", "n", 2), NAME)
    jobs = make_grid([2, 3], ["uniform", "identity_blocks"], range(3),
                     costs=["local", "global"], depths=[2], template=family)
    one = run_sweep(jobs, tmp_path / "one.jsonl", workers=1, progress=False)
    two = run_sweep(jobs, tmp_path / "two.jsonl", workers=2, chunk=2, progress=False)
    assert one.ran == two.ran == len(jobs) == 24
    assert by_key(one.records) == by_key(two.records)
    line = json.loads((tmp_path / "one.jsonl").read_text().splitlines()[0])
    assert line["job"]["template"] == NAME
    assert line["job"]["circuit"] == family.fingerprint(line["job"]["n_qubits"], 2)
    report = write_report(two.records, tmp_path / "report").read_text()
    assert f"| local | identity blocks | {NAME} | 2..3 | 3 |" in report
    assert (f"`{NAME}` (n = 2: {family.fingerprint(2, 2)}, n = 3: {family.fingerprint(3, 2)})"
            in report)
    assert {p.template for p in probe_results(one.records)} == {NAME}

    again = run_sweep(jobs, tmp_path / "one.jsonl", workers=1, progress=False)
    assert again.ran == 0 and again.skipped == len(jobs)
    changed = make_grid([2, 3], ["uniform", "identity_blocks"], range(3),
                        costs=["local", "global"], depths=[2],
                        template=circuit_family(hardware_efficient_cz, ("depth", "n", 2), NAME))
    fresh = run_sweep(changed, tmp_path / "one.jsonl", workers=1, progress=False)
    assert fresh.ran == len(jobs) and fresh.skipped == 0
    assert not set(by_key(fresh.records)) & set(by_key(one.records))
    with pytest.raises(ThermoseedError, match="two versions of circuit 'ry-rz ladder'"):
        probe_results(read_records(tmp_path / "one.jsonl"))
    write_report(fresh.records, tmp_path / "fresh")  # one version: fine


def _nested_family():
    def inner(params, wires):
        hardware_efficient(params, wires)

    return circuit_family(inner, ("depth", "n", 2), "nested")


@pytest.mark.parametrize("family, message", [
    (circuit_family(lambda p, w: hardware_efficient(p, w), ("depth", "n", 2), "anon"),
     "is a lambda"),
    (_nested_family(), "defined inside another function"),
    (circuit_family(hardware_efficient, lambda n, depth: (depth, n, 2), "shaped"),
     "its shape"),
])
def test_functions_workers_cannot_import_are_refused_before_any_work(tmp_path, family,
                                                                    message):
    jobs = make_grid([2], ["uniform"], range(2), depths=[1], template=family)
    path = tmp_path / "r.jsonl"
    with pytest.raises(ThermoseedError, match=message) as info:
        run_sweep(jobs, path, workers=2, progress=False)
    assert "workers=1" in str(info.value) and "\n" not in str(info.value)
    assert not path.exists()
    assert run_sweep(jobs, path, workers=1, progress=False).ran == 2  # in-process: fine


def test_fixed_ansatz_records_are_json(tmp_path):
    """The reported failure: a user_ansatz template made the record unserialisable."""
    mine = user_ansatz(hardware_efficient, (2, 3, 2), range(3), name="mine")
    out = run_sweep(make_grid([3], ["uniform"], range(2), template=mine), tmp_path / "f.jsonl",
                    workers=1, progress=False)
    assert out.ran == 2
    assert {r["job"]["template"] for r in read_records(tmp_path / "f.jsonl")} == {"mine"}
    assert out.records[0]["job"]["circuit"] == circuit_fingerprint(mine)


def test_every_strategy_cost_and_training_with_a_family(tmp_path):
    """All six strategies with the classifier cost, the circuit costs and training curves on
    a family that is the identity at zero (the pretrained strategies' head)."""
    data = {2: magnet(2)}
    family = circuit_family(rotation_ladder, ("depth", "n", 3), "rotation ladder")
    cheap = ["uniform", "small_angle", "identity_blocks"]
    warm = ["pretrained", "pretrained_perturbed", "class_models"]
    strategies = cheap + warm
    short = PretrainSettings(compile_iter=60)
    costs = ["local", "global", "classifier"]
    jobs = make_grid([2], cheap, range(2), costs=costs, depths=[1], template=family)
    jobs += make_grid([2], warm, [0], costs=costs, depths=[1], template=family,
                      settings=short)
    jobs += make_grid([2], ["uniform", "class_models"], [0], task="training", steps=2,
                      depths=[1], template=family, settings=short)
    out = run_sweep(jobs, tmp_path / "all.jsonl", data=data, workers=1, progress=False)
    assert out.ran == len(jobs) == 29
    probes = probe_results(out.records)
    assert {(p.strategy, p.cost) for p in probes} == {
        (s, c) for s in strategies for c in ("local", "global", "classifier")}
    assert all(np.isfinite(p.value) and np.all(np.isfinite(p.grad)) for p in probes)
    curves = [r for r in out.records if r["job"]["task"] == "training"]
    assert len(curves) == 2 and all(len(r["result"]["loss"]) == 3 for r in curves)
    # V = I: the readout sees the data's own wire-0 populations (wire 0 = leading bit)
    states = np.asarray(data[2].train_states)
    p1 = np.sum(np.abs(states[:, 2:]) ** 2, axis=1)
    picked = np.where(np.asarray(data[2].train_labels) == 1, p1, 1 - p1)
    expected = -np.mean(np.log(picked + LOG_FLOOR))
    for p in probes:
        if p.strategy == "identity_blocks" and p.cost == "classifier":
            assert p.value == pytest.approx(expected, abs=1e-10)


def test_function_of_a_session_without_a_script_is_refused_with_workers(tmp_path):
    """``python -c`` (like a notebook) has no file the spawned workers could import."""
    code = (
        "import pennylane as qml\n"
        "from thermoseed.bridge import circuit_family, make_grid, run_sweep\n"
        "from thermoseed.pretrain.errors import ThermoseedError\n"
        "def layers(params, wires):\n"
        "    for layer in params:\n"
        "        for w, a in zip(wires, layer):\n"
        "            qml.RY(a, wires=w)\n"
        "family = circuit_family(layers, ('depth', 'n'), 'session')\n"
        "jobs = make_grid([2], ['uniform'], [0], depths=[1], template=family)\n"
        "try:\n"
        "    run_sweep(jobs, 'r.jsonl', workers=2, progress=False)\n"
        "except ThermoseedError as err:\n"
        "    print(err)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                          text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "interactive session" in proc.stdout and "workers=1" in proc.stdout
    assert not (tmp_path / "r.jsonl").exists()


def phased(params, wires):
    """RY angles plus a fixed global phase: U(0) = e^{-i 0.7} I."""
    for w, a in zip(wires, params, strict=True):
        qml.RY(a, wires=w)
    qml.GlobalPhase(0.7, wires=wires)


@pytest.mark.parametrize("make, identity", [
    (lambda: make_ansatz("soft", 3, 2), True),
    (lambda: make_ansatz("strong", 3, 1), False),
    (lambda: circuit_family(rotation_ladder, ("depth", "n", 3), "r").ansatz(3, 2), True),
    (lambda: circuit_family(hardware_efficient, ("depth", "n", 2), "h").ansatz(3, 1), False),
    (lambda: circuit_family(hardware_efficient, ("depth", "n", 2), "h").ansatz(2, 2), True),
    (lambda: user_ansatz(phased, (3,), range(3), name="phased"), True),
])
def test_identity_at_zero_is_detected(make, identity):
    """Against the full matrix from ``qml.matrix`` (CNOT twice is the identity, so the CNOT
    ladder at n = 2, depth 2 is one; a global phase does not count)."""
    unit = make()
    u = qml.matrix(unit.qfunc, wire_order=list(unit.wires))(np.zeros(unit.shape),
                                                           list(unit.wires))
    reference = np.allclose(u, u[0, 0] * np.eye(len(u)), atol=1e-12)
    assert zero_is_identity(unit) is identity is reference
