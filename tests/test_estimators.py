"""One battery for every estimator (lin, pls, mle and any later one).

Every estimator registered in `gatescope.estimators.ESTIMATORS` is held to
the same checks: physical output (lin excepted: it is only trace
preserving), ideal data give back the true channel, same input gives the
same numbers, the conventions of CONTRACT §2 hold, and the result carries
the fields every estimator must report.
"""

import numpy as np
import pytest

from gatescope import GatescopeWarning, read_experiment
from gatescope.channels import partial_trace_output
from gatescope.conventions import named_gate
from gatescope.estimators import ESTIMATORS, estimate
from gatescope.figures import process_fidelity
from gatescope.model import MeasurementModel

METHODS = sorted(ESTIMATORS)
PHYSICAL = [m for m in METHODS if m != "lin"]


def is_cptp(choi, tol):
    d = int(round(np.sqrt(choi.shape[0])))
    herm = np.abs(choi - choi.conj().T).max() <= tol
    pos = np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0] >= -tol
    tp = np.abs(partial_trace_output(choi) - np.eye(d)).max() <= tol
    return herm and pos and tp


@pytest.fixture(scope="module")
def noisy_cz(tmp_path_factory):
    from conftest import simulated_experiment
    return simulated_experiment(tmp_path_factory.mktemp("cz"), "CZ+zz:0.1+depolarizing:0.05",
                                shots=800, seed=4)


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


def test_lin_is_trace_preserving_and_reports_its_negativity(make_experiment):
    # few counts on a pure gate: linear inversion goes unphysical (common practice)
    exp, _ = make_experiment("CNOT", shots=50, seed=2)
    fit = estimate(MeasurementModel(exp), "lin")
    np.testing.assert_allclose(partial_trace_output(fit.choi), np.eye(4), atol=1e-12)
    assert fit.info["min_eigenvalue"] < 0
    assert fit.info["min_eigenvalue"] == pytest.approx(np.linalg.eigvalsh(fit.choi)[0], abs=1e-12)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("spec, n_qubits", [("random:4:21", 1), ("random:16:22", 2),
                                            ("CNOT+depolarizing:0.1", 2)])
def test_ideal_data_return_the_true_channel(make_experiment, method, spec, n_qubits):
    # expected counts rounded to integers at 1e8 shots: only rounding noise remains
    exp, truth = make_experiment(spec, n_qubits=n_qubits, shots=1e8, exact=True)
    fit = estimate(MeasurementModel(exp), method)
    assert np.abs(fit.choi - truth).max() < 1e-5


@pytest.mark.parametrize("method", METHODS)
def test_same_input_same_numbers(noisy_cz, method):
    exp, _ = noisy_cz
    a = estimate(MeasurementModel(exp), method)
    b = estimate(MeasurementModel(read_experiment(exp.path)), method)
    assert np.array_equal(a.choi, b.choi)
    assert a.log_likelihood == b.log_likelihood or (np.isnan(a.log_likelihood) and np.isnan(b.log_likelihood))


@pytest.mark.parametrize("method", METHODS)
def test_conventions_cnot_control_is_qubit_one(make_experiment, method):
    # CONTRACT §2: CNOT = |0><0|⊗I + |1><1|⊗X. The CNOT with the other qubit as control has
    # |Tr(U†V)|²/d² = 1/16 against it (direct calculation: only |00> is left alone by both).
    exp, _ = make_experiment("CNOT", shots=1e6, exact=True)
    fit = estimate(MeasurementModel(exp), method)
    assert process_fidelity(fit.choi, named_gate("CNOT")) > 0.999
    reversed_cnot = named_gate("SWAP") @ named_gate("CNOT") @ named_gate("SWAP")
    assert process_fidelity(fit.choi, reversed_cnot) == pytest.approx(1 / 16, abs=2e-3)


def test_mle_is_the_maximum(noisy_cz):
    exp, _ = noisy_cz
    model = MeasurementModel(exp)
    mle = estimate(model, "mle")
    pls = estimate(model, "pls")
    assert mle.log_likelihood >= pls.log_likelihood
    # a small CPTP move away from the optimum does not increase the likelihood
    from gatescope.likelihood import PoissonLikelihood
    lik = PoissonLikelihood(model)
    for t in (1e-3, 1e-2):
        mixed = (1 - t) * mle.choi + t * np.eye(16) / 4
        assert lik.evaluate(mixed).log_likelihood <= mle.log_likelihood + 1e-9


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
    assert np.abs(fit.choi - truth).max() < 1e-5


def test_mle_with_known_background_and_efficiency(make_experiment, rng):
    # counts = λ·s·e·p + b with the background and efficiency columns given: the fit recovers truth
    exp, truth = make_experiment("CZ+depolarizing:0.1", shots=1.0)
    model = MeasurementModel(exp)
    p = model.forward(truth)
    seconds = rng.uniform(0.5, 2.0, exp.n_rows)
    eff = rng.uniform(0.7, 1.0, exp.n_rows)
    bg = rng.uniform(0.0, 5.0, exp.n_rows)
    expected = 1e7 * seconds * eff * p + bg
    lines = ["prep,meas,counts,seconds,efficiency,background"]
    for k in range(exp.n_rows):
        lines.append(f"{exp.prep[k]},{exp.meas[k]},{int(round(expected[k]))},{seconds[k]:.17g},{eff[k]:.17g},{bg[k]:.17g}")
    exp.counts_path.write_text("\n".join(lines) + "\n")
    fit = estimate(MeasurementModel(read_experiment(exp.path)), "mle")
    assert np.abs(fit.choi - truth).max() < 1e-4
    np.testing.assert_allclose(fit.intensities, 1e7, rtol=1e-4)


@pytest.mark.parametrize("method", METHODS)
def test_undetermined_data_warn_and_still_fit(make_experiment, method):
    exp, _ = make_experiment("CZ", shots=500, prep=("H", "V"))
    with pytest.warns(GatescopeWarning, match="undetermined"):
        ident = MeasurementModel(exp).warn_if_undetermined()
    assert ident.prep_rank == 4
    fit = estimate(MeasurementModel(exp), method)
    if method != "lin":
        assert is_cptp(fit.choi, 1e-9)
