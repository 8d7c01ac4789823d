"""Versioned record files: model round trips, damaged files and atomic writes."""

import io
import json
import os

import numpy as np
import pytest

import thermoseed.pretrain.files
from thermoseed.pretrain import (
    TermSet,
    ThermoseedError,
    VisibleGibbsModel,
    graph_terms,
    load_model,
    read_record,
    save_model,
    write_record,
)
from thermoseed.pretrain.files import FORMAT, FORMAT_VERSION
from thermoseed.pretrain.models import MODEL_KIND

METRICS = ("loss_", "grad_norm_", "n_iter_", "converged_", "data_entropy_")


@pytest.fixture
def fitted(helpers):
    rho = helpers.random_density(8, np.random.default_rng(5))
    return VisibleGibbsModel(graph_terms(3, "ring", fields="XZ"), l2=0.01, tol=1e-7,
                             max_iter=300, init_scale=0.2, seed=11).fit(rho)


def _raw_record(path, header, arrays=None):
    """Write an .npz with a hand-made header, bypassing write_record's own fields."""
    buf = io.BytesIO()
    np.savez(buf, __header__=np.array(json.dumps(header)), **(arrays or {}))
    path.write_bytes(buf.getvalue())


def test_model_round_trip_is_exact(tmp_path, fitted):
    path = tmp_path / "model.npz"
    assert fitted.save(path) == path
    loaded = load_model(path)
    assert type(loaded) is VisibleGibbsModel
    np.testing.assert_array_equal(loaded.coef_, fitted.coef_)
    assert loaded.coef_.dtype == np.float64
    assert loaded.terms_ == fitted.terms_
    assert loaded.terms_.labels == fitted.terms_.labels
    want = {k: v for k, v in fitted.get_params().items() if k != "terms"}
    got = {k: v for k, v in loaded.get_params().items() if k != "terms"}
    assert got == want
    assert TermSet(loaded.get_params()["terms"]) == fitted.terms_
    for attr in METRICS:
        assert getattr(loaded, attr) == getattr(fitted, attr), attr
    assert loaded.history_ == fitted.history_
    np.testing.assert_array_equal(loaded.target_moments_, fitted.target_moments_)
    np.testing.assert_allclose(loaded.state(), fitted.state(), atol=1e-15)
    assert loaded.log_partition() == fitted.log_partition()
    header, arrays = read_record(path, MODEL_KIND)
    assert header["format"] == FORMAT and header["version"] == FORMAT_VERSION
    assert header["n_qubits"] == 3 and set(arrays) >= {"coef", "target_moments"}


def test_from_coefficients_round_trip(tmp_path):
    model = VisibleGibbsModel.from_coefficients(["XY", "ZZ"], [0.5, -1.25])
    save_model(model, tmp_path / "m.npz")
    loaded = load_model(tmp_path / "m.npz")
    np.testing.assert_array_equal(loaded.coef_, [0.5, -1.25])
    assert not hasattr(loaded, "history_") and not hasattr(loaded, "loss_")


def test_generic_record_round_trip(tmp_path):
    arrays = {"a": np.arange(5), "b": np.array([[1 + 2j]]), "s": np.array("text")}
    write_record(tmp_path / "r.npz", "probe-run", {"n": 3, "note": "x"}, arrays)
    header, got = read_record(tmp_path / "r.npz", "probe-run")
    assert header["kind"] == "probe-run" and header["n"] == 3 and "written" in header
    assert set(got) == set(arrays)
    for key, value in arrays.items():
        np.testing.assert_array_equal(got[key], value)
    with pytest.raises(ThermoseedError, match="reserved"):
        write_record(tmp_path / "x.npz", "k", {}, {"__header__": np.ones(1)})
    with pytest.raises(ThermoseedError, match="JSON"):
        write_record(tmp_path / "x.npz", "k", {"bad": object()}, {})
    with pytest.raises(ThermoseedError, match="dtype object"):
        write_record(tmp_path / "x.npz", "k", {}, {"o": np.array([None, 1], dtype=object)})
    assert not (tmp_path / "x.npz").exists()


def test_corrupt_file(tmp_path, fitted):
    path = tmp_path / "m.npz"
    path.write_bytes(np.random.default_rng(1).bytes(400))
    with pytest.raises(ThermoseedError, match="corrupt or not an .npz"):
        load_model(path)
    fitted.save(path)
    raw = bytearray(path.read_bytes())
    raw[100:140] = b"\xff" * 40  # inside the first stored member: CRC mismatch
    path.write_bytes(bytes(raw))
    with pytest.raises(ThermoseedError, match="corrupt"):
        load_model(path)


def test_truncated_file(tmp_path, fitted):
    path = tmp_path / "m.npz"
    fitted.save(path)
    raw = path.read_bytes()
    for cut in (0, 10, len(raw) // 2, len(raw) - 1):
        path.write_bytes(raw[:cut])
        with pytest.raises(ThermoseedError, match="corrupt or not an .npz"):
            load_model(path)


def test_missing_and_non_npz_files(tmp_path):
    with pytest.raises(ThermoseedError, match="does not exist"):
        load_model(tmp_path / "none.npz")
    np.save(tmp_path / "a.npy", np.ones(3))
    with pytest.raises(ThermoseedError, match="single .npy array"):
        load_model(tmp_path / "a.npy")


def test_not_a_record(tmp_path):
    np.savez(tmp_path / "plain.npz", coef=np.ones(3))
    with pytest.raises(ThermoseedError, match="not a thermoseed record"):
        load_model(tmp_path / "plain.npz")
    _raw_record(tmp_path / "other.npz", {"format": "someone-else", "version": 1})
    with pytest.raises(ThermoseedError, match="not a thermoseed record"):
        load_model(tmp_path / "other.npz")
    buf = io.BytesIO()
    np.savez(buf, __header__=np.array("{not json"))
    (tmp_path / "badjson.npz").write_bytes(buf.getvalue())
    with pytest.raises(ThermoseedError, match="corrupt header"):
        load_model(tmp_path / "badjson.npz")


def test_wrong_kind(tmp_path):
    write_record(tmp_path / "r.npz", "plateau-probe", {}, {"x": np.ones(2)})
    with pytest.raises(ThermoseedError, match="'plateau-probe' record, not a 'gibbs-model'"):
        load_model(tmp_path / "r.npz")


def test_newer_version(tmp_path):
    header = {"format": FORMAT, "version": FORMAT_VERSION + 1, "kind": MODEL_KIND}
    _raw_record(tmp_path / "new.npz", header, {"coef": np.ones(2)})
    with pytest.raises(ThermoseedError, match="newer than this thermoseed reads.*upgrade"):
        load_model(tmp_path / "new.npz")
    header["version"] = "1"
    _raw_record(tmp_path / "str.npz", header, {"coef": np.ones(2)})
    with pytest.raises(ThermoseedError, match="version"):
        load_model(tmp_path / "str.npz")


def test_incomplete_model_record(tmp_path, fitted):
    write_record(tmp_path / "nocoef.npz", MODEL_KIND, {"terms": ["XX"], "params": {},
                                                      "metrics": {}}, {})
    with pytest.raises(ThermoseedError, match="incomplete"):
        load_model(tmp_path / "nocoef.npz")
    write_record(tmp_path / "noterms.npz", MODEL_KIND, {"params": {}, "metrics": {}},
                 {"coef": np.ones(1)})
    with pytest.raises(ThermoseedError, match="incomplete"):
        load_model(tmp_path / "noterms.npz")
    write_record(tmp_path / "size.npz", MODEL_KIND, {"terms": ["XX", "ZZ"], "params": {},
                                                    "metrics": {}}, {"coef": np.ones(3)})
    with pytest.raises(ThermoseedError, match="2 terms"):
        load_model(tmp_path / "size.npz")
    header, arrays = read_record(fitted.save(tmp_path / "full.npz"))
    del arrays["history_grad_norm"]
    write_record(tmp_path / "half.npz", MODEL_KIND, header, arrays)
    with pytest.raises(ThermoseedError, match="history_grad_norm"):
        load_model(tmp_path / "half.npz")


def test_write_leaves_no_temp_files(tmp_path, fitted):
    for _ in range(3):
        fitted.save(tmp_path / "m.npz")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.npz"]
    fitted.save(tmp_path / "sub" / "dir" / "m.npz")  # parents are created
    assert sorted(p.name for p in (tmp_path / "sub" / "dir").iterdir()) == ["m.npz"]


@pytest.mark.parametrize("target", ["replace", "fsync"])
def test_failed_write_keeps_previous_file(tmp_path, fitted, monkeypatch, target):
    path = tmp_path / "m.npz"
    fitted.save(path)
    before = path.read_bytes()

    def boom(*args, **kwargs):
        raise OSError(f"simulated {target} failure")

    monkeypatch.setattr(thermoseed.pretrain.files.os, target, boom)
    changed = VisibleGibbsModel.from_coefficients(fitted.terms_, np.zeros(len(fitted.terms_)))
    with pytest.raises(OSError, match="simulated"):
        changed.save(path)
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.npz"]
    np.testing.assert_array_equal(load_model(path).coef_, fitted.coef_)
    assert os.replace is not boom


def _labelled_batch(n=2, count=12, seed=0):
    rng = np.random.default_rng(seed)
    states = rng.standard_normal((count, 2**n)) + 1j * rng.standard_normal((count, 2**n))
    states /= np.linalg.norm(states, axis=1, keepdims=True)
    return states, np.arange(count) % 2


def test_labelled_data_record_round_trip_and_plain_schema(tmp_path):
    from thermoseed.pretrain.labelled import load_labelled, save_labelled, split_labelled

    states, labels = _labelled_batch()
    data = split_labelled(states, labels, test_fraction=0.25, seed=3)
    header, _ = read_record(save_labelled(data, tmp_path / "d.npz"), "labelled-data")
    assert header["train"] == 8 and header["held_out"] == 4
    again = load_labelled(tmp_path / "d.npz")
    for a, b in zip(again, data, strict=True):
        np.testing.assert_array_equal(a, b)
    # the training-data schema (states + labels) is split here, seeded and stratified
    np.savez(tmp_path / "plain.npz", states=states, labels=labels)
    split = load_labelled(tmp_path / "plain.npz", seed=3)
    for a, b in zip(split, data, strict=True):
        np.testing.assert_array_equal(a, b)
    assert sorted(np.bincount(split.test_labels)) == [2, 2]
    np.savez(tmp_path / "both.npz", states=states, density=np.zeros((12, 4, 4)), labels=labels)
    with pytest.raises(ThermoseedError, match="exactly one of 'states'"):
        load_labelled(tmp_path / "both.npz")


def test_warm_start_record_says_its_layout(tmp_path):
    from thermoseed.bridge.ansatz import make_ansatz
    from thermoseed.bridge.warm_starts import load_warm_start, save_warm_start

    enc, head = make_ansatz("strong", 2, 1), make_ansatz("soft", 2, 1)
    params = np.arange(enc.n_params + head.n_params, dtype=float)
    save_warm_start(tmp_path / "w.npz", params, enc, head, strategy="pretrained")
    loaded, header = load_warm_start(tmp_path / "w.npz")
    np.testing.assert_array_equal(loaded, params)
    assert header["layout"].startswith("flat [encoder") and header["head"]["name"] == "soft"
    assert header["info"] == {"strategy": "pretrained"}
    with pytest.raises(ThermoseedError, match="flat parameter vector of length"):
        save_warm_start(tmp_path / "bad.npz", params[:-1], enc, head)
