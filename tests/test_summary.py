"""The text of `gatescope show` (gatescope.summary): every figure, the goodness of fit and
its warning, the rows that do not fit.
"""

from __future__ import annotations

import warnings

import gatescope as gs
import numpy as np
import pytest
from gatescope.summary import summary


def test_show_lists_every_new_figure(cz_result):
    res, path, _, diamond = cz_result
    text = summary(gs.load_result(path))
    for word in ("unitarity", "fidelity to nearest unitary", "process fid., local Z phases",
                 "truth-table fidelity", "concurrence of output", "local Z phases per qubit",
                 "concurrence for the input D D", "nearest unitary (rows)"):
        assert word in text, word
    assert ("diamond distance to target" in text) == diamond
    if not diamond:
        assert "diamond distance not computed" in text


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
    # rows are named by their CSV line (header = line 1), the number an editor shows
    csv_line = int(cols["line"][worst])
    assert csv_line == worst + 2                       # this file has no blank lines
    line = next(ln for ln in text.splitlines() if ln.strip().startswith(f"{csv_line} "))
    assert cols["prep"][worst] in line and cols["meas"][worst] in line
    assert str(int(cols["counts"][worst])) in line
    assert f"{dg.expected_counts[worst]:.2f}" in line and f"{dg.pearson_residuals[worst]:+.2f}" in line


# -- honest screens ------------------------------------------------------------------------

from pathlib import Path  # noqa: E402

FORMAT1 = Path(__file__).resolve().parent / "data" / "format1"


def quiet_fit(exp, method="mle", **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return gs.fit(exp, method, **kw)


def test_warnings_are_shown_at_the_top_and_undetermined_figures_marked(make_experiment, tmp_path):
    # a reproducer: an H/V-only experiment showed "process fidelity 0.495" with no caveat
    exp, _ = make_experiment("CNOT+depolarizing:0.05", shots=1000, prep=("H", "V"), meas=("H", "V"))
    res = quiet_fit(exp)
    text = summary(gs.load_result(res.save(tmp_path / "r.h5")))
    lines = text.splitlines()
    top = lines.index(next(ln for ln in lines if ln.startswith("WARNINGS")))
    assert top < lines.index("figures of merit")
    assert "[undetermined]" in lines[top + 1]
    fid = next(ln for ln in lines if ln.strip().startswith("process fidelity"))
    assert "not determined by the data" in fid
    tt = next(ln for ln in lines if ln.strip().startswith("truth-table fidelity"))
    assert "not determined" not in tt


@pytest.mark.parametrize("source", ["new", "format1"])
def test_a_lin_screen_shows_no_nan_and_says_it_is_unphysical(make_experiment, tmp_path, source):
    # a reproducer: `show` of a lin result printed "log-likelihood -inf", "chi2 nan (p = nan)",
    # a note about "these p-values", residuals "+nan" and a fidelity above 1 without a flag
    if source == "new":
        exp, _ = make_experiment("CZ", shots=300, seed=5)
        path = quiet_fit(exp, "lin").save(tmp_path / "r.h5")
    else:
        path = FORMAT1 / "fit_2q_lin.h5"
    text = summary(gs.load_result(path))
    import re

    for bad in (r"\bnan\b", r"\binf\b", "these p-values"):
        assert not re.search(bad, text, re.IGNORECASE), bad
    assert "UNPHYSICAL" in text and "(!)" in text
    assert "not defined for this estimate" in text
    assert "expects zero or negative counts" in text
    head = text[:text.index("figures of merit")]
    assert "[unphysical]" in head or "UNPHYSICAL ESTIMATE" in head
    min_eig = next(ln for ln in text.splitlines() if "min eigenvalue" in ln)
    assert "(!)" in min_eig


def test_a_fidelity_above_one_is_flagged(make_experiment, tmp_path):
    # a reproducer: a lin process fidelity of 1.0018 was shown with no flag
    exp, _ = make_experiment("CZ", shots=300, seed=3)
    res = quiet_fit(exp, "lin")
    above = [k for k, f in res.figures.items() if k != "min_eigenvalue" and f.value > 1]
    assert above, "this lin estimate was chosen for a figure above 1"
    text = summary(res)
    for name in above:
        from gatescope.summary import LABELS
        line = next(ln for ln in text.splitlines() if ln.strip().startswith(LABELS[name]))
        assert "(!) outside [" in line and "1.00000], impossible for a physical process" in line


def test_control_characters_of_a_title_are_printed_escaped(make_experiment):
    exp, _ = make_experiment("H", shots=200, n_qubits=1)
    exp.path.write_text(exp.path.read_text().replace(
        'title = "test H"', 'title = "bench \\u001b[2J\\u001b]0;owned\\u0007 A"'))
    res = quiet_fit(gs.read_experiment(exp.path))
    text = summary(res)
    assert "\x1b" not in text and "\x07" not in text
    assert "bench \\x1b[2J\\x1b]0;owned\\x07 A" in text


def test_the_short_fit_summary(make_experiment):
    exp, _ = make_experiment("CZ+depolarizing:0.05", shots=800, seed=2)
    # the bootstrap's interval: the summary's text is tested, not the construction
    res = quiet_fit(exp, bootstrap=8, seed=1, workers=1, interval="normal")
    from gatescope.summary import fit_summary

    text = fit_summary(res, "out/result.h5")
    fid = res.figures["process_fidelity"]
    assert f"{fid.value:.5f}" in text and f"[{fid.ci[0]:.5f}, {fid.ci[1]:.5f}]" in text
    assert "fit: mle, converged; goodness of fit p = " in text
    assert "result written to out/result.h5" in text.splitlines()[-1]
def test_show_prints_the_conditions(tmp_path):
    from support import simulated_experiment

    exp, _ = simulated_experiment(tmp_path / "data", "H", shots=200, seed=2, n_qubits=1)
    with open(exp.path, "a", encoding="utf-8") as fh:
        fh.write('\n[conditions]\ndelay_ps = 120\nrun = "night 3"\n')
    text = summary(gs.fit(gs.read_experiment(exp.path)))
    assert "  conditions: delay_ps = 120, run = 'night 3'" in text.splitlines()
    assert "conditions" not in summary(gs.fit(exp))
def test_show_of_a_state_prints_its_figures_and_density_matrix(make_state_experiment, tmp_path):
    exp, _ = make_state_experiment("phi++visibility:0.9", shots=500, seed=2)
    res = gs.fit(exp, "mle", bootstrap=10, seed=1, workers=1)
    text = summary(gs.load_result(res.save(tmp_path / "r.h5")))
    for word in ("state, qubits 2, target state phi+", "state fidelity", "purity (Tr ρ²)",
                 "von Neumann entropy (bits)", "linear entropy", "concurrence", "tangle",
                 "entanglement of formation", "negativity", "log-negativity",
                 "largest CHSH value", "CHSH settings", "a' (qubit 1)", "b' (qubit 2)",
                 "singular values of the correlation matrix", "density matrix (rows",
                 "its bootstrap standard deviations", "10 parametric resamples"):
        assert word in text, word
    rows = text.split("density matrix (rows")[1].splitlines()[1:5]
    assert f"{res.rho[0, 3].real:+.4f}" in rows[0]
    assert "process fidelity" not in text and "diamond" not in text


def test_show_of_a_three_qubit_state_names_each_cut(make_state_experiment):
    exp, _ = make_state_experiment("GHZ", n_qubits=3, shots=200, seed=2)
    text = summary(gs.fit(exp, "pls"))
    for k in (1, 2, 3):
        assert f"negativity, qubit {k} | rest" in text
    assert "density matrix" not in text                   # printed up to two qubits only


def test_show_states_a_perfect_gate_in_words(make_experiment):
    exp, _ = make_experiment("H", n_qubits=1, shots=1000, exact=True)
    res = gs.fit(exp, interval="profile", lower_bound=True)
    text = summary(res)
    assert ("process fidelity: the data are consistent with a perfect gate at 95% confidence; "
            "the interval reaches 1 and is one-sided") in text
    line = next(ln for ln in text.splitlines() if ln.strip().startswith("process fidelity"))
    lb = res.figures["process_fidelity"].lower_bound
    assert "profile likelihood" in line and f"lower bound {lb:.5f} (one-sided 95%)" in line
    assert "profile-likelihood intervals: process fidelity, average gate fidelity" in text
