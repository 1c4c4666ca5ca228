"""The one place that runs work in parallel: local worker processes, or a
``dask.distributed`` cluster.

Every parallel job of the package (bootstrap refits, batches of
experiments, the estimator bench) goes through `Runner`::

    with Runner(workers=2, shared=state) as runner:
        for index, result in runner.map(task, items):
            ...

``task(shared, item)`` is a module-level function (it travels by
reference); ``shared`` is sent to every worker once, when it starts, and
``items`` are sent in chunks. Results come back as ``(index, result)`` in
the order they finish; a caller that needs a fixed order sorts them by
index, so that numbers never depend on the number of workers.

Local backend. A pool of worker processes (``concurrent.futures``),
forked from the calling process when that is safe (`fork_is_safe`:
Linux, no other Python thread, numba's threading layer not started;
OpenBLAS handles a fork itself), which starts them in about 0.1 s;
otherwise they come from the ``forkserver`` (or, where there is none,
``spawn``), which imports the package in every worker, 1–4 s. Workers run
single-threaded (``OMP_NUM_THREADS``, ``OPENBLAS_NUM_THREADS``,
``MKL_NUM_THREADS``, ``NUMBA_NUM_THREADS`` set to 1 before they start,
``numba.set_num_threads(1)`` and every loaded OpenBLAS told to use one
thread), so W workers use W cores. They ignore SIGINT (the calling process
decides when to stop) and die with it: on Linux the kernel sends them
SIGKILL when their parent dies (``PR_SET_PDEATHSIG``), elsewhere a watchdog
thread notices the parent is gone. With one worker, or inside a daemonic
process that may not start children, the tasks run in the calling process.

Chunks (`chunk_sizes`): about eight per worker, so that the per-task
overhead stays small, then smaller and smaller ones, so that the workers
finish together; a caller whose tasks are long (one experiment each) asks
for ``chunk=1``.

Dask backend (``address=``, the ``dask`` extra). The same interface on an
existing ``dask.distributed`` scheduler: ``shared`` is scattered to every
worker once, chunks are submitted as tasks, results come back to the
calling process (which alone writes files). Start dask workers with
``--nthreads 1``: each task sets one BLAS and one numba thread for its
process, like a local worker.
"""

from __future__ import annotations

import contextlib
import ctypes
import multiprocessing as mp
import os
import signal
import sys
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

from .errors import InputError

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                    "NUMBA_NUM_THREADS")
#: Chunks per worker at the start of a map (the later ones shrink, `chunk_sizes`).
CHUNKS_PER_WORKER = 8
#: Seconds to wait for a dask scheduler before giving up.
DASK_CONNECT_TIMEOUT = 10


def chunk_sizes(n_items: int, workers: int) -> list[int]:
    """Items per task: at most n/(W·CHUNKS_PER_WORKER), and towards the end
    1/(2W) of what is left (at least one), so that the last tasks are small and
    the workers finish together (guided self-scheduling, Polychronopoulos &
    Kuck, IEEE Trans. Comput. C-36, 1425 (1987))."""
    cap = max(1, -(-n_items // (workers * CHUNKS_PER_WORKER)))
    sizes = []
    left = n_items
    while left > 0:
        size = min(cap, max(1, left // (2 * workers)))
        sizes.append(size)
        left -= size
    return sizes


# --------------------------------------------------------------------------
# Threads: one per worker
# --------------------------------------------------------------------------

_SETTERS = ("openblas_set_num_threads", "scipy_openblas_set_num_threads64_",
            "scipy_openblas_set_num_threads", "openblas_set_num_threads64_")
_GETTERS = ("openblas_get_num_threads", "scipy_openblas_get_num_threads64_",
            "scipy_openblas_get_num_threads", "openblas_get_num_threads64_")
#: The OpenBLAS libraries found by the last scan, and how many modules were imported then.
_SCAN = {"modules": -1, "libraries": []}


def _openblas_libraries() -> list:
    """Every OpenBLAS loaded in this process, found through /proc/self/maps.

    Reading the map costs a few milliseconds in a process with numba loaded,
    so the answer is kept until a module is imported (libraries arrive with
    the extension modules that need them).
    """
    if _SCAN["modules"] == len(sys.modules):
        return _SCAN["libraries"]
    try:
        with open("/proc/self/maps") as fh:
            paths = {line.split()[-1] for line in fh if "openblas" in line.lower() and "/" in line}
    except OSError:
        paths = set()
    libraries = []
    for path in sorted(paths):
        try:
            libraries.append(ctypes.CDLL(path))
        except OSError:
            continue
    _SCAN["modules"], _SCAN["libraries"] = len(sys.modules), libraries
    return libraries


def _openblas_functions(names):
    """For every OpenBLAS loaded in this process, its first function among ``names``.

    numpy and scipy wheels may each bring their own OpenBLAS, with prefixed
    symbol names; libraries are found through /proc/self/maps (Linux only;
    elsewhere the environment variables set before the workers start act alone).
    """
    found = []
    for lib in _openblas_libraries():
        for symbol in names:
            function = getattr(lib, symbol, None)
            if function is not None:
                found.append(function)
                break
    return found


def limit_threads() -> None:
    """One numba thread and one thread for every OpenBLAS loaded in this process.

    The environment variables only act on libraries loaded after they are
    set; a forked worker inherits libraries already loaded, so each
    library's own setter is called as well.
    """
    for var in THREAD_VARIABLES:
        os.environ[var] = "1"
    try:
        import numba
        from numba.core import config
        from numba.np.ufunc import parallel

        # Every compile re-reads the environment, and numba refuses a NUMBA_NUM_THREADS
        # other than its thread pool's once the pool exists: so the configuration follows
        # the environment before the pool starts (below), or the environment follows the
        # pool that a forked or reused process already has.
        if getattr(parallel, "_is_initialized", False):
            os.environ["NUMBA_NUM_THREADS"] = str(config.NUMBA_NUM_THREADS)
        else:
            config.reload_config()
        numba.set_num_threads(1)
    except (ImportError, ValueError, RuntimeError):    # numba's threading layer unavailable
        pass
    for setter in _openblas_functions(_SETTERS):
        setter.argtypes = [ctypes.c_int]
        setter.restype = None
        setter(1)


def blas_thread_counts() -> list[int]:
    """Threads of every OpenBLAS loaded in this process (empty when none is found)."""
    counts = []
    for getter in _openblas_functions(_GETTERS):
        getter.restype = ctypes.c_int
        counts.append(int(getter()))
    return counts


@contextlib.contextmanager
def single_threaded_blas():
    """Every OpenBLAS loaded in this process runs one thread inside the block; the
    thread counts are restored after it.

    The estimators' matrix products are small (d² × d² at most, or thin products
    over the rows): extra BLAS threads bring little, and on a busy machine their
    spinning makes a fit many times slower. Workers are single-threaded already.
    """
    pairs = []
    for getter, setter in zip(_openblas_functions(_GETTERS), _openblas_functions(_SETTERS)):
        getter.restype = ctypes.c_int
        setter.argtypes = [ctypes.c_int]
        setter.restype = None
        pairs.append((setter, int(getter())))
    if len(pairs) != len(_openblas_functions(_GETTERS)):      # a library without both
        pairs = []
    for setter, _ in pairs:
        setter(1)
    try:
        yield
    finally:
        for setter, count in pairs:
            setter(count)


def thread_settings(_shared=None, _item=None) -> dict:
    """Thread settings seen where a task runs (a task itself, for checking workers)."""
    import numba

    return {"numba": numba.get_num_threads(), "blas": blas_thread_counts(),
            "start_method": mp.get_start_method(allow_none=True), "pid": os.getpid()}


@contextlib.contextmanager
def _single_threaded_children():
    """Children started inside this block inherit one-thread settings for BLAS and numba."""
    saved = {var: os.environ.get(var) for var in THREAD_VARIABLES}
    for var in THREAD_VARIABLES:
        os.environ[var] = "1"
    try:
        yield
    finally:
        for var, value in saved.items():
            if value is None:
                os.environ.pop(var, None)
            else:
                os.environ[var] = value


# --------------------------------------------------------------------------
# Starting workers
# --------------------------------------------------------------------------

def fork_is_safe() -> bool:
    """True when forking this process cannot inherit a lock held by another thread.

    That is: Linux (elsewhere system libraries are not fork safe), no Python
    thread besides this one, and numba's threading layer not started here
    (GNU OpenMP, one of its layers, does not survive a fork). OpenBLAS
    re-creates its own threads after a fork (it registers fork handlers).
    """
    if not sys.platform.startswith("linux") or threading.active_count() > 1:
        return False
    try:
        from numba.np.ufunc import parallel
    except ImportError:
        return False
    return getattr(parallel, "_is_initialized", True) is False


def _pool_context(preload: str):
    """fork when `fork_is_safe` (workers start at once), else forkserver, else spawn."""
    if fork_is_safe():
        return mp.get_context("fork")
    if "forkserver" in mp.get_all_start_methods():
        ctx = mp.get_context("forkserver")
        # workers forked from the server find the task's module already imported
        ctx.set_forkserver_preload([preload])
        return ctx
    return mp.get_context("spawn")


_PR_SET_PDEATHSIG = 1          # <linux/prctl.h>


def _die_with_parent(parent: int | None) -> None:
    """Make this worker end when the process that started the pool ends.

    On Linux the kernel does it (``prctl(PR_SET_PDEATHSIG, SIGKILL)``; the
    death of a forkserver, which follows its own parent's, counts too);
    elsewhere a daemon thread checks once a second that the parent is still
    the same process. ``parent`` is the expected parent's pid when the worker
    was forked directly from it (None from a forkserver).
    """
    if parent is not None and os.getppid() != parent:       # the parent is gone already
        os._exit(1)
    if sys.platform.startswith("linux"):
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            if libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0) == 0:
                if parent is not None and os.getppid() != parent:   # it died before prctl
                    os._exit(1)
                return
        except (OSError, AttributeError):
            pass
    first = os.getppid()

    def watch():
        while os.getppid() == first:
            time.sleep(1.0)
        os._exit(1)

    threading.Thread(target=watch, name="gatescope-parent-watch", daemon=True).start()


_SHARED = None


def _init_worker(shared, parent: int | None) -> None:
    global _SHARED
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _die_with_parent(parent)
    limit_threads()
    _SHARED = shared


def _run_chunk(task, chunk):
    return [(i, task(_SHARED, item)) for i, item in chunk]


_DASK_THREADS_SET = False


def _run_chunk_dask(task, shared, chunk):
    global _DASK_THREADS_SET
    if not _DASK_THREADS_SET:
        limit_threads()
        _DASK_THREADS_SET = True
    return [(i, task(shared, item)) for i, item in chunk]


# --------------------------------------------------------------------------
# The runner
# --------------------------------------------------------------------------

class Runner:
    """Runs ``task(shared, item)`` over items, in this process, in local worker
    processes, or on a dask cluster.

    Parameters
    ----------
    workers : int
        Local worker processes (1: run in the calling process). Ignored with
        ``address`` (the cluster's worker threads count instead).
    shared : object, optional
        Sent to every worker once; the first argument of every task.
    address : str, optional
        Address of a running ``dask.distributed`` scheduler
        (``tcp://host:8786``); needs the ``dask`` extra.

    Use it as a context manager: leaving the block stops the workers (at
    once when it is left by an exception, Ctrl-C included).
    """

    def __init__(self, workers: int = 1, *, shared=None, address: str | None = None):
        self.shared = shared
        self.address = address
        self._pool = None
        self._client = None
        self._shared_future = None
        if address is not None:
            self._client = _dask_client(address)
            self.workers = max(1, sum(self._client.nthreads().values()))
            self._shared_future = self._client.scatter(shared, broadcast=True)
        else:
            if workers > 1 and mp.current_process().daemon:
                workers = 1               # a daemonic process may not start children
            self.workers = int(workers)

    # -- the work ----------------------------------------------------------
    def map(self, task, items, *, chunk: int | None = None):
        """Yield ``(index, task(shared, items[index]))`` as the tasks finish.

        ``chunk`` items per task; by default `chunk_sizes` (guided).
        """
        items = list(items)
        if not items:
            return
        if self._client is None and self.workers == 1:
            for i, item in enumerate(items):
                yield i, task(self.shared, item)
            return
        sizes = ([chunk] * -(-len(items) // chunk) if chunk
                 else chunk_sizes(len(items), self.workers))
        chunks, first = [], 0
        for size in sizes:
            chunks.append(list(enumerate(items[first:first + size], start=first)))
            first += size
        if self._client is not None:
            yield from self._map_dask(task, chunks)
        else:
            yield from self._map_local(task, chunks)

    def _map_local(self, task, chunks):
        if self._pool is None:
            # The pool (and, with fork, every worker) starts before any progress bar's thread.
            context = _pool_context(task.__module__)
            parent = os.getpid() if context.get_start_method() == "fork" else None
            with _single_threaded_children():
                self._pool = ProcessPoolExecutor(
                    max_workers=min(self.workers, len(chunks)), mp_context=context,
                    initializer=_init_worker, initargs=(self.shared, parent))
        # Tasks left when the caller stops are cancelled by `close` (the pool's own thread
        # cancels them at shutdown): a future cancelled here could later be marked failed
        # by that thread when killed workers break the pool, which raises there
        # (InvalidStateError, CPython 3.11).
        todo = {self._pool.submit(_run_chunk, task, c) for c in chunks}
        while todo:
            done, todo = wait(todo, return_when=FIRST_COMPLETED)
            for fut in done:
                yield from fut.result()

    def _map_dask(self, task, chunks):
        from dask.distributed import as_completed

        futures = [self._client.submit(_run_chunk_dask, task, self._shared_future, c, pure=False)
                   for c in chunks]
        try:
            for fut in as_completed(futures, loop=self._client.loop):
                yield from fut.result()
        finally:
            self._client.cancel([f for f in futures if not f.done()])

    # -- stopping -----------------------------------------------------------
    def close(self, *, abort: bool = False) -> None:
        """Stop the workers: wait for them, or with ``abort`` kill them at once."""
        pool, self._pool = self._pool, None
        if pool is not None:
            if abort:
                # ProcessPoolExecutor has no public way to stop running tasks
                for proc in list(getattr(pool, "_processes", {}).values()):
                    with contextlib.suppress(OSError):
                        proc.kill()
                pool.shutdown(wait=False, cancel_futures=True)
            else:
                pool.shutdown(wait=True, cancel_futures=True)
        client, self._client = self._client, None
        if client is not None:
            client.close()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        self.close(abort=exc_type is not None)
        return False


def _dask_client(address: str):
    """A client of the scheduler at ``address``, or an InputError saying what is missing."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError("needs the dask extra: pip install 'gatescope[dask]'",
                         key="--dask") from None
    try:
        return Client(address, timeout=DASK_CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot reach a dask scheduler at {address!r}: {exc}",
                         key="--dask") from None


__all__ = ["Runner", "chunk_sizes", "limit_threads", "single_threaded_blas", "blas_thread_counts",
           "thread_settings", "fork_is_safe", "THREAD_VARIABLES", "CHUNKS_PER_WORKER"]
