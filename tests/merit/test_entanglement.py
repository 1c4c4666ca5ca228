"""The concurrence of the output for the most entangling product input
(gatescope.merit.entanglement).
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope import merit as fig
from gatescope.channels import choi_from_unitary, compose
from gatescope.synth.noise import depolarizing
from gatescope.conventions import GATES


def test_entangling_input_of_the_named_gates():
    assert fig.entangling_input(GATES["CZ"])[0] == "D D"
    assert fig.entangling_input(GATES["CNOT"])[0] == "D H"
    assert fig.entangling_input(GATES["sqrtSWAP"])[0] == "H V"
    for name in ("CZ", "CNOT", "iSWAP", "sqrtSWAP"):
        assert fig.entangling_input(GATES[name])[2] == pytest.approx(1.0, abs=1e-12), name
    assert fig.entangling_input(GATES["SWAP"]) is None          # maps products to products
    assert fig.entangling_input(np.kron(GATES["H"], GATES["S"])) is None
    assert fig.entangling_input(GATES["X"]) is None


def test_concurrence_figure_of_a_depolarised_cz():
    # CZ|DD> is maximally entangled; depolarising p makes it (1−p)|ψ><ψ| + p I/4, whose
    # concurrence is max(0, 1 − 3p/2) (Wootters 1998, from memory, for Werner states)
    p = 0.2
    J = compose(choi_from_unitary(GATES["CZ"]), depolarizing(p, 4))
    details = {}
    figs = fig.compute_figures(J, GATES["CZ"], details=details)
    assert figs["concurrence"] == pytest.approx(1 - 1.5 * p, abs=1e-7)
    assert details["concurrence_input"] == "D D"
    assert details["concurrence_ideal"] == pytest.approx(1.0, abs=1e-12)
