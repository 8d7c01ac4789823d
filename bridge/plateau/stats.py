"""Statistics of plateau probes: gradient variances, decay-rate fits, training-curve summaries,
and the remaining time of a sweep from the measured cost of its finished jobs.

For one group (strategy, cost, template) and one qubit count n, with gradients ``g_rk`` over
seeds r = 1..R and active parameters k = 1..K:

    ``Var_k = sum_r (g_rk - mean_r g_rk)^2 / (R - 1)``     (unbiased, over seeds)
    ``mean_var = mean_k Var_k``, ``max_var = max_k Var_k``, ``mean_sq_norm = mean_r sum_k g_rk^2``

Decay rate: least-squares slope ``b`` of ``log2 S(n) = a + b n`` for a statistic S; ``b`` is in
log2 units per qubit (``b = -1`` halves S per added qubit). Interval: seeded percentile
bootstrap, resampling the seeds with replacement independently at every n. Written here
rather than with ``scipy.stats.bootstrap`` because a resample that repeats one seed has zero
variance (log2 = -inf); such resamples are dropped and counted, where scipy would carry the
non-finite slopes into the percentiles.

Remaining time: every pending job costs the mean seconds of the finished jobs of its group at
its size n; a size with none finished yet is extrapolated from the largest finished size m < n
of the group, ``mean(m) g^(n - m)`` with the growth per qubit ``g`` observed between the two
largest finished sizes below n (of the group, else of all finished jobs; ``g >= 1``, else 1);
with nothing smaller finished, the overall mean. The summed cost becomes wall time at the
measured rate (wall seconds per second of job time: overheads, load and the real
parallelism included) when given, else divided by the ``parallel`` workers; never less than
the dearest single pending job.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Hashable, Iterable, Mapping, Sequence
from typing import NamedTuple

import numpy as np

from thermoseed.bridge.plateau.probes import ProbeResult, TrainCurve
from thermoseed.pretrain.errors import ThermoseedError

STATISTICS = ("mean_var", "max_var", "mean_sq_norm")
#: Rows of seeds bootstrapped per vectorised chunk (bounds memory at chunk * R * K floats).
_BOOT_CHUNK = 64
#: Floor of a mean job time in the growth ratio (seconds; a zero mean would divide by 0).
_MIN_SECONDS = 1e-9


class GradientStats(NamedTuple):
    """Variance statistics of one (strategy, cost, template, n, depth) group."""

    strategy: str
    cost: str
    template: str
    n_qubits: int
    depth: int
    n_seeds: int
    n_active: int
    mean_var: float
    max_var: float
    mean_sq_norm: float


def gradient_matrix(results: Sequence[ProbeResult]) -> np.ndarray:
    """(R, K) gradients of the active parameters (all results must share the circuit)."""
    if not results:
        raise ThermoseedError("no probe results given")
    active = np.asarray(results[0].active, dtype=bool)
    for r in results:
        if np.shape(r.grad) != active.shape or not np.array_equal(r.active, active):
            raise ThermoseedError(
                "probe results mix circuits (different parameter layouts); group them by "
                "strategy, cost, template, n and depth first"
            )
    return np.array([np.asarray(r.grad, dtype=float)[active] for r in results])


def _statistic(g: np.ndarray, statistic: str) -> np.ndarray:
    """S over the seed axis -2 of g (..., R, K) -> (...)."""
    if statistic == "mean_sq_norm":
        return np.mean(np.sum(g**2, axis=-1), axis=-1)
    var = np.var(g, axis=-2, ddof=1)
    return var.mean(axis=-1) if statistic == "mean_var" else var.max(axis=-1)


def gradient_stats(results: Sequence[ProbeResult]) -> GradientStats:
    """``GradientStats`` of one group (at least two seeds)."""
    g = gradient_matrix(results)
    if g.shape[0] < 2:
        raise ThermoseedError(f"need at least 2 seeds for a variance, got {g.shape[0]}")
    first = results[0]
    return GradientStats(first.strategy, first.cost, first.template, first.n_qubits,
                         first.depth, g.shape[0], g.shape[1],
                         float(_statistic(g, "mean_var")), float(_statistic(g, "max_var")),
                         float(_statistic(g, "mean_sq_norm")))


class DecayFit(NamedTuple):
    """Fit ``log2 S(n) = intercept + slope * n`` with a bootstrap interval for the slope."""

    statistic: str
    n_values: tuple
    log2_values: tuple
    slope: float
    intercept: float
    low: float
    high: float
    level: float
    boot_slopes: np.ndarray

    def excludes_zero(self) -> bool:
        return self.high < 0 or self.low > 0


def _slopes(ns: np.ndarray, log_s: np.ndarray) -> np.ndarray:
    """Least-squares slopes of rows of ``log_s`` (B, N) against ``ns`` (N,)."""
    x = ns - ns.mean()
    return (log_s - log_s.mean(axis=-1, keepdims=True)) @ x / (x @ x)


def fit_decay(grads_by_n: Mapping[int, np.ndarray], *, statistic: str = "mean_var",
              n_boot: int = 1000, level: float = 0.95, seed: int = 0) -> DecayFit:
    """Decay rate of ``log2 S`` against n from (R_n, K_n) gradient matrices per n."""
    if statistic not in STATISTICS:
        raise ThermoseedError(f"unknown statistic {statistic!r}; choose one of {STATISTICS}")
    if len(grads_by_n) < 2:
        raise ThermoseedError(f"need at least two qubit counts for a slope, got {len(grads_by_n)}")
    if not 0 < level < 1 or int(n_boot) < 10:
        raise ThermoseedError(f"need 0 < level < 1 and n_boot >= 10, got {level}, {n_boot}")
    ns = np.array(sorted(grads_by_n), dtype=float)
    mats = [np.asarray(grads_by_n[int(n)], dtype=float) for n in ns]
    for n, g in zip(ns, mats, strict=True):
        if g.ndim != 2:
            raise ThermoseedError(f"n = {int(n)}: need an (R, K) gradient matrix, "
                                  f"got shape {g.shape}")
        if g.shape[0] < 2:
            raise TooFewSeedsError(f"n = {int(n)} has {g.shape[0]} seed; a variance needs "
                                   "at least 2 (probe more seeds)")
    point = np.log2([_statistic(g, statistic) for g in mats])
    rng = np.random.default_rng(seed)
    boot = np.empty((int(n_boot), len(ns)))
    for j, g in enumerate(mats):
        for start in range(0, int(n_boot), _BOOT_CHUNK):
            rows = rng.integers(0, g.shape[0], size=(min(_BOOT_CHUNK, n_boot - start),
                                                     g.shape[0]))
            boot[start:start + len(rows), j] = _statistic(g[rows], statistic)
    with np.errstate(divide="ignore", invalid="ignore"):
        slopes = _slopes(ns, np.log2(boot))
    # A resample that repeats one seed R times has zero variance (log2 = -inf): dropped.
    slopes = slopes[np.isfinite(slopes)]
    slope = float(_slopes(ns, point[None, :])[0])
    intercept = float(point.mean() - slope * ns.mean())
    if slopes.size < 0.9 * int(n_boot):
        raise TooFewSeedsError(
            f"only {slopes.size} of {n_boot} bootstrap resamples have a non-zero {statistic} "
            "at every n; probe more seeds"
        )
    low, high = np.quantile(slopes, [(1 - level) / 2, (1 + level) / 2])
    return DecayFit(statistic, tuple(int(n) for n in ns), tuple(float(v) for v in point),
                    slope, intercept, float(low), float(high), float(level), slopes)


class TooFewSeedsError(ThermoseedError):
    """The bootstrap cannot estimate a decay rate from this few seeds per size."""


class GroupKey(NamedTuple):
    strategy: str
    cost: str
    template: str


def group_probes(results: Iterable[ProbeResult]) -> dict[GroupKey, dict[int, list]]:
    """Results by (strategy, cost, template), then by n (each n must have one depth)."""
    out: dict[GroupKey, dict[int, list]] = defaultdict(lambda: defaultdict(list))
    for r in results:
        out[GroupKey(r.strategy, r.cost, r.template)][r.n_qubits].append(r)
    for key, by_n in out.items():
        for n, rs in by_n.items():
            depths = {r.depth for r in rs}
            if len(depths) > 1:
                raise ThermoseedError(f"{key} at n = {n} mixes depths {sorted(depths)}; "
                                      "fit one depth rule at a time")
    return {k: dict(v) for k, v in out.items()}


def decay_rates(results: Iterable[ProbeResult], *, statistic: str = "mean_var",
                n_boot: int = 1000, level: float = 0.95, seed: int = 0,
                unestimated: dict | None = None) -> dict[GroupKey, DecayFit]:
    """``fit_decay`` for every group with at least two qubit counts. A group with too few
    seeds for the bootstrap raises ``TooFewSeedsError``, or, when ``unestimated`` is a
    dict, is left out and its reason stored there under its key."""
    fits = {}
    for key, by_n in sorted(group_probes(results).items()):
        if len(by_n) >= 2:
            mats = {n: gradient_matrix(rs) for n, rs in by_n.items()}
            try:
                fits[key] = fit_decay(mats, statistic=statistic, n_boot=n_boot, level=level,
                                      seed=seed)
            except TooFewSeedsError as err:
                if unestimated is None:
                    raise
                unestimated[key] = str(err)
    return fits


# ---------------------------------------------------------------------------- curves


class CurveSummary(NamedTuple):
    """Quartiles over seeds per step and steps to reach the target accuracy.

    ``loss_q`` and ``accuracy_q`` have shape (3, T + 1): 25th, 50th and 75th percentiles.
    ``steps_to_target`` is the median over seeds of the first step with held-out accuracy
    ``>= target`` (None if fewer than half the seeds reach it); ``reached`` counts them.
    Held-out accuracy medians over seeds: ``start_accuracy`` at step 0, ``best_accuracy``
    the best along each curve, ``last_accuracy`` after the last step.
    """

    strategy: str
    n_qubits: int
    n_seeds: int
    loss_q: np.ndarray
    accuracy_q: np.ndarray
    target: float
    steps_to_target: float | None
    reached: int
    start_accuracy: float
    best_accuracy: float
    last_accuracy: float


def first_step(values: np.ndarray, target: float) -> float:
    """First index with ``values >= target`` (inf if none)."""
    hits = np.flatnonzero(np.asarray(values) >= target)
    return float(hits[0]) if hits.size else float("inf")


def summarize_curves(curves: Sequence[TrainCurve], *, target: float = 0.9) -> CurveSummary:
    """``CurveSummary`` of one (strategy, n) group of training curves."""
    if not curves:
        raise ThermoseedError("no training curves given")
    lengths = {len(c.loss) for c in curves}
    if len(lengths) != 1 or len({(c.strategy, c.n_qubits) for c in curves}) != 1:
        raise ThermoseedError("curves mix strategies, sizes or step counts; group them first")
    loss = np.array([c.loss for c in curves])
    acc = np.array([c.accuracy for c in curves])
    q = (25, 50, 75)
    steps = np.array([first_step(a, target) for a in acc])
    med = float(np.median(steps))
    return CurveSummary(curves[0].strategy, curves[0].n_qubits, len(curves),
                        np.percentile(loss, q, axis=0), np.percentile(acc, q, axis=0),
                        float(target), med if np.isfinite(med) else None,
                        int(np.isfinite(steps).sum()), float(np.median(acc[:, 0])),
                        float(np.median(acc.max(axis=1))), float(np.median(acc[:, -1])))


# ---------------------------------------------------------------------------- sweep time


def _growth(means: Mapping[int, float], below: int) -> float | None:
    """Growth per qubit ``(S(m1) / S(m0))^(1 / (m1 - m0))`` between the two largest sizes
    ``m0 < m1 < below`` of ``means`` (at least 1), or None with fewer than two sizes."""
    sizes = sorted(m for m in means if m < below)
    if len(sizes) < 2:
        return None
    m0, m1 = sizes[-2], sizes[-1]
    ratio = means[m1] / max(means[m0], _MIN_SECONDS)
    return max(1.0, ratio ** (1.0 / (m1 - m0)))


def _summary(finished: Mapping[tuple[Hashable, int], Sequence[float]]
             ) -> dict[tuple[Hashable, int], tuple[float, int]]:
    """(mean seconds, count) per (group, n) with at least one finished job."""
    return {key: (float(np.mean(v)), len(v)) for key, v in finished.items() if len(v)}


def _job_cost(done: Mapping[tuple[Hashable, int], tuple[float, int]], group: Hashable,
              n_qubits: int) -> float | None:
    if not done:
        return None
    if (group, n_qubits) in done:
        return done[group, n_qubits][0]
    own = {n: mean for (g, n), (mean, _) in done.items() if g == group}
    smaller = [m for m in own if m < n_qubits]
    if not smaller:
        return sum(m * c for m, c in done.values()) / sum(c for _, c in done.values())
    top = max(smaller)
    growth = _growth(own, n_qubits)
    if growth is None:
        pooled: dict[int, list[float]] = defaultdict(lambda: [0.0, 0])
        for (_, n), (mean, count) in done.items():
            pooled[n][0] += mean * count
            pooled[n][1] += count
        growth = _growth({n: total / count for n, (total, count) in pooled.items()},
                         n_qubits)
    return own[top] * (1.0 if growth is None else growth) ** (n_qubits - top)


def job_seconds(finished: Mapping[tuple[Hashable, int], Sequence[float]], group: Hashable,
                n_qubits: int) -> float | None:
    """Expected seconds of one job of ``group`` at ``n_qubits`` from the finished jobs'
    seconds per (group, n) (module docstring); None when nothing has finished."""
    return _job_cost(_summary(finished), group, n_qubits)


def remaining_seconds(finished: Mapping[tuple[Hashable, int], Sequence[float]],
                      pending: Mapping[tuple[Hashable, int], int], parallel: int = 1,
                      wall_per_second: float | None = None) -> float | None:
    """Seconds until the ``pending`` jobs (count per (group, n)) are done:
    ``max(r sum_jobs cost, max_jobs cost)`` with the costs of ``job_seconds`` and the rate
    ``r`` = ``wall_per_second`` (measured wall seconds per second of job time, at least
    ``1 / parallel``) or ``1 / parallel``; 0 when nothing is pending, None when nothing has
    finished yet."""
    if parallel < 1:
        raise ThermoseedError(f"parallel must be >= 1, got {parallel!r}")
    rate = 1.0 / parallel if wall_per_second is None else max(wall_per_second, 1.0 / parallel)
    todo = {key: count for key, count in pending.items() if count > 0}
    if not todo:
        return 0.0
    done = _summary(finished)
    costs = {key: _job_cost(done, *key) for key in todo}
    if any(c is None for c in costs.values()):
        return None
    total = sum(costs[key] * count for key, count in todo.items())
    return max(rate * total, max(costs.values()))
