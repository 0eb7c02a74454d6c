"""The ``vfactor`` command line (ARCHITECTURE section 5): argparse only, no physics.

Exit codes: 0 success; 1 runtime failure (an internal error: one line, the traceback only
with ``--verbose``); 2 bad input (a model, mesh, results file or argument that cannot be
used: one line ``vfactor: error: <message>`` on standard error, never a traceback, also
with ``--verbose``). Argument errors are one line too (``vfactor: error: <problem>; see
vfactor CMD --help``), not argparse's usage block.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
import traceback
from pathlib import Path

from .errors import VfactorError

__all__ = ["main", "build_parser"]

PROG = "vfactor"


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("vfactor")
    except PackageNotFoundError:  # pragma: no cover - uninstalled source tree
        return "0+unknown"


class _Formatter(argparse.RawDescriptionHelpFormatter):
    """Keeps the line breaks of descriptions and examples."""


class _UsageError(Exception):
    """A command line argparse refused: ``prog`` is the (sub)command, ``message`` why."""

    def __init__(self, prog: str, message: str):
        super().__init__(message)
        self.prog = prog
        self.message = message


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose errors become one line (see :func:`main`) instead of the
    usage block and ``sys.exit(2)``; sub-parsers are of the same class."""

    def error(self, message):
        raise _UsageError(self.prog, message)


def _common() -> argparse.ArgumentParser:
    p = _Parser(add_help=False)
    g = p.add_argument_group("output")
    g.add_argument("-q", "--quiet", action="store_true", default=argparse.SUPPRESS,
                   help="print nothing but errors (no progress bar, no summary lines)")
    g.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS,
                   help="report each stage on standard error; full traceback on internal errors")
    return p


def _positive_int(text: str) -> int:
    try:
        value = int(text.replace("_", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if not 0 <= value < 2 ** 64:
        raise argparse.ArgumentTypeError(f"must be between 0 and 2**64 - 1, got {value}")
    return value


def _threshold(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value >= 0:
        raise argparse.ArgumentTypeError(f"must be >= 0, got {text}")
    return value


def _beta_list(text: str) -> tuple:
    from .sweep import parse_beta_list

    try:
        return parse_beta_list(text)
    except VfactorError as exc:
        raise argparse.ArgumentTypeError(str(exc).removeprefix("--beta: ")) from None


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``vfactor`` command."""
    common = _common()
    parser = _Parser(
        prog=PROG, formatter_class=_Formatter,
        description="Monte Carlo radiative couplings (view factors, Gebhart factors, exchange "
                    "areas)\nand orbital heat loads (solar, albedo, planet IR) of a "
                    "spacecraft, from a\ntriangulated model, into one HDF5 file for a thermal "
                    "network solver.",
        epilog="examples:\n"
               "  vfactor demo                         # copy and run the invented demo model\n"
               "  vfactor check sat.toml\n"
               "  vfactor run sat.toml -o sat.h5 --workers 2\n"
               "  vfactor summary sat.h5\n"
               "  vfactor plot sat.h5 -o figures\n"
               "  vfactor export sat.h5 --format csv -o tables\n\n"
               "exit codes: 0 success, 1 runtime failure, 2 bad input (model, mesh, "
               "arguments).\nRun `vfactor COMMAND --help` for the options of a command.")
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    parser.add_argument("-q", "--quiet", action="store_true", default=False,
                        help="print nothing but errors")
    parser.add_argument("-v", "--verbose", action="store_true", default=False,
                        help="report each stage; full traceback on internal errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", title="commands")

    p = sub.add_parser(
        "check", parents=[common], formatter_class=_Formatter,
        help="validate a model file and its geometry, list problems",
        description="Read MODEL, build its geometry and list every problem found.\n"
                    "Exit 0 when the model can be run (warnings allowed), 2 when it cannot.",
        epilog="examples:\n  vfactor check meshes/demo.toml\n  vfactor check sat.toml || echo 'fix the model first'")
    p.add_argument("model", metavar="MODEL", help="model file (TOML)")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser(
        "run", parents=[common], formatter_class=_Formatter,
        help="compute couplings (and heat loads when the model has an orbit)",
        description="Compute view factors, Gebhart factors and exchange areas of MODEL, and,\n"
                    "when the model has an [orbit], the trajectory and the absorbed solar, "
                    "albedo\nand planet-IR heat loads; write everything to one HDF5 file.\n"
                    "The file is written under a temporary name and renamed when complete.",
        epilog="examples:\n"
               "  vfactor run sat.toml -o sat.h5\n"
               "  vfactor run sat.toml -o sat.h5 --rays 1000000 --seed 7\n"
               "  vfactor run sat.toml -o sat.h5 --workers 2 --resume\n"
               "  vfactor run sat.toml -o sat.h5 --scheduler tcp://10.0.0.5:8786   # needs the dask extra\n\n"
               "Results are bit-identical for any --workers, --scheduler or --resume at a "
               "given seed.")
    p.add_argument("model", metavar="MODEL", help="model file (TOML)")
    p.add_argument("-o", "--output", metavar="OUT.h5", required=True, help="results file to write")
    p.add_argument("--rays", metavar="N", type=_positive_int,
                   help="rays emitted per node (default: [radiation] rays_per_node of the model)")
    p.add_argument("--seed", metavar="S", type=_seed,
                   help="random seed (default: [radiation] seed of the model)")
    par = p.add_mutually_exclusive_group()
    par.add_argument("--workers", metavar="N", type=_positive_int, default=1,
                     help="processes on this machine that share the ray tracing (default 1)")
    par.add_argument("--scheduler", metavar="ADDRESS",
                     help="dask.distributed scheduler to share the ray tracing with "
                          "(pip install 'vfactor[dask]')")
    p.add_argument("--resume", action="store_true",
                   help="keep finished work in OUT.h5.partial and continue from it on a rerun")
    p.add_argument("--facet-factors", action="store_true",
                   help="also store facet-to-node view factors (sparse) in the results")
    p.add_argument("--case", metavar="NAME", action="append", dest="cases",
                   help="for a model with [[cases]]: compute only this case (repeat for "
                        "several; default: every case)")
    p.set_defaults(func=_cmd_run)

    p = sub.add_parser(
        "summary", parents=[common], formatter_class=_Formatter,
        help="print tables of nodes, couplings and orbit heat loads",
        description="Print the provenance of a run, the node table, the strongest couplings\n"
                    "with their statistical error, couplings to space, orbit facts, the "
                    "per-node\nheat loads and the cautions that go with them.",
        epilog="examples:\n  vfactor summary sat.h5\n  vfactor summary sat.h5 --top 40\n"
               "  vfactor summary sat.h5 --json > sat-summary.json")
    p.add_argument("results", metavar="OUT.h5", help="results file of `vfactor run`")
    p.add_argument("--json", action="store_true", help="machine-readable JSON instead of text")
    p.add_argument("--top", metavar="N", type=_positive_int, default=15,
                   help="number of strongest node-pair couplings (and, on models of many "
                        "nodes, of most loaded nodes) to list (default 15)")
    p.add_argument("--all-nodes", action="store_true",
                   help="list every node even on models of more than 200 nodes (whose "
                        "tables are otherwise summed by part)")
    p.add_argument("--case", metavar="NAME",
                   help="for a results file with design cases: the full summary of this "
                        "case (default: the first, followed by the comparison of all)")
    p.set_defaults(func=_cmd_summary)

    p = sub.add_parser(
        "plot", parents=[common], formatter_class=_Formatter,
        help="write PNG figures of a run",
        description="Write PNG figures: absorbed heat per node along the orbit, the "
                    "time-averaged\nabsorbed flux on the geometry, the coupling matrix and "
                    "the orbit geometry.",
        epilog="examples:\n  vfactor plot sat.h5 -o figures")
    p.add_argument("results", metavar="OUT.h5", help="results file of `vfactor run`")
    p.add_argument("-o", "--output", metavar="DIR", required=True,
                   help="folder for the figures (created if missing)")
    p.add_argument("--case", metavar="NAME",
                   help="for a results file with design cases: only this case's figures "
                        "(default: every case in DIR/CASE/, and cases.png comparing them)")
    p.set_defaults(func=_cmd_plot)

    p = sub.add_parser(
        "export", parents=[common], formatter_class=_Formatter,
        help="export CSV tables, or per-facet results as VTK / glTF",
        description="csv : nodes.csv, couplings.csv, conductances.csv, heat_loads.csv and "
                    "the per-step tables loads_*, flux_*, incident_*, planet_view_unblocked in "
                    "folder PATH (units in the header)\nvtk : PATH.vtu, facets with per-facet "
                    "results as cell data (ParaView), PATH_nodes.csv (node names) and, with an "
                    "orbit, PATH.pvd with one file per step in PATH_steps/\ngltf: PATH.glb, "
                    "facets coloured by the time-averaged absorbed flux",
        epilog="examples:\n  vfactor export sat.h5 --format csv -o tables\n"
               "  vfactor export sat.h5 --format csv -o tables --threshold 1e-3\n"
               "  vfactor export sat.h5 --format vtk -o sat.vtu\n"
               "  vfactor export sat.h5 --format gltf -o sat.glb")
    p.add_argument("results", metavar="OUT.h5", help="results file of `vfactor run`")
    p.add_argument("--format", required=True, choices=("csv", "vtk", "gltf"),
                   help="output format")
    p.add_argument("-o", "--output", metavar="PATH", required=True,
                   help="folder (csv) or file (vtk, gltf)")
    p.add_argument("--threshold", metavar="X", type=_threshold, default=None,
                   help="csv: smallest view factor or Gebhart factor listed in couplings.csv "
                        "(default 1e-4)")
    p.add_argument("--self-terms", action="store_true",
                   help="csv: also list a node's exchange with itself in conductances.csv")
    p.add_argument("--case", metavar="NAME",
                   help="for a results file with design cases: only this case (default: "
                        "every case, csv in PATH/CASE/, vtk and gltf as PATH_CASE.vtu/.glb)")
    p.set_defaults(func=_cmd_export)

    p = sub.add_parser(
        "solve", parents=[common], formatter_class=_Formatter,
        help="quick-look temperatures from the couplings and heat loads",
        description="Solve the thermal network of a results file: the steady temperatures "
                    "under the\norbit-average loads and the cyclic transient over the orbit, "
                    "with the one-sigma\nstatistical error carried from the couplings and "
                    "loads. Capacities, dissipation,\nlinks, heaters and blankets come from "
                    "the model's [network] section. The temperatures\nare added to OUT.h5 "
                    "(/temperatures); -o also writes CSV tables and a figure.\nA quick-look "
                    "check of the inputs, not a substitute for a verified thermal model.",
        epilog="examples:\n  vfactor solve sat.h5\n  vfactor solve sat.h5 -o temperatures\n"
               "  vfactor solve sat.h5 --case hot --model sat-edited.toml -o temperatures")
    p.add_argument("results", metavar="OUT.h5", help="results file of `vfactor run`")
    p.add_argument("-o", "--output", metavar="DIR",
                   help="also write temperatures.csv, temperature_nodes.csv and "
                        "temperatures.png here (DIR/CASE/ with several cases)")
    p.add_argument("--case", metavar="NAME", help="only this design case (default: every case)")
    p.add_argument("--model", metavar="MODEL",
                   help="take the [network] section from this model file instead of the "
                        "model stored in the results (the couplings and loads stay those "
                        "of the run)")
    p.set_defaults(func=_cmd_solve)

    p = sub.add_parser(
        "sweep", parents=[common], formatter_class=_Formatter,
        help="orbit heat loads over a range of beta angles (hot and cold orbits)",
        description="Compute the orbit-average and peak absorbed heat per node of MODEL on "
                    "its circular\n[orbit] with the node turned to give each beta angle of "
                    "LIST (raan_deg and ltan\nreplaced); the geometry, view factors and "
                    "escaping directions are computed once.\nWrites OUT_DIR/sweep.csv and "
                    "OUT_DIR/sweep.png and prints each node's hottest and\ncoldest beta.",
        epilog="examples:\n"
               "  vfactor sweep sat.toml --beta 0,15,30,45,60,75 -o sweep\n"
               "  vfactor sweep sat.toml --beta 0:70:2.5 -o sweep\n"
               "  vfactor sweep sat.toml --beta=-60:60:10 -o sweep   # '=' before a "
               "leading minus sign")
    p.add_argument("model", metavar="MODEL", help="model file (TOML) with a circular [orbit]")
    p.add_argument("--beta", metavar="LIST", type=_beta_list,
                   help="beta angles [deg]: comma-separated values and START:STOP:STEP "
                        "ranges (STOP included), within -90 .. 90 (default: [sweep] "
                        "beta_deg of the model)")
    p.add_argument("-o", "--output", metavar="OUT_DIR", required=True,
                   help="folder for sweep.csv and sweep.png (created if missing)")
    p.add_argument("--rays", metavar="N", type=_positive_int,
                   help="rays emitted per node for the view factors (default: [radiation] "
                        "rays_per_node of the model)")
    p.add_argument("--seed", metavar="S", type=_seed,
                   help="random seed (default: [radiation] seed of the model)")
    p.set_defaults(func=_cmd_sweep)

    p = sub.add_parser(
        "demo", parents=[common], formatter_class=_Formatter,
        help="copy the invented demo model to DIR and run it",
        description="Copy the demo model (an invented small satellite) into DIR and run "
                    "check,\nrun, summary and plot on it; print where the outputs are.",
        epilog="examples:\n  vfactor demo\n  vfactor demo my-demo --rays 20000")
    p.add_argument("folder", metavar="DIR", nargs="?", default="vfactor-demo",
                   help="folder to create or reuse (default vfactor-demo)")
    p.add_argument("--rays", metavar="N", type=_positive_int,
                   help="rays per node (default: the demo model's own setting)")
    p.add_argument("--workers", metavar="N", type=_positive_int, default=1,
                   help="processes sharing the ray tracing (default 1)")
    p.set_defaults(func=_cmd_demo)
    return parser


# ---------------------------------------------------------------------------------------
# Commands
# ---------------------------------------------------------------------------------------
def _say(args, text: str) -> None:
    if not args.quiet:
        print(text, flush=True)


def _reporter(args):
    from .progress import make_reporter

    return make_reporter(quiet=args.quiet, verbose=args.verbose)


def _cmd_check(args) -> int:
    """The report on standard output; its error lines (one per problem) on standard
    error, like every other command's bad input."""
    from .checks import check_model, format_check_report

    report = check_model(args.model)
    for line in format_check_report(report, only_errors=True).splitlines():
        print(line, file=sys.stderr, flush=True)
    _say(args, format_check_report(report, errors=False).rstrip("\n"))
    return 0 if report.ok else 2


def _cmd_run(args) -> int:
    from .pipeline import run

    result = run(args.model, args.output, rays=args.rays, seed=args.seed, workers=args.workers,
                 scheduler=args.scheduler, resume=args.resume, facet_factors=args.facet_factors,
                 cases=args.cases, reporter=_reporter(args))
    _say(args, result.describe())
    return 0


def _cmd_summary(args) -> int:
    from .casecompare import summary_of_file

    print(summary_of_file(args.results, case=args.case, top=args.top,
                          all_nodes=args.all_nodes, as_json=args.json), end="")
    return 0


def _cmd_plot(args) -> int:
    from .caseplots import plot_file

    for f in plot_file(args.results, args.output, case=args.case):
        _say(args, f"wrote {f}")
    return 0


def _cmd_export(args) -> int:
    from .export import DEFAULT_THRESHOLD, export_cases

    threshold = DEFAULT_THRESHOLD if args.threshold is None else args.threshold
    files = export_cases(args.results, args.format, args.output, case=args.case,
                         threshold=threshold, self_terms=args.self_terms)
    for f in files:
        _say(args, f"wrote {f}")
    return 0


def _cmd_solve(args) -> int:
    from .solve import format_temperatures, solve_file

    solved = solve_file(args.results, case=args.case, model=args.model,
                        reporter=_reporter(args))
    if not args.quiet:
        print(format_temperatures(solved), end="")
    if args.output:
        from .tempout import write_outputs

        for f in write_outputs(solved, args.output, inputs=[args.results]):
            _say(args, f"wrote {f}")
    return 0


def _cmd_sweep(args) -> int:
    from .sweep import format_sweep_table, run_sweep

    from .sweep import model_beta_list

    beta = args.beta if args.beta is not None else model_beta_list(args.model)
    done = run_sweep(args.model, beta, args.output, rays=args.rays, seed=args.seed,
                     reporter=_reporter(args))
    sweep = done.sweep
    _say(args, format_sweep_table(sweep))
    for note in sweep.notes:
        _say(args, note if note.startswith("warning: ") else f"note: {note}")
    for f in done.files:
        _say(args, f"wrote {f}")
    _say(args, f"{sweep.beta_deg.size} beta values x {sweep.steps} steps, "
               f"{len(sweep.node_names)} nodes: {done.elapsed_s:.1f} s")
    return 0


def _cmd_demo(args) -> int:
    from .demo import run_demo

    return run_demo(Path(args.folder), rays=args.rays, workers=args.workers, quiet=args.quiet,
                    verbose=args.verbose)


# ---------------------------------------------------------------------------------------
# Entry point
# ---------------------------------------------------------------------------------------
def _one_line(text) -> str:
    """The message on one line, with every non-printable character escaped."""
    text = " ".join(str(text).split())
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


def main(argv=None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``); return the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help and --version (0)
        return int(exc.code) if isinstance(exc.code, int) else (0 if exc.code is None else 2)
    except _UsageError as exc:
        print(f"{PROG}: error: {_one_line(exc.message)}; see {exc.prog} --help",
              file=sys.stderr, flush=True)
        return 2
    for flag in ("quiet", "verbose"):
        if not hasattr(args, flag):
            setattr(args, flag, False)
    if args.command is None:
        print(f"{PROG}: error: no command given; see {PROG} --help", file=sys.stderr,
              flush=True)
        return 2
    try:
        return int(args.func(args))
    except VfactorError as exc:
        # bad input: one line, never a traceback (--verbose shows them for bugs only)
        print(f"{PROG}: error: {_one_line(exc)}", file=sys.stderr, flush=True)
        return 2
    except BrokenPipeError:
        # the reader of standard output went away (`vfactor summary OUT.h5 | head`): stop
        # quietly; point stdout at devnull so the flush at exit does not fail again
        # (Python library reference, signal module, "Note on SIGPIPE")
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
        except (OSError, ValueError, AttributeError):
            pass
        return 1
    except KeyboardInterrupt as exc:
        hint = ""
        if getattr(args, "command", None) == "run":
            hint = ("; finished work is kept, rerun with --resume to continue"
                    if args.resume else "; with --resume a rerun would continue from here")
        signum = getattr(exc, "signum", None)      # pipeline.RunTerminated: SIGTERM, SIGHUP
        what = f"terminated ({signal.Signals(signum).name})" if signum else "interrupted"
        print(f"{PROG}: {what}{hint}", file=sys.stderr, flush=True)
        # exit status of a process ended by a signal: 128 + its number (POSIX shells,
        # common practice); Ctrl-C keeps 1 as documented
        return 128 + signum if signum else 1
    except Exception as exc:  # noqa: BLE001 - the one place every other failure is reported
        if args.verbose:
            traceback.print_exc()
            print(f"{PROG}: internal error: {type(exc).__name__}: {_one_line(exc)}",
                  file=sys.stderr, flush=True)
        else:
            print(f"{PROG}: internal error: {type(exc).__name__}: {_one_line(exc)} "
                  "(run with --verbose for the traceback)", file=sys.stderr, flush=True)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
