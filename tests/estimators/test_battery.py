"""One battery for every estimator (lin, pls, mle and any later one).

Every estimator registered in `gatescope.estimators.ESTIMATORS` is held to
the same checks: physical output (lin excepted: it is only trace
preserving), ideal data give back the true channel (also with backgrounds,
other normalisations and, for the physical estimators, trace-decreasing
data), ``counts=`` replaces the experiment's counts, same input gives the
same numbers, the README's conventions hold, and the result carries the
fields every estimator must report. The second half holds every estimator
to the same checks on state experiments (`gatescope.model.StateModel`).

Ideal data are the expected counts rounded to whole numbers at 10⁸ counts
per basis: the rounding (at most half a count in rows of ~10⁶–10⁷) moves the
estimate by ~10⁻⁸ (measured: lin and pls ≤ 6e−9). The maximum-likelihood
solvers stop where the rounding of the log-likelihood itself (about 1e−4 in ℓ
at these counts) hides any further gain, √(1e−4 / curvature ~10⁹) ≈ 3e−7 in
J (measured: mle-pg ≤ 1.5e−7, mle ≤ 1.1e−6), hence the bound `IDEAL_TOL`.
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope import GatescopeWarning, read_experiment
from gatescope.channels import partial_trace_output
from gatescope.conventions import named_gate
from gatescope.estimators import ESTIMATORS, estimate
from gatescope.merit import process_fidelity
from gatescope.model import MeasurementModel, build_model
from support import postselected_experiment, with_background

METHODS = sorted(ESTIMATORS)
#: Largest |Ĵ − J| for ideal (rounded expected) counts at 10⁸ per basis (module docstring).
IDEAL_TOL = 3e-6


@pytest.fixture(scope="module")
def noisy_cz(tmp_path_factory):
    from support import simulated_experiment
    return simulated_experiment(tmp_path_factory.mktemp("cz"), "CZ+zz:0.1+depolarizing:0.05",
                                shots=800, seed=4)


PHYSICAL = [m for m in METHODS if m != "lin"]


def is_cptp(choi, tol):
    d = int(round(np.sqrt(choi.shape[0])))
    herm = np.abs(choi - choi.conj().T).max() <= tol
    pos = np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0] >= -tol
    tp = np.abs(partial_trace_output(choi) - np.eye(d)).max() <= tol
    return herm and pos and tp


@pytest.mark.parametrize("method", METHODS)
def test_reports_every_field(noisy_cz, method):
    exp, _ = noisy_cz
    fit = estimate(MeasurementModel(exp), method)
    assert fit.method == method
    assert isinstance(fit.converged, bool) and fit.converged
    assert isinstance(fit.iterations, int) and fit.iterations >= 1
    assert isinstance(fit.stop_reason, str) and fit.stop_reason
    assert fit.seconds > 0
    assert fit.choi.shape == (16, 16) and fit.intensities.shape == (exp.n_groups,)
    assert np.all(fit.intensities > 0)


@pytest.mark.parametrize("method", PHYSICAL)
def test_output_is_cptp(noisy_cz, method):
    exp, _ = noisy_cz
    fit = estimate(MeasurementModel(exp), method)
    assert is_cptp(fit.choi, 1e-10)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("spec, n_qubits", [("random:4:21", 1), ("random:16:22", 2),
                                            ("CNOT+depolarizing:0.1", 2)])
def test_ideal_data_return_the_true_channel(make_experiment, method, spec, n_qubits):
    # expected counts rounded to integers at 1e8 shots: only rounding noise remains
    exp, truth = make_experiment(spec, n_qubits=n_qubits, shots=1e8, exact=True)
    fit = estimate(MeasurementModel(exp), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL


@pytest.mark.parametrize("method", METHODS)
def test_same_input_same_numbers(noisy_cz, method):
    exp, _ = noisy_cz
    a = estimate(MeasurementModel(exp), method)
    b = estimate(MeasurementModel(read_experiment(exp.path)), method)
    assert np.array_equal(a.choi, b.choi)
    assert a.log_likelihood == b.log_likelihood or (np.isnan(a.log_likelihood) and np.isnan(b.log_likelihood))


@pytest.mark.parametrize("method", METHODS)
def test_conventions_cnot_control_is_qubit_one(make_experiment, method):
    # README, Conventions: CNOT = |0><0|⊗I + |1><1|⊗X. The CNOT with the other qubit as control has
    # |Tr(U†V)|²/d² = 1/16 against it (direct calculation: only |00> is left alone by both).
    exp, _ = make_experiment("CNOT", shots=1e8, exact=True)
    fit = estimate(MeasurementModel(exp), method)
    assert process_fidelity(fit.choi, named_gate("CNOT")) > 1 - IDEAL_TOL
    reversed_cnot = named_gate("SWAP") @ named_gate("CNOT") @ named_gate("SWAP")
    assert process_fidelity(fit.choi, reversed_cnot) == pytest.approx(1 / 16, abs=IDEAL_TOL)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("normalization", ["global", "per-group"])
def test_other_normalizations(make_experiment, method, normalization, tmp_path):
    exp, truth = make_experiment("random:8:31", shots=1e8, exact=True)
    text = exp.toml_text + f'normalization = "{normalization}"\n'
    if normalization == "per-group":
        lines = exp.counts_path.read_text().splitlines()
        out = [lines[0] + ",group"] + [f"{ln},g{k % 5}" for k, ln in enumerate(lines[1:])]
        exp.counts_path.write_text("\n".join(out) + "\n")
    exp.path.write_text(text)
    exp2 = read_experiment(exp.path)
    assert exp2.n_groups == (1 if normalization == "global" else 5)
    fit = estimate(MeasurementModel(exp2), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL


@pytest.mark.parametrize("method", METHODS)
def test_undetermined_data_warn_and_still_fit(make_experiment, method):
    exp, _ = make_experiment("CZ", shots=500, prep=("H", "V"))
    with pytest.warns(GatescopeWarning, match="undetermined"):
        ident = MeasurementModel(exp).warn_if_undetermined()
    assert ident.prep_rank == 4
    fit = estimate(MeasurementModel(exp), method)
    if method != "lin":
        assert is_cptp(fit.choi, 1e-9)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("kind, spec", [("process", "CZ+depolarizing:0.1"),
                                        ("state", "psi-+depolarizing:0.1")])
def test_counts_argument_replaces_the_experiment_counts(tmp_path, method, kind, spec):
    # the bootstrap refits through counts=: the fit must be that of those counts
    from support import simulated_experiment, simulated_state_experiment

    simulate = simulated_state_experiment if kind == "state" else simulated_experiment
    a, _ = simulate(tmp_path / "a", spec, shots=600, seed=1)
    b, _ = simulate(tmp_path / "b", spec, shots=600, seed=2)
    via_counts = estimate(build_model(a), method, counts=b.counts.astype(float))
    direct = estimate(build_model(b), method)
    own = estimate(build_model(a), method)
    np.testing.assert_allclose(via_counts.choi, direct.choi, atol=1e-12)
    assert via_counts.log_likelihood == pytest.approx(direct.log_likelihood, rel=1e-12)
    assert np.abs(own.choi - direct.choi).max() > 1e-3       # the two data sets differ


@pytest.mark.parametrize("method", METHODS)
def test_background_is_modelled_not_subtracted(make_experiment, method, rng):
    # counts = λ·p + b with a known background column: the estimate is the true channel
    exp, truth = make_experiment("CZ+depolarizing:0.1", shots=1.0)
    exp = with_background(exp, truth, rng.uniform(0.0, 50.0, exp.n_rows), scale=1e8 / 6)
    fit = estimate(MeasurementModel(exp), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL
    if method in PHYSICAL:
        assert is_cptp(fit.choi, 1e-9)


@pytest.mark.parametrize("method", PHYSICAL)
def test_trace_decreasing_data(tmp_path, method):
    # a postselected CZ (success 1/9) at an ideal input rate: the estimate is the lossy
    # channel, completely positive and trace non-increasing
    exp, truth = postselected_experiment(tmp_path / "ps", 1 / 9, rate=1e9, exact=True)
    fit = estimate(MeasurementModel(exp), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL
    assert np.linalg.eigvalsh(fit.choi)[0] >= -1e-9
    assert np.linalg.eigvalsh(np.eye(4) - partial_trace_output(fit.choi))[0] >= -1e-9


# --------------------------------------------------------------------------
# State experiments: the same estimators through the same interface
# --------------------------------------------------------------------------

@pytest.fixture(scope="module")
def noisy_pair(tmp_path_factory):
    from support import simulated_state_experiment
    return simulated_state_experiment(tmp_path_factory.mktemp("pair"),
                                      "phi++visibility:0.9+depolarizing:0.05", shots=800, seed=4)


def is_density_matrix(rho, tol):
    herm = np.abs(rho - rho.conj().T).max() <= tol
    pos = np.linalg.eigvalsh(0.5 * (rho + rho.conj().T))[0] >= -tol
    return herm and pos and abs(np.trace(rho).real - 1) <= tol


@pytest.mark.parametrize("method", METHODS)
def test_state_fit_reports_every_field(noisy_pair, method):
    exp, _ = noisy_pair
    fit = estimate(build_model(exp), method)
    assert fit.method == method
    assert isinstance(fit.converged, bool) and fit.converged
    assert isinstance(fit.iterations, int) and fit.iterations >= 1
    assert isinstance(fit.stop_reason, str) and fit.stop_reason
    assert fit.seconds > 0
    # an unphysical lin estimate may predict a negative rate where counts were seen (−inf)
    assert np.isfinite(fit.log_likelihood) or method == "lin"
    assert fit.choi.shape == (4, 4) and fit.intensities.shape == (1,)
    assert np.all(fit.intensities > 0)
    # Tr ρ = 1 for every estimator, lin included (c_0 = 1 is imposed exactly)
    assert np.trace(fit.choi).real == pytest.approx(1, abs=1e-12)


@pytest.mark.parametrize("method", PHYSICAL)
def test_state_output_is_a_density_matrix(noisy_pair, method):
    exp, _ = noisy_pair
    assert is_density_matrix(estimate(build_model(exp), method).choi, 1e-12)


PURE_STATES = [("H", 1), ("random:1:5", 1), ("phi+", 2), ("psi-", 2), ("HD", 2), ("+i 1", 2),
               ("random:1:6", 2), ("GHZ", 3), ("W", 3), ("random:1:7", 3)]


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("spec, n_qubits", PURE_STATES)
def test_ideal_data_of_a_pure_state_return_it(make_state_experiment, method, spec, n_qubits):
    # expected counts rounded to integers at 1e8 per analyser basis: only rounding noise
    exp, truth = make_state_experiment(spec, n_qubits=n_qubits, shots=1e8, exact=True)
    assert np.linalg.matrix_rank(truth, tol=1e-10) == 1
    fit = estimate(build_model(exp), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL


@pytest.mark.parametrize("method", METHODS)
def test_same_state_input_same_numbers(noisy_pair, method):
    exp, _ = noisy_pair
    a = estimate(build_model(exp), method)
    b = estimate(build_model(read_experiment(exp.path)), method)
    assert np.array_equal(a.choi, b.choi) and a.log_likelihood == b.log_likelihood


@pytest.mark.parametrize("method", METHODS)
def test_state_per_group_normalization(make_state_experiment, method):
    # data taken basis by basis with a drifting source: one intensity per analyser basis
    # (9 groups of 4 rows for two qubits), each 1e8 times a factor between 1 and 1.5
    exp, truth = make_state_experiment("random:2:8", shots=1.0)
    model = build_model(exp)
    p = model.forward(truth)
    basis = [f"{m[0] in 'HV' and 'z' or m[0] in 'DA' and 'x' or 'y'}"
             f"{m[1] in 'HV' and 'z' or m[1] in 'DA' and 'x' or 'y'}" for m in exp.meas]
    names = sorted(set(basis))
    scale = {g: 1e8 * (1 + 0.5 * k / len(names)) for k, g in enumerate(names)}
    lines = ["meas,counts,group"] + [f"{m},{int(round(scale[g] * p[k]))},{g}"
                                     for k, (m, g) in enumerate(zip(exp.meas, basis))]
    exp.counts_path.write_text("\n".join(lines) + "\n")
    exp.path.write_text(exp.toml_text + 'normalization = "per-group"\n')
    exp2 = read_experiment(exp.path)
    assert exp2.n_groups == 9
    fit = estimate(build_model(exp2), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL
    np.testing.assert_allclose(fit.intensities, [scale[g] for g in exp2.group_names], rtol=1e-6)


@pytest.mark.parametrize("method", METHODS)
def test_state_background_is_modelled_not_subtracted(make_state_experiment, method, rng):
    # counts = λ·p + b with a known background column: the estimate is the true state
    exp, truth = make_state_experiment("phi-+visibility:0.8", shots=1.0)
    p = build_model(exp).forward(truth)
    background = rng.uniform(0.0, 50.0, exp.n_rows)
    expected = 1e8 * p + background
    lines = ["meas,counts,background"] + [f"{m},{int(round(e))},{b:.17g}"
                                          for m, e, b in zip(exp.meas, expected, background)]
    exp.counts_path.write_text("\n".join(lines) + "\n")
    fit = estimate(build_model(read_experiment(exp.path)), method)
    assert np.abs(fit.choi - truth).max() < IDEAL_TOL


@pytest.mark.parametrize("method", METHODS)
def test_undetermined_state_data_warn_and_still_fit(make_state_experiment, method):
    exp, _ = make_state_experiment("phi+", shots=500, meas=("H", "V", "D", "A"))
    with pytest.warns(GatescopeWarning, match="not measured"):
        build_model(exp).warn_if_undetermined()
    fit = estimate(build_model(exp), method)
    if method != "lin":
        assert is_density_matrix(fit.choi, 1e-12)
