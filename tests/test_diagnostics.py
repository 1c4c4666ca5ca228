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
