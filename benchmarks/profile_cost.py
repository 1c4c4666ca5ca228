"""What profile-likelihood intervals add to a fit: seconds of `gatescope.fit` with and without.

For each qubit count, one simulated experiment (the gate with white noise at
``--infidelity``, ``--shots`` counts per preparation and analyser basis,
full six-state sets) is fitted ``--repeats`` times in each configuration, on
``--workers`` processes (default one) with one thread each, and the median wall
time is kept:

* ``fit`` — the point fit alone;
* ``profile`` — ``interval="profile"`` without a bootstrap;
* ``profile+lower`` — the same with ``lower_bound=True``;
* ``bootstrap`` — ``bootstrap=B`` with the ``normal`` interval;
* ``bootstrap+profile`` — both;
* ``bootstrap+default`` — ``bootstrap=B`` with the default intervals (test
  inversion for the fidelities of one- and two-qubit processes).

The ratios to ``fit`` and to ``bootstrap`` are printed beside the seconds and
written with them to ``--out`` (JSON).

    nice -n 10 python benchmarks/profile_cost.py --qubits 1 2
    python benchmarks/profile_cost.py --qubits 2 --infidelity 0.0003 --repeats 1 --workers 2 \
        --out benchmarks/results/profile_cost_workers2.json
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import gatescope as gs  # noqa: E402
from gatescope.synth.simulate import channel_from_spec, simulate_counts, write_experiment  # noqa: E402

GATES = {1: "H", 2: "CZ"}


def configurations(samples: int) -> dict:
    return {"fit": {}, "profile": {"interval": "profile"},
            "profile+lower": {"interval": "profile", "lower_bound": True},
            "bootstrap": {"bootstrap": samples, "interval": "normal"},
            "bootstrap+profile": {"bootstrap": samples, "interval": "profile"},
            "bootstrap+default": {"bootstrap": samples}}


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--qubits", type=int, nargs="+", default=[1, 2])
    p.add_argument("--shots", type=float, default=1000.0)
    p.add_argument("--infidelity", type=float, default=0.01)
    p.add_argument("--samples", type=int, default=100, help="bootstrap resamples B")
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--workers", type=int, default=1,
                   help="worker processes of every fit (bootstrap and test-inversion refits)")
    p.add_argument("--out", type=Path,
                   default=Path(__file__).parent / "results" / "profile_cost.json")
    args = p.parse_args(argv)
    results = {}
    for n in args.qubits:
        d = 2 ** n
        spec = f"{GATES[n]}+depolarizing:{args.infidelity / (1 - 1 / d ** 2):.6g}"
        with tempfile.TemporaryDirectory() as tmp:
            channel = channel_from_spec(spec)
            rows = simulate_counts(channel, shots=args.shots, seed=1)
            exp = gs.read_experiment(write_experiment(Path(tmp), channel, rows, title="cost"))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                gs.fit(exp, interval="profile")          # compile and warm up
                seconds = {}
                for name, kw in configurations(args.samples).items():
                    runs = []
                    for _ in range(args.repeats):
                        t0 = time.perf_counter()
                        gs.fit(exp, seed=1, workers=args.workers, **kw)
                        runs.append(time.perf_counter() - t0)
                    seconds[name] = statistics.median(runs)
        results[str(n)] = {"spec": spec, "shots": args.shots, "samples": args.samples,
                           "workers": args.workers, "seconds": seconds}
        base, boot = seconds["fit"], seconds["bootstrap"]
        print(f"{n} qubit(s), {spec}, {args.shots:g} counts per basis, B = {args.samples}, "
              f"{args.workers} worker(s):")
        for name, s in seconds.items():
            print(f"  {name:18s} {s:8.3f} s   × {s / base:7.1f} of fit   × {s / boot:5.2f} "
                  f"of bootstrap")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"measured": time.strftime("%Y-%m-%d %H:%M UTC",
                                                              time.gmtime()),
                                    "results": results}, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
