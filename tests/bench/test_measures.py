"""Errors of one estimate against the truth (gatescope.bench.measures), against QuTiP's
state metrics and textbook closed forms."""

from __future__ import annotations

import numpy as np
import pytest
import qutip

from gatescope.bench.measures import (Case, Truth, errors, positive_sqrt, repetition,
                                      uhlmann_fidelity)
from gatescope.channels import choi_from_unitary
from gatescope.conventions import named_gate
from gatescope.model import MeasurementModel
from gatescope.synth.simulate import acquisition, channel_from_spec


def _random_state(rng, dim, rank):
    g = rng.normal(size=(dim, rank)) + 1j * rng.normal(size=(dim, rank))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def test_uhlmann_fidelity_matches_qutip(rng):
    for _ in range(3):
        a, b = _random_state(rng, 16, 16), _random_state(rng, 16, 16)
        # QuTiP's metrics.fidelity is Tr √(√ρ σ √ρ) (Uhlmann, not squared): square it
        expected = qutip.fidelity(qutip.Qobj(a), qutip.Qobj(b)) ** 2
        assert uhlmann_fidelity(a, positive_sqrt(b)) == pytest.approx(expected, abs=1e-10)


@pytest.mark.parametrize("rank_a, rank_b", [(3, 16), (2, 5), (16, 1)])
def test_uhlmann_fidelity_of_rank_deficient_states(rng, rank_a, rank_b):
    """With ρ = AA† (A of rank r), the singular values of √ρ X are those of A†X, so
    F(ρ, σ) = ‖A†√σ‖²_tr without a square root of ρ (common practice); for σ of low rank
    the same with σ = BB† on the other side: ‖A†B‖²_tr."""
    for _ in range(3):
        ga = rng.normal(size=(16, rank_a)) + 1j * rng.normal(size=(16, rank_a))
        gb = rng.normal(size=(16, rank_b)) + 1j * rng.normal(size=(16, rank_b))
        a = ga / np.sqrt(np.trace(ga @ ga.conj().T).real)
        b = gb / np.sqrt(np.trace(gb @ gb.conj().T).real)
        expected = np.sum(np.linalg.svd(a.conj().T @ b, compute_uv=False)) ** 2
        got = uhlmann_fidelity(a @ a.conj().T, positive_sqrt(b @ b.conj().T))
        assert got == pytest.approx(expected, abs=1e-12)


def test_fidelity_with_a_pure_truth_is_the_overlap(rng):
    # F(ρ, |ψ><ψ|) = <ψ|ρ|ψ> in the squared convention (Nielsen & Chuang, Quantum
    # Computation and Quantum Information, 2000, eq. 9.60, which is its square root)
    psi = rng.normal(size=8) + 1j * rng.normal(size=8)
    psi /= np.linalg.norm(psi)
    rho = _random_state(rng, 8, 8)
    sqrt_pure = positive_sqrt(np.outer(psi, psi.conj()))
    assert uhlmann_fidelity(rho, sqrt_pure) == pytest.approx(np.vdot(psi, rho @ psi).real,
                                                            abs=1e-13)


def test_errors_of_a_depolarised_gate_against_the_gate():
    """CZ followed by depolarising p against the perfect CZ: closed forms."""
    p, d = 0.1, 4
    truth = Truth.of(choi_from_unitary(named_gate("CZ")), named_gate("CZ"))
    est = channel_from_spec(f"CZ+depolarizing:{p}").choi
    out = errors(est, truth)
    # F_pro of a depolarised unitary: 1 − p(1 − 1/d²) (common practice)
    assert out["fidelity_error"] == pytest.approx(-p * (1 - 1 / d ** 2), abs=1e-14)
    # J − J_U = p(I/d − J_U): eigenvalues p(1/d − d) once and p/d (d² − 1 times)
    assert out["hs_error"] == pytest.approx(p ** 2 * ((1 / d - d) ** 2 + 15 / d ** 2), rel=1e-12)
    assert out["trace_distance"] == pytest.approx(p * ((d - 1 / d) + 15 / d) / (2 * d), rel=1e-12)
    # the normalised Choi state of the truth is pure: 1 − F = 1 − <<U|J|U>>/d²
    assert out["infidelity"] == pytest.approx(p * (1 - 1 / d ** 2), abs=1e-12)


def test_trace_distance_is_that_of_the_normalised_choi_states(rng):
    a = channel_from_spec("random:16:1").choi
    b = channel_from_spec("random:5:2").choi
    truth = Truth.of(b, None)
    out = errors(a, truth)
    # QuTiP's tracedist(ρ, σ) = Tr|ρ − σ|/2 (common practice)
    assert out["trace_distance"] == pytest.approx(
        qutip.tracedist(qutip.Qobj(a / 4), qutip.Qobj(b / 4)), abs=1e-12)
    assert np.isnan(out["fidelity_error"])           # no target
    assert out["hs_error"] == pytest.approx(np.linalg.norm(a - b) ** 2, rel=1e-12)


def test_unphysical_estimate_gives_a_number(rng):
    """A lin estimate may have negative eigenvalues: the formula still gives a number,
    with those directions contributing nothing."""
    truth = Truth.of(channel_from_spec("CZ+depolarizing:0.2").choi, named_gate("CZ"))
    bad = truth.choi - 0.2 * np.eye(16) / 4 + 0.05 * np.diag(np.arange(16) - 7.5) / 4
    assert np.linalg.eigvalsh(bad)[0] < 0
    out = errors(bad, truth)
    assert np.isfinite(out["infidelity"]) and np.isfinite(out["trace_distance"])


def _case(tmp_path, spec, shots=2000.0):
    from gatescope.reader import read_experiment
    from gatescope.synth.simulate import write_experiment

    channel = channel_from_spec(spec, 1)
    acq = acquisition(channel, shots=shots)
    exp = read_experiment(write_experiment(tmp_path, channel, acq.draw(0).rows, title="t"))
    return Case(spec, 1, shots, MeasurementModel(exp), acq, Truth.of(channel.choi, exp.target))


def test_a_repetition_with_a_bootstrap(tmp_path):
    case = _case(tmp_path, "H+amplitude-damping:0.3+depolarizing:0.2")
    counts = case.acquisition.draw(5).counts
    rec = repetition(case, counts, "mle", bootstrap=4, bootstrap_seed=9)
    assert rec["error"] is None and rec["converged"] and rec["iterations"] > 0
    assert rec["hs_error"] > 0 and 0 < rec["infidelity"] < 0.05
    names = rec["figure_names"]
    assert "process_fidelity" in names and len(rec["point_figures"]) == len(names)
    assert np.array(rec["bootstrap_values"]).shape == (4, len(names))
    again = repetition(case, counts, "mle", bootstrap=4, bootstrap_seed=9)
    assert again["bootstrap_values"] == rec["bootstrap_values"]
    assert again["hs_error"] == rec["hs_error"]
    with pytest.raises(ValueError, match="truth of kind .process."):
        repetition(Case(case.channel, 1, 1.0, case.model, case.acquisition, case.truth, "state"),
                   counts, "mle")


# --------------------------------------------------------------------------
# States
# --------------------------------------------------------------------------

def test_state_errors_against_qutip_and_closed_forms():
    """A depolarised Bell state against the pure one and against an estimate."""
    from gatescope.conventions import density, named_state
    from gatescope.synth.state import state_from_spec

    p = 0.2
    psi = named_state("phi+", 2)
    truth = Truth.of(state_from_spec(f"phi++depolarizing:{p}").choi, psi, kind="state")
    # fidelity of a depolarised pure state to itself: 1 − p(1 − 1/d) (common practice)
    assert truth.target_fidelity == pytest.approx(1 - p * 3 / 4, abs=1e-14)
    assert truth.input_dim == 1 and truth.figures["state_fidelity"] == truth.target_fidelity
    est = density(psi)
    out = errors(est, truth)
    # ρ̂ − ρ = p(|ψ><ψ| − I/4): eigenvalues 3p/4 once and −p/4 three times
    assert out["hs_error"] == pytest.approx(p ** 2 * (9 / 16 + 3 / 16), rel=1e-12)
    assert out["trace_distance"] == pytest.approx(0.5 * p * (3 / 4 + 3 / 4), rel=1e-12)
    # QuTiP's tracedist is Tr|ρ − σ|/2 and its fidelity Tr √(√ρ σ √ρ), not squared
    # (common practice)
    assert out["trace_distance"] == pytest.approx(
        qutip.tracedist(qutip.Qobj(est), qutip.Qobj(truth.choi)), abs=1e-12)
    # a pure estimate: F(|ψ><ψ|, ρ) = <ψ|ρ|ψ> = 1 − 3p/4 (Nielsen & Chuang 2000, eq. 9.60,
    # squared)
    assert out["infidelity"] == pytest.approx(3 * p / 4, abs=1e-12)
    # QuTiP takes square roots of the rounding-level eigenvalues of the rank-one product
    # (√ε ≈ 1e−8 each), hence the looser tolerance
    assert out["infidelity"] == pytest.approx(
        1 - qutip.fidelity(qutip.Qobj(est), qutip.Qobj(truth.choi)) ** 2, abs=1e-7)
    assert out["fidelity_error"] == pytest.approx(1 - truth.target_fidelity, abs=1e-12)


def test_a_state_repetition_with_a_bootstrap(tmp_path):
    from gatescope.model import StateModel
    from gatescope.reader import read_experiment
    from gatescope.synth.state import (state_acquisition, state_from_spec,
                                       write_state_experiment)

    state = state_from_spec("psi-+visibility:0.9+depolarizing:0.05")
    acq = state_acquisition(state, shots=2000.0)
    run = acq.draw(0)
    exp = read_experiment(write_state_experiment(
        tmp_path, state, list(zip(acq.meas, run.expected, run.counts)), title="t"))
    model = StateModel.from_experiment(exp)
    truth = Truth.of(state.choi, exp.target_state, kind="state")
    case = Case(state.spec, 2, 2000.0, model, acq, truth, kind="state")
    counts = acq.draw(3).counts
    rec = repetition(case, counts, "mle", bootstrap=4, bootstrap_seed=9)
    assert rec["error"] is None and rec["converged"]
    assert 0 < rec["hs_error"] < 0.01 and 0 < rec["infidelity"] < 0.05
    assert rec["figure_names"][0] == "state_fidelity" and "chsh_max" in rec["figure_names"]
    assert np.array(rec["bootstrap_values"]).shape == (4, len(rec["figure_names"]))
    # the record's error is the estimate's own: refit and measure by hand
    from gatescope.estimators import estimate
    from gatescope.merit.state import state_fidelity

    rho = estimate(model, "mle", counts=counts.astype(float)).choi
    assert rec["hs_error"] == pytest.approx(np.linalg.norm(rho - state.choi) ** 2, rel=1e-9)
    assert rec["fidelity_error"] == pytest.approx(
        state_fidelity(rho, exp.target_state) - truth.target_fidelity, abs=1e-9)
