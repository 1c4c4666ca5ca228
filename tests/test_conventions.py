"""Labels, Pauli order, gates and wave plates (gatescope.conventions; the README's Conventions)."""

from __future__ import annotations

import numpy as np
import pytest

from gatescope import conventions as cv


def test_label_spellings_split_into_the_same_parts():
    known = set(cv.BUILTIN_LABELS)
    assert cv.split_label("HD", 2, known) == ["H", "D"]
    assert cv.split_label("+i 0", 2, known) == ["+i", "0"]
    assert cv.split_label("+i,0", 2, known) == ["+i", "0"]
    assert cv.split_label("+i", 1, known) == ["+i"]
    with pytest.raises(ValueError, match="names 1 qubit"):
        cv.split_label("H", 2, known)
    with pytest.raises(ValueError, match="unknown state label 'Q'"):
        cv.split_label("HQ", 2, known)


def test_handedness_swaps_r_and_l_only():
    a, b = cv.builtin_states("H-iV"), cv.builtin_states("H+iV")
    assert np.allclose(a["R"], b["L"]) and np.allclose(a["L"], b["R"])
    for alias in ("+i", "-i", "0", "1", "+", "-"):
        assert np.allclose(a[alias], b[alias])
    # under the default sign +i is L and -i is R (the README's Conventions)
    assert np.allclose(a["+i"], a["L"]) and np.allclose(a["-i"], a["R"])
    with pytest.raises(ValueError):
        cv.builtin_states("left")


def test_pauli_order_is_lexicographic_with_qubit_one_first():
    assert cv.pauli_labels(2)[:6] == ["II", "IX", "IY", "IZ", "XI", "XX"]
    basis = cv.pauli_basis(2)
    assert np.allclose(basis[cv.pauli_labels(2).index("XZ")],
                       np.kron([[0, 1], [1, 0]], np.diag([1, -1])))
    assert not basis.flags.writeable


@pytest.mark.parametrize("name", cv.GATE_NAMES)
def test_named_gates_are_unitary_copies(name):
    u = cv.named_gate(name)
    cv.check_unitary(u)
    u[0, 0] = 99.0                          # a copy: the registry is not changed
    assert cv.GATES[name][0, 0] != 99.0


def test_check_unitary_refuses_non_unitaries():
    with pytest.raises(ValueError, match="not unitary"):
        cv.check_unitary(np.diag([1.0, 1.1]))
    with pytest.raises(ValueError, match="square"):
        cv.check_unitary(np.ones((2, 3)))
    with pytest.raises(ValueError, match="power of two"):
        cv.check_unitary(np.eye(3))


def test_half_wave_plate_at_zero_acts_as_pauli_z():
    # H → H, V → −V, D ↔ A up to a global phase (common practice)
    w = cv.half_wave(0.0)
    z = np.diag([1, -1])
    assert abs(abs(np.trace(z.conj().T @ w)) - 2) < 1e-12
    # a plate turned by 180° is the same plate
    assert np.allclose(cv.wave_plate(0.3 + np.pi, 1.1), cv.wave_plate(0.3, 1.1))


def test_quarter_wave_plate_at_45_degrees_makes_circular_light():
    # H through a QWP at 45°: circular polarisation, |<R|ψ>| or |<L|ψ>| = 1 (common practice)
    psi = cv.quarter_wave(np.pi / 4) @ np.array([1, 0])
    states = cv.builtin_states()
    assert max(abs(np.vdot(states["R"], psi)), abs(np.vdot(states["L"], psi))) == \
        pytest.approx(1.0, abs=1e-12)


def test_bloch_density_and_kron_order():
    rho = cv.bloch_density([0, 0, 1])
    assert np.allclose(rho, np.diag([1, 0]))            # (0, 0, 1) is H
    assert np.allclose(cv.kron_all([np.diag([1, 0]), np.diag([0, 1])]), np.diag([0, 1, 0, 0]))
    assert cv.n_qubits_of(8) == 3
