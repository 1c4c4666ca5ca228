"""How the time and memory of a fit grow with the number of qubits, measured on this
machine for 1 to 4 qubits: the numbers behind `gatescope.resources`.

    python benchmarks/scaling.py [--qubits 1 2 3 4] [--iterations 20] [--output results/scaling.json]

For every n (full six-state sets: 6^n preparations × 6^n analyser projectors,
1000 counts per preparation and basis) one subprocess, single-threaded:

* writes the experiment (another process, not timed), then reads it in a fresh
  process: the CSV's size, the reading's wall time and the growth of the peak
  resident memory (VmHWM) over the process after its imports;
* builds the measurement model and runs `--iterations` iterations of the MLE
  (kernels compiled first): seconds per iteration, and the growth of the peak
  memory over the resident memory before the fit (the peak is reset through
  /proc/self/clear_refs before reading and before fitting);
* the iterations a converged MLE takes (n ≤ 3; at n = 4 the full fit takes minutes,
  see benchmarks/README.md).

It prints one JSON line per n and a fit of the per-unit costs that
`gatescope.resources` uses (bytes of memory per CSV byte when reading, per row and
per grid cell and per d⁴ element when fitting; seconds per row, per grid cell ×
qubit and per d⁶ per iteration). Run on an idle machine; the numbers in
`gatescope/resources.py` say when and where they were taken.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

for _var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

HERE = Path(__file__).resolve().parent
SPECS = {1: "H+depolarizing:0.05", 2: "CZ+depolarizing:0.05", 3: "random:8:3", 4: "random:16:4"}

WRITE = r"""
import sys
from pathlib import Path
from gatescope.synth.simulate import channel_from_spec, simulate_counts, write_experiment
n, spec, folder = int(sys.argv[1]), sys.argv[2], Path(sys.argv[3])
channel = channel_from_spec(spec, n)
write_experiment(folder, channel, simulate_counts(channel, shots=1000.0, seed=1), title="scaling")
"""

CASE = r"""
import json, sys, time, warnings
from pathlib import Path
import numpy as np

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key + ":"):
            return int(line.split()[1]) * 1024
    return 0

def reset_peak():
    # writing 5 to clear_refs resets VmHWM to the current resident size (Linux)
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")
    import gc
    gc.collect()
    return status("VmRSS")

n, spec, folder, iterations = int(sys.argv[1]), sys.argv[2], Path(sys.argv[3]), int(sys.argv[4])
from gatescope.reader import read_experiment
from gatescope.model import MeasurementModel
from gatescope.estimators import estimate
from gatescope.pipeline import compile_kernels
warnings.simplefilter("ignore")
path = folder / "experiment.toml"
base = reset_peak()
t0 = time.perf_counter()
exp = read_experiment(path)
read_seconds = time.perf_counter() - t0
read_bytes = status("VmHWM") - base
model = MeasurementModel(exp)
compile_kernels(model, notify=False)
before_fit = reset_peak()
t0 = time.perf_counter()
fit = estimate(model, "mle", maxiter=iterations)
per_iteration = (time.perf_counter() - t0) / max(fit.iterations, 1)
fit_bytes = status("VmHWM") - before_fit
# the two parts of an iteration, at the estimate: likelihood with gradient, projection
from gatescope.likelihood import PoissonLikelihood
from gatescope.projection import project_physical
lik = PoissonLikelihood(model)
t0 = time.perf_counter()
for _ in range(3):
    grad = lik.gradient(lik.evaluate(fit.choi))
evaluation = (time.perf_counter() - t0) / 3
step = fit.choi + grad / max(lik.total_counts, 1.0)
t0 = time.perf_counter()
for _ in range(3):
    project_physical(model, step, multiplier=fit.info.get("multiplier"))
projection = (time.perf_counter() - t0) / 3
full = None
if n <= 3:
    full = estimate(model, "mle").iterations
grid = (exp.single_prep_states.shape[0] * exp.single_meas_effects.shape[0]) ** n
print(json.dumps({"qubits": n, "rows": exp.n_rows, "csv_bytes": exp.counts_path.stat().st_size,
                  "grid": grid, "read_seconds": read_seconds, "read_bytes": read_bytes,
                  "fit_bytes": fit_bytes, "baseline_bytes": base,
                  "seconds_per_iteration": per_iteration, "iterations_measured": fit.iterations,
                  "evaluation_seconds": evaluation, "projection_seconds": projection,
                  "projections_per_iteration": fit.info["projections"] / max(fit.iterations, 1),
                  "iterations_to_converge": full}))
"""


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--qubits", type=int, nargs="+", default=[1, 2, 3, 4])
    p.add_argument("--iterations", type=int, default=20)
    p.add_argument("--output", default=str(HERE / "results" / "scaling.json"))
    args = p.parse_args(argv)
    rows = []
    env = dict(os.environ, PYTHONPATH=str(HERE.parent / "engine") + os.pathsep
               + os.environ.get("PYTHONPATH", ""))
    for n in args.qubits:
        with tempfile.TemporaryDirectory() as tmp:
            # the experiment is written by one process and measured in a fresh one
            subprocess.run([sys.executable, "-c", WRITE, str(n), SPECS[n], tmp], check=True, env=env)
            out = subprocess.run([sys.executable, "-c", CASE, str(n), SPECS[n], tmp,
                                  str(args.iterations)], capture_output=True, text=True, env=env)
        if out.returncode != 0:
            print(out.stderr, file=sys.stderr)
            return 1
        row = json.loads(out.stdout.strip().splitlines()[-1])
        print(json.dumps(row))
        rows.append(row)
    Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    Path(args.output).write_text(json.dumps(rows, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
