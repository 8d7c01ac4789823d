"""Training-data validation, file round trips, quantum functions and target moments."""

import zipfile

import numpy as np
import pennylane as qml
import pytest
import qutip

from thermoseed.pretrain import (
    TermSet,
    ThermoseedError,
    TrainingData,
    as_training_data,
    from_density_matrices,
    from_qfunc,
    from_states,
    graph_terms,
    load_training_data,
)


def _states(rng, count, n):
    s = rng.standard_normal((count, 2**n)) + 1j * rng.standard_normal((count, 2**n))
    return s / np.linalg.norm(s, axis=1, keepdims=True)


# ---------------------------------------------------------------- validation rules


@pytest.mark.parametrize("dim", [3, 6, 1])
def test_dimension_not_power_of_two(dim):
    with pytest.raises(ThermoseedError, match="power of two"):
        from_states(np.ones((2, dim)) / np.sqrt(dim))
    with pytest.raises(ThermoseedError, match="power of two"):
        from_density_matrices(np.eye(dim) / dim)


def test_qubit_count_mismatch_with_term_set(helpers):
    td = from_density_matrices(helpers.random_density(8, np.random.default_rng(0)))
    with pytest.raises(ThermoseedError, match="3 qubits but the term set acts on 2"):
        td.moments(graph_terms(2, "line"))


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_nan_inf_refused(bad):
    s = np.full((2, 4), 0.5, dtype=complex)
    s[1, 2] = bad
    with pytest.raises(ThermoseedError, match="NaN or infinite"):
        from_states(s)
    rho = np.eye(4, dtype=complex) / 4
    rho[0, 0] = bad
    with pytest.raises(ThermoseedError, match="NaN or infinite"):
        from_density_matrices(rho)


def test_non_hermitian_refused():
    rho = np.eye(2, dtype=complex) / 2
    rho[0, 1] = 0.1
    with pytest.raises(ThermoseedError, match="not Hermitian"):
        from_density_matrices(rho)


def test_tiny_asymmetry_is_symmetrised():
    rho = np.eye(2, dtype=complex) / 2
    rho[0, 1] = 1e-12
    td = from_density_matrices(rho)
    np.testing.assert_array_equal(td.rho, td.rho.conj().T)


def test_negative_eigenvalue_refused():
    rho = np.diag([1.1, -0.1]).astype(complex)
    with pytest.raises(ThermoseedError, match="negative eigenvalue"):
        from_density_matrices(rho)
    # within tolerance (PSD_ATOL = 1e-8) is accepted
    ok = np.diag([1.0 + 1e-10, -1e-10]).astype(complex)
    assert from_density_matrices(ok).n_qubits == 1


def test_trace_not_one_and_renormalize(helpers):
    rho = helpers.random_density(4, np.random.default_rng(1))
    with pytest.raises(ThermoseedError, match="trace 3"):
        from_density_matrices(3 * rho)
    td = from_density_matrices(3 * rho, renormalize=True)
    np.testing.assert_allclose(td.rho, rho, atol=1e-14)
    assert np.trace(td.rho).real == pytest.approx(1.0, abs=1e-14)


@pytest.mark.parametrize("weights", [[1.0, 0.0], [1.0, -1.0], [1.0, np.nan]])
def test_bad_weights_refused(weights):
    s = _states(np.random.default_rng(2), 2, 2)
    with pytest.raises(ThermoseedError, match="positive and finite"):
        from_states(s, weights)


def test_weights_shape_and_normalisation():
    rng = np.random.default_rng(3)
    s = _states(rng, 3, 2)
    with pytest.raises(ThermoseedError, match="one per state"):
        from_states(s, [1.0, 2.0])
    td = from_states(s, [1.0, 2.0, 5.0])
    np.testing.assert_allclose(td.weights, [0.125, 0.25, 0.625])
    want = sum(w * np.outer(v, v.conj()) for w, v in zip(td.weights, s, strict=True))
    np.testing.assert_allclose(td.rho, want, atol=1e-15)


def test_unnormalised_states_and_renormalize():
    rng = np.random.default_rng(4)
    s = _states(rng, 3, 2)
    scaled = s * np.array([[1.0], [2.0], [0.5]])
    with pytest.raises(ThermoseedError, match=r"state vectors \[1, 2\] are not normalised"):
        from_states(scaled)
    td = from_states(scaled, renormalize=True)
    np.testing.assert_allclose(td.states, s, atol=1e-15)
    with pytest.raises(ThermoseedError, match="not normalised"):
        from_states(np.zeros((1, 4)), renormalize=True)


def test_square_2d_array_is_ambiguous():
    rho = np.eye(4, dtype=complex) / 4
    with pytest.raises(ThermoseedError, match="kind='states' or kind='density'"):
        as_training_data(rho)
    assert as_training_data(rho, kind="density").n_members == 1
    states = np.eye(4, dtype=complex)
    td = as_training_data(states, kind="states")
    assert td.n_members == 4
    np.testing.assert_allclose(td.rho, np.eye(4) / 4)
    with pytest.raises(ThermoseedError, match="unknown data kind"):
        as_training_data(rho, kind="vectors")


def test_dispatch_by_shape():
    rng = np.random.default_rng(5)
    assert as_training_data(_states(rng, 3, 2)).n_members == 3  # (3, 4): states
    assert as_training_data(_states(rng, 1, 2)[0]).n_members == 1  # 1-D: one state
    stack = np.stack([np.eye(2) / 2, np.diag([1.0, 0.0])]).astype(complex)
    td = as_training_data(stack)  # 3-D: density stack
    np.testing.assert_allclose(td.rho, np.diag([0.75, 0.25]))
    assert as_training_data(td) is td


def test_labels_validated():
    rng = np.random.default_rng(6)
    s = _states(rng, 2, 1)
    assert from_states(s, labels=[0, 1]).labels.tolist() == [0, 1]
    with pytest.raises(ThermoseedError, match="labels must be 2 integers"):
        from_states(s, labels=[0.5, 1.0])


# ---------------------------------------------------------------- files


def test_npy_round_trips(tmp_path, helpers):
    rng = np.random.default_rng(7)
    s = _states(rng, 3, 2)
    np.save(tmp_path / "s.npy", s)
    np.testing.assert_allclose(load_training_data(tmp_path / "s.npy").rho,
                               from_states(s).rho, atol=0)
    stack = np.stack([helpers.random_density(4, rng) for _ in range(2)])
    np.save(tmp_path / "d.npy", stack)
    np.testing.assert_allclose(load_training_data(tmp_path / "d.npy").rho,
                               stack.mean(axis=0), atol=1e-15)
    np.save(tmp_path / "sq.npy", stack[0])
    with pytest.raises(ThermoseedError, match="kind="):
        load_training_data(tmp_path / "sq.npy")
    assert load_training_data(tmp_path / "sq.npy", kind="density").n_qubits == 2


def test_npz_round_trips(tmp_path, helpers):
    rng = np.random.default_rng(8)
    s = _states(rng, 4, 3)
    w = np.array([1.0, 2.0, 3.0, 4.0])
    lab = np.array([0, 1, 1, 0])
    np.savez(tmp_path / "s.npz", states=s, weights=w, labels=lab)
    td = load_training_data(tmp_path / "s.npz")
    ref = from_states(s, w, labels=lab)
    np.testing.assert_array_equal(td.rho, ref.rho)
    np.testing.assert_array_equal(td.labels, lab)
    np.testing.assert_allclose(td.weights, w / w.sum())
    rho = helpers.random_density(8, rng)
    np.savez(tmp_path / "d.npz", density=rho)
    np.testing.assert_allclose(load_training_data(tmp_path / "d.npz").rho, rho, atol=1e-15)
    assert as_training_data(str(tmp_path / "d.npz")).n_qubits == 3


def test_npz_content_is_validated(tmp_path):
    np.savez(tmp_path / "bad.npz", states=np.ones((2, 4)))
    with pytest.raises(ThermoseedError, match="not normalised"):
        load_training_data(tmp_path / "bad.npz")
    assert load_training_data(tmp_path / "bad.npz", renormalize=True).n_members == 2


def test_object_arrays_refused(tmp_path):
    obj = np.empty(2, dtype=object)
    obj[0], obj[1] = np.ones(2), "two"
    # An object-dtype .npy is a numpy header followed by a pickle stream (numpy's format
    # spec, numpy.lib.format); written by hand so the suite never enables pickling itself.
    import pickle

    with open(tmp_path / "o.npy", "wb") as handle:
        np.lib.format.write_array_header_1_0(
            handle, {"descr": "|O", "fortran_order": False, "shape": obj.shape})
        handle.write(pickle.dumps(obj))
    with pytest.raises(ThermoseedError, match="(?i)object|pickle"):
        load_training_data(tmp_path / "o.npy")
    np.savez(tmp_path / "o.npz", states=obj)
    with pytest.raises(ThermoseedError, match="(?i)object|pickle"):
        load_training_data(tmp_path / "o.npz")


def test_missing_file_and_keys(tmp_path):
    with pytest.raises(ThermoseedError, match="does not exist"):
        load_training_data(tmp_path / "nope.npz")
    np.savez(tmp_path / "k.npz", vectors=np.eye(2), weights=np.ones(2))
    with pytest.raises(ThermoseedError, match="needs 'states' or 'density'"):
        load_training_data(tmp_path / "k.npz")


@pytest.mark.parametrize("suffix", [".npz", ".npy"])
def test_truncated_files(tmp_path, suffix):
    rng = np.random.default_rng(9)
    s = _states(rng, 5, 3)
    good = tmp_path / f"good{suffix}"
    if suffix == ".npz":
        np.savez(good, states=s)
    else:
        np.save(good, s)
    raw = good.read_bytes()
    for cut in (0, 6, 40, len(raw) // 2, len(raw) - 4):
        bad = tmp_path / f"cut{cut}{suffix}"
        bad.write_bytes(raw[:cut])
        with pytest.raises(ThermoseedError, match=r"cannot read|not normalised|numeric"):
            load_training_data(bad)


def test_garbage_and_corrupt_members(tmp_path):
    rng = np.random.default_rng(10)
    (tmp_path / "g.npz").write_bytes(rng.bytes(300))
    with pytest.raises(ThermoseedError, match="cannot read"):
        load_training_data(tmp_path / "g.npz")
    s = _states(rng, 3, 2)
    np.savez(tmp_path / "ok.npz", states=s)
    raw = bytearray((tmp_path / "ok.npz").read_bytes())
    raw[120:140] = b"\x00" * 20  # inside the stored member: zip CRC check fails
    (tmp_path / "crc.npz").write_bytes(bytes(raw))
    with pytest.raises(ThermoseedError, match="cannot read"):
        load_training_data(tmp_path / "crc.npz")
    # a member whose .npy header dict is cut short
    header = b"\x93NUMPY\x01\x00\x10\x00{'descr': '<c16'"
    with zipfile.ZipFile(tmp_path / "hdr.npz", "w") as z:
        z.writestr("states.npy", header)
    with pytest.raises(ThermoseedError):
        load_training_data(tmp_path / "hdr.npz")


@pytest.mark.filterwarnings("ignore:overflow:RuntimeWarning")
def test_random_byte_corruption_never_escapes(tmp_path):
    """Damaged files either raise ThermoseedError or load the same data: never a raw library
    exception, never silently different states. The zip container checksums every member
    (CRC-32), so a damaged .npz that loads must hold the original bytes; a bare .npy has no
    checksum, so the data check (normalisation) is what catches a changed number, and what it
    cannot see is a change below its tolerance."""
    rng = np.random.default_rng(11)
    s = _states(rng, 3, 2)
    np.savez(tmp_path / "ok.npz", states=s)
    np.save(tmp_path / "ok.npy", s)
    reference = load_training_data(tmp_path / "ok.npz").rho
    for name, atol in (("ok.npz", 0.0), ("ok.npy", 1e-6)):
        raw = (tmp_path / name).read_bytes()
        rejected = 0
        for trial in range(300):
            b = bytearray(raw)
            for pos in rng.integers(0, len(b), size=rng.integers(1, 4)):
                b[pos] = rng.integers(0, 256)
            path = tmp_path / f"fuzz{trial}{name[-4:]}"
            path.write_bytes(bytes(b))
            try:
                loaded = load_training_data(path).rho
            except ThermoseedError:
                rejected += 1
            else:
                np.testing.assert_allclose(loaded, reference, atol=atol, rtol=0)
            path.unlink()
        assert rejected > 150, (name, rejected)  # most random damage is detected


# ---------------------------------------------------------------- quantum functions


def test_from_qfunc_bell_state():
    def bell():
        qml.Hadamard(0)
        qml.CNOT([0, 1])

    td = from_qfunc(bell, 2)
    # Source: textbook Bell state (|00> + |11>)/sqrt(2), wire 0 the most significant bit.
    phi = np.array([1, 0, 0, 1]) / np.sqrt(2)
    np.testing.assert_allclose(td.rho, np.outer(phi, phi), atol=1e-12)
    assert as_training_data(bell, n_qubits=2).n_qubits == 2
    with pytest.raises(ThermoseedError, match="n_qubits"):
        as_training_data(bell)


def test_from_qfunc_noise_and_failure():
    def noisy():
        qml.PauliX(0)
        qml.DepolarizingChannel(0.3, wires=0)

    td = from_qfunc(noisy, 1)
    # Source: depolarising channel rho -> (1-p) rho + p/3 (X rho X + Y rho Y + Z rho Z)
    # (PennyLane DepolarizingChannel docstring); |1><1| -> diag(2p/3, 1 - 2p/3).
    np.testing.assert_allclose(td.rho, np.diag([0.2, 0.8]), atol=1e-12)

    def broken():
        raise RuntimeError("boom")

    with pytest.raises(ThermoseedError, match="boom"):
        from_qfunc(broken, 1)


# ---------------------------------------------------------------- moments


def _qutip_pauli(label):
    ops = {"I": qutip.qeye(2), "X": qutip.sigmax(), "Y": qutip.sigmay(), "Z": qutip.sigmaz()}
    return qutip.tensor([ops[ch] for ch in label])


@pytest.mark.parametrize("n", [1, 2, 3])
def test_target_moments_match_qutip(n, helpers):
    rng = np.random.default_rng(20 + n)
    rho = helpers.random_density(2**n, rng)
    labels = helpers.random_labels(n, min(4**n - 1, 12), rng)
    td = from_density_matrices(rho)
    got = td.moments(TermSet(labels))
    # Source: QuTiP expect() with tensor products of qutip.sigmax/sigmay/sigmaz
    # (first tensor factor = wire 0 = most significant bit).
    q_rho = qutip.Qobj(rho, dims=[[2] * n, [2] * n])
    want = np.array([qutip.expect(_qutip_pauli(lab), q_rho) for lab in labels])
    np.testing.assert_allclose(got, want, atol=1e-12)
    assert isinstance(td, TrainingData)
    # Source: QuTiP entropy_vn (natural log by default).
    assert td.entropy() == pytest.approx(qutip.entropy_vn(q_rho), abs=1e-10)


def test_square_array_kind_reads_hermitian_as_density_and_others_as_states():
    # Source: definition — a density matrix is Hermitian; random complex state batches are not.
    from thermoseed.pretrain.data import square_array_kind

    rng = np.random.default_rng(7)
    batch = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    batch /= np.linalg.norm(batch, axis=1)[:, None]
    assert square_array_kind(batch) == "states"
    rho = batch.T @ batch.conj() / 4
    assert square_array_kind(rho) == "density"
    assert square_array_kind(batch[:2]) is None  # not square: no ambiguity to resolve
    assert square_array_kind([[1, 0], [0, 0]]) is None  # not an ndarray: caller decides
