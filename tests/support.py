"""Helpers shared by the tests (a plain module, importable as ``support``)."""

from __future__ import annotations

from gatescope.reader import read_experiment
from gatescope.synth.simulate import (
    channel_from_spec,
    simulate_counts,
    write_experiment,
)


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
