"""Speed of the dense Gibbs engine against its eigh floor and two hand-written baselines.

Run from the repository root (not collected by pytest: the name does not match ``test_*.py``)::

    python tests/benchmarks/bench_dense_engine.py            # n = 6, 8, 10
    python tests/benchmarks/bench_dense_engine.py --max-n 12 --fit-max-n 10

Fixed, seeded instance at each n: the ring term set with X, Y, Z fields and XX, YY, ZZ
couplings (6n terms, complex H because of the Y fields); data = Gibbs state of that model with
coefficients ~ N(0, 0.4^2) plus off-model next-nearest-neighbour X_i Z_{i+2} terms
(coefficient 0.3), so the fit is a genuine maximum-entropy projection.

Cases (one JSON object per line at the end, after the table):

- ``eval``: seconds per ``VisibleGibbsModel.loss_and_grad`` (best of ``--repeats``) vs the
  floor = the fastest of numpy.linalg.eigh, scipy.linalg.eigh(driver='evd') and
  scipy.linalg.eigh(driver='evr') on a random complex Hermitian matrix of the same size, timed
  in the same run. Target at n = 10: ratio <= 1.5.
- ``fit``: seconds for a full L-BFGS fit to |grad| <= 1e-6 from theta = 0. Target at n = 10:
  < 60 s.
- ``baseline_a`` (n = 6): loss by scipy expm + logm, gradient by central finite differences
  (2 x n_terms extra losses). Target: >= 300x slower than ``eval``.
- ``baseline_b`` (n = 8): loss by scipy expm, closed-form gradient m - <P>_sigma with moments
  Tr(sigma P_j) from precomputed dense Pauli matrices, elementwise traces (O(d^2) each).
  Target: >= 10x slower than ``eval``.
- ``baseline_b_matmul`` (n = 8): as ``baseline_b`` but with np.trace(sigma @ P_j) (O(d^3)
  each); shown for reference, no target.

JSON keys: ``case``, ``n``, ``dim``, ``n_terms``, ``seconds`` (the measured quantity),
``reference`` (what it is compared with: "eigh floor", "thermoseed eval" or null),
``reference_seconds``, ``ratio`` (``seconds / reference_seconds`` for eval, the slow-down
``seconds / reference_seconds`` for baselines), ``target`` (text or null), ``meets_target``
(bool or null), ``details`` (dict: eigh driver times and the fastest driver for ``eval``;
iterations, evaluations, final gradient norm and convergence for ``fit``; agreement of the
baseline's loss and gradient with thermoseed's for baselines).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from functools import reduce

from bench_report import print_report  # noqa: E402 - stdlib only
from blas_threads import preset_threads  # noqa: E402 - stdlib only, before numpy

if __name__ == "__main__":
    preset_threads(sys.argv[1:])

import numpy as np  # noqa: E402
import scipy.linalg  # noqa: E402

from thermoseed.pretrain import (  # noqa: E402
    ConvergenceWarning,
    TermSet,
    VisibleGibbsModel,
    expectations,
    graph_terms,
    von_neumann_entropy,
)

SEED = 20240611
DRIVERS = ("numpy", "evd", "evr")
PAULI_2x2 = {
    "I": np.eye(2, dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


# ---------------------------------------------------------------- instance


def instance(n: int):
    """Ring term set, data rho (Gibbs state with off-model NNN XZ terms), evaluation point."""
    rng = np.random.default_rng(SEED + n)
    terms = graph_terms(n, "ring", fields="XYZ", couplings=("XX", "YY", "ZZ"))
    theta_true = rng.normal(scale=0.4, size=len(terms))
    nnn = []
    for i in range(n):
        chars = ["I"] * n
        chars[i], chars[(i + 2) % n] = "X", "Z"
        nnn.append("".join(chars))
    full = TermSet(terms.labels + nnn, n)
    coef = np.concatenate([theta_true, np.full(len(full) - len(terms), 0.3)])
    rho = VisibleGibbsModel.from_coefficients(full, coef).state()
    theta_eval = rng.normal(scale=0.4, size=len(terms))
    return terms, rho, theta_eval


def best_time(fn, repeats: int, budget: float = 1.0) -> float:
    """Fastest of at least ``repeats`` wall-clock runs, repeating cheap calls until ``budget``
    seconds have been spent (the minimum is the run least disturbed by other load)."""
    times: list[float] = []
    while len(times) < repeats or (sum(times) < budget and len(times) < 200):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def eigh_floor(dim: int, repeats: int) -> dict[str, float]:
    """Best time of each eigh driver on one random complex Hermitian matrix (interleaved)."""
    rng = np.random.default_rng(SEED)
    a = rng.standard_normal((dim, dim)) + 1j * rng.standard_normal((dim, dim))
    a = 0.5 * (a + a.conj().T)
    calls = {
        "numpy": lambda: np.linalg.eigh(a),
        "evd": lambda: scipy.linalg.eigh(a, driver="evd", check_finite=False),
        "evr": lambda: scipy.linalg.eigh(a, driver="evr", check_finite=False),
    }
    best = {name: np.inf for name in DRIVERS}
    for _ in range(repeats):
        for name in DRIVERS:
            best[name] = min(best[name], best_time(calls[name], 1, budget=0.3))
    return best


# ---------------------------------------------------------------- baselines


def dense_paulis(labels):
    return [reduce(np.kron, [PAULI_2x2[ch] for ch in lab]) for lab in labels]


def baseline_a_factory(terms, rho):
    """expm + logm loss, central finite-difference gradient."""
    paulis = np.array(dense_paulis(terms.labels))
    neg_s = np.trace(rho @ scipy.linalg.logm(rho)).real  # Tr rho log rho, computed once

    def loss(theta):
        e = scipy.linalg.expm(-np.tensordot(theta, paulis, axes=1))
        sigma = e / np.trace(e).real
        return neg_s - np.trace(rho @ scipy.linalg.logm(sigma)).real

    def loss_and_grad(theta, step=1e-5):
        grad = np.empty_like(theta)
        for j in range(theta.size):
            d = np.zeros_like(theta)
            d[j] = step
            grad[j] = (loss(theta + d) - loss(theta - d)) / (2 * step)
        return loss(theta), grad

    return loss_and_grad


def baseline_b_factory(terms, rho, *, matmul: bool):
    """expm loss, closed-form gradient with dense Pauli matrices."""
    paulis = np.array(dense_paulis(terms.labels))
    m = np.array([np.trace(rho @ p).real for p in paulis])
    s_rho = von_neumann_entropy(rho)

    def loss_and_grad(theta):
        e = scipy.linalg.expm(-np.tensordot(theta, paulis, axes=1))
        z = np.trace(e).real
        sigma = e / z
        if matmul:
            model_m = np.array([np.trace(sigma @ p).real for p in paulis])
        else:
            model_m = np.einsum("ij,kji->k", sigma, paulis).real
        return -s_rho + theta @ m + np.log(z), m - model_m

    return loss_and_grad


# ---------------------------------------------------------------- cases


def case(name, n, terms, seconds, reference, reference_seconds, ratio, target, meets, details):
    return {
        "case": name, "n": n, "dim": 2**n, "n_terms": len(terms), "seconds": seconds,
        "reference": reference, "reference_seconds": reference_seconds, "ratio": ratio,
        "target": target, "meets_target": meets, "details": details,
    }


def run_eval(n, repeats):
    terms, rho, theta = instance(n)
    model = VisibleGibbsModel(terms)
    m = expectations(rho, terms)
    s_rho = von_neumann_entropy(rho)
    model.loss_and_grad(theta, m, s_rho)  # warm-up: engine, sign tables
    ours = best_time(lambda: model.loss_and_grad(theta, m, s_rho), repeats)
    drivers = eigh_floor(2**n, repeats)
    fastest = min(drivers, key=drivers.get)
    floor = drivers[fastest]
    ratio = ours / floor
    target = "ratio <= 1.5" if n == 10 else None
    meets = bool(ratio <= 1.5) if n == 10 else None
    details = {"driver_seconds": drivers, "fastest_driver": fastest,
               "h_dtype": "float64" if terms.is_real else "complex128"}
    return case("eval", n, terms, ours, "eigh floor", floor, ratio, target, meets, details), ours


def run_fit(n):
    terms, rho, _ = instance(n)
    model = VisibleGibbsModel(terms, tol=1e-6, max_iter=2000)
    calls = [0]
    original = model.loss_and_grad

    def counted(theta, m, s):
        calls[0] += 1
        return original(theta, m, s)

    model.loss_and_grad = counted
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        model.fit(rho)
    seconds = time.perf_counter() - t0
    target = "seconds < 60" if n == 10 else None
    meets = bool(seconds < 60 and model.converged_) if n == 10 else None
    details = {"n_iter": model.n_iter_, "n_evals": calls[0], "grad_norm": model.grad_norm_,
               "converged": bool(model.converged_), "loss": model.loss_,
               "warnings": [str(w.message) for w in caught]}
    return case("fit", n, terms, seconds, None, None, None, target, meets, details)


def run_baseline(name, n, factory, ours_seconds, target_ratio, repeats):
    terms, rho, theta = instance(n)
    slow = factory(terms, rho)
    model = VisibleGibbsModel(terms)
    m, s_rho = expectations(rho, terms), von_neumann_entropy(rho)
    our_loss, our_grad = model.loss_and_grad(theta, m, s_rho)
    b_loss, b_grad = slow(theta)
    seconds = best_time(lambda: slow(theta), repeats)
    ratio = seconds / ours_seconds
    target = f"slow-down >= {target_ratio}x" if target_ratio else None
    meets = bool(ratio >= target_ratio) if target_ratio else None
    details = {"loss_abs_diff": float(abs(b_loss - our_loss)),
               "grad_max_abs_diff": float(np.abs(b_grad - our_grad).max())}
    return case(name, n, terms, seconds, "thermoseed eval", ours_seconds, ratio, target, meets,
                details)


def print_table(rows):
    print(f"{'case':<18}{'n':>3}{'dim':>6}{'terms':>6}{'seconds':>11}{'reference':>17}"
          f"{'ref s':>11}{'ratio':>9}  target / note")
    for r in rows:
        ref_s = "" if r["reference_seconds"] is None else f"{r['reference_seconds']:.4g}"
        ratio = "" if r["ratio"] is None else f"{r['ratio']:.3g}"
        note = r["target"] or ""
        if r["meets_target"] is not None:
            note += "  MET" if r["meets_target"] else "  NOT MET"
        d = r["details"]
        if r["case"] == "eval":
            note += "  drivers: " + ", ".join(f"{k} {v:.4g}s" for k, v in
                                               d["driver_seconds"].items())
            note += f"  (fastest {d['fastest_driver']})"
        elif r["case"] == "fit":
            note += (f"  iters {d['n_iter']}, evals {d['n_evals']}, |grad| "
                     f"{d['grad_norm']:.2g}, converged {d['converged']}")
        else:
            note += (f"  |dloss| {d['loss_abs_diff']:.1e}, |dgrad| "
                     f"{d['grad_max_abs_diff']:.1e}")
        print(f"{r['case']:<18}{r['n']:>3}{r['dim']:>6}{r['n_terms']:>6}"
              f"{r['seconds']:>11.4g}{r['reference'] or '':>17}{ref_s:>11}{ratio:>9}  {note}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--max-n", type=int, default=10, help="largest n for eval (even)")
    parser.add_argument("--fit-max-n", type=int, default=10, help="largest n for fit")
    parser.add_argument("--repeats", type=int, default=5, help="timing repeats (best kept)")
    parser.add_argument("--skip-baselines", action="store_true")
    parser.add_argument("--threads", type=int, default=None,
                        help="BLAS threads (sets OPENBLAS/OMP/MKL_NUM_THREADS before import)")
    args = parser.parse_args(argv)

    print(f"# cores: {os.cpu_count()}, OPENBLAS_NUM_THREADS="
          f"{os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, numpy {np.__version__}, "
          f"scipy {scipy.__version__}, load average {os.getloadavg()[0]:.2f}", flush=True)
    rows, ours = [], {}
    for n in range(6, args.max_n + 1, 2):
        reps = args.repeats if n <= 10 else 1
        row, ours[n] = run_eval(n, reps)
        rows.append(row)
        print(f"# eval n={n}: {row['seconds']:.4g}s (floor {row['reference_seconds']:.4g}s)",
              flush=True)
    for n in range(6, min(args.fit_max_n, args.max_n) + 1, 2):
        rows.append(run_fit(n))
        print(f"# fit n={n}: {rows[-1]['seconds']:.4g}s", flush=True)
    if not args.skip_baselines:
        if 6 in ours:
            rows.append(run_baseline("baseline_a", 6, baseline_a_factory, ours[6], 300, 3))
        if 8 in ours:
            for name, matmul in (("baseline_b", False), ("baseline_b_matmul", True)):
                rows.append(run_baseline(
                    name, 8, lambda t, r, mm=matmul: baseline_b_factory(t, r, matmul=mm),
                    ours[8], None if matmul else 10, args.repeats))
    return print_report(rows, print_table)


if __name__ == "__main__":
    sys.exit(main())
