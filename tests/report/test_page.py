"""The report of one result (gatescope.report.page)."""

from __future__ import annotations

import shutil
import warnings
import subprocess

import h5py
import pytest
from support import MISCALIBRATED_MEAS, check_self_contained_page, simulated_experiment

import gatescope as gs
from gatescope.report.page import MAX_ROWS_LISTED, report_html

pytest.importorskip("matplotlib")


def _page(path, **kw):
    r = gs.load_result(path)
    text = report_html(r, source=str(path), **kw)
    return r, text, check_self_contained_page(text)


def _figure_names_in_file(path) -> list[str]:
    # read with h5py directly, as any HDF5 tool would (docs/file-formats.md, "/figures/<name>")
    with h5py.File(path, "r") as f:
        return list(f["figures"].keys())


@pytest.mark.parametrize("which", ["boot_result", "plain_result", "state_result",
                                   "undetermined_result", "miscalibrated_result"])
def test_the_report_names_every_figure_of_the_file_with_its_interval(which, request):
    path = request.getfixturevalue(which)
    r, text, seen = _page(path)
    names = _figure_names_in_file(path)
    assert names and set(names) == set(r.figures)
    for name in names:
        assert f"<code>{name}</code>" in text
        fig = r.figures[name]
        if fig.ci is not None and fig.determined and abs(fig.ci[1] - fig.ci[0]) > 1e-12:
            assert f"[{gs.summary.number_text(fig.ci[0])}, " in text
    # the maps (one for a state, chi and PTM for a process), the data view, the bootstrap
    assert len(seen["images"]) == (1 if r.kind == "state" else 2) + 2 + (r.bootstrap is not None)
    assert ("beside the target, and of their difference" in text) == (r.target is not None)


def test_a_bootstrap_is_shown_or_its_absence_said(boot_result, plain_result):
    _, text, seen = _page(boot_result)
    assert "Bootstrap distributions" in text and "bootstrap" in seen["ids"]
    _, text, seen = _page(plain_result)
    assert "None was run" in text and "bootstrap" not in seen["ids"]
    assert "no interval (no bootstrap)" in text


def test_every_warning_is_shown_in_words_before_the_figures(undetermined_result, state_result):
    for path in (undetermined_result, state_result):
        r, text, _ = _page(path)
        assert r.warnings
        top = text[:text.index('id="summary"')]
        for w in r.warnings:
            code, rest = w[1:].split("]", 1)
            assert f"[{code}]" in top and gs.report.html.esc(rest.strip()[:60]) in top


def test_figures_the_data_do_not_determine_are_marked(undetermined_result):
    r, text, _ = _page(undetermined_result)
    assert not r.figures["process_fidelity"].determined      # H/V only: a truth table
    assert r.figures["truth_table_fidelity"].determined
    row = text[text.index("<code>process_fidelity</code>"):]
    row = row[:row.index("</tr>")]
    assert "not determined" in row
    row = text[text.index("<code>truth_table_fidelity</code>"):]
    assert "not determined" not in row[:row.index("</tr>")]
    assert "Not determined by the data:" in text


def test_the_rows_that_do_not_fit_are_listed_by_csv_line(miscalibrated_result):
    r, text, _ = _page(miscalibrated_result)
    bad = [k for k in r.diagnostics.outlier_rows]
    assert bad and "|Pearson residual| &gt; 4" in text
    lines = r.counts_columns["line"]
    listed = sorted(bad, key=lambda k: -abs(r.diagnostics.pearson_residuals[k]))[:MAX_ROWS_LISTED]
    for k in listed[:5]:
        assert f"<td class=num>{int(lines[k])}</td>" in text
    assert sum(r.counts_columns["meas"][k] == MISCALIBRATED_MEAS for k in bad) > len(bad) / 2
    assert "the model does not describe the data" in text    # the poor-fit warning


def test_text_from_the_file_is_escaped(boot_result):
    r = gs.load_result(boot_result)
    r.experiment_toml = 'title = "<script>alert(1)</script> & co"\nqubits = 2\n'
    r.conditions = {"<b>run</b>": "night <3>"}
    r.warnings = ("[poor-fit] <img src=x onerror=alert(1)>",)
    text = report_html(r, source="<evil>.h5")
    seen = check_self_contained_page(text)
    assert "<script>alert(1)</script> & co" in seen["text"]
    assert "<script>" not in text and "<img src=x" not in text and "<evil>" not in text
    assert "night <3>" in seen["text"].replace("'", "")


def test_the_input_conditions_and_provenance_are_shown(batch_folder, state_result):
    r, text, seen = _page(batch_folder / "delay_50.h5")
    assert r.conditions == {"delay_ps": 50, "run": "night <3>"}
    for anchor in ("input", "conditions", "provenance"):
        assert anchor in seen["ids"]
    assert "delay_ps" in seen["text"] and r.csv_sha256 in text and r.toml_sha256 in text
    assert r.provenance["command_line"] in seen["text"]       # batch records its command line
    _, text, seen = _page(state_result)
    assert "state tomography" in seen["text"] and "CHSH setting a (qubit 1)" in text


def _browser():
    for name in ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.mark.slow
def test_a_headless_browser_renders_the_report(boot_result, tmp_path):
    browser = _browser()
    if browser is None:
        pytest.skip("no headless browser installed (Debian: apt-get install chromium)")
    from PIL import Image

    page = tmp_path / "report.html"
    page.write_text(report_html(gs.load_result(boot_result), source="boot.h5"), encoding="utf-8")
    shot = tmp_path / "shot.png"
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", "--no-first-run",
             f"--user-data-dir={tmp_path / 'profile'}", "--hide-scrollbars"]
    run = subprocess.run([browser, *flags, "--window-size=1280,3000", f"--screenshot={shot}",
                          page.as_uri()], capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr[-2000:]
    with Image.open(shot) as im:
        assert im.size == (1280, 3000)
        grey = im.convert("L")
        low, high = grey.getextrema()
        assert high - low > 200                               # not a blank page
    dom = subprocess.run([browser, *flags, "--dump-dom", page.as_uri()], capture_output=True,
                         text=True, timeout=120)
    assert dom.returncode == 0 and "<h2 id=\"summary\">Summary</h2>" in dom.stdout
    assert dom.stdout.count("<img ") == 5                     # every image element survived


def test_profile_intervals_lower_bounds_and_the_boundary_are_shown(tmp_path):
    # counts equal to an ideal Hadamard's expected counts: the estimate is the target, so
    # the profile-likelihood interval of the process fidelity reaches F = 1
    exp, _ = simulated_experiment(tmp_path / "perfect", "H", n_qubits=1, shots=1000, exact=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = gs.fit(exp, bootstrap=20, seed=2, workers=1, lower_bound=True)
    assert r.figures["process_fidelity"].interval_method == "profile"
    assert r.figures["process_fidelity"].touches_boundary
    text = report_html(r, source="perfect.h5")
    seen = check_self_contained_page(text)["text"]
    assert "the data are consistent with a perfect gate at 95% confidence" in seen
    assert seen.count("one-sided lower bound at 95%") == sum(
        f.lower_bound is not None for f in r.figures.values())
    assert "profile likelihood for process fidelity" in seen          # the histogram caption
    # the side panel names the bootstrap's construction and the figures that do not use it
    assert "normal (profile likelihood for process fidelity, average gate fidelity" in seen
