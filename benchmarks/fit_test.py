"""How often the goodness-of-fit test rejects a model that is right.

Simulates experiments of known channels (the row model exact, Poisson counts),
fits each with `gs.fit(..., bootstrap=B)` and counts how often the model is
declared a poor fit by the χ² reference (both χ² p-values below 1e-3) and by
the parametric-bootstrap test (`gatescope.bootstrap.fit_p_value`, the
decision of `Diagnostics.poor_fit` with B ≥ 199). A calibrated test rejects
a right model at its level; results/fit_test.csv has one row per experiment.

    python benchmarks/fit_test.py [--experiments N] [--samples B] [--workers W]
"""

from __future__ import annotations

import argparse
import csv
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

import gatescope as gs
from gatescope.diagnostics import POOR_FIT_P
from gatescope.conventions import LABEL_SETS
from gatescope.synth.simulate import channel_from_spec, simulate_counts, write_experiment

#: (SPEC, qubits, preparations): near-unitary gates with noise of low Kraus rank, where the
#: estimate sits on the boundary of the physical set, and a full-rank channel for contrast.
CASES = [("CZ+amplitude-damping:0.05", 2, "pauli6"), ("random:2:11", 2, "pauli6"),
         ("random:16:11", 2, "pauli6"), ("random:2:11", 3, "pauli4")]
OUT = Path(__file__).parent / "results" / "fit_test.csv"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--experiments", type=int, default=40)
    ap.add_argument("--experiments-3q", type=int, default=8)
    ap.add_argument("--samples", type=int, default=200)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for spec, n, prep in CASES:
            channel = channel_from_spec(spec, n)
            count = args.experiments if n < 3 else args.experiments_3q
            for k in range(count):
                folder = Path(tmp) / f"{spec.replace(':', '_')}_{n}_{k}"
                counts = simulate_counts(channel, shots=1000, seed=1000 + k, prep_set=LABEL_SETS[prep])
                path = write_experiment(folder, channel, counts, title=spec)
                t0 = time.perf_counter()
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    r = gs.fit(gs.read_experiment(path), bootstrap=args.samples, seed=k, workers=args.workers)
                dg = r.diagnostics
                rows.append({"spec": spec, "qubits": n, "experiment": k, "dof": dg.dof,
                             "deviance": dg.deviance, "chi2_p": dg.chi2_p_value,
                             "deviance_p": dg.deviance_p_value,
                             "bootstrap_p": dg.bootstrap_p_value,
                             "resamples": dg.bootstrap_resamples,
                             "chi2_rejects": int(dg.p_value < POOR_FIT_P),
                             "bootstrap_rejects": int(dg.poor_fit),
                             "seconds": round(time.perf_counter() - t0, 2)})
                print(rows[-1], flush=True)
    OUT.parent.mkdir(exist_ok=True)
    with open(OUT, "w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    print("\n| channel | qubits | experiments | χ² test rejects | bootstrap test rejects | "
          "median bootstrap p |")
    print("|---|---|---|---|---|---|")
    for spec, n, _ in CASES:
        sel = [r for r in rows if r["spec"] == spec and r["qubits"] == n]
        print(f"| `{spec}` | {n} | {len(sel)} | {sum(r['chi2_rejects'] for r in sel)} | "
              f"{sum(r['bootstrap_rejects'] for r in sel)} | "
              f"{np.median([r['bootstrap_p'] for r in sel]):.2f} |")


if __name__ == "__main__":
    main()
