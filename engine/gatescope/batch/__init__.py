"""Overnight batches: every experiment under some folders fitted into one output
folder, resumable, crash-safe, in parallel on the package's runner (local
workers or a ``dask.distributed`` cluster), optionally watching for new
experiments (the `batch` command; README, "Overnight batches").

* `discover` — finding experiments, their names, noticing changed inputs;
* `lock` — one batch per output folder;
* `table` — ``summary.csv``, one row per experiment;
* `log` — ``batch.log``, one line per event;
* `run` — the looks, the tasks, the seeds, stopping on signals: `run_batch`.
"""

from .run import BatchOutcome, run_batch

__all__ = ["run_batch", "BatchOutcome"]
