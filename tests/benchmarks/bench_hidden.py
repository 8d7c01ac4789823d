"""Speed of the hidden-qubit engines: seconds per loss + gradient against one full-register eigh.

Run from the repository root (not collected by pytest: the name does not match ``test_*.py``)::

    python tests/benchmarks/bench_hidden.py
    python tests/benchmarks/bench_hidden.py --threads 1 --workers 1,2
    python tests/benchmarks/bench_hidden.py --threads 1 --workers 1,2 --cases commuting

Fixed, seeded instances (``hidden_terms``); data = a random full-rank density matrix on the
visible wires; coefficients ~ N(0, 0.3^2).

Cases (one JSON object per line at the end, after the table):

- ``general`` (dense engine, adjoint gradient): n_v + n_h = 8 (4 + 4) and 10 (5 + 5); terms:
  X, Y, Z fields and ZZ line couplings on the visible wires, XX, YY, ZZ on every
  visible-hidden pair, X and Z hidden fields, hidden ZZ line couplings (complex H).
  Reference: the fastest of numpy.linalg.eigh, scipy.linalg.eigh(driver='evd') and
  (driver='evr') on a random complex Hermitian matrix of the full-register size, timed in the
  same run. Target: ratio <= 6.
- ``finite_difference`` (n_v + n_h = 8): the same loss by the same engine without the
  gradient, gradient by central differences (2 x n_terms loss evaluations); reference = the
  ``general`` case at size 8, ratio = slow-down of finite differences (the adjoint's speed-up).
- ``commuting`` (block engine): n_v = 8 with n_h = 4 and 8; terms: X and Z fields, ZZ line
  couplings (visible), ZZ on every visible-hidden pair, Z hidden fields (real H); one row per
  ``--workers`` value. Reference: one real symmetric eigh of the full register (fastest driver)
  when 2^(n_v+n_h) <= ``--max-eigh-dim``; beyond that it is extrapolated from the largest
  measured size by the cubic cost law (``reference_extrapolated`` true): a 2^16 eigh needs
  34 GB and is not run. Target at n_h = 8: seconds < 1. ``details`` add the floor of the
  method: ``block_eigh_seconds`` (CPU time of the 2^n_h block eigendecompositions alone, one
  call, same run) and ``eigh_share`` (that over the evaluation's CPU time).

JSON keys: ``case``, ``n_visible``, ``n_hidden``, ``dim`` (full register 2^(n_v+n_h)),
``n_terms``, ``engine``, ``workers`` (block threads, null for dense), ``seconds`` (best of
``--repeats`` runs of one loss + gradient), ``cpu_seconds`` (CPU time of all threads in
that run: what the work costs whatever else loads the machine), ``reference`` (text),
``reference_seconds``,
``reference_extrapolated`` (bool), ``ratio`` (``seconds / reference_seconds``), ``target``
(text or null), ``meets_target`` (bool or null), ``load`` (1-minute load average when the
case finished), ``details`` (eigh driver times; for ``finite_difference`` the largest
difference between the finite-difference and adjoint gradients).
"""

from __future__ import annotations

import argparse
import os
import sys
import time

from bench_report import print_report  # noqa: E402 - stdlib only
from blas_threads import preset_threads  # noqa: E402 - stdlib only, before numpy

if __name__ == "__main__":
    preset_threads(sys.argv[1:])

import numpy as np  # noqa: E402
import scipy.linalg  # noqa: E402

from thermoseed.pretrain import (  # noqa: E402
    BlockHiddenEngine,
    DenseHiddenEngine,
    hidden_terms,
)
from thermoseed.pretrain.hidden_engines import stacked_hamiltonians  # noqa: E402

SEED = 20240612
DRIVERS = ("numpy", "evd", "evr")


def best_time(fn, repeats: int) -> float:
    """Fastest of ``repeats`` wall-clock runs (the run least disturbed by other load)."""
    return timed(fn, repeats)[0]


def timed(fn, repeats: int) -> tuple[float, float]:
    """``(wall, cpu)`` seconds of the fastest of ``repeats`` runs; cpu = process time of
    every thread during that run."""
    best = (float("inf"), float("inf"))
    for _ in range(repeats):
        c0, t0 = time.process_time(), time.perf_counter()
        fn()
        best = min(best, (time.perf_counter() - t0, time.process_time() - c0))
    return best


def eigh_floor(dim: int, complex_: bool, repeats: int) -> dict[str, float]:
    """Best time of each eigh driver on one random Hermitian (or real symmetric) matrix."""
    rng = np.random.default_rng(SEED)
    a = rng.standard_normal((dim, dim))
    if complex_:
        a = a + 1j * rng.standard_normal((dim, dim))
    a = 0.5 * (a + a.conj().T)
    calls = {
        "numpy": lambda: np.linalg.eigh(a),
        "evd": lambda: scipy.linalg.eigh(a, driver="evd", check_finite=False),
        "evr": lambda: scipy.linalg.eigh(a, driver="evr", check_finite=False),
    }
    return {name: best_time(calls[name], repeats) for name in DRIVERS}


def random_rho(dim: int, rng) -> np.ndarray:
    g = rng.standard_normal((dim, dim)) + 1j * rng.standard_normal((dim, dim))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def general_instance(n_v: int, n_h: int):
    terms = hidden_terms(n_v, n_h, visible_fields="XYZ", visible_couplings=("ZZ",),
                         couplings=("XX", "YY", "ZZ"), hidden_fields="XZ",
                         hidden_couplings=("ZZ",), hidden_graph="line")
    rng = np.random.default_rng(SEED + n_v + n_h)
    return terms, random_rho(2**n_v, rng), rng.normal(scale=0.3, size=len(terms))


def commuting_instance(n_v: int, n_h: int):
    terms = hidden_terms(n_v, n_h, visible_fields="XZ", visible_couplings=("ZZ",),
                         couplings=("ZZ",), hidden_fields="Z")
    rng = np.random.default_rng(SEED + 100 + n_h)
    return terms, random_rho(2**n_v, rng), rng.normal(scale=0.3, size=len(terms))


def row(case, n_v, n_h, terms, engine, workers, seconds, reference, ref_seconds,
        extrapolated, target, meets, details, cpu_seconds=None):
    return {"case": case, "n_visible": n_v, "n_hidden": n_h, "dim": 2 ** (n_v + n_h),
            "n_terms": len(terms), "engine": engine, "workers": workers, "seconds": seconds,
            "cpu_seconds": cpu_seconds,
            "reference": reference, "reference_seconds": ref_seconds,
            "reference_extrapolated": extrapolated,
            "ratio": None if ref_seconds is None else seconds / ref_seconds,
            "target": target, "meets_target": meets, "load": os.getloadavg()[0],
            "details": details}


def run_general(n_v, n_h, repeats):
    terms, rho, theta = general_instance(n_v, n_h)
    engine = DenseHiddenEngine(terms, n_h)
    engine.evaluate(theta, rho)  # warm-up: sign tables
    seconds, cpu = timed(lambda: engine.evaluate(theta, rho), repeats)
    drivers = eigh_floor(2 ** (n_v + n_h), True, repeats)
    floor = min(drivers.values())
    r = row("general", n_v, n_h, terms, "dense", None, seconds, "full-register eigh (complex)",
            floor, False, "ratio <= 6", bool(seconds <= 6 * floor), {"driver_seconds": drivers},
            cpu)
    return r, (engine, theta, rho)


def run_finite_difference(n_v, n_h, general_row, setup, step=1e-5):
    engine, theta, rho = setup

    def fd_gradient():
        grad = np.empty_like(theta)
        for j in range(theta.size):
            e = np.zeros_like(theta)
            e[j] = step
            grad[j] = (engine.evaluate(theta + e, rho, gradient=False).cross_entropy
                       - engine.evaluate(theta - e, rho, gradient=False).cross_entropy) / (2 * step)
        return grad

    t0 = time.perf_counter()
    grad = fd_gradient()
    seconds = time.perf_counter() - t0
    diff = float(np.abs(grad - engine.evaluate(theta, rho).gradient).max())
    return row("finite_difference", n_v, n_h, engine.terms, "dense", None,
               seconds, "adjoint gradient (general case)", general_row["seconds"], False, None,
               None, {"grad_max_abs_diff_vs_adjoint": diff, "loss_evaluations": 2 * theta.size})


def run_commuting(n_v, n_h, workers, repeats, floors):
    terms, rho, theta = commuting_instance(n_v, n_h)
    engine = BlockHiddenEngine(terms, n_h, workers=workers)
    engine.evaluate(theta, rho)  # warm-up
    seconds, cpu = timed(lambda: engine.evaluate(theta, rho), repeats)
    coef, _ = engine.block_coefficients(theta)
    blocks = stacked_hamiltonians(coef, engine.structure.visible)
    block_eigh = timed(lambda: np.linalg.eigh(blocks), repeats)[1]
    dim = 2 ** (n_v + n_h)
    if dim in floors:
        floor, extrapolated, drivers = min(floors[dim].values()), False, floors[dim]
    else:
        base = max(floors)
        floor = min(floors[base].values()) * (dim / base) ** 3
        extrapolated, drivers = True, {"extrapolated_from_dim": base}
    target = "seconds < 1" if n_h == 8 else None
    meets = bool(seconds < 1) if n_h == 8 else None
    return row("commuting", n_v, n_h, terms, "block", workers, seconds,
               "full-register eigh (real)", floor, extrapolated, target, meets,
               {"driver_seconds": drivers, "block_eigh_seconds": block_eigh,
                "eigh_share": block_eigh / cpu}, cpu)


def print_table(rows):
    print(f"{'case':<18}{'n_v':>4}{'n_h':>4}{'dim':>7}{'terms':>6}{'wk':>4}{'seconds':>10}"
          f"{'cpu s':>8}{'ref s':>11}{'ratio':>10}{'load':>6}  target / note")
    for r in rows:
        ref = "" if r["reference_seconds"] is None else f"{r['reference_seconds']:.4g}"
        ref += "*" if r["reference_extrapolated"] else ""
        ratio = "" if r["ratio"] is None else f"{r['ratio']:.3g}"
        note = r["target"] or ""
        if r["meets_target"] is not None:
            note += "  MET" if r["meets_target"] else "  NOT MET"
        if r["case"] == "finite_difference":
            note += (f"  slow-down vs adjoint; {r['details']['loss_evaluations']} losses, "
                     f"|dgrad| {r['details']['grad_max_abs_diff_vs_adjoint']:.1e}")
        if "eigh_share" in r["details"]:
            note += (f"  block eighs {r['details']['block_eigh_seconds']:.3g} cpu s = "
                     f"{r['details']['eigh_share']:.0%}")
        workers = "" if r["workers"] is None else str(r["workers"])
        cpu = "" if r["cpu_seconds"] is None else f"{r['cpu_seconds']:.4g}"
        print(f"{r['case']:<18}{r['n_visible']:>4}{r['n_hidden']:>4}{r['dim']:>7}"
              f"{r['n_terms']:>6}{workers:>4}{r['seconds']:>10.4g}{cpu:>8}{ref:>11}{ratio:>10}"
              f"{r['load']:>6.2f}  {note}")
    print("(* extrapolated eigh time: cubic law from the largest measured size)")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="timing repeats (best kept)")
    parser.add_argument("--workers", default="1,2", help="block-engine thread counts")
    parser.add_argument("--max-eigh-dim", type=int, default=4096,
                        help="largest full-register eigh actually timed")
    parser.add_argument("--cases", default="general,commuting",
                        help="which cases to run (comma-separated: general, commuting)")
    parser.add_argument("--threads", type=int, default=None,
                        help="BLAS threads (sets OPENBLAS/OMP/MKL_NUM_THREADS before import)")
    args = parser.parse_args(argv)
    workers = [int(w) for w in args.workers.split(",")]

    print(f"# cores: {os.cpu_count()}, OPENBLAS_NUM_THREADS="
          f"{os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, numpy {np.__version__}, "
          f"scipy {scipy.__version__}, load average {os.getloadavg()[0]:.2f}", flush=True)
    cases = set(args.cases.split(","))
    if not cases <= {"general", "commuting"}:
        parser.error(f"--cases takes general and/or commuting, got {args.cases!r}")
    rows = []
    for n_v, n_h in ((4, 4), (5, 5)) if "general" in cases else ():
        r, setup = run_general(n_v, n_h, args.repeats)
        rows.append(r)
        print(f"# general {n_v}+{n_h}: {r['seconds']:.4g}s, eigh {r['reference_seconds']:.4g}s",
              flush=True)
        if n_v + n_h == 8:
            rows.append(run_finite_difference(n_v, n_h, r, setup))
            print(f"# finite differences {n_v}+{n_h}: {rows[-1]['seconds']:.4g}s", flush=True)
    if "commuting" not in cases:
        return print_report(rows, print_table)
    floors = {}
    for n in (12, 16):
        if 2**n <= args.max_eigh_dim:
            floors[2**n] = eigh_floor(2**n, False, 1 if 2**n >= 4096 else args.repeats)
            print(f"# real eigh at 2^{n}: {min(floors[2**n].values()):.4g}s", flush=True)
    if not floors:
        floors[1024] = eigh_floor(1024, False, args.repeats)
    for n_h in (4, 8):
        for w in workers:
            rows.append(run_commuting(8, n_h, w, args.repeats, floors))
            print(f"# commuting 8+{n_h} workers {w}: {rows[-1]['seconds']:.4g}s", flush=True)
    return print_report(rows, print_table)


if __name__ == "__main__":
    sys.exit(main())
