"""Atomic writes (gatescope.fileio): a save leaves only its file; a failure or a crash
half-way leaves no partial file and keeps the old one.
"""

from __future__ import annotations

import dataclasses

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
