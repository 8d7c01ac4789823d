"""Benchmark: wall time of plateau probe sweeps and of the pretrained strategy (run by hand).

    PYTHONPATH=. python tests/benchmarks/bench_plateau_sweep.py
    PYTHONPATH=. python tests/benchmarks/bench_plateau_sweep.py --ns 4 6 8 --seeds 10 \
        --pretrained-ns 4 --pretrained-seeds 2          # shrunk

(from the repository root). Not collected by pytest (the file name does not start with
``test_``).

Case 1, ``probe_sweep``: ``bridge.sweep.run_sweep`` over n = 4, 6, ..., 12 (``--ns``),
strategies uniform / small_angle / identity_blocks, ``--seeds`` seeds (default 50), depth n
per half of ``V = U(h) U(e)^dag`` (``--template``: a built-in name, default "soft", or
``own`` for a user's circuit family, RY/RZ layers with a CNOT ladder defined in this file),
cost ``--cost`` (default local), once with each worker count in ``--workers`` (default 1
and 2), into a fresh temporary file. Target: under 300 s with 2 workers; speed-up near the
worker count. Alongside, the remaining time the progress bar would show
(``sweep.SweepClock`` fed the records as they come) against the time that really remained,
when half and when 90% of the jobs were done.

Case 2, ``pretrained_probe``: ``bridge.plateau.probe("pretrained", n, n, "classifier", seed)``
on magnet-phase data (32 ground states of the transverse-field Ising chain, 25% held out,
``recipes.magnet_phase``), i.e. bootstrap resample + Gibbs fit + latent compile + warm start +
classifier gradient, timed per seed for n in ``--pretrained-ns`` (default 4, 6, 8) and
``--pretrained-seeds`` seeds (default 3). Target: n = 8 under 120 s per seed.

Output: a human-readable table, then one JSON object per measured case per line with keys
  case            "probe_sweep" or "pretrained_probe"
  cpu_count       os.cpu_count()
  load_before     1-minute load average just before the case (the machine may be shared)
probe_sweep:
  workers         local worker processes (1 = in-process)
  ns, strategies, seeds, cost, template   the grid (depth = n)
  jobs            number of jobs
  wall_s          wall-clock seconds of run_sweep (includes starting the worker processes)
  job_s_by_n      {n: summed per-job seconds} from the records (compute time, not wall)
  eta_s           {"50%": estimate, "90%": estimate} remaining seconds shown at that point
  left_s          {"50%": seconds, "90%": seconds} that really remained from that point
  speedup         wall_s of 1 worker / this wall_s (null when 1 worker was not measured)
  target_met      wall_s < 300 (2 workers only, else null)
pretrained_probe:
  n, depth        qubits and layers per half
  seeds           seeds timed
  seconds         wall-clock seconds per seed
  median_s        median of seconds
  target_met      median_s < 120 (n = 8 only, else null)
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import tempfile
import time
from pathlib import Path

SWEEP_TARGET_S = 300.0
PRETRAINED_TARGET_S = 120.0
OWN = "own"


def bench_layers(params, wires):
    """The user's circuit of ``--template own``: params (depth, n, 2), RY and RZ on every
    wire, then a CNOT ladder, per layer (module level: worker processes import it)."""
    import pennylane as qml

    for layer in params:
        for wire, (a, b) in zip(wires, layer, strict=True):
            qml.RY(a, wires=wire)
            qml.RZ(b, wires=wire)
        for w0, w1 in zip(wires[:-1], wires[1:], strict=False):
            qml.CNOT(wires=[w0, w1])


def parse(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--ns", type=int, nargs="+", default=[4, 6, 8, 10, 12])
    p.add_argument("--seeds", type=int, default=50)
    p.add_argument("--strategies", nargs="+",
                   default=["uniform", "small_angle", "identity_blocks"])
    p.add_argument("--cost", default="local", choices=["local", "global"])
    p.add_argument("--template", default="soft")
    p.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    p.add_argument("--pretrained-ns", type=int, nargs="*", default=[4, 6, 8])
    p.add_argument("--pretrained-seeds", type=int, default=3)
    return p.parse_args(argv)


def sweep_cases(args) -> list[dict]:
    from thermoseed.bridge import circuit_family
    from thermoseed.bridge.plateau.sweep import SweepClock, job_key, make_grid, run_sweep

    template = (circuit_family(bench_layers, ("depth", "n", 2), "bench ladder")
                if args.template == OWN else args.template)
    jobs = make_grid(args.ns, args.strategies, range(args.seeds), costs=(args.cost,),
                     template=template)
    by_key = {job_key(job, None): job for job in jobs}
    out = []
    base = None
    for workers in args.workers:
        load = os.getloadavg()[0]
        clock, marks = SweepClock(jobs, workers), {}

        def watch(record, clock=clock, marks=marks):
            clock.finish(by_key[record["key"]], record["seconds"])
            done = sum(len(v) for v in clock.finished.values())
            for label, share in (("50%", 0.5), ("90%", 0.9)):
                if label not in marks and done >= share * len(jobs):
                    marks[label] = (time.perf_counter(), clock.eta)

        with tempfile.TemporaryDirectory() as tmp:
            start = time.perf_counter()
            result = run_sweep(jobs, Path(tmp) / "sweep.jsonl", workers=workers,
                               progress=False, on_record=watch)
            end = time.perf_counter()
            wall = end - start
        by_n: dict[int, float] = {}
        for rec in result.records:
            n = rec["job"]["n_qubits"]
            by_n[n] = by_n.get(n, 0.0) + rec["seconds"]
        if workers == 1:
            base = wall
        out.append({
            "case": "probe_sweep", "workers": workers, "ns": list(args.ns),
            "strategies": list(args.strategies), "seeds": args.seeds, "cost": args.cost,
            "template": args.template, "jobs": len(jobs), "wall_s": round(wall, 2),
            "job_s_by_n": {str(n): round(v, 2) for n, v in sorted(by_n.items())},
            "eta_s": {k: None if e is None else round(e, 1) for k, (_, e) in marks.items()},
            "left_s": {k: round(end - t, 1) for k, (t, _) in marks.items()},
            "speedup": None if base is None else round(base / wall, 2),
            "target_met": (wall < SWEEP_TARGET_S) if workers == 2 else None,
            "cpu_count": os.cpu_count(), "load_before": round(load, 2),
        })
    return out


def pretrained_cases(args) -> list[dict]:
    from thermoseed.bridge.plateau.probes import probe
    from thermoseed.pretrain.labelled import LabelledData
    from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data, train_test_split

    out = []
    for n in args.pretrained_ns:
        train, test = train_test_split(magnet_phase_data(n, 32, seed=0), seed=0)
        data = LabelledData(train.states, train.labels, test.states, test.labels)
        load = os.getloadavg()[0]
        seconds = []
        for seed in range(args.pretrained_seeds):
            start = time.perf_counter()
            probe("pretrained", n, n, "classifier", seed, data=data)
            seconds.append(round(time.perf_counter() - start, 2))
        med = statistics.median(seconds)
        out.append({
            "case": "pretrained_probe", "n": n, "depth": n, "seeds": args.pretrained_seeds,
            "seconds": seconds, "median_s": med,
            "target_met": (med < PRETRAINED_TARGET_S) if n == 8 else None,
            "cpu_count": os.cpu_count(), "load_before": round(load, 2),
        })
    return out


def table(cases: list[dict]) -> str:
    lines = []
    sweeps = [c for c in cases if c["case"] == "probe_sweep"]
    if sweeps:
        lines.append(f"probe sweep: n = {sweeps[0]['ns']}, {sweeps[0]['strategies']}, "
                     f"{sweeps[0]['seeds']} seeds, depth n, cost {sweeps[0]['cost']}, "
                     f"{sweeps[0]['jobs']} jobs")
        lines.append(f"{'workers':>8} {'wall s':>9} {'speed-up':>9} {'< 300 s':>8}  "
                     "eta shown / really left (s) at 50% and 90%   job seconds by n")
        for c in sweeps:
            eta = "  ".join(f"{k}: {c['eta_s'].get(k)} / {c['left_s'].get(k)}"
                            for k in ("50%", "90%"))
            lines.append(f"{c['workers']:>8} {c['wall_s']:>9.1f} {str(c['speedup']):>9} "
                         f"{str(c['target_met']):>8}  {eta}   {c['job_s_by_n']}")
    pre = [c for c in cases if c["case"] == "pretrained_probe"]
    if pre:
        lines.append("pretrained strategy (fit + compile + classifier gradient), per seed:")
        lines.append(f"{'n':>4} {'median s':>9} {'< 120 s':>8}  seconds")
        for c in pre:
            lines.append(f"{c['n']:>4} {c['median_s']:>9.1f} {str(c['target_met']):>8}  "
                         f"{c['seconds']}")
    return "\n".join(lines)


def main(argv=None) -> int:
    args = parse(argv)
    cases = sweep_cases(args) if args.workers and args.ns else []
    cases += pretrained_cases(args) if args.pretrained_ns else []
    print(table(cases))
    for case in cases:
        print(json.dumps(case, sort_keys=True))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
