"""Speed and memory of the typicality engine against the dense engine, and the crossover.

Run from the repository root (not collected by pytest)::

    python tests/benchmarks/bench_typicality.py                    # n = 8 .. 20
    python tests/benchmarks/bench_typicality.py --max-n 18 --threads 1

Fixed, seeded instance at each n: the ring term set with X and Z fields and XX, YY, ZZ
couplings (5n terms, real H), coefficients ``theta = beta * J`` with ``J ~ N(0, 1)`` (seed
1) and ``beta = --beta`` (default 0.3: the benchmark's temperature). Every case runs in its
own subprocess, so its peak memory (``ru_maxrss`` of that process) is its own.

Cases (one JSON object per line at the end, after the table):

- ``typicality`` (n = 8 .. max-n): seconds per loss+gradient, i.e. one
  ``TypicalityEngine.evaluate`` (log Z and every moment; the moments are the exact gradient of
  the estimated log Z) with ``--workers`` threads; best of ``--repeats`` for n <= 16, one run
  above. ``--vectors auto`` (default) sizes the vector set for the error target: a pilot run
  with 4 vectors (not timed) measures the relative moment error e4, then
  ``R = ceil(4 (e4 / (0.8 * 1e-2))^2)`` clipped to [4, 64] (the error falls like 1/sqrt(R)).
  Targets: n = 16 under 10 s, n = 20 under 180 s per evaluation on 2 cores at relative moment
  error below 1e-2. This is the estimator fits use (``estimator="exact"``).
- ``typicality_symmetric``: the same with ``estimator="symmetric"`` (moments
  ``<v|P|v>/<v|v>``, not the gradient of the estimated log Z; about 3x cheaper), same
  vector sizing and targets.
- ``dense`` (n = 8, 10, 12): seconds per ``DenseEngine.evaluate`` (one eigh), best of
  ``--repeats``.
- ``expm_multiply`` (n = 12, 14, 16): seconds for ``exp(-H/2)`` on a block of 8 vectors
  by ``scipy.sparse.linalg.expm_multiply`` on the engine's matrix-free operator, beside
  ``chebyshev`` = the same product by the engine's Chebyshev recurrence (forward pass only),
  and their largest relative difference: the measurement behind keeping Chebyshev.

The crossover is the smallest n at which typicality beats dense (printed after the table).

JSON keys: ``case``, ``n``, ``n_terms``, ``seconds``, ``peak_mib`` (peak resident memory of
the case's process), ``vectors``, ``workers``, ``degree`` (Chebyshev degree; null for dense),
``rel_moment_error`` (``|SE|_2 / |<P>|_2`` over the terms; null for dense), ``estimator``
(typicality cases),
``log_z_error`` (null for dense), ``target`` (text or null), ``meets_target`` (bool or null),
``load_1min`` (``os.getloadavg()[0]`` when the case started), ``blas_threads``
(``OPENBLAS_NUM_THREADS`` or null), ``details`` (dict: for ``expm_multiply`` the Chebyshev
seconds and the relative difference).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

TARGETS = {16: 10.0, 20: 180.0}
REL_ERROR_TARGET = 1e-2
#: Vectors in the expm_multiply comparison block.
EXPM_VECTORS = 8


def _instance(n: int, beta: float):
    import numpy as np

    from thermoseed.pretrain import graph_terms

    terms = graph_terms(n, "ring", fields="XZ", couplings=("ZZ", "XX", "YY"))
    theta = beta * np.random.default_rng(1).standard_normal(len(terms))
    return terms, theta


def _peak_mib() -> float:
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run_case(case: str, n: int, args) -> dict:
    """Measure one case in this process (called in a subprocess by ``main``)."""
    from thermoseed.pretrain import DenseEngine, TypicalityEngine

    terms, theta = _instance(n, args.beta)
    load = os.getloadavg()[0]
    out = {"case": case, "n": n, "n_terms": len(terms), "vectors": None, "workers": None,
           "degree": None, "rel_moment_error": None, "log_z_error": None, "target": None,
           "meets_target": None, "details": {}}
    repeats = args.repeats if n <= 16 else 1
    if case == "dense":
        engine = DenseEngine(terms)
        seconds = min(_timed(lambda: engine.evaluate(theta))[0] for _ in range(repeats))
    elif case.startswith("typicality"):
        estimator = "symmetric" if case.endswith("symmetric") else "exact"
        vectors = _vector_count(terms, theta, args, estimator)
        engine = TypicalityEngine(terms, vectors=vectors, seed=0, workers=args.workers,
                                  estimator=estimator)
        runs = [_timed(lambda: engine.evaluate(theta)) for _ in range(repeats)]
        seconds, ev = min(runs, key=lambda r: r[0])
        rel = _relative_error(ev)
        out.update(vectors=vectors, workers=engine.workers, degree=ev.degree, estimator=estimator,
                   rel_moment_error=rel, log_z_error=ev.log_z_error)
        if n in TARGETS:
            out["target"] = (f"< {TARGETS[n]:g} s per evaluation at relative moment error "
                             f"< {REL_ERROR_TARGET:g}")
            out["meets_target"] = bool(seconds < TARGETS[n] and rel < REL_ERROR_TARGET)
    else:
        seconds, out["details"] = _expm_multiply_case(terms, theta, args)
        out["vectors"] = EXPM_VECTORS
    out.update(seconds=seconds, peak_mib=_peak_mib(), load_1min=load,
               blas_threads=os.environ.get("OPENBLAS_NUM_THREADS"))
    return out


def _relative_error(ev) -> float:
    import numpy as np

    return float(np.linalg.norm(ev.moment_errors) / np.linalg.norm(ev.moments))


def _vector_count(terms, theta, args, estimator: str) -> int:
    """``--vectors`` as given, or sized from a 4-vector pilot for the error target."""
    import numpy as np

    from thermoseed.pretrain import TypicalityEngine

    if args.vectors != "auto":
        return int(args.vectors)
    pilot = TypicalityEngine(terms, vectors=4, seed=0, workers=args.workers,
                             estimator=estimator).evaluate(theta)
    need = 4 * (_relative_error(pilot) / (0.8 * REL_ERROR_TARGET)) ** 2
    return int(np.clip(np.ceil(need), 4, 64))


def _timed(call):
    start = time.perf_counter()
    value = call()
    return time.perf_counter() - start, value


def _expm_multiply_case(terms, theta, args):
    """``exp(-H/2) R`` by scipy's expm_multiply and by the Chebyshev forward pass."""
    import numpy as np
    from scipy.sparse.linalg import LinearOperator, expm_multiply

    from thermoseed.pretrain import TypicalityEngine
    from thermoseed.pretrain.engines.typicality import chebyshev_coefficients

    engine = TypicalityEngine(terms, vectors=EXPM_VECTORS, seed=0, workers=1)
    h, lo, hi = engine._operator(theta)
    d = terms.dim
    block = engine._random_block(np.random.SeedSequence(0).spawn(EXPM_VECTORS))

    def minus_half_h(v):
        v = np.ascontiguousarray(v, dtype=complex).reshape(engine._shape + (-1,))
        return (-0.5 * engine._apply(h, v)).reshape(d, -1)

    op = LinearOperator((d, d), matvec=minus_half_h, matmat=minus_half_h,
                        rmatvec=lambda v: minus_half_h(np.conj(v)).conj(),
                        rmatmat=lambda v: minus_half_h(np.conj(v)).conj(), dtype=complex)
    seconds, ref = _timed(lambda: expm_multiply(op, block.reshape(d, -1), traceA=0.0))

    def chebyshev():
        coef = chebyshev_coefficients((hi - lo) / 4.0, engine.tol)
        center, half = (hi + lo) / 2.0, (hi - lo) / 2.0
        prev, cur = block, (engine._apply(h, block) - center * block) / half
        acc = coef[0] * prev + coef[1] * cur
        for ck in coef[2:]:
            nxt = 2.0 * (engine._apply(h, cur) - center * cur) / half - prev
            acc += ck * nxt
            prev, cur = cur, nxt
        return np.exp(-lo / 2.0) * acc.reshape(d, -1)

    cheb_seconds, cheb = _timed(chebyshev)
    diff = float(np.abs(cheb - ref).max() / np.abs(ref).max())
    return seconds, {"chebyshev_seconds": cheb_seconds, "relative_difference": diff}


def _subprocess(case: str, n: int, argv: list[str]) -> dict | None:
    cmd = [sys.executable, __file__, "--case", case, "--n", str(n), *argv]
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        print(f"{case} n={n} failed:\n{done.stderr}", file=sys.stderr)
        return None
    return json.loads(done.stdout.strip().splitlines()[-1])


def _fmt(value, spec: str) -> str:
    return "-" if value is None else format(value, spec)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--max-n", type=int, default=20)
    parser.add_argument("--beta", type=float, default=0.3)
    parser.add_argument("--vectors", default="auto", help="random vectors, or 'auto'")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--threads", type=int, help="BLAS threads for every case")
    parser.add_argument("--case", help=argparse.SUPPRESS)
    parser.add_argument("--n", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.case:
        print(json.dumps(run_case(args.case, args.n, args)))
        return 0
    if args.threads is not None:
        for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ[var] = str(args.threads)
    passed = ["--beta", str(args.beta), "--vectors", str(args.vectors), "--workers",
              str(args.workers), "--repeats", str(args.repeats)]
    plan = [("dense", n) for n in (8, 10, 12)]
    plan += [(case, n) for case in ("typicality", "typicality_symmetric")
             for n in range(8, args.max_n + 1, 2)]
    plan += [("expm_multiply", n) for n in (12, 14, 16) if n <= args.max_n]
    rows = [r for r in (_subprocess(case, n, passed) for case, n in plan) if r is not None]
    print(f"{'case':<22}{'n':>3}{'terms':>7}{'seconds':>10}{'peak MiB':>10}{'degree':>8}"
          f"{'rel err':>10}{'load':>6}  target")
    for r in rows:
        extra = ""
        if r["case"] == "expm_multiply":
            extra = (f"chebyshev {r['details']['chebyshev_seconds']:.3g} s, rel diff "
                     f"{r['details']['relative_difference']:.1e}")
        elif r["target"]:
            extra = f"{r['target']}: {'met' if r['meets_target'] else 'NOT met'}"
        print(f"{r['case']:<22}{r['n']:>3}{r['n_terms']:>7}{r['seconds']:>10.3g}"
              f"{r['peak_mib']:>10.0f}{_fmt(r['degree'], 'd'):>8}"
              f"{_fmt(r['rel_moment_error'], '.1e'):>10}{r['load_1min']:>6.1f}  {extra}")
    dense = {r["n"]: r["seconds"] for r in rows if r["case"] == "dense"}
    typical = {r["n"]: r["seconds"] for r in rows if r["case"] == "typicality"}  # fits' one
    faster = [n for n in sorted(dense) if n in typical and typical[n] < dense[n]]
    print(f"crossover: typicality faster than dense from n = {faster[0]}" if faster else
          "crossover: typicality never faster than dense in the sizes run")
    for r in rows:
        print(json.dumps(r))
    return 0


if __name__ == "__main__":
    sys.exit(main())
