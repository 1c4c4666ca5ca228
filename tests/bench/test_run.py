"""The bench (gatescope.bench.run): files, reproducibility, resuming, options, and the
asymptotic efficiency of maximum likelihood against the Cramér–Rao bound."""

from __future__ import annotations

import csv
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from gatescope.bench import read_bench, run_bench, store
from gatescope.bench.run import repetition_seed
from gatescope.bench.table import TIMING_COLUMNS
from gatescope.errors import InputError
from gatescope.intervals import interval, parameter_range

ONE_QUBIT = "H+amplitude-damping:0.3+depolarizing:0.2"      # Choi eigenvalues 0.1 … 1.46
SMALL = dict(shots=[300, 3000], methods=["lin", "mle"], repeats=4, seed=7, plot=False)


def _table(path):
    with open(path, newline="") as fh:
        return [{k: v for k, v in row.items() if k not in TIMING_COLUMNS}
                for row in csv.DictReader(fh)]


def test_a_small_bench_writes_its_table_and_file(tmp_path):
    out = run_bench([ONE_QUBIT, "random:2:3"], tmp_path / "b", qubits=1, workers=1, **SMALL)
    assert out.new == 2 * 2 * 2 * 4 and out.reused == 0
    with open(out.csv, newline="") as fh:
        assert "seconds_per_fit" in next(csv.reader(fh))
    rows = _table(out.csv)
    assert [(r["channel"], r["shots"], r["method"]) for r in rows] == [
        (c, s, m) for c in (ONE_QUBIT, "random:2:3") for s in ("300.0", "3000.0")
        for m in ("lin", "mle")]
    for name in ("hs_mse", "hs_mse_se", "hs_crb", "hs_mse_over_crb", "infidelity_mean",
                 "infidelity_median", "fidelity_bias", "trace_distance_mean", "iterations_mean",
                 "hs_mse_slope"):
        assert name in rows[0]
    first = rows[0]
    assert float(first["hs_crb"]) > 0 and float(first["fidelity_bias_se"]) > 0
    # a rank-2 channel of a qubit (Choi rank 2 of 4) is on the boundary: no bound
    assert rows[-1]["hs_crb"] == "" and rows[-1]["fidelity_bias"] == ""
    data = read_bench(out.h5)
    runs = data["runs"]
    assert runs["hs_error"].shape == (32,) and np.all(runs["hs_error"] > 0)
    assert data["settings"]["seed"] == 7 and data["settings"]["repeats"] == 4
    # every repetition's seed is the hash of its key
    k = 5
    spec = data["channels"][runs["channel"][k]]["spec"]
    assert runs["seed"][k] == repetition_seed(7, spec, 1, runs["shots"][k], runs["method"][k],
                                              runs["repetition"][k])
    # the table is the mean of the file's repetitions
    sel = (runs["channel"] == 0) & (runs["shots"] == 300.0) & (runs["method"] == "lin")
    assert float(first["hs_mse"]) == pytest.approx(runs["hs_error"][sel].mean(), rel=1e-15)
    assert data["channels"][0]["full_rank"] and not data["channels"][1]["full_rank"]
    assert len(data["channels"][0]["prep"]) == 36


def test_same_numbers_for_one_and_two_workers_and_any_company(tmp_path):
    one = run_bench([ONE_QUBIT, "random:2:3"], tmp_path / "w1", qubits=1, workers=1, **SMALL)
    two = run_bench([ONE_QUBIT, "random:2:3"], tmp_path / "w2", qubits=1, workers=2, **SMALL)
    assert _table(one.csv) == _table(two.csv)
    # a repetition's numbers do not depend on what else the bench holds
    alone = run_bench(["random:2:3"], tmp_path / "alone", qubits=1, workers=1,
                      **{**SMALL, "methods": ["mle"]})
    mine = [r for r in _table(one.csv) if r["channel"] == "random:2:3" and r["method"] == "mle"]
    assert [r["hs_mse"] for r in _table(alone.csv)] == [r["hs_mse"] for r in mine]


def test_a_rerun_does_only_what_is_missing(tmp_path):
    folder = tmp_path / "b"
    first = run_bench([ONE_QUBIT], folder, qubits=1, workers=1, **SMALL)
    again = run_bench([ONE_QUBIT], folder, qubits=1, workers=1, **SMALL)
    assert again.new == 0 and again.reused == first.new
    assert _table(again.csv) == _table(first.csv)
    more = run_bench([ONE_QUBIT], folder, qubits=1, workers=1, **{**SMALL, "repeats": 6})
    assert more.new == 2 * 2 * 2 and len(store.Journal(folder).read()) == 24
    fresh = run_bench([ONE_QUBIT], tmp_path / "fresh", qubits=1, workers=1,
                      **{**SMALL, "repeats": 6})
    assert _table(more.csv) == _table(fresh.csv)
    # the folder keeps its seed when none is given
    assert run_bench([ONE_QUBIT], folder, qubits=1, workers=1,
                     **{**SMALL, "seed": None}).seed == 7


@pytest.mark.slow
def test_an_interrupted_bench_continues_with_the_same_numbers(tmp_path):
    """Kill a running `gatescope bench` (SIGKILL, no chance to clean up), run it again, and
    get what an uninterrupted run gives."""
    args = ["bench", "--channel", "CZ+depolarizing:0.1", "--shots", "2000", "--methods", "mle",
            "--repeats", "24", "--seed", "3", "--workers", "2", "--quiet"]
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    folder = tmp_path / "killed"
    proc = subprocess.Popen([sys.executable, "-m", "gatescope", *args, "-o", str(folder)],
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    journal = folder / store.JOURNAL
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if journal.exists() and journal.read_text().count("\n") >= 6:
            break
        time.sleep(0.05)
    assert proc.poll() is None, "the bench finished before it could be interrupted"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    done = len(store.Journal(folder).read())
    assert 6 <= done < 24
    resumed = run_bench(["CZ+depolarizing:0.1"], folder, shots=[2000], methods=["mle"],
                        repeats=24, seed=3, workers=2, plot=False)
    assert resumed.reused == done and resumed.new == 24 - done
    whole = run_bench(["CZ+depolarizing:0.1"], tmp_path / "whole", shots=[2000], methods=["mle"],
                      repeats=24, seed=3, workers=1, plot=False)
    assert _table(resumed.csv) == _table(whole.csv)


def test_settings_of_a_folder_cannot_change(tmp_path):
    run_bench([ONE_QUBIT], tmp_path, qubits=1, workers=1, **SMALL)
    with pytest.raises(InputError, match="seed 7") as err:
        run_bench([ONE_QUBIT], tmp_path, qubits=1, workers=1, **{**SMALL, "seed": 8}, flags=True)
    assert err.value.key == "--seed"
    with pytest.raises(InputError, match="prep"):
        run_bench([ONE_QUBIT], tmp_path, qubits=1, workers=1, prep="pauli4",
                  **{k: v for k, v in SMALL.items()})


@pytest.mark.parametrize("kwargs, key, words", [
    ({"channels": ["CZ+fog:1"]}, "--channel", "unknown kind"),
    ({"channels": []}, "--channel", "at least one"),
    ({"shots": "100,x"}, "--shots", "not a number"),
    ({"shots": "100,-1"}, "--shots", "positive"),
    ({"methods": "mle,mlee"}, "--methods", "did you mean 'mle'"),
    ({"repeats": 0}, "--repeats", "at least 1"),
    ({"bootstrap": 1}, "--bootstrap", "at least 2"),
    ({"ci_level": 95}, "--ci-level", "fraction"),
    ({"prep": "H,Q"}, "--prep", "'Q' is unknown"),
    ({"interval": "wide"}, "--interval", "unknown interval"),
])
def test_bad_options_name_the_flag(tmp_path, kwargs, key, words):
    args = {"channels": [ONE_QUBIT], "qubits": 1, **kwargs}
    with pytest.raises(InputError, match=words) as err:
        run_bench(args.pop("channels"), tmp_path / "x", **args, flags=True)
    assert err.value.key == key
    assert not (tmp_path / "x").exists()


def test_without_matplotlib_the_table_and_file_are_still_written(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    out = run_bench([ONE_QUBIT], tmp_path, qubits=1, workers=1, **{**SMALL, "plot": True})
    assert out.plot is None and any("plot skipped" in n and "plot extra" in n for n in out.notes)
    assert out.csv.exists() and out.h5.exists() and not (tmp_path / "bench.png").exists()


def test_coverage_of_the_bootstrap_intervals(tmp_path):
    out = run_bench([ONE_QUBIT], tmp_path, qubits=1, shots=[2000], methods=["mle"], repeats=6,
                    bootstrap=8, seed=2, workers=2, plot=False)
    row = out.rows[0]
    assert row["bootstrap"] == 8 and row["interval"] == "normal" and row["ci_level"] == 0.95
    assert 0 <= row["coverage_process_fidelity"] <= 1 and "coverage_trace" not in row
    # recomputed from the stored bootstrap values with the library's own intervals
    data = read_bench(out.h5)
    names = list(data["figure_names"])
    k = names.index("process_fidelity")
    truth = dict(zip(data["channels"][0]["figure_names"],
                     data["channels"][0]["figure_values"]))["process_fidelity"]
    assert data["runs"]["bootstrap_values"].shape == (6, 8, len(names))
    hits = [lo <= truth <= hi for lo, hi in
            (interval(v[:, k], p[k], 0.95, "normal", parameter_range("process_fidelity", 2))
             for v, p in zip(data["runs"]["bootstrap_values"], data["runs"]["point_figures"]))]
    assert row["coverage_process_fidelity"] == pytest.approx(np.mean(hits))
    # another construction is a new table from the same repetitions
    again = run_bench([ONE_QUBIT], tmp_path, qubits=1, shots=[2000], methods=["mle"], repeats=6,
                      bootstrap=8, seed=2, workers=1, plot=False, interval="percentile")
    assert again.new == 0 and again.rows[0]["interval"] == "percentile"


def test_mle_error_falls_as_one_over_n_and_reaches_the_bound(tmp_path):
    """Asymptotic efficiency of the maximum-likelihood estimator (common practice): for a
    full-rank channel its mean squared error falls as 1/N and approaches Tr F⁻¹."""
    out = run_bench([ONE_QUBIT], tmp_path, qubits=1, shots=[1000, 10000], methods=["mle"],
                    repeats=300, seed=11, workers=2, plot=False)
    low, high = out.rows
    assert -1.15 <= high["hs_mse_slope"] <= -0.85
    assert 0.8 <= high["hs_mse_over_crb"] <= 1.3
    # 300 repetitions: the ratio's standard error is a few per cent
    assert high["hs_mse_over_crb_se"] < 0.1


@pytest.mark.slow
def test_two_qubit_mle_error_falls_as_one_over_n_and_reaches_the_bound(tmp_path):
    """The same for a full-rank two-qubit channel (random, so away from the boundary)."""
    out = run_bench(["random:16:1"], tmp_path, shots=[1000, 10000], methods=["mle"],
                    repeats=100, seed=12, workers=2, plot=False)
    low, high = out.rows
    assert -1.15 <= high["hs_mse_slope"] <= -0.85
    assert 0.8 <= high["hs_mse_over_crb"] <= 1.3


@pytest.mark.slow
def test_a_dask_cluster_gives_the_same_table_as_local_workers(tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
    try:
        remote = run_bench([ONE_QUBIT], tmp_path / "remote", qubits=1,
                           address=cluster.scheduler_address, **SMALL)
    finally:
        cluster.close()
    local = run_bench([ONE_QUBIT], tmp_path / "local", qubits=1, workers=2, **SMALL)
    assert remote.new == local.new == 16
    assert _table(remote.csv) == _table(local.csv)


# --------------------------------------------------------------------------
# State benches
# --------------------------------------------------------------------------

ONE_QUBIT_STATE = "H+depolarizing:0.3"           # Bloch vector (0, 0, 0.7): full rank
BELL = "phi++depolarizing:0.1"                   # eigenvalues 0.925, 0.025 (three times)


def test_a_state_bench_on_one_and_two_qubits(tmp_path):
    out = run_bench(None, tmp_path / "s", states=[ONE_QUBIT_STATE, BELL, "psi-"], workers=1,
                    **SMALL)
    assert out.kind == "state" and out.new == 3 * 2 * 2 * 4
    rows = _table(out.csv)
    assert out.columns[0] == "state" and "state_fidelity_true" in out.columns
    assert "channel" not in out.columns and "process_fidelity_true" not in out.columns
    assert [(r["state"], r["qubits"], r["shots"], r["method"]) for r in rows] == [
        (c, q, s, m) for c, q in ((ONE_QUBIT_STATE, "1"), (BELL, "2"), ("psi-", "2"))
        for s in ("300.0", "3000.0") for m in ("lin", "mle")]
    by = {(r["state"], r["shots"], r["method"]): r for r in rows}
    # the bound of one qubit in the six Pauli projectors: (3 − |r|²)/(2N) (derived in
    # tests/bench/test_crb.py from the Poisson Fisher information, common practice)
    assert float(by[ONE_QUBIT_STATE, "300.0", "lin"]["hs_crb"]) == pytest.approx(
        (3 - 0.7 ** 2) / 600, rel=1e-10)
    # fidelity of a depolarised pure state to it: 1 − p(1 − 1/d) (common practice)
    assert float(by[BELL, "300.0", "mle"]["state_fidelity_true"]) == pytest.approx(
        1 - 0.1 * 3 / 4, abs=1e-12)
    assert float(by[ONE_QUBIT_STATE, "300.0", "mle"]["state_fidelity_true"]) == pytest.approx(
        1 - 0.3 / 2, abs=1e-12)
    # a pure state is on the boundary: no bound
    assert by["psi-", "300.0", "mle"]["hs_crb"] == ""
    for r in rows:
        assert float(r["hs_mse"]) > 0 and float(r["trace_distance_mean"]) > 0
        assert r["fidelity_bias"] != "" and float(r["fidelity_bias_se"]) > 0
    data = read_bench(out.h5)
    assert data["kind"] == "state" and "channels" not in data
    assert [s["spec"] for s in data["states"]] == [ONE_QUBIT_STATE, BELL, "psi-"]
    assert data["states"][1]["rho"].shape == (4, 4) and len(data["states"][1]["meas"]) == 36
    assert data["states"][0]["full_rank"] and not data["states"][2]["full_rank"]
    assert data["settings"]["kind"] == "state" and list(data["settings"]["prep"]) == []
    runs = data["runs"]
    assert runs["state"].shape == (48,) and "state" in data["bounds"]
    # the table is the mean of the file's repetitions, and the seed that of the key
    sel = (runs["state"] == 1) & (runs["shots"] == 3000.0) & (runs["method"] == "mle")
    assert float(by[BELL, "3000.0", "mle"]["hs_mse"]) == pytest.approx(
        runs["hs_error"][sel].mean(), rel=1e-15)
    k = np.flatnonzero(sel)[2]
    assert runs["seed"][k] == repetition_seed(7, BELL, 2, 3000.0, "mle", runs["repetition"][k])


def test_a_state_bench_resumes_with_the_same_numbers_for_any_workers(tmp_path):
    folder = tmp_path / "b"
    first = run_bench(None, folder, states=[BELL], workers=1, **SMALL)
    again = run_bench(None, folder, states=[BELL], workers=2, **SMALL)
    assert again.new == 0 and again.reused == first.new
    more = run_bench(None, folder, states=[BELL], workers=2, **{**SMALL, "repeats": 6})
    assert more.new == 2 * 2 * 2
    fresh = run_bench(None, tmp_path / "fresh", states=[BELL], workers=2,
                      **{**SMALL, "repeats": 6})
    assert _table(more.csv) == _table(fresh.csv)
    assert _table(again.csv) == _table(first.csv)
    # a folder of states takes no channels
    with pytest.raises(InputError, match="holds states") as err:
        run_bench([ONE_QUBIT], folder, qubits=1, workers=1, **SMALL, flags=True)
    assert err.value.key == "--channel"


@pytest.mark.parametrize("args, option, words", [
    (["--state", BELL, "--channel", ONE_QUBIT], "--state", "not both"),
    (["--state", BELL, "--prep", "pauli4"], "--prep", "no preparations"),
    (["--state", "phi++fog:0.1"], "--state", "expected STATE"),
    (["--state", BELL, "--state", BELL], "--state", "listed twice"),
    ([], "--channel", "at least one"),
])
def test_state_bench_input_errors_exit_2_naming_the_option(tmp_path, capsys, args, option,
                                                           words):
    from gatescope.cli import main

    folder = tmp_path / "x"
    assert main(["bench", *args, "--repeats", "1", "-o", str(folder)]) == 2
    err = capsys.readouterr().err
    assert option in err and words in err and "Traceback" not in err
    assert not folder.exists()


def test_state_coverage_of_the_bootstrap_intervals(tmp_path):
    out = run_bench(None, tmp_path, states=[ONE_QUBIT_STATE], shots=[2000], methods=["mle"],
                    repeats=6, bootstrap=8, seed=2, workers=2, plot=False)
    row = out.rows[0]
    assert row["bootstrap"] == 8 and 0 <= row["coverage_state_fidelity"] <= 1
    data = read_bench(out.h5)
    names = list(data["figure_names"])
    assert names[0] == "state_fidelity" and "process_fidelity" not in names
    k = names.index("purity")
    truth = dict(zip(data["states"][0]["figure_names"], data["states"][0]["figure_values"]))
    # recomputed with the library's intervals and the range of a state's purity, [1/d, 1]
    hits = [lo <= truth["purity"] <= hi for lo, hi in
            (interval(v[:, k], p[k], 0.95, "normal", parameter_range("purity", 2, "state"))
             for v, p in zip(data["runs"]["bootstrap_values"], data["runs"]["point_figures"]))]
    assert row["coverage_purity"] == pytest.approx(np.mean(hits))


def test_mle_reaches_the_state_bound(tmp_path):
    """Asymptotic efficiency of maximum likelihood (common practice): for a full-rank
    one-qubit state its mean squared error falls as 1/N and approaches Tr F⁻¹ (a state
    well inside the set: eigenvalues 0.15 and 0.85)."""
    out = run_bench(None, tmp_path, states=[ONE_QUBIT_STATE], shots=[1000, 10000],
                    methods=["mle"], repeats=400, seed=13, workers=2, plot=False)
    low, high = out.rows
    assert high["hs_crb"] is not None and np.isfinite(high["hs_crb"])
    # 400 repetitions: the ratio's standard error is about 0.04; the bounds are 4 of them
    assert high["hs_mse_over_crb_se"] < 0.06
    assert 0.84 <= high["hs_mse_over_crb"] <= 1.16
    assert -1.15 <= high["hs_mse_slope"] <= -0.85
