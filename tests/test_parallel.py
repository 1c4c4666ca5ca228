"""The parallel runner (gatescope.parallel): one thread per worker, chunking, the same
results for any number of workers, workers that die with their parent, and a real
dask.distributed cluster on 127.0.0.1."""

from __future__ import annotations

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


@pytest.mark.parametrize("samples, workers", [(200, 2), (7, 3), (1, 4), (1000, 8)])
def test_chunks_cover_every_resample_and_shrink_towards_the_end(samples, workers):
    sizes = parallel.chunk_sizes(samples, workers)
    assert sum(sizes) == samples and min(sizes) >= 1
    assert max(sizes) <= -(-samples // (workers * parallel.CHUNKS_PER_WORKER))
    assert sizes == sorted(sizes, reverse=True)
    assert sizes[-1] == 1
