"""Provenance of a result (gatescope.provenance): versions, command, seed, times, host.
"""

from __future__ import annotations

import datetime as dt
from importlib import metadata

import gatescope as gs
import h5py


def text(value) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def _find(attrs, *fragments):
    keys = [k for k in attrs if all(frag in k.lower() for frag in fragments)]
    assert keys, (fragments, list(attrs))
    return attrs[keys[0]]


def test_provenance_group(cz_fit):
    _, res, path = cz_fit
    with h5py.File(path, "r") as f:
        prov = dict(f["provenance"].attrs)
    assert text(_find(prov, "gatescope")) == gs.__version__
    assert "command" in " ".join(prov) and "seed" in prov
    start = dt.datetime.fromisoformat(text(_find(prov, "start")))
    end = dt.datetime.fromisoformat(text(_find(prov, "end")))
    assert start.utcoffset() == dt.timedelta(0) and end.utcoffset() == dt.timedelta(0)
    assert start <= end
    assert float(_find(prov, "wall")) >= 0
    for key in ("host", "platform", "python"):
        assert text(_find(prov, key)), key
    for dep in ("numpy", "scipy", "numba", "h5py", "tqdm"):
        assert text(_find(prov, dep)) == metadata.version(dep), dep
