"""The diamond distance by semidefinite program (gatescope.merit.diamond): optional,
skipped with a warning without cvxpy.
"""

from __future__ import annotations

import importlib.util
import sys

import gatescope as gs
import numpy as np
import pytest
from gatescope import GatescopeWarning
from gatescope import merit as fig
from gatescope.channels import choi_from_unitary
from gatescope.conventions import GATES, rz

needs_cvxpy = pytest.mark.skipif(importlib.util.find_spec("cvxpy") is None,
                                 reason="the diamond distance needs cvxpy (the sdp extra)")


def test_diamond_is_skipped_with_a_warning_without_cvxpy(monkeypatch):
    monkeypatch.setitem(sys.modules, "cvxpy", None)              # import cvxpy raises ImportError
    J = choi_from_unitary(GATES["CZ"])
    with pytest.warns(GatescopeWarning, match="diamond distance skipped.*cvxpy"):
        figs = fig.compute_figures(J, GATES["CZ"], diamond=True)
    assert "diamond_distance" not in figs


@needs_cvxpy
def test_diamond_figure_when_asked():
    details = {}
    u = np.kron(np.eye(2), rz(0.1)) @ GATES["CNOT"]
    figs = fig.compute_figures(choi_from_unitary(u), GATES["CNOT"], diamond=True, details=details)
    # Watrous 2018, from memory: 2 sin(θ/2) for a Z rotation by θ after the gate
    assert figs["diamond_distance"] == pytest.approx(2 * np.sin(0.05), abs=1e-6)
    assert details["diamond_solver"] == "SCS" and details["diamond_status"] == "optimal"
    assert "diamond_distance" not in fig.compute_figures(choi_from_unitary(u), GATES["CNOT"])


@needs_cvxpy
def test_fit_command_with_diamond_flag(tmp_path, capsys):
    from gatescope.cli import main

    out = tmp_path / "sim"
    assert main(["simulate", "--gate", "H", "--noise", "depolarizing:0.1", "--shots", "400",
                 "--seed", "2", "-o", str(out)]) == 0
    assert main(["fit", str(out / "experiment.toml"), "--diamond", "-o", str(tmp_path / "r.h5")]) == 0
    res = gs.load_result(tmp_path / "r.h5")
    # the true channel is at 1.5·p = 0.15 from H: depolarising p is the Pauli channel
    # px = py = pz = p/4, at 2(px + py + pz) from the identity (Watrous 2018, from memory),
    # and the distance is unitarily invariant; 400 counts per basis leave a few hundredths
    assert res.figures["diamond_distance"].value == pytest.approx(0.15, abs=0.05)
    assert res.figure_details["diamond_program"] == "trace-preserving"
    capsys.readouterr()
    assert main(["show", str(tmp_path / "r.h5")]) == 0
    assert "diamond distance to target" in capsys.readouterr().out
