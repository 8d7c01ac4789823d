"""A running sweep: its remaining-time estimate, stopping by signal (workers die with the
sweep's process, records stay whole, a rerun resumes) and scheduler addresses.

Expected remaining times are worked by hand from the estimator's stated rule (the arithmetic
sits beside each case).
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from thermoseed.bridge.plateau.executors import Interrupts, check_scheduler
from thermoseed.bridge.plateau.stats import job_seconds, remaining_seconds
from thermoseed.bridge.plateau.sweep import (
    SweepClock,
    job_key,
    make_grid,
    read_records,
    run_sweep,
)
from thermoseed.pretrain.errors import ThermoseedError

G, H = ("gradient", "uniform", "local"), ("gradient", "small_angle", "local")


@pytest.mark.parametrize("finished, pending, parallel, expected", [
    # same group and size finished: mean 2 s, 4 jobs on 2 workers -> 8 / 2
    ({(G, 2): [1.0, 3.0]}, {(G, 2): 4}, 2, 4.0),
    # measured rate: 0.8 wall seconds per job second, 4 jobs of 1 s
    ({(G, 2): [1.0]}, {(G, 2): 4}, (2, 0.8), 3.2),
    # a rate faster than the workers can go is capped at 1 / parallel: 4 * 1 / 2
    ({(G, 2): [1.0]}, {(G, 2): 4}, (2, 0.1), 2.0),
    # growth per qubit 4 (1 s at n = 2, 4 s at n = 3): n = 5 costs 4 * 4^2
    ({(G, 2): [1.0], (G, 3): [4.0]}, {(G, 5): 1}, 1, 64.0),
    # own group has one size: pooled growth (n = 2: (2 + 1) / 2, n = 3: 3) is 2 -> 2 * 2^2
    ({(G, 2): [2.0], (H, 2): [1.0], (H, 3): [3.0]}, {(G, 4): 1}, 1, 8.0),
    # nothing of the group at a smaller size: the overall mean (2 + 1 + 3) / 3, twice
    ({(G, 2): [2.0], (H, 3): [1.0, 3.0]}, {(G, 1): 2}, 1, 4.0),
    # times falling with n are not extrapolated downwards (growth at least 1)
    ({(G, 2): [4.0], (G, 3): [1.0]}, {(G, 4): 3}, 1, 3.0),
    # one dear job left and idle workers: that job's own time bounds the wait
    ({(G, 2): [10.0]}, {(G, 2): 1}, 4, 10.0),
    ({(G, 2): [1.0]}, {(G, 2): 0}, 1, 0.0),
    ({}, {(G, 2): 3}, 1, None),
])
def test_remaining_seconds_by_measured_cost_per_group_and_size(finished, pending, parallel,
                                                               expected):
    parallel, rate = parallel if isinstance(parallel, tuple) else (parallel, None)
    assert remaining_seconds(finished, pending, parallel, rate) == pytest.approx(expected)


def test_late_large_sizes_are_not_estimated_by_the_small_ones():
    """The reported case: many quick n = 2 jobs done, the few n = 4 jobs still to come.
    A rate-based estimate says about one second; the size growth says 16 s per job."""
    jobs = make_grid([2, 3, 4], ["uniform"], range(10), depths=[1])
    clock = SweepClock(jobs, parallel=1)
    now = 0.0
    for job in jobs[:10]:
        now += 0.25
        clock.finish(job, 0.25, now)  # n = 2
    for job in jobs[10:19]:
        now += 2.0
        last = clock.finish(job, 2.0, now)  # n = 3: growth 8 per qubit
    # left: one n = 3 job (2 s) and ten n = 4 jobs (2 * 8 = 16 s each); wall = job time
    assert last == "02:42" and clock.eta == pytest.approx(162.0)
    assert job_seconds(clock.finished, G, 4) == pytest.approx(16.0)
    with pytest.raises(ThermoseedError, match="parallel"):
        remaining_seconds(clock.finished, clock.pending, 0)


def test_clock_measures_the_wall_rate_after_the_first_record():
    """An overloaded machine: after the first record, 2 s of job time took 4 s of wall
    time, so the last 1 s job is expected to take 2 s."""
    jobs = make_grid([2], ["uniform"], range(4), depths=[1])
    clock = SweepClock(jobs, parallel=2)
    clock.finish(jobs[0], 1.0, now=10.0)  # startup before the first record is not counted
    clock.finish(jobs[1], 1.0, now=12.0)
    assert clock.finish(jobs[2], 1.0, now=14.0) == "00:02"


def test_progress_bar_shows_the_estimate(tmp_path, capsys):
    run_sweep(make_grid([2], ["uniform"], range(3), depths=[1]), tmp_path / "r.jsonl",
              workers=1, progress=True)
    err = capsys.readouterr().err
    assert "eta=" in err and "3/3" in err


def test_sigterm_stops_the_sweep_like_ctrl_c_with_whole_records(tmp_path):
    """SIGTERM during an in-process sweep raises KeyboardInterrupt, the file holds whole
    lines, the previous handler is back, and a rerun resumes."""
    jobs = make_grid([2], ["uniform"], range(6), depths=[1])
    path = tmp_path / "r.jsonl"
    before = signal.getsignal(signal.SIGTERM)

    def hook(record):
        if len(read_records(path)) == 2:
            os.kill(os.getpid(), signal.SIGTERM)

    with pytest.raises(KeyboardInterrupt, match="SIGTERM"):
        run_sweep(jobs, path, workers=1, progress=False, on_record=hook)
    assert signal.getsignal(signal.SIGTERM) is before
    assert path.read_bytes().endswith(b"\n") and len(read_records(path)) == 2
    again = run_sweep(jobs, path, workers=1, progress=False)
    assert again.skipped == 2 and again.ran == 4


def test_a_signal_while_a_record_is_written_waits_for_the_whole_line():
    steps = []
    with pytest.raises(KeyboardInterrupt, match="SIGTERM"), Interrupts() as interrupts:
        with interrupts.held_back():
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(0.05)  # the handler runs here and must not raise yet
            steps.append("written")
        steps.append("after")  # pragma: no cover - never reached
    assert steps == ["written"]


@pytest.mark.parametrize("address", ["localhost", "tcp://host", "http://10.0.0.5:8786",
                                     "tcp://10.0.0.5:99999", "tcp://a b:1", ""])
def test_malformed_scheduler_address_is_one_line_before_any_work(tmp_path, address):
    path = tmp_path / "r.jsonl"
    with pytest.raises(ThermoseedError, match="expected tcp://host:port") as info:
        run_sweep(make_grid([2], ["uniform"], [0]), path, scheduler=address, progress=False)
    assert "\n" not in str(info.value) and not path.exists()


def test_scheduler_address_forms_accepted():
    for address in ["tcp://10.0.0.5:8786", "tls://sched.example.org:8786", "127.0.0.1:8786",
                    "tcp://[::1]:8786", "inproc://10.0.0.5/123/1"]:
        assert check_scheduler(address) == address


def test_unreachable_scheduler_is_one_line_after_the_connect_timeout(tmp_path):
    pytest.importorskip("dask.distributed", reason="dask.distributed is not installed")
    with socket.socket() as sock:  # a local port nobody listens on
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    address = f"tcp://127.0.0.1:{port}"
    path = tmp_path / "r.jsonl"
    start = time.monotonic()
    with pytest.raises(ThermoseedError, match="no dask scheduler answers at") as info:
        run_sweep(make_grid([2], ["uniform"], [0]), path, scheduler=address,
                  connect_timeout=1.0, progress=False)
    assert time.monotonic() - start < 8.0
    message = str(info.value)
    assert "\n" not in message and address in message and "dask worker" in message
    assert not path.exists()
    with pytest.raises(ThermoseedError, match="connect_timeout"):
        run_sweep(make_grid([2], ["uniform"], [0]), path, scheduler=address,
                  connect_timeout=0, progress=False)


# ------------------------------------------------------------------ killed sweep processes

SCRIPT = textwrap.dedent("""
    import sys

    from thermoseed.bridge import make_grid, run_sweep

    if __name__ == "__main__":
        jobs = make_grid([6], ["uniform"], range(400), depths=[6])
        run_sweep(jobs, sys.argv[1], workers=2, chunk=1, progress=False)
""")


def _descendants(pid: int) -> list[int]:
    out = []
    for task in Path(f"/proc/{pid}/task").glob("*"):
        try:
            children = (task / "children").read_text().split()
        except OSError:
            continue
        for child in map(int, children):
            out += [child, *_descendants(child)]
    return out


def _alive(pid: int) -> bool:
    try:
        return Path(f"/proc/{pid}/stat").read_text().split()[2] != "Z"
    except OSError:
        return False


def _wait_for(condition, seconds: float) -> bool:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(0.1)
    return condition()


@pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="needs Linux /proc")
@pytest.mark.parametrize("signum", [
    pytest.param(signal.SIGTERM, id="SIGTERM", marks=pytest.mark.slow),
    pytest.param(signal.SIGKILL, id="SIGKILL"),  # ~4 s idle: the parent watch, always run
])
def test_killed_sweep_takes_its_workers_with_it(tmp_path, signum):
    """The sweep's process is sent SIGTERM (what `timeout` sends) or SIGKILL while two
    workers compute: it exits, its workers and the resource tracker are gone within 10 s
    (they stayed for minutes), the results file holds whole lines and a rerun resumes."""
    script, path = tmp_path / "sweep_script.py", tmp_path / "r.jsonl"
    script.write_text(SCRIPT)
    proc = subprocess.Popen([sys.executable, str(script), str(path)], cwd=tmp_path,
                            stderr=subprocess.DEVNULL)
    try:
        assert _wait_for(lambda: path.exists() and path.read_bytes().count(b"\n") >= 2, 240)
        children = _descendants(proc.pid)
        assert len(children) >= 2  # two workers (and the resource tracker)
        os.kill(proc.pid, signum)
        proc.wait(timeout=10)
        assert _wait_for(lambda: not any(_alive(c) for c in children), 10), \
            [c for c in children if _alive(c)]
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    raw = path.read_bytes()
    assert raw.endswith(b"\n")
    done = {rec["key"] for rec in read_records(path)}
    jobs = make_grid([6], ["uniform"], range(400), depths=[6])
    written = [j for j in jobs if job_key(j, None) in done]
    extra = next(j for j in jobs if job_key(j, None) not in done)
    again = run_sweep(written + [extra], path, workers=1, progress=False)
    assert again.skipped == len(done) and again.ran == 1
