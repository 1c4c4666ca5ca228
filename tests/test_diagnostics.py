"""Goodness of fit (gatescope.diagnostics): the log-likelihood and residuals follow the
row model, Pearson χ² and deviance with p-values, outlier rows, and the warning when
the model does not describe the data.

Invented scenario: a two-photon CZ bench where, while the runs with photon 1
prepared in D or A were taken, room light reached the detector behind photon 2's
analyser in its V setting (a door left open), adding 60 background counts to
those rows on top of small accidentals everywhere. Told about the background, the
model fits; not told, it cannot.
"""

from __future__ import annotations


import gatescope as gs
import h5py
import numpy as np
import pytest
from gatescope import GatescopeWarning
from scipy.special import gammaln
from scipy.stats import chi2


def poor_fit_warnings(caught):
    return [w for w in caught if issubclass(w.category, GatescopeWarning)
            and "does not describe the data" in str(w.message)]


def test_log_likelihood_and_diagnostics_follow_the_row_model(full_1q):
    # ν_k = λ_g · seconds · efficiency · Tr[(ρ^T ⊗ E) J] + background (docs/file-formats.md, "Input"), λ_g one
    # per preparation; ℓ = Σ [n log ν − ν − log n!] (docs/file-formats.md), all from the file alone.
    _, _, path = full_1q
    with h5py.File(path, "r") as f:
        c = f["input/counts"]
        n = c["counts"][()].astype(float)
        pi, mi = c["prep_index"][()], c["meas_index"][()]
        exposure = c["seconds"][()] * c["efficiency"][()]
        bg = c["background"][()]
        rho, eff = f["model/prep_states"][()], f["model/meas_effects"][()]
        J = f["estimate/choi"][()]
        lam = f["estimate/intensities"][()]
        ll = float(f["estimate"].attrs["log_likelihood"])
        dg = f["diagnostics"]
        nu_file = dg["expected_counts"][()]
        pearson = dg["pearson_residuals"][()]
        deviance = dg["deviance_residuals"][()]
        chi2, dof = float(dg.attrs["chi2"]), int(dg.attrs["dof"])
    p = np.array([np.trace(np.kron(rho[a].T, eff[b]) @ J).real for a, b in zip(pi, mi)])
    nu = lam[pi] * exposure * p + bg
    np.testing.assert_allclose(nu_file, nu, rtol=1e-10)
    assert ll == pytest.approx(float(np.sum(n * np.log(nu) - nu - gammaln(n + 1))), rel=1e-10)
    np.testing.assert_allclose(pearson, (n - nu) / np.sqrt(nu), rtol=1e-9, atol=1e-12)
    dev = np.sign(n - nu) * np.sqrt(np.maximum(2 * (np.where(n > 0, n * np.log(np.maximum(n, 1) / nu), 0)
                                                    - (n - nu)), 0))
    np.testing.assert_allclose(deviance, dev, rtol=1e-9, atol=1e-9)
    assert chi2 == pytest.approx(float(np.sum(pearson**2)), rel=1e-12)
    # rows − free process parameters (d⁴ − d² = 12) − intensities (6 preparations)
    assert dof == 36 - 12 - 6


def test_told_about_the_background_the_model_fits(fits):
    res, caught = fits["told"]
    dg = res.diagnostics
    assert dg.dof == 1296 - 240 - 36
    assert dg.chi2_p_value > 1e-3 and dg.deviance_p_value > 1e-3
    assert not dg.poor_fit
    assert poor_fit_warnings(caught) == []
    assert len(dg.outlier_rows) <= 2          # pure noise gives one row in ~10⁴ past 4σ
    # the p-values are the upper tails of χ²_dof (scipy.stats.chi2 as the reference)
    assert dg.chi2_p_value == pytest.approx(chi2.sf(dg.chi2, dg.dof), rel=1e-12)
    assert dg.deviance_p_value == pytest.approx(chi2.sf(dg.deviance, dg.dof), rel=1e-12)


def test_without_the_background_the_fit_is_flagged(fits):
    res, caught = fits["untold"]
    dg = res.diagnostics
    assert dg.chi2_p_value < 1e-3 and dg.deviance_p_value < 1e-3
    assert dg.poor_fit
    found = poor_fit_warnings(caught)
    assert len(found) == 1
    message = str(found[0].message)
    for word in ("miscalibrated optics", "drift", "background"):
        assert word in message
    rows = dg.outlier_rows
    assert rows.dtype == np.int64 and rows.size >= 3
    # the flagged rows are leaky ones (the fit spreads part of the leak over the others)
    assert np.mean(fits["leaks"][rows]) >= 0.8
    assert np.all(np.abs(dg.pearson_residuals[rows]) > 4)


def test_diagnostics_group_holds_p_values_and_outliers(fits):
    for (res, _), path in zip((fits["told"], fits["untold"]), fits["paths"]):
        with h5py.File(path, "r") as f:
            dg = f["diagnostics"]
            assert float(dg.attrs["chi2_p_value"]) == res.diagnostics.chi2_p_value
            assert float(dg.attrs["deviance_p_value"]) == res.diagnostics.deviance_p_value
            assert dg["outlier_rows"].dtype == np.int64
            np.testing.assert_array_equal(dg["outlier_rows"][()], res.diagnostics.outlier_rows)
        back = gs.load_result(path).diagnostics
        assert back.chi2_p_value == res.diagnostics.chi2_p_value
        assert back.deviance_p_value == res.diagnostics.deviance_p_value
        np.testing.assert_array_equal(back.outlier_rows, res.diagnostics.outlier_rows)
        assert back.outlier_rows.dtype == np.int64


# --------------------------------------------------------------------------
# The parametric-bootstrap test of the fit
# --------------------------------------------------------------------------

def test_bootstrap_p_value_is_the_monte_carlo_p_value():
    from gatescope.bootstrap import fit_p_value

    # p = (1 + #{D* ≥ D}) / (B + 1) over the finite resample deviances (Davison & Hinkley,
    # Bootstrap Methods and their Application, 1997, §4.2): 2 of 4 finite values reach 5
    assert fit_p_value(5.0, np.array([1.0, 5.0, 7.0, np.nan, 2.0])) == (3 / 5, 4)
    assert fit_p_value(9.0, np.array([1.0, 2.0])) == (1 / 3, 2)
    p, n = fit_p_value(9.0, None)
    assert np.isnan(p) and n == 0


def _bootstrapped_fit(exp):
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        # the bootstrap's normal interval: the goodness of fit, not the intervals, is
        # what these tests look at
        res = gs.fit(exp, bootstrap=200, seed=4, workers=1, interval="normal")
    return res, caught


def test_bootstrap_test_accepts_a_right_model_the_chi2_reference_rejects(make_experiment):
    # A CZ followed by amplitude damping (Kraus rank 4 of 16): the estimate lies on the
    # boundary of the physical set, fewer parameters are free than the χ² reference
    # counts, and its p-values are far too small for data drawn from the model itself
    # (common practice: Wilks' theorem needs an interior maximum; Scholten &
    # Blume-Kohout, New J. Phys. 20, 023050 (2018) for the boundary of quantum models).
    exp, _ = make_experiment("CZ+amplitude-damping:0.05", shots=1000, seed=1)
    with pytest.warns(GatescopeWarning, match="--bootstrap 200 or more gives a calibrated"):
        plain = gs.fit(exp)
    assert plain.diagnostics.p_value < 1e-3 and plain.diagnostics.poor_fit
    res, caught = _bootstrapped_fit(exp)
    dg = res.diagnostics
    assert dg.bootstrap_resamples == 200 and dg.bootstrap_decides
    assert dg.bootstrap_p_value > 0.01 and not dg.poor_fit
    assert poor_fit_warnings(caught) == []
    # every resample deviance is finite, their mean over two χ²_dof standard deviations
    # above the nominal dof (a χ²_dof variable has mean dof and variance 2 dof)
    d = res.bootstrap.deviances
    assert np.all(np.isfinite(d)) and np.mean(d) > dg.dof + 2 * np.sqrt(2 * dg.dof)
    assert dg.bootstrap_p_value == (1 + np.count_nonzero(d >= dg.deviance)) / 201


def test_bootstrap_test_still_flags_the_light_leak(tmp_path):
    from support import light_leak_bench

    exp, _ = light_leak_bench(tmp_path / "untold", with_background=False)
    res, caught = _bootstrapped_fit(exp)
    dg = res.diagnostics
    assert dg.bootstrap_decides and dg.bootstrap_p_value == 1 / 201 and dg.poor_fit
    (found,) = poor_fit_warnings(caught)
    assert "bootstrap p = 0.005 from 200 resamples" in str(found.message)
    back = gs.load_result(res.save(tmp_path / "r.h5"))
    assert back.diagnostics.bootstrap_p_value == dg.bootstrap_p_value
    assert back.diagnostics.bootstrap_resamples == 200 and back.diagnostics.poor_fit
    np.testing.assert_array_equal(back.bootstrap.deviances, res.bootstrap.deviances)
    from gatescope.summary import summary

    assert "bootstrap test of the deviance: p = 0.00498 (200 resamples" in summary(back)
