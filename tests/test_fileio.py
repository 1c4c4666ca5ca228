"""Atomic writes (gatescope.fileio): a save leaves only its file; a failure or a crash
half-way leaves no partial file and keeps the old one.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import gatescope as gs
import pytest
from gatescope import result_file


def test_save_leaves_only_the_result_file(cz_fit, tmp_path):
    _, res, _ = cz_fit
    out = tmp_path / "folder" / "r.h5"
    res.save(out)
    assert sorted(p.name for p in out.parent.iterdir()) == ["r.h5"]
    assert gs.load_result(out).method == "mle"


def test_a_failing_save_leaves_no_file(cz_fit, tmp_path):
    _, res, _ = cz_fit
    bad = dataclasses.replace(res, provenance={**res.provenance, "broken": {"a dict": "h5py cannot store"}})
    out = tmp_path / "r.h5"
    with pytest.raises(TypeError):              # h5py cannot store a dict as an attribute
        bad.save(out)
    assert list(tmp_path.iterdir()) == []


def test_a_crash_half_way_leaves_no_file_and_keeps_the_old_one(cz_fit, tmp_path, monkeypatch):
    _, res, _ = cz_fit
    out = tmp_path / "r.h5"
    res.save(out)
    before = out.read_bytes()

    def half_then_crash(f, r):
        f.attrs["format"] = "gatescope.result"
        f.create_group("input")
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(result_file, "_write", half_then_crash)
    with pytest.raises(RuntimeError, match="simulated"):
        res.save(out)
    with pytest.raises(RuntimeError, match="simulated"):
        res.save(tmp_path / "new.h5")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.h5"]
    assert out.read_bytes() == before


def test_a_save_killed_half_way_leaves_a_temporary_file_the_next_save_removes(cz_fit, tmp_path):
    # a reproducer: a kill during the save left ".r.h5.XXXX.tmp" behind for good
    import os
    import signal
    import subprocess
    import sys
    import time

    _, res, path = cz_fit
    out = tmp_path / "r.h5"
    script = (
        "import sys, time\n"
        "import gatescope as gs\n"
        "from gatescope import result_file\n"
        "res = gs.load_result(sys.argv[1])\n"
        "def stall(f, r):\n"
        "    f.attrs['format'] = 'gatescope.result'\n"
        "    f.flush()\n"
        "    time.sleep(60)\n"
        "result_file._write = stall\n"
        "res.save(sys.argv[2])\n")
    proc = subprocess.Popen([sys.executable, "-c", script, str(path), str(out)])
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and not list(tmp_path.glob(".r.h5.*.tmp")):
        time.sleep(0.1)
    left = list(tmp_path.glob(".r.h5.*.tmp"))
    assert left, "the save did not start"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    assert list(tmp_path.glob(".r.h5.*.tmp")) == left          # the kill left it behind
    res.save(out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.h5"]


def test_a_temporary_file_of_a_running_writer_is_kept(tmp_path):
    import os

    from gatescope.fileio import _host, atomic_write_text, remove_stale_temporaries

    mine = tmp_path / f".r.h5.{_host()}.{os.getppid()}.abcdefgh.tmp"      # a live process
    other_host = tmp_path / ".r.h5.elsewhere.999999.abcdefgh.tmp"
    mine.write_text("x")
    other_host.write_text("x")
    assert remove_stale_temporaries(tmp_path / "r.h5") == []
    atomic_write_text(tmp_path / "r.h5", "data")
    assert mine.exists() and other_host.exists()


@pytest.mark.parametrize("case, words", [
    ("exists", "add --force"),
    ("folder", "is a folder"),
    ("under-a-file", "is a file, not a folder"),
    ("input", "input of this result"),
    ("read-only-folder", "no permission"),
])
def test_check_output_refuses_before_any_work(tmp_path, case, words):
    import os

    from gatescope.fileio import check_output

    (tmp_path / "r.h5").write_text("old")
    (tmp_path / "counts.csv").write_text("prep,meas,counts\n")
    locked = tmp_path / "locked"
    locked.mkdir()
    path = {"exists": tmp_path / "r.h5", "folder": tmp_path, "under-a-file": tmp_path / "r.h5" / "x.h5",
            "input": tmp_path / "counts.csv", "read-only-folder": locked / "r.h5"}[case]
    if case == "read-only-folder":
        os.chmod(locked, 0o500)
        if os.access(locked, os.W_OK):             # running as a user that ignores permissions
            pytest.skip("permissions are not enforced for this user")
    try:
        with pytest.raises(gs.InputError, match=words):
            check_output(path, inputs=(tmp_path / "counts.csv",), force=case == "input")
    finally:
        os.chmod(locked, 0o700)
    assert check_output(tmp_path / "r.h5", force=True) == tmp_path / "r.h5"
    assert check_output(tmp_path / "new" / "deeper" / "r.h5") == tmp_path / "new" / "deeper" / "r.h5"


def test_leftover_temporaries_are_found_by_target_name(tmp_path):
    import os
    import signal
    import subprocess
    import sys

    from gatescope.fileio import leftover_temporaries

    # a process killed while writing leaves the writer's temporary file behind
    kill = ("import os, sys\n"
            "from gatescope.fileio import atomic_path\n"
            "writer = atomic_path(sys.argv[1])\n"
            "writer.__enter__().write_text('half a file')\n"
            "os.kill(os.getpid(), 9)\n")
    for target in (tmp_path / "sub" / "a.h5", tmp_path / "summary.csv", tmp_path / "notes.txt"):
        run = subprocess.run([sys.executable, "-c", kill, str(target)],
                             env=dict(os.environ, PYTHONPATH=str(Path(gs.__file__).parents[1])))
        assert run.returncode == -signal.SIGKILL and not target.exists()
    found = leftover_temporaries(tmp_path, ["*.h5", "summary.csv"])
    # .NAME.HOST.PID.XXXXXXXX.tmp (gatescope.fileio)
    assert sorted((p.parent.name, p.name.split(".")[1] + "." + p.name.split(".")[2]) for p in found) \
        == sorted([("sub", "a.h5"), (tmp_path.name, "summary.csv")])
    assert all(p.read_text() == "half a file" for p in found)
