"""Running a batch: looks for experiments, fits what needs fitting on the
package's runner, writes every result as it arrives.

One look: find the experiments (`discover`), hash their input files, and
sort each into skipped (a result file whose input hashes and fit settings
match exists; not with ``force``), waiting (``watch``: an input changed
within the last ``watch`` seconds), or to fit. The experiments to fit go to
`gatescope.parallel.Runner` one per task (``chunk=1``); a task
(`fit_task`) reads its experiment, fits it with a single-threaded
bootstrap and returns the `Result`, or the failure as text; only this
process writes files, so workers on a dask cluster need no access to
OUTDIR (they read the experiment files, at their absolute paths). Each
arrival is written at once: the result file (atomically), a line in
``batch.log``, and the whole ``summary.csv`` (atomically). Without
``watch`` the batch ends after one look; with it, it looks again every
``watch`` seconds until it is stopped.

Seeds. Experiment ``name`` fits with the bootstrap seed
`experiment_seed` (batch seed, name): a ``numpy.random.SeedSequence``
whose entropy is the batch seed and the SHA-256 of the name, so its
numbers depend on neither the number of workers, nor the order of the
experiments, nor on where a batch was interrupted. Without a batch seed
one is drawn, recorded and printed; a resumed batch without ``seed`` keeps
the results of any seed.

Settings recorded. Every result carries, in its provenance, the batch's
settings (`Settings.recorded`: method, bootstrap samples, bootstrap kind,
interval, confidence level, batch seed, seed rule) and its name; a result
is kept by a later batch only when they match its own settings and the
input hashes match its files.

Stopping. SIGINT (Ctrl-C) and SIGTERM raise `Stop` in this process: the
runner stops its workers at once (local workers are killed, dask tasks are
cancelled), the lock is released, and the batch says what is left and how
to resume. The experiments in flight are lost and fitted again next time;
everything written before is complete (atomic writes).
"""

from __future__ import annotations

import contextlib
import hashlib
import signal
import sys
import threading
import time
import traceback
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..bootstrap import KINDS, draw_seed
from ..errors import GatescopeWarning, InputError
from ..fileio import leftover_temporaries
from ..intervals import DEFAULT_INTERVAL
from ..options import MAX_SEED, flag, positive
from ..options import seed as check_seed
from ..options import workers as check_workers
from ..parallel import Runner
from ..pipeline import check_fit_options, fit
from ..progress import Progress
from ..reader import read_conditions, read_experiment
from ..result import load_result
from .discover import InputScanner, find_experiments, result_path
from .lock import OutdirLock
from .log import LOG_NAME, BatchLog, one_line
from .table import SUMMARY_NAME, row_from_failure, row_from_result, write_summary

#: How a per-experiment seed is made from the batch seed (recorded; a change redoes all).
SEED_RULE = "SeedSequence(entropy=[batch seed, SHA-256 of the name as 8 little-endian uint32]), " \
            "first 64-bit word, 63 bits"
#: Confidence level of the intervals of a batch.
CI_LEVEL = 0.95
#: The figure a log line reports: the first of these that the result has.
MAIN_FIGURES = ("process_fidelity", "purity")


def experiment_seed(batch_seed: int, name: str) -> int:
    """The bootstrap seed of experiment ``name`` in a batch of seed ``batch_seed`` (see
    `SEED_RULE`): in [0, 2**63 − 1], a function of the two alone."""
    words = np.frombuffer(hashlib.sha256(name.encode("utf-8")).digest(), dtype="<u4")
    sequence = np.random.SeedSequence([int(batch_seed), *(int(w) for w in words)])
    return int(sequence.generate_state(1, dtype=np.uint64)[0]) & MAX_SEED


@dataclass(frozen=True)
class Settings:
    """The fit settings of a batch (the ``shared`` state of its tasks)."""

    method: str = "mle"
    bootstrap: int = 0
    seed: int = 0
    seed_given: bool = True
    bootstrap_kind: str = KINDS[0]
    interval: str = DEFAULT_INTERVAL
    ci_level: float = CI_LEVEL
    command_line: str | None = None

    def recorded(self) -> dict:
        """The provenance entries that record these settings in a result."""
        return {"batch_method": self.method, "batch_bootstrap": int(self.bootstrap),
                "batch_bootstrap_kind": self.bootstrap_kind, "batch_interval": self.interval,
                "batch_ci_level": float(self.ci_level), "batch_seed": int(self.seed),
                "batch_seed_rule": SEED_RULE}

    def differences(self, provenance: dict) -> list[str]:
        """What differs between these settings and those recorded in ``provenance``
        (the batch seed only when it was given); empty when the result can be kept."""
        out = []
        for key, value in self.recorded().items():
            if key == "batch_seed" and not self.seed_given:
                continue
            old = provenance.get(key)
            if old != value:
                out.append(f"{key[len('batch_'):]} {'unrecorded' if old is None else repr(old)}"
                           f" -> {value!r}")
        return out


@dataclass(frozen=True)
class Job:
    """One experiment to fit: its name, experiment file (absolute) and bootstrap seed."""

    name: str
    path: str
    seed: int


@dataclass
class Outcome:
    """What a task sends back: the result, or the failure as text."""

    name: str
    result: object = None
    error: str | None = None
    seconds: float = 0.0
    warnings: tuple = ()
    conditions: dict = field(default_factory=dict)


def describe_error(exc: BaseException) -> str:
    """An InputError's own message; for anything else its type, message and the line
    that raised it (a bug report's first line)."""
    if isinstance(exc, InputError):
        return str(exc)
    frames = traceback.extract_tb(exc.__traceback__)
    where = f" (at {Path(frames[-1].filename).name}:{frames[-1].lineno})" if frames else ""
    return f"{type(exc).__name__}: {exc}{where}"


def fit_task(settings: Settings, job: Job) -> Outcome:
    """Read and fit one experiment (a task of `gatescope.parallel.Runner`).

    Every failure is caught and returned as text (failures are data: the
    batch records them and goes on); the fit's warnings are returned too.
    """
    t0 = time.perf_counter()
    result = error = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", GatescopeWarning)
        try:
            experiment = read_experiment(job.path)
            result = fit(experiment, settings.method, bootstrap=settings.bootstrap,
                         bootstrap_kind=settings.bootstrap_kind, ci_level=settings.ci_level,
                         interval=settings.interval, seed=job.seed, workers=1,
                         command_line=settings.command_line)
            result.provenance.update(settings.recorded(), batch_name=job.name)
        except Exception as exc:        # noqa: BLE001 -- recorded in the table and the log
            error = describe_error(exc)
    notes = tuple(one_line(w.message) for w in caught if issubclass(w.category, GatescopeWarning))
    if result is not None:
        conditions = dict(result.conditions)
    else:
        try:
            conditions = read_conditions(job.path)
        except InputError:
            conditions = {}
    return Outcome(job.name, result, error, time.perf_counter() - t0, notes, conditions)


def main_figure(result) -> str:
    """The main figure of a result with its interval, as a log line shows it."""
    for name in MAIN_FIGURES:
        fig = result.figures.get(name)
        if fig is not None:
            ci = f" [{fig.ci[0]:.5f}, {fig.ci[1]:.5f}]" if fig.ci is not None else ""
            return f"{name} {fig.value:.5f}{ci}"
    return "no figures"


# --------------------------------------------------------------------------
# Stopping on signals
# --------------------------------------------------------------------------

class Stop(BaseException):
    """Raised in the batch process by SIGINT or SIGTERM (not an Exception, so that no
    `except Exception` on the way swallows it)."""

    def __init__(self, signum: int):
        self.signum = signum
        self.signal_name = signal.Signals(signum).name
        super().__init__(self.signal_name)


STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


@contextlib.contextmanager
def stop_on_signals():
    """Inside the block SIGINT and SIGTERM raise `Stop` (once: later ones are ignored,
    so that stopping the workers and releasing the lock are not interrupted).
    Outside the main thread signals cannot be caught and nothing changes."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        for sig in STOP_SIGNALS:
            signal.signal(sig, signal.SIG_IGN)
        raise Stop(signum)

    previous = {sig: signal.signal(sig, handler) for sig in STOP_SIGNALS}
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)


class RunnerFailed(Exception):
    """The runner itself failed (a worker process died, the cluster went away)."""


# --------------------------------------------------------------------------
# The batch
# --------------------------------------------------------------------------

@dataclass
class BatchOutcome:
    """How a batch ended.

    ``done``, ``failed`` and ``skipped`` count this run's experiments (a
    failure retried and fitted counts in both); ``table_failed`` the rows
    of the final table whose status is ``failed``; ``exit_status`` that of
    the command (0; 1 when an experiment in the table failed, or the batch
    was stopped before the end without ``watch``).
    """

    summary: Path
    found: int = 0
    done: int = 0
    failed: int = 0
    skipped: int = 0
    table_failed: int = 0
    stopped_by: str | None = None
    exit_status: int = 0


class Batch:
    """The state of one batch run: the table's rows and what was handled in this run."""

    def __init__(self, paths, outdir: Path, settings: Settings, *, workers: int,
                 address: str | None, force: bool, watch: float | None, log: BatchLog,
                 stream, first_runner: Runner | None = None):
        self.paths = list(paths)
        self.outdir = outdir
        self.settings = settings
        self.workers = workers
        self.address = address
        self.force = force
        self.watch = watch
        self.log = log
        self.stream = stream
        self.terminal = hasattr(stream, "isatty") and stream.isatty()
        self.first_runner = first_runner
        self.rows: dict = {}
        self.seen: dict = {}              # name -> input key handled in this run
        self.waiting: set = set()         # names reported as waiting
        self.scanner = InputScanner()
        self.tally = {"done": 0, "failed": 0, "skipped": 0}
        self.in_flight = 0
        self.found = 0

    # -- the table -------------------------------------------------------
    def write_summary(self) -> None:
        write_summary(self.outdir / SUMMARY_NAME, self.rows.values())

    def table_failed(self) -> int:
        return sum(row.status == "failed" for row in self.rows.values())

    def _postfix(self) -> str:
        t = self.tally
        return f"done {t['done']}, failed {t['failed']}, skipped {t['skipped']}"

    # -- one look ----------------------------------------------------------
    def look(self) -> list:
        """Sort every experiment found; returns the (Job, input key) pairs to fit."""
        try:
            found = find_experiments(self.paths)
        except InputError as exc:
            if self.watch is None:
                raise
            self.log.event("note", f"cannot look for experiments ({exc}); trying again later")
            return []
        self.found = len(found)
        now = time.time()
        names = {f.name for f in found}
        changed = False
        for name in [n for n in self.rows if n not in names]:     # folders that went away
            del self.rows[name]
            self.seen.pop(name, None)
            changed = True
        jobs = []
        for f in found:
            inputs = self.scanner.inspect(f.path)
            if self.seen.get(f.name) == inputs.key:
                continue
            if self.watch is not None and not self.scanner.settled(f.path, inputs, now, self.watch):
                if f.name not in self.waiting:          # said once, until it settles
                    self.waiting.add(f.name)
                    self.log.event("waiting", f"{f.name}: an input file changed within the "
                                              f"last {self.watch:g} s; fitted at a later look")
                continue
            self.waiting.discard(f.name)
            row = None if self.force else self._matching_result(f, inputs)
            if row is not None:
                self.rows[f.name] = row
                self.seen[f.name] = inputs.key
                self.tally["skipped"] += 1
                changed = True
                self.log.event("skipped", f"{f.name}: result matches its input and settings")
                continue
            job = Job(f.name, str(f.path), experiment_seed(self.settings.seed, f.name))
            jobs.append((job, inputs.key))
        if changed:
            self.write_summary()
        return jobs

    def _matching_result(self, found, inputs):
        """The table row of an existing result that can be kept, else None (and why, in
        the log, when a result exists)."""
        path = result_path(self.outdir, found.name)
        if not path.exists():
            return None
        try:
            result = load_result(path)
        except Exception as exc:        # noqa: BLE001 -- any unreadable result is redone
            self.log.event("redo", f"{found.name}: its result cannot be read "
                                   f"({describe_error(exc)})")
            return None
        why = []
        if (result.toml_sha256, result.csv_sha256) != (inputs.toml_sha256, inputs.csv_sha256):
            why.append("input changed")
        why += self.settings.differences(result.provenance)
        if why:
            self.log.event("redo", f"{found.name}: {'; '.join(why)}")
            return None
        return row_from_result(found.name, found.path, result)

    # -- fitting -----------------------------------------------------------
    def _runner(self) -> Runner:
        runner, self.first_runner = self.first_runner, None
        if runner is None:
            runner = Runner(self.workers, shared=self.settings, address=self.address)
        return runner

    def fit(self, jobs: list) -> None:
        """Fit ``jobs`` on a runner, writing each arrival; RunnerFailed when the runner
        (not a fit: tasks return their failures) fails."""
        self.in_flight = len(jobs)
        try:
            runner = self._runner()
        except InputError as exc:           # a cluster that cannot be reached
            raise RunnerFailed(str(exc)) from exc
        with runner, Progress(len(jobs), "batch", "experiment", enabled=self.terminal,
                              stream=self.stream) as bar:
            arrivals = runner.map(fit_task, [job for job, _ in jobs], chunk=1)
            while True:
                try:
                    index, outcome = next(arrivals)
                except StopIteration:
                    break
                except Exception as exc:    # noqa: BLE001 -- a worker died, a cluster went away
                    raise RunnerFailed(describe_error(exc)) from exc
                job, key = jobs[index]
                self._record(job, key, outcome)
                self.in_flight -= 1
                bar.update(1, postfix=self._postfix())

    def _record(self, job: Job, key, outcome: Outcome) -> None:
        if outcome.result is not None:
            outcome.result.save(result_path(self.outdir, job.name))
            row = row_from_result(job.name, job.path, outcome.result)
            self.tally["done"] += 1
            self.log.event("done", f"{job.name}: {main_figure(outcome.result)}, "
                                   f"{outcome.seconds:.1f} s")
        else:
            row = row_from_failure(job.name, job.path, outcome.error, outcome.seconds,
                                   outcome.conditions)
            self.tally["failed"] += 1
            self.log.event("failed", f"{job.name}: {outcome.error}")
        for text in outcome.warnings:
            self.log.event("warning", f"{job.name}: {text}")
        self.rows[job.name] = row
        self.seen[job.name] = key
        self.write_summary()

    def loop(self) -> None:
        """Look and fit; once, or every ``watch`` seconds until stopped."""
        next_look = time.monotonic()
        while True:
            jobs = self.look()
            if jobs:
                try:
                    self.fit(jobs)
                except RunnerFailed as exc:
                    if self.watch is None:
                        raise
                    self.log.event("note", f"the runner failed ({exc}); "
                                           f"{self.in_flight} experiment(s) wait for the next look")
                    self.in_flight = 0
            if self.watch is None:
                return
            next_look += self.watch
            pause = next_look - time.monotonic()
            if pause > 0:
                time.sleep(pause)
            else:
                next_look = time.monotonic()


def _check_options(*, method, bootstrap, seed, workers, watch, dask, command_line: bool):
    name = flag if command_line else (lambda key: key)
    check_fit_options(method=method, bootstrap=bootstrap, seed=seed, workers=workers,
                      command_line=command_line)
    check_seed(seed, name("seed"))
    workers = check_workers(workers, name("workers"))
    if watch is not None:
        positive(watch, name("watch"))
    if dask is not None and (not isinstance(dask, str) or not dask.strip()):
        raise InputError(f"expected the address of a dask scheduler, got {dask!r}",
                         key=name("dask"))
    return workers


def run_batch(paths, outdir, *, workers: int | None = None, bootstrap: int = 0,
              method: str = "mle", seed: int | None = None, force: bool = False,
              watch: float | None = None, dask: str | None = None,
              command_line: str | None = None, stream=None, out=None) -> BatchOutcome:
    """Fit every experiment under ``paths`` into ``outdir`` (README, "Overnight batches").

    Parameters
    ----------
    paths : list of str or Path
        Experiment files, or folders searched recursively for ``experiment.toml``.
    outdir : str or Path
        Gets ``<name>.h5`` per experiment, ``summary.csv``, ``batch.log`` and,
        while the batch runs, ``batch.lock``.
    workers : int, optional
        Local worker processes (default: the machine's cores); ignored with ``dask``.
    bootstrap : int
        Resamples per experiment (0: no error bars).
    method : str
        Estimator (`gatescope.estimators.ESTIMATORS`).
    seed : int, optional
        Batch seed; drawn (and printed, and recorded) when not given.
    force : bool
        Fit every experiment even when a matching result exists.
    watch : float, optional
        Look for new or changed experiments every ``watch`` seconds until stopped;
        an experiment whose input changed within that time waits for a later look.
    dask : str, optional
        Address of a running ``dask.distributed`` scheduler (the ``dask`` extra).
    command_line : str, optional
        The command that started the batch: recorded in the results, printed as
        the way to resume; its presence also names options by their flags in errors.
    stream, out : text streams
        Messages and the log's copy (default stderr); the table's path (default stdout).

    Raises
    ------
    InputError
        Bad options, a PATH that does not exist, nothing to fit, an unreachable
        scheduler, or another batch writing to ``outdir`` — before anything is fitted.
    """
    stream = sys.stderr if stream is None else stream
    out = sys.stdout if out is None else out
    workers = _check_options(method=method, bootstrap=bootstrap, seed=seed, workers=workers,
                             watch=watch, dask=dask, command_line=command_line is not None)
    settings = Settings(method=method, bootstrap=int(bootstrap),
                        seed=draw_seed() if seed is None else int(seed),
                        seed_given=seed is not None, command_line=command_line)
    found = find_experiments(paths)
    if not found and watch is None:
        raise InputError("no experiment.toml found", file=", ".join(map(str, paths)))
    outdir = Path(outdir)
    outcome = BatchOutcome(summary=outdir / SUMMARY_NAME)
    first_runner = Runner(workers, shared=settings, address=dask)    # connects to a cluster now
    with contextlib.ExitStack() as stack:
        stack.callback(first_runner.close)
        lock = stack.enter_context(OutdirLock(outdir, command_line))
        terminal = hasattr(stream, "isatty") and stream.isatty()
        log = stack.enter_context(BatchLog(outdir / LOG_NAME, echo=None if terminal else stream))
        if lock.taken_over:
            text = f"took over the lock of a batch that is no longer running ({lock.taken_over})"
            log.event("note", text)
            if terminal:
                stream.write(f"gatescope batch: {text}\n")
        leftovers = leftover_temporaries(outdir, ["*.h5", SUMMARY_NAME])
        for path in leftovers:
            path.unlink(missing_ok=True)
        if leftovers:
            log.event("note", f"removed {len(leftovers)} temporary file(s) of an interrupted batch")
        where = (f"dask scheduler {dask} ({first_runner.workers} worker threads)" if dask
                 else f"{workers} local worker(s)")
        drawn = "" if settings.seed_given else " (drawn)"
        started = log.event("started", f"{len(found)} experiment(s) under "
                                       f"{', '.join(map(str, paths))}; method {method}, bootstrap "
                                       f"{bootstrap}, seed {settings.seed}{drawn}, {where}"
                                       + (f", watching every {watch:g} s" if watch else "")
                                       + (", force" if force else ""))
        if terminal:
            stream.write(started)
        batch = Batch(paths, outdir, settings, workers=workers, address=dask, force=force,
                      watch=watch, log=log, stream=stream, first_runner=first_runner)
        batch.write_summary()
        try:
            with stop_on_signals():
                batch.loop()
        except Stop as stop:
            outcome.stopped_by = stop.signal_name
        except RunnerFailed as exc:
            outcome.stopped_by = f"a failure of the runner ({exc})"
        _finish(batch, outcome, log, stream, out, watch)
    return outcome


def _finish(batch: Batch, outcome: BatchOutcome, log: BatchLog, stream, out, watch) -> None:
    """Fill ``outcome``, write the last log line and tell the user."""
    outcome.found = batch.found
    outcome.done, outcome.failed, outcome.skipped = (batch.tally[k] for k in
                                                     ("done", "failed", "skipped"))
    outcome.table_failed = batch.table_failed()
    counts = (f"{outcome.done} fitted, {outcome.failed} failed, {outcome.skipped} skipped; "
              f"{len(batch.rows)} of {batch.found} experiment(s) in the table, "
              f"{outcome.table_failed} of them failed")
    if outcome.stopped_by is not None:
        settings = batch.settings
        seed_hint = ("" if settings.seed_given else
                     f" (add --seed {settings.seed} for the numbers of this run's seed)")
        again = settings.command_line or "the same command"
        text = (f"stopped by {outcome.stopped_by}: {counts}; {batch.in_flight} unfinished "
                f"(fitted when resumed); resume with: {again}{seed_hint}")
        log.event("stopped", text)
        outcome.exit_status = 1 if (watch is None or outcome.table_failed) else 0
    else:
        text = f"{counts}; table {outcome.summary}"
        log.event("finished", text)
        outcome.exit_status = 1 if outcome.table_failed else 0
    if batch.terminal:                     # elsewhere the log's copy said it already
        stream.write(f"gatescope batch: {text}\n")
        stream.flush()
    out.write(f"{outcome.summary}\n")
    out.flush()


__all__ = ["Settings", "Job", "Outcome", "BatchOutcome", "Batch", "Stop", "SEED_RULE", "CI_LEVEL",
           "experiment_seed", "fit_task", "run_batch", "stop_on_signals", "main_figure",
           "describe_error"]
