"""Running a batch (gatescope.batch.run): failures as data, the same numbers for any
number of workers, order or subset, resuming, watching, stopping on a signal, surviving
kill -9, and a real dask cluster on 127.0.0.1."""

from __future__ import annotations

import csv
import io
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import gatescope as gs
import numpy as np
import pytest
from gatescope.batch.discover import result_path
from gatescope.batch.log import BatchLog
from gatescope.batch.run import (SEED_RULE, Batch, Settings, experiment_seed, fit_task,
                                 run_batch)
from support import experiment_tree, simulated_experiment

ENGINE = str(Path(gs.__file__).resolve().parents[1])


def table(outdir) -> list[dict]:
    with open(Path(outdir) / "summary.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def without_times(rows):
    """The table without its wall times, the one column that differs between runs."""
    return [{k: v for k, v in row.items() if k != "seconds"} for row in rows]


def events(outdir) -> list[tuple[str, str]]:
    """(event, text) of every line of batch.log."""
    out = []
    for line in (Path(outdir) / "batch.log").read_text().splitlines():
        _, event, text = line.split(maxsplit=2)
        out.append((event, text))
    return out


def batch(paths, outdir, **kw):
    kw.setdefault("workers", 1)
    kw.setdefault("seed", 11)
    return run_batch(paths, outdir, stream=io.StringIO(), out=io.StringIO(), **kw)


def stamps(outdir) -> dict:
    """Inode and modification time of every result file: unchanged means not rewritten."""
    return {p.relative_to(outdir).as_posix(): (p.stat().st_ino, p.stat().st_mtime_ns)
            for p in Path(outdir).rglob("*.h5")}


# --------------------------------------------------------------------------
# Seeds and settings
# --------------------------------------------------------------------------

def test_experiment_seeds_follow_the_documented_rule():
    import hashlib

    name = "night3/delay_120"
    digest = hashlib.sha256(name.encode("utf-8")).digest()
    words = [int.from_bytes(digest[4 * i:4 * i + 4], "little") for i in range(8)]
    # numpy's SeedSequence as its documentation describes it, with the rule's entropy
    expected = int(np.random.SeedSequence([5, *words]).generate_state(1, np.uint64)[0]) % 2**63
    assert experiment_seed(5, name) == expected
    assert "SHA-256 of the name" in SEED_RULE
    seeds = {experiment_seed(5, n) for n in ("a", "b", "a/b", "b/a")}
    assert len(seeds) == 4 and all(0 <= s < 2**63 for s in seeds)
    assert experiment_seed(6, "a") != experiment_seed(5, "a")


def test_settings_compare_with_what_a_result_recorded():
    given = Settings(method="mle", bootstrap=20, seed=3, seed_given=True)
    recorded = given.recorded()
    assert given.differences(recorded) == []
    assert given.differences({**recorded, "batch_bootstrap": 50}) == ["bootstrap 50 -> 20"]
    assert given.differences({**recorded, "batch_seed": 4}) == ["seed 4 -> 3"]
    assert given.differences({}) != []                      # a result of `gatescope fit`
    drawn = Settings(method="mle", bootstrap=20, seed=99, seed_given=False)
    assert drawn.differences(recorded) == []                # any seed, when none is given


# --------------------------------------------------------------------------
# The table, failures, numbers
# --------------------------------------------------------------------------

def write_bad(root: Path) -> dict:
    """Malformed experiments; returns name -> a word its message must contain."""
    good_csv = "prep,meas,counts\nH,H,9\nH,V,1\nD,D,8\n"
    cases = {
        "bad/negative": ('qubits = 1\ncounts = "counts.csv"\n',
                         "prep,meas,counts\nH,H,9\nH,V,-3\n", "line 3"),
        "bad/unknown_key": ('qubits = 1\ncounts = "counts.csv"\nlaser = "on"\n', good_csv,
                            "laser"),
        "bad/no_counts": ('qubits = 1\ncounts = "counts.csv"\n', None, "file not found"),
        # names in [conditions] are free (even "qubits"); a boolean is not a condition
        "bad/condition": ('qubits = 1\ncounts = "counts.csv"\n[conditions]\ndelay_ps = 30\n'
                          'qubits = 1\nflag = true\n', good_csv, "line 6, key 'conditions.flag'"),
    }
    for name, (toml, counts, _) in cases.items():
        folder = root / name
        folder.mkdir(parents=True)
        (folder / "experiment.toml").write_text(toml)
        if counts is not None:
            (folder / "counts.csv").write_text(counts)
    return {name: word for name, (_, _, word) in cases.items()}


def test_good_and_malformed_experiments(tmp_path):
    experiment_tree(tmp_path / "data", ["good/a", "good/b"])
    bad = write_bad(tmp_path / "data")
    out = tmp_path / "out"
    outcome = batch([tmp_path / "data"], out, bootstrap=5)
    assert outcome.exit_status == 1
    assert (outcome.done, outcome.failed, outcome.table_failed) == (2, 4, 4)
    rows = {r["name"]: r for r in table(out)}
    assert sorted(rows) == sorted(["good/a", "good/b", *bad])
    for name, word in bad.items():
        assert rows[name]["status"] == "failed"
        assert word in rows[name]["error"] and str(tmp_path / "data" / name) in rows[name]["error"]
        assert rows[name]["purity"] == ""
        assert not result_path(out, name).exists()
    for name in ("good/a", "good/b"):
        assert rows[name]["status"] == "done" and rows[name]["error"] == ""
        res = gs.load_result(result_path(out, name))
        assert float(rows[name]["purity"]) == res.figures["purity"].value
        assert float(rows[name]["purity_ci_low"]) == res.figures["purity"].ci[0]
    log = events(out)
    failed = [text for event, text in log if event == "failed"]
    assert sorted(t.split(":")[0] for t in failed) == sorted(bad)
    assert any(e == "done" and t.startswith("good/a: process_fidelity ") for e, t in log)
    assert log[0][0] == "started" and log[-1][0] == "finished"


def test_conditions_reach_the_table_and_the_result(tmp_path):
    experiment_tree(tmp_path / "data", ["d0", "d1", "d2"])
    batch([tmp_path / "data"], tmp_path / "out")
    rows = table(tmp_path / "out")
    assert [(r["name"], r["delay_ps"], r["run"]) for r in rows] == \
        [("d0", "0", "night 1"), ("d1", "10", "night 1"), ("d2", "20", "night 1")]
    assert gs.load_result(tmp_path / "out" / "d2.h5").conditions == \
        {"delay_ps": 20, "run": "night 1"}


def test_the_same_numbers_for_any_worker_count_order_or_subset(tmp_path):
    names = ["c", "a", "d", "b"]
    paths = experiment_tree(tmp_path / "data", names)
    batch([tmp_path / "data"], tmp_path / "w1", bootstrap=10, workers=1)
    batch([tmp_path / "data"], tmp_path / "w2", bootstrap=10, workers=2)
    one = without_times(table(tmp_path / "w1"))
    assert one == without_times(table(tmp_path / "w2"))
    assert [r["name"] for r in one] == sorted(names)
    # one experiment on its own (same name "c"): the same row as inside the whole batch
    batch([paths[0]], tmp_path / "alone", bootstrap=10)
    [alone] = without_times(table(tmp_path / "alone"))
    assert alone == next(r for r in one if r["name"] == "c")


def test_depolarised_gate_fidelity_matches_its_formula(tmp_path):
    # exact (rounded expected) counts of CZ followed by depolarising noise of strength p
    p, d = 0.1, 4
    simulated_experiment(tmp_path / "data" / "cz", f"CZ+depolarizing:{p}", shots=1e6,
                         exact=True)
    batch([tmp_path / "data"], tmp_path / "out")
    [row] = table(tmp_path / "out")
    # F_pro of (1-p)·U + p·(complete depolarisation) to U is (1 - p) + p/d²: from memory,
    # following from F_pro = <<U|J|U>>/d² (Gilchrist, Langford & Nielsen, Phys. Rev. A 71,
    # 062310 (2005)); average gate fidelity (d·F_pro + 1)/(d + 1) (Horodecki, Horodecki &
    # Horodecki, Phys. Rev. A 60, 1888 (1999); Nielsen, Phys. Lett. A 303, 249 (2002)).
    # Tolerance: rounding 10⁶-count rows to whole numbers moves the estimate by ~1e-6.
    f_pro = (1 - p) + p / d**2
    assert float(row["process_fidelity"]) == pytest.approx(f_pro, abs=1e-5)
    assert float(row["average_gate_fidelity"]) == pytest.approx((d * f_pro + 1) / (d + 1),
                                                                abs=1e-5)


def test_an_unexpected_error_in_one_fit_is_recorded_and_the_batch_goes_on(tmp_path,
                                                                          monkeypatch):
    import gatescope.batch.run as run

    experiment_tree(tmp_path / "data", ["a", "b", "c"])
    real_fit = run.fit

    def fit_failing_for_b(experiment, *args, **kw):
        if experiment.path.parent.name == "b":
            raise ZeroDivisionError("simulated bug")
        return real_fit(experiment, *args, **kw)

    monkeypatch.setattr(run, "fit", fit_failing_for_b)
    outcome = batch([tmp_path / "data"], tmp_path / "out")
    assert (outcome.done, outcome.failed, outcome.exit_status) == (2, 1, 1)
    error = {r["name"]: r["error"] for r in table(tmp_path / "out")}["b"]
    assert error.startswith("ZeroDivisionError: simulated bug (at test_run.py:")


def test_a_runner_that_fails_stops_the_batch_with_a_way_to_resume(tmp_path, monkeypatch):
    from concurrent.futures.process import BrokenProcessPool

    import gatescope.batch.run as run

    experiment_tree(tmp_path / "data", ["a", "b", "c"])

    class DyingRunner(run.Runner):
        def map(self, task, items, *, chunk=None):
            items = list(items)
            yield 0, task(self.shared, items[0])
            raise BrokenProcessPool("a worker process died (simulated)")

    monkeypatch.setattr(run, "Runner", DyingRunner)
    outcome = batch([tmp_path / "data"], tmp_path / "out", command_line="gatescope batch x")
    assert outcome.exit_status == 1 and outcome.done == 1
    assert outcome.stopped_by.startswith("a failure of the runner (BrokenProcessPool: a worker")
    event, text = events(tmp_path / "out")[-1]
    assert event == "stopped" and "2 unfinished" in text and "resume with: gatescope batch x" in text
    assert [r["name"] for r in table(tmp_path / "out")] == ["a"]


# --------------------------------------------------------------------------
# Resuming
# --------------------------------------------------------------------------

def test_resume_keeps_what_matches_and_redoes_what_changed(tmp_path):
    paths = experiment_tree(tmp_path / "data", ["a", "b", "c"])
    out = tmp_path / "out"
    batch([tmp_path / "data"], out, bootstrap=5)
    first, rows = stamps(out), without_times(table(out))
    # a temporary file left by a killed batch is cleared away
    (out / ".a.h5.abc123.tmp").write_text("half a file")
    again = batch([tmp_path / "data"], out, bootstrap=5)
    assert (again.done, again.skipped) == (0, 3)
    assert stamps(out) == first and without_times(table(out)) == rows
    assert not list(out.glob(".*.tmp"))
    assert ("note", "removed 1 temporary file(s) of an interrupted batch") in events(out)
    # a changed input: that experiment alone is fitted again
    counts = paths[1].parent / "counts.csv"
    counts.write_text(counts.read_text().replace("\nH,H,", "\nH,H,1", 1))
    changed = batch([tmp_path / "data"], out, bootstrap=5)
    assert (changed.done, changed.skipped) == (1, 2)
    now = stamps(out)
    assert now["a.h5"] == first["a.h5"] and now["c.h5"] == first["c.h5"]
    assert now["b.h5"] != first["b.h5"]
    assert ("redo", "b: input changed") in events(out)
    # no seed given: the results of any seed are kept
    assert batch([tmp_path / "data"], out, bootstrap=5, seed=None).skipped == 3
    # another setting: everything again, and the log says why
    more = batch([tmp_path / "data"], out, bootstrap=6)
    assert (more.done, more.skipped) == (3, 0)
    assert ("redo", "a: bootstrap 5 -> 6") in events(out)
    # --force: everything again, although everything matches
    forced = batch([tmp_path / "data"], out, bootstrap=6, force=True)
    assert (forced.done, forced.skipped) == (3, 0)


def test_a_result_from_another_command_is_refitted(tmp_path):
    [path] = experiment_tree(tmp_path / "data", ["a"])
    gs.fit(gs.read_experiment(path)).save(tmp_path / "out" / "a.h5")
    outcome = batch([tmp_path / "data"], tmp_path / "out")
    assert outcome.done == 1
    assert any(e == "redo" and t.startswith("a: method unrecorded") for e, t in
               events(tmp_path / "out"))


def test_nothing_to_fit_is_an_input_error(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(gs.InputError, match="no experiment.toml found"):
        batch([tmp_path / "empty"], tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_bad_options_are_refused_before_anything_is_written(tmp_path):
    experiment_tree(tmp_path / "data", ["a"])
    for kw, key in ((dict(bootstrap=1), "--bootstrap"), (dict(watch=-1.0), "--watch"),
                    (dict(workers=0), "--workers"), (dict(method="mla"), "--method"),
                    (dict(seed=-2), "--seed")):
        with pytest.raises(gs.InputError) as err:
            run_batch([tmp_path / "data"], tmp_path / "out", command_line="gatescope batch",
                      stream=io.StringIO(), out=io.StringIO(), **kw)
        assert err.value.key == key
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------
# Watching, in this process: one look at a time
# --------------------------------------------------------------------------

def test_a_look_lets_an_experiment_being_written_wait(tmp_path):
    experiment_tree(tmp_path / "data", ["old"])
    os.utime(tmp_path / "data" / "old" / "counts.csv", (time.time() - 600,) * 2)
    os.utime(tmp_path / "data" / "old" / "experiment.toml", (time.time() - 600,) * 2)
    experiment_tree(tmp_path / "data", ["new"])            # written just now
    out = tmp_path / "out"
    with BatchLog(out / "batch.log") as log:
        b = Batch([tmp_path / "data"], out, Settings(seed=1), workers=1, address=None,
                  force=False, watch=60.0, log=log, stream=io.StringIO())
        jobs = b.look()
        assert [job.name for job, _ in jobs] == ["old"]
        b.seen.update((job.name, key) for job, key in jobs)     # as if fitted
        assert [job.name for job, _ in b.look()] == ["new"]     # unchanged since: settled
    assert ("waiting", "new: an input file changed within the last 60 s; fitted at a later "
                       "look") in events(out)


def test_a_task_returns_failures_and_warnings_instead_of_raising(tmp_path):
    write_bad(tmp_path)
    from gatescope.batch.run import Job

    out = fit_task(Settings(seed=1), Job("x", str(tmp_path / "bad/negative/experiment.toml"), 1))
    assert out.result is None and "line 3" in out.error
    # a fit that warns (two preparations leave part of the process undetermined)
    folder = tmp_path / "thin"
    folder.mkdir()
    (folder / "experiment.toml").write_text('qubits = 1\ncounts = "counts.csv"\n')
    (folder / "counts.csv").write_text("prep,meas,counts\nH,H,90\nH,V,10\nV,V,80\nV,H,20\n")
    out = fit_task(Settings(seed=1), Job("thin", str(folder / "experiment.toml"), 1))
    assert out.result is not None and out.error is None
    assert any("not probed" in w or "undetermined" in w for w in out.warnings), out.warnings


class Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_is_a_bar_on_a_terminal_and_log_lines_elsewhere(tmp_path):
    experiment_tree(tmp_path / "data", ["a", "b"])
    write_bad(tmp_path / "data")
    screen = Terminal()
    run_batch([tmp_path / "data"], tmp_path / "tty", workers=1, seed=1, stream=screen,
              out=io.StringIO())
    text = screen.getvalue()
    assert "batch: 100%" in text and "done 2, failed 4, skipped 0" in text
    assert "gatescope batch: 2 fitted, 4 failed, 0 skipped" in text
    assert "done     a:" not in text                       # the log lines stay in the log
    piped = io.StringIO()
    run_batch([tmp_path / "data"], tmp_path / "pipe", workers=1, seed=1, stream=piped,
              out=io.StringIO())
    assert piped.getvalue() == (tmp_path / "pipe" / "batch.log").read_text()


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="signals: POSIX")
def test_ctrl_c_stops_the_batch_and_says_how_to_resume(tmp_path):
    import threading

    experiment_tree(tmp_path / "data", ["quick"])
    experiment_tree(tmp_path / "data", ["slow"], spec="CZ", n_qubits=2, conditions=False)
    out, stream = tmp_path / "out", io.StringIO()
    def interrupt():        # SIGINT while the long second experiment is fitted in this process
        wait_for(lambda: (out / "quick.h5").exists(), 60, "the first result")
        time.sleep(0.5)
        os.kill(os.getpid(), signal.SIGINT)

    thread = threading.Thread(target=interrupt, daemon=True)
    thread.start()
    t0 = time.monotonic()
    outcome = run_batch([tmp_path / "data"], out, workers=1, seed=1, bootstrap=300,
                        command_line="gatescope batch data -o out", stream=stream,
                        out=io.StringIO())
    thread.join(5)
    assert time.monotonic() - t0 < 60
    assert outcome.stopped_by == "SIGINT" and outcome.exit_status == 1
    assert (out / "quick.h5").exists() and not (out / "slow.h5").exists()
    assert not (out / "batch.lock").exists() and not list(out.rglob(".*.tmp"))
    event, text = events(out)[-1]
    assert event == "stopped" and "1 unfinished" in text
    assert "resume with: gatescope batch data -o out" in text
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler     # restored


# --------------------------------------------------------------------------
# The command in a subprocess: kill -9, the lock, watching, SIGTERM, dask
# --------------------------------------------------------------------------

def command(*args):
    env = dict(os.environ, PYTHONPATH=ENGINE)
    return [sys.executable, "-m", "gatescope", "batch", *map(str, args)], env


def wait_for(condition, seconds, what):
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if condition():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


def results(outdir) -> list[Path]:
    return sorted(p for p in Path(outdir).rglob("*.h5") if not p.name.startswith("."))


def children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (Linux /proc)."""
    out = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            out.append(int(stat.parent.name))
    return out


def alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="kill -9 and /proc: Linux")
def test_kill_minus_nine_then_resume_equals_an_uninterrupted_run(tmp_path):
    names = [f"run{k:02d}" for k in range(20)]
    experiment_tree(tmp_path / "data", names, spec="CZ+depolarizing:0.05", n_qubits=2,
                    shots=300)
    args = ["--workers", "2", "--bootstrap", "20", "--seed", "7"]
    cmd, env = command(tmp_path / "data", "-o", tmp_path / "out", *args)
    first = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        wait_for(lambda: len(results(tmp_path / "out")) >= 4, 300, "four results")
        first.send_signal(signal.SIGKILL)
        first.wait(30)
    finally:
        first.kill()
    present = results(tmp_path / "out")
    assert 4 <= len(present) < 20, "the batch was not killed part-way"
    for path in present:                       # complete and readable, every one
        res = gs.load_result(path)
        assert np.isfinite(res.figures["process_fidelity"].value)
        assert res.bootstrap.samples == 20
    before = stamps(tmp_path / "out")
    rerun = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)
    assert rerun.returncode == 0, rerun.stderr
    assert "took over the lock of a batch that is no longer running" in rerun.stderr
    assert f"skipped  {present[0].stem}: result matches" in rerun.stderr
    after = stamps(tmp_path / "out")
    assert sorted(after) == [f"{n}.h5" for n in names]
    assert all(after[key] == value for key, value in before.items())   # not fitted again
    assert not [p for p in (tmp_path / "out").rglob(".*") if p.name != "batch.lock"]
    assert not (tmp_path / "out" / "batch.lock").exists()
    cmd, env = command(tmp_path / "data", "-o", tmp_path / "whole", *args)
    whole = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)
    assert whole.returncode == 0, whole.stderr
    resumed = without_times(table(tmp_path / "out"))
    assert len(resumed) == 20 and resumed == without_times(table(tmp_path / "whole"))


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="signals and /proc: Linux")
def test_watch_lock_and_sigterm(tmp_path):
    experiment_tree(tmp_path / "data", ["first"], conditions=False)
    out = tmp_path / "out"
    cmd, env = command(tmp_path / "data", "-o", out, "--watch", "2", "--workers", "2",
                       "--bootstrap", "400", "--seed", "3")
    log = open(tmp_path / "stderr.txt", "w")
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=log)
    try:
        wait_for(lambda: (out / "first.h5").exists(), 120, "the first result")
        # a second batch on the same folder is refused while this one runs
        second = subprocess.run(command(tmp_path / "data", "-o", out)[0], env=env,
                                capture_output=True, text=True, timeout=60)
        assert second.returncode == 2
        assert f"another batch is writing here (pid {proc.pid} on host" in second.stderr
        # an experiment added while the batch watches is fitted
        experiment_tree(tmp_path / "data", ["second"], conditions=False)
        wait_for(lambda: (out / "second.h5").exists(), 120, "the added experiment's result")
        # written less than 2 s before the next look: it waited one look
        assert ("waiting", "second: an input file changed within the last 2 s; fitted at "
                           "a later look") in events(out)
        # a long one: stop the batch while its workers fit it
        experiment_tree(tmp_path / "data", ["long"], spec="CZ+depolarizing:0.05", n_qubits=2,
                        conditions=False)
        wait_for(lambda: len(children(proc.pid)) >= 1, 60, "workers")
        workers = children(proc.pid)
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(60) == 0             # watching ends by a signal; nothing failed
    finally:
        proc.kill()
        log.close()
    wait_for(lambda: not any(alive(pid) for pid in workers), 10, "the workers to end")
    stderr = (tmp_path / "stderr.txt").read_text()
    assert "stopped by SIGTERM" in stderr and "resume with: gatescope batch" in stderr
    assert not (out / "batch.lock").exists() and not (out / "long.h5").exists()
    assert not list(out.rglob(".*.tmp"))
    assert [r["name"] for r in table(out)] == ["first", "second"]


def test_a_dask_cluster_gives_the_same_table_as_local_workers(tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    experiment_tree(tmp_path / "data", ["a", "b", "c"])
    write_bad(tmp_path / "data")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
    try:
        remote = batch([tmp_path / "data"], tmp_path / "remote", bootstrap=10,
                       dask=cluster.scheduler_address)
    finally:
        cluster.close()
    local = batch([tmp_path / "data"], tmp_path / "local", bootstrap=10, workers=2)
    assert remote.exit_status == local.exit_status == 1          # the malformed ones
    assert (remote.done, remote.failed) == (local.done, local.failed) == (3, 4)
    assert without_times(table(tmp_path / "remote")) == without_times(table(tmp_path / "local"))
    assert "dask scheduler tcp://127.0.0.1:" in events(tmp_path / "remote")[0][1]
