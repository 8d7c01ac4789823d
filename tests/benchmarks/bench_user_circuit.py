"""Benchmark: the unitary of a user's own circuit, and the readout compile into it (by hand).

    PYTHONPATH=. python tests/benchmarks/bench_user_circuit.py        # n = 4, 6, 8
    PYTHONPATH=. python tests/benchmarks/bench_user_circuit.py 4 6    # chosen sizes

(from the repository root; ``PYTHONPATH=.`` is not needed after ``pip install .``).
Not collected by pytest (the file name does not start with ``test_``).

Circuit: the user's quantum function ``qml.StronglyEntanglingLayers(params, wires)`` with 3
layers, wrapped by ``user_ansatz`` (so the built-in tensor form is NOT used): 9 n parameters.
States: a seeded pair of low-rank mixed states, sigma_0 of rank 2 and sigma_1 of rank 3
(``G G^dag / Tr`` with complex Gaussian G), equal priors, readout wire 0.

Case "unitary_value_grad" (per n): seconds per value-and-gradient (autograd) of the
unitary-based objective ``P(phi) = p_0 + Tr((Pi_1 (x) I) U Gamma U^dag)``,
``Gamma = p_1 sigma_1 - p_0 sigma_0``, with the full U(phi) from
  * old:        ``bridge.ansatz.columns`` (broadcast ``default.qubit`` backprop run with
                ``StatePrep`` of all basis states; the path user circuits took before);
  * qml_matrix: ``qml.matrix(qfunc, wire_order)(params)`` with autograd parameters;
  * new:        ``bridge.ansatz.unitary`` (recorded gates applied as tensor operations);
  * new_block:  ``bridge.readout_compile.readout_objective``, the same P from U applied to
                Gamma's eigenvectors only (d x rank), as the readout compile evaluates it.
All four values and the old/new gradients are checked to agree before timing.

Case "readout_compile" (n = 6, 8): ``readout_compile`` with default settings (4 seeded
uniform starts plus one small-angle start, L-BFGS, seed 0): wall-clock and process-CPU
seconds, achieved success, Helstrom bound, the best success any circuit can reach with one
readout wire (``attainable``), iterations of the best start, starts run, converged flag.
Target: < 10 s at n = 6 and < 60 s at n = 8 on 2 cores.

Output: a human-readable table per case, then one JSON object per case per line with keys
  case            "unitary_value_grad" or "readout_compile"
  n, n_params     qubits and parameter count
  old_ms, qml_matrix_ms, new_ms, new_block_ms   median ms per value-and-gradient
  old_min_ms, qml_matrix_min_ms, new_min_ms, new_block_min_ms   the fastest repeat (less
                  sensitive to other load on a shared machine)
  speedup         old_ms / new_ms
  block_columns   rank of Gamma (columns of the block)
  seconds, cpu_seconds, success, bound, attainable, iterations, starts, converged,
  target_s, target_met                           (readout_compile)
  load_avg        1-minute load average before and after
  cpu_count       os.cpu_count()
"""

from __future__ import annotations

import json
import os
import sys
import time
import warnings

import autograd
import autograd.numpy as anp
import numpy as np
import pennylane as qml

from thermoseed.bridge.ansatz import columns, unitary, user_ansatz
from thermoseed.bridge.readout import readout_compile, readout_objective

LAYERS = 3
TARGETS = {6: 10.0, 8: 60.0}


def _circuit(params, wires):
    qml.StronglyEntanglingLayers(params, wires=wires)


def _states(n: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    d, out = 2**n, []
    for rank in (2, 3):
        g = rng.standard_normal((d, rank)) + 1j * rng.standard_normal((d, rank))
        s = g @ g.conj().T
        out.append(s / np.trace(s).real)
    return out


def _seconds(fn, x, repeats: int) -> tuple[float, float]:
    """(median, min) seconds of ``fn(x)`` after one warm-up call."""
    fn(x)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn(x)
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), float(np.min(times))


def unitary_case(n: int) -> dict:
    ansatz = user_ansatz(_circuit, (LAYERS, n, 3), range(n))
    states = _states(n)
    gamma = 0.5 * states[1] - 0.5 * states[0]
    mask = ((np.arange(2**n) >> (n - 1)) & 1).astype(float)  # readout wire 0 reads 1

    def objective(unitary_of):
        def p(x):
            u = unitary_of(anp.reshape(x, ansatz.shape))
            return 0.5 + anp.sum(mask * anp.real(anp.diag(anp.dot(u, anp.dot(gamma, anp.conj(
                anp.transpose(u)))))))
        return p

    ways = {
        "old": objective(lambda p: anp.transpose(columns(lambda q: ansatz(q, range(n)), p, n))),
        "qml_matrix": objective(
            lambda p: qml.matrix(lambda q: ansatz(q), wire_order=list(range(n)))(p)),
        "new": objective(lambda p: unitary(ansatz, p)),
    }
    block = readout_objective(states, ansatz, (0,))
    ways["new_block"] = lambda x: block(anp.reshape(x, ansatz.shape))
    x = ansatz.random_params(1).ravel()
    values = {k: float(f(x)) for k, f in ways.items()}
    assert max(values.values()) - min(values.values()) < 1e-10, values
    g_old = autograd.grad(ways["old"])(x)
    assert np.abs(autograd.grad(ways["new"])(x) - g_old).max() < 1e-10
    assert np.abs(autograd.grad(ways["new_block"])(x) - g_old).max() < 1e-10

    load_before = os.getloadavg()[0]
    ms, best = {}, {}
    for key, f in ways.items():
        repeats = 5 if key in ("old", "qml_matrix") and n >= 8 else 15
        median, low = _seconds(autograd.value_and_grad(f), x, repeats)
        ms[key], best[key] = 1e3 * median, 1e3 * low
    vals = np.linalg.eigvalsh(gamma)
    return {
        "case": "unitary_value_grad", "n": n, "n_params": ansatz.n_params,
        "old_ms": ms["old"], "qml_matrix_ms": ms["qml_matrix"], "new_ms": ms["new"],
        "new_block_ms": ms["new_block"], "speedup": ms["old"] / ms["new"],
        "old_min_ms": best["old"], "qml_matrix_min_ms": best["qml_matrix"],
        "new_min_ms": best["new"], "new_block_min_ms": best["new_block"],
        "block_columns": int(np.sum(np.abs(vals) > 1e-13)),
        "load_avg": [load_before, os.getloadavg()[0]], "cpu_count": os.cpu_count(),
    }


def compile_case(n: int) -> dict:
    ansatz = user_ansatz(_circuit, (LAYERS, n, 3), range(n))
    states = _states(n)
    load_before = os.getloadavg()[0]
    t0, c0 = time.perf_counter(), time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = readout_compile(states, ansatz, seed=0)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    return {
        "case": "readout_compile", "n": n, "n_params": ansatz.n_params, "seconds": seconds,
        "cpu_seconds": cpu, "success": result.success, "bound": result.bound,
        "attainable": result.attainable, "iterations": result.iterations,
        "starts": result.starts, "converged": result.converged,
        "target_s": TARGETS.get(n), "target_met": seconds < TARGETS[n] if n in TARGETS else None,
        "load_avg": [load_before, os.getloadavg()[0]], "cpu_count": os.cpu_count(),
    }


def main(argv: list[str]) -> int:
    sizes = [int(a) for a in argv] or [4, 6, 8]
    rows = []
    for n in sizes:
        rows.append(unitary_case(n))
        print(f"unitary n = {n} done", file=sys.stderr, flush=True)
    for n in sizes:
        if n in TARGETS:
            rows.append(compile_case(n))
            print(f"readout compile n = {n} done ({rows[-1]['seconds']:.1f} s)",
                  file=sys.stderr, flush=True)
    print(f"value+gradient of P = p0 + Tr((Pi_1 x I) U Gamma U^dag), user circuit "
          f"StronglyEntanglingLayers, {LAYERS} layers: median (min) ms")
    print(f"{'n':>2} {'params':>6} {'old':>15} {'qml.matrix':>15} {'new':>13} {'new block':>11} "
          f"{'rank':>4} {'speedup':>7} {'load':>9}")
    for r in rows:
        if r["case"] == "unitary_value_grad":
            load = f"{r['load_avg'][0]:.1f}-{r['load_avg'][1]:.1f}"
            cells = [f"{r[k + '_ms']:.1f} ({r[k + '_min_ms']:.1f})"
                     for k in ("old", "qml_matrix", "new", "new_block")]
            print(f"{r['n']:2d} {r['n_params']:6d} {cells[0]:>15} {cells[1]:>15} {cells[2]:>13} "
                  f"{cells[3]:>11} {r['block_columns']:4d} {r['speedup']:7.1f} {load:>9}")
    print("readout compile into the same circuit (default settings, seed 0)")
    print(f"{'n':>2} {'wall s':>7} {'cpu s':>7} {'success':>9} {'bound':>9} {'attainable':>10} "
          f"{'iters':>5} {'starts':>6} {'conv':>5} {'target':>7}")
    for r in rows:
        if r["case"] == "readout_compile":
            met = "met" if r["target_met"] else "NOT met"
            print(f"{r['n']:2d} {r['seconds']:7.1f} {r['cpu_seconds']:7.1f} {r['success']:9.6f} "
                  f"{r['bound']:9.6f} {r['attainable']:10.6f} {r['iterations']:5d} "
                  f"{r['starts']:6d} {str(r['converged']):>5} {met:>7}")
    for r in rows:
        print(json.dumps(r))
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
