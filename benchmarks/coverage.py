"""Coverage of the bootstrap intervals of the process fidelity.

For each configuration (a channel SPEC and a count level) the script repeats
simulate → fit → bootstrap and records, per repetition, the true process
fidelity, the point estimate and the bootstrap values, so that the table
applies every construction in `gatescope.intervals.INTERVALS`. The table
reports, per configuration, the fraction of intervals that contain the
truth (coverage, with its binomial standard error), the mean width, the
mean bias of the point estimate, and the mean bootstrap standard error
beside the actual spread of the point estimates over the repetitions.

Every repetition is one line of a CSV file (``--out``); a rerun with the
same file skips the repetitions already there, so a study can be stopped,
resumed or extended (``--repetitions``), and ``--table-only`` prints the
table of what the file holds.

    python benchmarks/coverage.py --repetitions 200 --samples 200 --shots 1000 10000

Repetition r of a configuration simulates its counts with seed
``seed + r`` and bootstraps with seed ``seed + r + 1_000_000``.
"""

from __future__ import annotations

import os

# One BLAS thread: the fits are small and several studies may share the cores; OpenBLAS
# threads that wait for a busy core slow a fit down many times (set before numpy loads).
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import csv  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections import defaultdict  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

import gatescope as gs  # noqa: E402
from gatescope.intervals import INTERVALS, interval, parameter_range  # noqa: E402
from gatescope.reader import read_experiment  # noqa: E402
from gatescope.merit import process_fidelity  # noqa: E402
from gatescope.synth.simulate import channel_from_spec, simulate_counts, write_experiment  # noqa: E402

DEFAULT_CHANNELS = ("CZ+depolarizing:0.2", "CZ+zz:0.2")
FIELDS = ["method", "kind", "channel", "shots", "samples", "rep", "truth", "point",
          "boot_mean", "boot_std", "failures", "errors", "point_converged", "seconds"] + \
         ["values"]


def one_repetition(spec: str, shots: float, rep: int, args, workdir: Path) -> dict:
    channel = channel_from_spec(spec)
    rows = simulate_counts(channel, shots=shots, seed=args.seed + rep)
    folder = workdir / f"{spec.replace(':', '_').replace('+', '_')}_{shots:g}_{rep}"
    path = write_experiment(folder, channel, rows, title=f"coverage {spec}")
    exp = read_experiment(path)
    truth = process_fidelity(channel.choi, exp.target)
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True):
        warnings.simplefilter("always")
        res = gs.fit(exp, args.method, bootstrap=args.samples, bootstrap_kind=args.kind,
                     ci_level=args.level, seed=args.seed + rep + 1_000_000, workers=args.workers)
    seconds = time.perf_counter() - t0
    boot = res.bootstrap
    k = boot.names.index("process_fidelity")
    values = boot.figures[:, k]
    point = res.figures["process_fidelity"].value
    row = {"method": args.method, "kind": args.kind, "channel": spec, "shots": shots,
           "samples": args.samples, "rep": rep, "truth": truth, "point": point,
           "boot_mean": float(np.nanmean(values)), "boot_std": float(np.nanstd(values, ddof=1)),
           "failures": boot.failures, "errors": boot.errors,
           "point_converged": int(res.converged), "seconds": seconds}
    # the bootstrap values themselves, so that the table can apply any interval construction
    row["values"] = " ".join(repr(float(v)) for v in values)
    return row


def read_rows(path: Path) -> list[dict]:
    if not path.exists():
        return []
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def key_of(row) -> tuple:
    return (row["method"], row["kind"], row["channel"], float(row["shots"]), int(row["samples"]))


def table(rows: list[dict], level: float) -> str:
    groups = defaultdict(list)
    for row in rows:
        groups[key_of(row)].append(row)
    head = ["method", "channel", "shots", "B", "reps", "true F", "mean bias ± se",
            "sd of F̂", "mean boot se"]
    for m in INTERVALS:
        head += [f"cover {m}", f"width {m}"]
    head += ["failed refits", "s / rep"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for key in sorted(groups):
        g = groups[key]
        n = len(g)
        truth = np.array([float(r["truth"]) for r in g])
        point = np.array([float(r["point"]) for r in g])
        bias = point - truth
        se_bias = bias.std(ddof=1) / math.sqrt(n) if n > 1 else float("nan")
        cells = [key[0], key[2], f"{key[3]:g}", str(key[4]), str(n), f"{truth.mean():.5f}",
                 f"{bias.mean():+.5f} ± {se_bias:.5f}",
                 f"{point.std(ddof=1):.5f}" if n > 1 else "–",
                 f"{np.mean([float(r['boot_std']) for r in g]):.5f}"]
        for m in INTERVALS:
            # as the library reports them: intersected with the range of a fidelity
            ci = np.array([interval(np.array(r["values"].split(), dtype=float), float(r["point"]),
                                    level, m, parameter_range("process_fidelity", 4))
                           for r in g])
            lo, hi = ci[:, 0], ci[:, 1]
            cover = np.mean((lo <= truth) & (truth <= hi))
            se = math.sqrt(max(cover * (1 - cover), 1e-12) / n)
            cells += [f"{cover:.3f} ± {se:.3f}", f"{np.mean(hi - lo):.5f}"]
        fails = sum(int(r["failures"]) for r in g)
        cells += [f"{fails} / {n * key[4]}", f"{np.mean([float(r['seconds']) for r in g]):.1f}"]
        lines.append("| " + " | ".join(cells) + " |")
    return f"nominal level {level:g}\n\n" + "\n".join(lines)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--repetitions", type=int, default=200, help="repetitions per configuration")
    p.add_argument("--samples", type=int, default=200, help="bootstrap resamples B")
    p.add_argument("--shots", type=float, nargs="+", default=[1000.0, 10000.0],
                   help="count levels: expected counts per preparation and analyser basis")
    p.add_argument("--channels", nargs="+", default=list(DEFAULT_CHANNELS), metavar="SPEC")
    p.add_argument("--method", default="mle", choices=("mle", "pls", "lin"))
    p.add_argument("--kind", default="parametric", choices=("parametric", "nonparametric"))
    p.add_argument("--level", type=float, default=0.95)
    p.add_argument("--workers", type=int, default=1, help="bootstrap processes per fit")
    p.add_argument("--first-rep", type=int, default=0,
                   help="start at this repetition (to split a study over several processes)")
    p.add_argument("--seed", type=int, default=2026)
    p.add_argument("--out", type=Path,
                   default=Path(__file__).parent / "results" / "coverage_runs.csv",
                   help="CSV of the repetitions (appended to; existing ones are skipped)")
    p.add_argument("--max-minutes", type=float, default=None,
                   help="stop starting new repetitions after this much wall time")
    p.add_argument("--table-only", action="store_true", help="print the table of --out and exit")
    p.add_argument("--also", type=Path, nargs="*", default=[], metavar="CSV",
                   help="more CSV files of repetitions to include in the table")
    args = p.parse_args(argv)

    if not args.table_only:
        done = {(key_of(r), int(r["rep"])) for r in read_rows(args.out)}
        new_file = not args.out.exists() or args.out.stat().st_size == 0
        args.out.parent.mkdir(parents=True, exist_ok=True)
        started = time.perf_counter()
        with open(args.out, "a", newline="") as fh, tempfile.TemporaryDirectory() as tmp:
            writer = csv.DictWriter(fh, fieldnames=FIELDS)
            if new_file:
                writer.writeheader()
            # round-robin over configurations, so a stopped study is balanced
            for rep in range(args.first_rep, args.repetitions):
                for spec in args.channels:
                    for shots in args.shots:
                        key = (args.method, args.kind, spec, float(shots), args.samples)
                        if (key, rep) in done:
                            continue
                        if args.max_minutes is not None and \
                                time.perf_counter() - started > 60 * args.max_minutes:
                            print("time budget reached", file=sys.stderr)
                            print(table(read_rows(args.out), args.level))
                            return 0
                        row = one_repetition(spec, shots, rep, args, Path(tmp))
                        writer.writerow(row)
                        fh.flush()
                        print(f"{spec} shots {shots:g} rep {rep}: F̂ {row['point']:.5f} "
                              f"(truth {row['truth']:.5f}) {row['seconds']:.1f} s",
                              file=sys.stderr)
    print(table(read_rows(args.out) + [r for extra in args.also for r in read_rows(extra)],
                args.level))
    return 0


if __name__ == "__main__":
    sys.exit(main())
