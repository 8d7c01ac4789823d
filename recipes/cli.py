"""The ``thermoseed`` command line (also ``python -m thermoseed.recipes``).

Parsing lives here; every subcommand is a thin wrapper over a public library call and
imports the library late, so ``--help`` is instant. User errors (``ThermoseedError``) print
one line on stderr and exit 1; argparse keeps exit 2 for usage errors; ``--debug`` re-raises.
"""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path

from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.config import GRAPH_NAMES, TEMPLATE_NAMES


def _int_at_least(low: int):
    """argparse type: an integer >= ``low`` (a usage error, exit 2, otherwise)."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            value = None
        if value is None or value < low:
            raise argparse.ArgumentTypeError(f"expected an integer >= {low}, got {text!r}")
        return value

    return parse


_positive_int, _nonneg_int = _int_at_least(1), _int_at_least(0)


def _version() -> str:
    """The installed distribution's version (no library import: ``--help`` stays instant)."""
    from importlib import metadata

    try:
        return metadata.version("thermoseed")
    except metadata.PackageNotFoundError:  # running from a source tree without install
        return "unknown"


def _grid_shape(text: str) -> tuple[int, int]:
    try:
        rows, cols = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected ROWSxCOLS, e.g. 2x3, got {text!r}") from None
    return rows, cols


def _edge_list(text: str) -> list[tuple[int, int]]:
    try:
        return [tuple(int(v) for v in pair.split("-")) for pair in _word_list(text)]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected edges like 0-1,1-2, got {text!r}") from None


def _nonneg_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number >= 0, got {text!r}") from None
    if not value >= 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a finite number >= 0, got {text!r}")
    return value


def _int_list(text: str) -> list[int]:
    try:
        values = [int(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected comma-separated integers, e.g. 2,4,6, got {text!r}") from None
    if not values or min(values) < 1:
        raise argparse.ArgumentTypeError(f"expected positive integers, got {text!r}")
    return values


def _word_list(text: str) -> list[str]:
    return [v.strip() for v in text.split(",") if v.strip()]


def _names(text: str) -> list[str]:
    """A non-empty comma-separated list (an empty one would run nothing and say nothing)."""
    words = _word_list(text)
    if not words:
        raise argparse.ArgumentTypeError(f"expected at least one name, got {text!r}")
    return words


def _data_files(text: str) -> dict[int | None, str]:
    """``--data``: one file (its qubit count read from it) or ``N=file,M=file`` pairs."""
    if "=" not in text:
        return {None: text}
    files: dict[int | None, str] = {}
    for item in _word_list(text):
        size, _, path = item.partition("=")
        try:
            n = int(size)
        except ValueError:
            n = 0
        if n < 1 or not path:
            raise argparse.ArgumentTypeError(
                f"expected QUBITS=FILE pairs, e.g. 4=a.npz,6=b.npz, got {item!r}")
        if n in files:
            raise argparse.ArgumentTypeError(f"qubit count {n} is given twice in {text!r}")
        files[n] = path
    return files


def _json(payload, indent: int | None = None) -> str:
    """``json_text`` (imported late: ``--help`` stays free of numpy)."""
    from thermoseed.pretrain.files import json_text

    return json_text(payload, indent)


def _add_common(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--quiet", action="store_true", help="no progress bars or chatter")
    parser.add_argument("--debug", action="store_true", help="show Python tracebacks")


def _subcommand(sub, name: str, handler, *, help: str, epilog: str,
                description: str | None = None) -> argparse.ArgumentParser:
    """One subparser: summary, example epilog, the common flags and its handler."""
    parser = sub.add_parser(name, help=help, description=description or help, epilog=epilog,
                            formatter_class=argparse.RawDescriptionHelpFormatter)
    _add_common(parser)
    parser.set_defaults(handler=handler)
    return parser


def _add_model_options(parser: argparse.ArgumentParser, title: str, graphs=GRAPH_NAMES):
    """The Gibbs model's term set and penalty (``fit`` and ``sweep`` share them), in an
    argument group ``title``; returns the group."""
    parser = parser.add_argument_group(title)
    parser.add_argument("--graph", default="line", choices=list(graphs),
                        help="coupling graph (default line"
                             + ("; grid needs --shape, edges --edges)" if "edges" in graphs
                                else ")"))
    parser.add_argument("--fields", default="XZ", help="single-qubit letters (default XZ)")
    parser.add_argument("--couplings", type=_word_list, default=["ZZ", "XX"],
                        help="comma-separated letter pairs on each edge (default ZZ,XX)")
    parser.add_argument("--parity", action="store_true",
                        help="add the global X/Y parity strings and Z...Z (they see a GHZ "
                             "phase)")
    parser.add_argument("--l2", type=_nonneg_float, default=1e-3,
                        help="L2 penalty (default 1e-3: pure or low-rank data need one)")
    return parser


def _say(args, message: str) -> None:
    if not args.quiet:
        print(message, file=sys.stderr)


# ------------------------------------------------------------------------------ handlers


def _cmd_fit(args) -> int:
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


def _cmd_compile(args) -> int:
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
                            seed=args.seed, max_iter=args.max_iter, data=data,
                            progress=not args.quiet)
    path = save_compile(result, args.out)
    plot = _convergence_plot(args, "compile", result.history, result.report.floor)
    print(_json({"compile": str(path), "latent_states": len(result.latent.basis),
                 **{k: v for k, v in result.report._asdict().items()}, **plot}))
    return 0


def _cmd_warm_start(args) -> int:
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


def _cmd_inspect(args) -> int:
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


def _cmd_sweep(args) -> int:
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


def _cmd_report(args) -> int:
    from thermoseed.bridge.plateau.report import write_report
    from thermoseed.bridge.plateau.sweep import read_records

    records = read_records(args.results)
    if not records:
        raise ThermoseedError(f"{args.results} holds no sweep records (or does not exist)")
    path = write_report(records, args.out, title=args.title, target=args.target)
    print(_json({"report": str(path)}))
    return 0


def _cmd_run(args) -> int:
    from thermoseed.recipes.config import load_recipe
    from thermoseed.recipes.pipeline import run_recipe

    recipe = load_recipe(args.recipe, qubits=args.qubits, seed=args.seed, quick=args.quick)
    out = Path(args.out) if args.out else Path("thermoseed-runs") / recipe.name
    summary = run_recipe(recipe, out, progress=not args.quiet, workers=args.workers)
    print(_json(summary))
    _say(args, f"report: {out / 'report.md'}")
    return 0


# ------------------------------------------------------------------------------ parser


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser (fit, compile, warm-start, sweep, report, run, inspect)."""
    parser = argparse.ArgumentParser(
        prog="thermoseed",
        description="Generative pre-training for variational quantum circuits: fit a Gibbs "
                    "model to quantum data, compile it into a circuit, warm-start your "
                    "classifier, and measure plateau behaviour.",
    )
    parser.add_argument("--version", action="version", version=f"thermoseed {_version()}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = _subcommand(
        sub, "fit", _cmd_fit, help="fit a Gibbs model to a data file (.npy/.npz)",
        description="Fit a Gibbs model exp(-H)/Z over a Pauli term set by minimising the "
                    "relative entropy S(rho||sigma) to the training states.",
        epilog="examples:\n  thermoseed fit states.npz --out model.npz --convergence-plot fit.png\n"
               "  thermoseed fit states.npz --graph grid --shape 2x3 --fields XYZ "
               "--couplings ZZ,XX,YY --l2 1e-3 --out model.npz")
    p.add_argument("data", help=".npy/.npz training data (README schema) or a measurement "
                                "records file")
    p.add_argument("--out", required=True, help="model file to write (.npz)")
    p.add_argument("--kind", choices=["states", "density"], help="for ambiguous .npy arrays")
    p.add_argument("--renormalize", action="store_true", help="renormalise traces/norms")
    terms = _add_model_options(p, "Gibbs model",
                               graphs=("line", "ring", "grid", "complete", "edges"))
    terms.add_argument("--shape", type=_grid_shape, help="grid rows x columns, e.g. 2x3")
    terms.add_argument("--edges", type=_edge_list,
                       help="edge list for --graph edges, e.g. 0-1,1-2")
    terms.add_argument("--extra", type=_word_list, default=[], help="extra Pauli labels")
    p.add_argument("--solver", choices=["lbfgs", "adam"], default="lbfgs",
                   help="lbfgs (exact moments) or adam (noisy moments)")
    p.add_argument("--tol", type=_nonneg_float, default=1e-6, help="gradient-norm tolerance")
    p.add_argument("--max-iter", type=_positive_int, default=500, help="iteration cap")
    p.add_argument("--seed", type=_nonneg_int, default=0, help="seed of the initial point")
    p.add_argument("--checkpoint", help="checkpoint file: saved during the fit, resumed from")
    p.add_argument("--convergence-plot", metavar="PNG",
                   help="also write a PNG of the loss and gradient norm per iteration")

    p = _subcommand(
        sub, "compile", _cmd_compile, help="compile a fitted model into a parameterised circuit",
        description="Latent-form compile: find circuit parameters phi with "
                    "U(phi) diag(q) U(phi)^dag close to the fitted Gibbs state.",
        epilog="example: thermoseed compile model.npz --ansatz strong --layers 8 "
               "--out compile.npz")
    p.add_argument("model", help="model file from 'thermoseed fit'")
    p.add_argument("--out", required=True, help="compile file to write (.npz)")
    p.add_argument("--ansatz", choices=TEMPLATE_NAMES, default="strong",
                   help="built-in template of the circuit (default strong)")
    p.add_argument("--layers", type=_positive_int, help="layers (default 2 per qubit)")
    p.add_argument("--latent", choices=["spectrum", "product"], default="spectrum",
                   help="latent distribution: top eigenvalues or a trainable product")
    p.add_argument("--k", type=_positive_int, help="latent basis states (default: by weight)")
    p.add_argument("--weight", type=_nonneg_float, default=0.999,
                   help="spectral weight the latent states must hold (default 0.999)")
    p.add_argument("--restarts", type=_positive_int, default=3,
                   help="seeded random starts, best kept (default 3)")
    p.add_argument("--max-iter", type=_positive_int, default=300,
                   help="L-BFGS iterations per start (default 300)")
    p.add_argument("--seed", type=_nonneg_int, default=0, help="seed of the starts")
    p.add_argument("--data", help="training data, for the report")
    p.add_argument("--convergence-plot", metavar="PNG",
                   help="also write a PNG of the compile objective per iteration")

    p = _subcommand(
        sub, "warm-start", _cmd_warm_start,
        help="write warm-start parameters for a downstream circuit",
        description="Encoder parameters from a compile plus an identity head, as one "
                    "parameter array in an .npz (key 'params').",
        epilog="example: thermoseed warm-start compile.npz --head soft --head-layers 1 "
               "--out params.npz")
    p.add_argument("compile", help="compile file")
    p.add_argument("--out", required=True, help="parameter file to write (.npz)")
    p.add_argument("--head", choices=["soft"], help="identity head template (omit: no head)")
    p.add_argument("--head-layers", type=_positive_int, default=1,
                   help="layers of the head (default 1)")

    p = _subcommand(
        sub, "sweep", _cmd_sweep,
        help="gradient-variance sweep over qubit counts and initialisations",
        description="Gradient of a cost at initialisation for every (n, strategy, cost, seed); "
                    "one JSON line per job in the results file, rerun to resume.",
        epilog="examples:\n  thermoseed sweep --sizes 2,4,6 --strategies uniform,identity_blocks "
               "--seeds 20 --out results.jsonl\n"
               "  thermoseed sweep --sizes 4,6 --strategies pretrained,uniform --costs classifier "
               "--data 4=four.npz,6=six.npz --fields XYZ --couplings ZZ --out cls.jsonl")
    p.add_argument("--out", required=True, help="results file (.jsonl), appended and resumed")
    p.add_argument("--sizes", type=_int_list, required=True, help="qubit counts, e.g. 2,4,6")
    p.add_argument("--strategies", type=_names,
                   default=["uniform", "small_angle", "identity_blocks"],
                   help="uniform, small_angle, identity_blocks, pretrained, "
                        "pretrained_perturbed (default: the first three)")
    p.add_argument("--costs", type=_names, default=["local", "global"],
                   help="local, global, classifier (default local,global)")
    p.add_argument("--seeds", type=_int_at_least(2), default=20,
                   help="seeds per point (at least 2: variances need two)")
    p.add_argument("--seed", type=_nonneg_int, default=0, help="first seed")
    p.add_argument("--depths", type=_int_list, help="layers per block (default: n)")
    p.add_argument("--template", choices=TEMPLATE_NAMES, default="soft",
                   help="template of both blocks of V = U(h) U(e)^dag (default soft)")
    p.add_argument("--data", type=_data_files,
                   help="labelled data for the classifier cost and pretrained strategies: one "
                        "file (e.g. a run folder's data.npz) or one per qubit count, "
                        "4=a.npz,6=b.npz")
    _add_model_options(p, "Gibbs model of the pre-trained starts (as in 'thermoseed fit')")
    p.add_argument("--workers", type=_positive_int, help="local processes (default all cores)")
    p.add_argument("--scheduler", help="dask scheduler address (needs the 'cluster' extra)")

    p = _subcommand(
        sub, "report", _cmd_report, help="render plots and a Markdown report from sweep results",
        epilog="example: thermoseed report results.jsonl --out plateau-report")
    p.add_argument("results", help="results file from 'thermoseed sweep' or a run folder")
    p.add_argument("--out", required=True, help="folder for report.md and PNGs")
    p.add_argument("--title", default="Plateau comparison", help="report title")
    p.add_argument("--target", type=_nonneg_float, default=0.9,
                   help="held-out accuracy for steps-to-target (default 0.9)")

    p = _subcommand(
        sub, "run", _cmd_run,
        help="run a recipe end to end (fit, compile, warm start, compare, report)",
        description="Run a TOML recipe: built-in names are magnet-phase, probe-drift, "
                    "neighbour-xxz; or give a path to your own .toml.",
        epilog="examples:\n  thermoseed run magnet-phase\n"
               "  thermoseed run my_recipe.toml --qubits 6 --out runs/six")
    p.add_argument("recipe", help="built-in recipe name or path to a .toml file")
    p.add_argument("--out", help="run folder (default thermoseed-runs/<name>)")
    p.add_argument("--qubits", type=_positive_int, help="override the recipe's qubit count")
    p.add_argument("--seed", type=_nonneg_int, help="override the recipe's seed")
    p.add_argument("--quick", action="store_true", help="smallest settings (smoke run)")
    p.add_argument("--workers", type=_positive_int,
                   help="local processes for the sweep stage (default all cores)")

    p = _subcommand(
        sub, "inspect", _cmd_inspect, help="show what is inside a model, compile or result file",
        epilog="example: thermoseed inspect model.npz")
    p.add_argument("file", help="any .npz thermoseed wrote")
    return parser


#: Python spellings in library messages and their command-line options (one message table
#: serves both: the library words its advice for Python, the CLI translates it here).
CLI_WORDS = (
    (re.compile(r"pass kind='states' or kind='density'"), "pass --kind states or --kind density"),
    (re.compile(r"leave kind\b"), "leave --kind"),
    (re.compile(r"kind = '(\w+)' was given"), r"--kind \1 was given"),
    (re.compile(r"renormalize=True"), "--renormalize"),
    (re.compile(r"pass data=\{(\d+): LabelledData\(\.\.\.\), \.\.\.\}"),
     r"pass --data with labelled states at n = \1"),
    (re.compile(r"\braise max_iter\b"), "raise --max-iter"),
    (re.compile(r"\bloosen tol\b"), "loosen --tol"),
    (re.compile(r"\bset l2 > 0\b"), "pass --l2 > 0"),
)


def cli_words(message: str) -> str:
    """A library message with its Python spellings replaced by the command-line options."""
    for pattern, replacement in CLI_WORDS:
        message = pattern.sub(replacement, message)
    return message


def _one_line_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Warnings reach CLI users as one line with the advice, not a source listing."""
    print(f"thermoseed: warning: {cli_words(str(message))}", file=sys.stderr)


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code."""
    parser = build_parser()
    argv = sys.argv[1:] if argv is None else list(argv)
    if not argv:  # bare `thermoseed`: the help, not a usage error
        parser.print_help()
        return 0
    args = parser.parse_args(argv)
    import warnings

    try:
        with warnings.catch_warnings():
            if not args.debug:
                warnings.showwarning = _one_line_warning
            return args.handler(args) or 0
    except ThermoseedError as err:
        if args.debug:
            raise
        print(f"thermoseed: error: {cli_words(str(err))}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        if args.debug:
            raise
        print("thermoseed: interrupted; finished work is on disk, rerun the same command "
              "to resume", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
