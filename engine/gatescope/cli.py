"""The `gatescope` command line (README, "Commands"). Thin: it parses
arguments, checks them with the same functions the Python API uses
(`gatescope.options`, taking every choice from the registry that owns it),
calls the same public functions a notebook would, and turns `InputError`
into exit status 2 (bad input or usage) — anything else unexpected is 1.
"""

from __future__ import annotations

import argparse
import signal
import sys
import warnings
from pathlib import Path

from . import options
from .errors import GatescopeWarning, InputError, NumericalError
from .errors import printable as clean

DEMO_DATASET = "cz_bench_b"
DEMO_OUTPUT = "gatescope-demo"


class _Parser(argparse.ArgumentParser):
    def error(self, message):                      # usage errors: status 2, as argparse does
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {message}\n")


def _show_warning(message, category, filename, lineno, file=None, line=None):
    sys.stderr.write(f"warning: {message}\n")


class Terminated(KeyboardInterrupt):
    """SIGTERM, turned into the same unwinding as Ctrl-C: the parallel runner stops its
    workers, a file being written is removed, and the command exits with status 1."""


def _terminate(signum, frame):
    raise Terminated()


def _typed(argv, *spellings) -> str:
    """The spelling of an option the user typed (``-o`` or ``--output``), for messages."""
    for arg in argv:
        for spelling in spellings:
            if arg == spelling or arg.startswith(spelling + "="):
                return spelling
    return spellings[-1]


def build_parser() -> argparse.ArgumentParser:
    from .bootstrap import KINDS
    from .conventions import GATE_NAMES
    from .estimators import METHODS
    from .intervals import DEFAULT_INTERVAL, FIT_INTERVALS
    from .pipeline import default_interval_words
    from .synth.noise import spec_forms
    from .synth.state import STATE_NOISE_KINDS

    p = _Parser(prog="gatescope",
                description="Quantum process and state tomography from laboratory counts.")
    p.add_argument("--version", action="store_true", help="print the version and exit")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    f = sub.add_parser("fit", help="reconstruct the process of an experiment and write the result file")
    f.add_argument("experiment", help="experiment.toml")
    f.add_argument("-o", "--output", help="result file (default: result.h5 beside the experiment)")
    f.add_argument("--method", choices=METHODS, default="mle", help="estimator (default mle)")
    f.add_argument("--bootstrap", type=int, default=0, metavar="B", help="number of resamples for error bars")
    f.add_argument("--bootstrap-kind", choices=KINDS, default=KINDS[0])
    f.add_argument("--ci-level", type=float, default=0.95, metavar="LEVEL", help="confidence level (fraction)")
    f.add_argument("--interval", choices=FIT_INTERVALS, default=None,
                   help="interval construction: a bootstrap one, profile (profile likelihood "
                        "for the fidelities and the purity, the bootstrap's "
                        f"{DEFAULT_INTERVAL} for the rest), or test-inversion (as profile, with "
                        "the fidelities' intervals calibrated by simulated data sets; processes "
                        "of one and two qubits); default: with an mle bootstrap, "
                        f"{default_interval_words()}; {DEFAULT_INTERVAL} for the rest")
    f.add_argument("--lower-bound", action="store_true",
                   help="also the one-sided lower bound of the fidelities and the purity, at "
                        "--ci-level (test inversion where it is the default interval, profile "
                        "likelihood otherwise)")
    f.add_argument("--seed", type=int, default=None,
                   help="seed of the bootstrap and of the test inversions (recorded)")
    f.add_argument("--workers", type=int, default=None, metavar="W", help="processes (default: all cores)")
    f.add_argument("--quiet", action="store_true",
                   help="no progress, no summary: print the path of the result file only")
    f.add_argument("--force", action="store_true", help="replace an existing result file")
    f.add_argument("--json", action="store_true",
                   help="print the figures, the fit's status and the warnings as JSON")
    f.add_argument("--diamond", action="store_true",
                   help="also compute the diamond distance to the target (needs the sdp extra, cvxpy)")
    f.add_argument("--report", nargs="?", const=True, default=None, metavar="PAGE.html",
                   help="also write the HTML report (default: the result's name with .html; "
                        "needs the plot extra)")

    s = sub.add_parser("show", help="print a summary of a result file")
    s.add_argument("result", help="result.h5")
    s.add_argument("--json", action="store_true", help="print the summary as JSON")
    s.add_argument("--csv", metavar="FILE", default=None,
                   help="also write the figures table to FILE (CSV, for spreadsheets)")
    s.add_argument("--force", action="store_true", help="replace an existing --csv FILE")

    m = sub.add_parser("simulate", help="write a synthetic experiment of a known channel or state")
    src = m.add_mutually_exclusive_group(required=True)
    src.add_argument("--gate", help=f"a named gate ({' '.join(GATE_NAMES)})")
    src.add_argument("--channel", metavar="SPEC",
                     help="GATE[+TERM]... or random:RANK[:SEED][+TERM]... (README, Commands)")
    src.add_argument("--state", metavar="SPEC",
                     help="a state experiment: STATE[+KIND:P]... (STATE a product label, phi+, "
                          "phi-, psi+, psi-, GHZ or W) or random:RANK[:SEED]")
    m.add_argument("--noise", action="append", default=[], metavar="TERM",
                   help=f"noise after the gate, one of {spec_forms()} (for a state "
                        f"{', '.join(STATE_NOISE_KINDS)}; repeatable)")
    m.add_argument("--qubits", type=int, default=2,
                   help="qubits of a random channel, or of a GHZ, W or random state (default 2)")
    m.add_argument("--shots", type=float, default=1000.0, metavar="N",
                   help="expected counts per preparation and analyser basis (per analyser basis "
                        "for a state; default 1000)")
    m.add_argument("--prep", default=None, metavar="SET",
                   help="pauli6 (default), pauli4 or a comma list; not for a state")
    m.add_argument("--meas", default="pauli6", metavar="SET", help="pauli6, pauli4 or a comma list")
    m.add_argument("--seed", type=int, default=None)
    m.add_argument("--title", default=None)
    m.add_argument("-o", "--output", required=True, metavar="DIR")
    m.add_argument("--force", action="store_true",
                   help="replace the files of an earlier simulation in DIR")

    pl = sub.add_parser(
        "plan", help="write the run sheet: wave-plate angles of every (prep, meas) pair",
        description="The run sheet of a complete product experiment: one row per (prep, meas) pair "
                    "with the half- and quarter-wave plate angles of every qubit, in degrees from H "
                    "in [0, 180) (preparation: H, half-wave, quarter-wave; analysis: quarter-wave, "
                    "half-wave, H polariser). It lists optical settings only; your local "
                    "laser-safety rules apply.")
    pl.add_argument("--qubits", type=int, required=True, metavar="N", help="number of qubits")
    pl.add_argument("--prep", default=None, metavar="SET",
                    help="pauli6 (default), pauli4 or a comma list; not with --state")
    pl.add_argument("--meas", default="pauli6", metavar="SET", help="pauli6 (default), pauli4 or a comma list")
    pl.add_argument("--right-circular", default="H-iV", metavar="H-iV|H+iV",
                    help="which state R is (default H-iV)")
    pl.add_argument("--seconds", type=float, default=None, metavar="T",
                    help="integration time per row: adds a seconds column and prints the total")
    pl.add_argument("--state", action="store_true",
                    help="the sheet of a state experiment: analysers only, one row per projector")
    pl.add_argument("-o", "--output", required=True, metavar="SHEET.csv")

    sub.add_parser("demo", help="the whole job on the bundled data (a gate, then a pair source)")

    b = sub.add_parser(
        "batch", help="fit every experiment under some folders into one output folder",
        description="Fit every experiment (PATH: an experiment file, or a folder searched for "
                    "experiment.toml) into OUTDIR: one result file per experiment, summary.csv "
                    "and batch.log. Resumable (results whose input and settings match are kept), "
                    "safe to stop at any moment; exit status 1 when an experiment failed.")
    b.add_argument("paths", nargs="+", metavar="PATH", help="experiment file or folder")
    b.add_argument("-o", "--output", required=True, metavar="OUTDIR", help="output folder")
    b.add_argument("--workers", type=int, default=None, metavar="W",
                   help="local processes (default: all cores; not used with --dask)")
    b.add_argument("--bootstrap", type=int, default=0, metavar="B",
                   help="resamples per experiment for error bars (default 0)")
    b.add_argument("--method", choices=METHODS, default="mle", help="estimator (default mle)")
    b.add_argument("--seed", type=int, default=None, metavar="S",
                   help="batch seed (drawn and recorded when not given)")
    b.add_argument("--force", action="store_true", help="refit experiments that have a result")
    b.add_argument("--watch", type=float, default=None, metavar="SECONDS",
                   help="keep looking for new or changed experiments every SECONDS until stopped")
    b.add_argument("--dask", default=None, metavar="ADDRESS",
                   help="run on this dask.distributed scheduler (needs the dask extra)")
    _add_bench_parser(sub)
    _add_report_parser(sub)
    return p


def _add_report_parser(sub) -> None:
    r = sub.add_parser(
        "report", help="an HTML report of a result file, or the overview of a batch folder",
        description="RESULT.h5: one self-contained HTML page (figures with intervals, warnings, "
                    "the chi and Pauli transfer matrices or the density matrix, the data, the "
                    "bootstrap, input, conditions, provenance), by default RESULT.html. OUTDIR "
                    "of gatescope batch: the overview of every experiment, by default "
                    "OUTDIR/overview.html. Needs the plot extra (matplotlib).")
    r.add_argument("path", metavar="RESULT.h5|OUTDIR", help="a result file or a batch output folder")
    r.add_argument("-o", "--output", default=None, metavar="PAGE.html", help="the page to write")
    r.add_argument("--figures", default=None, metavar="DIR",
                   help="also write every figure as SVG, PDF and PNG (300 dpi), one column wide")
    r.add_argument("--against", default=None, metavar="CONDITION",
                   help="a batch: plot the figures against this condition (default: the name)")
    r.add_argument("--each", action="store_true",
                   help="a batch: also write the report of every experiment that has none")
    r.add_argument("--force", action="store_true", help="replace existing pages and figures")


def _add_bench_parser(sub) -> None:
    from .bench.run import DEFAULT_REPEATS
    from .intervals import DEFAULT_INTERVAL, INTERVALS

    b = sub.add_parser(
        "bench", help="how good is an estimator: repeated fits of simulated data of known channels "
                      "or states",
        description="Simulate every channel (or state) at every count level many times, fit with "
                    "every method, and tabulate the errors against the truth beside the Cramér-Rao "
                    "bound (DIR/bench.csv, DIR/bench.h5, DIR/bench.png). A rerun in the same "
                    "folder continues where it stopped.")
    b.add_argument("--channel", action="append", default=None, metavar="SPEC",
                   help="a channel SPEC as for simulate (repeatable)")
    b.add_argument("--state", action="append", default=None, metavar="SPEC",
                   help="a state SPEC as for simulate --state (repeatable; instead of --channel)")
    b.add_argument("--shots", default="100,1000,10000", metavar="N,N,...",
                   help="count levels: expected counts per preparation and analyser basis "
                        "(default 100,1000,10000)")
    b.add_argument("--methods", default=None, metavar="M,M,...",
                   help="estimators (default: all)")
    b.add_argument("--prep", default=None, metavar="SET",
                   help="pauli6 (default), pauli4 or a comma list; not with --state")
    b.add_argument("--meas", default="pauli6", metavar="SET", help="pauli6 (default), pauli4 or a comma list")
    b.add_argument("--qubits", type=int, default=2,
                   help="qubits of random channels, or of GHZ, W and random states (default 2)")
    b.add_argument("--repeats", type=int, default=DEFAULT_REPEATS, metavar="R",
                   help=f"repetitions per channel, count level and method (default {DEFAULT_REPEATS})")
    b.add_argument("--bootstrap", type=int, default=0, metavar="B",
                   help="bootstrap resamples per repetition, for the coverage of the intervals")
    b.add_argument("--interval", choices=INTERVALS, default=DEFAULT_INTERVAL,
                   help=f"interval whose coverage is tabulated (default {DEFAULT_INTERVAL})")
    b.add_argument("--ci-level", type=float, default=0.95, metavar="LEVEL")
    b.add_argument("--workers", type=int, default=None, metavar="W", help="processes (default: all cores)")
    b.add_argument("--dask", default=None, metavar="ADDRESS", help="a dask scheduler to run on")
    b.add_argument("--seed", type=int, default=None, help="bench seed (recorded; a folder keeps its own)")
    b.add_argument("--quiet", action="store_true", help="no progress bar")
    b.add_argument("-o", "--output", required=True, metavar="DIR")


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.version:
        from . import __version__
        print(f"gatescope {__version__}")
        return 0
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    warnings.showwarning = _show_warning
    warnings.simplefilter("always", GatescopeWarning)
    words = sys.argv[1:] if argv is None else list(argv)
    args.argv = words
    command_line = "gatescope " + " ".join(words)
    try:
        previous = signal.signal(signal.SIGTERM, _terminate)
    except ValueError:                             # not the main thread: leave signals alone
        previous = None
    try:
        return {"fit": cmd_fit, "show": cmd_show, "simulate": cmd_simulate, "plan": cmd_plan,
                "demo": cmd_demo, "batch": cmd_batch, "bench": cmd_bench,
                "report": cmd_report}[args.command](
                    args, command_line)
    except InputError as exc:
        print(f"gatescope: error: {clean(exc)}", file=sys.stderr)
        return 2
    except NumericalError as exc:
        print(f"gatescope: numerical failure: {exc}", file=sys.stderr)
        return 1
    except Terminated:
        print("gatescope: terminated (SIGTERM)", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("gatescope: interrupted", file=sys.stderr)
        return 1
    except BrokenPipeError:                        # e.g. `gatescope show r.h5 | head`
        sys.stderr.close()
        return 0
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


# --------------------------------------------------------------------------

def _print_warnings_to_stderr(texts) -> None:
    for text in texts:
        print(f"warning: {clean(text)}", file=sys.stderr)


def cmd_fit(args, command_line) -> int:
    from .fileio import check_output
    from .pipeline import check_fit_options, fit
    from .reader import input_files, read_experiment

    check_fit_options(method=args.method, bootstrap=args.bootstrap,
                      bootstrap_kind=args.bootstrap_kind, ci_level=args.ci_level,
                      interval=args.interval, seed=args.seed, workers=args.workers,
                      command_line=True, lower_bound=args.lower_bound)
    exp = read_experiment(args.experiment)
    out = Path(args.output) if args.output else exp.path.parent / "result.h5"
    check_output(out, force=args.force, inputs=tuple(input_files(exp.path).values()),
                 option=_typed(args.argv, "-o", "--output"))
    page = _report_path(args, out, tuple(input_files(exp.path).values()))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = fit(exp, args.method, bootstrap=args.bootstrap,
                     bootstrap_kind=args.bootstrap_kind, ci_level=args.ci_level,
                     interval=args.interval, seed=args.seed, workers=args.workers,
                     progress=not (args.quiet or args.json), command_line=command_line,
                     diamond=args.diamond, lower_bound=args.lower_bound)
    for w in caught:                               # the fit's own warnings are in the result
        if not issubclass(w.category, GatescopeWarning):
            _show_warning(w.message, w.category, w.filename, w.lineno)
    result.save(out)
    if page is not None:
        from .report import result_report

        result_report(result, page, source=str(out), force=True)
    if args.json:
        from .export import json_text

        _print_warnings_to_stderr(result.warnings)
        print(json_text(result, out))
    elif args.quiet:
        _print_warnings_to_stderr(result.warnings)
        print(out)
    else:
        from .summary import fit_summary

        print(fit_summary(result, out))
    if page is not None:
        print(f"report written to {page}", file=sys.stderr if args.json else sys.stdout)
    return 0


def _report_path(args, out: Path, inputs) -> Path | None:
    """The page of ``fit --report``, checked before the fit (None without --report)."""
    if args.report is None:
        return None
    from .fileio import check_output
    from .report import check_available, default_report_path

    check_available("--report")
    page = default_report_path(out) if args.report is True else Path(args.report)
    check_output(page, force=args.force, inputs=inputs + (out,), option="--report",
                 what="report")
    return page


def cmd_report(args, command_line) -> int:
    from .report import make_report

    outcome = make_report(args.path, args.output, figures=args.figures, against=args.against,
                          each=args.each, force=args.force)
    for path in outcome.reports:
        print(path)
    if outcome.kept:
        print(f"{len(outcome.kept)} experiment report(s) kept (--force replaces them)",
              file=sys.stderr)
    for path in outcome.figures:
        print(path)
    print(outcome.page)
    return 0


def cmd_show(args, command_line) -> int:
    from .result import load_result
    from .result_file import describe
    from .summary import summary

    path = Path(args.result)
    if args.csv is not None:
        from .fileio import check_output

        check_output(args.csv, force=args.force, inputs=(path,), option="--csv",
                     what="figures table")
    result = load_result(path)
    if args.csv is not None:
        from .export import figures_csv
        from .fileio import atomic_write_text

        atomic_write_text(args.csv, figures_csv(result))
    if args.json:
        from .export import json_text

        print(json_text(result, path))
    else:
        print(summary(result, source=describe(path)))
    if args.csv is not None:
        print(f"figures table written to {args.csv}", file=sys.stderr)
    return 0


def cmd_simulate(args, command_line) -> int:
    from .synth.noise import parse_term
    from .synth.simulate import run_simulation

    if args.state is not None:
        return _simulate_state(args, command_line)

    if args.gate is not None:
        from .conventions import GATE_NAMES

        options.choice(args.gate, GATE_NAMES, "--gate", "gate")
    for text in args.noise:
        try:
            parse_term(text)
        except ValueError as exc:
            raise InputError(str(exc), key="--noise") from None
    option = "--channel" if args.channel else "--gate"
    spec = "+".join([args.channel or args.gate] + list(args.noise))
    _check_simulation_output(args)
    path = run_simulation(spec, Path(args.output), shots=args.shots,
                          prep=args.prep or "pauli6", meas=args.meas, seed=args.seed,
                          n_qubits=args.qubits, title=args.title, command_line=command_line,
                          spec_option=option)
    print(path)
    return 0


def _check_simulation_output(args) -> None:
    """An earlier simulation in the output folder is replaced only with --force."""
    from .fileio import check_output

    for name in ("experiment.toml", "counts.csv", "truth.h5"):
        check_output(Path(args.output) / name, force=args.force,
                     option=_typed(args.argv, "-o", "--output"), what="simulation")


def _simulate_state(args, command_line) -> int:
    """``simulate --state SPEC``: a synthetic state experiment (analysers only)."""
    from .synth.state import parse_state_noise, run_state_simulation

    if args.prep is not None:
        raise InputError("a state experiment has no preparations", key="--prep")
    for text in args.noise:
        try:
            parse_state_noise(text)
        except ValueError as exc:
            raise InputError(str(exc), key="--noise") from None
    spec = "+".join([args.state] + list(args.noise))
    _check_simulation_output(args)
    path = run_state_simulation(spec, Path(args.output), shots=args.shots, meas=args.meas,
                                seed=args.seed, n_qubits=args.qubits, title=args.title,
                                command_line=command_line)
    print(path)
    return 0


def cmd_plan(args, command_line) -> int:
    from .synth.plan import format_duration, run_sheet, write_run_sheet

    sheet = run_sheet(args.qubits, args.prep, args.meas, right_circular=args.right_circular,
                      seconds=args.seconds, state=args.state)
    path = write_run_sheet(args.output, sheet)
    print(path)
    print(f"{len(sheet.rows)} rows{' (analysers only)' if sheet.state else ''}; "
          "plate angles in degrees from H, in [0, 180)")
    if sheet.total_seconds is not None:
        print(f"total integration time {format_duration(sheet.total_seconds)}, "
              "not counting plate changes")
    print("the sheet lists optical settings only: follow your laboratory's laser-safety rules")
    return 0


def find_demo_data(dataset: str = DEMO_DATASET) -> Path | None:
    """A bundled dataset: the repository's synthetic_data/, beside the package source."""
    here = Path(__file__).resolve()
    for base in [here.parents[2], Path.cwd()]:
        candidate = base / "synthetic_data" / dataset / "experiment.toml"
        if candidate.exists():
            return candidate
    return None


def cmd_demo(args, command_line) -> int:
    from .synth.simulate import DEMO_RECIPE, run_simulation
    from .synth.state import STATE_DEMO_RECIPE, run_state_simulation

    outdir = Path(DEMO_OUTPUT)
    source = find_demo_data()
    if source is None:
        # Not in a source checkout: regenerate the bundled data from its recipe (same seed,
        # same numbers) into the output folder.
        print("bundled data not found beside the package; regenerating it from its recipe"
              + (f" (replacing {outdir / 'data'})" if (outdir / "data").exists() else ""),
              file=sys.stderr)
        source = run_simulation(DEMO_RECIPE["channel"], outdir / "data", shots=DEMO_RECIPE["shots"],
                                prep="pauli6", meas="pauli6", seed=DEMO_RECIPE["seed"],
                                n_qubits=2, title=DEMO_RECIPE["title"], command_line=command_line)
    _demo_fit(source, DEMO_RECIPE, outdir / "result.h5", command_line)
    recipe = STATE_DEMO_RECIPE
    source = find_demo_data(recipe["folder"])
    if source is None:
        print("bundled pair-source data not found beside the package; regenerating it from "
              "its recipe", file=sys.stderr)
        source = run_state_simulation(recipe["state"], outdir / "pair-data", shots=recipe["shots"],
                                      seed=recipe["seed"], title=recipe["title"],
                                      command_line=command_line)
    print("\n" + "=" * 78 + "\n")
    _demo_fit(source, recipe, outdir / "pair-source-result.h5", command_line)
    return 0


def _demo_fit(source: Path, recipe: dict, out: Path, command_line) -> None:
    """Fit one bundled dataset as the demo does, print its summary and its figures next to
    the true values of the simulation, and write the result to ``out``."""
    from .pipeline import fit
    from .reader import read_experiment
    from .result import load_result
    from .summary import summary

    exp = read_experiment(source)
    if out.exists():
        print(f"demo: replacing {out}, the result of an earlier demo", file=sys.stderr)
    print(f"demo: fitting {source}", file=sys.stderr)
    result = fit(exp, "mle", bootstrap=recipe["bootstrap"], seed=recipe["seed"],
                 progress=True, command_line=command_line)
    result.save(out)
    print(summary(result))
    truth_path = source.parent / "truth.h5"
    if truth_path.exists():
        truth = load_result(truth_path)
        what = "state" if truth.kind == "state" else "channel"
        print(f"\nagainst the true {what} of the simulation (truth.h5):")
        # trace is fixed by trace preservation and min_eigenvalue sits on the boundary of
        # the physical set for a maximum-likelihood estimate: neither is a test of accuracy.
        for name, fig in result.figures.items():
            if name in truth.figures and name not in ("trace", "min_eigenvalue"):
                t = truth.figures[name].value
                inside = ""
                if fig.ci is not None:
                    inside = "  inside the interval" if fig.ci[0] <= t <= fig.ci[1] else "  OUTSIDE the interval"
                print(f"  {name:25s} estimate {fig.value:.5f}   truth {t:.5f}{inside}")
    print(f"\nresult written to {out}")
    _demo_report(result, out)


def _demo_report(result, out: Path) -> None:
    """The demo's report beside its result (replacing an earlier demo's), or a note saying
    why there is none."""
    from .report import default_report_path, result_report

    page = default_report_path(out)
    try:
        result_report(result, page, source=str(out), force=True)
    except InputError as exc:
        print(f"report skipped: {clean(exc)}")
        return
    print(f"report written to {page}")


def cmd_batch(args, command_line) -> int:
    from .batch import run_batch

    return run_batch(args.paths, args.output, workers=args.workers, bootstrap=args.bootstrap,
                     method=args.method, seed=args.seed, force=args.force, watch=args.watch,
                     dask=args.dask, command_line=command_line).exit_status


def cmd_bench(args, command_line) -> int:
    from .bench import run_bench
    from .bench.table import text_table

    out = run_bench(args.channel, args.output, states=args.state, shots=args.shots,
                    methods=args.methods, prep=args.prep, meas=args.meas, qubits=args.qubits,
                    repeats=args.repeats,
                    bootstrap=args.bootstrap, interval=args.interval, ci_level=args.ci_level,
                    seed=args.seed, workers=args.workers, address=args.dask,
                    progress=not args.quiet, command_line=command_line, flags=True)
    print(text_table(out.rows, out.kind))
    print(f"\n{out.new} repetitions run now, {out.reused} taken from {out.folder} (seed {out.seed})")
    for note in out.notes:
        print(note)
    for path in (out.csv, out.h5, out.plot):
        if path is not None:
            print(path)
    return 0
