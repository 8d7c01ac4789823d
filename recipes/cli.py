"""The ``thermoseed`` command line (also ``python -m thermoseed.recipes``).

Parsing lives here (option value types in ``cli_values``, the subcommands in ``commands``:
thin wrappers over public library calls that import the library late, so ``--help`` is
instant). User errors (``ThermoseedError``) print
one line on stderr and exit 1; argparse keeps exit 2 for usage errors; ``--debug`` re-raises.
"""

from __future__ import annotations

import argparse
import re
import sys

from thermoseed.pretrain.errors import ThermoseedError
from thermoseed.recipes.cli_values import (
    data_files,
    edge_list,
    grid_shape,
    int_at_least,
    int_list,
    names,
    nonneg_float,
    nonneg_int,
    positive_int,
    word_list,
)
from thermoseed.recipes.commands import (
    compile_command,
    fit_command,
    inspect_command,
    report_command,
    run_command,
    sweep_command,
    warm_start_command,
)
from thermoseed.recipes.config import GRAPH_NAMES, TEMPLATE_NAMES


def _version() -> str:
    """The installed distribution's version (no library import: ``--help`` stays instant)."""
    from importlib import metadata

    try:
        return metadata.version("thermoseed")
    except metadata.PackageNotFoundError:  # running from a source tree without install
        return "unknown"


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
    parser.add_argument("--couplings", type=word_list, default=["ZZ", "XX"],
                        help="comma-separated letter pairs on each edge (default ZZ,XX)")
    parser.add_argument("--parity", action="store_true",
                        help="add the global X/Y parity strings and Z...Z (they see a GHZ "
                             "phase)")
    parser.add_argument("--l2", type=nonneg_float, default=1e-3,
                        help="L2 penalty (default 1e-3: pure or low-rank data need one)")
    return parser


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
        sub, "fit", fit_command, help="fit a Gibbs model to a data file (.npy/.npz)",
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
    terms.add_argument("--shape", type=grid_shape, help="grid rows x columns, e.g. 2x3")
    terms.add_argument("--edges", type=edge_list,
                       help="edge list for --graph edges, e.g. 0-1,1-2")
    terms.add_argument("--extra", type=word_list, default=[], help="extra Pauli labels")
    p.add_argument("--solver", choices=["lbfgs", "adam"], default="lbfgs",
                   help="lbfgs (exact moments) or adam (noisy moments)")
    p.add_argument("--tol", type=nonneg_float, default=1e-6, help="gradient-norm tolerance")
    p.add_argument("--max-iter", type=positive_int, default=500, help="iteration cap")
    p.add_argument("--seed", type=nonneg_int, default=0, help="seed of the initial point")
    p.add_argument("--checkpoint", help="checkpoint file: saved during the fit, resumed from")
    p.add_argument("--convergence-plot", metavar="PNG",
                   help="also write a PNG of the loss and gradient norm per iteration")

    p = _subcommand(
        sub, "compile", compile_command, help="compile a fitted model into a parameterised circuit",
        description="Latent-form compile: find circuit parameters phi with "
                    "U(phi) diag(q) U(phi)^dag close to the fitted Gibbs state.",
        epilog="example: thermoseed compile model.npz --ansatz strong --layers 8 "
               "--out compile.npz")
    p.add_argument("model", help="model file from 'thermoseed fit'")
    p.add_argument("--out", required=True, help="compile file to write (.npz)")
    p.add_argument("--ansatz", choices=TEMPLATE_NAMES, default="strong",
                   help="built-in template of the circuit (default strong)")
    p.add_argument("--layers", type=positive_int, help="layers (default 2 per qubit)")
    p.add_argument("--latent", choices=["spectrum", "product"], default="spectrum",
                   help="latent distribution: top eigenvalues or a trainable product")
    p.add_argument("--k", type=positive_int, help="latent basis states (default: by weight)")
    p.add_argument("--weight", type=nonneg_float, default=0.999,
                   help="spectral weight the latent states must hold (default 0.999)")
    p.add_argument("--restarts", type=positive_int, default=3,
                   help="seeded random starts, best kept (default 3)")
    p.add_argument("--small-starts", type=nonneg_int, default=1,
                   help="how many of the starts begin at small angles near the circuit's "
                        "zero point; the others are uniform on [0, 2 pi) (default 1)")
    p.add_argument("--max-iter", type=positive_int, default=300,
                   help="L-BFGS iterations per start and stage (default 300)")
    p.add_argument("--screen-iter", type=positive_int,
                   help="spectrum latent: eigenvector-fit iterations every start gets before "
                        "the best one goes on (default: --max-iter); e.g. --restarts 8 "
                        "--small-starts 8 --screen-iter 300 --max-iter 3000 for 8 qubits")
    p.add_argument("--seed", type=nonneg_int, default=0, help="seed of the starts")
    p.add_argument("--data", help="training data, for the report")
    p.add_argument("--convergence-plot", metavar="PNG",
                   help="also write a PNG of the compile objective per iteration")

    p = _subcommand(
        sub, "warm-start", warm_start_command,
        help="write warm-start parameters for a downstream circuit",
        description="Encoder parameters from a compile plus an identity head, as one "
                    "parameter array in an .npz (key 'params').",
        epilog="example: thermoseed warm-start compile.npz --head soft --head-layers 1 "
               "--out params.npz")
    p.add_argument("compile", help="compile file")
    p.add_argument("--out", required=True, help="parameter file to write (.npz)")
    p.add_argument("--head", choices=["soft"], help="identity head template (omit: no head)")
    p.add_argument("--head-layers", type=positive_int, default=1,
                   help="layers of the head (default 1)")

    p = _subcommand(
        sub, "sweep", sweep_command,
        help="gradient-variance sweep over qubit counts and initialisations",
        description="Gradient of a cost at initialisation for every (n, strategy, cost, seed); "
                    "one JSON line per job in the results file, rerun to resume.",
        epilog="examples:\n  thermoseed sweep --sizes 2,4,6 --strategies uniform,identity_blocks "
               "--seeds 20 --out results.jsonl\n"
               "  thermoseed sweep --sizes 4,6 --strategies pretrained,uniform --costs classifier "
               "--data 4=four.npz,6=six.npz --fields XYZ --couplings ZZ --out cls.jsonl")
    p.add_argument("--out", required=True, help="results file (.jsonl), appended and resumed")
    p.add_argument("--sizes", type=int_list, required=True, help="qubit counts, e.g. 2,4,6")
    p.add_argument("--strategies", type=names,
                   default=["uniform", "small_angle", "identity_blocks"],
                   help="uniform, small_angle, identity_blocks, pretrained, "
                        "pretrained_perturbed, class_models (default: the first three)")
    p.add_argument("--costs", type=names, default=["local", "global"],
                   help="local, global, classifier (default local,global)")
    p.add_argument("--seeds", type=int_at_least(2), default=20,
                   help="seeds per point (at least 2: variances need two)")
    p.add_argument("--seed", type=nonneg_int, default=0, help="first seed")
    p.add_argument("--depths", type=int_list, help="layers per block (default: n)")
    p.add_argument("--template", choices=TEMPLATE_NAMES, default="soft",
                   help="template of both blocks of V = U(h) U(e)^dag (default soft)")
    p.add_argument("--data", type=data_files,
                   help="labelled data for the classifier cost and pretrained strategies: one "
                        "file (e.g. a run folder's data.npz) or one per qubit count, "
                        "4=a.npz,6=b.npz")
    _add_model_options(p, "Gibbs model of the pre-trained starts (as in 'thermoseed fit')")
    p.add_argument("--workers", type=positive_int, help="local processes (default all cores)")
    p.add_argument("--scheduler", help="dask scheduler address (needs the 'cluster' extra)")

    p = _subcommand(
        sub, "report", report_command, help="render plots and a Markdown report from sweep results",
        epilog="example: thermoseed report results.jsonl --out plateau-report")
    p.add_argument("results", help="results file from 'thermoseed sweep' or a run folder")
    p.add_argument("--out", required=True, help="folder for report.md and PNGs")
    p.add_argument("--title", default="Plateau comparison", help="report title")
    p.add_argument("--target", type=nonneg_float, default=0.9,
                   help="held-out accuracy for steps-to-target (default 0.9)")

    p = _subcommand(
        sub, "run", run_command,
        help="run a recipe end to end (fit, compile, warm start, compare, report)",
        description="Run a TOML recipe: built-in names are magnet-phase, probe-drift, "
                    "neighbour-xxz; or give a path to your own .toml.",
        epilog="examples:\n  thermoseed run magnet-phase\n"
               "  thermoseed run my_recipe.toml --qubits 6 --out runs/six")
    p.add_argument("recipe", help="built-in recipe name or path to a .toml file")
    p.add_argument("--out", help="run folder (default thermoseed-runs/<name>)")
    p.add_argument("--qubits", type=positive_int, help="override the recipe's qubit count")
    p.add_argument("--seed", type=nonneg_int, help="override the recipe's seed")
    p.add_argument("--quick", action="store_true", help="smallest settings (smoke run)")
    p.add_argument("--workers", type=positive_int,
                   help="local processes for the sweep stage (default all cores)")

    p = _subcommand(
        sub, "inspect", inspect_command, help="show what is inside a model, compile or result file",
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
