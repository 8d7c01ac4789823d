"""Sweeps: identical numbers from every executor, streaming records, exact resume.

Source of the expected numbers: the uninterrupted in-process run of the same grid (fixture
``reference``); every other executor or resumed run must reproduce it bit for bit (JSON
floats round-trip exactly, Python's float repr).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from thermoseed.bridge.plateau.sweep import (
    DuplicateRecordWarning,
    job_key,
    make_grid,
    probe_results,
    read_records,
    run_sweep,
    train_curves,
)
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.labelled import LabelledData
from thermoseed.recipes.scenarios.magnet_phase import magnet_phase_data, train_test_split


class Interrupt(Exception):
    """Raised by the test hook to kill a sweep midway."""


def magnet(n: int) -> LabelledData:
    train, test = train_test_split(magnet_phase_data(n, 8, seed=2), seed=2)
    return LabelledData(train.states, train.labels, test.states, test.labels)


@pytest.fixture(scope="module")
def data():
    return {2: magnet(2), 3: magnet(3)}


def small_grid():
    jobs = make_grid([2, 3], ["uniform", "identity_blocks"], range(3),
                     costs=("local", "global"), depths=[2], template="ladder")
    jobs += make_grid([2], ["small_angle"], range(2), costs=("classifier",), depths=[1])
    jobs += make_grid([2], ["uniform"], range(2), task="training", steps=3, depths=[1])
    return jobs


def results_by_key(path) -> dict:
    return {rec["key"]: rec["result"] for rec in read_records(path)}


@pytest.fixture(scope="module")
def reference(tmp_path_factory, data):
    """The uninterrupted in-process run every other run must reproduce exactly."""
    path = tmp_path_factory.mktemp("ref") / "sweep.jsonl"
    out = run_sweep(small_grid(), path, data=data, workers=1, progress=False)
    assert out.ran == len(small_grid()) and out.skipped == 0
    return results_by_key(path)


def test_two_workers_interrupted_and_resumed(tmp_path, data, reference):
    """Two local workers, killed after 5 records while both processes are busy, then
    rerun: the file holds each job once with exactly the in-process numbers."""
    path = tmp_path / "two-resume.jsonl"

    def hook(record):
        if len(read_records(path)) == 5:
            raise Interrupt

    with pytest.raises(Interrupt):
        run_sweep(small_grid(), path, data=data, workers=2, chunk=2, progress=False,
                  on_record=hook)
    again = run_sweep(small_grid(), path, data=data, workers=2, chunk=3, progress=False)
    assert again.skipped == 5 and again.ran == len(reference) - 5
    keys = [rec["key"] for rec in read_records(path)]
    assert len(keys) == len(set(keys)) == len(reference)
    assert results_by_key(path) == reference


def test_dask_local_cluster_gives_identical_results(tmp_path, data, reference):
    distributed = pytest.importorskip(
        "dask.distributed", reason="dask.distributed is not installed (extra 'cluster')")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        out = run_sweep(small_grid(), tmp_path / "dask.jsonl", data=data,
                        scheduler=cluster.scheduler_address, progress=False)
    assert out.ran == len(reference)
    assert results_by_key(tmp_path / "dask.jsonl") == reference


def test_resume_after_interrupt_runs_each_job_once(tmp_path, data, reference):
    path = tmp_path / "resume.jsonl"
    kill_after = 7
    seen = []

    def hook(record):
        seen.append(record["key"])
        if len(seen) == kill_after:
            raise Interrupt

    with pytest.raises(Interrupt):
        run_sweep(small_grid(), path, data=data, workers=1, progress=False, on_record=hook)
    assert len(read_records(path)) == kill_after
    again = run_sweep(small_grid(), path, data=data, workers=1, progress=False,
                      on_record=lambda rec: seen.append(rec["key"]))
    assert again.skipped == kill_after and again.ran == len(reference) - kill_after
    assert len(seen) == len(set(seen)) == len(reference)  # no job ran twice
    keys = [rec["key"] for rec in read_records(path)]
    assert len(keys) == len(set(keys))
    assert results_by_key(path) == reference
    ids = {n: d.fingerprint() for n, d in data.items()}
    in_job_order = [job_key(j, ids.get(j.n_qubits) if j.needs_data else None)
                    for j in small_grid()]
    assert [r["key"] for r in again.records] == in_job_order  # records in job order


def test_torn_last_line_is_dropped_and_rerun(tmp_path, data, reference):
    path = tmp_path / "torn.jsonl"
    jobs = small_grid()[:4]
    run_sweep(jobs, path, workers=1, progress=False)
    raw = path.read_bytes()
    path.write_bytes(raw[: raw.rfind(b"\n", 0, len(raw) - 1) + 1] + b'{"key": "half')
    again = run_sweep(jobs, path, workers=1, progress=False)
    assert again.ran == 1 and again.skipped == 3
    assert all(results_by_key(path)[k] == reference[k] for k in results_by_key(path))


def test_records_read_back_as_probe_results_and_curves(data, reference, tmp_path):
    out = run_sweep(small_grid(), tmp_path / "r.jsonl", data=data, workers=1, progress=False)
    probes = probe_results(out.records)
    curves = train_curves(out.records)
    assert len(probes) == 26 and len(curves) == 2
    assert {p.method for p in probes} == {"adjoint/lightning.qubit", "backprop/autograd"}
    assert curves[0].loss.shape == (4,)
    line = json.loads((tmp_path / "r.jsonl").read_text().splitlines()[0])
    assert set(line) == {"key", "job", "data", "result", "seconds"}


def test_bad_inputs(tmp_path):
    with pytest.raises(ThermoseedError, match="needs labelled data"):
        run_sweep(make_grid([2], ["uniform"], [0], costs=("classifier",)), tmp_path / "a",
                  workers=1, progress=False)
    with pytest.raises(ThermoseedError, match="unknown strategy"):
        make_grid([2], ["sideways"], [0])
    bad = tmp_path / "bad.jsonl"
    bad.write_text('{"key": 1, "job": {}, "result": 2}\nnot json\n'
                   '{"key": 3, "job": {}, "result": 4}\n')
    with pytest.raises(ThermoseedError, match="line 2"):
        read_records(bad)


@pytest.mark.parametrize("damage, message", [
    (lambda s: s.astype(complex) * np.nan, "contains NaN"),
    (lambda s: 2 * s, "has norm 2"),
])
def test_labelled_data_is_checked_like_fit_data(damage, message):
    """NaN or unnormalised classifier states are refused before any sweep record is written."""
    data = magnet(2)
    bad = LabelledData(damage(np.asarray(data.train_states)), *data[1:])
    with pytest.raises(ThermoseedError, match=message):
        bad.check(2)


def test_second_writer_refuses_while_a_sweep_holds_the_file(tmp_path):
    """Two sweeps into one results file at once: the second stops at once with one line
    (before, both appended every job: 350 lines for 180 keys)."""
    import fcntl

    path = tmp_path / "shared.jsonl"
    with open(f"{path}.lock", "a") as other:  # a running sweep holds this lock
        fcntl.flock(other.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        with pytest.raises(ThermoseedError, match="another sweep is writing"):
            run_sweep(make_grid([2], ["uniform"], [0]), path, workers=1, progress=False)
    assert not path.exists() or path.read_text() == ""
    out = run_sweep(make_grid([2], ["uniform"], [0]), path, workers=1, progress=False)
    assert out.ran == 1  # the lock is released when the holder is gone


def test_duplicates_are_dropped_and_order_does_not_matter(tmp_path):
    """Duplicate keys count once (with a warning) and the records come back sorted by key,
    so line order (worker completion order) cannot change a statistic."""
    path = tmp_path / "dup.jsonl"
    run_sweep(make_grid([2, 3], ["uniform"], [0, 1]), path, workers=1, progress=False)
    lines = path.read_text().splitlines()
    (tmp_path / "shuffled.jsonl").write_text("\n".join(lines[::-1] + lines[:2]) + "\n")
    with pytest.warns(DuplicateRecordWarning, match="2 duplicate"):
        shuffled = read_records(tmp_path / "shuffled.jsonl")
    assert [r["key"] for r in shuffled] == [r["key"] for r in read_records(path)]
    assert len(shuffled) == 4
