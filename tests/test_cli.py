"""The command line: simulate → fit → show, demo, exit statuses, intervals on screen.
"""

from __future__ import annotations

import subprocess
import warnings
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
    # the bootstrap's interval for every figure (the two-qubit default, test inversion for
    # the fidelities, takes tens of seconds; the demo's test runs it)
    assert main(["fit", str(exp.path), "--bootstrap", "20", "--seed", "1", "--workers", "1",
                 "--interval", "normal", "-o", str(out), "--quiet"]) == 0
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
    assert f"result written to {out / 'result.h5'}" in printed[-1]   # default: beside the experiment
    res = gs.load_result(out / "result.h5")
    # CPTP to 1e-9 (issue acceptance)
    assert np.linalg.eigvalsh(res.choi)[0] >= -1e-9
    np.testing.assert_allclose(partial_trace_output(res.choi), np.eye(4), atol=1e-9)
    assert main(["show", str(out / "result.h5")]) == 0
    text = capsys.readouterr().out
    for word in ("process fidelity", "average gate fidelity", "purity", "chi2", "provenance",
                 "method mle, converged,"):
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
    # and the report of each, its path printed
    for name in ("result.html", "pair-source-result.html"):
        assert f"report written to gatescope-demo/{name}" in r.stdout
        assert (tmp_path / "gatescope-demo" / name).read_text().startswith("<!DOCTYPE html>")


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
                 "20 parametric resamples", "method mle, converged,"):
        assert word in text
    fid = res.figures["state_fidelity"]
    line = next(ln for ln in text.splitlines() if ln.strip().startswith("state fidelity"))
    assert f"{fid.ci[0]:.5f}" in line and f"{fid.ci[1]:.5f}" in line


# -- nothing overwritten by accident; outputs checked before any computation -------------

@pytest.fixture
def small(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.05", shots=300, n_qubits=1, seed=2)
    return exp


def test_fit_refuses_to_replace_a_result_and_force_replaces_it(small, capsys):
    # a reproducer: a bootstrapped result was lost to a quick re-fit without one
    out = small.path.parent / "result.h5"
    assert main(["fit", str(small.path), "--bootstrap", "4", "--seed", "1", "--workers", "1",
                 "--quiet"]) == 0
    before = out.read_bytes()
    capsys.readouterr()
    assert main(["fit", str(small.path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert str(out) in err and "--force" in err
    assert out.read_bytes() == before
    assert main(["fit", str(small.path), "--quiet", "--force"]) == 0
    assert gs.load_result(out).bootstrap is None


@pytest.mark.parametrize("target, words", [
    ("folder", "is a folder"),
    ("under-a-file", "is a file, not a folder"),
    ("counts", "input of this result"),
    ("experiment", "input of this result"),
    ("unitary", "input of this result"),
], ids=["a-folder", "under-a-file", "the-counts-file", "the-experiment-file", "the-target-file"])
def test_bad_output_paths_are_refused_before_the_fit(small, capsys, monkeypatch, target, words):
    from gatescope import pipeline

    def no_fit(*a, **k):
        raise AssertionError("the fit ran before the output was checked")

    monkeypatch.setattr(pipeline, "_fit", no_fit)
    folder = small.path.parent
    np.save(folder / "u.npy", np.array([[1, 1], [1, -1]]) / np.sqrt(2))
    small.path.write_text(small.path.read_text().replace('target = "H"', 'target = { unitary = "u.npy" }'))
    out = {"folder": folder, "under-a-file": small.counts_path / "r.h5",
           "counts": small.counts_path, "experiment": small.path, "unitary": folder / "u.npy"}[target]
    before = small.counts_path.read_bytes()
    assert main(["fit", str(small.path), "-o", str(out), "--force"]) == 2
    err = capsys.readouterr().err
    assert words in err and "option -o" in err and "Traceback" not in err
    assert small.counts_path.read_bytes() == before


def test_an_experiment_folder_is_accepted(small, capsys):
    assert main(["fit", str(small.path.parent), "--quiet"]) == 0
    assert (small.path.parent / "result.h5").exists()


def test_fit_prints_a_summary_json_and_show_writes_csv(small, capsys, tmp_path):
    import json

    out = tmp_path / "r.h5"
    assert main(["fit", str(small.path), "-o", str(out), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    res = gs.load_result(out)
    assert data["figures"]["process_fidelity"]["value"] == res.figures["process_fidelity"].value
    assert data["file"] == str(out) and data["status"] == "converged"
    assert main(["show", str(out), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["figures"] == data["figures"]
    table = tmp_path / "figures.csv"
    assert main(["show", str(out), "--csv", str(table)]) == 0
    assert table.read_text().splitlines()[0] == ("figure,value,ci_low,ci_high,ci_level,determined,in_range,"
                                                   "interval_method,lower_bound,lower_bound_method,"
                                                   "touches_boundary")
    assert "file format 2, checksums verified" in capsys.readouterr().out
    assert main(["show", str(out), "--csv", str(table)]) == 2          # no silent overwrite
    assert "--force" in capsys.readouterr().err


@pytest.mark.parametrize("qubits", ["7", "40", "-1"])
def test_simulate_blames_a_bad_qubit_count_on_qubits(tmp_path, capsys, qubits):
    # a reproducer: 7 was a MemoryError traceback, 40 and -1 were blamed on --channel
    status = main(["simulate", "--channel", "random:2", "--qubits", qubits, "-o", str(tmp_path / "s")])
    err = capsys.readouterr().err
    assert status == 2 and "option --qubits" in err and "--channel" not in err
    assert not (tmp_path / "s").exists()


def test_simulate_refuses_to_replace_an_earlier_simulation(tmp_path, capsys):
    args = ["simulate", "--gate", "X", "--shots", "50", "--seed", "1", "-o", str(tmp_path / "s")]
    assert main(args) == 0
    assert main(args) == 2 and "--force" in capsys.readouterr().err
    assert main(args + ["--force"]) == 0


def test_sigterm_stops_a_bootstrap_and_its_workers(make_experiment, tmp_path):
    # a reproducer: after SIGTERM of `fit --bootstrap 400 --workers 2` both workers stayed
    # alive for ever; now it ends like Ctrl-C: no worker left, no file, status 1
    import os
    import signal
    import time

    exp, _ = make_experiment("CZ+depolarizing:0.05", shots=1000, seed=1)
    out = tmp_path / "out" / "r.h5"
    proc = subprocess.Popen([sys.executable, "-m", "gatescope", "fit", str(exp.path), "-o", str(out),
                             "--bootstrap", "400", "--workers", "2"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    children = []
    while time.monotonic() < deadline and len(children) < 2:
        time.sleep(0.2)
        children = _children(proc.pid)
    assert len(children) >= 2, "the workers did not start"
    os.kill(proc.pid, signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 1 and "terminated" in err and "Traceback" not in err
    time.sleep(0.5)
    assert [pid for pid in children if _alive(pid)] == []
    assert not out.exists() and list(out.parent.glob("*")) == []


def _children(pid):
    try:
        with open(f"/proc/{pid}/task/{pid}/children") as fh:
            return [int(x) for x in fh.read().split()]
    except OSError:
        return []


def _alive(pid):
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split()[2] != "Z"
    except OSError:
        return False


def test_demo_says_what_it_replaces(tmp_path, monkeypatch, capsys):
    # the demo writes gatescope-demo/result.h5 in the working folder; a second run says
    # that it replaces the first one's (a fast estimator stands in for the demo's fit)
    from gatescope import pipeline

    real = pipeline.fit
    monkeypatch.setattr(pipeline, "fit", lambda exp, *a, **k: real(exp, "lin"))
    monkeypatch.chdir(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(["demo"]) == 0
        assert "replacing" not in capsys.readouterr().err
        assert main(["demo"]) == 0
    assert "demo: replacing gatescope-demo/result.h5" in capsys.readouterr().err


def test_fit_report_is_checked_before_the_fit_and_written_beside_the_result(make_experiment,
                                                                           tmp_path, capsys):
    pytest.importorskip("matplotlib")
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=16)
    out = tmp_path / "night" / "r.h5"
    (tmp_path / "night").mkdir()
    (tmp_path / "night" / "r.html").write_text("an older report")
    assert main(["fit", str(exp.path), "-o", str(out), "--report", "--quiet"]) == 2
    assert "r.html" in capsys.readouterr().err and not out.exists()    # refused before the fit
    assert main(["fit", str(exp.path), "-o", str(out), "--report", "--quiet", "--force"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines == [str(out), f"report written to {tmp_path / 'night' / 'r.html'}"]
    assert "process_fidelity" in (tmp_path / "night" / "r.html").read_text()
    page = tmp_path / "elsewhere.html"
    assert main(["fit", str(exp.path), "-o", str(out), "--force", "--report", str(page),
                 "--json"]) == 0
    assert page.exists() and "report written to" in capsys.readouterr().err


def test_cli_report_of_a_result_and_of_a_batch(make_experiment, tmp_path, capsys):
    pytest.importorskip("matplotlib")
    exp, _ = make_experiment(FULL_RANK, shots=500, seed=17)
    out = tmp_path / "r.h5"
    assert main(["fit", str(exp.path), "-o", str(out), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["report", str(out)]) == 0
    assert capsys.readouterr().out.strip() == str(tmp_path / "r.html")
    assert main(["report", str(out)]) == 2                              # exists: --force
    assert "--force" in capsys.readouterr().err
    assert main(["report", str(out), "--against", "delay_ps"]) == 2
    assert "option --against" in capsys.readouterr().err
    assert main(["report", str(tmp_path / "none.h5")]) == 2
    assert main(["report", str(tmp_path)]) == 2                         # no summary.csv
    assert "summary.csv" in capsys.readouterr().err


def test_cli_report_without_matplotlib_exits_2(tmp_path):
    code = ("import sys; sys.modules['matplotlib'] = None; from gatescope.cli import main; "
            f"sys.exit(main(['report', {str(tmp_path)!r}]))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 2 and "plot extra" in r.stderr and "Traceback" not in r.stderr


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


def test_cli_profile_interval_and_lower_bound(make_experiment, tmp_path, capsys):
    import json

    exp, _ = make_experiment("H", n_qubits=1, shots=1000, exact=True)
    out = tmp_path / "result.h5"
    assert main(["fit", str(exp.path), "--interval", "profile", "--lower-bound", "-o", str(out),
                 "--quiet"]) == 0
    res = gs.load_result(out)
    pf = res.figures["process_fidelity"]
    assert pf.interval_method == "profile" and pf.touches_boundary and pf.lower_bound < 1.0
    with h5py.File(out, "r") as f:
        assert float(f["figures/process_fidelity"].attrs["lower_bound"]) == pf.lower_bound
    capsys.readouterr()
    assert main(["show", str(out)]) == 0
    assert "consistent with a perfect gate at 95% confidence" in capsys.readouterr().out
    assert main(["show", str(out), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)["figures"]["process_fidelity"]
    assert data["interval_method"] == "profile" and data["touches_boundary"] is True
    assert data["lower_bound"] == pf.lower_bound


def test_cli_profile_options_are_checked(make_experiment, tmp_path, capsys):
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=200)
    assert main(["fit", str(exp.path), "--method", "pls", "--lower-bound",
                 "-o", str(tmp_path / "r.h5")]) == 2
    assert "--lower-bound" in capsys.readouterr().err
    assert not (tmp_path / "r.h5").exists()
