"""Coverage of the bootstrap intervals of every two-qubit state figure.

For each configuration (a state SPEC and a count level) the script repeats
simulate → mle fit → parametric bootstrap and records, per repetition and
figure, the true value, the point estimate, the mean and standard deviation
of the B bootstrap values, and the interval of every construction in
`gatescope.intervals.INTERVALS` at ``--level`` (each intersected with the
figure's range, as the library reports them). The table reports per figure
the mean bias of the point estimate beside the spread of the estimates over
the repetitions and the mean bootstrap standard error, the mean bootstrap
bias, and the coverage of each construction.

    python benchmarks/state_coverage.py --repetitions 200 --samples 100

Repetition r of a configuration simulates its counts with seed ``seed + r``
and bootstraps with seed ``seed + r + 1_000_000``. Every repetition appends
one CSV line per figure to ``--out`` (default
benchmarks/results/state_coverage_runs.csv); a rerun with the same file
skips the repetitions already there, and ``--table-only`` prints the table of
what the file holds.

``--profile`` (write to its own ``--out``) adds, for the figures `gatescope.profile`
covers (the fidelity to a pure target and the purity), the two-sided
profile-likelihood interval and the one-sided lower bounds at ``--level``: the
profile-likelihood one and the bootstrap's estimate − z·s* (columns
``profile_low``, ``profile_high``, ``profile_lb``, ``normal_lb``; empty for the
other figures). ``--test-inversion`` (with ``--profile``) adds the state fidelity's
test-inversion interval and lower bound (`gatescope.profile`, ``--samples`` simulated
data sets per tested value, seed ``seed + r + 2_000_000``; columns ``ti_low``,
``ti_high``, ``ti_lb``, ``ti_s``). Near a pure state, for the coverage map of
benchmarks/README.md:

    nice -n 10 python benchmarks/state_coverage.py --profile --repetitions 100 \
        --configs phi++depolarizing:0.0004=phi+ phi++depolarizing:0.004=phi+ \
        --out benchmarks/results/state_boundary_coverage.csv
"""

from __future__ import annotations

import os

# One BLAS thread: the fits are small and several studies may share the cores.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import csv  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections import defaultdict  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from scipy.special import ndtri  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "engine"))

from gatescope.bootstrap import run_bootstrap  # noqa: E402
from gatescope.conventions import builtin_states, density, named_state  # noqa: E402
from gatescope.estimators import estimate  # noqa: E402
from gatescope.intervals import INTERVALS, interval, parameter_range  # noqa: E402
from gatescope.merit import compute_state_figures  # noqa: E402
from gatescope.model import StateModel  # noqa: E402
from gatescope.model.state import full_grid  # noqa: E402
from gatescope.profile import profile_figures  # noqa: E402
from gatescope.synth.state import simulate_state_counts, state_from_spec  # noqa: E402

#: (SPEC, target state name or None): the demo's pair source (t₂ = t₃), a Bell state in
#: white noise (t₁ = t₂ = t₃), and a random pure state in white noise (distinct t's).
DEFAULT_CONFIGS = ("psi-+visibility:0.94+depolarizing:0.03=psi-",
                   "phi++depolarizing:0.15=phi+",
                   "random:1:3+depolarizing:0.1")
FIELDS = (["config", "shots", "samples", "level", "rep", "figure", "truth", "point", "boot_mean",
           "boot_sd"] + [f"{c}_{end}" for c in INTERVALS for end in ("low", "high")])
#: The extra columns of ``--profile``.
PROFILE_FIELDS = ["profile_low", "profile_high", "profile_lb", "normal_lb"]
#: The extra columns of ``--test-inversion`` (the state fidelity only).
INVERTED_FIELDS = ["ti_low", "ti_high", "ti_lb", "ti_s"]


def _config(text: str):
    spec, _, target = text.partition("=")
    return spec, (target or None)


def one_repetition(text: str, shots: float, rep: int, args) -> list[dict]:
    spec, target_name = _config(text)
    state = state_from_spec(spec, 2)
    target = None if target_name is None else named_state(target_name, 2)
    truth = compute_state_figures(state.choi, target)
    rows = simulate_state_counts(state, shots=shots, seed=args.seed + rep)
    single = np.array([density(builtin_states()[s]) for s in "HVDARL"])
    counts = np.array([c for _, _, c in rows], dtype=float)
    model = StateModel(single, full_grid(2, 6), np.arange(counts.size), counts)
    point = estimate(model, "mle")
    figures = compute_state_figures(point.choi, target)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        boot, _ = run_bootstrap(model, point, target, samples=args.samples,
                                seed=args.seed + rep + 1_000_000, workers=args.workers)
        profiles = (profile_figures(model, target, level=args.level, lower_bound=True,
                                    start=point.choi) if args.profile else {})
        t0 = time.perf_counter()
        inverted = (profile_figures(model, target, level=args.level, lower_bound=True,
                                    names=("state_fidelity",), start=point.choi,
                                    invert_intervals=("state_fidelity",),
                                    invert_bounds=("state_fidelity",), samples=args.samples,
                                    seed=args.seed + rep + 2_000_000)
                    if args.test_inversion else {})
        ti_seconds = time.perf_counter() - t0
    rows = [summary_row(text, shots, args.samples, args.level, rep, name, truth[name],
                        figures[name], boot.figures[:, k]) for k, name in enumerate(boot.names)]
    if args.profile:
        z = float(ndtri(args.level))
        for row in rows:
            prof = profiles.get(row["figure"])
            row.update(dict.fromkeys(PROFILE_FIELDS, ""))
            if prof is not None:
                est, low = float(row["point"]), parameter_range(row["figure"], 4, "state")[0]
                row.update(profile_low=repr(min(prof.interval.low, est)),
                           profile_high=repr(max(prof.interval.high, est)),
                           profile_lb=repr(min(prof.lower.low, est)),
                           normal_lb=repr(max(est - z * float(row["boot_sd"]), low)))
            if args.test_inversion:
                row.update(dict.fromkeys(INVERTED_FIELDS, ""))
                inv = inverted.get(row["figure"])
                if inv is not None:
                    est = float(row["point"])
                    row.update(ti_low=repr(min(inv.interval.low, est)),
                               ti_high=repr(max(inv.interval.high, est)),
                               ti_lb=repr(min(inv.lower.low, est)), ti_s=repr(ti_seconds))
    return rows


def summary_row(config, shots, samples, level, rep, figure, truth, point, values) -> dict:
    """One CSV line: a figure's truth, estimate, bootstrap mean and spread, and intervals."""
    row = {"config": config, "shots": shots, "samples": samples, "level": level, "rep": rep,
           "figure": figure, "truth": repr(float(truth)), "point": repr(float(point)),
           "boot_mean": repr(float(np.nanmean(values))),
           "boot_sd": repr(float(np.nanstd(values, ddof=1)))}
    bounds = parameter_range(figure, 4, "state")
    for c in INTERVALS:
        lo, hi = interval(values, point, level, c, bounds)
        row[f"{c}_low"], row[f"{c}_high"] = repr(lo), repr(hi)
    return row


def read_rows(path: Path) -> list[dict]:
    if not path.exists():
        return []
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _coverage(hits) -> str:
    p = float(np.mean(hits))
    return f"{p:.3f} ± {math.sqrt(p * (1 - p) / len(hits)):.3f}"


def table(rows: list[dict]) -> str:
    groups = defaultdict(list)
    for r in rows:
        groups[(r["config"], float(r["shots"]), r["figure"])].append(r)
    profiled = bool(rows) and "profile_low" in rows[0]
    inverted = profiled and "ti_low" in rows[0]
    extra = ["profile", "normal LB", "profile LB"] if profiled else []
    extra += ["test inversion", "test-inv. LB", "test-inv. s"] if inverted else []
    if profiled:
        groups = {k: rs for k, rs in groups.items() if rs[0]["profile_low"] != ""}
    lines = ["| configuration | shots | figure | reps | truth | mean bias ± se | sd of θ̂ | mean s* "
             "| mean boot bias | " + " | ".join("**normal** (default)" if c == "normal" else c
                                               for c in list(INTERVALS) + extra) + " |",
             "|---" * (8 + len(INTERVALS) + len(extra)) + "|"]
    for (config, shots, figure), rs in groups.items():
        truth = float(rs[0]["truth"])
        points = np.array([float(r["point"]) for r in rs])
        spreads = np.array([float(r["boot_sd"]) for r in rs])
        boot_bias = np.array([float(r["boot_mean"]) for r in rs]) - points
        bias = points - truth
        cover = []
        for c in list(INTERVALS) + (["profile"] if profiled else []):
            hits = [float(r[f"{c}_low"]) <= truth <= float(r[f"{c}_high"]) for r in rs]
            cover.append(_coverage(hits))
        for c in ("normal", "profile") if profiled else ():
            cover.append(_coverage([float(r[f"{c}_lb"]) <= truth for r in rs]))
        if inverted and rs[0]["ti_low"] != "":
            cover.append(_coverage([float(r["ti_low"]) <= truth <= float(r["ti_high"])
                                    for r in rs]))
            cover.append(_coverage([float(r["ti_lb"]) <= truth for r in rs]))
            cover.append(f"{np.mean([float(r['ti_s']) for r in rs]):.1f}")
        elif inverted:
            cover += ["", "", ""]
        lines.append(f"| {config} | {shots:g} | {figure} | {len(rs)} | {truth:.4f} | "
                     f"{bias.mean():+.4f} ± {bias.std(ddof=1) / math.sqrt(len(rs)):.4f} | "
                     f"{points.std(ddof=1):.4f} | {spreads.mean():.4f} | {boot_bias.mean():+.4f} | "
                     + " | ".join(cover) + " |")
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--configs", nargs="+", default=list(DEFAULT_CONFIGS),
                        help="SPEC[=TARGET] state configurations (two qubits)")
    parser.add_argument("--shots", nargs="+", type=float, default=[2000.0])
    parser.add_argument("--repetitions", type=int, default=200)
    parser.add_argument("--samples", type=int, default=100)
    parser.add_argument("--level", type=float, default=0.95)
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--out", type=Path, default=HERE / "results" / "state_coverage_runs.csv")
    parser.add_argument("--table-only", action="store_true")
    parser.add_argument("--profile", action="store_true",
                        help="add the profile-likelihood interval and lower bounds (own --out)")
    parser.add_argument("--test-inversion", action="store_true",
                        help="with --profile: add the state fidelity's test-inversion interval "
                             "and lower bound (B = --samples simulated data sets per value)")
    args = parser.parse_args(argv)
    if not args.table_only:
        done = {(r["config"], float(r["shots"]), int(r["rep"])) for r in read_rows(args.out)}
        new_file = not args.out.exists()
        args.out.parent.mkdir(parents=True, exist_ok=True)
        with open(args.out, "a", newline="") as fh:
            writer = csv.DictWriter(fh, fieldnames=FIELDS + (PROFILE_FIELDS if args.profile
                                                             else [])
                                    + (INVERTED_FIELDS if args.test_inversion else []))
            if new_file:
                writer.writeheader()
            for config in args.configs:
                for shots in args.shots:
                    t0 = time.perf_counter()
                    for rep in range(args.repetitions):
                        if (config, shots, rep) in done:
                            continue
                        writer.writerows(one_repetition(config, shots, rep, args))
                        fh.flush()
                    print(f"{config} shots {shots:g}: {time.perf_counter() - t0:.0f} s",
                          file=sys.stderr)
    print(table(read_rows(args.out)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
