"""Plain-words findings for recipe reports, stated from the measured numbers.

Every sentence is generated from the records; nothing here assumes pre-training helps.
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from thermoseed.bridge.plateau.report import LIMITS, _save, _style
from thermoseed.bridge.plateau.stats import decay_rates, summarize_curves
from thermoseed.bridge.plateau.sweep import probe_results, train_curves
from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.config import Recipe


def _fmt_reach(value, target: float) -> str:
    if value is None:
        return f"held-out accuracy {target:.0%} not reached by most seeds"
    return f"held-out accuracy {target:.0%} reached after {value:g} steps (median)"


def _chain_lines(run: dict) -> list[str]:
    fit, comp = run.get("fit", {}), run.get("compile", {})
    return [
        "## Pre-training chain", "",
        f"- Gibbs model: {fit.get('terms')} Pauli terms, S(rho||sigma) = "
        f"{fit.get('relative_entropy', float('nan')):.4f} nats after {fit.get('iterations')} "
        f"L-BFGS iterations (converged: {fit.get('converged')}).",
        f"- Compile ({comp.get('latent_states')} latent basis states): S(sigma~||sigma) = "
        f"{comp.get('objective', float('nan')):.4f} nats, fidelity to the model "
        f"{comp.get('model_fidelity', float('nan')):.4f}, trace distance "
        f"{comp.get('model_trace_distance', float('nan')):.4f}; fidelity to the training "
        f"data {comp.get('data_fidelity', float('nan')):.4f}.",
        "- Files: model.npz (Gibbs model), compile.npz (circuit parameters and report), "
        "warm_start.npz (encoder = compiled parameters, head = identity), results.jsonl "
        "(one record per sweep job), run.json (versions, seeds, settings, timings).", "",
    ]


def classification_findings(recipe: Recipe, run: dict, records: list) -> str:
    """Markdown 'Findings' section for a classification recipe."""
    n = recipe.data.qubits
    target = recipe.train.target_accuracy
    lines = [f"# {recipe.title}", "", LIMITS, "", "## In plain words", ""]
    groups = defaultdict(list)
    for curve in train_curves(records):
        groups[curve.strategy].append(curve)
    summaries = {s: summarize_curves(c, target=target) for s, c in groups.items()}
    for name, s in sorted(summaries.items()):
        lines.append(
            f"- {_style(name)[0]} at n = {n}: {_fmt_reach(s.steps_to_target, target)} "
            f"({s.reached}/{s.n_seeds} seeds reached it); "
            f"initial training loss (median) {s.loss_q[1, 0]:.3f}, final {s.loss_q[1, -1]:.3f}; "
            f"final held-out accuracy (median) {s.accuracy_q[1, -1]:.2f}.")
    if "pretrained" in summaries and len(summaries) > 1:
        mine = summaries["pretrained"].steps_to_target
        others = [s.steps_to_target for k, s in summaries.items() if k != "pretrained"]
        known = [o for o in others if o is not None]
        if mine is None:
            verdict = "the pre-trained start did not reach the target in most seeds"
        elif not known or mine < min(known):
            verdict = "the pre-trained start reached the target first"
        elif mine > max(known):
            verdict = "the pre-trained start reached the target last"
        else:
            verdict = "the pre-trained start reached the target neither first nor last"
        lines += ["", f"Verdict on this run: {verdict} (medians over "
                  f"{summaries['pretrained'].n_seeds} seeds; small samples, read with care)."]
    probes = probe_results(records)
    if probes:
        lines += ["", "Gradient variance decay (slope of log2 mean variance per added qubit, "
                  "95% bootstrap interval):", ""]
        fits = decay_rates(probes, statistic="mean_var", seed=recipe.seed)
        for key, fit in sorted(fits.items()):
            trend = "decays" if fit.high < 0 else "grows" if fit.low > 0 else "shows no clear trend"
            lines.append(f"- {_style(key.strategy)[0]}, {key.cost} cost: slope {fit.slope:+.2f} "
                         f"[{fit.low:+.2f}, {fit.high:+.2f}] — the variance {trend} over "
                         f"n = {min(fit.n_values)}..{max(fit.n_values)}.")
    lines.append("")
    return "\n".join(lines + _chain_lines(run))


def eigensolver_findings(recipe: Recipe, run: dict, runs: list, e0: float, target: float) -> str:
    """Markdown report for the neighbour-warm-start recipe."""
    d = recipe.data
    by = defaultdict(list)
    for r in runs:
        by[r["strategy"]].append(r)
    lines = [
        f"# {recipe.title}", "", LIMITS, "", "## In plain words", "",
        f"A Gibbs model fitted to the thermal state of the {d.qubits}-qubit XXZ chain at "
        f"anisotropy {d.source_delta} (beta = {d.beta}) was compiled into a circuit; that "
        f"circuit seeded a variational eigensolver for anisotropy {d.target_delta}. Exact "
        f"ground energy {e0:.6f}; target energy {target:.6f}.", "",
        "| start | seeds | initial energy (median) | final energy (median) | "
        "steps to target (median) | seeds reaching target |",
        "|---|---|---|---|---|---|",
    ]
    for name, rs in by.items():
        steps = [r["steps_to_target"] for r in rs if r["steps_to_target"] is not None]
        med = f"{np.median(steps):g}" if len(steps) * 2 > len(rs) else "not reached"
        first = np.median([r["energies"][0] for r in rs])
        last = np.median([r["energies"][-1] for r in rs])
        lines.append(f"| {_style(name)[0]} | {len(rs)} | {first:.4f} | {last:.4f} | {med} | "
                     f"{len(steps)}/{len(rs)} |")
    lines += ["", "![energy per step](energies.png)", ""]
    return "\n".join(lines + _chain_lines(run))


def plot_energy_runs(runs: list, e0: float, target: float, path):
    """PNG: energy minus exact ground energy per step (log scale), one line per seed."""
    from matplotlib.figure import Figure

    if not runs:
        raise ThermoseedError("no eigensolver runs to plot")
    fig = Figure(figsize=(7.0, 4.2), layout="constrained")
    ax = fig.subplots()
    seen = set()
    for r in runs:
        label, colour = _style(r["strategy"])
        gap = np.maximum(np.asarray(r["energies"]) - e0, 1e-12)
        ax.plot(gap, color=colour, alpha=0.8,
                label=None if r["strategy"] in seen else label)
        seen.add(r["strategy"])
    ax.axhline(target - e0, color="black", linestyle="--", linewidth=1, label="target")
    ax.set_yscale("log")
    ax.set_xlabel("Adam step")
    ax.set_ylabel("E - E_0 (units of J, log10 axis)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    return _save(fig, path)
