"""Coverage near the boundary: bootstrap normal intervals against profile-likelihood intervals.

One cell is a noise kind on a one- or two-qubit gate at a ratio
r = infidelity / SIGMA_REF (SIGMA_REF a nominal statistical error of the
process fidelity near F = 1 at 1000 counts per basis; the table reports the
ratio to the spread of the estimates actually measured). Each repetition of a
cell simulates counts, fits ``mle``, and records for the process fidelity,
the average gate fidelity and the purity:

* the ``normal`` bootstrap interval (estimate ± z·s*, s* the spread of a
  parametric bootstrap of B refits, clipped to the figure's range) and the
  matching one-sided bound estimate − z_{level}·s*;
* the two-sided profile-likelihood interval and the one-sided profile lower
  bound of `gatescope.profile`, and whether the top of the range lies inside
  the interval (``touches_boundary``);
* the seconds of the bootstrap and of the profiles.

Noise kinds: ``white`` (depolarizing), ``overrotation`` (the gate followed by
a rotation about X by θ, F = cos²(θ/2)), ``damping`` (amplitude damping on
every qubit). Repetition r of a cell draws its counts with seed
``seed + r``, its bootstrap with seed ``seed + r + 1_000_000`` and the simulated
test of the purity's top (`gatescope.profile.Profile.top_accepted`) with seed
``seed + r + 3_000_000``. Each
repetition is one CSV line (``--out``); a rerun skips the repetitions already
there; ``--table-only`` prints the table of what the file holds. For another
gate or count level set the infidelity of ratio 1 with ``--sigma-ref`` (and
write to its own ``--out``); ``--max-minutes`` starts no repetition after that
much wall time.

    nice -n 10 python benchmarks/boundary_coverage.py --repetitions 200 --workers 2
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
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
from scipy.special import ndtri  # noqa: E402

from gatescope.bootstrap import run_bootstrap  # noqa: E402
from gatescope.channels import choi_from_unitary, compose  # noqa: E402
from gatescope.conventions import kron_all, named_gate  # noqa: E402
from gatescope.estimators import estimate  # noqa: E402
from gatescope.intervals import interval, parameter_range  # noqa: E402
from gatescope.merit import compute_figures  # noqa: E402
from gatescope.model import build_model  # noqa: E402
from gatescope.parallel import Runner  # noqa: E402
from gatescope.profile import profile_figures  # noqa: E402
from gatescope.reader import read_experiment  # noqa: E402
from gatescope.synth.noise import amplitude_damping, depolarizing  # noqa: E402
from gatescope.synth.simulate import Channel, simulate_counts, write_experiment  # noqa: E402

#: Nominal statistical error of F̂_pro near F = 1, one qubit, 1000 counts per basis.
SIGMA_REF = 3e-4
KINDS = ("white", "overrotation", "damping")
FIGURES = ("process_fidelity", "average_gate_fidelity", "purity")
SHORT = {"process_fidelity": "pf", "average_gate_fidelity": "af", "purity": "pu"}
PER_FIGURE = ("truth", "est", "boot_std", "normal_lo", "normal_hi", "normal_lb", "prof_lo",
              "prof_hi", "prof_lb", "prof_touch")
FIELDS = (["gate", "kind", "ratio", "shots", "samples", "level", "rep", "mle_s", "boot_s",
           "prof_s", "prof_fits"]
          + [f"{SHORT[f]}_{k}" for f in FIGURES for k in PER_FIGURE])


def noisy_channel(gate: str, kind: str, infidelity: float) -> Channel:
    """The gate followed by noise of ``kind`` with process infidelity ``infidelity``."""
    u = named_gate(gate)
    d = u.shape[0]
    n = int(round(math.log2(d)))
    f = 1.0 - infidelity
    if kind == "white":
        # F = 1 − p(1 − 1/d²) for depolarizing strength p
        noise = depolarizing(infidelity / (1.0 - 1.0 / d ** 2), d)
    elif kind == "overrotation":
        # one rotation exp(−iθX/2) on qubit 1: F = cos²(θ/2)
        theta = 2.0 * math.acos(math.sqrt(f))
        rx = np.array([[math.cos(theta / 2), -1j * math.sin(theta / 2)],
                       [-1j * math.sin(theta / 2), math.cos(theta / 2)]])
        noise = choi_from_unitary(kron_all([rx] + [np.eye(2)] * (n - 1)))
    elif kind == "damping":
        # per qubit F₁ = (1 + √(1−g))²/4, and F = F₁ⁿ for the product
        root = 2.0 * math.sqrt(f ** (1.0 / n)) - 1.0
        noise = amplitude_damping(1.0 - root * root, n)
    else:
        raise ValueError(kind)
    choi = compose(noise, choi_from_unitary(u))
    return Channel(choi, n, gate, f"{gate}+{kind}:{infidelity:g}")


def one_repetition(opts: dict, job) -> dict | None:
    gate, kind, ratio, shots, rep = job
    if opts["stop_at"] is not None and time.time() > opts["stop_at"]:
        return None
    channel = noisy_channel(gate, kind, ratio * opts["sigma_ref"])
    level = opts["level"]
    z1 = float(ndtri(level))
    with tempfile.TemporaryDirectory() as tmp:
        rows = simulate_counts(channel, shots=shots, seed=opts["seed"] + rep)
        exp = read_experiment(write_experiment(Path(tmp), channel, rows, title="coverage"))
    model = build_model(exp)
    target = exp.target
    out = {"gate": gate, "kind": kind, "ratio": ratio, "shots": shots,
           "samples": opts["samples"], "level": level, "rep": rep}
    truth = compute_figures(channel.choi, target)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t0 = time.perf_counter()
        fit = estimate(model, "mle")
        point = compute_figures(fit.choi, target)
        out["mle_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        boot, _ = run_bootstrap(model, fit, target, samples=opts["samples"], kind="parametric",
                                seed=opts["seed"] + rep + 1_000_000, workers=1,
                                point_figures=point)
        out["boot_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        prof = profile_figures(model, target, level=level, interval=True, lower_bound=True,
                               names=FIGURES, start=fit.choi,
                               seed=opts["seed"] + rep + 3_000_000)
        out["prof_s"] = time.perf_counter() - t0
        out["prof_fits"] = sum(p.fits for p in prof.values())
    for name in FIGURES:
        s = SHORT[name]
        values = boot.figures[:, boot.names.index(name)]
        bounds = parameter_range(name, model.dim)
        lo, hi = interval(values, point[name], level, "normal", bounds)
        std = float(np.nanstd(values, ddof=1))
        p = prof[name]
        out.update({f"{s}_truth": truth[name], f"{s}_est": point[name], f"{s}_boot_std": std,
                    f"{s}_normal_lo": lo, f"{s}_normal_hi": hi,
                    f"{s}_normal_lb": max(point[name] - z1 * std, bounds[0]),
                    f"{s}_prof_lo": min(p.interval.low, point[name]),
                    f"{s}_prof_hi": max(p.interval.high, point[name]),
                    f"{s}_prof_lb": min(p.lower.low, point[name]),
                    f"{s}_prof_touch": int(p.touches_boundary)})
    return out


def read_rows(path: Path) -> list[dict]:
    if not path.exists():
        return []
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def key_of(row) -> tuple:
    return (row["gate"], row["kind"], float(row["ratio"]), float(row["shots"]),
            int(row["samples"]), float(row["level"]))


def _cov(hit: np.ndarray) -> str:
    c = hit.mean()
    return f"{c:.3f} ± {math.sqrt(max(c * (1 - c), 1e-12) / hit.size):.3f}"


def table(rows: list[dict]) -> str:
    groups = defaultdict(list)
    for row in rows:
        groups[key_of(row)].append(row)
    head = ["gate, noise, r", "n", "infid./sd", "figure", "normal: cov. ± se", "profile: cov. ± se",
            "normal width", "profile width", "normal LB cov.", "profile LB cov.", "at F=1",
            "boot s", "profile s"]
    out = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for key in sorted(groups):
        g = groups[key]
        n = len(g)
        col = lambda name: np.array([float(r[name]) for r in g])   # noqa: E731
        sd = col("pf_est").std(ddof=1) if n > 1 else float("nan")
        ratio = (1.0 - col("pf_truth").mean()) / sd
        for name in FIGURES:
            s = SHORT[name]
            t = col(f"{s}_truth")
            nlo, nhi, plo, phi = (col(f"{s}_{k}") for k in ("normal_lo", "normal_hi",
                                                          "prof_lo", "prof_hi"))
            out.append(
                f"| {key[0]}, {key[1]}, {key[2]:g} | {n} | {ratio:.2f} | {name} | "
                f"{_cov((nlo <= t) & (t <= nhi))} | {_cov((plo <= t) & (t <= phi))} | "
                f"{np.mean(nhi - nlo):.2e} | {np.mean(phi - plo):.2e} | "
                f"{_cov(col(f'{s}_normal_lb') <= t)} | {_cov(col(f'{s}_prof_lb') <= t)} | "
                f"{int(col(f'{s}_prof_touch').sum())} | {np.mean(col('boot_s')):.2f} | "
                f"{np.mean(col('prof_s')):.2f} |")
    return "\n".join(out)


def add_cell_arguments(p: argparse.ArgumentParser, out: Path, samples_help: str) -> None:
    """The options of a coverage study over cells (gate, noise kind, ratio) shared by this
    script and ``lower_bound_coverage.py``."""
    p.add_argument("--repetitions", type=int, default=200, help="repetitions per cell")
    p.add_argument("--samples", type=int, default=100, help=samples_help)
    p.add_argument("--shots", type=float, default=1000.0,
                   help="expected counts per preparation and analyser basis")
    p.add_argument("--gate", default="H")
    p.add_argument("--kinds", nargs="+", default=list(KINDS), choices=KINDS)
    p.add_argument("--ratios", type=float, nargs="+", default=[0.3, 1.0, 3.0, 10.0])
    p.add_argument("--sigma-ref", type=float, default=SIGMA_REF,
                   help=f"infidelity of ratio 1 (default {SIGMA_REF:g}, one qubit at 1000 counts "
                        "per basis); use one --out per value")
    p.add_argument("--max-minutes", type=float, default=None,
                   help="start no new repetition after this much wall time")
    p.add_argument("--level", type=float, default=0.95)
    p.add_argument("--workers", type=int, default=1, help="repetitions run in parallel")
    p.add_argument("--seed", type=int, default=2026)
    p.add_argument("--out", type=Path, default=out,
                   help="CSV of the repetitions (appended to; existing ones are skipped)")
    p.add_argument("--table-only", action="store_true", help="print the table of --out and exit")


def run_cells(args, work, fields, key, describe, **extra) -> None:
    """Run ``work(opts, job)`` for every repetition of every cell of ``args`` (the
    options of `add_cell_arguments`) that ``args.out`` does not hold yet (``key`` of a
    row names its cell), ``args.workers`` at a time, appending one CSV line of
    ``fields`` per repetition and one line ``describe(row)`` on stderr. ``opts`` holds
    the seed, samples, level, sigma_ref, the wall-time limit and ``extra`` (whose
    entries also name the cell, for ``key``)."""
    done = {(key(r), int(r["rep"])) for r in read_rows(args.out)}
    todo = []
    for rep in range(args.repetitions):
        for kind in args.kinds:
            for ratio in args.ratios:
                cell = {"gate": args.gate, "kind": kind, "ratio": ratio, "shots": args.shots,
                        "samples": args.samples, "level": args.level, **extra}
                if (key(cell), rep) not in done:
                    todo.append((args.gate, kind, ratio, args.shots, rep))
    opts = {"seed": args.seed, "samples": args.samples, "level": args.level,
            "sigma_ref": args.sigma_ref, **extra,
            "stop_at": None if args.max_minutes is None else time.time() + 60.0 * args.max_minutes}
    new_file = not args.out.exists() or args.out.stat().st_size == 0
    if not new_file:
        with open(args.out, newline="") as fh:
            header = next(csv.reader(fh))
        if tuple(header) != tuple(fields):
            sys.exit(f"{args.out}: its columns differ from this run's ({', '.join(fields)}); "
                     "use another --out")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    with open(args.out, "a", newline="") as fh, Runner(args.workers, shared=opts) as runner:
        writer = csv.DictWriter(fh, fieldnames=fields)
        if new_file:
            writer.writeheader()
        for _, row in runner.map(work, todo, chunk=1):
            if row is None:
                continue
            writer.writerow(row)
            fh.flush()
            print(f"{row['gate']} {row['kind']} {row['ratio']:g} rep {row['rep']}: "
                  f"{describe(row)}", file=sys.stderr)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_cell_arguments(p, Path(__file__).parent / "results" / "boundary_coverage.csv",
                       "bootstrap resamples B")
    args = p.parse_args(argv)
    if not args.table_only:
        run_cells(args, one_repetition, FIELDS, key_of, lambda row: (
            f"F̂ {row['pf_est']:.6f} profile [{row['pf_prof_lo']:.6f}, "
            f"{row['pf_prof_hi']:.6f}] ({row['prof_s']:.2f} s) normal "
            f"[{row['pf_normal_lo']:.6f}, {row['pf_normal_hi']:.6f}] ({row['boot_s']:.2f} s)"))
    print(table(read_rows(args.out)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
