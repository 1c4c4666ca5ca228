"""Bench imperfections for simulated data (gatescope.synth.lab), against closed forms,
an explicit two-photon calculation and the experiment file's own description of plates."""

from __future__ import annotations

import math

import numpy as np
import pytest

import gatescope as gs
from gatescope.channels import (choi_from_kraus, choi_from_unitary, choi_to_chi, compose,
                                partial_trace_output)
from gatescope.conventions import builtin_states, density, named_gate, wave_plate
from gatescope.model import MeasurementModel
from gatescope.synth import lab as ln
from gatescope.synth.noise import depolarizing, parse_channel_spec
from gatescope.synth.simulate import acquisition, channel_from_spec, simulate_counts

SIX = ("H", "V", "D", "A", "R", "L")


# --------------------------------------------------------------------------
# Distinguishable photons in the postselected controlled-Z
# --------------------------------------------------------------------------

def test_indistinguishable_photons_give_the_gate_with_success_one_ninth():
    # Ralph, Langford, Bell, Hill & Milburn, PRA 65, 062324 (2002): CZ with probability 1/9
    choi = ln.distinguishable_cz(0.0)
    np.testing.assert_allclose(choi, choi_from_unitary(named_gate("CZ")) / 9, atol=1e-15)


@pytest.mark.parametrize("x", [0.0, 0.25, 0.6, 1.0])
def test_success_probabilities(x):
    choi = ln.distinguishable_cz(x)
    # |00>, |01>, |10>: η² = 1/9 whatever x; |11>: (1 − x)(1 − 2η)² + x(η² + (1 − η)²),
    # the no-interference level 5/9 at x = 1 being the classical-particle probability of
    # "both reflected or both transmitted" (Hong, Ou & Mandel, PRL 59, 2044 (1987)).
    expected = np.diag([1, 1, 1, 1 + 4 * x]) / 9
    np.testing.assert_allclose(partial_trace_output(choi), expected, atol=1e-15)
    for k, p in enumerate([1 / 9, 1 / 9, 1 / 9, (1 - x) / 9 + x * 5 / 9]):
        assert ln.success_probability(choi, np.diag(np.eye(4)[k])) == pytest.approx(p, abs=1e-15)
    assert np.linalg.eigvalsh(choi).min() > -1e-15            # completely positive


@pytest.mark.parametrize("x", [0.0, 0.3, 1.0])
def test_chi_matrix_of_the_derivation(x):
    """χ = a a† + b b† + (1 − x)(a b† + b a†) on {II, IZ, ZI, ZZ}; the interference term
    (the last one) is gone at x = 1 (derivation in `distinguishable_cz`, after Ralph et al.
    2002 and Hofmann & Takeuchi, PRA 66, 024308 (2002))."""
    chi = choi_to_chi(ln.distinguishable_cz(x))
    idx = [0, 3, 12, 15]                                      # II, IZ, ZI, ZZ (I<X<Y<Z)
    block = np.array([
        [1 + 4 * x, 1 - 2 * x, 1 - 2 * x, 2 * x - 1],
        [1 - 2 * x, 1, 1, -1],
        [1 - 2 * x, 1, 1, -1],
        [2 * x - 1, -1, -1, 1]]) / 36
    np.testing.assert_allclose(chi[np.ix_(idx, idx)], block, atol=1e-15)
    rest = chi.copy()
    rest[np.ix_(idx, idx)] = 0
    np.testing.assert_allclose(rest, 0, atol=1e-15)
    # the coherence <00|Φ(ρ)|11> of the input (|00> + |11>)/√2: −1/18 with interference
    # (K = CZ/3), +1/18 without (only K_own = I/3 connects |00> and |11>)
    psi = np.zeros(4)
    psi[[0, 3]] = 1 / math.sqrt(2)
    out = np.einsum("ij,iajb->ab", np.outer(psi, psi), ln.distinguishable_cz(x).reshape(4, 4, 4, 4))
    assert out[0, 3] == pytest.approx((2 * x - 1) / 18, abs=1e-15)


def _two_photon_network(overlap: float) -> np.ndarray:
    """The postselected map computed from the beam-splitter network itself.

    Spatial modes c0, c1, t0, t1 (the rails) and two discard ports; each mode carries an
    unobserved two-level internal state, |0> for the control photon and
    overlap·|0> + √(1 − overlap²)·|1> for the target photon. The amplitude of detecting one
    photon in mode x and one in mode y of a two-boson state a†_φ a†_χ |0> is
    φ(x)χ(y) + χ(x)φ(y) (common practice: bosonic symmetrisation); postselect one photon in
    the control's rails and one in the target's and trace out the internal state.
    """
    eta = 1 / 3
    u = np.zeros((6, 6))
    # the |1> rails meet at a 1/3 beam splitter: reflection keeps the rail
    u[1, 1] = u[3, 3] = math.sqrt(eta)
    u[3, 1], u[1, 3] = math.sqrt(1 - eta), -math.sqrt(1 - eta)
    # the |0> rails each pass a 1/3 beam splitter whose other port (4, 5) is discarded
    u[0, 0] = u[2, 2] = u[4, 4] = u[5, 5] = math.sqrt(eta)
    u[4, 0], u[0, 4] = math.sqrt(1 - eta), -math.sqrt(1 - eta)
    u[5, 2], u[2, 5] = math.sqrt(1 - eta), -math.sqrt(1 - eta)
    assert np.allclose(u.T @ u, np.eye(6))                  # a lossless network
    big = np.kron(u, np.eye(2))
    a = np.array([1.0, 0.0])
    b = np.array([overlap, math.sqrt(1 - overlap ** 2)])
    t = np.zeros((2, 2, 2, 2, 2, 2), dtype=complex)       # [k, l, α, β, i, j]
    for i in range(2):
        for j in range(2):
            phc = (big @ np.kron(np.eye(6)[i], a)).reshape(6, 2)
            pht = (big @ np.kron(np.eye(6)[2 + j], b)).reshape(6, 2)
            for k in range(2):
                for l in range(2):
                    t[k, l, :, :, i, j] = (np.outer(phc[k], pht[2 + l])
                                           + np.outer(pht[k], phc[2 + l]))
    return choi_from_kraus([t[:, :, al, be].reshape(4, 4) for al in range(2) for be in range(2)])


@pytest.mark.parametrize("overlap", [1.0, 0.9, 0.5, 0.0])
def test_distinguishability_channel_equals_the_network_with_internal_states(overlap):
    # x = 1 − |<a|b>|², the Hong–Ou–Mandel visibility (Hong, Ou & Mandel 1987)
    np.testing.assert_allclose(ln.distinguishable_cz(1 - overlap ** 2),
                               _two_photon_network(overlap), atol=1e-14)


def test_cnot_is_the_cz_between_hadamards_on_the_target():
    x = 0.35
    h = choi_from_unitary(np.kron(np.eye(2), named_gate("H")))
    cnot = ln.distinguishability_gate("CNOT", x)
    np.testing.assert_allclose(cnot, compose(compose(h, ln.distinguishable_cz(x)), h), atol=1e-15)
    np.testing.assert_allclose(ln.distinguishability_gate("CNOT", 0.0),
                               choi_from_unitary(named_gate("CNOT")) / 9, atol=1e-15)
    va = np.kron(density([0, 1]), density([1, -1]))          # control V, target A
    assert ln.success_probability(cnot, va) == pytest.approx((1 + 4 * x) / 9, abs=1e-15)
    with pytest.raises(ValueError, match="CZ and CNOT"):
        ln.distinguishability_gate("SWAP", 0.1)


def test_spec_with_distinguishability_and_process_noise():
    spec = parse_channel_spec("CZ+distinguishability:0.2+depolarizing:0.05")
    assert spec.lab.distinguishability == 0.2 and spec.lab.trace_decreasing
    assert spec.noise == [("depolarizing", 0.05)]
    np.testing.assert_allclose(channel_from_spec(spec.text).choi,
                               compose(ln.distinguishable_cz(0.2), depolarizing(0.05, 4)),
                               atol=1e-15)
    for bad, match in [("CZ+depolarizing:0.1+distinguishability:0.2", "directly follow"),
                       ("SWAP+distinguishability:0.2", "CZ or CNOT"),
                       ("random:16:1+distinguishability:0.2", "CZ or CNOT"),
                       ("CZ+distinguishability:1.5", r"\[0, 1\]"),
                       ("CZ+plates:0.1:1+plates:0.1:1", "twice"),
                       ("CZ+drift:0.1+drift-walk:0.1", "one of drift"),
                       ("CZ+plates:0.3", "plates:ANGLE:RETARD"),
                       ("CZ+plates:0.3:1:x", "seed"),
                       ("CZ+plates:0.3:1:-2", "negative"),
                       ("CZ+accidentals:1e5", "accidentals:SINGLES"),
                       ("CZ+accidentals:-1:2", "negative"),
                       ("CZ+drift:2.5", "less than 2"),
                       ("CZ+drift-walk:nan", "finite"),
                       ("CZ+fog:1", "unknown kind")]:
        with pytest.raises(ValueError, match=match):
            parse_channel_spec(bad)


def test_spec_bench_kinds():
    spec = parse_channel_spec("random:16:4+plates:0.3:1.5+accidentals:80000:2+drift-walk:0.05:9")
    assert spec.random == (16, 4) and spec.gate is None
    assert spec.lab.plates == (0.3, 1.5, 0)
    assert spec.lab.accidentals == (80000.0, 2.0)
    assert spec.lab.drift == ("walk", 0.05, 9)
    assert not spec.lab.trace_decreasing
    assert parse_channel_spec("CZ+drift:-0.1+plates:0.3:1.5:7").lab.drift == ("linear", -0.1, None)
    assert parse_channel_spec("CZ+plates:0.3:1.5:7").lab.plates == (0.3, 1.5, 7)
    # bench kinds other than distinguishability leave the process alone
    np.testing.assert_array_equal(channel_from_spec("CZ+zz:0.2+plates:1:2+drift:0.1").choi,
                                  channel_from_spec("CZ+zz:0.2").choi)


# --------------------------------------------------------------------------
# Wave plates
# --------------------------------------------------------------------------

def _fidelity(vector, rho):
    v = np.asarray(vector, dtype=complex)
    v = v / np.linalg.norm(v)
    return float(np.vdot(v, rho @ v).real)


def test_ideal_plates_make_the_ideal_states_and_effects():
    optics = ln.actual_optics(SIX, SIX, ln.PlateErrors(np.zeros((2, 4)), np.zeros((2, 4))))
    states = builtin_states()
    for q in range(2):
        for s, lab in enumerate(SIX):
            np.testing.assert_allclose(optics.prep[q, s], density(states[lab]), atol=1e-9)
            np.testing.assert_allclose(optics.meas[q, s], density(states[lab]), atol=1e-9)


@pytest.mark.parametrize("eps_deg", [1.0, 5.0, 20.0])
def test_half_wave_retardance_error_by_jones_calculus(eps_deg):
    """Jones calculus by hand (e.g. Hecht, *Optics*, ch. 8; from memory). W(θ, δ)|H> =
    (e^{−iδ/2}c² + e^{iδ/2}s², −2i sin(δ/2) cs), c = cos θ, s = sin θ; δ = π + ε."""
    eps = math.radians(eps_deg)
    # the bare plate at 0°: diag(e^{−iδ/2}, e^{iδ/2}) takes D to (H − e^{iε}V)/√2, so the
    # fidelity with A is |1 + e^{iε}|²/4 = cos²(ε/2)
    out = wave_plate(0.0, math.pi + eps) @ np.array([1, 1]) / math.sqrt(2)
    assert _fidelity([1, -1], density(out)) == pytest.approx(math.cos(eps / 2) ** 2, abs=1e-14)
    errors = ln.PlateErrors([[0, 0, 0, 0]], [[eps_deg, 0, 0, 0]])     # prep half-wave plate
    optics = ln.actual_optics(("H", "V", "D", "R"), ("H",), errors)
    h, v, d, r = optics.prep[0]
    # H: half-wave at 0° on H gives a phase only; R: the same, then the quarter-wave plate
    assert _fidelity([1, 0], h) == pytest.approx(1.0, abs=1e-14)
    assert _fidelity([1, -1j], r) == pytest.approx(1.0, abs=1e-14)
    # V: half-wave at 45°: (cos(δ/2), −i sin(δ/2)) = (−sin(ε/2), −i cos(ε/2)), fidelity cos²(ε/2)
    assert _fidelity([0, 1], v) == pytest.approx(math.cos(eps / 2) ** 2, abs=1e-14)
    # D: half-wave at 22.5°: (cos(δ/2) − i sin(δ/2)/√2, −i sin(δ/2)/√2); the quarter-wave plate
    # at 45° leaves D alone; fidelity (sin²(ε/2) + 2cos²(ε/2))/2 = (1 + cos²(ε/2))/2
    assert _fidelity([1, 1], d) == pytest.approx((1 + math.cos(eps / 2) ** 2) / 2, abs=1e-14)


@pytest.mark.parametrize("alpha_deg", [0.5, 3.0])
def test_half_wave_angle_offset(alpha_deg):
    """A half-wave plate at θ turns linear polarisation at φ into 2θ − φ (Hecht, *Optics*;
    from memory): an offset α of the plate turns the light by 2α, fidelity cos²(2α)."""
    alpha = math.radians(alpha_deg)
    errors = ln.PlateErrors([[alpha_deg, 0, 0, alpha_deg]], [[0, 0, 0, 0]])
    optics = ln.actual_optics(("V",), ("H",), errors)
    expected = math.cos(2 * alpha) ** 2
    assert _fidelity([0, 1], optics.prep[0, 0]) == pytest.approx(expected, abs=1e-14)
    # analysis H (quarter-wave 0°, half-wave 0° + α, polariser H): <H|E|H> = cos²(2α)
    assert _fidelity([1, 0], optics.meas[0, 0]) == pytest.approx(expected, abs=1e-14)


def test_plate_errors_are_drawn_per_plate_and_reproducibly():
    a = ln.draw_plate_errors(2, 0.3, 2.0, seed=5)
    b = ln.draw_plate_errors(2, 0.3, 2.0, seed=5)
    c = ln.draw_plate_errors(2, 0.3, 2.0, seed=6)
    assert a.angle_deg.shape == (2, 4)
    np.testing.assert_array_equal(a.angle_deg, b.angle_deg)
    assert not np.array_equal(a.angle_deg, c.angle_deg)
    many = ln.draw_plate_errors(2000, 0.3, 2.0, seed=1)        # 8000 plates
    assert np.std(many.angle_deg) == pytest.approx(0.3, rel=0.05)
    assert np.std(many.retardance_deg) == pytest.approx(2.0, rel=0.05)
    # every effect of the wrong optics is still an effect: 0 ⪯ E ⪯ I, and states are states
    optics = ln.actual_optics(SIX, SIX, ln.draw_plate_errors(2, 3.0, 10.0, seed=2))
    for e in optics.meas.reshape(-1, 2, 2):
        ev = np.linalg.eigvalsh(e)
        assert ev.min() > -1e-12 and ev.max() < 1 + 1e-12
    for rho in optics.prep.reshape(-1, 2, 2):
        assert np.trace(rho).real == pytest.approx(1.0) and np.linalg.eigvalsh(rho).min() > -1e-12


def _plates_toml(optics, errors):
    """[states] tables that describe the actual plates of every qubit in the experiment
    file's own syntax (read by gatescope's reader, which composes the plates itself)."""
    lines = []
    for q in range(errors.n_qubits):
        a, r = errors.angle_deg[q].tolist(), errors.retardance_deg[q].tolist()
        for lab, (h, w) in zip(optics.prep_labels, optics.prep_angles):
            lines.append(f'[states.p{q}{lab}]\nplates = [ '
                         f'{{ kind = "half", angle_deg = {h + a[0]!r}, '
                         f'retardance_deg = {180 + r[0]!r} }}, {{ kind = "quarter", '
                         f'angle_deg = {w + a[1]!r}, retardance_deg = {90 + r[1]!r} }} ]')
        for lab, (h, w) in zip(optics.meas_labels, optics.meas_angles):
            lines.append(f'[states.m{q}{lab}]\nplates = [ '
                         f'{{ kind = "quarter", angle_deg = {w + a[2]!r}, '
                         f'retardance_deg = {90 + r[2]!r} }}, {{ kind = "half", '
                         f'angle_deg = {h + a[3]!r}, retardance_deg = {180 + r[3]!r} }} ]')
    return "\n".join(lines) + "\n"


def test_rows_with_plate_errors_match_an_experiment_that_describes_those_plates(tmp_path):
    channel = channel_from_spec("CZ+zz:0.2+depolarizing:0.05+plates:0.8:4:3")
    acq = acquisition(channel, shots=1000.0, prep_set=SIX, meas_set=SIX)
    errors = ln.draw_plate_errors(2, 0.8, 4.0, 3)
    optics = ln.actual_optics(SIX, SIX, errors)
    toml = 'qubits = 2\ncounts = "counts.csv"\n' + _plates_toml(optics, errors)
    (tmp_path / "experiment.toml").write_text(toml)
    body = ["prep,meas,counts"] + [f"p0{p[0]} p1{p[1]},m0{m[0]} m1{m[1]},0"
                                   for p, m in zip(acq.prep, acq.meas)]
    (tmp_path / "counts.csv").write_text("\n".join(body) + "\n")
    model = MeasurementModel(gs.read_experiment(tmp_path / "experiment.toml"))
    expected = acq.expected(acq.factors(1))
    np.testing.assert_allclose(expected, model.expected_counts(channel.choi, np.full(36, 1000.0)),
                               rtol=1e-12, atol=1e-9)
    ideal = acquisition(channel_from_spec("CZ+zz:0.2+depolarizing:0.05"), shots=1000.0,
                        prep_set=SIX, meas_set=SIX)
    assert np.abs(expected - ideal.expected(ideal.factors(1))).max() > 1.0     # the errors matter


# --------------------------------------------------------------------------
# Accidental coincidences and drift
# --------------------------------------------------------------------------

def test_accidentals_two_tau_s1_s2():
    s1, s2, tau = 120_000.0, 95_000.0, 1.5e-9
    seconds = np.array([1.0, 2.5, 10.0])
    # 2·τ·S1·S2 per second of integration (common practice)
    np.testing.assert_allclose(ln.accidental_background([s1, s2], tau, seconds),
                               2 * tau * s1 * s2 * seconds, rtol=1e-15)
    assert ln.accidental_rate([s1, s2], tau) == pytest.approx(2 * tau * s1 * s2, rel=1e-15)
    # three detectors: 3·τ²·S1·S2·S3 (from memory)
    assert ln.accidental_rate([s1, s2, 5e4], tau) == pytest.approx(3 * tau ** 2 * s1 * s2 * 5e4,
                                                                    rel=1e-15)
    with pytest.raises(ValueError):
        ln.accidental_rate([s1], tau)


def test_accidental_counts_in_simulated_rows():
    """Rows of a channel that never fires (no pairs) hold only accidentals."""
    acq = acquisition(channel_from_spec("CZ+accidentals:50000:4"), shots=0.0, seconds=2.0)
    expected = 2 * 4e-9 * 50000.0 ** 2 * 2.0                 # 2·τ·S1·S2·t = 40 counts
    np.testing.assert_allclose(acq.background, expected, rtol=1e-14)
    run = acq.draw(4)
    np.testing.assert_allclose(run.expected, expected, rtol=1e-14)
    # Poisson mean over 1296 rows: standard error √(40/1296) ≈ 0.18
    assert abs(run.counts.mean() - expected) < 5 * math.sqrt(expected / run.counts.size)
    np.testing.assert_array_equal(run.counts, acq.draw(4).counts)
    assert set(acq.columns()) == {"seconds", "background"}


def test_accidentals_follow_a_drifting_source():
    """Every singles rate follows the source, so the two-fold accidental rate goes as f²
    while the file states the nominal background."""
    acq = acquisition(channel_from_spec("CZ+accidentals:50000:4+drift:0.2"), shots=0.0)
    f = acq.factors(0)
    np.testing.assert_allclose(acq.draw(0).expected, 2 * 4e-9 * 50000.0 ** 2 * f ** 2,
                               rtol=1e-14)
    np.testing.assert_allclose(acq.columns()["background"], 2 * 4e-9 * 50000.0 ** 2, rtol=1e-14)


def test_linear_drift():
    f = ln.drift_factors(1296, "linear", 0.1)
    assert f.mean() == pytest.approx(1.0, abs=1e-14)
    assert f[-1] - f[0] == pytest.approx(0.1, abs=1e-14)
    np.testing.assert_allclose(np.diff(f, 2), 0, atol=1e-15)      # a straight line
    with pytest.raises(ValueError):
        ln.drift_factors(10, "linear", 2.0)


def test_random_walk_drift():
    f = ln.drift_factors(500, "walk", 0.05, seed=3)
    assert f.mean() == pytest.approx(1.0, abs=1e-14) and f.min() > 0
    np.testing.assert_array_equal(f, ln.drift_factors(500, "walk", 0.05, seed=3))
    assert not np.array_equal(f, ln.drift_factors(500, "walk", 0.05, seed=4))
    # the total change of the log-intensity has standard deviation σ whatever the length
    for n_rows in (50, 1296):
        ends = np.array([np.log(g[-1] / g[0]) for g in
                         (ln.drift_factors(n_rows, "walk", 0.05, seed=s) for s in range(2000))])
        assert np.std(ends) == pytest.approx(0.05, rel=0.06)      # 2000 draws: ±1.6 % (1σ)
        assert abs(ends.mean()) < 4 * 0.05 / math.sqrt(2000)


def test_drift_in_simulated_rows():
    """A linear drift multiplies the rows in acquisition order; an unseeded walk is drawn
    from the run's seed, a seeded one is the same in every run."""
    base = acquisition(channel_from_spec("CZ+depolarizing:0.1"), shots=500.0)
    lin = acquisition(channel_from_spec("CZ+depolarizing:0.1+drift:0.3"), shots=500.0)
    np.testing.assert_allclose(lin.draw(2).expected,
                               base.draw(2).expected * ln.drift_factors(1296, "linear", 0.3),
                               rtol=1e-14)
    walk = acquisition(channel_from_spec("CZ+drift-walk:0.1"), shots=500.0)
    assert not np.array_equal(walk.factors(1), walk.factors(2))
    fixed = acquisition(channel_from_spec("CZ+drift-walk:0.1:5"), shots=500.0)
    np.testing.assert_array_equal(fixed.factors(1), fixed.factors(2))
    np.testing.assert_array_equal(fixed.factors(1), ln.drift_factors(1296, "walk", 0.1, 5))


# --------------------------------------------------------------------------
# Rows of a whole bench
# --------------------------------------------------------------------------

def test_postselected_bench_is_written_as_a_trace_decreasing_experiment(tmp_path):
    """Distinguishability, accidentals and drift together, through `simulate` and the
    project's reader: the expected counts are the model's with the known input rate,
    the stated background and the drift factors."""
    from gatescope.cli import main

    spec = "CZ+distinguishability:0.15+depolarizing:0.03+accidentals:60000:3+drift:0.08"
    assert main(["simulate", "--channel", spec, "--shots", "1000", "--seed", "8",
                 "-o", str(tmp_path / "sim")]) == 0
    exp = gs.read_experiment(tmp_path / "sim" / "experiment.toml")
    model = MeasurementModel(exp)
    rate = 9000.0                                       # 1000 counts / success 1/9
    assert exp.trace == "decreasing" and model.fixed_intensities[0] == pytest.approx(rate)
    channel = channel_from_spec(spec)
    acq = acquisition(channel, shots=1000.0)
    np.testing.assert_allclose(model.background, 2 * 3e-9 * 60000.0 ** 2, rtol=1e-14)
    np.testing.assert_array_equal(exp.seconds, 1.0)
    signal = model.expected_counts(channel.choi, model.fixed_intensities) - model.background
    f = ln.drift_factors(1296, "linear", 0.08)
    np.testing.assert_allclose(acq.draw(8).expected, signal * f + model.background * f ** 2,
                               rtol=1e-12)
    np.testing.assert_array_equal(exp.counts, acq.draw(8).counts)
    truth = gs.load_result(tmp_path / "sim" / "truth.h5")
    np.testing.assert_allclose(truth.choi, channel.choi, atol=1e-15)
    # the ideal gate (x = 0) gives `shots` counts per preparation and analyser basis
    ideal = acquisition(channel_from_spec("CZ+distinguishability:0"), shots=1000.0,
                        meas_set=("H", "V"))
    np.testing.assert_allclose(ideal.draw(0).expected.reshape(36, 4).sum(axis=1), 1000.0,
                               rtol=1e-12)


def test_longer_rows_are_stated_in_the_file(tmp_path):
    """Rows of 2.5 s at the same counts: a rate shots/2.5 per second, and a seconds
    column, so that a known input rate (per second) stays right."""
    from gatescope.synth.simulate import write_experiment

    channel = channel_from_spec("CZ+distinguishability:0.1")
    acq = acquisition(channel, shots=1000.0, seconds=2.5)
    assert acq.rate == pytest.approx(9000.0 / 2.5)
    assert set(acq.columns()) == {"seconds"}
    path = write_experiment(tmp_path, channel, acq.draw(1).rows, title="t",
                            extra_toml=acq.toml_keys(), columns=acq.columns())
    model = MeasurementModel(gs.read_experiment(path))
    np.testing.assert_allclose(model.expected_counts(channel.choi, model.fixed_intensities),
                               acq.draw(1).expected, rtol=1e-12, atol=1e-9)


def test_rows_without_bench_kinds_are_the_ideal_model(tmp_path):
    """Expected counts of a plain SPEC: shots · Tr[(ρ^T ⊗ E) J] with the ideal states,
    as the model of the experiment file that simulate writes computes them."""
    from support import simulated_experiment

    spec = "CNOT+amplitude-damping:0.1"
    exp, choi = simulated_experiment(tmp_path, spec, shots=700.0, meas=("H", "V", "D", "R"))
    model = MeasurementModel(exp)
    acq = acquisition(channel_from_spec(spec), shots=700.0, meas_set=("H", "V", "D", "R"))
    assert acq.background is None and acq.columns() == {} and acq.toml_keys() == ""
    np.testing.assert_allclose(acq.expected(acq.factors(0)),
                               model.expected_counts(choi, np.full(model.n_groups, 700.0)),
                               rtol=1e-12, atol=1e-12)
    rows = simulate_counts(channel_from_spec(spec), shots=700.0, meas_set=("H", "V", "D", "R"),
                           seed=1)
    np.testing.assert_array_equal([r[3] for r in rows], exp.counts)
