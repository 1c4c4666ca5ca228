"""Bootstrap error bars (gatescope.bootstrap): resampling law, reproducibility across
worker counts, failures, and what reaches the result.
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import gatescope as gs
import numpy as np
import pytest
import scipy.stats
from gatescope import bootstrap as bs
from gatescope import parallel
from gatescope import intervals as iv
from gatescope.channels import choi_to_chi, choi_to_ptm
from gatescope.errors import GatescopeWarning, InputError
from gatescope.estimators import estimate
from gatescope.merit import compute_figures, process_fidelity
from gatescope.model import MeasurementModel


def _point(exp, method="pls", **options):
    model = MeasurementModel(exp)
    return model, estimate(model, method, **options)


FULL_RANK = "CZ+depolarizing:0.2"


def test_resampled_counts_follow_the_poisson_law():
    means = np.array([0.3, 4.0, 25.0, 400.0])
    n = 8_000
    draws = np.array([bs.resample_counts(means, ss) for ss in np.random.SeedSequence(7).spawn(n)])
    for k, mu in enumerate(means):
        # reference moments of the Poisson law: scipy.stats.poisson
        ref_mean, ref_var, _, ref_kurt = scipy.stats.poisson(mu).stats(moments="mvsk")
        ref_mean, ref_var, ref_kurt = float(ref_mean), float(ref_var), float(ref_kurt)
        sample_mean = draws[:, k].mean()
        sample_var = draws[:, k].var(ddof=1)
        # sampling errors: sd of a mean σ/√n, of a variance √((μ4 − σ⁴)/n) (common practice)
        mu4 = (ref_kurt + 3.0) * ref_var**2
        assert abs(sample_mean - ref_mean) < 5 * math.sqrt(ref_var / n)
        assert abs(sample_var - ref_var) < 5 * math.sqrt((mu4 - ref_var**2) / n)
    # the probabilities of the small mean, against scipy.stats.poisson.pmf
    values, freq = np.unique(draws[:, 0], return_counts=True)
    pmf = scipy.stats.poisson(0.3).pmf(values)
    assert np.all(np.abs(freq / n - pmf) < 5 * np.sqrt(pmf * (1 - pmf) / n) + 1e-12)


def test_resample_means_of_each_kind(make_experiment):
    exp, _ = make_experiment("CZ+zz:0.2", shots=200, seed=3)
    model, point = _point(exp)
    param = bs.resample_means(model, point, "parametric")
    assert np.allclose(param, model.expected_counts(point.choi, point.intensities))
    nonpar = bs.resample_means(model, point, "nonparametric")
    assert np.array_equal(nonpar, model.counts)
    zero = model.counts == 0
    assert zero.any()                      # a near-unitary gate leaves empty rows
    for ss in np.random.SeedSequence(1).spawn(5):
        assert np.all(bs.resample_counts(nonpar, ss)[zero] == 0)
    with pytest.raises(InputError, match="bootstrap_kind"):
        bs.resample_means(model, point, "jackknife")


def test_same_seed_same_figures_for_one_and_two_workers(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=4)
    model, point = _point(exp)
    kw = dict(samples=24, kind="parametric", seed=11, method="pls", options={})
    b1, s1 = bs.run_bootstrap(model, point, exp.target, workers=1, **kw)
    b2, s2 = bs.run_bootstrap(model, point, exp.target, workers=2, **kw)
    assert s1 == s2 == 11
    assert b2.workers == 2 and b1.workers == 1
    assert np.array_equal(b1.figures, b2.figures)
    assert np.array_equal(b1.converged, b2.converged)
    for name in ("choi_std", "chi_std", "ptm_std"):
        assert np.array_equal(getattr(b1, name), getattr(b2, name))
    assert np.all(np.isfinite(b1.figures))
    assert np.unique(b1.figures[:, 0]).size == 24        # the resamples do differ
    b3, _ = bs.run_bootstrap(model, point, exp.target, workers=1, **{**kw, "seed": 12})
    assert not np.array_equal(b1.figures, b3.figures)


def test_forkserver_workers_give_the_same_figures(make_experiment, monkeypatch):
    # fork is used only when `parallel.fork_is_safe`; the fallback must agree bit for bit
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=4)
    model, point = _point(exp)
    kw = dict(samples=8, seed=11, method="pls")
    b1, _ = bs.run_bootstrap(model, point, exp.target, workers=1, **kw)
    monkeypatch.setattr(parallel, "fork_is_safe", lambda: False)
    b2, _ = bs.run_bootstrap(model, point, exp.target, workers=2, **kw)
    assert np.array_equal(b1.figures, b2.figures)
    assert np.array_equal(b1.choi_std, b2.choi_std)


def test_drawn_seed_is_returned_and_reproduces(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=5)
    model, point = _point(exp)
    b1, seed = bs.run_bootstrap(model, point, exp.target, samples=6, seed=None, workers=1)
    assert isinstance(seed, int) and 0 <= seed < 2**63 and b1.seed == seed
    b2, _ = bs.run_bootstrap(model, point, exp.target, samples=6, seed=seed, workers=1)
    assert np.array_equal(b1.figures, b2.figures)
    res = gs.fit(exp, "pls", bootstrap=6, workers=1)
    assert res.provenance["seed"] == res.bootstrap.seed


def test_standard_deviations_match_a_direct_computation(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=6)
    model, point = _point(exp)
    boot, _ = bs.run_bootstrap(model, point, exp.target, samples=7, seed=3, workers=1)
    means = bs.resample_means(model, point, "parametric")
    chois = np.array([estimate(model, "pls", counts=bs.resample_counts(means, ss)).choi
                      for ss in np.random.SeedSequence(3).spawn(7)])
    chis = np.array([choi_to_chi(c) for c in chois])
    ptms = np.array([choi_to_ptm(c) for c in chois])
    for got, arr in ((boot.choi_std, chois), (boot.chi_std, chis)):
        want = arr.real.std(axis=0, ddof=1) + 1j * arr.imag.std(axis=0, ddof=1)
        assert np.allclose(got, want, rtol=1e-9, atol=1e-14)
    assert boot.ptm_std.dtype == np.float64
    assert np.allclose(boot.ptm_std, ptms.std(axis=0, ddof=1), rtol=1e-9, atol=1e-14)
    k = boot.names.index("process_fidelity")
    assert np.allclose(boot.figures[:, k], [process_fidelity(c, exp.target) for c in chois])


def test_a_bias_larger_than_the_spread_is_warned(make_experiment):
    # pls near a pure process: the projection pulls the fidelity down by several spreads
    exp, _ = make_experiment("CZ+zz:0.2", shots=1000, seed=23)
    model, point = _point(exp)
    with pytest.warns(GatescopeWarning, match="bias larger than the spread for process_fidelity"):
        bs.run_bootstrap(model, point, exp.target, samples=30, seed=1, workers=1)
    exp, _ = make_experiment(FULL_RANK, shots=10000, seed=23)
    model, point = _point(exp)
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        boot, _ = bs.run_bootstrap(model, point, exp.target, samples=30, seed=1, workers=1)
    # at full rank the fidelity is not flagged (its smallest eigenvalue may be: pls moves it)
    assert not any("process_fidelity" in str(w.message) for w in seen)
    flagged = bs.biased_figures(boot.names, boot.figures,
                                [compute_figures(point.choi, exp.target)[n] for n in boot.names])
    assert "process_fidelity" not in [name for name, _, _ in flagged]


def test_mle_with_the_normal_interval_is_not_warned_of_the_resampled_bias(make_experiment):
    # near a pure process the mle refits sit below the estimate (the resampled world is
    # purer than the real one); the normal interval ignores that bias, the others use it
    exp, _ = make_experiment("CZ+zz:0.2", shots=1000, seed=23)
    model = MeasurementModel(exp)
    point = estimate(model, "mle")
    kwargs = dict(samples=30, seed=1, workers=1)
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        boot, _ = bs.run_bootstrap(model, point, exp.target, interval="normal", **kwargs)
    assert not any("bias larger" in str(w.message) for w in seen)
    flagged = bs.biased_figures(boot.names, boot.figures,
                                [compute_figures(point.choi, exp.target)[n] for n in boot.names])
    assert flagged                                   # the premise: some figure is biased
    with pytest.warns(GatescopeWarning, match=f"bias larger than the spread for {flagged[0][0]}"):
        bs.run_bootstrap(model, point, exp.target, interval="percentile", **kwargs)


def test_non_converged_refits_are_counted_kept_and_warned(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=9)
    with pytest.warns(GatescopeWarning, match="10 of 10 bootstrap refits .* did not converge"):
        res = gs.fit(exp, "mle", bootstrap=10, seed=1, workers=2, maxiter=1,
                     interval="normal")
    boot = res.bootstrap
    assert boot.failures == 10 and boot.errors == 0
    assert not boot.converged.any()
    assert np.all(np.isfinite(boot.figures))      # kept: every iterate is CPTP
    assert res.figures["process_fidelity"].ci is not None


def test_failure_warning_threshold_is_one_percent():
    assert bs.failure_message(2, 0, 200) is None
    assert "3 of 200" in bs.failure_message(3, 0, 200)
    assert "raised" in bs.failure_message(3, 1, 200)


def test_refits_that_raise_are_counted_and_left_out(make_experiment, monkeypatch):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=10)
    model, point = _point(exp)
    calls = {"n": 0}
    real_estimate = bs.estimate

    def flaky(*args, **kw):
        calls["n"] += 1
        if calls["n"] % 3 == 0:
            raise np.linalg.LinAlgError("Eigenvalues did not converge")
        return real_estimate(*args, **kw)

    monkeypatch.setattr(bs, "estimate", flaky)
    with pytest.warns(GatescopeWarning, match="3 of them raised"):
        boot, _ = bs.run_bootstrap(model, point, exp.target, samples=9, seed=1, workers=1)
    assert boot.errors == 3 and boot.failures == 3
    bad = np.isnan(boot.figures).all(axis=1)
    assert bad.sum() == 3 and not boot.converged[bad].any()
    k = boot.names.index("process_fidelity")
    good = boot.figures[~bad, k]
    assert iv.interval(boot.figures[:, k], 0.8, 0.95, "percentile") == \
        iv.interval(good, 0.8, 0.95, "percentile")
    assert np.all(np.isfinite(boot.choi_std))


@pytest.mark.parametrize("kw, key", [
    ({"samples": -1}, "bootstrap"), ({"samples": 1}, "bootstrap"), ({"samples": 2.5}, "bootstrap"),
    ({"kind": "bayesian"}, "bootstrap_kind"), ({"interval": "bca"}, "interval"),
    ({"workers": 0}, "workers"), ({"seed": -4}, "seed"), ({"seed": "one"}, "seed"),
    ({"method": "svd"}, "method"), ({"options": {"counts": None}}, "counts"),
])
def test_bad_arguments_are_input_errors(make_experiment, kw, key):
    exp, _ = make_experiment(FULL_RANK, shots=300, seed=11)
    model, point = _point(exp)
    args = {"samples": 4, "workers": 1, **kw}
    with pytest.raises(InputError, match=f"'{key}'"):
        bs.run_bootstrap(model, point, exp.target, **args)


@pytest.mark.parametrize("level", [0.0, 1.0, 1.5, -0.2, "0.95", True])
def test_bad_ci_level_is_an_input_error(level):
    with pytest.raises(InputError, match="between 0 and 1"):
        iv.interval(np.arange(10.0), 4.5, level)


def test_fit_with_negative_bootstrap_is_an_input_error(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=300, seed=12)
    with pytest.raises(InputError, match="'bootstrap'"):
        gs.fit(exp, "pls", bootstrap=-5)


def test_bootstrap_round_trips_through_the_result_file(make_experiment, tmp_path):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=13)
    res = gs.fit(exp, "pls", bootstrap=12, bootstrap_kind="nonparametric", seed=5, workers=1)
    res.bootstrap.figures[3] = np.nan          # a refit that raised is stored as NaN
    path = res.save(tmp_path / "r.h5")
    back = gs.load_result(path)
    for f in dataclasses.fields(res.bootstrap):
        a, b = getattr(res.bootstrap, f.name), getattr(back.bootstrap, f.name)
        if isinstance(a, np.ndarray):
            assert a.dtype == b.dtype and np.array_equal(a, b, equal_nan=True), f.name
        else:
            assert a == b, f.name
    assert back.bootstrap.kind == "nonparametric" and back.bootstrap.samples == 12
    for name, fig in res.figures.items():
        assert back.figures[name].ci == fig.ci and back.figures[name].level == fig.level


def test_interval_choice_reaches_the_result(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=200)
    res = gs.fit(exp, "pls", bootstrap=20, seed=3, workers=1, interval="percentile")
    assert res.bootstrap.interval == "percentile"
    lo, hi = res.figures["process_fidelity"].ci
    values = res.bootstrap.figures[:, res.bootstrap.names.index("process_fidelity")]
    # percentile interval: the 2.5% and 97.5% quantiles of the resampled values (Efron &
    # Tibshirani 1993, §13.3), clipped to [0, 1]
    assert lo == pytest.approx(max(0.0, np.quantile(values, 0.025)), abs=1e-12)
    assert hi == pytest.approx(min(1.0, np.quantile(values, 0.975)), abs=1e-12)


def test_a_bug_in_a_refit_is_not_swallowed(make_experiment, monkeypatch):
    # only numerical failures the estimator signals (NumericalError, LinAlgError) are counted;
    # a ValueError (say, of a shape bug) propagates
    exp, _ = make_experiment(FULL_RANK, shots=300, seed=12)
    model, point = _point(exp)

    def broken(*args, **kw):
        raise ValueError("operands could not be broadcast together")

    monkeypatch.setattr(bs, "estimate", broken)
    with pytest.raises(ValueError, match="broadcast"):
        bs.run_bootstrap(model, point, exp.target, samples=4, seed=1, workers=1)


def test_a_numerical_error_is_counted(make_experiment, monkeypatch):
    from gatescope.errors import NumericalError

    exp, _ = make_experiment(FULL_RANK, shots=300, seed=12)
    model, point = _point(exp)
    real = bs.estimate
    calls = {"n": 0}

    def sometimes(*args, **kw):
        calls["n"] += 1
        if calls["n"] == 2:
            raise NumericalError("no starting point with a finite likelihood")
        return real(*args, **kw)

    monkeypatch.setattr(bs, "estimate", sometimes)
    with pytest.warns(GatescopeWarning, match="1 of them raised"):
        boot, _ = bs.run_bootstrap(model, point, exp.target, samples=4, seed=1, workers=1)
    assert boot.errors == 1 and np.isnan(boot.figures[1]).all()


def test_state_bootstrap_same_figures_for_one_and_two_workers(make_state_experiment):
    from gatescope.model import build_model

    exp, _ = make_state_experiment("phi++depolarizing:0.1", shots=500, seed=6)
    model = build_model(exp)
    point = estimate(model, "mle")
    one, _ = bs.run_bootstrap(model, point, exp.target_state, samples=8, seed=3, workers=1)
    two, _ = bs.run_bootstrap(model, point, exp.target_state, samples=8, seed=3, workers=2)
    np.testing.assert_array_equal(one.figures, two.figures)
    np.testing.assert_array_equal(one.rho_std, two.rho_std)
    assert one.choi_std is None and one.chi_std is None and one.ptm_std is None
    assert "state_fidelity" in one.names and "chsh_max" in one.names
    # the element-wise spread of ρ against a direct computation from refits of the same
    # resamples (numpy's sample standard deviation)
    seeds = np.random.SeedSequence(3).spawn(8)
    means = bs.resample_means(model, point, "parametric")
    refits = np.array([estimate(model, "mle", counts=bs.resample_counts(means, s),
                                start=point.choi).choi for s in seeds])
    np.testing.assert_allclose(one.rho_std.real, refits.real.std(axis=0, ddof=1), atol=1e-12)
    np.testing.assert_allclose(one.rho_std.imag, refits.imag.std(axis=0, ddof=1), atol=1e-12)
