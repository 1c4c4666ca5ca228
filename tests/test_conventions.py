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


def test_named_states_follow_the_readme():
    # README, Conventions: phi± = (HH ± VV)/√2, psi± = (HV ± VH)/√2, qubit 1 first, H = |0>
    from gatescope.conventions import NAMED_STATES, builtin_states, named_state

    states = builtin_states()
    h, v = states["H"], states["V"]
    hh, hv, vh, vv = (np.kron(x, y) for x, y in ((h, h), (h, v), (v, h), (v, v)))
    sq = 1 / np.sqrt(2)
    np.testing.assert_allclose(named_state("phi+", 2), (hh + vv) * sq, atol=1e-15)
    np.testing.assert_allclose(named_state("phi-", 2), (hh - vv) * sq, atol=1e-15)
    np.testing.assert_allclose(named_state("psi+", 2), (hv + vh) * sq, atol=1e-15)
    np.testing.assert_allclose(named_state("psi-", 2), (hv - vh) * sq, atol=1e-15)
    np.testing.assert_allclose(named_state("HV", 2), hv, atol=0)
    np.testing.assert_allclose(named_state("+i 0", 2), np.kron(states["+i"], states["0"]), atol=0)
    # the handedness option swaps R and L
    np.testing.assert_allclose(named_state("R", 1, right_circular="H+iV"), states["L"], atol=0)
    ghz = named_state("GHZ", 3)
    assert ghz[0] == ghz[7] == pytest.approx(sq) and np.count_nonzero(ghz) == 2
    w = named_state("W", 3)
    # |100>, |010>, |001> with qubit 1 most significant: indices 4, 2, 1
    assert set(np.nonzero(w)[0]) == {1, 2, 4}
    np.testing.assert_allclose(w[[1, 2, 4]], 1 / np.sqrt(3), atol=1e-15)
    for name in NAMED_STATES:
        n = 2 if name.startswith(("phi", "psi")) else 4
        assert np.linalg.norm(named_state(name, n)) == pytest.approx(1, abs=1e-15)


@pytest.mark.parametrize("name,n,words", [
    ("phi+", 3, "two-qubit"), ("GHZ", 2, "three qubits"), ("W", 1, "three qubits"),
    ("ghz", 3, "'GHZ'"), ("HX", 2, "unknown state label 'X'"), ("HVH", 2, "names 3 qubit"),
    ("", 2, "empty"), ("Phi+", 2, "'phi+'"), (3, 2, "must be text"),
])
def test_bad_state_names_say_what_to_do(name, n, words):
    from gatescope.conventions import named_state

    with pytest.raises(ValueError) as info:
        named_state(name, n)
    assert words in str(info.value)
