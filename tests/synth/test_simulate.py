"""Synthetic experiments (gatescope.synth.simulate): reproducible counts and the truth.
"""

from __future__ import annotations

import pytest

from gatescope.cli import main


def test_same_seed_same_counts(tmp_path):
    for k in (1, 2):
        assert main(["simulate", "--channel", "H+depolarizing:0.1", "--seed", "9",
                     "-o", str(tmp_path / f"s{k}")]) == 0
    assert (tmp_path / "s1" / "counts.csv").read_bytes() == (tmp_path / "s2" / "counts.csv").read_bytes()


def test_the_truth_is_a_result_of_origin_truth_without_a_fit(tmp_path, capsys):
    import h5py

    import gatescope as gs
    from gatescope.summary import summary

    assert main(["simulate", "--channel", "CZ+zz:0.1", "--shots", "300", "--seed", "2",
                 "-o", str(tmp_path / "sim")]) == 0
    capsys.readouterr()
    truth = gs.load_result(tmp_path / "sim" / "truth.h5")
    assert truth.origin == "truth" and truth.method == "truth" and truth.diagnostics is None
    with h5py.File(tmp_path / "sim" / "truth.h5") as f:
        assert "diagnostics" not in f
        assert f.attrs["origin"] == "truth"
    # the true channel's own figures: CZ followed by exp(−iφZZ/2), φ = 0.1, has process
    # fidelity |Tr(e^{−iφZZ/2})/4|² = cos²(φ/2) (direct calculation)
    import numpy as np
    assert truth.figures["process_fidelity"].value == pytest.approx(np.cos(0.05) ** 2, abs=1e-12)
    text = summary(truth)
    assert "true channel of a simulation" in text
    assert "chi2" not in text and "WARNING" not in text and "p =" not in text
    assert main(["show", str(tmp_path / "sim" / "truth.h5")]) == 0
    assert "warning" not in capsys.readouterr().err.lower()


@pytest.mark.parametrize("args, option, words", [
    (["--gate", "cnot"], "--gate", "did you mean 'CNOT'"),
    (["--gate", "CZ", "--noise", "depolarising:0.1"], "--noise", "unknown kind"),
    (["--channel", "CZ+zz"], "--channel", "expected KIND:P"),
    (["--gate", "CZ", "--prep", "H,Q"], "--prep", "'Q' is unknown"),
])
def test_errors_blame_the_option_that_was_typed(tmp_path, capsys, args, option, words):
    assert main(["simulate", *args, "-o", str(tmp_path / "x")]) == 2
    err = capsys.readouterr().err
    assert f"option {option}:" in err and words in err
    assert not (tmp_path / "x").exists()
