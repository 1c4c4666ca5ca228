"""Bootstrap error bars (gatescope.bootstrap): resampling law, reproducibility
across worker counts, intervals, failures, the result file and the commands."""

from __future__ import annotations

import dataclasses
import io
import math
import warnings

import numpy as np
import pytest
import scipy.stats

import gatescope as gs
from gatescope import bootstrap as bs
from gatescope.channels import choi_to_chi, choi_to_ptm
from gatescope.cli import main
from gatescope.errors import GatescopeWarning, InputError
from gatescope.estimators import estimate
from gatescope.figures import compute_figures, process_fidelity
from gatescope.model import MeasurementModel

FULL_RANK = "CZ+depolarizing:0.2"


def _point(exp, method="pls", **options):
    model = MeasurementModel(exp)
    return model, estimate(model, method, **options)


# --------------------------------------------------------------------------
# Resampling
# --------------------------------------------------------------------------

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


# --------------------------------------------------------------------------
# Reproducibility and parallel runs
# --------------------------------------------------------------------------

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
    # fork is used only when `_fork_is_safe`; the fallback must agree bit for bit
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=4)
    model, point = _point(exp)
    kw = dict(samples=8, seed=11, method="pls")
    b1, _ = bs.run_bootstrap(model, point, exp.target, workers=1, **kw)
    monkeypatch.setattr(bs, "_fork_is_safe", lambda: False)
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


def test_workers_run_single_threaded():
    from concurrent.futures import ProcessPoolExecutor

    state = dict(model=None, means=None, start=None, target=None, method="pls", options={},
                 names=())
    with bs._single_threaded_children():
        pool = ProcessPoolExecutor(1, mp_context=bs._pool_context(), initializer=bs._init_worker,
                                   initargs=(state,))
        fut = pool.submit(bs._worker_threads)
    with pool:
        seen = fut.result()
    assert seen["numba"] == 1
    assert all(n == 1 for n in seen["blas"])


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


# --------------------------------------------------------------------------
# Intervals
# --------------------------------------------------------------------------

def test_interval_constructions_follow_their_definitions():
    rng = np.random.default_rng(0)
    v = rng.normal(0.5, 0.01, size=401)
    lo, hi = np.quantile(v, [0.025, 0.975])
    assert bs.interval(v, 0.51, 0.95, "percentile") == pytest.approx((lo, hi), abs=0)
    assert bs.interval(v, 0.51, 0.95, "basic") == pytest.approx((1.02 - hi, 1.02 - lo), abs=1e-15)
    # with the point at the median z0 = 0 and BC is the percentile interval
    assert bs.interval(v, float(np.median(v)), 0.95, "bc") == pytest.approx((lo, hi), abs=1e-15)
    z = scipy.stats.norm.ppf(0.975)        # reference quantile: scipy.stats.norm
    sd = v.std(ddof=1)
    assert bs.interval(v, 0.51, 0.95, "normal") == pytest.approx((0.51 - z * sd, 0.51 + z * sd))
    # NaN (refits that raised) are left out
    assert bs.interval(np.append(v, np.nan), 0.51, 0.95, "percentile") == pytest.approx((lo, hi))


def test_bias_corrected_interval_recentres_a_shifted_distribution():
    # If θ* ~ N(θ̂ − b, s²), BC moves the quantiles by 2·z0 with z0 = b/s and gives
    # θ̂ + b ± z·s, as the basic interval does (Efron & Tibshirani 1993, §14.3).
    rng = np.random.default_rng(1)
    point, b, s = 0.98, 0.0015, 0.003
    v = rng.normal(point - b, s, size=200_000)
    z = scipy.stats.norm.ppf(0.975)        # reference quantile: scipy.stats.norm
    want = (point + b - z * s, point + b + z * s)
    assert bs.interval(v, point, 0.95, "bc") == pytest.approx(want, abs=0.06 * s)
    assert bs.interval(v, point, 0.95, "basic") == pytest.approx(want, abs=0.02 * s)
    pct = bs.interval(v, point, 0.95, "percentile")
    assert pct == pytest.approx((point - b - z * s, point - b + z * s), abs=0.02 * s)


def test_interval_contains_truth_and_shrinks_as_one_over_root_n(make_experiment):
    widths = {m: [] for m in bs.INTERVALS}
    for shots in (1000.0, 10000.0):
        exp, true_choi = make_experiment(FULL_RANK, shots=shots, seed=21)
        res = gs.fit(exp, "pls", bootstrap=100, seed=8, workers=1)
        boot = res.bootstrap
        k = boot.names.index("process_fidelity")
        truth = process_fidelity(true_choi, exp.target)
        for m in bs.INTERVALS:
            lo, hi = bs.interval(boot.figures[:, k], res.figures["process_fidelity"].value,
                                 0.95, m)
            assert lo <= truth <= hi, (m, shots)
            widths[m].append(hi - lo)
    # Poisson scaling (common practice): ten times the counts, 1/√10 ≈ 0.316 the width
    # (bc is left out: its width also follows z0, which is noisy at B = 100)
    for m in ("normal", "percentile", "basic"):
        wide, narrow = widths[m]
        assert 0.22 < narrow / wide < 0.42, m


def test_default_interval_is_attached_to_every_figure(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=22)
    res = gs.fit(exp, "pls", bootstrap=40, seed=2, ci_level=0.9, workers=1)
    assert res.bootstrap.interval == bs.DEFAULT_INTERVAL
    assert set(res.bootstrap.names) <= set(res.figures)
    assert "process_fidelity" in res.bootstrap.names
    for k, name in enumerate(res.bootstrap.names):
        fig = res.figures[name]
        assert fig.level == 0.9
        assert fig.ci == bs.interval(res.bootstrap.figures[:, k], fig.value, 0.9,
                                     bs.DEFAULT_INTERVAL, bs.parameter_range(name, 4))
        assert fig.ci[0] <= fig.ci[1]


def test_intervals_stay_in_the_range_of_the_true_figure():
    # a basic interval reflected about an estimate near 1 would reach past 1
    v = np.array([0.9990, 0.9992, 0.9994, 0.9996, 0.9998])
    lo, hi = bs.interval(v, 0.9996, 0.95, "basic")
    assert hi > 1.0
    clipped = bs.interval(v, 0.9996, 0.95, "basic", bs.parameter_range("process_fidelity", 4))
    assert clipped == (lo, 1.0)
    assert bs.parameter_range("purity", 4) == (1 / 16, 1.0)
    assert bs.parameter_range("min_eigenvalue", 4) == (0.0, 0.25)
    assert bs.parameter_range("no_such_figure", 4) is None


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


# --------------------------------------------------------------------------
# Failures
# --------------------------------------------------------------------------

def test_non_converged_refits_are_counted_kept_and_warned(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=9)
    with pytest.warns(GatescopeWarning, match="10 of 10 bootstrap refits .* did not converge"):
        res = gs.fit(exp, "mle", bootstrap=10, seed=1, workers=2, maxiter=1)
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
    assert bs.interval(boot.figures[:, k], 0.8, 0.95, "percentile") == \
        bs.interval(good, 0.8, 0.95, "percentile")
    assert np.all(np.isfinite(boot.choi_std))


# --------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------

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
        bs.interval(np.arange(10.0), 4.5, level)


def test_fit_with_negative_bootstrap_is_an_input_error(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=300, seed=12)
    with pytest.raises(InputError, match="'bootstrap'"):
        gs.fit(exp, "pls", bootstrap=-5)


# --------------------------------------------------------------------------
# Result file, progress bar, commands
# --------------------------------------------------------------------------

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


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bar_only_on_a_terminal(make_experiment, monkeypatch):
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=14)
    model, point = _point(exp)
    fake = _Terminal()
    monkeypatch.setattr("sys.stderr", fake)
    bs.run_bootstrap(model, point, exp.target, samples=5, seed=1, workers=1, progress=True)
    assert "bootstrap" in fake.getvalue() and "5/5" in fake.getvalue()
    quiet = _Terminal()
    monkeypatch.setattr("sys.stderr", quiet)
    bs.run_bootstrap(model, point, exp.target, samples=5, seed=1, workers=1, progress=False)
    assert quiet.getvalue() == ""
    pipe = io.StringIO()                        # not a terminal: silent even with progress
    monkeypatch.setattr("sys.stderr", pipe)
    bs.run_bootstrap(model, point, exp.target, samples=5, seed=1, workers=1, progress=True)
    assert pipe.getvalue() == ""


def test_cli_fit_writes_intervals_and_show_displays_them(make_experiment, tmp_path, capsys):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=15)
    out = tmp_path / "result.h5"
    assert main(["fit", str(exp.path), "--bootstrap", "20", "--seed", "1", "--workers", "1",
                 "-o", str(out), "--quiet"]) == 0
    res = gs.load_result(out)
    assert res.bootstrap.samples == 20 and res.bootstrap.seed == 1
    assert res.provenance["seed"] == 1
    for name in res.bootstrap.names:
        assert res.figures[name].ci is not None and res.figures[name].level == 0.95
    capsys.readouterr()
    assert main(["show", str(out)]) == 0
    text = capsys.readouterr().out
    fid = res.figures["process_fidelity"]
    line = next(ln for ln in text.splitlines() if ln.strip().startswith("process fidelity"))
    assert f"{fid.ci[0]:.5f}" in line and f"{fid.ci[1]:.5f}" in line and "95%" in line
    assert f"+{fid.ci[1] - fid.value:.5f}" in line and f"−{fid.value - fid.ci[0]:.5f}" in line
    assert "20 parametric resamples" in text


def test_bad_bootstrap_options_fail_before_the_fit(make_experiment, monkeypatch):
    # a bad confidence level is reported at once, naming the option, before any fitting
    import gatescope.api as api
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=200)
    called = []
    monkeypatch.setattr(api, "estimate", lambda *a, **k: called.append(1))
    with pytest.raises(gs.InputError, match="ci_level"):
        gs.fit(exp, "pls", bootstrap=10, ci_level=1.5)
    with pytest.raises(gs.InputError, match="interval"):
        gs.fit(exp, "pls", bootstrap=10, interval="magic")
    assert not called


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


@pytest.mark.parametrize("samples, workers", [(200, 2), (7, 3), (1, 4), (1000, 8)])
def test_chunks_cover_every_resample_and_shrink_towards_the_end(samples, workers):
    sizes = bs.chunk_sizes(samples, workers)
    assert sum(sizes) == samples and min(sizes) >= 1
    assert max(sizes) <= -(-samples // (workers * bs.CHUNKS_PER_WORKER))
    assert sizes == sorted(sizes, reverse=True)
    assert sizes[-1] == 1
