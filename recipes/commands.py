"""The ``thermoseed`` subcommands: each is a thin wrapper over a public library call that
imports the library late (so ``--help`` stays instant), prints JSON on stdout and one short
human summary on stderr."""

from __future__ import annotations

import sys
from pathlib import Path

from thermoseed.pretrain.errors import ThermoseedError


def _json(payload, indent: int | None = None) -> str:
    """``json_text`` (imported late: ``--help`` stays free of numpy)."""
    from thermoseed.pretrain.files import json_text

    return json_text(payload, indent)


def _say(args, message: str) -> None:
    if not args.quiet:
        print(message, file=sys.stderr)


# ------------------------------------------------------------------------------ handlers


def fit_command(args) -> int:
    from thermoseed.pretrain import (
        VisibleGibbsModel,
        graph_terms,
        is_records_file,
        load_records,
        load_training_data,
    )

    records = is_records_file(args.data)
    data = load_records(args.data) if records else load_training_data(
        args.data, kind=args.kind, renormalize=args.renormalize)
    terms = graph_terms(data.n_qubits, args.graph, fields=args.fields,
                        couplings=args.couplings, extra=args.extra, shape=args.shape,
                        edges=args.edges, parity=args.parity)
    model = VisibleGibbsModel(terms, solver=args.solver, l2=args.l2, tol=args.tol,
                              max_iter=args.max_iter, seed=args.seed,
                              engine="auto" if records else "dense",
                              progress=not args.quiet, checkpoint=args.checkpoint)
    model.fit(data)
    path = model.save(args.out)
    plot = _convergence_plot(args, "fit", model.history_)
    if records:
        worst = float(abs(model.moment_zscores_).max())
        summary = {"model": str(path), "n_qubits": data.n_qubits, "terms": len(terms),
                   "shots": data.n_shots, "cross_entropy": model.loss_,
                   "max_abs_residual_in_stderr": worst,
                   "max_coef_stderr": float(model.coef_stderr_.max()),
                   "grad_norm": model.grad_norm_, "iterations": model.n_iter_,
                   "converged": bool(model.converged_),
                   "diverging": bool(model.diverging_), **plot}
        _say(args, f"fit from {data.n_shots} shots: largest moment residual {worst:.2g} "
                   f"standard errors, coefficient errors up to "
                   f"{summary['max_coef_stderr']:.3g}; {model.n_iter_} iterations, "
                   f"{_fit_status(model)}; {len(terms)} terms -> {path}")
        print(_json(summary))
        return 0
    from thermoseed.pretrain import fidelity, trace_distance

    sigma = model.state()
    summary = {"model": str(path), "n_qubits": data.n_qubits, "terms": len(terms),
               "relative_entropy": model.loss_, "data_entropy": model.data_entropy_,
               "fidelity": fidelity(data.rho, sigma),
               "trace_distance": trace_distance(data.rho, sigma),
               "grad_norm": model.grad_norm_, "iterations": model.n_iter_,
               "converged": bool(model.converged_), "diverging": bool(model.diverging_),
               **plot}
    _say(args, f"fit: S(rho||sigma) = {model.loss_:.4g} nats (data entropy "
               f"{model.data_entropy_:.4g}), fidelity {summary['fidelity']:.4f}, trace "
               f"distance {summary['trace_distance']:.4f}; {model.n_iter_} iterations, "
               f"{_fit_status(model)}; {len(terms)} terms -> {path}")
    print(_json(summary))
    return 0


def _fit_status(model) -> str:
    """One honest word on how the fit ended, with the one fix that applies."""
    if model.diverging_:
        return "diverging: the data sit on the edge of the model family (pass --l2 > 0)"
    return "converged" if model.converged_ else "NOT converged (raise --max-iter)"


def _convergence_plot(args, stage: str, history, floor: float = 0.0) -> dict:
    """Write ``--convergence-plot`` (when given) for the fit or compile history."""
    if not args.convergence_plot:
        return {}
    from thermoseed.recipes.plots import plot_compile_history, plot_fit_history

    if stage == "fit":
        path = plot_fit_history(history, args.convergence_plot)
    else:
        path = plot_compile_history(history, args.convergence_plot, floor=floor)
    return {"convergence_plot": str(path)}


def compile_command(args) -> int:
    from thermoseed.bridge.ansatz import make_ansatz
    from thermoseed.bridge.compile import compile_latent
    from thermoseed.bridge.compile_record import save_compile
    from thermoseed.pretrain import load_model, load_training_data

    model = load_model(args.model)
    n = model.terms_.n_qubits
    layers = args.layers or 2 * n
    data = load_training_data(args.data).rho if args.data else None
    result = compile_latent(model, make_ansatz(args.ansatz, n, layers), latent=args.latent,
                            k=args.k, weight=args.weight, restarts=args.restarts,
                            small_starts=args.small_starts, screen_iter=args.screen_iter,
                            seed=args.seed, max_iter=args.max_iter, data=data,
                            progress=not args.quiet)
    path = save_compile(result, args.out)
    plot = _convergence_plot(args, "compile", result.history, result.report.floor)
    print(_json({"compile": str(path), "latent_states": len(result.latent.basis),
                 **{k: v for k, v in result.report._asdict().items()}, **plot}))
    return 0


def warm_start_command(args) -> int:
    import numpy as np

    from thermoseed.bridge.ansatz import make_ansatz
    from thermoseed.bridge.compile_record import load_compile
    from thermoseed.bridge.warm_starts import save_warm_start, warm_start

    result = load_compile(args.compile)
    head = make_ansatz(args.head, result.n_visible, args.head_layers) if args.head else None
    params = np.asarray(warm_start(result, head=head))
    path = save_warm_start(args.out, params, result.ansatz, head, source=result,
                           strategy="pretrained", model_fidelity=result.report.model_fidelity)
    print(_json({"params": str(path), "shape": list(params.shape)}))
    return 0


def inspect_command(args) -> int:
    if str(args.file).endswith(".jsonl") or Path(args.file).is_dir():
        print(_json(_sweep_summary(args.file), indent=2))
        return 0
    import numpy as np

    from thermoseed.pretrain.files import RECORD_HEADER, load_npz, read_record

    arrays = load_npz(args.file, what="file")
    if RECORD_HEADER in arrays:  # a record: the loader's own checks and messages apply
        header, arrays = read_record(args.file)
    else:
        header = {"format": "plain .npz arrays (not a thermoseed record)"}
    shown = {k: {"shape": list(np.shape(v)), "dtype": str(np.asarray(v).dtype)}
             for k, v in arrays.items()}
    values = {k: np.asarray(v).tolist() for k, v in arrays.items()
              if np.asarray(v).size <= INSPECT_VALUES and np.asarray(v).dtype.kind in "biuf"}
    if "terms" in header and "coef" in arrays and np.ndim(arrays["coef"]) == 1:
        values["terms"] = dict(zip(header["terms"], np.asarray(arrays["coef"]).tolist(),
                                   strict=False))
    print(_json({"header": header, "arrays": shown, "values": values}, indent=2))
    return 0


#: Arrays up to this many entries are printed by ``inspect`` (longer ones: shape only).
INSPECT_VALUES = 64


def _sweep_summary(path) -> dict:
    """Jobs, sizes, strategies, costs and failures of a results file (or run folder)."""
    from collections import Counter

    from thermoseed.bridge.plateau.sweep import read_records

    records = read_records(path)
    jobs = [r["job"] for r in records]
    failed = [r["key"] for r in records if not isinstance(r.get("result"), dict)
              or "error" in r["result"]]
    return {"records": len(records),
            "tasks": dict(Counter(j["task"] for j in jobs)),
            "sizes": sorted({j["n_qubits"] for j in jobs}),
            "strategies": dict(Counter(j["strategy"] for j in jobs)),
            "costs": dict(Counter(j["cost"] for j in jobs)),
            "seconds": round(sum(float(r.get("seconds", 0.0)) for r in records), 1),
            "failures": len(failed)}


def sweep_command(args) -> int:
    from thermoseed.bridge.plateau.strategies import PretrainSettings
    from thermoseed.bridge.plateau.sweep import make_grid, run_sweep

    data = None
    if args.data:
        from thermoseed.recipes.sources import labelled_files

        data = labelled_files(args.data, what="--data", seed=args.seed)
    settings = PretrainSettings(graph=args.graph, fields=args.fields,
                                couplings=tuple(args.couplings), l2=args.l2,
                                parity=args.parity)
    settings.terms(max(args.sizes))  # a bad letter stops here, not inside a worker
    jobs = make_grid(args.sizes, args.strategies, range(args.seed, args.seed + args.seeds),
                     costs=args.costs, template=args.template, depths=args.depths,
                     settings=settings)
    result = run_sweep(jobs, args.out, data=data, workers=args.workers,
                       scheduler=args.scheduler, progress=not args.quiet)
    print(_json({"results": str(args.out), "jobs": len(jobs), "ran": result.ran,
                 "skipped": result.skipped}))
    return 0


def report_command(args) -> int:
    from thermoseed.bridge.plateau.report import write_report
    from thermoseed.bridge.plateau.sweep import read_records

    records = read_records(args.results)
    if not records:
        raise ThermoseedError(f"{args.results} holds no sweep records (or does not exist)")
    path = write_report(records, args.out, title=args.title, target=args.target)
    print(_json({"report": str(path)}))
    return 0


def run_command(args) -> int:
    from thermoseed.recipes.config import load_recipe
    from thermoseed.recipes.pipeline import run_recipe

    recipe = load_recipe(args.recipe, qubits=args.qubits, seed=args.seed, quick=args.quick)
    out = Path(args.out) if args.out else Path("thermoseed-runs") / recipe.name
    summary = run_recipe(recipe, out, progress=not args.quiet, workers=args.workers)
    print(_json(summary))
    _say(args, f"report: {out / 'report.md'}")
    return 0


# ------------------------------------------------------------------------------ parser
