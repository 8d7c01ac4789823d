"""Pauli strings, term sets from graphs, traces and Hamiltonians against PennyLane."""

import numpy as np
import pennylane as qml
import pytest

from thermoseed.pretrain import (
    PauliString,
    TermSet,
    ThermoseedError,
    dense_hamiltonian,
    from_pennylane,
    graph_edges,
    graph_terms,
    pauli_traces,
    sparse_hamiltonian,
    to_pennylane,
)
from thermoseed.pretrain.paulis import apply_hamiltonian


def pl_matrix(label: str) -> np.ndarray:
    """Reference matrix from PennyLane; letter k on wire k, wire 0 most significant."""
    n = len(label)
    word = qml.pauli.string_to_pauli_word(label, wire_map={k: k for k in range(n)})
    return qml.matrix(word, wire_order=list(range(n)))


def pl_hamiltonian(coeffs, labels):
    """A PennyLane Hamiltonian built with qml.dot, independent of to_pennylane."""
    n = len(labels[0])
    words = [qml.pauli.string_to_pauli_word(lab, wire_map={k: k for k in range(n)})
             for lab in labels]
    return qml.dot(list(map(float, coeffs)), words)


# ---------------------------------------------------------------- labels


def test_label_parsing_wire0_is_most_significant_bit():
    p = PauliString.from_label("XIZ")
    assert (p.x, p.z, p.n_qubits) == (0b100, 0b001, 3)
    y = PauliString.from_label("IY")
    assert (y.x, y.z, y.n_y, y.weight) == (1, 1, 1, 1)
    assert PauliString.from_label("xyzi").label == "XYZI"


@pytest.mark.parametrize("label", ["XIZY", "YYYY", "IIIZ", "ZIII", "XY"])
def test_pauli_matrix_matches_pennylane(label):
    # Source: PennyLane qml.matrix of the same Pauli word (wire 0 = MSB).
    np.testing.assert_allclose(PauliString.from_label(label).matrix(), pl_matrix(label),
                               atol=0)


@pytest.mark.parametrize("bad,letter", [("XQZ", "Q"), ("X1", "1"), ("AB", "A")])
def test_unknown_letter_is_named(bad, letter):
    with pytest.raises(ThermoseedError, match=repr(letter)):
        PauliString.from_label(bad)


def test_empty_label_refused():
    with pytest.raises(ThermoseedError, match="non-empty"):
        PauliString.from_label("")


def test_mixed_lengths_refused():
    with pytest.raises(ThermoseedError, match="same length"):
        TermSet(["XX", "XYZ"])


def test_identity_and_empty_term_sets_refused():
    with pytest.raises(ThermoseedError, match="identity"):
        TermSet(["XX", "II"])
    with pytest.raises(ThermoseedError, match="at least one"):
        TermSet([])


def test_term_set_dedupes_and_indexes():
    ts = TermSet(["XZ", "ZX", "xz", "YY"])
    assert ts.labels == ["XZ", "ZX", "YY"]
    assert ts.index("YY") == 2
    assert ts.is_real and ts.n_qubits == 2 and ts.dim == 4
    with pytest.raises(ThermoseedError, match="not in this term set"):
        ts.index("ZZ")


def test_is_real_follows_y_parity():
    assert TermSet(["YY", "XZ"]).is_real
    assert not TermSet(["YI", "XX"]).is_real


# ---------------------------------------------------------------- graphs


@pytest.mark.parametrize(
    "kind,n,kwargs,n_edges",
    [
        ("line", 5, {}, 4),
        ("ring", 5, {}, 5),
        ("ring", 3, {}, 3),
        ("ring", 2, {}, 1),  # a 2-ring has one edge, not (0,1) twice
        ("complete", 5, {}, 10),  # n(n-1)/2
        ("grid", 6, {"shape": (2, 3)}, 7),  # rows(cols-1) + (rows-1)cols
        ("grid", 9, {"shape": (3, 3)}, 12),
        ("edges", 4, {"edges": [(0, 2), (1, 3)]}, 2),
    ],
)
def test_graph_edge_counts(kind, n, kwargs, n_edges):
    edges = graph_edges(kind, n, **kwargs)
    assert len(edges) == n_edges
    assert len({frozenset(e) for e in edges}) == n_edges
    terms = graph_terms(n, kind, fields="XYZ", couplings=("XX", "YY", "ZZ"), **kwargs)
    assert len(terms) == 3 * n + 3 * n_edges


def test_graph_terms_stable_order():
    terms = graph_terms(3, "line", fields="ZX", couplings=("XY",))
    assert terms.labels == ["ZII", "IZI", "IIZ", "XII", "IXI", "IIX", "XYI", "IXY"]
    ring = graph_terms(3, "ring", fields="", couplings=("ZZ",))
    assert ring.labels == ["ZZI", "IZZ", "ZIZ"]


def test_graph_terms_dedupe_symmetric_pairs_only():
    sym = graph_terms(3, "edges", fields="", couplings=("ZZ",), edges=[(0, 1), (1, 0), (0, 1)])
    assert sym.labels == ["ZZI"]
    asym = graph_terms(3, "edges", fields="", couplings=("XZ",), edges=[(0, 1), (1, 0)])
    assert asym.labels == ["XZI", "ZXI"]
    extra = graph_terms(2, "line", fields="Z", couplings=("ZZ",), extra=["ZZ", "XY"])
    assert extra.labels == ["ZI", "IZ", "ZZ", "XY"]


@pytest.mark.parametrize(
    "call,match",
    [
        (lambda: graph_edges("star", 3), "unknown graph"),
        (lambda: graph_edges("grid", 6, shape=(2, 2)), "rows\\*cols"),
        (lambda: graph_edges("edges", 3), "edges="),
        (lambda: graph_edges("edges", 3, edges=[(0, 3)]), "invalid"),
        (lambda: graph_edges("edges", 3, edges=[(1, 1)]), "invalid"),
        (lambda: graph_edges("line", 0), ">= 1"),
        (lambda: graph_terms(3, couplings=("ZZZ",)), "two Pauli letters"),
    ],
)
def test_graph_errors(call, match):
    with pytest.raises(ThermoseedError, match=match):
        call()


# ---------------------------------------------------------------- traces


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_pauli_traces_match_pennylane(n, helpers):
    rng = np.random.default_rng(100 + n)
    labels = helpers.random_labels(n, min(4**n - 1, 12), rng)
    if n >= 2:  # make sure odd-Y strings are present
        labels = list(dict.fromkeys(labels + ["Y" + "I" * (n - 1), "Y" * n, "X" + "Y" * (n - 1)]))
    terms = TermSet(labels)
    a = rng.standard_normal((2**n, 2**n)) + 1j * rng.standard_normal((2**n, 2**n))
    got = pauli_traces(a, terms)
    # Source: PennyLane qml.matrix of each Pauli word; Tr(A P) by plain numpy.
    want = np.array([np.trace(a @ pl_matrix(lab)) for lab in labels])
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-12)


def test_design_trace_formula_sign_for_odd_y():
    """The transposed gather ``sum_b A[b^x, b] ...`` is (-1)^{n_y} Tr(A P); the code's
    A[b, b^x] is right."""
    rng = np.random.default_rng(7)
    n = 2
    a = rng.standard_normal((4, 4)) + 1j * rng.standard_normal((4, 4))
    b = np.arange(4)
    for label in ["YI", "XY", "YY", "ZX"]:
        p = PauliString.from_label(label)
        signs = (-1.0) ** np.array([bin(v & p.z).count("1") for v in b])
        phase = 1j ** p.n_y
        design = phase * np.sum(a[b ^ p.x, b] * signs)
        # Source: PennyLane qml.matrix of the Pauli word.
        want = np.trace(a @ pl_matrix(label))
        np.testing.assert_allclose(design, (-1) ** p.n_y * want, atol=1e-12)
        np.testing.assert_allclose(pauli_traces(a, TermSet([label], n)), [want], atol=1e-12)


def test_pauli_traces_shape_error():
    with pytest.raises(ThermoseedError, match="expected"):
        pauli_traces(np.eye(4), TermSet(["XXX"]))


# ---------------------------------------------------------------- Hamiltonians


@pytest.mark.parametrize("n,odd_y", [(1, True), (2, True), (3, False), (3, True), (4, True)])
def test_dense_and_sparse_hamiltonian_match_pennylane(n, odd_y, helpers):
    rng = np.random.default_rng(200 + 10 * n + odd_y)
    labels = helpers.random_labels(n, min(4**n - 1, 10), rng, odd_y=odd_y)
    terms = TermSet(labels)
    coeffs = rng.standard_normal(len(terms))
    wires = list(range(n))
    # Source: PennyLane operator built independently with qml.dot over Pauli words.
    ref = qml.matrix(pl_hamiltonian(coeffs, labels), wire_order=wires)
    # Source: PennyLane qml.matrix of our to_pennylane conversion.
    via_ours = qml.matrix(to_pennylane(coeffs, terms), wire_order=wires)
    dense = dense_hamiltonian(coeffs, terms)
    sparse = sparse_hamiltonian(coeffs, terms).toarray()
    np.testing.assert_allclose(dense, ref, atol=1e-12)
    np.testing.assert_allclose(via_ours, ref, atol=1e-12)
    np.testing.assert_allclose(sparse, ref, atol=1e-12)
    if terms.is_real:
        assert not np.iscomplexobj(dense)


def test_to_pennylane_custom_wires():
    terms = TermSet(["XZ", "YY"])
    op = to_pennylane([0.5, -1.5], terms, wires=["a", "b"])
    # Source: PennyLane qml.matrix with explicit Kronecker ordering a (MSB), b.
    want = 0.5 * pl_matrix("XZ") - 1.5 * pl_matrix("YY")
    np.testing.assert_allclose(qml.matrix(op, wire_order=["a", "b"]), want, atol=1e-12)
    with pytest.raises(ThermoseedError, match="wires"):
        to_pennylane([0.5, -1.5], terms, wires=[0])


def test_coefficient_checks():
    terms = TermSet(["XZ", "YY"])
    with pytest.raises(ThermoseedError, match="2 terms"):
        dense_hamiltonian([1.0], terms)
    with pytest.raises(ThermoseedError, match="not finite"):
        dense_hamiltonian([1.0, np.nan], terms)
    with pytest.raises(ThermoseedError, match="real"):
        dense_hamiltonian([1.0, 1j], terms)


@pytest.mark.parametrize("odd_y", [True, False])
def test_apply_hamiltonian_matches_dense(odd_y, helpers):
    rng = np.random.default_rng(300 + odd_y)
    n = 4
    terms = TermSet(helpers.random_labels(n, 15, rng, odd_y=odd_y))
    coeffs = rng.standard_normal(len(terms))
    h = dense_hamiltonian(coeffs, terms)
    v = rng.standard_normal(16) + 1j * rng.standard_normal(16)
    block = rng.standard_normal((16, 3))
    np.testing.assert_allclose(apply_hamiltonian(coeffs, terms, v), h @ v, atol=1e-12)
    np.testing.assert_allclose(apply_hamiltonian(coeffs, terms, block), h @ block, atol=1e-12)
    with pytest.raises(ThermoseedError, match="dimension"):
        apply_hamiltonian(coeffs, terms, np.ones(8))


# ---------------------------------------------------------------- from PennyLane


def test_from_pennylane_transverse_ising_round_trip():
    n, j, h = 4, 0.7, 0.3
    op = qml.spin.transverse_ising("chain", [n], coupling=j, h=h)
    exp = from_pennylane(op)
    assert exp.terms.n_qubits == n and exp.offset == 0.0
    # Source: the documented TFIM form -J sum Z_i Z_{i+1} - h sum X_i (qml.spin docstring).
    for i in range(n - 1):
        lab = "I" * i + "ZZ" + "I" * (n - i - 2)
        assert exp.coeffs[exp.terms.index(lab)] == pytest.approx(-j)
    for i in range(n):
        assert exp.coeffs[exp.terms.index("I" * i + "X" + "I" * (n - i - 1))] == pytest.approx(-h)
    assert len(exp.terms) == 2 * n - 1
    # Source: PennyLane qml.matrix of the original operator.
    want = qml.matrix(op, wire_order=list(range(n)))
    np.testing.assert_allclose(dense_hamiltonian(exp.coeffs, exp.terms), want, atol=1e-12)
    back = qml.matrix(to_pennylane(exp.coeffs, exp.terms), wire_order=list(range(n)))
    np.testing.assert_allclose(back, want, atol=1e-12)


def test_from_pennylane_identity_offset_and_wire_labels():
    op = (
        0.25 * qml.Identity("a")
        + 1.2 * qml.PauliX("a") @ qml.PauliY("c")
        - 0.3 * qml.PauliZ("b")
        + 0.5 * qml.PauliZ("b")
        + 0.75 * qml.Identity("c")
    )
    wires = ["a", "b", "c"]
    exp = from_pennylane(op, wires=wires)
    assert exp.offset == pytest.approx(1.0)
    assert sorted(exp.terms.labels) == ["IZI", "XIY"]
    assert exp.coeffs[exp.terms.index("IZI")] == pytest.approx(0.2)
    # Source: PennyLane qml.matrix of the operator on wire order a, b, c.
    want = qml.matrix(op, wire_order=wires)
    got = dense_hamiltonian(exp.coeffs, exp.terms) + exp.offset * np.eye(8)
    np.testing.assert_allclose(got, want, atol=1e-12)


def test_from_pennylane_errors():
    with pytest.raises(ThermoseedError, match="not in"):
        from_pennylane(qml.PauliX(0) @ qml.PauliZ(2), wires=[0, 1])
    with pytest.raises(ThermoseedError, match="complex coefficient"):
        from_pennylane(1j * qml.PauliX(0))
    with pytest.raises(ThermoseedError, match="Pauli"):
        from_pennylane(qml.Hadamard(0) @ qml.RX(0.3, wires=1))
