"""The parallel runner (gatescope.parallel): one thread per worker, chunking, the same
results for any number of workers, workers that die with their parent, and a real
dask.distributed cluster on 127.0.0.1."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from gatescope import parallel


def test_workers_run_single_threaded():
    with parallel.Runner(2) as runner:
        seen = [out for _, out in runner.map(parallel.thread_settings, range(4), chunk=1)]
    assert {s["numba"] for s in seen} == {1}
    blas = [n for s in seen for n in s["blas"]]
    # the check is meaningful only where an OpenBLAS is loaded (the numpy/scipy wheels)
    assert blas, "no OpenBLAS found in the workers: the thread check cannot run"
    assert set(blas) == {1}


def test_workers_can_compile_numba_code():
    # a worker that compiles (its first fit, a kernel not in the cache) re-reads numba's
    # environment, which must agree with the thread pool the worker set up
    from support import compile_in_worker

    with parallel.Runner(2, shared=10) as runner:
        out = dict(runner.map(compile_in_worker, range(4), chunk=1))
    assert out == {i: 10 + i for i in range(4)}


@pytest.mark.parametrize("samples, workers", [(200, 2), (7, 3), (1, 4), (1000, 8)])
def test_chunks_cover_every_resample_and_shrink_towards_the_end(samples, workers):
    sizes = parallel.chunk_sizes(samples, workers)
    assert sum(sizes) == samples and min(sizes) >= 1
    assert max(sizes) <= -(-samples // (workers * parallel.CHUNKS_PER_WORKER))
    assert sizes == sorted(sizes, reverse=True)
    assert sizes[-1] == 1


@pytest.mark.parametrize("workers, chunk", [(1, None), (2, None), (2, 1), (3, 4)])
def test_every_item_comes_back_once_with_its_index(workers, chunk):
    from support import square_task

    with parallel.Runner(workers, shared=10) as runner:
        out = dict(runner.map(square_task, range(23), chunk=chunk))
        again = dict(runner.map(square_task, [5, 6]))          # the pool is reused
    assert sorted(out) == list(range(23))
    assert [out[i][0] for i in range(23)] == [10 + i * i for i in range(23)]
    pids = {pid for _, pid in out.values()}
    assert (pids == {os.getpid()}) if workers == 1 else (os.getpid() not in pids)
    assert {i: v[0] for i, v in again.items()} == {0: 35, 1: 46}


def test_an_error_in_a_task_reaches_the_caller_and_stops_the_workers():
    with pytest.raises(TypeError):
        with parallel.Runner(2, shared=None) as runner:
            from support import square_task
            list(runner.map(square_task, range(4)))      # None + int raises in the workers


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="SIGALRM, fork: Linux")
def test_a_map_stopped_by_a_signal_leaves_no_error_in_the_pool_thread(tmp_path, monkeypatch):
    # a reproducer: after SIGTERM (or Ctrl-C) in the middle of a map, the futures the map had
    # cancelled were marked failed once the killed workers broke the pool, which raises
    # InvalidStateError in the pool's thread (CPython 3.11): a traceback on stderr
    import threading
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import _ExecutorManagerThread

    from support import report_and_sleep

    errors = []
    monkeypatch.setattr(threading, "excepthook", lambda args: errors.append(args.exc_value))
    shutdown = ProcessPoolExecutor.shutdown

    def late_shutdown(self, *args, **kwargs):
        time.sleep(1.0)          # the pool's thread sees the killed workers first, as it may
        return shutdown(self, *args, **kwargs)

    monkeypatch.setattr(ProcessPoolExecutor, "shutdown", late_shutdown)

    def interrupt(signum, frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGALRM, interrupt)
    try:
        with pytest.raises(KeyboardInterrupt):
            with parallel.Runner(2, shared=str(tmp_path)) as runner:
                signal.alarm(2)                       # the tasks sleep for 120 s
                list(runner.map(report_and_sleep, range(8), chunk=1))
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    for thread in threading.enumerate():
        if isinstance(thread, _ExecutorManagerThread):
            thread.join(timeout=30)
    assert errors == []


def _wait_for(condition, seconds):
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(0.05)
    return condition()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # a killed child that is not yet reaped is a zombie: dead for our purpose
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split(")")[-1].split()[0] != "Z"
    except OSError:
        return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="kill -9 and /proc: Linux")
def test_workers_die_with_their_parent(tmp_path):
    # a parent killed with SIGKILL cannot clean up: its workers must still go
    script = (f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r})\n"
              "from gatescope.parallel import Runner\n"
              "from support import report_and_sleep\n"
              f"with Runner(2, shared={str(tmp_path)!r}) as r:\n"
              "    list(r.map(report_and_sleep, range(2), chunk=1))\n")
    parent = subprocess.Popen([sys.executable, "-c", script])
    try:
        assert _wait_for(lambda: len(list(tmp_path.glob("worker-*"))) == 2, 60)
        workers = [int(p.read_text()) for p in tmp_path.glob("worker-*")]
        assert all(_alive(pid) for pid in workers)
        parent.send_signal(signal.SIGKILL)
        parent.wait(10)
        assert _wait_for(lambda: not any(_alive(pid) for pid in workers), 10), workers
    finally:
        parent.kill()


def test_dask_cluster_gives_the_same_results_as_local_workers():
    # a real scheduler and two single-threaded worker processes on 127.0.0.1
    distributed = pytest.importorskip("dask.distributed")
    from support import square_task

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
    try:
        with parallel.Runner(shared=10, address=cluster.scheduler_address) as runner:
            assert runner.workers == 2
            remote = {i: v[0] for i, v in runner.map(square_task, range(23))}
            threads = [s for _, s in runner.map(parallel.thread_settings, range(2), chunk=1)]
    finally:
        cluster.close()
    with parallel.Runner(2, shared=10) as runner:
        local = {i: v[0] for i, v in runner.map(square_task, range(23))}
    assert remote == local
    assert {t["numba"] for t in threads} == {1}


def test_an_unreachable_scheduler_is_an_input_error(monkeypatch):
    pytest.importorskip("dask.distributed")
    from gatescope.errors import InputError

    monkeypatch.setattr(parallel, "DASK_CONNECT_TIMEOUT", 1)      # a closed port: fail fast
    with pytest.raises(InputError, match="option --dask: cannot reach a dask scheduler"):
        parallel.Runner(address="tcp://127.0.0.1:1")


def test_the_point_fit_runs_with_one_blas_thread_and_restores_them(make_experiment, monkeypatch):
    # a reproducer: with duplicated rows on a busy machine the linear-inversion start's
    # BLAS threads oversubscribed the cores (5 s became 5 min)
    import gatescope as gs
    from gatescope import parallel, pipeline

    before = parallel.blas_thread_counts()
    if not before:
        pytest.skip("no OpenBLAS found in this process")
    seen = []
    real = pipeline.estimate

    def watching(*a, **k):
        seen.append(parallel.blas_thread_counts())
        return real(*a, **k)

    monkeypatch.setattr(pipeline, "estimate", watching)
    exp, _ = make_experiment("H", shots=100, n_qubits=1)
    gs.fit(exp, "lin")
    assert seen == [[1] * len(before)]
    assert parallel.blas_thread_counts() == before
