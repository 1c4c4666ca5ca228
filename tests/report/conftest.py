"""Result files and a batch folder shared by the report tests (made once per session)."""

from __future__ import annotations

import io
import warnings

import pytest
from support import (MISCALIBRATED_MEAS, MISCALIBRATION, simulated_experiment,
                     simulated_state_experiment)

import gatescope as gs
from gatescope.reader import read_experiment



def _fit_and_save(exp, path, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")             # the fit's warnings are in the result
        result = gs.fit(exp, "mle", workers=1, progress=False, **kw)
    result.save(path)
    return path


@pytest.fixture(scope="session")
def report_data(tmp_path_factory):
    return tmp_path_factory.mktemp("report_data")


@pytest.fixture(scope="session")
def boot_result(report_data):
    """A two-qubit CZ with noise, bootstrapped (20 resamples), with the bootstrap's
    normal interval for every figure (the default test inversion of the fidelities takes
    tens of seconds at two qubits; the demo's report shows it)."""
    exp, _ = simulated_experiment(report_data / "boot", "CZ+zz:0.2+depolarizing:0.05",
                                  shots=1000, seed=3)
    return _fit_and_save(exp, report_data / "boot.h5", bootstrap=20, seed=1, interval="normal")


@pytest.fixture(scope="session")
def plain_result(report_data):
    """A two-qubit CNOT with noise, without a bootstrap."""
    exp, _ = simulated_experiment(report_data / "plain", "CNOT+depolarizing:0.05",
                                  shots=1000, seed=4)
    return _fit_and_save(exp, report_data / "plain.h5")


@pytest.fixture(scope="session")
def miscalibrated_result(report_data):
    """A CZ whose rows of analyser `MISCALIBRATED_MEAS` have 30% too many counts, as with a
    misset analyser plate: the fit cannot follow, and the residual map must show it."""
    exp, _ = simulated_experiment(report_data / "miscal", "CZ+depolarizing:0.05", shots=2000,
                                  seed=5)
    lines = exp.counts_path.read_text().splitlines()
    out = [lines[0]]
    for line in lines[1:]:
        prep, meas, counts = line.split(",")[:3]
        if meas == MISCALIBRATED_MEAS:
            counts = str(int(round(float(counts) * MISCALIBRATION)))
        out.append(",".join([prep, meas, counts] + line.split(",")[3:]))
    exp.counts_path.write_text("\n".join(out) + "\n")
    return _fit_and_save(read_experiment(exp.path), report_data / "miscal.h5")


@pytest.fixture(scope="session")
def undetermined_result(report_data):
    """A CZ probed with H and V only: the truth table, not the process fidelity."""
    exp, _ = simulated_experiment(report_data / "hv", "CZ+depolarizing:0.05", shots=1000,
                                  seed=6, prep=("H", "V"), meas=("H", "V"))
    return _fit_and_save(exp, report_data / "hv.h5")


@pytest.fixture(scope="session")
def state_result(report_data):
    """A two-qubit psi- with white noise, bootstrapped (20 resamples)."""
    exp, _ = simulated_state_experiment(report_data / "state", "psi-+depolarizing:0.1",
                                        shots=1000, seed=7)
    return _fit_and_save(exp, report_data / "state.h5", bootstrap=20, seed=2)


@pytest.fixture(scope="session")
def batch_folder(report_data):
    """The output of `gatescope batch` over three scan points (delay_ps = 0, 50, 100, a
    conditional-phase error growing with it) and one malformed experiment."""
    from gatescope.batch import run_batch

    root = report_data / "scan"
    for delay in (0, 50, 100):
        exp, _ = simulated_experiment(root / f"delay_{delay}",
                                      f"CZ+zz:{0.004 * delay}+depolarizing:0.03", shots=500,
                                      seed=delay)
        with open(exp.path, "a", encoding="utf-8") as f:
            f.write(f'\n[conditions]\ndelay_ps = {delay}\nrun = "night <3>"\n')
    bad = root / "broken"
    bad.mkdir()
    (bad / "experiment.toml").write_text('qubits = 2\ntarget = "CZ"\ncounts = "counts.csv"\n'
                                         '[conditions]\ndelay_ps = 150\n')
    (bad / "counts.csv").write_text("prep;meas;counts\n")
    out = report_data / "night"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_batch([root], out, workers=1, bootstrap=10, seed=1, stream=io.StringIO(),
                  out=io.StringIO())
    return out
