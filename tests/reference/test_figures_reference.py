"""Figures of merit against published closed forms and independent formulas, each
with its source beside it."""

from __future__ import annotations

import importlib.util
import itertools

import numpy as np
import pytest
from gatescope import channels as ch
from gatescope.synth import noise as synth_noise
from gatescope import merit as fig
from gatescope.conventions import GATES, rz

needs_cvxpy = pytest.mark.skipif(importlib.util.find_spec("cvxpy") is None,
                                 reason="the diamond distance needs cvxpy (the sdp extra)")

SQ = 1 / np.sqrt(2)
I2 = np.eye(2, dtype=complex)
X = np.array([[0, 1], [1, 0]], dtype=complex)
Y = np.array([[0, -1j], [1j, 0]])
Z = np.diag([1.0, -1.0]).astype(complex)


def random_unitary(d, seed):
    rng = np.random.default_rng(seed)
    q, r = np.linalg.qr(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))
    return q * (np.diag(r) / abs(np.diag(r)))


def kraus_channel(kraus):
    """Choi matrix Σ_ij |i><j| ⊗ Φ(|i><j|) built entry by entry (the README's Conventions), not from the package."""
    d = kraus[0].shape[1]
    J = np.zeros((d * d, d * d), dtype=complex)
    for i, j in itertools.product(range(d), repeat=2):
        e = np.zeros((d, d), dtype=complex)
        e[i, j] = 1
        out = sum(k @ e @ k.conj().T for k in kraus)
        J[i * d:(i + 1) * d, j * d:(j + 1) * d] = out
    return J


# --------------------------------------------------------------------------
# Diamond distance
# --------------------------------------------------------------------------

@needs_cvxpy
@pytest.mark.parametrize("theta", [0.3, 1.2, 2.5])
def test_diamond_identity_vs_z_rotation(theta):
    # Watrous, The Theory of Quantum Information (2018), from memory: identity vs
    # Rz(θ) is 2 sin(θ/2) for 0 ≤ θ ≤ π.
    J = kraus_channel([rz(theta)])
    dn = fig.diamond_distance(J, I2)
    assert dn["status"] == "optimal" and dn["program"] == "trace-preserving"
    assert dn["value"] == pytest.approx(2 * np.sin(theta / 2), abs=1e-6)


@needs_cvxpy
def test_diamond_identity_vs_pauli_channel():
    # Watrous 2018, from memory: identity vs the Pauli channel
    # (1 − px − py − pz)ρ + px XρX + py YρY + pz ZρZ is 2(px + py + pz).
    px, py, pz = 0.02, 0.05, 0.1
    J = kraus_channel([np.sqrt(1 - px - py - pz) * I2, np.sqrt(px) * X, np.sqrt(py) * Y,
                       np.sqrt(pz) * Z])
    assert fig.diamond_distance(J, I2)["value"] == pytest.approx(2 * (px + py + pz), abs=1e-6)


@needs_cvxpy
def test_diamond_cnot_vs_cnot_then_target_rotation():
    # Watrous 2018, from memory: a unitary error Rz(0.1) after the gate is at diamond
    # distance 2 sin(0.05) from the gate.
    cnot = GATES["CNOT"]
    J = kraus_channel([np.kron(I2, rz(0.1)) @ cnot])
    assert fig.diamond_distance(J, cnot)["value"] == pytest.approx(2 * np.sin(0.05), abs=1e-6)


def _unitary_pair_closed_form(u, v):
    """‖Φ_U − Φ_V‖◇ = 2√(1 − δ²), δ the distance from 0 to the convex hull of the
    eigenvalues of U V† (Aharonov, Kitaev & Nisan, STOC 1998, from memory)."""
    angles = np.sort(np.angle(np.linalg.eigvals(u @ v.conj().T)))
    gaps = np.diff(np.concatenate([angles, [angles[0] + 2 * np.pi]]))
    arc = 2 * np.pi - gaps.max()                    # smallest arc holding every eigenvalue
    delta = np.cos(arc / 2) if arc < np.pi else 0.0
    return 2 * np.sqrt(1 - delta**2)


@needs_cvxpy
@pytest.mark.parametrize("d, seed", [(2, 1), (2, 2), (4, 3), (4, 4)])
def test_diamond_of_two_unitaries_matches_the_eigenvalue_formula(d, seed):
    u, v = random_unitary(d, seed), random_unitary(d, seed + 100)
    # a small error as well as a generic pair
    w = u @ np.diag(np.exp(1j * np.linspace(0, 0.4, d)))
    for a, b in ((u, v), (u, w)):
        got = fig.diamond_distance(kraus_channel([a]), b)["value"]
        assert got == pytest.approx(_unitary_pair_closed_form(a, b), abs=2e-6)


@needs_cvxpy
def test_diamond_of_a_lossy_copy_of_the_target():
    # The diamond norm of a channel is 1 (common practice), so a unitary channel that
    # loses 20% of its input is at distance ‖0.8Φ − Φ‖◇ = 0.2 from it; this goes
    # through the trace-decreasing form of the program.
    cz = GATES["CZ"]
    dn = fig.diamond_distance(0.8 * kraus_channel([cz]), cz)
    assert dn["program"] == "trace-decreasing"
    assert dn["value"] == pytest.approx(0.2, abs=1e-6)


def _general_watrous_program(delta, d):
    """‖Δ‖◇ for any linear map: max Re Tr(Δ† X) over [[ρ0⊗I, X], [X†, ρ1⊗I]] ⪰ 0, ρ0, ρ1
    density matrices (Watrous, Chicago J. Theor. Comput. Sci. 2013, article 8, from
    memory; written here in our input-first ordering), solved with SCS."""
    import cvxpy

    x = cvxpy.Variable((d * d, d * d), complex=True)
    r0 = cvxpy.Variable((d, d), hermitian=True)
    r1 = cvxpy.Variable((d, d), hermitian=True)
    eye = np.eye(d)
    block = cvxpy.bmat([[cvxpy.kron(r0, eye), x], [x.H, cvxpy.kron(r1, eye)]])
    problem = cvxpy.Problem(cvxpy.Maximize(cvxpy.real(cvxpy.trace(delta.conj().T @ x))),
                            [block >> 0, cvxpy.real(cvxpy.trace(r0)) == 1,
                             cvxpy.real(cvxpy.trace(r1)) == 1])
    problem.solve(solver="SCS", eps_abs=1e-9, eps_rel=1e-9, max_iters=100_000)
    return problem.value


@needs_cvxpy
@pytest.mark.parametrize("seed", [1, 2])
def test_diamond_of_a_trace_decreasing_map_matches_the_general_program(seed):
    # A random trace-decreasing map (a channel followed by loss that depends on the
    # output) against a random unitary.
    rng = np.random.default_rng(seed)
    kraus = ch.kraus_from_choi(synth_noise.random_channel(1, 2, seed))
    filt = np.diag(np.sqrt(rng.uniform(0.3, 0.9, 2)))
    J = kraus_channel([filt @ k for k in kraus])
    u = random_unitary(2, seed + 7)
    dn = fig.diamond_distance(J, u)
    assert dn["program"] == "trace-decreasing"
    want = _general_watrous_program(J - kraus_channel([u]), 2)
    assert dn["value"] == pytest.approx(want, abs=1e-6)


@needs_cvxpy
def test_diamond_against_qutip_for_random_channels():
    # QuTiP 5 `dnorm` (its own cvxpy program; SCS, so compare to ~1e-4). Its Choi
    # convention equals ours (tests/reference/test_qutip_conversions.py checks it), so the
    # superoperator comes from Kraus.
    qutip = pytest.importorskip("qutip")
    for seed in (1, 2):
        a = synth_noise.random_channel(1, 2, seed)
        b = synth_noise.random_channel(1, 3, seed + 10)
        ka, kb = (ch.kraus_from_choi(x) for x in (a, b))
        sa = qutip.kraus_to_super([qutip.Qobj(k) for k in ka])
        sb = qutip.kraus_to_super([qutip.Qobj(k) for k in kb])
        want = qutip.dnorm(sa, sb, solver="SCS", force_solve=True)
        assert fig.diamond_distance(a, b)["value"] == pytest.approx(want, abs=2e-4)


# --------------------------------------------------------------------------
# Unitarity
# --------------------------------------------------------------------------

@pytest.mark.parametrize("n", [1, 2])
@pytest.mark.parametrize("p", [0.0, 0.1, 0.5])
def test_unitarity_of_depolarizing_channel(n, p):
    # Wallman, Granade, Harper & Flammia, New J. Phys. 17, 113020 (2015):
    # u((1−p)ρ + p I/d) = (1 − p)².
    d = 2**n
    J = (1 - p) * kraus_channel([np.eye(d)]) + p * np.eye(d * d) / d
    assert fig.unitarity(J) == pytest.approx((1 - p) ** 2, abs=1e-13)


def _stabilizer_states(n):
    """All n-qubit stabilizer states (up to phase), from |0…0> under H, S and CNOT."""
    d = 2**n
    h = SQ * np.array([[1, 1], [1, -1]], dtype=complex)
    s = np.diag([1, 1j])
    gens = []
    for k in range(n):
        for g in (h, s):
            ops = [I2] * n
            ops[k] = g
            m = ops[0]
            for o in ops[1:]:
                m = np.kron(m, o)
            gens.append(m)
    if n == 2:
        gens.append(GATES["CNOT"])

    def key(v):
        k = np.flatnonzero(np.abs(v) > 1e-9)[0]
        w = v * abs(v[k]) / v[k]
        return tuple(np.round(w, 9).tolist())

    start = np.zeros(d, dtype=complex)
    start[0] = 1
    seen = {key(start): start}
    todo = [start]
    while todo:
        v = todo.pop()
        for g in gens:
            w = g @ v
            if key(w) not in seen:
                seen[key(w)] = w
                todo.append(w)
    return list(seen.values())


@pytest.mark.parametrize("n", [1, 2])
def test_unitarity_by_its_definition_over_a_state_design(n):
    # Wallman et al. 2015 (from memory for the form): u = d/(d−1) ∫dψ ‖Φ(ψ) − Φ(I/d)‖₂².
    # The integrand is quadratic in ψ, so the stabilizer states — a 3-design (Kueng &
    # Gross 2015; Webb 2016, from memory; 6 states for one qubit, 60 for two) — give the
    # integral exactly.
    states = _stabilizer_states(n)
    assert len(states) == {1: 6, 2: 60}[n]
    d = 2**n
    rng = np.random.default_rng(n)
    kraus = []
    for _ in range(3):
        kraus.append(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))
    # make Σ K†K = I
    m = sum(k.conj().T @ k for k in kraus)
    w, v = np.linalg.eigh(m)
    inv_root = v @ np.diag(w**-0.5) @ v.conj().T
    kraus = [k @ inv_root for k in kraus]
    J = kraus_channel(kraus)

    def phi(rho):
        return sum(k @ rho @ k.conj().T for k in kraus)

    mixed = phi(np.eye(d) / d)
    integral = np.mean([np.linalg.norm(phi(np.outer(s, s.conj())) - mixed) ** 2 for s in states])
    assert fig.unitarity(J) == pytest.approx(d / (d - 1) * integral, abs=1e-12)


# --------------------------------------------------------------------------
# Concurrence
# --------------------------------------------------------------------------

def test_concurrence_of_bell_and_product_states():
    # Wootters, Phys. Rev. Lett. 80, 2245 (1998): 1 for a Bell state, 0 for a product state.
    bell = np.array([1, 0, 0, 1]) * SQ
    assert fig.concurrence(np.outer(bell, bell.conj())) == pytest.approx(1.0, abs=1e-12)
    singlet = np.array([0, 1, -1, 0]) * SQ
    assert fig.concurrence(np.outer(singlet, singlet.conj())) == pytest.approx(1.0, abs=1e-12)
    a = np.array([0.6, 0.8j])
    b = np.array([SQ, -SQ])
    prod = np.kron(a, b)
    assert fig.concurrence(np.outer(prod, prod.conj())) == pytest.approx(0.0, abs=1e-7)


@pytest.mark.parametrize("p", [0.0, 0.2, 0.5, 0.9])
def test_concurrence_of_werner_states(p):
    # Wootters 1998 (from memory): the Werner state F|Φ+><Φ+| + (1−F)(I−|Φ+><Φ+|)/3 has
    # C = max(0, 2F − 1); here F = (1 − p) + p/4 for (1−p)|Φ+><Φ+| + p I/4.
    bell = np.array([1, 0, 0, 1]) * SQ
    rho = (1 - p) * np.outer(bell, bell) + p * np.eye(4) / 4
    f = (1 - p) + p / 4
    assert fig.concurrence(rho) == pytest.approx(max(0.0, 2 * f - 1), abs=1e-7)


def test_concurrence_of_a_pure_state_is_twice_the_determinant():
    # Wootters 1998: for a pure state a|00> + b|01> + c|10> + e|11>, C = 2|ae − bc|.
    rng = np.random.default_rng(4)
    for _ in range(5):
        v = rng.normal(size=4) + 1j * rng.normal(size=4)
        v /= np.linalg.norm(v)
        assert fig.concurrence(np.outer(v, v.conj())) == pytest.approx(
            2 * abs(v[0] * v[3] - v[1] * v[2]), abs=1e-7)
