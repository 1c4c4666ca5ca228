"""Atomic writes (gatescope.fileio): a save leaves only its file; a failure or a crash
half-way leaves no partial file and keeps the old one.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import gatescope as gs
import pytest
from gatescope import result_file
from support import simulated_experiment


@pytest.fixture(scope="module")
def cz_fit(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cz")
    exp, true_choi = simulated_experiment(folder / "data", "CZ", shots=1000, seed=11)
    res = gs.fit(exp, "mle", seed=5)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


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
    assert sorted(p.parent.name + "/" + p.name.split(".tmp")[0].rsplit(".", 1)[0] for p in found) \
        == ["sub/.a.h5", f"{tmp_path.name}/.summary.csv"]
    assert all(p.read_text() == "half a file" for p in found)
