"""Where a sweep's work runs: this process, spawned local processes, or a dask cluster.

The executors know nothing about jobs: they take units of work (``units``, e.g. batches of
seeds), a picklable ``timed(unit, inputs) -> [(job, result, seconds), ...]`` that a worker
runs, an in-process ``stream(unit, inputs)`` yielding ``(job, result)`` one at a time, and
``inputs_for(unit)`` (the shared input of a unit, e.g. its labelled data; dask scatters each
distinct one once). They yield ``(job, result, seconds)`` as work finishes.

Local workers end themselves when the sweep's process is gone (a daemon thread polls the
parent pid: a killed parent cannot stop them otherwise), and a stopped sweep terminates its
workers instead of waiting for their running jobs. ``Interrupts`` turns SIGTERM (what
``timeout`` and batch schedulers send) into ``KeyboardInterrupt`` like Ctrl-C, held back
while a record is being written so a results file only ever ends in a whole line.

Dask workers must run one thread each (``dask worker ADDRESS --nthreads 1``): PennyLane
records circuits in a process-wide queue, so two threads building circuits at once corrupt
each other.
"""

from __future__ import annotations

import os
import re
import signal
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from contextlib import contextmanager
from multiprocessing import get_context

from thermoseed.pretrain.errors import ThermoseedError

#: Seconds a dask scheduler has to answer before the sweep gives up.
CONNECT_TIMEOUT = 10.0
#: Seconds between a local worker's checks that the sweep's process is still alive.
PARENT_POLL_SECONDS = 1.0


class Interrupts:
    """While a sweep runs in the main thread, SIGTERM (and SIGINT, when it has Python's
    default handler) raise ``KeyboardInterrupt``; inside ``held_back()`` the signal waits
    until the record is written, so the results file only ever ends in a whole line."""

    def __init__(self):
        self.writing, self.held, self.previous = False, None, {}

    def __enter__(self) -> Interrupts:
        if threading.current_thread() is not threading.main_thread():
            return self
        for sig in (signal.SIGTERM, signal.SIGINT):
            current = signal.getsignal(sig)
            if current is None or (sig == signal.SIGINT
                                   and current is not signal.default_int_handler):
                continue  # not set from Python (cannot restore it) or the caller's own
            self.previous[sig] = current
            signal.signal(sig, self._handle)
        return self

    def __exit__(self, *exc) -> None:
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)

    def _handle(self, signum, frame) -> None:
        if self.writing:
            self.held = signum
            return
        raise KeyboardInterrupt(signal.Signals(signum).name)

    @contextmanager
    def held_back(self):
        self.writing = True
        try:
            yield
        finally:
            self.writing = False
            if self.held is not None:
                signum, self.held = self.held, None
                raise KeyboardInterrupt(signal.Signals(signum).name)


def exit_with_parent(parent_pid: int, interval: float = PARENT_POLL_SECONDS) -> None:
    """Worker initializer: a daemon thread checks every ``interval`` seconds that
    ``parent_pid`` is still this process's parent and ends the process at once
    (``os._exit``) when it is not (the sweep's process was killed and cannot stop us)."""

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(interval)
        os._exit(1)

    threading.Thread(target=watch, name="thermoseed-parent-watch", daemon=True).start()


def run_units(units: Sequence, *, timed: Callable, stream: Callable, inputs_for: Callable,
              workers: int = 1, client=None,
              on_parallel: Callable[[int], None] | None = None) -> Iterator[tuple]:
    """Yield ``(job, result, seconds)`` as work finishes, from a dask ``client`` when given,
    else ``workers`` spawned local processes, or this process when ``workers == 1``.
    ``on_parallel(k)`` hears how many dask workers share the work."""
    if client is not None:
        yield from _dask(units, timed, inputs_for, client, on_parallel)
        return
    if workers == 1:
        for unit in units:
            start = time.perf_counter()
            for job, result in stream(unit, inputs_for(unit)):
                now = time.perf_counter()
                yield job, result, now - start
                start = now
        return
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn"),
                               initializer=exit_with_parent, initargs=(os.getpid(),))
    futures, complete = [], False
    try:
        futures = [pool.submit(timed, unit, inputs_for(unit)) for unit in units]
        for future in as_completed(futures):
            yield from future.result()
        complete = True
    finally:
        if complete:
            pool.shutdown(wait=True)
        else:
            stop_pool(pool, futures)


def stop_pool(pool: ProcessPoolExecutor, futures) -> None:
    """Cancel the work not started and end the worker processes now (interrupted, failed or
    abandoned sweep; a waiting shutdown would first finish every running job)."""
    for future in futures:
        future.cancel()
    # no public way to terminate a pool's workers (Python 3.11): its own process table
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(timeout=10)


_ADDRESS = re.compile(r"(?:(?:tcp|tls)://)?(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+):(\d{1,5})")


def check_scheduler(address) -> str:
    """``address`` if it is a dask scheduler address (``tcp://host:port``, ``tls://``, bare
    ``host:port`` or an in-process ``inproc://...``), else one ``ThermoseedError`` line."""
    text = address.strip() if isinstance(address, str) else ""
    if text.startswith("inproc://") and len(text) > len("inproc://"):
        return text
    match = _ADDRESS.fullmatch(text)
    if match is None or not 0 < int(match[2]) < 65536:
        raise ThermoseedError(
            f"scheduler address {address!r} is malformed: expected tcp://host:port (e.g. "
            "tcp://10.0.0.5:8786, the address `dask scheduler` prints)")
    return text


def connect(scheduler: str, connect_timeout: float = CONNECT_TIMEOUT):
    """A dask ``Client`` of ``scheduler`` within ``connect_timeout`` seconds, else one
    ``ThermoseedError`` line naming the address and how to start a scheduler and workers."""
    try:
        from dask.distributed import Client
    except ImportError as err:
        raise ThermoseedError(
            "a scheduler address needs dask.distributed: pip install 'thermoseed[cluster]'"
        ) from err
    try:
        return Client(scheduler, timeout=connect_timeout)
    except (OSError, TimeoutError) as err:
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise ThermoseedError(
            f"no dask scheduler answers at {scheduler!r} within {connect_timeout:g} s "
            f"({reason}); start one with `dask scheduler` and workers with `dask worker "
            f"{scheduler} --nthreads 1`, or run locally without a scheduler") from err


def _dask(units, timed, inputs_for, client, on_parallel):
    from dask.distributed import as_completed as dask_completed

    threads = {w: info.get("nthreads", 1)
               for w, info in client.scheduler_info()["workers"].items()}
    crowded = sorted(w for w, t in threads.items() if t > 1)
    if crowded:
        raise ThermoseedError(
            f"dask workers {crowded} run several threads; PennyLane circuits need one "
            "thread per worker process: start them with --nthreads 1"
        )
    if on_parallel is not None:
        on_parallel(max(1, len(threads)))
    inputs = [inputs_for(unit) for unit in units]
    shared = {id(x): client.scatter([x], broadcast=True)[0]
              for x in {id(x): x for x in inputs if x is not None}.values()}
    futures = [client.submit(timed, unit, None if x is None else shared[id(x)], pure=False)
               for unit, x in zip(units, inputs, strict=True)]
    try:
        for future in dask_completed(futures):
            yield from future.result()
    finally:
        client.cancel(futures)
