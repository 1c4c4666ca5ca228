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


def test_bench_kinds_through_the_noise_option(tmp_path):
    import gatescope as gs

    assert main(["simulate", "--gate", "CNOT", "--noise", "distinguishability:0.2",
                 "--noise", "accidentals:40000:2", "--noise", "plates:0.5:2:1",
                 "--shots", "400", "--seed", "3", "-o", str(tmp_path / "s")]) == 0
    exp = gs.read_experiment(tmp_path / "s" / "experiment.toml")
    assert exp.trace == "decreasing" and exp.input_rate == pytest.approx(3600.0)
    # 2·τ·S1·S2·t with τ = 2 ns, S = 40000/s, t = 1 s (common practice)
    assert exp.background == pytest.approx(2 * 2e-9 * 40000.0 ** 2)
    truth = gs.load_result(tmp_path / "s" / "truth.h5")
    assert truth.figures["trace"].value == pytest.approx((4 + 4 * 0.2) / 9 / 4, abs=1e-12)


def test_the_demo_recipe_reproduces_the_bundled_data(tmp_path):
    """The recipe (gatescope.synth.simulate.DEMO_RECIPE) makes the bundled files byte for
    byte; bench kinds are part of the same grammar, so a recipe may use them too."""
    from pathlib import Path

    from gatescope.synth.simulate import DEMO_RECIPE, run_simulation

    bundled = Path(__file__).resolve().parents[2] / "synthetic_data" / "cz_bench_b"
    path = run_simulation(DEMO_RECIPE["channel"], tmp_path / "demo", shots=DEMO_RECIPE["shots"],
                          seed=DEMO_RECIPE["seed"], title=DEMO_RECIPE["title"])
    for name in ("experiment.toml", "counts.csv"):
        assert (path.parent / name).read_bytes() == (bundled / name).read_bytes()
    lab = run_simulation(DEMO_RECIPE["channel"].replace("+depolarizing", "+drift:0.05+depolarizing"),
                         tmp_path / "lab", shots=DEMO_RECIPE["shots"], seed=DEMO_RECIPE["seed"])
    assert (lab.parent / "counts.csv").read_bytes() != (bundled / "counts.csv").read_bytes()
