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

import warnings

import gatescope as gs
import h5py
import numpy as np
import pytest
from gatescope import GatescopeWarning
from gatescope.synth.simulate import channel_from_spec, simulate_counts
from scipy.special import gammaln
from scipy.stats import chi2


def write_full_1q(folder, spec="H+amplitude-damping:0.1", shots=800, seed=3):
    """A one-qubit six-state run with seconds, background and efficiency columns, its
    counts drawn from the row model of docs/file-formats.md with those columns."""
    folder.mkdir(parents=True, exist_ok=True)
    channel = channel_from_spec(spec, 1)
    rows = simulate_counts(channel, shots=shots, seed=seed)
    rng = np.random.default_rng(seed)
    lines = ["prep,meas,counts,seconds,background,efficiency"]
    for k, (p, m, expected, _) in enumerate(rows):
        seconds, background, efficiency = 1.0 + 0.5 * (k % 2), 0.25 * (k % 3), 0.9 + 0.05 * (k % 2)
        n = rng.poisson(expected * seconds * efficiency + background)
        lines.append(f"{p},{m},{n},{seconds},{background},{efficiency}")
    (folder / "counts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "experiment.toml").write_text(
        'title = "one qubit with every column"\nqubits = 1\ntarget = "H"\ncounts = "counts.csv"\n',
        encoding="utf-8")
    return gs.read_experiment(folder / "experiment.toml")


@pytest.fixture(scope="module")
def full_1q(tmp_path_factory):
    folder = tmp_path_factory.mktemp("full")
    exp = write_full_1q(folder / "data")
    res = gs.fit(exp, "mle", bootstrap=12, seed=7, workers=1)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


SPEC = "CZ+depolarizing:0.1"


SHOTS = 2000.0


def leaky(prep_label: str, meas_label: str) -> bool:
    return prep_label[0] in "DA" and meas_label[1] == "V"


def write_bench(folder, *, with_background: bool, seed: int = 7):
    folder.mkdir(parents=True, exist_ok=True)
    channel = channel_from_spec(SPEC, 2)
    rng = np.random.default_rng(seed)
    rows = simulate_counts(channel, shots=SHOTS, seed=seed)
    lines = ["prep,meas,counts" + (",background" if with_background else "")]
    flags = []
    for k, (prep, meas, expected, _) in enumerate(rows):
        background = 1.5 + 0.5 * (k % 3) + (60.0 if leaky(prep, meas) else 0.0)
        n = rng.poisson(expected + background)
        lines.append(f"{prep},{meas},{n}" + (f",{background}" if with_background else ""))
        flags.append(leaky(prep, meas))
    (folder / "counts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "experiment.toml").write_text(
        'title = "CZ with a light leak"\nqubits = 2\ntarget = "CZ"\ncounts = "counts.csv"\n',
        encoding="utf-8")
    return gs.read_experiment(folder / "experiment.toml"), np.array(flags)


@pytest.fixture(scope="module")
def fits(tmp_path_factory):
    base = tmp_path_factory.mktemp("gof")
    told, leaks = write_bench(base / "told", with_background=True)
    untold, _ = write_bench(base / "untold", with_background=False)
    with warnings.catch_warnings(record=True) as caught_told:
        warnings.simplefilter("always")
        res_told = gs.fit(told)
    with warnings.catch_warnings(record=True) as caught_untold:
        warnings.simplefilter("always")
        res_untold = gs.fit(untold)
    paths = (res_told.save(base / "told.h5"), res_untold.save(base / "untold.h5"))
    return {"told": (res_told, caught_told), "untold": (res_untold, caught_untold),
            "leaks": leaks, "paths": paths}


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
