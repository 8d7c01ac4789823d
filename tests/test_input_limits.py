"""Input limits of the dense path: weights near the float maximum, empty batches, data too
large for memory (refused in one line before anything large is allocated) and the notice
before a slow dense computation."""

import warnings

import numpy as np
import pytest

from thermoseed.pretrain import (
    DenseEngine,
    SlowDenseWarning,
    ThermoseedError,
    VisibleGibbsModel,
    as_training_data,
    from_density_matrices,
    from_states,
    graph_terms,
    load_training_data,
    memory,
)
from thermoseed.pretrain.data import stored_states, summarize_states

KIB = 1024
GIB = 1024**3


def _fake_memory(monkeypatch, available: int | None) -> None:
    monkeypatch.setattr(memory, "available_memory_bytes", lambda: available)


# ---------------------------------------------------------------- weights and empty batches


def test_weights_near_float_maximum_give_the_same_rho_as_small_ones(helpers):
    rng = np.random.default_rng(11)
    states = np.stack([helpers.random_state(4, rng) for _ in range(3)])
    # closed form: rho = sum_i w_i |psi_i><psi_i| with w = (2, 2, 1) / 5
    expected = sum(w * np.outer(s, s.conj()) for w, s in zip([0.4, 0.4, 0.2], states, strict=True))
    huge = from_states(states, [1e308, 1e308, 5e307]).rho
    np.testing.assert_allclose(huge, expected, atol=1e-15)
    np.testing.assert_allclose(huge, from_states(states, [2, 2, 1]).rho, atol=1e-15)
    rhos = np.stack([np.outer(s, s.conj()) for s in states])
    np.testing.assert_allclose(from_density_matrices(rhos, [1e308, 1e308, 5e307]).rho,
                               expected, atol=1e-15)


@pytest.mark.parametrize("weights", [[0.0, 0.0], [np.inf, 1.0], [-1.0, 2.0], ["a", 1.0]])
def test_unusable_weights_refused_in_one_line(weights):
    with pytest.raises(ThermoseedError) as info:
        from_states(np.eye(4)[:2], weights)
    assert "\n" not in str(info.value) and "weights" in str(info.value)


@pytest.mark.parametrize("shape, kind", [((0, 4), "states"), ((0, 4, 4), "density")])
def test_empty_batch_refused_naming_its_shape(shape, kind, tmp_path):
    with pytest.raises(ThermoseedError, match=r"shape \(0, 4.*B >= 1"):
        as_training_data(np.zeros(shape, complex), kind=kind)
    path = tmp_path / "empty.npz"
    np.savez(path, **{kind: np.zeros(shape, complex)})
    with pytest.raises(ThermoseedError, match=r"no members"):
        load_training_data(path)


# ---------------------------------------------------------------- memory


def test_available_memory_reads_meminfo_then_sysconf(monkeypatch, tmp_path):
    info = tmp_path / "meminfo"
    info.write_text("MemTotal:       32000000 kB\nMemAvailable:    1024 kB\n")
    monkeypatch.setattr(memory, "MEMINFO", info)
    assert memory.available_memory_bytes() == 1024 * 1024
    monkeypatch.setattr(memory, "MEMINFO", tmp_path / "missing")
    import os

    try:  # the reference: the operating system's own page counts
        expected = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        expected = None
    assert memory.available_memory_bytes() == expected


def test_byte_counts_in_binary_units():
    # 20 qubits: 16 bytes * 4^20 = 2^44 bytes = 16 TiB (by hand)
    assert memory.dense_matrix_bytes(20) == 2**44
    assert memory.format_bytes(2**44) == "16 TiB"
    assert memory.format_bytes(22.9 * GIB) == "22.9 GiB"
    assert memory.format_bytes(512) == "512 B"


def test_twenty_qubit_states_refused_before_the_dense_matrix(monkeypatch):
    _fake_memory(monkeypatch, 22 * GIB)
    state = np.zeros((1, 2**20), complex)
    state[0, 0] = 1.0
    with pytest.raises(ThermoseedError) as info:
        from_states(state)
    message = str(info.value)
    assert message.startswith("n = 20 qubits needs 16 TiB for the dense density matrix; "
                              "this machine has 22 GiB available")
    assert "simulate_shots" in message and "typicality" in message and "\n" not in message


def test_small_fake_memory_refuses_states_density_stack_and_spectrum(monkeypatch, helpers):
    one = memory.dense_matrix_bytes(6)  # 64 KiB
    rng = np.random.default_rng(3)
    rho = helpers.random_density(64, rng)
    _fake_memory(monkeypatch, one - 1)
    with pytest.raises(ThermoseedError, match="n = 6 qubits needs 64 KiB"):
        from_states(helpers.random_state(64, rng)[None])
    with pytest.raises(ThermoseedError, match="needs 128 KiB for the checked density"):
        from_density_matrices(rho)
    _fake_memory(monkeypatch, 2 * one)  # the data fit, their eigendecomposition does not
    with pytest.raises(ThermoseedError, match="needs 192 KiB for the data's eigendecomposition"):
        VisibleGibbsModel(graph_terms(6, "line")).fit(rho)
    _fake_memory(monkeypatch, None)  # unknown memory: nothing is refused
    assert from_density_matrices(rho).n_qubits == 6


def test_dense_engine_refused_when_a_step_does_not_fit(monkeypatch):
    terms = graph_terms(5, "line")
    _fake_memory(monkeypatch, 4 * memory.dense_matrix_bytes(5) - 1)
    with pytest.raises(ThermoseedError, match="dense-engine step.*engine='typicality'"):
        DenseEngine(terms)
    _fake_memory(monkeypatch, 4 * memory.dense_matrix_bytes(5))
    assert DenseEngine(terms).evaluate(np.zeros(len(terms))).log_z == pytest.approx(
        5 * np.log(2))  # Z = Tr I = 2^5 at theta = 0


# ---------------------------------------------------------------- slow dense notice


def test_eigh_cost_estimate_scales_with_the_cube_of_the_dimension(monkeypatch):
    ticks = iter(np.arange(0.0, 100.0, 0.5))  # every timed call takes 0.5 s
    monkeypatch.setattr(memory.time, "perf_counter", lambda: float(next(ticks)))
    # (2^13 / 256)^3 = 32^3 = 32768 timed calls' worth (by hand)
    assert memory.dense_eigh_seconds(13) == pytest.approx(0.5 * 32**3)


def _notices(monkeypatch, seconds: float, helpers) -> list:
    monkeypatch.setattr(memory, "TIMED_FROM_QUBITS", 2)
    monkeypatch.setattr(memory, "dense_eigh_seconds", lambda n: seconds)
    rho = helpers.random_density(4, np.random.default_rng(5))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        VisibleGibbsModel(graph_terms(2, "line")).fit(rho)
    return [w for w in caught if issubclass(w.category, SlowDenseWarning)]


def test_one_notice_before_a_slow_dense_fit(monkeypatch, helpers):
    notices = _notices(monkeypatch, 300.0, helpers)
    assert len(notices) == 1
    text = str(notices[0].message)
    assert "n = 2 qubits" in text and "about 300 s" in text and "dense-engine step" in text


def test_no_notice_when_the_dense_fit_is_quick(monkeypatch, helpers):
    assert _notices(monkeypatch, 1.0, helpers) == []


# ---------------------------------------------------------------- state vectors, no dense rho


def test_state_summary_matches_the_dense_mixture(helpers):
    rng = np.random.default_rng(17)
    states = np.stack([helpers.random_state(16, rng) for _ in range(3)])
    weights = np.array([1.0, 2.0, 3.0])
    terms = graph_terms(4, "ring", extra=("XYZY", "YYII"))
    summary = summarize_states(states, terms, weights)
    # reference: rho and P_j from hand-written Kronecker products, numpy's eigh
    rho = sum(w / 6 * np.outer(s, s.conj()) for w, s in zip(weights, states, strict=True))
    expected = [np.trace(rho @ helpers.kron_pauli(lab)).real for lab in terms.labels]
    np.testing.assert_allclose(summary.moments, expected, atol=1e-12)
    values, vectors = np.linalg.eigh(rho)
    np.testing.assert_allclose(summary.spectrum, values[-3:], atol=1e-12)
    top = vectors[:, -3:]
    np.testing.assert_allclose(summary.support @ summary.support.conj().T,
                               top @ top.conj().T, atol=1e-10)


def test_many_qubit_state_vectors_are_fitted_without_the_dense_rho(monkeypatch, tmp_path):
    import thermoseed.pretrain.models as models

    terms = graph_terms(3, "line", fields="Z", couplings=("ZZ",))
    psi = np.random.default_rng(4).standard_normal((2, 8)) + 0j
    psi /= np.linalg.norm(psi, axis=1)[:, None]
    dense = VisibleGibbsModel(terms, tol=1e-8).fit(psi)
    monkeypatch.setattr(models, "MATRIX_FREE_FROM_QUBITS", 3)

    def refuse(*args, **kwargs):
        raise AssertionError("the dense path was taken")

    monkeypatch.setattr(models, "as_training_data", refuse)
    free = VisibleGibbsModel(terms, tol=1e-8).fit(psi)
    np.testing.assert_allclose(free.coef_, dense.coef_, atol=1e-6)
    assert free.data_entropy_ == pytest.approx(dense.data_entropy_, abs=1e-12)
    np.savez(tmp_path / "states.npz", states=psi, weights=np.array([1e308, 1e308]))
    from_file = VisibleGibbsModel(terms, tol=1e-8).fit(tmp_path / "states.npz")
    np.testing.assert_allclose(from_file.coef_, dense.coef_, atol=1e-6)


def test_stored_states_reads_only_state_batches(tmp_path):
    np.savez(tmp_path / "s.npz", states=np.eye(4)[:2], weights=np.ones(2))
    np.savez(tmp_path / "d.npz", density=np.eye(4) / 4)
    (tmp_path / "bad.npz").write_bytes(b"not a zip")
    states, weights = stored_states(tmp_path / "s.npz")
    assert states.shape == (2, 4) and weights.tolist() == [1.0, 1.0]
    assert stored_states(tmp_path / "d.npz") is None
    assert stored_states(tmp_path / "bad.npz") is None


def test_notice_for_dense_steps_when_the_data_need_no_decomposition(monkeypatch, helpers):
    import thermoseed.pretrain.models as models

    monkeypatch.setattr(models, "MATRIX_FREE_FROM_QUBITS", 2)
    monkeypatch.setattr(memory, "TIMED_FROM_QUBITS", 2)
    monkeypatch.setattr(memory, "dense_eigh_seconds", lambda n: 300.0)
    psi = helpers.random_state(4, np.random.default_rng(6))[None]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        VisibleGibbsModel(graph_terms(2, "line"), engine="dense").fit(psi)
    texts = [str(w.message) for w in caught if issubclass(w.category, SlowDenseWarning)]
    assert len(texts) == 1 and "each dense-engine step" in texts[0]
    assert "data's eigendecomposition" not in texts[0]


def test_the_advice_names_the_qubit_count_the_fit_uses():
    from thermoseed.pretrain.models import MATRIX_FREE_FROM_QUBITS

    assert f"above {MATRIX_FREE_FROM_QUBITS - 1} qubits" in memory.LARGE_DATA_HINT
