"""Time and memory of the Cramér–Rao bound (gatescope.bench.crb.hs_crb) for 1 to 3 qubits.

Each case runs in its own subprocess (so that its peak memory is its own):
simulate a full six-state experiment of a full-rank channel, build the
model, then time ``fisher_information`` (assembly, with the profiled
intensities) and ``inverse_trace`` (Cholesky and triangular inverse)
separately. Peak memory is the process's resident high-water mark (VmHWM)
before and after the bound. Four qubits are not run: the dense matrix would
take 8·65280² bytes (34 GB), which ``fisher_information`` refuses.

With ``--state`` the cases are states instead (``bench --state``): a
random full-rank state of one and two qubits and GHZ with 10% white noise
from three qubits, every product of the six projectors (6^n rows), d² − 1
parameters, up to six qubits.

    python benchmarks/crb_speed.py [--qubits 1 2 3] [--output benchmarks/results/crb_speed.json]
    python benchmarks/crb_speed.py --state --qubits 1 2 3 4 5 6   # -> results/crb_speed_state.json
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from memory import peak_mb  # noqa: E402

CHANNELS = {1: "random:4:1", 2: "random:16:1", 3: "random:64:1"}
STATES = {1: "random:2:1", 2: "random:4:1", **{n: "GHZ+depolarizing:0.1" for n in range(3, 7)}}


def one_case(n: int, state: bool = False) -> dict:
    import tempfile

    from gatescope.model import build_model
    from gatescope.reader import read_experiment
    from gatescope.synth import simulate as channels
    from gatescope.synth import state as states

    if state:
        spec, make, simulate, write = (STATES[n], states.state_from_spec,
                                       states.simulate_state_counts, states.write_state_experiment)
    else:
        spec, make, simulate, write = (CHANNELS[n], channels.channel_from_spec,
                                       channels.simulate_counts, channels.write_experiment)
    truth = make(spec, n)
    with tempfile.TemporaryDirectory() as tmp:
        rows = simulate(truth, shots=1000.0, seed=1)
        exp = read_experiment(write(Path(tmp), truth, rows, title="crb speed"))
    return _timed(build_model(exp), truth.choi, n, spec)


def _timed(model, truth, n: int, spec: str) -> dict:
    import numpy as np

    from gatescope.bench import crb

    lam = np.full(model.n_groups, 1000.0)
    before = peak_mb()
    t0 = time.perf_counter()
    info = crb.fisher_information(model, truth, lam)
    t1 = time.perf_counter()
    bound = crb.inverse_trace(info.matrix)
    t2 = time.perf_counter()
    return {"qubits": n, "channel": spec, "rows": model.n_rows, "parameters": info.n_parameters,
            "fisher_seconds": t1 - t0, "inverse_seconds": t2 - t1, "hs_crb": bound,
            "peak_mb_before": before, "peak_mb_after": peak_mb(),
            "matrix_mb": info.matrix.nbytes / 2 ** 20}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--qubits", type=int, nargs="+", default=[1, 2, 3])
    ap.add_argument("--state", action="store_true", help="states instead of channels")
    ap.add_argument("--output", default=None,
                    help="default results/crb_speed.json (crb_speed_state.json with --state)")
    ap.add_argument("--case", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.case is not None:
        print(json.dumps(one_case(args.case, args.state)))
        return 0
    if args.output is None:
        name = "crb_speed_state.json" if args.state else "crb_speed.json"
        args.output = str(Path(__file__).parent / "results" / name)
    results = []
    for n in args.qubits:
        out = subprocess.run([sys.executable, __file__, "--case", str(n),
                              *(["--state"] if args.state else [])], check=True,
                             capture_output=True, text=True)
        results.append(json.loads(out.stdout.strip().splitlines()[-1]))
    print("| qubits | rows | parameters | Fisher (s) | Tr F⁻¹ (s) | F (MB) "
          "| peak MB before → after |")
    print("|---|---|---|---|---|---|---|")
    for r in results:
        print(f"| {r['qubits']} | {r['rows']} | {r['parameters']} | {r['fisher_seconds']:.3f} | "
              f"{r['inverse_seconds']:.3f} | {r['matrix_mb']:.0f} | "
              f"{r['peak_mb_before']:.0f} → {r['peak_mb_after']:.0f} |")
    record = {"run_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
              "platform": platform.platform(), "python": platform.python_version(),
              "threads": os.environ.get("OPENBLAS_NUM_THREADS"), "cases": results}
    Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    Path(args.output).write_text(json.dumps(record, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
