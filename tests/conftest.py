"""Shared fixtures: simulated experiments written to a temporary folder."""

from __future__ import annotations

import numpy as np
import pytest

from gatescope.experiment import read_experiment
from gatescope.simulate import channel_from_spec, simulate_counts, write_experiment


def simulated_experiment(folder, spec: str, *, shots: float = 1000.0, seed: int = 1,
                         prep=("H", "V", "D", "A", "R", "L"), meas=("H", "V", "D", "A", "R", "L"),
                         n_qubits: int = 2, exact: bool = False):
    """Write and read back a simulated experiment; returns (Experiment, true Choi matrix).

    With ``exact=True`` the counts are the expected counts rounded to whole
    numbers instead of Poisson draws (for "ideal data" checks use a large
    ``shots``).
    """
    channel = channel_from_spec(spec, n_qubits)
    rows = simulate_counts(channel, shots=shots, prep_set=prep, meas_set=meas, seed=seed)
    if exact:
        rows = [(p, m, e, int(round(e))) for p, m, e, _ in rows]
    path = write_experiment(folder, channel, rows, title=f"test {spec}")
    return read_experiment(path), channel.choi


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
