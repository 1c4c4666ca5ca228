"""How good is an estimator: `gatescope bench` on channels whose truth is known.

* `crb` — Fisher information of the row model and the Cramér–Rao bound;
* `measures` — how far one estimate lands from the truth; one repetition;
* `table` — the aggregated table (bench.csv), slopes, coverage;
* `store` — the bench folder: settings, journal, bench.h5;
* `run` — the bench: options, seeds, the parallel runner, outputs.
"""

from .run import BenchOutcome, check_bench_options, run_bench
from .store import read_bench

__all__ = ["run_bench", "check_bench_options", "BenchOutcome", "read_bench"]
