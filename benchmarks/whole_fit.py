"""What a user waits for: the whole fit, and the whole bootstrap command, at two qubits.

    python benchmarks/whole_fit.py [--repeats 7]

1. ``gs.fit`` (reading excluded; model, estimator ``mle``, figures of merit,
   goodness of fit, provenance) on the two-qubit full-rank data of
   ``speed.py`` (CZ+zz:0.1+depolarizing:0.03, 1000 counts per basis), one
   thread, warm, median of the repeats; beside it, in the same process, the
   generic convex solver (cvxpy with Clarabel, `reference_solver.py`) solving
   the same maximum-likelihood problem, once, and the log-likelihood of both
   answers by gatescope's own function.
2. ``gatescope fit --bootstrap 200 --workers 2`` on a near-unitary CZ
   (CZ+zz:0.2, the ``2q-near`` data of ``solver_speed.py``), the wall time of the
   whole command as a subprocess (interpreter start and imports included),
   the median of three runs after one warm-up run (numba cache filled).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse                                               # noqa: E402
import subprocess                                             # noqa: E402
import sys                                                    # noqa: E402
import tempfile                                               # noqa: E402
import time                                                   # noqa: E402
import warnings                                               # noqa: E402
from pathlib import Path                                      # noqa: E402

import numpy as np                                            # noqa: E402

import gatescope as gs                                        # noqa: E402
from gatescope.likelihood import PoissonLikelihood            # noqa: E402
from gatescope.model import build_model                       # noqa: E402
from gatescope.synth.simulate import channel_from_spec, simulate_counts, write_experiment  # noqa: E402

sys.path.insert(0, str(Path(__file__).parent))
from reference_solver import solve_mle_cvxpy                  # noqa: E402


def simulated(folder: Path, spec: str) -> Path:
    channel = channel_from_spec(spec, 2)
    return write_experiment(folder, channel, simulate_counts(channel, shots=1000, seed=20261202),
                            title=spec)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        exp = gs.read_experiment(simulated(tmp / "full", "CZ+zz:0.1+depolarizing:0.03"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            gs.fit(exp)                                                   # warm
            times = []
            for _ in range(args.repeats):
                t0 = time.perf_counter()
                result = gs.fit(exp)
                times.append(time.perf_counter() - t0)
        fit_s = float(np.median(times))
        choi, cvx_s, status = solve_mle_cvxpy(exp)
        model = build_model(exp)
        ell = PoissonLikelihood(model)
        ours = ell.evaluate(result.choi).log_likelihood
        theirs = ell.evaluate(choi).log_likelihood
        print(f"gs.fit, 2 qubits full rank: {fit_s * 1e3:.1f} ms (median of {args.repeats}); "
              f"cvxpy+Clarabel solve {cvx_s:.2f} s ({status}); ratio {cvx_s / fit_s:.0f}x; "
              f"log-likelihood ours {ours:.6f}, cvxpy's {theirs:.6f} "
              f"(difference {(ours - theirs) / abs(theirs):+.1e} relative)")

        near = simulated(tmp / "near", "CZ+zz:0.2")
        cmd = [sys.executable, "-m", "gatescope", "fit", str(near), "-o", str(tmp / "b.h5"),
               "--bootstrap", "200", "--workers", "2", "--seed", "1", "--force", "--quiet"]
        walls = []
        for k in range(4):
            t0 = time.perf_counter()
            subprocess.run(cmd, check=True, capture_output=True)
            if k:                                                         # the first warms
                walls.append(time.perf_counter() - t0)
        print(f"gatescope fit --bootstrap 200 --workers 2, CZ+zz:0.2: "
              f"{np.median(walls):.2f} s wall (median of 3, whole command)")


if __name__ == "__main__":
    main()
