"""Figures of merit of a process (gatescope.merit.process): nearest unitary, local Z
phases, truth table, which figures exist for which target. (Published closed forms are
in tests/reference/test_figures_reference.py.)
"""

from __future__ import annotations

import itertools

import gatescope as gs
import numpy as np
import pytest
from gatescope import merit as fig
from gatescope.merit import process
from gatescope.channels import choi_from_unitary, compose
from gatescope.synth.noise import depolarizing
from gatescope.conventions import GATES, rz


def random_unitary(d, seed):
    rng = np.random.default_rng(seed)
    q, r = np.linalg.qr(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))
    return q * (np.diag(r) / abs(np.diag(r)))


def same_up_to_phase(a, b, tol=1e-9):
    k = np.unravel_index(np.argmax(abs(b)), b.shape)
    return np.allclose(a * (b[k] / a[k]), b, atol=tol) and abs(abs(b[k] / a[k]) - 1) < tol


def f_pro(J, u):
    """<<U|J|U>>/d² written out: Σ_ij,ab conj(U[a,i]) J[(i,a),(j,b)] U[b,j] / d²."""
    d = u.shape[0]
    J4 = J.reshape(d, d, d, d)
    return float(np.einsum("ai,iajb,bj->", u.conj(), J4, u).real / d**2)


@pytest.mark.parametrize("d, seed", [(2, 1), (4, 2), (4, 3), (8, 4)])
def test_nearest_unitary_of_a_unitary_channel_is_that_unitary(d, seed):
    u = random_unitary(d, seed)
    near, f = fig.nearest_unitary(choi_from_unitary(u))
    assert same_up_to_phase(near, u)
    assert f == pytest.approx(1.0, abs=1e-12)


def test_nearest_unitary_of_a_depolarised_gate_and_its_global_phase():
    u = np.kron(rz(0.4), rz(-1.0)) @ GATES["CNOT"]
    p = 0.1
    J = compose(choi_from_unitary(u), depolarizing(p, 4))
    near, f = fig.nearest_unitary(J, GATES["CNOT"])
    assert same_up_to_phase(near, u)
    # F_pro of (1−p)Φ_U + p·(ρ ↦ I/d) to U is (1 − p) + p/d²
    assert f == pytest.approx((1 - p) + p / 16, abs=1e-12)
    assert f == pytest.approx(f_pro(J, near), abs=1e-14)
    overlap = np.vdot(GATES["CNOT"], near)             # phase fixed by the target
    assert abs(overlap.imag) < 1e-12 and overlap.real > 0


def test_nearest_unitary_beats_every_other_candidate():
    J = compose(choi_from_unitary(GATES["CZ"]), depolarizing(0.05, 4))
    J = compose(J, choi_from_unitary(np.diag(np.exp(1j * np.array([0, 0.2, -0.1, 0.3])))))
    near, f = fig.nearest_unitary(J, GATES["CZ"])
    for seed in range(20):
        assert f >= f_pro(J, random_unitary(4, seed)) - 1e-15
    # small unitary moves away from the optimum never increase the fidelity
    rng = np.random.default_rng(0)
    for _ in range(20):
        h = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
        h = 1e-3 * (h + h.conj().T)
        w, v = np.linalg.eigh(h)
        assert f_pro(J, v @ np.diag(np.exp(1j * w)) @ v.conj().T @ near) <= f + 1e-15


def test_cz_followed_by_known_z_rotations():
    after = np.array([0.3, -0.7])
    J = choi_from_unitary(np.kron(rz(after[0]), rz(after[1])) @ GATES["CZ"])
    assert fig.process_fidelity(J, GATES["CZ"]) < 0.9
    f, a, b = fig.local_phase_fidelity(J, GATES["CZ"])
    assert f == pytest.approx(1.0, abs=1e-10)
    # CZ commutes with Z on both qubits: only before + after is determined, and the
    # documented choice puts all of it after the gate
    np.testing.assert_allclose(a, [0, 0], atol=1e-7)
    np.testing.assert_allclose(b, after, atol=1e-7)


def test_cz_with_rotations_before_and_after_and_noise():
    before, after = np.array([0.5, 0.2]), np.array([-0.4, 1.1])
    u = np.kron(rz(after[0]), rz(after[1])) @ GATES["CZ"] @ np.kron(rz(before[0]), rz(before[1]))
    p = 0.08
    J = compose(choi_from_unitary(u), depolarizing(p, 4))
    f, a, b = fig.local_phase_fidelity(J, GATES["CZ"])
    assert f == pytest.approx((1 - p) + p / 16, abs=1e-10)
    np.testing.assert_allclose(a, [0, 0], atol=1e-6)
    np.testing.assert_allclose(b, process._wrap_phase(before + after), atol=1e-6)


def test_cnot_phases_give_back_the_channel():
    # Rotations before CNOT's target do not commute with it: the reported phases may
    # differ from the ones used (documented ambiguity) but must make the same unitary.
    before, after = np.array([-3.0, 2.0]), np.array([2.5, -2.9])
    u = np.kron(rz(after[0]), rz(after[1])) @ GATES["CNOT"] @ np.kron(rz(before[0]), rz(before[1]))
    f, a, b = fig.local_phase_fidelity(choi_from_unitary(u), GATES["CNOT"])
    assert f == pytest.approx(1.0, abs=1e-10)
    assert a[0] == pytest.approx(0.0, abs=1e-7)           # Z on the control passes through
    assert same_up_to_phase(process.z_rotations(b) @ GATES["CNOT"] @ process.z_rotations(a), u, tol=1e-6)
    assert np.all((-np.pi <= np.r_[a, b]) & (np.r_[a, b] < np.pi))


def test_local_phase_fidelity_is_at_least_a_grid_search():
    J = compose(choi_from_unitary(np.kron(rz(1.9), rz(-2.4)) @ GATES["CNOT"] @
                                  np.kron(np.eye(2), rz(0.8))), depolarizing(0.2, 4))
    f, a, b = fig.local_phase_fidelity(J, GATES["CNOT"])
    grid = np.linspace(-np.pi, np.pi, 9)[:-1]
    best = max(f_pro(J, process.z_rotations([b1, b2]) @ GATES["CNOT"] @ process.z_rotations([0.0, a2]))
               for b1, b2, a2 in itertools.product(grid, repeat=3))
    assert f >= best - 1e-12
    assert f == pytest.approx(f_pro(J, process.z_rotations(b) @ GATES["CNOT"] @ process.z_rotations(a)),
                              abs=1e-13)
    assert f <= fig.nearest_unitary(J)[1] + 1e-12


def test_local_phase_fidelity_is_deterministic():
    J = compose(choi_from_unitary(np.kron(rz(0.2), rz(0.4)) @ GATES["iSWAP"]), depolarizing(0.1, 4))
    first = fig.local_phase_fidelity(J, GATES["iSWAP"])
    again = fig.local_phase_fidelity(J, GATES["iSWAP"])
    assert first[0] == again[0]
    np.testing.assert_array_equal(first[1], again[1])
    np.testing.assert_array_equal(first[2], again[2])


def test_truth_table_fidelity_by_hand():
    J = compose(choi_from_unitary(GATES["CNOT"]), depolarizing(0.1, 4))
    J = compose(J, choi_from_unitary(np.kron(np.eye(2), rz(0.3))))   # phases do not matter
    # ideal truth table of CNOT: 00→00, 01→01, 10→11, 11→10; with depolarising p the right
    # output has probability (1 − p) + p/4
    assert fig.truth_table_fidelity(J, GATES["CNOT"]) == pytest.approx(0.9 + 0.1 / 4, abs=1e-13)
    # an X error on the target with probability q swaps every output
    q = 0.3
    x2 = np.kron(np.eye(2), np.array([[0, 1], [1, 0]]))
    J = (1 - q) * choi_from_unitary(GATES["CNOT"]) + q * choi_from_unitary(x2 @ GATES["CNOT"])
    assert fig.truth_table_fidelity(J, GATES["CNOT"]) == pytest.approx(1 - q, abs=1e-13)
    assert fig.truth_table_fidelity(J, GATES["sqrtSWAP"]) is None
    assert fig.truth_table_fidelity(J, np.kron(GATES["H"], np.eye(2))) is None
    assert fig.truth_table_fidelity(J, GATES["iSWAP"]) is not None      # a permutation with phases


def test_figures_present_for_each_kind_of_target():
    J2 = compose(choi_from_unitary(GATES["CNOT"]), depolarizing(0.05, 4))
    base = ["purity", "trace", "min_eigenvalue", "unitarity", "nearest_unitary_fidelity"]
    assert list(fig.compute_figures(J2, None)) == base
    target = ["process_fidelity", "average_gate_fidelity"]
    assert list(fig.compute_figures(J2, GATES["CNOT"])) == target + base + [
        "process_fidelity_local_phases", "truth_table_fidelity", "concurrence"]
    assert "concurrence" not in fig.compute_figures(J2, GATES["SWAP"])
    assert "truth_table_fidelity" not in fig.compute_figures(J2, GATES["sqrtSWAP"])
    J1 = compose(choi_from_unitary(GATES["H"]), depolarizing(0.05, 2))
    one = fig.compute_figures(J1, GATES["H"])
    assert "truth_table_fidelity" not in one and "concurrence" not in one
    assert list(one) == [n for n in fig.FIGURE_NAMES if n in one]      # FIGURE_NAMES order


def test_unphysical_lin_estimate_still_gets_every_figure(make_experiment):
    exp, _ = make_experiment("CZ", shots=40, seed=3)
    res = gs.fit(exp, "lin")
    assert res.figures["min_eigenvalue"].value < 0            # few counts: unphysical
    for name in ("unitarity", "nearest_unitary_fidelity", "process_fidelity_local_phases",
                 "truth_table_fidelity", "concurrence"):
        assert np.isfinite(res.figures[name].value), name
    assert res.figures["process_fidelity_local_phases"].value >= \
        res.figures["process_fidelity"].value - 1e-12
