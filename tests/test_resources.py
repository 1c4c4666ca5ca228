"""Time and memory a job will need (gatescope.resources): the statement before a fit at 5 or
more qubits, and refusals of what cannot fit in memory."""

from __future__ import annotations

import warnings

import gatescope as gs
import numpy as np
import pytest
from gatescope import pipeline, resources


def test_estimates_grow_with_the_rows_and_the_dimension():
    four = resources.fit_estimate(4, 6 ** 8)
    five = resources.fit_estimate(5, 6 ** 10)
    # the measured four-qubit costs: 0.25 s + 1.0 s an iteration, 400 iterations
    assert four.seconds == pytest.approx(400 * (0.15e-6 * 6 ** 8 + 1.0))
    assert five.seconds > 40 * four.seconds and five.bytes > 25 * four.bytes
    boot = resources.fit_estimate(4, 6 ** 8, bootstrap=100, workers=2)
    assert boot.seconds == pytest.approx(four.seconds * 51)
    assert "expect about" in five.text() and "GB" in five.text()


def test_a_full_five_qubit_counts_file_is_refused_before_it_is_read(tmp_path, monkeypatch):
    monkeypatch.setattr(resources, "available_memory", lambda: 8e9)
    with pytest.raises(gs.InputError, match="needs about .* of memory"):
        resources.check_reading(int(1e9), "counts.csv")
    resources.check_reading(int(1e6), "counts.csv")         # 28 MB: fine


def five_qubit_experiment(folder):
    folder.mkdir()
    labels = ["HHHHH", "VVVVV", "HVHVH"]
    rows = [f"{p},{m},{7 if p == m else 1}" for p in labels for m in labels]
    (folder / "counts.csv").write_text("prep,meas,counts\n" + "\n".join(rows) + "\n")
    (folder / "experiment.toml").write_text('qubits = 5\ncounts = "counts.csv"\nnormalization = "global"\n')
    return gs.read_experiment(folder)


def test_a_five_qubit_fit_states_its_needs_first_and_is_refused_without_memory(tmp_path, monkeypatch,
                                                                             capsys):
    # a reproducer: a 5-qubit fit ran for minutes without a word
    exp = five_qubit_experiment(tmp_path / "five")
    monkeypatch.setattr(resources, "available_memory", lambda: 100e6)

    def no_model(*a, **k):
        raise AssertionError("the model was built before the memory check")

    monkeypatch.setattr(pipeline, "build_model", no_model)
    with pytest.raises(gs.InputError, match="cannot run here") as info:
        gs.fit(exp, progress=True)
    assert info.value.file == str(exp.path)
    err = capsys.readouterr().err
    assert "a 5-qubit fit of 9 rows: expect about" in err


def test_below_five_qubits_nothing_is_stated(make_experiment, capsys):
    exp, _ = make_experiment("H", shots=100, n_qubits=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gs.fit(exp, progress=True)
    assert "expect about" not in capsys.readouterr().err


def test_available_memory_is_a_positive_number_here():
    have = resources.available_memory()
    assert have is None or (np.isfinite(have) and have > 0)
