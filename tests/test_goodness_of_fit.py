"""Goodness of fit (issue 5, item 4): Pearson χ² and deviance with p-values, outlier
rows, the warning when the model does not describe the data, /diagnostics and `show`.

Invented scenario: a two-photon CZ bench where, while the runs with photon 1
prepared in D or A were taken, room light reached the detector behind photon 2's
analyser in its V setting (a door left open), adding 60 background counts to
those rows on top of small accidentals everywhere. Told about the background, the
model fits; not told, it cannot.
"""

from __future__ import annotations

import warnings

import h5py
import numpy as np
import pytest
from scipy.stats import chi2

import gatescope as gs
from gatescope import GatescopeWarning
from gatescope.simulate import channel_from_spec, simulate_counts
from gatescope.summary import summary

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


def test_show_prints_the_test_the_warning_and_the_outliers(fits):
    told = summary(gs.load_result(fits["paths"][0]))
    assert "Pearson chi2" in told and "deviance" in told and "WARNING" not in told
    res, _ = fits["untold"]
    text = summary(gs.load_result(fits["paths"][1]))
    assert "WARNING" in text and "does not describe the data" in text
    assert "|Pearson residual| > 4" in text
    # the worst row is listed first, by its labels, counts, expected counts and residual
    dg = res.diagnostics
    worst = dg.outlier_rows[np.argmax(np.abs(dg.pearson_residuals[dg.outlier_rows]))]
    cols = res.counts_columns
    line = next(ln for ln in text.splitlines() if ln.strip().startswith(f"{worst + 1} "))
    assert cols["prep"][worst] in line and cols["meas"][worst] in line
    assert str(int(cols["counts"][worst])) in line
    assert f"{dg.expected_counts[worst]:.2f}" in line and f"{dg.pearson_residuals[worst]:+.2f}" in line
