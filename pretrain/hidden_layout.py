"""Term sets on a visible + hidden register and their structure.

The register has ``n_visible + n_hidden`` wires; the hidden wires are the LAST ``n_hidden``
(wire 0 is still the most significant bit), so a basis index is ``b = v * 2^n_hidden + h`` and
every operator is ``sum (visible part) (x) (hidden part)`` in that Kronecker order.

A term is *diagonal on the hidden wires* when its hidden letters are only I and Z (x-mask zero
there). When every term is, ``H = sum_h H_v(h) (x) |h><h|`` with
``H_v(h) = sum_j theta_j s_j(h) P_j^v``, ``s_j(h) = (-1)^{|z_j^h & h|}``: the commuting-hidden
(block) model. Terms whose visible part is the identity give the classical hidden energy
``E(h) = sum_{j: P_j^v = I} theta_j s_j(h)`` (biases, hidden-hidden ZZ and higher).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np

from .checks import integer_in
from .errors import ThermoseedError
from .paulis import LETTERS, PauliString, TermSet, _label_with, graph_edges, popcount

#: Roles reported by ``term_roles``.
ROLES = ("visible", "hidden", "coupling")


def split_register(terms: TermSet, n_hidden) -> tuple[int, int]:
    """``(n_visible, n_hidden)`` after checking ``0 <= n_hidden < terms.n_qubits``."""
    if not isinstance(terms, TermSet):
        raise ThermoseedError(f"expected a TermSet, got {type(terms).__name__}")
    k = integer_in(n_hidden, "n_hidden", 0, terms.n_qubits - 1)
    return terms.n_qubits - k, k


def _hidden_mask(n_hidden: int) -> int:
    return (1 << n_hidden) - 1


def term_roles(terms: TermSet, n_hidden: int) -> list[str]:
    """``"visible"`` (acts on visible wires only), ``"hidden"`` (hidden only) or
    ``"coupling"`` (both) for every term."""
    _, k = split_register(terms, n_hidden)
    mask = _hidden_mask(k)
    roles = []
    for p in terms:
        support = p.x | p.z
        on_hidden, on_visible = bool(support & mask), bool(support >> k)
        roles.append("coupling" if on_hidden and on_visible else
                     "hidden" if on_hidden else "visible")
    return roles


def non_diagonal_hidden_terms(terms: TermSet, n_hidden: int) -> list[str]:
    """Labels of the terms with an X or Y letter on a hidden wire (empty for a block model)."""
    _, k = split_register(terms, n_hidden)
    mask = _hidden_mask(k)
    return [p.label for p in terms if p.x & mask]


def visible_only_terms(terms: TermSet, n_hidden: int) -> tuple[np.ndarray, TermSet | None]:
    """Indices of the terms acting on visible wires only and their visible parts as a
    ``TermSet`` on the visible register (None when there are none): ``P_j = P_j^v (x) I``, so
    ``<P_j>`` on the full register equals ``Tr(rho_v P_j^v)`` on the visible one."""
    n_v, k = split_register(terms, n_hidden)
    mask = _hidden_mask(k)
    index = [j for j, p in enumerate(terms) if not (p.x | p.z) & mask]
    parts = [PauliString(terms[j].x >> k, terms[j].z >> k, n_v) for j in index]
    return np.array(index, dtype=np.int64), (TermSet(parts, n_qubits=n_v) if parts else None)


class BlockStructure(NamedTuple):
    """A commuting-hidden term set split into visible parts and hidden sign patterns.

    Attributes:
        visible: ``TermSet`` of the distinct non-identity visible parts (None when every term
            acts on the hidden wires only).
        visible_index: for each term, the index of its visible part in ``visible`` or -1
            when the visible part is the identity (a hidden-energy term).
        signs: ``(n_terms, 2^n_hidden)`` table ``s_j(h) = (-1)^{|z_j^h & h|}``.
    """

    visible: TermSet | None
    visible_index: np.ndarray
    signs: np.ndarray


def block_structure(terms: TermSet, n_hidden: int) -> BlockStructure:
    """Split every term into ``P_j^v (x) Z^{z_j^h}``; ThermoseedError when some term is not
    diagonal on the hidden wires."""
    n_v, k = split_register(terms, n_hidden)
    bad = non_diagonal_hidden_terms(terms, k)
    if bad:
        shown = ", ".join(bad[:5]) + (", ..." if len(bad) > 5 else "")
        raise ThermoseedError(
            f"the block engine needs every term diagonal (I or Z) on the {k} hidden wires, but "
            f"{len(bad)} terms have X or Y there ({shown}); drop them or use engine='dense'"
        )
    mask = _hidden_mask(k)
    parts: dict[tuple[int, int], int] = {}
    index = np.full(len(terms), -1, dtype=np.int64)
    strings = []
    for j, p in enumerate(terms):
        xv, zv = p.x >> k, p.z >> k
        if xv == 0 and zv == 0:
            continue
        if (xv, zv) not in parts:
            parts[(xv, zv)] = len(strings)
            strings.append(PauliString(xv, zv, n_v))
        index[j] = parts[(xv, zv)]
    hidden_z = np.array([p.z & mask for p in terms], dtype=np.int64)
    states = np.arange(2**k, dtype=np.int64)
    signs = 1.0 - 2.0 * (popcount(hidden_z[:, None] & states[None, :]) & 1)
    visible = TermSet(strings, n_qubits=n_v) if strings else None
    return BlockStructure(visible, index, signs)


def _letters(value: str, what: str) -> str:
    if not isinstance(value, str) or any(ch not in LETTERS[1:] for ch in value.upper()):
        raise ThermoseedError(f"{what} = {value!r} must be a string of the letters X, Y, Z")
    return value.upper()


def _pairs(value: Sequence[str], what: str) -> list[str]:
    if isinstance(value, str):
        value = (value,)
    out = []
    for pair in value:
        if not isinstance(pair, str) or len(pair) != 2 or \
                any(ch not in LETTERS[1:] for ch in pair.upper()):
            raise ThermoseedError(f"{what} entry {pair!r} must be two Pauli letters, e.g. 'ZZ'")
        out.append(pair.upper())
    return out


def hidden_terms(
    n_visible: int,
    n_hidden: int,
    *,
    graph: str = "line",
    shape: tuple[int, int] | None = None,
    edges=None,
    visible_fields: str = "XZ",
    visible_couplings: Sequence[str] = ("ZZ",),
    couplings: Sequence[str] = ("ZZ",),
    coupling_edges=None,
    hidden_fields: str = "Z",
    hidden_couplings: Sequence[str] = (),
    hidden_graph: str = "complete",
) -> TermSet:
    """Term set on ``n_visible + n_hidden`` wires (hidden = the last ``n_hidden``).

    - ``visible_fields`` letters on every visible wire and ``visible_couplings`` letter pairs
      on every edge of the visible ``graph`` (``paulis.graph_edges`` kinds, with ``shape`` /
      ``edges``);
    - ``couplings``: pairs ``"AB"`` (A on a visible wire, B on a hidden one) on every
      visible-hidden pair, or only on ``coupling_edges = [(visible i, hidden k), ...]``;
    - ``hidden_fields`` on every hidden wire and ``hidden_couplings`` on the edges of
      ``hidden_graph`` among the hidden wires.

    With B and the hidden letters in {Z} the result is a commuting-hidden (block) model.
    """
    n_v = integer_in(n_visible, "n_visible", 1)
    k = integer_in(n_hidden, "n_hidden", 0)
    n = n_v + k
    labels = [_label_with({q: ch}, n) for ch in _letters(visible_fields, "visible_fields")
              for q in range(n_v)]
    if n_v > 1:
        vis_edges = graph_edges(graph, n_v, shape=shape, edges=edges)
        labels += [_label_with({i: a, j: b}, n) for a, b in _pairs(visible_couplings,
                   "visible_couplings") for i, j in vis_edges]
    if k:
        if coupling_edges is None:
            pairs = [(i, q) for i in range(n_v) for q in range(k)]
        else:
            pairs = [(int(i), int(q)) for i, q in coupling_edges]
            for i, q in pairs:
                if not (0 <= i < n_v and 0 <= q < k):
                    raise ThermoseedError(
                        f"coupling edge {(i, q)} needs 0 <= visible < {n_v} and "
                        f"0 <= hidden < {k}"
                    )
        labels += [_label_with({i: a, n_v + q: b}, n) for a, b in _pairs(couplings, "couplings")
                   for i, q in pairs]
        labels += [_label_with({n_v + q: ch}, n) for ch in _letters(hidden_fields, "hidden_fields")
                   for q in range(k)]
        if k > 1:
            hid_edges = graph_edges(hidden_graph, k)
            labels += [_label_with({n_v + i: a, n_v + j: b}, n) for a, b in _pairs(
                hidden_couplings, "hidden_couplings") for i, j in hid_edges]
    return TermSet(labels, n_qubits=n)
