"""Plateau reports: PNG plots (matplotlib ``Figure``, no pyplot), Markdown tables and a
Markdown report embedding them.

``write_report(records, folder)`` reads sweep records (``bridge.sweep``) and writes
``decay.png`` (log2 of the gradient variance against n, fitted lines per strategy, one panel
per cost), ``curves.png`` (median training loss and held-out accuracy with quartile bands)
when there are training records, ``sizes.png`` (step-0 accuracy and steps to target against
n) when they cover several sizes, and ``report.md``. Files are written atomically.
"""

from __future__ import annotations

import io
from collections import defaultdict
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from thermoseed.bridge.plateau.stats import (
    CurveSummary,
    DecayFit,
    GroupKey,
    decay_rates,
    gradient_stats,
    group_probes,
    summarize_curves,
)
from thermoseed.bridge.plateau.sweep import canonical_records, probe_results, train_curves
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.pretrain.files import atomic_write_bytes

#: Display label and colour per strategy (our own palette).
STYLE = {
    "uniform": ("uniform on [0, 2pi)", "#b8336a"),
    "small_angle": ("small-angle Gaussian", "#2e86ab"),
    "identity_blocks": ("identity blocks", "#3c8d2f"),
    "pretrained": ("pre-trained warm start", "#e08e0b"),
    "pretrained_perturbed": ("pre-trained + perturbation", "#6c4f9e"),
    "class_models": ("class-model warm start", "#0b7a75"),
}
COST_TITLES = {"local": "local cost <Z_0>", "global": "global cost 1 - |<0|V|psi>|^2",
               "classifier": "classifier cross-entropy"}
_STAT_LABEL = {"mean_var": "mean_k Var_seeds[dC/dphi_k]",
               "max_var": "max_k Var_seeds[dC/dphi_k]",
               "mean_sq_norm": "E_seeds |grad C|^2"}
LIMITS = (
    "Limits: every number here comes from noise-free state-vector simulation at small qubit "
    "counts (exact gradients, no shot noise, no hardware noise). Decay rates are fitted over "
    "the sizes shown only and say nothing about larger n; no hardware advantage is claimed, "
    "and a strategy with a slower decay here is not thereby shown to train better."
)


def _style(strategy: str) -> tuple[str, str]:
    return STYLE.get(strategy, (strategy, "#555555"))


def _save(fig, path) -> Path:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=120)
    return atomic_write_bytes(path, buffer.getvalue())


def plot_decay(fits: Mapping[GroupKey, DecayFit], path) -> Path:
    """PNG of ``log2 S(n)`` points and fitted lines per strategy, one panel per cost."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    if not fits:
        raise ThermoseedError("no decay fits to plot: the sweep needs >= 2 qubit counts")
    statistic = next(iter(fits.values())).statistic
    costs = sorted({key.cost for key in fits}, key=lambda c: list(COST_TITLES).index(c))
    fig = Figure(figsize=(4.6 * len(costs), 3.8), layout="constrained")
    axes = fig.subplots(1, len(costs), squeeze=False)[0]
    for ax, cost in zip(axes, costs, strict=True):
        for key, fit in fits.items():
            if key.cost != cost:
                continue
            label, colour = _style(key.strategy)
            ns = np.array(fit.n_values)
            ax.plot(ns, fit.log2_values, "o", color=colour)
            ax.plot(ns, fit.intercept + fit.slope * ns, "-", color=colour,
                    label=f"{label}: {fit.slope:+.2f} [{fit.low:+.2f}, {fit.high:+.2f}]")
        ax.set_title(COST_TITLES.get(cost, cost), fontsize=10)
        ax.set_xlabel("qubits n")
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_ylabel(f"log2 {_STAT_LABEL[statistic]}\n(unit: (cost unit / rad)^2)")
        ax.legend(fontsize=7, title="slope, log2 units per qubit", title_fontsize=7)
        ax.grid(alpha=0.3)
    return _save(fig, path)


def plot_curves(summaries: Sequence[CurveSummary], path) -> Path:
    """PNG of median training loss and held-out accuracy per step with quartile bands;
    one row per qubit count."""
    from matplotlib.figure import Figure

    if not summaries:
        raise ThermoseedError("no training curves to plot")
    sizes = sorted({s.n_qubits for s in summaries})
    fig = Figure(figsize=(9.0, 3.2 * len(sizes)), layout="constrained")
    axes = fig.subplots(len(sizes), 2, squeeze=False)
    for row, n in zip(axes, sizes, strict=True):
        for s in summaries:
            if s.n_qubits != n:
                continue
            label, colour = _style(s.strategy)
            steps = np.arange(s.loss_q.shape[1])
            for ax, q in zip(row, (s.loss_q, s.accuracy_q), strict=True):
                ax.fill_between(steps, q[0], q[2], color=colour, alpha=0.2, linewidth=0)
                ax.plot(steps, q[1], color=colour, label=f"{label} ({s.n_seeds} seeds)")
        row[0].set_ylabel("training cross-entropy (nats)")
        row[1].set_ylabel("held-out accuracy (fraction)")
        row[1].set_ylim(-0.02, 1.02)
        for ax in row:
            ax.set_xlabel("Adam step")
            ax.set_title(f"n = {n}: median, band = 25th-75th percentile", fontsize=10)
            ax.grid(alpha=0.3)
        row[1].legend(fontsize=7)
    return _save(fig, path)


def decay_table(by_statistic: Mapping[str, Mapping[GroupKey, DecayFit]],
                seeds: Mapping[GroupKey, int]) -> str:
    """Markdown table: one row per (cost, strategy), one slope column per statistic."""
    stats = list(by_statistic)
    keys = sorted({k for fits in by_statistic.values() for k in fits})
    head = ["cost", "strategy", "template", "n", "seeds per n"] + [
        f"slope of log2 {s} [95% CI]" for s in stats]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for key in keys:
        fits = [by_statistic[s].get(key) for s in stats]
        first = next(f for f in fits if f is not None)
        cells = [key.cost, _style(key.strategy)[0], key.template,
                 f"{min(first.n_values)}..{max(first.n_values)}", str(seeds.get(key, ""))]
        cells += ["" if f is None else f"{f.slope:+.3f} [{f.low:+.3f}, {f.high:+.3f}]"
                  for f in fits]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def stats_table(groups: Mapping[GroupKey, Mapping[int, list]]) -> str:
    """Markdown table of ``gradient_stats`` per (cost, strategy, n)."""
    head = ["cost", "strategy", "n", "depth", "seeds", "active params", "mean_k Var",
            "max_k Var", "E norm(grad)^2"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for key in sorted(groups):
        for n in sorted(groups[key]):
            if len(groups[key][n]) < 2:
                continue
            st = gradient_stats(groups[key][n])
            lines.append("| " + " | ".join([
                key.cost, _style(key.strategy)[0], str(n), str(st.depth), str(st.n_seeds),
                str(st.n_active), f"{st.mean_var:.3g}", f"{st.max_var:.3g}",
                f"{st.mean_sq_norm:.3g}"]) + " |")
    return "\n".join(lines)


def curve_table(summaries: Sequence[CurveSummary]) -> str:
    """Markdown table per (n, strategy): held-out accuracy at step 0, best along the curve and
    last (medians over seeds), steps to the target and the final loss."""
    head = ["n", "strategy", "seeds", "accuracy at step 0", "best accuracy", "last accuracy",
            "median steps to target", "seeds reaching it", "final median loss"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for s in sorted(summaries, key=lambda s: (s.n_qubits, s.strategy)):
        steps = "not reached" if s.steps_to_target is None else f"{s.steps_to_target:g}"
        lines.append("| " + " | ".join([
            str(s.n_qubits), _style(s.strategy)[0], str(s.n_seeds), f"{s.start_accuracy:.3f}",
            f"{s.best_accuracy:.3f}", f"{s.last_accuracy:.3f}",
            f"{steps} (target {s.target:g})", f"{s.reached}/{s.n_seeds}",
            f"{s.loss_q[1, -1]:.3f}"]) + " |")
    return "\n".join(lines)


def plot_sizes(summaries: Sequence[CurveSummary], path) -> Path:
    """PNG against qubit count per strategy: median held-out accuracy at step 0 (left) and
    median steps to the target accuracy (right; a hollow marker at the step budget when
    fewer than half the seeds reach it)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(9.0, 3.4), layout="constrained")
    left, right = fig.subplots(1, 2)
    for strategy in sorted({s.strategy for s in summaries}):
        rows = sorted((s for s in summaries if s.strategy == strategy),
                      key=lambda s: s.n_qubits)
        label, colour = _style(strategy)
        ns = [s.n_qubits for s in rows]
        left.plot(ns, [s.start_accuracy for s in rows], "o-", color=colour, label=label)
        budget = [s.loss_q.shape[1] - 1 for s in rows]
        steps = [b if s.steps_to_target is None else s.steps_to_target
                 for s, b in zip(rows, budget, strict=True)]
        right.plot(ns, steps, "-", color=colour, label=label)
        for n, y, s in zip(ns, steps, rows, strict=True):
            right.plot([n], [y], "o", color=colour,
                       fillstyle="none" if s.steps_to_target is None else "full")
    left.set_ylabel("held-out accuracy at step 0 (median)")
    left.set_ylim(-0.02, 1.02)
    right.set_ylabel(f"steps to {summaries[0].target:g} held-out accuracy (median)")
    for ax in (left, right):
        ax.set_xlabel("qubits n")
        ax.grid(alpha=0.3)
    left.legend(fontsize=7)
    return _save(fig, path)


def circuit_lines(records: Sequence[dict]) -> list[str]:
    """Markdown lines naming the user's own circuits in ``records`` with their fingerprint
    per qubit count (built-in templates have none), or no lines."""
    prints: dict[str, dict[int, str]] = defaultdict(dict)
    for rec in records:
        job = rec["job"]
        if job.get("circuit"):
            prints[job["template"]][job["n_qubits"]] = job["circuit"]
    if not prints:
        return []
    named = "; ".join(f"`{name}` (" + ", ".join(f"n = {n}: {fp}" for n, fp
                                                   in sorted(by_n.items())) + ")"
                      for name, by_n in sorted(prints.items()))
    return [f"Circuits of your own, fingerprint of the gate sequence per size: {named}.", ""]


def write_report(records: Sequence[dict], folder, *, title: str = "Plateau comparison",
                 target: float = 0.9, n_boot: int = 1000, seed: int = 0,
                 preamble: str = "") -> Path:
    """Plots, tables and ``report.md`` in ``folder`` from sweep records; returns the
    report path. ``target``: held-out accuracy for steps-to-target; ``n_boot``/``seed``:
    the bootstrap of the decay-rate intervals; ``preamble``: Markdown placed first."""
    folder = Path(folder)
    records = canonical_records(records)  # same records, same order: same report
    probes = probe_results(records)
    curves = train_curves(records)
    if not probes and not curves:
        raise ThermoseedError("the records hold neither gradient probes nor training curves")
    # one title and one limits statement per report: a preamble brings its own
    parts = [preamble, f"## {title}", ""] if preamble else [f"# {title}", "", LIMITS, ""]
    sub = "###" if preamble else "##"  # sections sit one level below the report's title
    parts += circuit_lines(records)
    if probes:
        unestimated: dict = {}
        by_stat = {s: decay_rates(probes, statistic=s, n_boot=n_boot, seed=seed,
                                  unestimated=unestimated)
                   for s in ("mean_var", "max_var")}
        groups = group_probes(probes)
        seeds = {k: min(len(v) for v in by_n.values()) for k, by_n in groups.items()}
        methods = sorted({p.method for p in probes})
        parts += [f"{sub} Gradient variance at initialisation", "",
                  "Var over seeds of dC/dphi_k, averaged (mean_var) or maximised (max_var) "
                  "over the parameters that enter the circuit; slope of log2 Var against n "
                  f"by least squares, percentile bootstrap over seeds ({n_boot} resamples). "
                  f"Gradient methods: {', '.join(methods)}.", ""]
        if by_stat["mean_var"]:
            plot_decay(by_stat["mean_var"], folder / "decay.png")
            parts += ["![log2 gradient variance against qubit count](decay.png)", ""]
        if any(by_stat.values()):
            parts += [decay_table(by_stat, seeds), ""]
        parts += [f"No decay rate for {key.cost} cost, {_style(key.strategy)[0]} "
                  f"({seeds.get(key)} seeds per size): {reason}." for key, reason in
                  sorted(unestimated.items())]
        parts += ["", "Per size:", "", stats_table(groups), ""]
    if curves:
        groups = defaultdict(list)
        for c in curves:
            groups[(c.strategy, c.n_qubits)].append(c)
        summaries = [summarize_curves(v, target=target) for _, v in sorted(groups.items())]
        plot_curves(summaries, folder / "curves.png")
        parts += [f"{sub} Training curves", "",
                  "![training loss and held-out accuracy per step](curves.png)", ""]
        if len({s.n_qubits for s in summaries}) > 1:
            plot_sizes(summaries, folder / "sizes.png")
            parts += ["![step-0 accuracy and steps to target against qubit count](sizes.png)",
                      ""]
        parts += [curve_table(summaries), ""]
    path = folder / "report.md"
    atomic_write_bytes(path, "\n".join(parts).encode("utf-8"))
    return path
