"""The command line: simulate -> fit -> show, demo, exit statuses."""

import subprocess
import sys

import h5py
import numpy as np
import pytest

import gatescope as gs
from gatescope.cli import main
from gatescope.channels import partial_trace_output


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "gatescope", *args], capture_output=True,
                          text=True, cwd=cwd)


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


def test_same_seed_same_counts(tmp_path):
    for k in (1, 2):
        assert main(["simulate", "--channel", "H+depolarizing:0.1", "--seed", "9",
                     "-o", str(tmp_path / f"s{k}")]) == 0
    assert (tmp_path / "s1" / "counts.csv").read_bytes() == (tmp_path / "s2" / "counts.csv").read_bytes()


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
    # the bundled dataset with its truth; no arguments
    r = run("demo", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "against the true channel" in r.stdout
    assert "OUTSIDE" not in r.stdout
    with h5py.File(tmp_path / "gatescope-demo" / "result.h5") as f:
        assert f.attrs["format"] == "gatescope.result"
        assert f["estimate"].attrs["method"] == "mle"
