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
