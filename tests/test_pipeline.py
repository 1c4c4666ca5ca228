"""The main job end to end (gatescope.pipeline.fit): every figure and its details, options
checked before any computation, physical estimates that recover the true process.
"""

from __future__ import annotations


import gatescope as gs
import numpy as np
import pytest
from gatescope import merit as fig
from gatescope.conventions import GATES
from support import simulated_experiment


def tr_out(J, d):
    return np.einsum("iaja->ij", J.reshape(d, d, d, d))


def _fidelities(tmp_path, spec, target, *, shots, seeds, n_qubits):
    out = []
    for seed in seeds:
        exp, true_choi = simulated_experiment(tmp_path / f"s{seed}", spec, shots=shots, seed=seed,
                                              n_qubits=n_qubits)
        out.append(gs.fit(exp, "mle").figures["process_fidelity"].value)
    v = target.T.reshape(-1)
    d = target.shape[0]
    truth = np.vdot(v, true_choi @ v).real / d**2
    return np.array(out), truth


def test_fit_fills_every_figure_and_its_details(cz_result):
    res, _, true_choi, diamond = cz_result
    names = ["unitarity", "nearest_unitary_fidelity", "process_fidelity_local_phases",
             "truth_table_fidelity", "concurrence"] + (["diamond_distance"] if diamond else [])
    for name in names:
        assert np.isfinite(res.figures[name].value), name
    det = res.figure_details
    assert det["nearest_unitary"].shape == (4, 4) and det["nearest_unitary"].dtype == complex
    assert det["local_phases_before"].shape == (2,) and det["local_phases_after"].shape == (2,)
    assert det["concurrence_input"] == "D D"
    # the estimate's figures are within 5σ of the true channel's, σ the bootstrap spread
    # of each figure at this design and 2000 counts per basis (measured with 50 resamples:
    # 0.0012, 0.0006, 0.0006, 0.0008, 0.005)
    truth = fig.compute_figures(true_choi, GATES["CZ"])
    five_sigma = {"unitarity": 0.006, "nearest_unitary_fidelity": 0.003,
                  "process_fidelity_local_phases": 0.003, "truth_table_fidelity": 0.004,
                  "concurrence": 0.025}
    for name, tol in five_sigma.items():
        assert res.figures[name].value == pytest.approx(truth[name], abs=tol), name
    # the ZZ error is not a local phase: the local-phase fidelity gains little over the
    # plain one, the nearest unitary (which holds the ZZ phase) gains more
    assert res.figures["process_fidelity_local_phases"].value < \
        res.figures["nearest_unitary_fidelity"].value


@pytest.mark.parametrize("method", ["mle", "pls"])
def test_fit_of_simulated_cz_is_cptp(cz_fit, method):
    exp, res, path = cz_fit
    if method != "mle":
        res = gs.fit(exp, method)
    matrices = [res.choi] + ([gs.load_result(path).choi] if method == "mle" else [])
    for J in matrices:
        assert np.abs(J - J.conj().T).max() <= 1e-9
        assert np.linalg.eigvalsh(J)[0] >= -1e-9
        assert np.abs(tr_out(J, 4) - np.eye(4)).max() <= 1e-9
    # a pure CZ measured with 1000 counts per basis: the estimate is close to it
    assert res.figures["process_fidelity"].value > 0.97


@pytest.mark.parametrize("spec,target,shots,n_seeds,n_qubits", [
    ("H+amplitude-damping:0.1+dephasing:0.05", GATES["H"], 500, 24, 1),
    ("CZ+depolarizing:0.1+zz:0.1", GATES["CZ"], 1000, 8, 2),
])
def test_fit_recovers_the_true_process_fidelity(tmp_path, spec, target, shots, n_seeds, n_qubits):
    # The spread σ of the estimate is measured from repeated simulations of the same
    # channel; every estimate must lie within 4σ of the truth, and their mean within
    # 4σ/√N (a bias far beyond the statistical error would fail). Seeds are fixed, so
    # the test is deterministic.
    values, truth = _fidelities(tmp_path, spec, target, shots=shots, seeds=range(n_seeds),
                                n_qubits=n_qubits)
    sigma = values.std(ddof=1)
    assert 0 < sigma < 0.05
    assert np.all(np.abs(values - truth) <= 4 * sigma), (values - truth, sigma)
    assert abs(values.mean() - truth) <= 4 * sigma / np.sqrt(n_seeds), (values.mean() - truth, sigma)


def test_bad_bootstrap_options_fail_before_the_fit(make_experiment, monkeypatch):
    # a bad confidence level is reported at once, naming the option, before any fitting
    import gatescope.pipeline as pipeline
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=200)
    called = []
    monkeypatch.setattr(pipeline, "estimate", lambda *a, **k: called.append(1))
    with pytest.raises(gs.InputError, match="ci_level"):
        gs.fit(exp, "pls", bootstrap=10, ci_level=1.5)
    with pytest.raises(gs.InputError, match="interval"):
        gs.fit(exp, "pls", bootstrap=10, interval="magic")
    assert not called


def test_unknown_method_or_estimator_option_is_an_input_error(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=200)
    with pytest.raises(gs.InputError, match="unknown method 'svd'"):
        gs.fit(exp, "svd")
    with pytest.raises(gs.InputError, match="no option 'tolerance'"):
        gs.fit(exp, "mle", tolerance=1e-6)
    with pytest.raises(gs.InputError, match="no option 'opt_tol'"):
        gs.fit(exp, "lin", opt_tol=1e-6)


# -- the first run: a notice while the kernels compile; the fit's seconds exclude it ------

def test_the_compile_notice_comes_first_and_the_estimator_runs_after(make_experiment, monkeypatch,
                                                                    tmp_path):
    import io

    from gatescope import kernels, pipeline

    exp, _ = make_experiment("H", shots=100, n_qubits=1)
    events = []
    stream = io.StringIO()
    marker = tmp_path / "cache" / "warm"
    monkeypatch.setattr(pipeline, "warm_marker", lambda model, method: marker)   # a first run
    monkeypatch.setattr(pipeline, "NOTICE_AFTER_SECONDS", 0.0)
    counter = iter(range(0, 100, 7))                      # "compiled" 7 signatures meanwhile
    monkeypatch.setattr(kernels, "compiled_in_this_process", lambda: next(counter))
    real_compile, real_estimate = pipeline.compile_kernels, pipeline.estimate

    def compile_(model, method="mle", notify=True, stream_=None):
        events.append("compile")
        return real_compile(model, method, notify=notify, stream=stream)

    def estimate_(*a, **k):
        events.append("warm-up" if k.get("maxiter") == pipeline.WARM_UP_ITERATIONS else "estimate")
        return real_estimate(*a, **k)

    monkeypatch.setattr(pipeline, "compile_kernels", compile_)
    monkeypatch.setattr(pipeline, "estimate", estimate_)
    res = gs.fit(exp, progress=True)
    assert stream.getvalue() == pipeline.COMPILE_NOTICE + "\n"
    # without a finished warm-up a few iterations compile the estimator's kernels first
    assert events == ["compile", "warm-up", "estimate"]
    assert marker.exists()
    assert res.provenance["compile_seconds"] >= 0
    assert res.seconds < res.provenance["wall_seconds"]


def test_no_notice_and_no_warm_up_after_a_first_run(make_experiment, monkeypatch, tmp_path):
    import io

    from gatescope import pipeline
    from gatescope.model import build_model

    exp, _ = make_experiment("H", shots=100, n_qubits=1)
    marker = tmp_path / "warm"
    marker.touch()
    monkeypatch.setattr(pipeline, "warm_marker", lambda model, method: marker)
    monkeypatch.setattr(pipeline, "NOTICE_AFTER_SECONDS", 0.0)
    monkeypatch.setattr(pipeline, "estimate", lambda *a, **k: pytest.fail("warm-up ran"))
    stream = io.StringIO()
    assert pipeline.compile_kernels(build_model(exp), stream=stream) is None
    assert stream.getvalue() == ""


@pytest.mark.slow
def test_a_first_run_says_it_compiles_and_keeps_compilation_out_of_seconds(tmp_path):
    # a reproducer: the first fit after installing spent ~20 s compiling without a word
    # (nothing at all with stderr not on a terminal) and stored that time as `seconds`
    import os
    import subprocess
    import sys

    exp, _ = simulated_experiment(tmp_path / "data", "CZ+depolarizing:0.05", shots=500)
    out = tmp_path / "r.h5"
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "empty-cache"))
    r = subprocess.run([sys.executable, "-m", "gatescope", "fit", str(exp.path), "-o", str(out)],
                       capture_output=True, text=True, env=env)
    assert r.returncode == 0, r.stderr
    assert r.stderr.splitlines()[0] == "compiling numerical kernels, first run only, about 20 s"
    res = gs.load_result(out)
    compiled = res.provenance["compile_seconds"]
    assert compiled > 10 * res.seconds                  # compiling takes seconds, this fit ~0.1 s
    r = subprocess.run([sys.executable, "-m", "gatescope", "fit", str(exp.path), "-o", str(out),
                        "--force"], capture_output=True, text=True, env=env)
    assert "compiling" not in r.stderr
    assert "compile_seconds" not in gs.load_result(out).provenance
def test_fit_of_a_state_experiment_fills_every_state_figure(make_state_experiment):
    # a two-qubit pair source: every state figure, with an interval, from one fit
    import warnings

    from gatescope.merit import state_figure_names

    exp, rho = make_state_experiment("psi-+visibility:0.9+depolarizing:0.05", shots=2000, seed=3)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = gs.fit(exp, "mle", bootstrap=30, seed=2, workers=1, diamond=True)
    assert res.kind == "state" and res.rho.shape == (4, 4) and res.choi is None
    assert list(res.figures) == list(state_figure_names(2, True))
    for name, figure in res.figures.items():
        assert figure.ci is not None and figure.ci[0] <= figure.value <= figure.ci[1], name
    messages = [str(w.message) for w in caught]
    assert any("diamond distance skipped" in m for m in messages)
    # psi− with a visibility has t₂ = t₃ (its X and Y correlations are equal)
    assert any("chsh_max" in m and "biased upward" in m for m in messages)
    # 36 rows − 15 state parameters − 1 intensity
    assert res.diagnostics.dof == 20
    # the fidelity to psi−, (1 + v)/2 · 0.95 + 0.05/4 = 0.915, within 5 of its bootstrap
    # standard errors (each interval half-width is 1.96 of them)
    fid = res.figures["state_fidelity"]
    assert abs(fid.value - 0.915) < 5 * (fid.ci[1] - fid.ci[0]) / (2 * 1.96)


@pytest.mark.parametrize("method", ["lin", "pls", "mle"])
def test_fit_of_a_three_qubit_state(make_state_experiment, method):
    from gatescope.merit import state_figure_names

    exp, rho = make_state_experiment("GHZ+depolarizing:0.1", n_qubits=3, shots=500, seed=5)
    res = gs.fit(exp, method)
    assert list(res.figures) == list(state_figure_names(3, True))
    # GHZ with white noise p: fidelity (1 − p) + p/8 (direct calculation); 500 counts per
    # basis give a standard error near 0.01
    assert res.figures["state_fidelity"].value == pytest.approx(0.9 + 0.1 / 8, abs=0.05)


@pytest.mark.slow
def test_six_qubit_state_through_the_whole_job(make_state_experiment):
    # 46,656 rows. Ideal data (expected counts rounded at 1e8 per analyser basis) give back
    # the true state by least squares (rounding noise only: the estimator battery's bound)
    from gatescope.likelihood import PoissonLikelihood
    from gatescope.model import build_model

    exp, rho = make_state_experiment("GHZ+depolarizing:0.1", n_qubits=6, shots=1e8, exact=True)
    assert exp.n_rows == 6 ** 6
    res = gs.fit(exp, "pls")
    assert np.abs(res.rho - rho).max() < 1e-6
    # GHZ with white noise p: fidelity (1 − p) + p/64 (direct calculation)
    assert res.figures["state_fidelity"].value == pytest.approx(0.9 + 0.1 / 64, abs=1e-6)
    assert [f"negativity_{k}" for k in range(1, 7)] == list(res.figures)[4:]
    # Poisson data at 1000 counts per basis: the maximum-likelihood state is at least as
    # likely as the truth and as the pls estimate (to the rounding of ℓ, 1e-10 relative)
    exp, rho = make_state_experiment("GHZ+depolarizing:0.1", n_qubits=6, shots=1000, seed=3)
    res = gs.fit(exp, "mle")
    lik = PoissonLikelihood(build_model(exp))
    assert res.converged
    for other in (rho, gs.fit(exp, "pls").rho):
        floor = lik.evaluate(other).log_likelihood
        assert res.log_likelihood >= floor - 1e-10 * abs(floor)


# -- profile-likelihood intervals and lower bounds through the whole job ------------------

PROFILED = ("process_fidelity", "average_gate_fidelity", "purity")


def test_profile_intervals_and_lower_bounds_without_a_bootstrap(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.02", n_qubits=1, shots=1000, seed=4)
    res = gs.fit(exp, interval="profile", lower_bound=True)
    for name, f in res.figures.items():
        if name in PROFILED:
            assert f.interval_method == "profile" and f.level == 0.95
            assert f.ci[0] <= f.lower_bound <= f.value <= f.ci[1] <= 1.0
            # F = 0.985 with 1.8e4 counts: many standard errors below 1
            assert f.touches_boundary is False
        else:
            assert f.ci is None and f.lower_bound is None and f.touches_boundary is None


def test_profile_interval_beside_the_bootstrap(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.02", n_qubits=1, shots=1000, seed=4)
    res = gs.fit(exp, bootstrap=10, seed=3, workers=1, interval="profile")
    assert res.bootstrap.interval == "normal"
    for name in res.bootstrap.names:
        method = res.figures[name].interval_method
        assert method == ("profile" if name in PROFILED else "normal"), name
        assert res.figures[name].lower_bound is None


def test_a_perfect_gate_touches_the_boundary(make_experiment):
    # counts equal to the ideal gate's expected counts: the estimate is the target itself
    exp, _ = make_experiment("H", n_qubits=1, shots=1000, exact=True)
    res = gs.fit(exp, interval="profile", lower_bound=True)
    pf = res.figures["process_fidelity"]
    assert pf.touches_boundary and pf.ci[1] == 1.0 and pf.lower_bound < 1.0
    assert res.figures["average_gate_fidelity"].touches_boundary


def test_test_inversion_intervals_and_bounds(make_experiment, monkeypatch):
    import gatescope.profile
    monkeypatch.setattr(gatescope.profile, "CALIBRATION_SAMPLES", 40)     # a quicker test
    exp, _ = make_experiment("H+depolarizing:0.004", n_qubits=1, shots=1000, seed=6)
    res = gs.fit(exp, interval="test-inversion", lower_bound=True, seed=11)
    for name in ("process_fidelity", "average_gate_fidelity"):
        f = res.figures[name]
        assert f.interval_method == "test-inversion" and f.lower_bound_method == "test-inversion"
        assert f.ci[0] <= f.lower_bound <= f.value <= f.ci[1] <= 1.0
    # no test inversion for the purity (its maximiser is not one process): profile likelihood
    assert res.figures["purity"].interval_method == "profile"
    assert res.figures["purity"].lower_bound_method == "profile"
    assert not [w for w in res.warnings if "test inversion" in w]
    # the seed fixes the simulated data sets
    again = gs.fit(exp, interval="test-inversion", lower_bound=True, seed=11)
    assert again.figures["process_fidelity"].ci == res.figures["process_fidelity"].ci
    # the seed drawn when none is given is recorded
    drawn = gs.fit(exp, lower_bound=True)
    assert drawn.provenance["seed"] is not None


def test_a_test_inversion_that_rejects_the_estimate_falls_back_with_one_warning(
        make_experiment, monkeypatch):
    # counts equal to their expectations (no shot noise): the data sit closer to them than
    # any simulated data set, so the test rejects every value up to the estimate itself;
    # the bounds fall back to the profile likelihood, said once for both fidelities
    import gatescope.profile
    monkeypatch.setattr(gatescope.profile, "CALIBRATION_SAMPLES", 40)     # a quicker test
    exp, _ = make_experiment("H", n_qubits=1, shots=1000, exact=True)
    with pytest.warns(gs.GatescopeWarning) as record:
        res = gs.fit(exp, lower_bound=True, seed=2)
    texts = [str(w.message) for w in record if "test inversion" in str(w.message)]
    assert len(texts) == 1
    assert "test inversion of process_fidelity, average_gate_fidelity rejected" in texts[0]
    for name in ("process_fidelity", "average_gate_fidelity"):
        assert res.figures[name].lower_bound_method == "profile"


def test_test_inversion_is_refused_for_a_state(make_state_experiment):
    # measured to cover a state's fidelity less often than the bootstrap near a pure state
    exp, _ = make_state_experiment("phi++depolarizing:0.02", shots=500, seed=3)
    with pytest.raises(gs.InputError, match="fidelities of processes"):
        gs.fit(exp, interval="test-inversion")


def test_test_inversion_is_refused_beyond_two_qubits(make_experiment, monkeypatch):
    import gatescope.pipeline as pipeline
    import dataclasses
    exp, _ = make_experiment("CZ", n_qubits=2, shots=100)
    exp = dataclasses.replace(exp, n_qubits=3)         # only the size is looked at
    called = []
    monkeypatch.setattr(pipeline, "estimate", lambda *a, **k: called.append(1))
    with pytest.raises(gs.InputError, match="up to 2 qubits"):
        gs.fit(exp, interval="test-inversion")
    assert not called


def test_profile_of_a_state(make_state_experiment):
    exp, _ = make_state_experiment("psi-+depolarizing:0.02", shots=500, seed=7)
    res = gs.fit(exp, lower_bound=True)
    for name in ("state_fidelity", "purity"):
        f = res.figures[name]
        assert f.ci is None and f.lower_bound <= f.value and f.touches_boundary is not None
    assert res.figures["concurrence"].lower_bound is None


def test_profile_options_are_checked_before_the_fit(make_experiment, monkeypatch):
    import gatescope.pipeline as pipeline
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=200)
    called = []
    monkeypatch.setattr(pipeline, "estimate", lambda *a, **k: called.append(1))
    # a profile interval is centred on the maximum-likelihood estimate
    with pytest.raises(gs.InputError, match="maximum-likelihood"):
        gs.fit(exp, "pls", interval="profile")
    with pytest.raises(gs.InputError, match="maximum-likelihood"):
        gs.fit(exp, "lin", lower_bound=True)
    with pytest.raises(gs.InputError, match="interval"):
        gs.fit(exp, "mle", interval="likelihood")
    assert not called


def test_the_default_interval():
    from types import SimpleNamespace

    from gatescope.pipeline import default_interval_words, default_inverted, default_profiled

    # profile likelihood or test inversion by default where they covered better near the
    # boundary (benchmarks/README.md, "Coverage near the boundary"): a one-qubit process,
    # test inversion for the fidelities and profile for the purity; a two-qubit process
    # alike; the purity of a two-qubit state; the bootstrap's normal interval otherwise
    one, two = (SimpleNamespace(n_qubits=n, kind="process") for n in (1, 2))
    pair = SimpleNamespace(n_qubits=2, kind="state")
    assert default_profiled(one, "mle", 100) == ("process_fidelity", "average_gate_fidelity",
                                                 "purity")
    assert default_inverted(one, "mle", 100) == ("process_fidelity", "average_gate_fidelity")
    assert default_profiled(one, "mle-pg", 100) == default_profiled(one, "mle", 100)
    assert default_profiled(two, "mle", 100) == default_profiled(one, "mle", 100)
    assert default_profiled(pair, "mle", 100) == ("purity",)
    assert default_inverted(two, "mle", 100) == ("process_fidelity", "average_gate_fidelity")
    for exp, method, boot in ((one, "pls", 100), (one, "mle", 0),
                              (SimpleNamespace(n_qubits=3, kind="process"), "mle", 100),
                              (SimpleNamespace(n_qubits=3, kind="state"), "mle", 100)):
        assert default_profiled(exp, method, boot) == ()
        assert default_inverted(exp, method, boot) == ()
    # the command line's help says the same, from the same tables
    words = default_interval_words()
    for n in (1, 2):
        assert (f"test inversion for the process fidelity and average gate fidelity of a "
                f"{n}-qubit process") in words
    assert "profile likelihood for the purity of a 2-qubit state" in words


def test_an_explicit_bootstrap_interval_keeps_every_figure_on_it(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.02", n_qubits=1, shots=1000, seed=4)
    res = gs.fit(exp, bootstrap=10, seed=3, workers=1, interval="normal")
    assert {res.figures[n].interval_method for n in res.bootstrap.names} == {"normal"}
    assert all(f.touches_boundary is None for f in res.figures.values())
    default = gs.fit(exp, bootstrap=10, seed=3, workers=1)
    assert default.figures["purity"].interval_method == "profile"
