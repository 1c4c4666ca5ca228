"""The Poisson likelihood of the rows (gatescope.likelihood): profiled intensities,
its gradient, and repeated rows as separate observations.
"""

from __future__ import annotations

from pathlib import Path

import gatescope as gs
import numpy as np
import pytest
from gatescope.estimators import fit_mle
from gatescope.model import MeasurementModel


def write_case(folder: Path, toml: str, csv: str | None, csv_name: str = "counts.csv") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "experiment.toml"
    path.write_text(toml, encoding="utf-8")
    if csv is not None:
        (folder / csv_name).write_text(csv, encoding="utf-8")
    return path


def toml_1q(extra: str = "") -> str:
    return 'title = "bench A"\nqubits = 1\ncounts = "counts.csv"\n' + extra


def read(tmp_path, toml, csv):
    return gs.read_experiment(write_case(tmp_path, toml, csv))


def test_repeated_rows_count_as_observations_in_the_fit(tmp_path, make_experiment):
    # Every row of a complete one-qubit data set written twice: each row's
    # log-likelihood term counts twice, the maximum stays where it was.
    exp, _ = make_experiment("H+depolarizing:0.1", shots=400, seed=2)
    lines = ["prep,meas,counts"] + [f"{p},{m},{n}" for p, m, n in zip(exp.prep, exp.meas, exp.counts)]
    doubled = lines + lines[1:]
    exp2 = read(tmp_path / "twice", toml_1q(), "\n".join(doubled) + "\n")
    assert exp2.n_rows == 2 * exp.n_rows
    once = fit_mle(MeasurementModel(exp))
    twice = fit_mle(MeasurementModel(exp2))
    assert twice.log_likelihood == pytest.approx(2 * once.log_likelihood, rel=1e-8)
    # the same maximiser (each term doubled); measured to agree to 2e-15
    np.testing.assert_allclose(twice.choi, once.choi, atol=1e-12)
