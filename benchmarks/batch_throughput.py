"""Throughput of `gatescope batch`: experiments per hour, and what the batch costs
beyond the fits and bootstraps themselves.

Writes N simulated two-qubit experiments (CZ with depolarising and ZZ noise of
varying strength, full six-state sets, 1000 counts per preparation and
analyser basis), then runs the batch on them with B bootstrap resamples per
experiment: on W local workers, and (``--dask``) on a local dask.distributed
cluster of W single-threaded worker processes started by this script (its
start-up is timed apart and not counted).

For each run:

* wall T of `gatescope.batch.run_batch` (a fresh output folder);
* S = the sum over experiments of the fit's own wall time, recorded in each
  result (`provenance/wall_seconds`: the model, the estimate, the figures,
  the bootstrap and the goodness of fit, inside the worker);
* experiments per hour N / T · 3600;
* overhead per experiment (W·T − S) / N, and as a fraction of the fit's own
  time, W·T / S − 1: everything the batch adds — reading the experiments in
  the workers, sending results back, writing result files, summary and log
  in the batch process, starting the workers, the last experiments'
  tail when fewer than W remain.

The machine's load average is recorded before and after each run: on a
shared machine the numbers are only as good as the load was low. Results go
to ``benchmarks/results/batch_throughput.json``.

    nice -n 10 python benchmarks/batch_throughput.py --experiments 200 --bootstrap 100 --workers 2 --dask
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import gatescope as gs
from gatescope.batch import run_batch
from gatescope.synth.simulate import channel_from_spec, simulate_counts, write_experiment

HERE = Path(__file__).resolve().parent


def write_experiments(root: Path, n: int, shots: float) -> None:
    """N two-qubit experiments with depolarising 0.01–0.2 and ZZ 0–0.3 (cycled)."""
    for k in range(n):
        p = 0.01 + 0.19 * (k % 20) / 19
        zz = 0.3 * (k % 7) / 6
        spec = f"CZ+zz:{zz:.3f}+depolarizing:{p:.4f}"
        channel = channel_from_spec(spec)
        rows = simulate_counts(channel, shots=shots, seed=1000 + k)
        write_experiment(root / f"exp{k:03d}", channel, rows, title=f"throughput {spec}",
                         extra_toml=f"\n[conditions]\ndepolarizing = {p:.4f}\nzz = {zz:.3f}\n")


def load() -> list[float]:
    return [round(x, 2) for x in os.getloadavg()]


def one_run(label: str, data: Path, outdir: Path, *, workers: int, bootstrap: int,
            dask: str | None) -> dict:
    before = load()
    t0 = time.perf_counter()
    outcome = run_batch([data], outdir, workers=workers, bootstrap=bootstrap, seed=1, dask=dask,
                        stream=io.StringIO(), out=io.StringIO())
    wall = time.perf_counter() - t0
    after = load()
    fits = [gs.load_result(p).provenance for p in sorted(outdir.rglob("*.h5"))]
    own = sum(float(p["wall_seconds"]) for p in fits)
    n = len(fits)
    row = {
        "run": label, "experiments": n, "failed": outcome.failed, "workers": workers,
        "bootstrap": bootstrap, "wall_s": round(wall, 2), "fit_and_bootstrap_s": round(own, 2),
        "mean_fit_and_bootstrap_s": round(own / n, 3),
        "experiments_per_hour": round(n / wall * 3600, 1),
        "overhead_per_experiment_s": round((workers * wall - own) / n, 4),
        "overhead_fraction": round(workers * wall / own - 1, 4),
        "load_before": before, "load_after": after,
    }
    print(json.dumps(row), flush=True)
    return row


def table(outdir: Path) -> list[dict]:
    with open(outdir / "summary.csv", newline="") as fh:
        return [{k: v for k, v in r.items() if k != "seconds"} for r in csv.DictReader(fh)]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--experiments", type=int, default=200)
    ap.add_argument("--bootstrap", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--shots", type=float, default=1000.0)
    ap.add_argument("--dask", action="store_true", help="also on a local dask cluster")
    ap.add_argument("--output", type=Path, default=HERE / "results" / "batch_throughput.json")
    args = ap.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="gatescope-throughput-") as tmp:
        tmp = Path(tmp)
        write_experiments(tmp / "data", args.experiments, args.shots)
        runs = [one_run("local", tmp / "data", tmp / "local", workers=args.workers,
                        bootstrap=args.bootstrap, dask=None)]
        same = None
        if args.dask:
            from dask.distributed import LocalCluster

            t0 = time.perf_counter()
            cluster = LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                                   host="127.0.0.1", dashboard_address=None)
            start = time.perf_counter() - t0
            try:
                row = one_run("dask", tmp / "data", tmp / "dask", workers=args.workers,
                              bootstrap=args.bootstrap, dask=cluster.scheduler_address)
            finally:
                cluster.close()
            row["cluster_start_s"] = round(start, 2)
            runs.append(row)
            same = table(tmp / "local") == table(tmp / "dask")
            print(f"dask summary equals local summary (wall times aside): {same}")

    commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                            text=True, cwd=HERE).stdout.strip()
    record = {
        "when_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "commit": commit, "gatescope": gs.__version__, "python": sys.version.split()[0],
        "platform": platform.platform(), "cpus": os.cpu_count(),
        "experiments": args.experiments, "bootstrap": args.bootstrap, "shots": args.shots,
        "runs": runs, "dask_summary_equals_local": same,
    }
    args.output.parent.mkdir(parents=True, exist_ok=True)
    args.output.write_text(json.dumps(record, indent=1) + "\n")
    print(f"written {args.output}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
