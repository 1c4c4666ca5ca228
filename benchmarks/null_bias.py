"""Bias and spread of the process-fidelity estimate simulated from the processes a test
inversion could use as its null: does the simulation reproduce the truth's bias?

A cell is a gate with a noise kind at an infidelity (the channels of
``boundary_coverage.py``). For each of ``--datasets`` data sets of the truth (counts
seed ``seed + k``, as in that script) the script fits ``mle`` and simulates
``--samples`` data sets from each of four processes, refitting each by ``mle``
(warm-started at the simulated process, as the test inversion does):

* ``truth`` — the true channel (what the simulation should imitate);
* ``twirled truth`` — the true channel Pauli-twirled around the target
  (`gatescope.profile.pauli_twirl`): same fidelity, the coherent part of the error
  removed;
* ``estimate`` and ``twirled estimate`` — the maximum-likelihood estimate, as is and
  twirled (the test inversion simulates the profile maximiser of each tested value,
  a point like the estimate).

It prints, per process, the mean over data sets of the bias E[F̂*] − F(source) and of
the spread sd(F̂*), both in units of the spread of F̂ simulated from the truth. A null
reproduces the truth's law when its bias and spread match the truth's.

    nice -n 10 python benchmarks/null_bias.py --gate CZ --kinds overrotation white damping \
        --infidelity 2e-4
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from boundary_coverage import KINDS, noisy_channel  # noqa: E402
from gatescope.estimators import estimate  # noqa: E402
from gatescope.likelihood import PoissonLikelihood  # noqa: E402
from gatescope.model import build_model  # noqa: E402
from gatescope.profile import pauli_twirl, process_fidelity_figure, simulated_values  # noqa: E402
from gatescope.reader import read_experiment  # noqa: E402
from gatescope.synth.simulate import simulate_counts, write_experiment  # noqa: E402

SOURCES = ("truth", "twirled truth", "estimate", "twirled estimate")


def cell(gate: str, kind: str, infidelity: float, shots: float, datasets: int, samples: int,
         seed: int) -> dict:
    """Mean bias and spread of F̂* per source over the data sets, in units of the spread
    of F̂* from the truth."""
    channel = noisy_channel(gate, kind, infidelity)
    bias = {s: [] for s in SOURCES}
    spread = {s: [] for s in SOURCES}
    for k in range(datasets):
        with tempfile.TemporaryDirectory() as tmp:
            rows = simulate_counts(channel, shots=shots, seed=seed + k)
            exp = read_experiment(write_experiment(Path(tmp), channel, rows, title="bias"))
        model = build_model(exp)
        figure = process_fidelity_figure(exp.target)
        fit = estimate(model, "mle")
        processes = {"truth": channel.choi,
                     "twirled truth": pauli_twirl(channel.choi, exp.target),
                     "estimate": fit.choi,
                     "twirled estimate": pauli_twirl(fit.choi, exp.target)}
        for name, source in processes.items():
            values = simulated_values(PoissonLikelihood(model), figure, source, samples,
                                      seed + k + 5_000_000)
            bias[name].append(values.mean() - figure.value(source))
            spread[name].append(values.std(ddof=1))
    unit = float(np.mean(spread["truth"]))
    return {"unit": unit, **{s: (float(np.mean(bias[s])) / unit, float(np.mean(spread[s])) / unit)
                             for s in SOURCES}}


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--gate", default="H")
    p.add_argument("--kinds", nargs="+", default=list(KINDS), choices=KINDS)
    p.add_argument("--infidelity", type=float, nargs="+", default=[3e-4])
    p.add_argument("--shots", type=float, default=1000.0,
                   help="expected counts per preparation and analyser basis")
    p.add_argument("--datasets", type=int, default=10, help="data sets of the truth per cell")
    p.add_argument("--samples", type=int, default=100, help="simulated data sets per source")
    p.add_argument("--seed", type=int, default=2026)
    args = p.parse_args(argv)
    head = ["gate, counts, noise, infidelity", "sd of F̂* (truth)"]
    head += [f"{s}: bias / sd" for s in SOURCES]
    print("| " + " | ".join(head) + " |")
    print("|" + "---|" * len(head))
    warnings.simplefilter("ignore")
    for kind in args.kinds:
        for inf in args.infidelity:
            c = cell(args.gate, kind, inf, args.shots, args.datasets, args.samples, args.seed)
            parts = [f"{c[s][0]:+.2f} / {c[s][1]:.2f}" for s in SOURCES]
            print(f"| {args.gate}, {args.shots:g}, {kind}, {inf:g} | {c['unit']:.2e} | "
                  + " | ".join(parts) + " |", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
