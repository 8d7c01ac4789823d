"""Class-model warm start in a user's own classifier script, against random initialisation.

The script a PennyLane user writes: three ``qml.StronglyEntanglingLayers`` on n wires, data
state in, ``p(class 1) = (1 - <Z_0>)/2`` out, mean cross-entropy, Adam at a fixed learning
rate, full batch. Two starts, same script:

* ``random``: ``weights ~ U[0, 2 pi)`` (seeded);
* ``class_models``: ``warm_start(GibbsClassifier(...).fit(train), ansatz=user_ansatz(...),
  readout=0)``: one Gibbs model per class on the line term set {X_i, Z_i, Z_iZ_j, X_iX_j}
  (plus the global parity strings for probe-drift), l2 = 1e-3, balanced priors; the Helstrom
  rule between them compiled into the user's circuit.

Scenarios (ours): magnet-phase (Ising-chain ground states, ordered / disordered) and
probe-drift (noisy GHZ-like probes, drift beyond tolerance); 96 states per size, 72 training,
24 held out (stratified, seeded). Sizes n = 4, 6, 8 by default, seeds 0..4.

For every (scenario, n, seed, start): held-out accuracy at step 0, best along the curve and
last, training loss at step 0, steps to 90% held-out accuracy, compile seconds; per (scenario,
n, seed) the exact rules of the fitted class models on the held-out states (many-copy,
single-shot) and the single-shot bounds (models, data mixtures). The step-0 numbers of the
first seed are checked against PennyLane (``default.qubit``, or ``default.mixed`` for density
matrices) running the same script.

Usage: ``python tests/benchmarks/bench_class_warm_start.py [--sizes 4,6,8] [--seeds 5]
[--steps 60] [--lr 0.05] [--scenarios magnet-phase,probe-drift]``.

Output: a table per case, then one JSON object per (scenario, n, seed, start) line with keys
``case, scenario, n, seed, start, acc0, acc_best, acc_last, loss0, steps_to_90, compile_s,
rule_many_copy, rule_single_shot, bound_models, bound_data``, then one summary line per
(scenario, n, start) with the medians (``case = "summary"``).
"""

from __future__ import annotations

import argparse
import json
import time
import warnings

import autograd
import autograd.numpy as anp
import numpy as np
import pennylane as qml

from thermoseed.bridge import unitary, user_ansatz, warm_start
from thermoseed.pretrain import GibbsClassifier, graph_terms, split_labelled
from thermoseed.pretrain.optim import adam_steps
from thermoseed.recipes import magnet_phase_data, probe_drift_data

TARGET = 0.9


def my_circuit(weights, wires):
    qml.StronglyEntanglingLayers(weights, wires=wires)


def scenario_data(name: str, n: int, seed: int):
    batch = magnet_phase_data(n, 96, seed=seed) if name == "magnet-phase" else \
        probe_drift_data(n, 96, seed=seed)
    states = batch.states if name == "magnet-phase" else batch.density
    return split_labelled(states, batch.labels, test_fraction=0.25, seed=seed)


def p_one(ansatz, weights, states):
    """p(class 1) = (1 - <Z_0>)/2 = weight of outcome 1 on wire 0 after U."""
    u = unitary(ansatz, weights)
    d = u.shape[0]
    ones = (np.arange(d) >> (int(np.log2(d)) - 1)) & 1
    if np.ndim(states) == 2:
        amps = anp.dot(states, anp.transpose(u))
        probs = anp.real(amps * anp.conj(amps))
    else:
        probs = anp.real(anp.einsum("ai,bij,aj->ba", u, states, anp.conj(u)))
    return anp.sum(probs * ones[None, :], axis=1)


def loss(ansatz, weights, states, labels):
    p1 = anp.clip(p_one(ansatz, weights, states), 1e-12, 1 - 1e-12)
    return -anp.mean(labels * anp.log(p1) + (1 - labels) * anp.log(1 - p1))


def accuracy(ansatz, weights, states, labels) -> float:
    return float(np.mean((np.asarray(p_one(ansatz, weights, states)) > 0.5) == (labels == 1)))


def pennylane_step0(weights, data, n) -> tuple[float, float]:
    """Reference: the user's QNode on default.qubit (default.mixed for density matrices):
    held-out accuracy and training loss."""
    mixed = np.ndim(data.test_states) == 3
    dev = qml.device("default.mixed" if mixed else "default.qubit", wires=n)

    @qml.qnode(dev)
    def model(state):
        if np.ndim(state) == 1:
            qml.StatePrep(state, wires=range(n))
        else:
            qml.QubitDensityMatrix(state, wires=range(n))
        my_circuit(weights, range(n))
        return qml.expval(qml.PauliZ(0))

    def p1(states):
        return np.array([(1 - float(model(s))) / 2 for s in states])

    test = p1(data.test_states)
    train = np.clip(p1(data.train_states), 1e-12, 1 - 1e-12)
    y = data.train_labels
    ce = -np.mean(y * np.log(train) + (1 - y) * np.log(1 - train))
    return float(np.mean((test > 0.5) == (data.test_labels == 1))), float(ce)


def train(ansatz, weights, data, steps: int, lr: float):
    y = data.train_labels.astype(float)
    value_and_grad = autograd.value_and_grad(
        lambda w: loss(ansatz, w, data.train_states, y))
    accs = [accuracy(ansatz, weights, data.test_states, data.test_labels)]
    loss0 = float(loss(ansatz, weights, data.train_states, y))
    for item in adam_steps(value_and_grad, np.asarray(weights, float), learning_rate=lr):
        accs.append(accuracy(ansatz, item.x, data.test_states, data.test_labels))
        if item.step >= steps:
            break
    reach = next((i for i, a in enumerate(accs) if a >= TARGET), None)
    return {"acc0": accs[0], "acc_best": max(accs), "acc_last": accs[-1], "loss0": loss0,
            "steps_to_90": reach}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="4,6,8")
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--steps", type=int, default=60)
    parser.add_argument("--lr", type=float, default=0.05)
    parser.add_argument("--scenarios", default="magnet-phase,probe-drift")
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    rows = []
    for scenario in args.scenarios.split(","):
        for n in [int(v) for v in args.sizes.split(",")]:
            shape = qml.StronglyEntanglingLayers.shape(n_layers=3, n_wires=n)
            ansatz = user_ansatz(my_circuit, shape, range(n))
            terms = graph_terms(n, "line", fields="XZ", couplings=("ZZ", "XX"),
                                parity=scenario == "probe-drift")
            for seed in range(args.seeds):
                data = scenario_data(scenario, n, seed)
                clf = GibbsClassifier(terms, l2=1e-3).fit(data.train_states, data.train_labels)
                rules = {"rule_many_copy": clf.score(data.test_states, data.test_labels),
                         "rule_single_shot": clf.set_params(rule="single-shot").score(
                             data.test_states, data.test_labels),
                         "bound_models": clf.model_success_, "bound_data": clf.data_success_}
                t0 = time.perf_counter()
                warm = np.asarray(warm_start(clf, ansatz=ansatz, readout=0, seed=seed), float)
                compile_s = time.perf_counter() - t0
                rand = np.random.default_rng(1000 + seed).uniform(0, 2 * np.pi, shape)
                for start, weights, secs in (("class_models", warm, compile_s),
                                             ("random", rand, 0.0)):
                    row = {"case": "run", "scenario": scenario, "n": n, "seed": seed,
                           "start": start, "compile_s": secs, **rules,
                           **train(ansatz, weights, data, args.steps, args.lr)}
                    if seed == 0:  # the numbers above are the user's script's numbers
                        ref_acc, ref_loss = pennylane_step0(weights, data, n)
                        assert abs(ref_acc - row["acc0"]) < 1e-9, (ref_acc, row["acc0"])
                        assert abs(ref_loss - row["loss0"]) < 1e-6, (ref_loss, row["loss0"])
                    rows.append(row)
                    print(f"{scenario:13s} n={n} seed={seed} {start:12s} acc0 "
                          f"{row['acc0']:.3f} best {row['acc_best']:.3f} last "
                          f"{row['acc_last']:.3f} loss0 {row['loss0']:.3f} to90 "
                          f"{row['steps_to_90']} compile {secs:.1f}s | rules many "
                          f"{rules['rule_many_copy']:.3f} single {rules['rule_single_shot']:.3f}"
                          f" bounds {rules['bound_models']:.3f}/{rules['bound_data']:.3f}",
                          flush=True)
    print()
    for row in rows:
        print(json.dumps(row))
    keys = sorted({(r["scenario"], r["n"], r["start"]) for r in rows})
    for scenario, n, start in keys:
        sel = [r for r in rows if (r["scenario"], r["n"], r["start"]) == (scenario, n, start)]
        steps = [r["steps_to_90"] for r in sel]
        reached = [s for s in steps if s is not None]
        summary = {"case": "summary", "scenario": scenario, "n": n, "start": start,
                   "seeds": len(sel), "lr": args.lr}
        for key in ("acc0", "acc_best", "acc_last", "loss0", "compile_s", "rule_many_copy",
                    "rule_single_shot", "bound_models", "bound_data"):
            summary[key] = float(np.median([r[key] for r in sel]))
        summary["steps_to_90"] = float(np.median(reached)) if 2 * len(reached) > len(sel) \
            else None
        summary["reached_90"] = len(reached)
        print(json.dumps(summary))


if __name__ == "__main__":
    main()
