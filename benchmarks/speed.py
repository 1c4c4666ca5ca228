"""Speed of the estimators on full six-state data, against a generic convex solver.

    python benchmarks/speed.py [--qubits 1 2] [--repeats 7] [--no-reference] [--no-jit]

Single thread (numba, OpenBLAS, OpenMP). For every qubit count and estimator:
warm wall time (median of repeats), iterations, log-likelihood, distance to
the CPTP set; for the MLE also a generic convex solver (cvxpy with Clarabel
and SCS) on the same data: its time, its log-likelihood at our Poisson
likelihood, and the time ratio. Also the first call in a fresh process with an
empty numba cache (JIT included) and a second process reusing the cache.
Writes benchmarks/results/speed.json and prints a Markdown table.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

for var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(var, "1")

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

SPECS = {1: "H+depolarizing:0.05+amplitude-damping:0.02", 2: "CZ+zz:0.1+depolarizing:0.03"}
SHOTS = 1000


def make_experiment(n_qubits: int, folder: Path, seed: int = 7):
    from gatescope.experiment import read_experiment
    from gatescope.simulate import channel_from_spec, simulate_counts, write_experiment

    channel = channel_from_spec(SPECS[n_qubits], n_qubits)
    rows = simulate_counts(channel, shots=SHOTS, seed=seed)
    return read_experiment(write_experiment(folder, channel, rows, title=f"speed {n_qubits}q"))


def cptp_distance(choi):
    d = int(round(np.sqrt(choi.shape[0])))
    neg = max(0.0, -np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0])
    tp = np.linalg.norm(np.einsum("iaja->ij", choi.reshape(d, d, d, d)) - np.eye(d))
    return float(max(neg, tp))


def time_estimator(model, method, repeats):
    from gatescope.estimators import estimate

    estimate(model, method)                       # warm up (JIT, caches)
    times, fit = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        fit = estimate(model, method)
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), fit


FIRST_CALL = """
import time, sys
t0 = time.perf_counter()
import gatescope as gs
from gatescope.model import MeasurementModel
from gatescope.estimators import estimate
exp = gs.read_experiment(sys.argv[1])
estimate(MeasurementModel(exp), "mle")
print(time.perf_counter() - t0)
"""


def first_call_seconds(toml_path: Path):
    """Wall time of import + read + MLE in fresh processes: empty cache, then cache reused."""
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        out = []
        for _ in range(2):
            r = subprocess.run([sys.executable, "-c", FIRST_CALL, str(toml_path)], env=env,
                               capture_output=True, text=True, check=True)
            out.append(float(r.stdout.strip().splitlines()[-1]))
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--qubits", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--no-reference", action="store_true", help="skip cvxpy")
    ap.add_argument("--no-jit", action="store_true", help="skip the fresh-process JIT timing")
    args = ap.parse_args()

    from gatescope.likelihood import PoissonLikelihood
    from gatescope.model import MeasurementModel

    rows = []
    report = {"threads": 1, "shots": SHOTS, "specs": SPECS, "runs": rows}
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.qubits:
            exp = make_experiment(n, Path(tmp) / f"q{n}")
            model = MeasurementModel(exp)
            lik = PoissonLikelihood(model)
            mle_time = None
            for method in ("lin", "pls", "mle"):
                seconds, fit = time_estimator(model, method, args.repeats)
                if method == "mle":
                    mle_time, mle_ll = seconds, fit.log_likelihood
                rows.append({"qubits": n, "rows": exp.n_rows, "method": method, "seconds": seconds,
                             "iterations": fit.iterations,
                             "projections": fit.info.get("projections"),
                             "log_likelihood": fit.log_likelihood,
                             "cptp_distance": cptp_distance(fit.choi), "converged": fit.converged})
            if not args.no_reference:
                from reference_solver import solve_mle_cvxpy
                for solver in ("CLARABEL", "SCS"):
                    opts = {"eps": 1e-9, "max_iters": 200000} if solver == "SCS" else {}
                    choi, seconds, status = solve_mle_cvxpy(exp, solver, **opts)
                    ll = lik.evaluate(choi).log_likelihood if choi is not None else float("nan")
                    rows.append({"qubits": n, "rows": exp.n_rows, "method": f"cvxpy/{solver}",
                                 "seconds": seconds, "status": status, "log_likelihood": ll,
                                 "ll_gap_to_ours": mle_ll - ll,
                                 "ratio_to_ours": seconds / mle_time,
                                 "cptp_distance": cptp_distance(choi) if choi is not None else None})
            if not args.no_jit:
                toml = exp.path
                cold, warm = first_call_seconds(toml)
                report.setdefault("first_call", {})[str(n)] = {"empty_cache_s": cold,
                                                               "cached_s": warm}
    out = HERE / "results" / "speed.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps(report, indent=2))
    print("| qubits | rows | method | seconds | iterations | log-likelihood | CPTP distance | note |")
    print("|---|---|---|---|---|---|---|---|")
    for r in rows:
        note = ""
        if "ratio_to_ours" in r:
            note = f"{r['status']}; {r['ratio_to_ours']:.0f}× our MLE time; ℓ gap {r['ll_gap_to_ours']:.2e}"
        elif r["method"] == "mle":
            note = f"{r['projections']} projections"
        dist = r.get("cptp_distance")
        print(f"| {r['qubits']} | {r['rows']} | {r['method']} | {r['seconds']:.4f} | "
              f"{r.get('iterations', '')} | {r['log_likelihood']:.6f} | "
              f"{'' if dist is None else f'{dist:.1e}'} | {note} |")
    for n, v in report.get("first_call", {}).items():
        print(f"\nfirst call, {n} qubit(s), fresh process: empty numba cache {v['empty_cache_s']:.2f} s, "
              f"cache reused {v['cached_s']:.2f} s")
    print(f"\nwritten {out}")


if __name__ == "__main__":
    main()
