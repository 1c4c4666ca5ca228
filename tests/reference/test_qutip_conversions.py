"""Our channel representations and figures against QuTiP's superoperator functions.

Reference: QuTiP 5.3 (Johansson, Nation & Nori, Comput. Phys. Commun. 183,
1760 (2012), for the library), its
functions ``to_super``, ``to_choi``, ``to_chi``, ``to_superpauli``,
``to_kraus``, ``kraus_to_super``, ``super_tensor``, ``process_fidelity`` and
``average_gate_fidelity`` only. Reference channels are built on the QuTiP
side from Kraus operators written out in this file, not from our helpers.

QuTiP's conventions, converted (never bent into ours):

* ``to_choi`` is our Choi matrix exactly (input factor first, column
  stacking, Tr J = d).
* ``to_chi`` has trace d² and the Pauli basis (I, X, −Y, Z), so
  chi_qutip = d² · (σσᵀ) ∘ χ with σ_m = (−1)^(number of Y in m).
* ``to_superpauli`` carries the same σσᵀ sign on our Pauli transfer matrix.
* ``process_fidelity`` (v5) is the squared, Choi-state fidelity — ours.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from gatescope import channels as ch
from gatescope.synth import noise as synth_noise
from gatescope import merit as fig
from gatescope.conventions import GATES, pauli_labels, rz

qutip = pytest.importorskip("qutip", minversion="5.0")

ATOL = 1e-12


# --------------------------------------------------------------------------
# QuTiP-side helpers
# --------------------------------------------------------------------------

def q_oper(m: np.ndarray, n: int):
    return qutip.Qobj(np.asarray(m, dtype=complex), dims=[[2] * n, [2] * n])


def q_choi(choi: np.ndarray, n: int):
    """Our Choi matrix handed to QuTiP as a Choi-represented superoperator."""
    return qutip.Qobj(choi, dims=[[[2] * n, [2] * n], [[2] * n, [2] * n]], superrep="choi")


def q_kraus(kraus, n: int):
    return qutip.kraus_to_super([q_oper(k, n) for k in kraus])


def q_unitary(u: np.ndarray, n: int):
    return qutip.to_super(q_oper(u, n))


def q_paulis(n: int):
    """n-qubit Pauli strings as QuTiP operators, labels built here (I<X<Y<Z, qubit 1 first)."""
    single = {"I": qutip.qeye(2), "X": qutip.sigmax(), "Y": qutip.sigmay(), "Z": qutip.sigmaz()}
    labels = ["".join(p) for p in itertools.product("IXYZ", repeat=n)]
    return labels, [qutip.tensor(*[single[c] for c in lab]) for lab in labels]


def y_signs(n: int) -> np.ndarray:
    """σ_m = (−1)^(number of Y in m): QuTiP's chi basis uses −Y where we use Y."""
    labels, _ = q_paulis(n)
    return np.array([(-1.0) ** lab.count("Y") for lab in labels])


# Single-qubit noise, written out as Kraus operators (README, "Commands", parameterisation).
def kraus_dephasing(p):
    # ρ ↦ (1−p)ρ + p ZρZ
    return [np.sqrt(1 - p) * np.eye(2), np.sqrt(p) * np.diag([1.0, -1.0])]


def kraus_amplitude_damping(g):
    # the README's pair, the textbook amplitude-damping Kraus operators
    # (Nielsen & Chuang, Quantum Computation and Quantum Information, §8.3.5)
    return [np.array([[1, 0], [0, np.sqrt(1 - g)]]), np.array([[0, np.sqrt(g)], [0, 0]])]


def q_each_qubit(kraus_1q, n: int):
    single = q_kraus(kraus_1q, 1)
    return qutip.super_tensor(*([single] * n)) if n > 1 else single


def q_depolarizing(p: float, n: int):
    """(1−p)ρ + p I/d through the Pauli twirl (1/d²) Σ_P P ρ P = Tr(ρ) I/d (common practice)."""
    d = 2 ** n
    _, paulis = q_paulis(n)
    kraus = [np.sqrt(1 - p + p / d**2) * paulis[0].full()]
    kraus += [np.sqrt(p / d**2) * P.full() for P in paulis[1:]]
    return q_kraus(kraus, n)


def q_zz(phi: float, n: int):
    """exp(−iφ Z⊗Z/2) on each neighbouring pair, built with QuTiP's own expm."""
    total = qutip.qeye([2] * n)
    for k in range(n - 1):
        ops = [qutip.qeye(2)] * n
        ops[k] = qutip.sigmaz()
        ops[k + 1] = qutip.sigmaz()
        total = (-0.5j * phi * qutip.tensor(*ops)).expm() * total
    return qutip.to_super(total)


def n_of_gate(name: str) -> int:
    return int(round(np.log2(GATES[name].shape[0])))


RANDOM_CASES = [(1, 1, 11), (1, 2, 12), (1, 4, 13), (2, 1, 21), (2, 3, 22), (2, 16, 23)]


def random_case(n, rank, seed):
    return synth_noise.random_channel(n, rank, seed=seed)


# --------------------------------------------------------------------------
# Choi matrix
# --------------------------------------------------------------------------

@pytest.mark.parametrize("name", sorted(GATES))
def test_choi_of_named_gate_equals_qutip_to_choi(name):
    u = GATES[name]
    n = n_of_gate(name)
    ours = ch.choi_from_unitary(u)
    ref = qutip.to_choi(q_unitary(u, n)).full()
    np.testing.assert_allclose(ours, ref, rtol=0, atol=ATOL)


@pytest.mark.parametrize("n", [1, 2])
@pytest.mark.parametrize("kind,value", [("dephasing", 0.13), ("amplitude-damping", 0.27),
                                        ("depolarizing", 0.31)])
def test_noise_channels_equal_qutip_from_kraus(kind, value, n):
    ours = synth_noise.noise_channel(kind, value, n)
    if kind == "dephasing":
        ref = q_each_qubit(kraus_dephasing(value), n)
    elif kind == "amplitude-damping":
        ref = q_each_qubit(kraus_amplitude_damping(value), n)
    else:
        ref = q_depolarizing(value, n)
    np.testing.assert_allclose(ours, qutip.to_choi(ref).full(), rtol=0, atol=ATOL)


def test_zz_phase_equals_qutip_expm():
    ours = synth_noise.noise_channel("zz", 0.37, 2)
    ref = qutip.to_choi(q_zz(0.37, 2)).full()
    np.testing.assert_allclose(ours, ref, rtol=0, atol=ATOL)


def test_gate_followed_by_noise_in_order_equals_qutip_product():
    # README, "Commands": noise acts after the gate, in the order given. With column
    # stacking the superoperator of "A then B" is S_B · S_A.
    noise = [("zz", 0.2), ("amplitude-damping", 0.1), ("dephasing", 0.05), ("depolarizing", 0.03)]
    ours = synth_noise.build_channel("CZ", noise, 2)
    s = q_unitary(GATES["CZ"], 2)
    s = q_zz(0.2, 2) * s
    s = q_each_qubit(kraus_amplitude_damping(0.1), 2) * s
    s = q_each_qubit(kraus_dephasing(0.05), 2) * s
    s = q_depolarizing(0.03, 2) * s
    np.testing.assert_allclose(ours, qutip.to_choi(s).full(), rtol=0, atol=ATOL)
    # The order matters for these terms, so the check above can tell the two apart.
    swapped = q_depolarizing(0.03, 2) * q_each_qubit(kraus_dephasing(0.05), 2) \
        * q_zz(0.2, 2) * q_each_qubit(kraus_amplitude_damping(0.1), 2) * q_unitary(GATES["CZ"], 2)
    assert np.abs(qutip.to_choi(swapped).full() - ours).max() > 1e-3


@pytest.mark.parametrize("n,rank,seed", RANDOM_CASES)
def test_random_channel_is_cptp_for_qutip_with_the_requested_rank(n, rank, seed):
    J = random_case(n, rank, seed)
    c = q_choi(J, n)
    assert c.iscptp
    assert np.linalg.matrix_rank(J, tol=1e-10) == rank


@pytest.mark.parametrize("n,rank,seed", RANDOM_CASES)
def test_kraus_round_trip_through_qutip(n, rank, seed):
    J = random_case(n, rank, seed)
    # ours -> QuTiP: our Kraus operators give QuTiP's Choi matrix back as our J
    ours_kraus = ch.kraus_from_choi(J)
    assert len(ours_kraus) == rank
    np.testing.assert_allclose(qutip.to_choi(q_kraus(ours_kraus, n)).full(), J, rtol=0, atol=ATOL)
    # QuTiP -> ours: QuTiP's Kraus operators give our J back
    their_kraus = [k.full() for k in qutip.to_kraus(q_choi(J, n))]
    np.testing.assert_allclose(ch.choi_from_kraus(their_kraus), J, rtol=0, atol=ATOL)


# --------------------------------------------------------------------------
# Superoperator (column stacking, like QuTiP's to_super)
# --------------------------------------------------------------------------

@pytest.mark.parametrize("n,rank,seed", RANDOM_CASES)
def test_superoperator_equals_qutip_to_super(n, rank, seed):
    J = random_case(n, rank, seed)
    s_ref = qutip.to_super(q_choi(J, n))
    np.testing.assert_allclose(ch.choi_to_superop(J), s_ref.full(), rtol=0, atol=ATOL)
    np.testing.assert_allclose(ch.superop_to_choi(s_ref.full()), J, rtol=0, atol=ATOL)


@pytest.mark.parametrize("n,rank,seed", RANDOM_CASES)
def test_channel_action_matches_qutip_on_column_stacked_vectors(n, rank, seed):
    J = random_case(n, rank, seed)
    d = 2 ** n
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    rho = g @ g.conj().T
    rho /= np.trace(rho)
    s_ref = qutip.to_super(q_choi(J, n))
    out_ref = qutip.vector_to_operator(s_ref * qutip.operator_to_vector(q_oper(rho, n))).full()
    np.testing.assert_allclose(ch.apply_channel(J, rho), out_ref, rtol=0, atol=ATOL)
    # column stacking, as QuTiP's operator_to_vector: vec(X)[b*d + a] = X[a, b]
    vec = qutip.operator_to_vector(q_oper(rho, n)).full().ravel()
    np.testing.assert_allclose(vec, rho.T.reshape(-1), rtol=0, atol=0)
    np.testing.assert_allclose(ch.choi_to_superop(J) @ vec, out_ref.T.reshape(-1), rtol=0, atol=ATOL)


# --------------------------------------------------------------------------
# Chi matrix and Pauli transfer matrix
# --------------------------------------------------------------------------

def chi_cases():
    cases = [pytest.param(random_case(*c), c[0], id=f"random-{c[0]}q-rank{c[1]}") for c in RANDOM_CASES]
    for name in ("H", "S", "T", "Y", "CNOT", "iSWAP", "sqrtSWAP"):
        cases.append(pytest.param(ch.choi_from_unitary(GATES[name]), n_of_gate(name), id=name))
    cases.append(pytest.param(synth_noise.build_channel("CZ", [("amplitude-damping", 0.2), ("zz", 0.3)], 2), 2,
                              id="CZ+noise"))
    cases.append(pytest.param(synth_noise.build_channel("S", [("amplitude-damping", 0.3)], 1), 1, id="S+ad"))
    return cases


def test_our_pauli_order_is_the_contract_order():
    assert pauli_labels(1) == ["I", "X", "Y", "Z"]
    assert pauli_labels(2) == [a + b for a in "IXYZ" for b in "IXYZ"]
    assert pauli_labels(2) == q_paulis(2)[0]


@pytest.mark.parametrize("J,n", chi_cases())
def test_chi_equals_qutip_to_chi_after_basis_conversion(J, n):
    d = 2 ** n
    chi = ch.choi_to_chi(J)
    ref = qutip.to_chi(q_choi(J, n)).full()
    assert np.trace(ref).real == pytest.approx(d**2, abs=1e-10)       # QuTiP: Tr chi = d²
    assert np.trace(chi).real == pytest.approx(1.0, abs=1e-12)        # ours: Tr chi = 1 (TP)
    sigma = y_signs(n)
    np.testing.assert_allclose(d**2 * np.outer(sigma, sigma) * chi, ref, rtol=0, atol=1e-11)
    np.testing.assert_allclose(ch.chi_to_choi(chi), J, rtol=0, atol=ATOL)


def test_chi_sign_conversion_is_needed_at_all():
    # H·S ∝ −iI + X − Y + Z, so its χ pairs Pauli strings with an odd and an even
    # number of Y: the σσᵀ factor changes entries and the conversion is not a no-op.
    J = ch.choi_from_unitary(GATES["H"] @ GATES["S"])
    chi = ch.choi_to_chi(J)
    ref = qutip.to_chi(q_choi(J, 1)).full()
    assert np.abs(4 * chi - ref).max() > 0.1


@pytest.mark.parametrize("J,n", chi_cases())
def test_ptm_equals_qutip_to_superpauli_after_basis_conversion(J, n):
    ptm = ch.choi_to_ptm(J)
    assert ptm.dtype == np.float64
    s = qutip.to_super(q_choi(J, n))
    ref = qutip.to_superpauli(s).full()
    assert np.abs(ref.imag).max() < 1e-12
    sigma = y_signs(n)
    np.testing.assert_allclose(np.outer(sigma, sigma) * ptm, ref.real, rtol=0, atol=1e-12)
    np.testing.assert_allclose(ch.ptm_to_choi(ptm), J, rtol=0, atol=ATOL)


def test_ptm_definition_against_qutip_channel_action():
    # R_ij = Tr(P_i Φ(P_j))/d, with Φ applied by QuTiP
    n = 2
    d = 4
    J = random_case(2, 3, 22)
    s_ref = qutip.to_super(q_choi(J, n))
    _, paulis = q_paulis(n)
    ref = np.array([[(Pi * qutip.vector_to_operator(s_ref * qutip.operator_to_vector(Pj))).tr().real / d
                     for Pj in paulis] for Pi in paulis])
    np.testing.assert_allclose(ch.choi_to_ptm(J), ref, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------
# Figures of merit
# --------------------------------------------------------------------------

# QuTiP computes fidelities through matrix square roots, accurate only to ~2e−8
# for rank-deficient Choi matrices (measured, see the project's reference notes).
FID_TOL = 1e-7


def fidelity_cases():
    cases = []
    for (n, rank, seed) in RANDOM_CASES:
        target = "H" if n == 1 else "CNOT"
        cases.append(pytest.param(random_case(n, rank, seed), GATES[target], n,
                                  id=f"random-{n}q-rank{rank}-vs-{target}"))
    cases.append(pytest.param(synth_noise.build_channel("CZ", [("zz", 0.1), ("depolarizing", 0.05)], 2),
                              GATES["CZ"], 2, id="noisy-CZ"))
    cases.append(pytest.param(synth_noise.build_channel("T", [("amplitude-damping", 0.2)], 1), GATES["T"], 1,
                              id="damped-T"))
    cases.append(pytest.param(ch.choi_from_unitary(rz(0.3)), np.eye(2), 1, id="Rz-vs-I"))
    return cases


@pytest.mark.parametrize("J,u,n", fidelity_cases())
def test_process_fidelity_equals_qutip(J, u, n):
    ref = qutip.process_fidelity(q_choi(J, n), q_oper(u, n))
    assert fig.process_fidelity(J, u) == pytest.approx(ref, abs=FID_TOL)


@pytest.mark.parametrize("J,u,n", fidelity_cases())
def test_average_gate_fidelity_equals_qutip(J, u, n):
    ref = qutip.average_gate_fidelity(q_choi(J, n), q_oper(u, n))
    assert fig.average_gate_fidelity(J, u) == pytest.approx(ref, abs=FID_TOL)


@pytest.mark.parametrize("a,b", list(itertools.combinations(
    [g for g in sorted(GATES) if GATES[g].shape[0] == 4], 2)))
def test_process_fidelity_between_named_gates_equals_qutip(a, b):
    ref = qutip.process_fidelity(q_unitary(GATES[a], 2), q_oper(GATES[b], 2))
    assert fig.process_fidelity(ch.choi_from_unitary(GATES[a]), GATES[b]) == pytest.approx(ref, abs=FID_TOL)


def test_process_fidelity_ignores_global_phase_of_the_target():
    J = random_case(1, 2, 12)
    u = GATES["S"]
    ours = fig.process_fidelity(J, np.exp(0.7j) * u)
    assert ours == pytest.approx(fig.process_fidelity(J, u), abs=1e-14)
    assert ours == pytest.approx(qutip.process_fidelity(q_choi(J, 1), q_oper(u, 1)), abs=FID_TOL)
