"""The command line: simulate → fit → show, demo, exit statuses, intervals on screen.
"""

from __future__ import annotations

import subprocess
import sys

import gatescope as gs
import h5py
import numpy as np
import pytest
from gatescope.channels import partial_trace_output
from gatescope.cli import main

FULL_RANK = "CZ+depolarizing:0.2"


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "gatescope", *args], capture_output=True,
                          text=True, cwd=cwd)


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


def test_simulate_fit_show_round(tmp_path, capsys):
    out = tmp_path / "sim"
    assert main(["simulate", "--gate", "CZ", "--noise", "zz:0.1", "--noise", "depolarizing:0.02",
                 "--shots", "500", "--seed", "3", "-o", str(out)]) == 0
    for name in ("experiment.toml", "counts.csv", "truth.h5"):
        assert (out / name).exists()
    truth = gs.load_result(out / "truth.h5")
    assert truth.method == "truth"
    assert main(["fit", str(out / "experiment.toml")]) == 0
    printed = capsys.readouterr().out.strip().splitlines()
    assert printed[-1] == str(out / "result.h5")           # default: beside the experiment
    res = gs.load_result(out / "result.h5")
    # CPTP to 1e-9 (issue acceptance)
    assert np.linalg.eigvalsh(res.choi)[0] >= -1e-9
    np.testing.assert_allclose(partial_trace_output(res.choi), np.eye(4), atol=1e-9)
    assert main(["show", str(out / "result.h5")]) == 0
    text = capsys.readouterr().out
    for word in ("process fidelity", "average gate fidelity", "purity", "chi2", "provenance",
                 "converged yes"):
        assert word in text


@pytest.mark.parametrize("args, needle", [
    (["simulate", "--gate", "CQ", "-o", "x"], "unknown gate"),
    (["simulate", "--gate", "CZ", "--noise", "depolarising:0.1", "-o", "x"], "unknown kind"),
    (["simulate", "--gate", "CZ", "--noise", "depolarizing:1.5", "-o", "x"], "[0, 1]"),
    (["simulate", "--gate", "CZ", "--shots", "-3", "-o", "x"], "--shots"),
    (["simulate", "--gate", "CZ", "--prep", "H,Q", "-o", "x"], "--prep"),
    (["fit", "missing.toml"], "missing.toml"),
    (["fit", "e.toml", "--method", "magic"], "invalid choice"),
    (["show", "nothing.h5"], "nothing.h5"),
])
def test_bad_usage_exits_2(tmp_path, args, needle):
    (tmp_path / "e.toml").write_text("qubits = 1\ncounts = 'c.csv'\n")
    r = run(*args, cwd=tmp_path)
    assert r.returncode == 2, r.stderr
    assert needle in r.stderr
    assert not (tmp_path / "x").exists()


def test_python_dash_m_and_version():
    r = run("--version")
    assert r.returncode == 0 and r.stdout.startswith("gatescope ")


def test_demo_runs_and_matches_truth(tmp_path):
    # the bundled datasets with their truths, the gate then the pair source; no arguments
    r = run("demo", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    gate, pair = r.stdout.split("against the true channel")[1].split("against the true state")
    assert "OUTSIDE" not in gate
    with h5py.File(tmp_path / "gatescope-demo" / "result.h5") as f:
        assert f.attrs["format"] == "gatescope.result"
        assert f["estimate"].attrs["method"] == "mle"
    # the pair source: every state figure beside its true value. The largest CHSH value
    # sits where it is biased upward (README, "State tomography"): fit warns, and in this
    # draw its interval misses the truth, as it does in about 4 draws of 10 there
    lines = [ln for ln in pair.splitlines() if " estimate " in ln]
    assert len(lines) == 10
    assert all("inside the interval" in ln for ln in lines if not ln.split()[0] == "chsh_max")
    assert "chsh_max: the second and third singular values" in r.stderr
    with h5py.File(tmp_path / "gatescope-demo" / "pair-source-result.h5") as f:
        assert f.attrs["kind"] == "state" and f["estimate/rho"].shape == (4, 4)


def test_batch_exit_status_and_table_path(tmp_path, capsys):
    from support import experiment_tree

    experiment_tree(tmp_path / "data", ["a"])
    assert main(["batch", str(tmp_path / "data"), "-o", str(tmp_path / "out"), "--workers", "1",
                 "--seed", "2"]) == 0
    assert capsys.readouterr().out.strip() == str(tmp_path / "out" / "summary.csv")
    (tmp_path / "data" / "broken").mkdir()
    (tmp_path / "data" / "broken" / "experiment.toml").write_text("qubits = 1\n")
    assert main(["batch", str(tmp_path / "data"), "-o", str(tmp_path / "out"), "--workers", "1",
                 "--seed", "2"]) == 1
    assert "broken: " in capsys.readouterr().err
    # the result records the batch's command line
    res = gs.load_result(tmp_path / "out" / "a.h5")
    assert res.provenance["command_line"].startswith("gatescope batch ")


def test_batch_without_the_dask_extra_exits_2(tmp_path, monkeypatch, capsys):
    from support import experiment_tree

    experiment_tree(tmp_path / "data", ["a"])
    monkeypatch.setitem(sys.modules, "dask.distributed", None)      # as if not installed
    assert main(["batch", str(tmp_path / "data"), "-o", str(tmp_path / "out"),
                 "--dask", "tcp://127.0.0.1:8786"]) == 2
    assert "option --dask: needs the dask extra" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("args, needle", [
    (["--watch", "0"], "option --watch"),
    (["--bootstrap", "1"], "option --bootstrap"),
    (["--workers", "0"], "option --workers"),
    (["--method", "magic"], "invalid choice"),
    ([], "the following arguments are required: -o"),
])
def test_batch_bad_options_exit_2(tmp_path, args, needle):
    out = [] if not args else ["-o", "out"]
    r = run("batch", "data", *out, *args, cwd=tmp_path)
    assert r.returncode == 2 and needle in r.stderr, r.stderr
    assert not (tmp_path / "out").exists()


def test_state_simulate_fit_show_round(tmp_path, capsys):
    out = tmp_path / "pair"
    assert main(["simulate", "--state", "phi+", "--noise", "visibility:0.92", "--shots", "800",
                 "--seed", "4", "-o", str(out)]) == 0
    assert main(["fit", str(out / "experiment.toml"), "--bootstrap", "20", "--seed", "1",
                 "--workers", "1", "--quiet"]) == 0
    res = gs.load_result(out / "result.h5")
    assert res.kind == "state" and np.linalg.eigvalsh(res.rho)[0] >= -1e-12
    assert np.trace(res.rho).real == pytest.approx(1, abs=1e-12)
    capsys.readouterr()
    assert main(["show", str(out / "result.h5")]) == 0
    text = capsys.readouterr().out
    for word in ("state fidelity", "concurrence", "largest CHSH value", "density matrix",
                 "20 parametric resamples", "converged yes"):
        assert word in text
    fid = res.figures["state_fidelity"]
    line = next(ln for ln in text.splitlines() if ln.strip().startswith("state fidelity"))
    assert f"{fid.ci[0]:.5f}" in line and f"{fid.ci[1]:.5f}" in line


def test_cli_bench_prints_the_table_and_writes_the_folder(tmp_path, capsys):
    out = tmp_path / "bench"
    assert main(["bench", "--channel", "H+depolarizing:0.2", "--channel", "random:2:1",
                 "--qubits", "1", "--shots", "500,5000", "--methods", "lin,mle", "--repeats", "3",
                 "--seed", "4", "--workers", "1", "--quiet", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "H+depolarizing:0.2" in text and "random:2:1" in text and "hs_mse" in text
    assert "24 repetitions run now, 0 taken from" in text and "(seed 4)" in text
    for name in ("bench.csv", "bench.h5", "settings.json", "runs.jsonl"):
        assert (out / name).exists()
    assert main(["bench", "--channel", "H", "--shots", "10,x", "-o", str(tmp_path / "x")]) == 2
    assert "option --shots:" in capsys.readouterr().err
