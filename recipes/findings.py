"""Plain-words findings for recipe reports, stated from the measured numbers.

Every sentence is generated from the records; nothing here assumes pre-training helps, and no
conclusion is drawn from a stage that failed or fell below its quality threshold:

- fit: the loss must be finite, the optimum finite (not ``diverging``: rank-deficient data on
  the edge of the model family at l2 = 0) and the optimiser converged (gradient norm within
  tolerance);
- compile: fidelity between the compiled state and the Gibbs model at least
  ``MIN_COMPILE_FIDELITY`` (a compile that stopped early but got there is read as it stands,
  and said so).

When the chain falls short, every start built from it (``PRETRAINED``) is listed with its
numbers but marked "not assessed", and the report says which stage fell short and why.
"""

from __future__ import annotations

import math
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


#: Fidelity F(compiled, Gibbs model) below which the compile is taken to have failed: the
#: circuit then does not prepare the fitted model, so nothing it starts says anything about
#: pre-training (our own bar: a tenth of the weight lost).
MIN_COMPILE_FIDELITY = 0.9
#: Starts built from the pre-training chain (judged only when the chain held its thresholds).
#: The class-model start is not among them: it fits its own models per class and compiles
#: their decision rule (the exact rules' accuracies and bounds are reported beside it).
PRETRAINED = ("pretrained", "pretrained_perturbed")


def _number(value) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def stage_problems(run: dict) -> list[str]:
    """Plain sentences, one per pre-training stage that failed or fell below its threshold
    (empty when the chain can be judged)."""
    fit, comp = run.get("fit"), run.get("compile")
    problems = []
    if not fit:
        problems.append("the fit stage did not finish")
    else:
        loss = _number(fit.get("relative_entropy", fit.get("cross_entropy")))
        if not math.isfinite(loss):
            problems.append(f"the fit stage ended with loss {loss} (not finite)")
        elif fit.get("diverging"):
            problems.append("the fit stage diverges (the data sit on the edge of the model "
                            "family, |theta| grows without bound): set [model] l2 > 0")
        elif not fit.get("converged"):
            problems.append(f"the fit stage stopped unconverged after {fit.get('iterations')} "
                            f"iterations (|grad| = {_number(fit.get('grad_norm')):.2g})")
    if not comp:
        problems.append("the compile stage did not finish")
    else:
        fidelity = _number(comp.get("model_fidelity"))
        if not fidelity >= MIN_COMPILE_FIDELITY:
            problems.append(f"the compile stage reached fidelity {fidelity:.2f} < "
                            f"{MIN_COMPILE_FIDELITY:g}")
    return problems


def _quality_lines(run: dict) -> list[str]:
    """The stage-quality paragraph opening every recipe report (and, for fits from
    measurement records, the one exception to the noise-free limits)."""
    shots = run.get("fit", {}).get("shots")
    noise = [f"Exception to the limits above: the Gibbs model was fitted from {shots} "
             "simulated measurement shots, so its coefficients carry shot noise (standard "
             "errors in the pre-training section).", ""] if shots else []
    problems = stage_problems(run)
    if problems:
        return noise + [f"Stage quality: {'; '.join(problems)}: no conclusion about the "
                        "pre-trained start is drawn; its numbers below are listed but not "
                        "assessed.", ""]
    comp = run["compile"]
    text = (f"Stage quality: the fit converged; the compile reached fidelity "
            f"{_number(comp.get('model_fidelity')):.3f} >= {MIN_COMPILE_FIDELITY:g} to the "
            "model")
    if not comp.get("converged", True):
        text += " (it stopped before its gradient tolerance; read as it stands)"
    return noise + [text + ".", ""]


def _coefficient_lines(run: dict) -> list[str]:
    """Fitted coefficients with standard errors (fits from measurement records only)."""
    fit = run.get("fit", {})
    rows = fit.get("coefficients")
    if not rows:
        return []
    lines = [f"### Fitted coefficients from {fit['shots']} measurement shots", "",
             "Each coefficient with its standard error (Kubo-Mori covariance of the moment "
             "noise); the moment residual (data moment minus model moment) in standard errors "
             f"should mostly lie within +-2. Largest |residual|: "
             f"{fit['max_abs_residual_in_stderr']:.2f} standard errors.", "",
             "| term | coefficient | standard error | moment residual (standard errors) |",
             "|---|---|---|---|"]
    lines += [f"| {r['term']} | {r['coef']:+.4f} | {r['stderr']:.4f} | "
              f"{r['residual_in_stderr']:+.2f} |" for r in rows]
    return lines + [""]


def _chain_lines(run: dict) -> list[str]:
    fit, comp = run.get("fit", {}), run.get("compile", {})
    if "cross_entropy" in fit:
        loss = (f"cross entropy theta.m + log Z = {fit['cross_entropy']:.4f} nats from "
                f"{fit['shots']} measurement shots (records.npz)")
    else:
        loss = f"S(rho||sigma) = {_number(fit.get('relative_entropy')):.4f} nats"
    return [
        "## Pre-training chain", "",
        f"- Gibbs model: {fit.get('terms')} Pauli terms, {loss} after {fit.get('iterations')} "
        f"L-BFGS iterations (converged: {fit.get('converged')}).",
        f"- Compile ({comp.get('latent_states')} latent basis states): S(sigma~||sigma) = "
        f"{comp.get('objective', float('nan')):.4f} nats, fidelity to the model "
        f"{comp.get('model_fidelity', float('nan')):.4f}, trace distance "
        f"{comp.get('model_trace_distance', float('nan')):.4f}; fidelity to the training "
        f"data {comp.get('data_fidelity', float('nan')):.4f}.",
        "- Files: model.npz (Gibbs model), compile.npz (circuit parameters and report), "
        "warm_start.npz (encoder = compiled parameters, head = identity), results.jsonl "
        "(one record per sweep job), run.json (versions, seeds, settings, timings).", "",
        *_coefficient_lines(run),
        "![fit loss and gradient norm per iteration](fit_history.png)", "",
        "![compile objective per iteration](compile_history.png)", "",
    ]


#: A rule "classifies well" from this held-out accuracy on (the issue's and common practice's
#: bar for a usable classifier on these small balanced tasks).
GOOD_RULE = 0.9


def _tuning(start: float, last: float, best: float, held_out: int) -> str:
    """Kept / improved / lost the step-0 accuracy, within one held-out state."""
    step = 1.0 / max(held_out, 1)
    if last > start + step / 2:
        verdict = "improved on"
    elif last < start - step / 2:
        verdict = "lost"
    else:
        verdict = "kept"
    extra = f" (best along the curve {best:.2f})" if best > max(start, last) + step / 2 else ""
    return f"fine-tuning {verdict} the step-0 accuracy ({start:.2f} -> {last:.2f}){extra}"


def _size_lines(n: int, summaries: dict, rules: dict | None, target: float,
                judged: bool = True) -> list[str]:
    lines = [f"### n = {n}", ""]
    held_out = int(rules["held_out"]) if rules else 0
    if rules:
        best_rule = max(rules["many_copy_accuracy"], rules["single_shot_accuracy"])
        lines.append(
            f"Exact rules of one Gibbs model per class (fitted on the training states): "
            f"nearest model in relative entropy (many-copy) {rules['many_copy_accuracy']:.2f}, "
            f"Helstrom measurement (single-shot, models cooled by {rules.get('cooling', 1):g}) "
            f"{rules['single_shot_accuracy']:.2f} held-out accuracy on {held_out} states. "
            f"Single-shot success bounds: {rules['model_success']:.3f} between the models, "
            f"{rules['data_success']:.3f} between the data's own class mixtures.")
        if best_rule < GOOD_RULE:
            lines.append(
                f"No exact rule reaches {GOOD_RULE:.0%} here: the class models (this term set) "
                f"do not separate the classes well enough, so no warm start built from them "
                f"can be expected to; a richer term set (pretrain.grow_terms) or more data "
                f"is the way out.")
        lines.append("")
    for name, s in sorted(summaries.items()):
        mark = "" if judged or name not in PRETRAINED else " (not assessed: stage quality)"
        lines.append(
            f"- {_style(name)[0]}{mark}: held-out accuracy {s.start_accuracy:.2f} at step 0; "
            f"{_fmt_reach(s.steps_to_target, target)} ({s.reached}/{s.n_seeds} seeds); "
            f"{_tuning(s.start_accuracy, s.last_accuracy, s.best_accuracy, held_out)}.")
    mine = summaries.get("class_models")
    if mine is not None and len(summaries) > 1:
        others = {k: s.steps_to_target for k, s in summaries.items()
                  if k != "class_models" and (judged or k not in PRETRAINED)}
        known = [v for v in others.values() if v is not None]
        if mine.steps_to_target is None:
            verdict = "did not reach the target in most seeds"
        elif not known or mine.steps_to_target <= min(known):
            verdict = "reached the target no later than any other start"
        else:
            verdict = (f"reached the target after {mine.steps_to_target:g} steps, later than "
                       f"the best other start ({min(known):g})")
        lines += ["", f"Class-model warm start at n = {n}: median step-0 accuracy "
                  f"{mine.start_accuracy:.2f}; it {verdict} (medians over {mine.n_seeds} "
                  "seeds; small samples, read with care)."]
    return lines + [""]


def classification_findings(recipe: Recipe, run: dict, records: list) -> str:
    """Markdown 'Findings' section for a classification recipe."""
    target = recipe.train.target_accuracy
    judged = not stage_problems(run)
    lines = [f"# {recipe.title}", "", LIMITS, "", "## In plain words", "", *_quality_lines(run)]
    groups = defaultdict(list)
    for curve in train_curves(records):
        groups[(curve.n_qubits, curve.strategy)].append(curve)
    by_size: dict[int, dict] = defaultdict(dict)
    for (n, strategy), curves in groups.items():
        by_size[n][strategy] = summarize_curves(curves, target=target)
    rules = run.get("class_rules", {})
    for n in sorted(by_size):
        lines += _size_lines(n, by_size[n], rules.get(str(n)), target, judged)
    probes = probe_results(records)
    if probes:
        lines += ["Gradient variance decay (slope of log2 mean variance per added qubit, "
                  "95% bootstrap interval):", ""]
        unestimated: dict = {}
        fits = decay_rates(probes, statistic="mean_var", seed=recipe.seed,
                           unestimated=unestimated)
        lines += [f"- {_style(key.strategy)[0]}, {key.cost} cost: no decay rate ({reason})."
                  for key, reason in sorted(unestimated.items())]
        for key, fit in sorted(fits.items()):
            trend = "decays" if fit.high < 0 else "grows" if fit.low > 0 else "shows no clear trend"
            verdict = f"the variance {trend}"
            if not judged and key.strategy in PRETRAINED:
                verdict = "not assessed (stage quality)"
            lines.append(f"- {_style(key.strategy)[0]}, {key.cost} cost: slope {fit.slope:+.2f} "
                         f"[{fit.low:+.2f}, {fit.high:+.2f}] — {verdict} over "
                         f"n = {min(fit.n_values)}..{max(fit.n_values)}.")
    lines.append("")
    return "\n".join(lines + _chain_lines(run))


def eigensolver_findings(recipe: Recipe, run: dict, runs: list, e0: float, target: float) -> str:
    """Markdown report for the neighbour-warm-start recipe."""
    d = recipe.data
    by = defaultdict(list)
    for r in runs:
        by[r["strategy"]].append(r)
    judged = not stage_problems(run)
    lines = [
        f"# {recipe.title}", "", LIMITS, "", "## In plain words", "", *_quality_lines(run),
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
        mark = "" if judged or name not in PRETRAINED else " (not assessed)"
        lines.append(f"| {_style(name)[0]}{mark} | {len(rs)} | {first:.4f} | {last:.4f} | "
                     f"{med} | {len(steps)}/{len(rs)} |")
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
