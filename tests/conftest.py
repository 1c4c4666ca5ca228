"""Shared fixtures: simulated experiments written to a temporary folder."""

from __future__ import annotations

import numpy as np
import pytest
from support import simulated_experiment


@pytest.fixture
def make_experiment(tmp_path):
    """Factory fixture: make_experiment(spec, **kw) -> (Experiment, true Choi)."""
    counter = iter(range(10_000))

    def factory(spec, **kw):
        return simulated_experiment(tmp_path / f"exp{next(counter)}", spec, **kw)

    return factory


@pytest.fixture
def rng():
    return np.random.default_rng(12345)
