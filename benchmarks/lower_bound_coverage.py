"""Coverage of lower bounds (and intervals) near a perfect gate: profile likelihood
against test inversion.

A cell is a noise kind on a gate at a ratio r = infidelity / ``--sigma-ref``, as in
``boundary_coverage.py`` (same channels; repetition k draws its counts with seed
``seed + k``, so the data sets are those of that script at the same settings). Each
repetition fits the profile of the process fidelity and records its
profile-likelihood lower bound (`Profile.lower_bound`) and its test-inversion lower
bound (`Profile.test_inversion_lower_bound`, B simulated data sets per tested value,
seed ``seed + k + 2_000_000``), with their seconds. For a trace-preserving process the
bounds of the average gate fidelity are the images of these under F ↦ (dF + 1)/(d + 1),
so they hold exactly when these do. ``--two-sided`` adds the two-sided profile-likelihood
and test-inversion intervals (`Profile.interval`, `Profile.test_inversion_interval`).
``--nulls`` chooses the processes the test inversion simulates for each tested value
(`gatescope.profile.NULLS`; default the library's `default_nulls` for the gate's qubits);
the CSV records them and the table names them where they are not the twirled null alone
(the choice of rows written before the column existed).

"fallbacks" counts the repetitions whose test inversion rejected even the estimate and gave
the profile-likelihood bound instead (their cutoff is NaN in the CSV). One CSV line per
repetition (``--out``); a rerun skips the repetitions already there;
``--table-only`` prints the table of what the file holds.

    nice -n 10 python benchmarks/lower_bound_coverage.py --repetitions 200 --workers 2
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections import defaultdict  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from boundary_coverage import (_cov, add_cell_arguments, noisy_channel, read_rows,  # noqa: E402
                               run_cells)
from gatescope.merit import compute_figures  # noqa: E402
from gatescope.model import build_model  # noqa: E402
from gatescope.conventions import n_qubits_of, named_gate  # noqa: E402
from gatescope.profile import NULLS, Profile, default_nulls, process_fidelity_figure  # noqa: E402
from gatescope.reader import read_experiment  # noqa: E402
from gatescope.synth.simulate import simulate_counts, write_experiment  # noqa: E402

FIELDS = ("gate", "kind", "ratio", "shots", "samples", "level", "rep", "truth", "est",
          "profile_lb", "profile_s", "ti_lb", "ti_cutoff", "ti_fits", "ti_s", "nulls")
#: The extra columns of ``--two-sided``: both profile-likelihood and test-inversion intervals.
TWO_SIDED = ("profile_lo", "profile_hi", "ti_lo", "ti_hi", "ti2_fits", "ti2_s")


def one_repetition(opts: dict, job) -> dict | None:
    gate, kind, ratio, shots, rep = job
    if opts["stop_at"] is not None and time.time() > opts["stop_at"]:
        return None
    channel = noisy_channel(gate, kind, ratio * opts["sigma_ref"])
    with tempfile.TemporaryDirectory() as tmp:
        rows = simulate_counts(channel, shots=shots, seed=opts["seed"] + rep)
        exp = read_experiment(write_experiment(Path(tmp), channel, rows, title="coverage"))
    model = build_model(exp)
    out = {"gate": gate, "kind": kind, "ratio": ratio, "shots": shots,
           "samples": opts["samples"], "level": opts["level"], "rep": rep,
           "nulls": opts["nulls"],
           "truth": compute_figures(channel.choi, exp.target)["process_fidelity"]}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t0 = time.perf_counter()
        prof = Profile(model, process_fidelity_figure(exp.target), nulls=opts["nulls"].split())
        plb = prof.lower_bound(opts["level"])
        out.update(est=prof.estimate, profile_lb=plb.low, profile_s=time.perf_counter() - t0)
        ti = prof.test_inversion_lower_bound(opts["level"], samples=opts["samples"],
                                             seed=opts["seed"] + rep + 2_000_000)
        out.update(ti_lb=ti.low, ti_cutoff=ti.cutoff, ti_fits=ti.fits, ti_s=ti.seconds)
        if opts["two_sided"]:
            two = prof.interval(opts["level"])
            ti2 = prof.test_inversion_interval(opts["level"], samples=opts["samples"],
                                               seed=opts["seed"] + rep + 2_000_000)
            out.update(profile_lo=two.low, profile_hi=two.high, ti_lo=ti2.low, ti_hi=ti2.high,
                       ti2_fits=ti2.fits, ti2_s=ti2.seconds)
    return out


def key_of(row) -> tuple:
    """The cell of a row: its settings and the test's null set (rows written before the
    column existed used the twirled null alone)."""
    return (row["gate"], float(row["shots"]), row["kind"], float(row["ratio"]),
            int(row["samples"]), float(row["level"]), row.get("nulls") or "twirled")


def table(rows: list[dict]) -> str:
    groups = defaultdict(list)
    for row in rows:
        groups[key_of(row)].append(row)
    head = ["gate, counts, noise, r", "n", "infid./sd", "profile LB cov.", "test-inv. LB cov.",
            "mean cutoff", "fallbacks", "est. − profile LB", "est. − test-inv. LB", "fits",
            "test-inv. s"]
    two = bool(rows) and all(r.get("ti_lo") not in (None, "") for r in rows)
    if two:
        head += ["profile cov.", "test-inv. cov.", "profile width", "test-inv. width",
                 "two-sided s"]
    out = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for key in sorted(groups):
        g = groups[key]
        col = lambda name: np.array([float(r[name]) for r in g])   # noqa: E731
        t, est = col("truth"), col("est")
        ratio = (1.0 - t.mean()) / est.std(ddof=1) if len(g) > 1 else float("nan")
        nulls = "" if key[6] == "twirled" else f", nulls: {key[6]}"
        line = (f"| {key[0]}, {key[1]:g}, {key[2]}, {key[3]:g}{nulls} | {len(g)} | {ratio:.2f} | "
                f"{_cov(col('profile_lb') <= t)} | {_cov(col('ti_lb') <= t)} | "
                f"{np.nanmean(col('ti_cutoff')):.2f} | {int(np.isnan(col('ti_cutoff')).sum())} | "
                f"{np.mean(est - col('profile_lb')):.2e} | "
                f"{np.mean(est - col('ti_lb')):.2e} | {np.mean(col('ti_fits')):.0f} | "
                f"{np.mean(col('ti_s')):.2f} |")
        if two:
            plo, phi, tlo, thi = (col(k) for k in ("profile_lo", "profile_hi", "ti_lo", "ti_hi"))
            line += (f" {_cov((plo <= t) & (t <= phi))} | {_cov((tlo <= t) & (t <= thi))} | "
                     f"{np.mean(phi - plo):.2e} | {np.mean(thi - tlo):.2e} | "
                     f"{np.mean(col('ti2_s')):.2f} |")
        out.append(line)
    return "\n".join(out)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_cell_arguments(p, Path(__file__).parent / "results" / "lower_bound_coverage.csv",
                       "simulated data sets per tested value (B)")
    p.add_argument("--two-sided", action="store_true",
                   help="also the two-sided profile-likelihood and test-inversion intervals "
                        "(use its own --out)")
    p.add_argument("--nulls", nargs="+", choices=NULLS, default=None,
                   help="processes the test inversion simulates per tested value (default "
                        "the library's for the gate's qubits)")
    args = p.parse_args(argv)
    if args.nulls is None:
        args.nulls = default_nulls(n_qubits_of(named_gate(args.gate).shape[0]))
    if not args.table_only:
        run_cells(args, one_repetition, FIELDS + (TWO_SIDED if args.two_sided else ()), key_of,
                  lambda row: (f"F̂ {row['est']:.6f} (truth {row['truth']:.6f}) profile LB "
                               f"{row['profile_lb']:.6f}, test-inversion LB {row['ti_lb']:.6f} "
                               f"({row['ti_s']:.1f} s)"), two_sided=args.two_sided,
                  nulls=" ".join(args.nulls))
    print(table(read_rows(args.out)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
