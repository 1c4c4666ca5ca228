"""The in-memory Result (gatescope.result): an exact round trip through the file.
"""

from __future__ import annotations

import dataclasses

import gatescope as gs
import numpy as np


def assert_same(a, b, where="result"):
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        assert type(a) is type(b), where
        for f in dataclasses.fields(a):
            assert_same(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, np.ndarray):
        assert isinstance(b, np.ndarray), where
        assert a.shape == b.shape, (where, a.shape, b.shape)
        if a.dtype.kind in "OUS":
            assert b.dtype.kind in "OUS", (where, b.dtype)
            assert [str(x) for x in a.ravel()] == [str(x) for x in b.ravel()], where
        else:
            assert a.dtype == b.dtype, (where, a.dtype, b.dtype)
            assert np.array_equal(a, b, equal_nan=a.dtype.kind in "fc"), where
    elif isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), (where, set(a) ^ set(b))
        for k in a:
            assert_same(a[k], b[k], f"{where}[{k!r}]")
    elif isinstance(a, (tuple, list)):
        assert isinstance(b, (tuple, list)) and len(a) == len(b), where
        for k, (x, y) in enumerate(zip(a, b)):
            assert_same(x, y, f"{where}[{k}]")
    elif isinstance(a, float) and np.isnan(a):
        assert np.isnan(b), where
    else:
        assert a == b, (where, a, b)
        assert isinstance(b, type(a)) or isinstance(a, type(b)) or \
            (isinstance(a, (int, float)) and isinstance(b, (int, float))), (where, type(a), type(b))


def test_round_trip_is_exact(cz_fit):
    _, res, path = cz_fit
    back = gs.load_result(path)
    assert_same(res, back)
    for name in ("choi", "chi", "ptm"):
        assert np.array_equal(getattr(res, name), getattr(back, name))


def test_round_trip_with_every_column_and_bootstrap_is_exact(full_1q):
    _, res, path = full_1q
    assert res.bootstrap is not None and res.bootstrap.figures.shape[0] == 12
    assert res.figures["process_fidelity"].ci is not None
    back = gs.load_result(path)
    assert_same(res, back)


def test_saving_a_loaded_result_gives_the_same_result(cz_fit, tmp_path):
    _, res, path = cz_fit
    again = gs.load_result(path).save(tmp_path / "again.h5")
    assert_same(res, gs.load_result(again))
