"""Shared fixtures: simulated experiments written to a temporary folder."""

from __future__ import annotations

import numpy as np
import pytest
from support import simulated_experiment, simulated_state_experiment


def _factory(folder, make, prefix):
    """make(subfolder, spec, **kw) in a fresh subfolder of ``folder`` at every call."""
    counter = iter(range(10_000))

    def factory(spec, **kw):
        return make(folder / f"{prefix}{next(counter)}", spec, **kw)

    return factory


@pytest.fixture
def make_experiment(tmp_path):
    """Factory fixture: make_experiment(spec, **kw) -> (Experiment, true Choi)."""
    return _factory(tmp_path, simulated_experiment, "exp")


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


@pytest.fixture
def make_state_experiment(tmp_path):
    """Factory fixture: make_state_experiment(spec, **kw) -> (Experiment, true density matrix)."""
    return _factory(tmp_path, simulated_state_experiment, "state")


# --------------------------------------------------------------------------
# Fits shared by several test modules (made once per session)
# --------------------------------------------------------------------------

@pytest.fixture(scope="session")
def cz_fit(tmp_path_factory):
    """A two-qubit CZ fit (1000 counts per basis): (Experiment, Result, saved path)."""
    import gatescope as gs

    folder = tmp_path_factory.mktemp("cz")
    exp, _ = simulated_experiment(folder / "data", "CZ", shots=1000, seed=11)
    res = gs.fit(exp, "mle", seed=5)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


@pytest.fixture(scope="session")
def cz_result(tmp_path_factory):
    """A noisy CZ fit with every figure (the diamond distance when cvxpy is installed):
    (Result, saved path, true Choi matrix, whether the diamond distance was computed)."""
    import importlib.util

    import gatescope as gs

    folder = tmp_path_factory.mktemp("figs")
    exp, true_choi = simulated_experiment(folder / "data", "CZ+zz:0.2+depolarizing:0.05",
                                          shots=2000, seed=4)
    diamond = importlib.util.find_spec("cvxpy") is not None
    res = gs.fit(exp, "mle", diamond=diamond)
    path = res.save(folder / "result.h5")
    return res, path, true_choi, diamond


@pytest.fixture(scope="session")
def full_1q(tmp_path_factory):
    """A one-qubit fit with every optional column and a bootstrap: (Experiment, Result, path)."""
    import gatescope as gs
    from support import write_full_1q

    folder = tmp_path_factory.mktemp("full")
    exp = write_full_1q(folder / "data")
    res = gs.fit(exp, "mle", bootstrap=12, seed=7, workers=1)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


@pytest.fixture(scope="session")
def fits(tmp_path_factory):
    """The light-leak bench (`support.light_leak_bench`) fitted told and not told about its
    background, with the warnings each fit raised."""
    import warnings

    import gatescope as gs
    from support import light_leak_bench

    base = tmp_path_factory.mktemp("gof")
    told, leaks = light_leak_bench(base / "told", with_background=True)
    untold, _ = light_leak_bench(base / "untold", with_background=False)
    with warnings.catch_warnings(record=True) as caught_told:
        warnings.simplefilter("always")
        res_told = gs.fit(told)
    with warnings.catch_warnings(record=True) as caught_untold:
        warnings.simplefilter("always")
        res_untold = gs.fit(untold)
    paths = (res_told.save(base / "told.h5"), res_untold.save(base / "untold.h5"))
    return {"told": (res_told, caught_told), "untold": (res_untold, caught_untold),
            "leaks": leaks, "paths": paths}
