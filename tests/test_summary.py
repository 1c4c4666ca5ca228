"""The text of `gatescope show` (gatescope.summary): every figure, the goodness of fit and
its warning, the rows that do not fit.
"""

from __future__ import annotations

import importlib.util
import warnings

import gatescope as gs
import numpy as np
import pytest
from gatescope.summary import summary
from gatescope.synth.simulate import channel_from_spec, simulate_counts


@pytest.fixture(scope="module")
def cz_result(tmp_path_factory):
    from support import simulated_experiment

    folder = tmp_path_factory.mktemp("figs")
    exp, true_choi = simulated_experiment(folder / "data", "CZ+zz:0.2+depolarizing:0.05",
                                          shots=2000, seed=4)
    diamond = importlib.util.find_spec("cvxpy") is not None
    res = gs.fit(exp, "mle", diamond=diamond)
    path = res.save(folder / "result.h5")
    return res, path, true_choi, diamond


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
    line = next(ln for ln in text.splitlines() if ln.strip().startswith(f"{worst + 1} "))
    assert cols["prep"][worst] in line and cols["meas"][worst] in line
    assert str(int(cols["counts"][worst])) in line
    assert f"{dg.expected_counts[worst]:.2f}" in line and f"{dg.pearson_residuals[worst]:+.2f}" in line


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
