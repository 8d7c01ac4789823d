"""Plateau sweeps: a grid of independent, seeded jobs run locally or on a dask cluster.

A job is one (task, n, depth, strategy, seed, cost, ...) point; ``task="gradient"`` runs
``plateau.probe_seeds`` and ``task="training"`` runs ``plateau.train_curve``. Jobs that share
everything but the seed are batched (``chunk`` seeds per batch, so the circuit is prepared
once; pretrained and training jobs run singly); a seed's numbers do not depend on its batch,
its worker or the executor.

The circuit (``template``) is a built-in template name, the user's ``CircuitFamily``
(``bridge.families``: their own quantum function at every size) or a fixed-size ``Ansatz``.
Jobs carry the object and workers rebuild the circuit from it; records hold only its name and,
for the user's circuits, a fingerprint per size (``circuit``), so a changed function gets new
keys and never mixes with old records.

Executors (``plateau.executors``): in-process (``workers=1``), local processes (spawned,
default all cores), or dask.distributed when ``scheduler`` is an address (extra ``cluster``;
workers with ``--nthreads 1``). Local workers end themselves when the sweep's process is
gone, and while a sweep runs in the main thread SIGTERM is handled like Ctrl-C: the pool is
stopped and the records already written stay whole.

Progress: the bar's remaining time counts the pending jobs by the measured cost per
(task, strategy, cost) and size (``stats.remaining_seconds``).

Results stream to a ``.jsonl`` file: one JSON object per job, written whole, flushed and
fsynced as it finishes. Rerunning the same sweep skips the jobs already in the file.
Record keys: ``key`` (the job and data identity), ``job`` (the job's fields; the circuit as
``template`` = its name, plus ``circuit`` = its fingerprint for the user's own), ``data``
(fingerprint of the classifier data or null), ``result`` (``value``, ``grad``, ``active``,
``method``, or ``loss``, ``accuracy``) and ``seconds`` (wall time; the only field that varies
between runs).
"""

from __future__ import annotations

import json
import math
import os
import sys
import time
import warnings
from collections import Counter, defaultdict
from collections.abc import Callable, Iterator, Mapping, Sequence
from itertools import groupby
from pathlib import Path
from typing import NamedTuple

import numpy as np
from tqdm.auto import tqdm

from thermoseed.bridge.ansatz import Ansatz
from thermoseed.bridge.families import CircuitFamily, require_portable, template_label
from thermoseed.bridge.plateau.executors import (
    CONNECT_TIMEOUT,
    Interrupts,
    check_scheduler,
    connect,
    run_units,
)
from thermoseed.bridge.plateau.probes import (
    COSTS,
    ProbeResult,
    TrainCurve,
    probe_circuit,
    probe_seeds,
    train_curve,
)
from thermoseed.bridge.plateau.stats import remaining_seconds
from thermoseed.bridge.plateau.strategies import (
    STRATEGIES,
    PretrainSettings,
    identity_head_params,
)
from thermoseed.bridge.templates import TEMPLATES
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.files import atomic_write_bytes
from thermoseed.pretrain.labelled import LabelledData

TASKS = ("gradient", "training")
#: The results file inside a run folder.
RESULTS_FILE = "results.jsonl"
#: Seeds batched into one unit of work by default.
CHUNK = 8


class Job(NamedTuple):
    """One sweep point; the job is deterministic from its fields. ``template``: a built-in
    name, a ``CircuitFamily`` or a fixed-size ``Ansatz``; ``as_dict`` (the record) holds its
    name and, for the user's circuits, the per-size fingerprint ``circuit``."""

    task: str
    n_qubits: int
    depth: int
    strategy: str
    seed: int
    cost: str
    template: str | CircuitFamily | Ansatz = "soft"
    scale: float | None = None
    method: str = "auto"
    steps: int = 0
    learning_rate: float = 0.05
    settings: tuple = tuple(PretrainSettings())

    @property
    def needs_data(self) -> bool:
        return (self.cost == "classifier" or self.task == "training"
                or self.strategy in ("pretrained", "pretrained_perturbed", "class_models"))

    def as_dict(self) -> dict:
        """The job's fields as JSON-able values (the circuit by name and fingerprint)."""
        out = self._asdict()
        out["template"], fingerprint = template_label(self.template, self.n_qubits, self.depth)
        if fingerprint is not None:  # built-in records keep their keys from before
            out["circuit"] = fingerprint
        out["settings"] = PretrainSettings(*self.settings)._asdict()
        out["settings"]["couplings"] = list(out["settings"]["couplings"])
        return out


def make_grid(ns: Sequence[int], strategies: Sequence[str], seeds: Sequence[int], *,
              costs: Sequence[str] = ("local",), depths: Sequence[int] | None = None,
              task: str = "gradient", template: str | CircuitFamily | Ansatz = "soft",
              scale: float | None = None, method: str = "auto", steps: int = 50,
              learning_rate: float = 0.05, settings: PretrainSettings | None = None
              ) -> list[Job]:
    """All jobs of the grid ns x depths x strategies x costs x seeds (depth = n when
    ``depths`` is None). ``task="training"`` makes training-curve jobs (cost "classifier").
    ``template``: a built-in name, the user's ``circuit_family(...)`` (built and checked
    here at every size of the grid) or an ``Ansatz`` whose wire count is every n."""
    if task not in TASKS:
        raise ThermoseedError(f"unknown task {task!r}; choose one of {TASKS}")
    for s in strategies:
        if s not in STRATEGIES:
            raise ThermoseedError(f"unknown strategy {s!r}; choose one of {STRATEGIES}")
    costs = ("classifier",) if task == "training" else tuple(costs)
    for c in costs:
        if c not in COSTS:
            raise ThermoseedError(f"unknown cost {c!r}; choose one of {COSTS}")
    settings = tuple(PretrainSettings() if settings is None else settings)
    _check_template(template, ns, depths, strategies)
    jobs = []
    for n in ns:
        for depth in ([n] if depths is None else depths):
            for strategy in strategies:
                for cost in costs:
                    for seed in seeds:
                        jobs.append(Job(task, int(n), int(depth), strategy, int(seed), cost,
                                        template, scale, method,
                                        int(steps) if task == "training" else 0,
                                        float(learning_rate), settings))
    return jobs


def _check_template(template, ns: Sequence[int], depths: Sequence[int] | None,
                    strategies: Sequence[str]) -> None:
    """One ``ThermoseedError`` line unless ``template`` can run at every grid size (and is
    the identity at zero parameters when a pretrained strategy needs an identity head)."""
    if isinstance(template, str):
        if template not in TEMPLATES:
            raise ThermoseedError(f"unknown template {template!r}; choose one of "
                                  f"{tuple(TEMPLATES)} or pass circuit_family(qfunc, shape, "
                                  "name)")
    elif isinstance(template, CircuitFamily):
        for n in ns:
            for depth in ([n] if depths is None else depths):
                template.fingerprint(int(n), int(depth))  # builds and checks this size
    elif isinstance(template, Ansatz):
        other = sorted({int(n) for n in ns} - {template.n_wires})
        if other:
            raise ThermoseedError(
                f"ansatz {template.name!r} acts on {template.n_wires} wires but the grid has "
                f"n = {other}; sweep sizes with circuit_family(qfunc, shape, name)")
    else:
        template_label(template, 0, 0)  # raises: not a template
    if any(s.startswith("pretrained") for s in strategies):
        for n in ns:
            for depth in ([n] if depths is None else depths):
                identity_head_params(probe_circuit(template, int(n), int(depth)))


def job_key(job: Job, data_id: str | None) -> str:
    """Canonical identity of a job and the data it sees (sorted-key JSON)."""
    return json.dumps({"job": job.as_dict(), "data": data_id}, sort_keys=True)


# ---------------------------------------------------------------------------- work


def _batch_key(job: Job) -> Job:
    return job._replace(seed=0)


def run_batch(jobs: Sequence[Job], data: LabelledData | None) -> list[dict]:
    """Results of jobs that differ only in their seed (what a worker runs)."""
    return [result for _, result in iter_batch(jobs, data)]


def iter_batch(jobs: Sequence[Job], data: LabelledData | None) -> Iterator[tuple[Job, dict]]:
    """Yield ``(job, result)`` one job at a time (same numbers as ``run_batch``)."""
    first = jobs[0]
    if any(_batch_key(j) != _batch_key(first) for j in jobs):
        raise ThermoseedError("a batch must hold jobs that differ only in their seed")
    settings = PretrainSettings(*first.settings)
    if first.task == "training":
        for job in jobs:
            curve = train_curve(job.strategy, job.n_qubits, job.depth, job.seed, data,
                                steps=job.steps, learning_rate=job.learning_rate,
                                template=job.template, scale=job.scale, settings=settings)
            yield job, {"strategy": curve.strategy, "loss": curve.loss.tolist(),
                        "accuracy": curve.accuracy.tolist()}
        return
    for job in jobs:
        (res,) = probe_seeds(job.strategy, job.n_qubits, job.depth, job.cost, (job.seed,),
                             template=job.template, scale=job.scale, data=data,
                             settings=settings, method=job.method)
        yield job, {"strategy": res.strategy, "value": res.value, "grad": res.grad.tolist(),
                    "active": np.flatnonzero(res.active).tolist(), "method": res.method}


def _batches(jobs: Sequence[Job], chunk: int) -> list[list[Job]]:
    """Consecutive same-circuit jobs, ``chunk`` seeds at a time; pretrained and training
    jobs one at a time (their cost is per seed, so batching would only hurt balance)."""
    out = []
    for key, group in groupby(jobs, key=_batch_key):
        group = list(group)
        size = 1 if key.task == "training" or key.strategy.startswith("pretrained") else chunk
        out.extend(group[i:i + size] for i in range(0, len(group), size))
    return out


# ---------------------------------------------------------------------------- records


class DuplicateRecordWarning(UserWarning):
    """A sweep file holds the same job more than once (e.g. two writers at once)."""


def canonical_records(records: Sequence[dict]) -> list[dict]:
    """Records sorted by job key, each key once (the first kept, a warning says how many
    were dropped): every statistic then sees the same records in the same order, whatever
    order the workers finished in."""
    seen: dict[str, dict] = {}
    for rec in records:
        seen.setdefault(rec["key"], rec)
    dropped = len(records) - len(seen)
    if dropped:
        warnings.warn(f"{dropped} duplicate sweep record(s) dropped (the same job written "
                      "more than once); each job counts once", DuplicateRecordWarning,
                      stacklevel=2)
    return [seen[key] for key in sorted(seen)]


def read_records(path) -> list[dict]:
    """Records of a sweep file (``canonical_records``: sorted by key, duplicates dropped).
    A torn last line (no newline: the sweep was killed while writing) is dropped and the
    file rewritten atomically without it."""
    p = Path(path)
    if p.is_dir():
        p = p / RESULTS_FILE
    if not p.exists():
        return []
    raw = p.read_bytes()
    if raw and not raw.endswith(b"\n"):
        raw = raw[: raw.rfind(b"\n") + 1]
        atomic_write_bytes(p, raw)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise ThermoseedError(f"sweep file {str(p)!r} is not UTF-8 text ({err}); is it a "
                              "results .jsonl file?") from err
    records = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            rec = json.loads(line)
        except json.JSONDecodeError as err:
            raise ThermoseedError(
                f"sweep file {str(p)!r} line {lineno} is not JSON ({err}); move the file "
                "aside or pass a new path"
            ) from err
        missing = [k for k in ("key", "job", "result") if not isinstance(rec, dict)
                   or k not in rec]
        if missing:
            raise ThermoseedError(
                f"sweep file {str(p)!r} line {lineno} is not a sweep record (missing "
                f"{missing}); move the file aside or pass a new path"
            )
        records.append(rec)
    return canonical_records(records)


def _append(handle, record: dict) -> None:
    handle.write((json.dumps(record, sort_keys=True) + "\n").encode("utf-8"))
    handle.flush()
    os.fsync(handle.fileno())


class SweepResult(NamedTuple):
    """All records of the requested jobs (in job order), and how many ran now."""

    records: list
    ran: int
    skipped: int


def _data_for(job: Job, data: Mapping[int, LabelledData] | None) -> LabelledData | None:
    if not job.needs_data:
        return None
    if data is None or job.n_qubits not in data:
        raise ThermoseedError(
            f"job {job.strategy}/{job.cost}/{job.task} at n = {job.n_qubits} needs labelled "
            f"data: pass data={{{job.n_qubits}: LabelledData(...), ...}}"
        )
    return data[job.n_qubits]


def run_sweep(jobs: Sequence[Job], path, *, data: Mapping[int, LabelledData] | None = None,
              workers: int | None = None, scheduler: str | None = None, chunk: int = CHUNK,
              progress: bool = True, on_record: Callable[[dict], None] | None = None,
              connect_timeout: float = CONNECT_TIMEOUT) -> SweepResult:
    """Run the jobs not yet in ``path`` and append one record per job as it finishes.

    ``workers``: local processes (default all cores; 1 = in this process). ``scheduler``:
    a dask.distributed address (``tcp://host:port``), reached within ``connect_timeout``
    seconds; the cluster runs the jobs instead. ``data``: classifier data per qubit count.
    ``on_record(record)`` is called after each record is on disk. SIGTERM or Ctrl-C stops
    the sweep (``KeyboardInterrupt``) with every written record whole; rerun to resume.
    """
    if workers is not None and (not isinstance(workers, int) or workers < 1):
        raise ThermoseedError(f"workers must be a positive integer, got {workers!r}")
    if not isinstance(chunk, int) or chunk < 1:
        raise ThermoseedError(f"chunk must be a positive integer, got {chunk!r}")
    if scheduler is not None:
        check_scheduler(scheduler)
        if (isinstance(connect_timeout, bool) or not isinstance(connect_timeout, int | float)
                or not math.isfinite(connect_timeout) or connect_timeout <= 0):
            raise ThermoseedError(f"connect_timeout must be a number of seconds > 0, got "
                                  f"{connect_timeout!r}")
    ids = {n: d.fingerprint() for n, d in (data or {}).items()}
    keyed = {}
    for job in jobs:
        keyed.setdefault(job_key(job, ids.get(job.n_qubits) if job.needs_data else None), job)
    done = {rec["key"]: rec for rec in read_records(path)}
    pending = [job for key, job in keyed.items() if key not in done]
    for job in pending:
        _data_for(job, data)
    workers = workers or os.cpu_count() or 1
    if scheduler is None and workers > 1:
        for template in {id(job.template): job.template for job in pending}.values():
            require_portable(template)
    batches = _batches(pending, chunk)
    client = connect(scheduler, connect_timeout) if scheduler and batches else None
    try:
        Path(path).parent.mkdir(parents=True, exist_ok=True)
        lock = _lock(path)
    except BaseException:
        if client is not None:
            client.close()
        raise
    clock = SweepClock(pending, workers)
    bar = tqdm(total=len(pending), disable=not progress, file=sys.stderr, desc="sweep",
               unit="job", postfix={"eta": "?"},
               bar_format="{desc}: {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} "
                          "[{elapsed}{postfix}]")
    ran = 0
    runs = run_units(batches, timed=_timed, stream=iter_batch, workers=workers, client=client,
                     inputs_for=lambda batch: _data_for(batch[0], data),
                     on_parallel=clock.set_parallel)
    try:
        with Interrupts() as interrupts, open(path, "ab") as handle:
            for job, result, seconds in runs:
                data_id = ids.get(job.n_qubits) if job.needs_data else None
                key = job_key(job, data_id)
                record = {"key": key, "job": job.as_dict(), "data": data_id,
                          "result": result, "seconds": seconds}
                with interrupts.held_back():
                    _append(handle, record)
                done[key] = record
                ran += 1
                bar.set_postfix(eta=clock.finish(job, seconds), refresh=False)
                bar.update(1)
                if on_record is not None:
                    on_record(record)
    finally:
        runs.close()  # an interrupted pool stops its workers now (``executors.stop_pool``)
        bar.close()
        lock.close()  # closing the descriptor releases the lock
        if client is not None:
            client.close()
    records = [done[key] for key in keyed]
    return SweepResult(records, ran, len(keyed) - len(pending))


class SweepClock:
    """Remaining time of a running sweep: the pending jobs per (task, strategy, cost) group
    and size, costed by ``stats.remaining_seconds`` from the finished jobs' seconds, at the
    wall-clock rate measured since the first record (startup excluded)."""

    def __init__(self, jobs: Sequence[Job], parallel: int = 1):
        self.pending = Counter(self.group(job) for job in jobs)
        self.finished: dict[tuple, list[float]] = defaultdict(list)
        self.parallel = int(parallel)
        self.first: float | None = None  # wall time of the first record
        self.since_first = 0.0  # job seconds finished after it
        self.eta: float | None = None  # the last estimate, seconds

    def set_parallel(self, workers: int) -> None:
        self.parallel = int(workers)

    @staticmethod
    def group(job: Job) -> tuple[tuple[str, str, str], int]:
        return (job.task, job.strategy, job.cost), job.n_qubits

    def finish(self, job: Job, seconds: float, now: float | None = None) -> str:
        """Count ``job`` as done in ``seconds`` (at wall time ``now``, default the clock);
        the remaining time as ``[H:]MM:SS``."""
        now = time.perf_counter() if now is None else now
        key = self.group(job)
        self.pending[key] -= 1
        self.finished[key].append(float(seconds))
        if self.first is None:
            self.first = now
        else:
            self.since_first += float(seconds)
        rate = ((now - self.first) / self.since_first
                if self.since_first > 0 and now > self.first else None)
        self.eta = remaining_seconds(self.finished, self.pending, self.parallel, rate)
        return "?" if self.eta is None else tqdm.format_interval(self.eta)


def _lock(path):
    """An exclusive, non-blocking lock on ``<path>.lock`` for the whole sweep: a second
    sweep into the same results file refuses at once instead of writing every job twice."""
    handle = open(f"{path}.lock", "a")  # noqa: SIM115 - held for the sweep's lifetime
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX: no advisory locks, no check
        return handle
    try:
        fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError as err:
        handle.close()
        raise ThermoseedError(
            f"another sweep is writing {str(path)!r} right now; wait for it to finish, or "
            "give this one another results file") from err
    return handle


def _timed(jobs: Sequence[Job], data: LabelledData | None) -> list[tuple[Job, dict, float]]:
    start = time.perf_counter()
    results = run_batch(jobs, data)
    each = (time.perf_counter() - start) / len(jobs)
    return [(job, res, each) for job, res in zip(jobs, results, strict=True)]


# ---------------------------------------------------------------------------- reading


def _one_version_per_circuit(records: Sequence[dict]) -> None:
    """One ``ThermoseedError`` line when records hold one circuit name with two fingerprints
    at one size (the user changed their function between sweeps into one file)."""
    seen: dict[tuple, str | None] = {}
    for rec in records:
        job = rec["job"]
        where = (job["template"], job["n_qubits"], job["depth"])
        if seen.setdefault(where, job.get("circuit")) != job.get("circuit"):
            raise ThermoseedError(
                f"the records hold two versions of circuit {where[0]!r} at n = {where[1]}, "
                f"depth = {where[2]}; report one version (run_sweep(...).records) or give "
                "the changed circuit another name")


def probe_results(records: Sequence[dict]) -> list[ProbeResult]:
    """``ProbeResult``s from gradient records (flat ``grad``; ``active`` as a mask)."""
    _one_version_per_circuit(records)
    out = []
    for rec in records:
        job, res = rec["job"], rec["result"]
        if job["task"] != "gradient":
            continue
        grad = np.asarray(res["grad"], dtype=float)
        active = np.zeros(grad.size, dtype=bool)
        active[np.asarray(res["active"], dtype=int)] = True
        out.append(ProbeResult(res["strategy"], job["cost"], job["n_qubits"], job["depth"],
                               job["seed"], job["template"], float(res["value"]), grad,
                               active, res["method"]))
    return out


def train_curves(records: Sequence[dict]) -> list[TrainCurve]:
    """``TrainCurve``s from training records."""
    _one_version_per_circuit(records)
    return [TrainCurve(rec["result"]["strategy"], rec["job"]["n_qubits"], rec["job"]["depth"],
                       rec["job"]["seed"], rec["job"]["template"],
                       np.asarray(rec["result"]["loss"]), np.asarray(rec["result"]["accuracy"]))
            for rec in records if rec["job"]["task"] == "training"]
