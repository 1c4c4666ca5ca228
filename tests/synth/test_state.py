"""Synthetic state experiments (gatescope.synth.state): state SPECs, the noise on a state
against independent formulas, reproducible counts, the truth, and errors that name the
option.
"""

from __future__ import annotations

import numpy as np
import pytest

import gatescope as gs
from gatescope.cli import main
from gatescope.conventions import density, named_state
from gatescope.synth.state import (apply_state_noise, parse_state_spec, random_state,
                                   state_from_spec, state_qubits)

SQ = 1 / np.sqrt(2)


def test_specs_split_at_the_noise_kinds_only():
    assert parse_state_spec("phi+") == ("phi+", [], None)
    assert parse_state_spec("phi++visibility:0.9+depolarizing:0.05") == (
        "phi+", [("visibility", 0.9), ("depolarizing", 0.05)], None)
    assert parse_state_spec("+i 0+dephasing:0.1") == ("+i 0", [("dephasing", 0.1)], None)
    assert parse_state_spec("random:3:7+zz:0.2") == (None, [("zz", 0.2)], (3, 7))
    assert [state_qubits(s, 5) for s in ("HV", "+i 0", "+i", "H", "phi-", "GHZ")] == [2, 2, 1, 1,
                                                                                      2, 5]


@pytest.mark.parametrize("spec, words", [
    ("phi++visibilty:0.9", "KIND one of"), ("phi++visibility:1.5", "[0, 1]"),
    ("phi++depolarizing:x", "not a number"), ("random:2:x", "whole numbers"), ("", "STATE"),
])
def test_bad_specs_say_what_is_wrong(spec, words):
    with pytest.raises(ValueError) as info:
        state_from_spec(spec)
    assert words in str(info.value)


def test_white_noise_and_visibility_of_a_bell_state():
    # phi+ = (HH + VV)/√2 written out here; white noise p: (1−p)|ψ><ψ| + p I/4; visibility v
    # scales the HH–VV coherence: ½[[1,0,0,v],[0,0,0,0],[0,0,0,0],[v,0,0,1]] (common practice)
    psi = np.array([SQ, 0, 0, SQ])
    p, v = 0.1, 0.8
    np.testing.assert_allclose(state_from_spec(f"phi++depolarizing:{p}").choi,
                               (1 - p) * np.outer(psi, psi) + p * np.eye(4) / 4, atol=1e-15)
    expected = 0.5 * np.array([[1, 0, 0, v], [0, 0, 0, 0], [0, 0, 0, 0], [v, 0, 0, 1]])
    np.testing.assert_allclose(state_from_spec(f"phi++visibility:{v}").choi, expected, atol=1e-15)


def test_dephasing_and_damping_act_on_every_qubit():
    # per-qubit Kraus sums written out with explicit Kronecker products (common practice)
    rho = random_state(3, 8, seed=2)
    z = np.diag([1.0, -1.0])
    p = 0.2
    out = rho
    for k in range(3):
        factors = [np.eye(2)] * 3
        factors[k] = z
        zk = np.kron(np.kron(factors[0], factors[1]), factors[2])       # Z on qubit k + 1
        out = (1 - p) * out + p * zk @ out @ zk
    np.testing.assert_allclose(apply_state_noise(rho, "dephasing", p, 3), out, atol=1e-14)
    # amplitude damping g on one qubit: |1><1| → (1−g)|1><1| + g|0><0| (common practice)
    g = 0.3
    damped = apply_state_noise(np.diag([0.0, 1.0]).astype(complex), "amplitude-damping", g, 1)
    np.testing.assert_allclose(damped, np.diag([g, 1 - g]), atol=1e-15)


def test_zz_phase_on_a_ghz_state():
    # exp(−iφ(Z1Z2 + Z2Z3)/2) gives |000> the phase e^{−iφ} and |111> e^{−iφ}: GHZ unchanged
    # up to a global phase; on |+++> it is a product of diagonal phases (direct calculation)
    ghz = density(named_state("GHZ", 3))
    np.testing.assert_allclose(apply_state_noise(ghz, "zz", 0.7, 3), ghz, atol=1e-15)
    plus = density(named_state("DD", 2))
    out = apply_state_noise(plus, "zz", np.pi / 2, 2)
    u = np.diag(np.exp(-0.25j * np.pi * np.array([1, -1, -1, 1])))
    np.testing.assert_allclose(out, u @ plus @ u.conj().T, atol=1e-15)


def test_random_states_have_the_rank_asked_for():
    for rank in (1, 2, 4):
        rho = random_state(2, rank, seed=rank)
        assert np.linalg.matrix_rank(rho, tol=1e-12) == rank
        assert np.trace(rho).real == pytest.approx(1, abs=1e-14)
    with pytest.raises(ValueError, match="1..4"):
        random_state(2, 5)


def test_simulate_state_writes_a_state_experiment_and_its_truth(tmp_path, capsys):
    out = tmp_path / "pair"
    assert main(["simulate", "--state", "psi-", "--noise", "visibility:0.9", "--shots", "400",
                 "--seed", "5", "-o", str(out)]) == 0
    exp = gs.read_experiment(out / "experiment.toml")
    assert exp.kind == "state" and exp.target_state_name == "psi-" and exp.n_rows == 36
    assert "prep" not in exp.columns and exp.normalization == "global"
    truth = gs.load_result(out / "truth.h5")
    assert truth.kind == "state" and truth.origin == "truth" and truth.diagnostics is None
    # fidelity of psi− with visibility v to psi−: (1 + v)/2 (direct calculation)
    assert truth.figures["state_fidelity"].value == pytest.approx(0.95, abs=1e-14)
    again = tmp_path / "again"
    assert main(["simulate", "--state", "psi-+visibility:0.9", "--shots", "400", "--seed", "5",
                 "-o", str(again)]) == 0
    assert (out / "counts.csv").read_bytes() == (again / "counts.csv").read_bytes()
    # the counts follow shots · Tr(E ρ): the total is 9 bases × 400 within 5 standard errors
    assert abs(exp.counts.sum() - 3600) < 5 * np.sqrt(3600)


def test_ghz_needs_its_qubits(tmp_path, capsys):
    assert main(["simulate", "--state", "GHZ", "-o", str(tmp_path / "g2")]) == 2
    assert "option --state" in capsys.readouterr().err
    assert main(["simulate", "--state", "GHZ", "--qubits", "3", "--shots", "50",
                 "-o", str(tmp_path / "g3")]) == 0
    assert gs.read_experiment(tmp_path / "g3" / "experiment.toml").n_rows == 216


@pytest.mark.parametrize("args, option, words", [
    (["--state", "phi+", "--prep", "pauli6"], "--prep", "no preparations"),
    (["--state", "phi+", "--noise", "visibility:2"], "--noise", "[0, 1]"),
    (["--state", "phi+", "--meas", "H,Q"], "--meas", "'Q' is unknown"),
    (["--state", "Phi+"], "--state", "did you mean 'phi+'"),
    (["--state", "phi+", "--shots", "0"], "--shots", "positive"),
])
def test_errors_blame_the_option_that_was_typed(tmp_path, capsys, args, option, words):
    assert main(["simulate", *args, "-o", str(tmp_path / "x")]) == 2
    err = capsys.readouterr().err
    assert f"option {option}:" in err and words in err
    assert not (tmp_path / "x").exists()


def test_state_acquisition_draws_the_counts_of_a_simulation():
    from gatescope.synth.state import simulate_state_counts, state_acquisition, state_from_spec

    state = state_from_spec("psi-+visibility:0.9", 2)
    acq = state_acquisition(state, shots=500.0, meas_set=("H", "V", "D", "A"))
    assert acq.prep == () and len(acq.meas) == 16 and acq.meas[1] == "HV"
    run = acq.draw(4)
    rows = simulate_state_counts(state, shots=500.0, meas_set=("H", "V", "D", "A"), seed=4)
    assert [(m, c) for m, _, c in rows] == list(zip(acq.meas, run.counts.tolist()))
    # expected counts shots · <ab|ρ|ab> for the H/V products (common practice)
    ket = {"H": np.array([1, 0]), "V": np.array([0, 1])}
    for k, label in enumerate(acq.meas[:2]):
        v = np.kron(ket[label[0]], ket[label[1]])
        assert run.expected[k] == pytest.approx(500.0 * (v @ state.choi @ v).real, rel=1e-12)
