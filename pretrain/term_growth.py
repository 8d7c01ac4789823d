"""Grow a shared term set for ``GibbsClassifier`` from candidate Pauli strings.

Candidates (``candidate_terms``): every Pauli string of weight <= w whose support is a
connected vertex set of a graph (``graph_edges``), then global parity strings: ``Z...Z``,
``X...X`` and the other n-body strings over X and Y with an even number of Y (real, like
``X...X``; ``XX``, ``YY`` on two qubits). At most ``max_count`` strings are kept, in that
order (lowest weight first, parity strings last), so a cap cuts the parity block first.

Score (Fisher's discriminant ratio; Fisher, "The use of multiple measurements in taxonomic
problems", 1936), per candidate j on the per-state moments ``m_ij = Tr(rho_i P_j)`` of the
training split, with class means ``mbar_cj`` and overall mean ``mbar_j``:
``F_j = sum_c n_c (mbar_cj - mbar_j)^2 / (sum_c sum_{i in c} (m_ij - mbar_cj)^2 + N eps)``,
between-class over within-class variance (``eps = SPREAD_FLOOR``). For two classes of equal
size ``F_j = (|mbar_1j - mbar_0j| / (2 s_j))^2`` with ``s_j^2`` the pooled within-class
variance.

Growth: candidates are added in descending score (ties keep candidate order). After each
addition a ``GibbsClassifier`` on the current prefix is fitted on the training split and
scored on the held-out split (``labelled.stratified_split``, seeded). Growth stops after
``patience`` consecutive additions without an accuracy gain above ``min_gain`` (or at
``max_terms``); the shortest prefix reaching the best held-out accuracy is returned.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from .checks import integer_in, real_number
from .classifier import GibbsClassifier
from .data import check_qubits
from .errors import ThermoseedError
from .labelled import as_state_batch, batch_moments, check_labels, stratified_split
from .paulis import TermSet, graph_edges, parity_labels

#: Default cap on the number of candidate strings.
MAX_CANDIDATES = 2048
#: Added to the within-class sum of squares (per state) so constant moments score finitely.
SPREAD_FLOOR = 1e-12


@dataclass(frozen=True)
class TermGrowth:
    """Result of ``grow_terms``.

    Attributes:
        terms: the chosen ``TermSet`` (a prefix of the candidates in score order).
        scores: Fisher ratio ``F_j`` of each chosen term, in order.
        accuracy: held-out accuracy after each addition tried (the path).
    """

    terms: TermSet
    scores: np.ndarray
    accuracy: np.ndarray


def _connected_sets(n: int, max_size: int, edges: list[tuple[int, int]]) -> Iterator[tuple]:
    neighbours: dict[int, set[int]] = {q: set() for q in range(n)}
    for i, j in edges:
        neighbours[i].add(j)
        neighbours[j].add(i)
    level = {frozenset([q]) for q in range(n)}
    for _ in range(max_size):
        yield from sorted(tuple(sorted(s)) for s in level)
        level = {s | {nb} for s in level for q in s for nb in neighbours[q] if nb not in s}


def _labels(n: int, max_weight: int, edges, parity: bool) -> Iterator[str]:
    for support in _connected_sets(n, max_weight, edges):
        for letters in itertools.product("XYZ", repeat=len(support)):
            chars = ["I"] * n
            for q, letter in zip(support, letters, strict=True):
                chars[q] = letter
            yield "".join(chars)
    if parity:
        yield from parity_labels(n)


def candidate_terms(n_qubits: int, max_weight: int = 2, graph: str = "line", *,
                    parity: bool = True, shape: tuple[int, int] | None = None, edges=None,
                    max_count: int = MAX_CANDIDATES) -> TermSet:
    """Pauli strings of weight <= ``max_weight`` on connected sets of ``graph`` plus (with
    ``parity``) the global parity strings, at most ``max_count`` (module docstring)."""
    n = integer_in(n_qubits, "n_qubits", 1)
    weight = integer_in(max_weight, "max_weight", 1)
    cap = integer_in(max_count, "max_count", 1)
    graph_list = graph_edges(graph, n, shape=shape, edges=edges)
    chosen: list[str] = []
    seen: set[str] = set()
    for label in _labels(n, min(weight, n), graph_list, parity):
        if label not in seen:
            seen.add(label)
            chosen.append(label)
            if len(chosen) == cap:
                break
    return TermSet(chosen, n_qubits=n)


def fisher_scores(moments: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Per-column ``F_j`` (module docstring) of a (B, K) moment matrix."""
    overall = moments.mean(axis=0)
    between = np.zeros(moments.shape[1])
    within = np.zeros(moments.shape[1])
    for c in np.unique(labels):
        block = moments[labels == c]
        mean = block.mean(axis=0)
        between += len(block) * (mean - overall) ** 2
        within += ((block - mean) ** 2).sum(axis=0)
    return between / (within + len(moments) * SPREAD_FLOOR)


def grow_terms(states, labels, candidates, *, max_terms: int = 16, test_fraction: float = 0.3,
               seed: int = 0, patience: int = 2, min_gain: float = 0.0,
               classifier: dict | None = None) -> TermGrowth:
    """Greedy term-set growth in Fisher-score order, stopped on held-out accuracy.

    ``states``/``labels`` as for ``GibbsClassifier.fit``; ``candidates`` a ``TermSet`` or
    labels; ``classifier`` holds ``GibbsClassifier`` hyperparameters (all but ``terms``).
    Stops after ``patience`` additions without a gain above ``min_gain``.
    """
    pool = candidates if isinstance(candidates, TermSet) else TermSet(candidates)
    params = dict(classifier or {})
    GibbsClassifier(pool).set_params(**params)  # unknown names fail here, before any fit
    if "terms" in params:
        raise ThermoseedError("classifier= must not hold 'terms'; grow_terms chooses them")
    max_terms = integer_in(max_terms, "max_terms", 1)
    patience = integer_in(patience, "patience", 1)
    min_gain = real_number(min_gain, "min_gain")
    batch = as_state_batch(states, renormalize=bool(params.get("renormalize", False)))
    check_qubits(batch.n_qubits, pool)
    y, _ = check_labels(labels, batch.count)
    train, test = stratified_split(y, test_fraction, seed)
    scores = fisher_scores(batch_moments(batch.subset(train), pool), y[train])
    order = np.argsort(-scores, kind="stable")[:max_terms]
    path: list[float] = []
    best, best_k, stale = -np.inf, 0, 0
    for k in range(1, len(order) + 1):
        terms = TermSet([pool[j] for j in order[:k]], n_qubits=pool.n_qubits)
        clf = GibbsClassifier(terms, **params).fit(batch.data[train], y[train])
        path.append(clf.score(batch.data[test], y[test]))
        if path[-1] > best + min_gain:
            best, best_k, stale = path[-1], k, 0
        else:
            stale += 1
            if stale >= patience:
                break
    chosen = order[:best_k]
    return TermGrowth(TermSet([pool[j] for j in chosen], n_qubits=pool.n_qubits),
                      scores[chosen], np.array(path))
