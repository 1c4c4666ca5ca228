"""Figures of merit of a state (gatescope.merit.state) against published closed forms:
Werner states, Bell states, pure states, GHZ and W states, fidelity of rank-deficient
states, and the CHSH settings.
"""

from __future__ import annotations

import numpy as np
import pytest

from gatescope import merit
from gatescope.conventions import density, named_state
from gatescope.merit import state as sm
from support import random_density, random_ket

SQ = 1 / np.sqrt(2)
X = np.array([[0, 1], [1, 0]], dtype=complex)
Y = np.array([[0, -1j], [1j, 0]])
Z = np.diag([1.0, -1.0]).astype(complex)


def werner(p):
    """p|ψ−><ψ−| + (1 − p) I/4, ψ− = (HV − VH)/√2 written out here."""
    psi_minus = np.array([0, SQ, -SQ, 0], dtype=complex)
    return p * np.outer(psi_minus, psi_minus.conj()) + (1 - p) * np.eye(4) / 4


def bloch_op(v):
    return v[0] * X + v[1] * Y + v[2] * Z


def chsh_value(rho, a, a2, b, b2):
    """S = E(a,b) + E(a,b′) + E(a′,b) − E(a′,b′), E = Tr[ρ (a·σ)⊗(b·σ)] (Clauser, Horne,
    Shimony & Holt, Phys. Rev. Lett. 23, 880 (1969))."""
    op = (np.kron(bloch_op(a), bloch_op(b) + bloch_op(b2))
          + np.kron(bloch_op(a2), bloch_op(b) - bloch_op(b2)))
    return np.trace(rho @ op).real


def schmidt_coefficients(psi, n, qubit):
    """Schmidt coefficients of a pure n-qubit state across qubit k | rest, by an SVD."""
    t = np.moveaxis(psi.reshape((2,) * n), qubit - 1, 0).reshape(2, -1)
    return np.linalg.svd(t, compute_uv=False)


WERNER_P = [0.0, 0.2, 1 / 3, 0.4, 0.5, 0.6, 1 / np.sqrt(2), 0.75, 0.9, 1.0]


@pytest.mark.parametrize("p", WERNER_P)
def test_werner_states(p):
    rho = werner(p)
    # Wootters, PRL 80, 2245 (1998): Werner-state concurrence max(0, (3p − 1)/2)
    assert sm.concurrence(rho) == pytest.approx(max(0.0, (3 * p - 1) / 2), abs=1e-12)
    # Vidal & Werner, PRA 65, 032314 (2002) definition: negativity max(0, (3p − 1)/4)
    assert sm.negativity(rho) == pytest.approx(max(0.0, (3 * p - 1) / 4), abs=1e-12)
    assert sm.log_negativity(rho) == pytest.approx(np.log2(1 + max(0.0, (3 * p - 1) / 2)),
                                                   abs=1e-12)
    # Horodecki, Horodecki & Horodecki, Phys. Lett. A 200, 340 (1995): T = −p·I, so 2√2·p
    value, settings = sm.chsh_max(rho)
    assert value == pytest.approx(2 * np.sqrt(2) * p, abs=1e-12)
    if p > 0:
        assert chsh_value(rho, *(settings[k] for k in sm.CHSH_DETAIL_KEYS)) == pytest.approx(
            value, abs=1e-12)


def test_werner_violates_chsh_exactly_above_one_over_root_two():
    # Horodecki, Horodecki & Horodecki 1995: a Werner state violates CHSH iff p > 1/√2
    edge = 1 / np.sqrt(2)
    assert sm.chsh_max(werner(edge + 1e-9))[0] > 2
    assert sm.chsh_max(werner(edge - 1e-9))[0] < 2
    assert sm.chsh_max(werner(edge))[0] == pytest.approx(2.0, abs=1e-14)
    # entangled (p > 1/3) but no violation in between (Werner, PRA 40, 4277 (1989))
    assert sm.concurrence(werner(0.6)) > 0 and sm.chsh_max(werner(0.6))[0] < 2


@pytest.mark.parametrize("name", ["phi+", "phi-", "psi+", "psi-"])
def test_bell_states(name):
    rho = density(named_state(name, 2))
    details = {}
    f = sm.compute_state_figures(rho, named_state(name, 2), details)
    # Wootters 1998 and Vidal & Werner 2002: a Bell state has C = 1, E_F = 1 ebit,
    # negativity 1/2, log-negativity 1; Tsirelson's bound 2√2 (Cirel'son, Lett. Math.
    # Phys. 4, 93 (1980)) is reached
    expected = {"state_fidelity": 1, "purity": 1, "von_neumann_entropy": 0, "linear_entropy": 0,
                "concurrence": 1, "tangle": 1, "entanglement_of_formation": 1, "negativity": 0.5,
                "log_negativity": 1, "chsh_max": 2 * np.sqrt(2)}
    assert list(f) == list(sm.state_figure_names(2, True))
    for key, value in expected.items():
        assert f[key] == pytest.approx(value, abs=1e-12), key
    # the correlation matrix of a Bell state has |T_ii| = 1 (common practice)
    np.testing.assert_allclose(details["correlation_singular_values"], [1, 1, 1], atol=1e-14)


@pytest.mark.parametrize("seed", range(8))
def test_pure_two_qubit_states(seed):
    psi = random_ket(4, 200 + seed)
    rho = np.outer(psi, psi.conj())
    a, b, c, dd = psi
    conc = 2 * abs(a * dd - b * c)
    # Hill & Wootters, PRL 78, 5022 (1997): C = 2|ad − bc| for a pure state (rank 1:
    # checks the accuracy for rank-deficient ρ)
    assert sm.concurrence(rho) == pytest.approx(conc, abs=1e-13)
    # Bennett, DiVincenzo, Smolin & Wootters, PRA 54, 3824 (1996): for a pure state the
    # entanglement of formation is the entropy of either reduced state
    reduced = np.einsum("abcb->ac", rho.reshape(2, 2, 2, 2))
    w = np.clip(np.linalg.eigvalsh(reduced), 1e-300, None)
    assert sm.entanglement_of_formation(rho) == pytest.approx(-np.sum(w * np.log2(w)), abs=1e-10)
    # Vidal & Werner 2002: ‖ρ^{T_B}‖₁ = (Σ Schmidt coefficients)² for a pure state
    s = schmidt_coefficients(psi, 2, 1)
    assert sm.negativity(rho) == pytest.approx((s.sum() ** 2 - 1) / 2, abs=1e-13)
    # Gisin, Phys. Lett. A 154, 201 (1991); Popescu & Rohrlich, Phys. Lett. A 166, 293
    # (1992): the largest CHSH value of a pure state is 2√(1 + C²)
    assert sm.chsh_max(rho)[0] == pytest.approx(2 * np.sqrt(1 + conc ** 2), abs=1e-12)
    # purity 1 and zero entropy (common practice), exactly enough for a rank-1 input
    assert sm.purity(rho) == pytest.approx(1, abs=1e-14)
    assert abs(sm.von_neumann_entropy(rho)) < 1e-13
    # Coffman, Kundu & Wootters, PRA 61, 052306 (2000): the tangle is C²
    assert sm.tangle(rho) == pytest.approx(conc ** 2, abs=1e-13)


@pytest.mark.parametrize("n", [3, 4, 5])
def test_pure_state_bipartition_negativities(n):
    # Vidal & Werner 2002: a pure state has ‖ρ^{T}‖₁ = (Σ_i s_i)² over its Schmidt
    # coefficients across the cut
    psi = random_ket(2 ** n, 300 + n)
    rho = np.outer(psi, psi.conj())
    for k in range(1, n + 1):
        s = schmidt_coefficients(psi, n, k)
        assert sm.negativity(rho, k) == pytest.approx((s.sum() ** 2 - 1) / 2, abs=1e-12)


def test_ghz_and_w_negativities():
    # Schmidt coefficients across qubit k | rest (Vidal & Werner 2002 pure-state formula):
    # GHZ (1/√2, 1/√2) → 1/2; W_n (√(1/n), √((n−1)/n)) → √(n − 1)/n
    for n in (3, 4, 6):
        ghz = sm.compute_state_figures(density(named_state("GHZ", n)))
        w = sm.compute_state_figures(density(named_state("W", n)))
        assert list(ghz) == list(sm.state_figure_names(n, False))
        for k in range(1, n + 1):
            assert ghz[f"negativity_{k}"] == pytest.approx(0.5, abs=1e-12)
            assert w[f"negativity_{k}"] == pytest.approx(np.sqrt(n - 1) / n, abs=1e-12)


def test_maximally_mixed_states():
    # common practice: I/d has purity 1/d, n bits of entropy, linear entropy 1
    for n in (1, 2, 3):
        d = 2 ** n
        f = sm.compute_state_figures(np.eye(d) / d)
        assert f["purity"] == pytest.approx(1 / d, abs=1e-15)
        assert f["von_neumann_entropy"] == pytest.approx(n, abs=1e-13)
        assert f["linear_entropy"] == pytest.approx(1, abs=1e-14)
    assert list(sm.compute_state_figures(np.eye(2) / 2)) == ["purity", "von_neumann_entropy",
                                                             "linear_entropy"]


def qubit_fidelity(a, b):
    """Hübner, Phys. Lett. A 163, 239 (1992); Jozsa, J. Mod. Opt. 41, 2315 (1994):
    F = Tr(ρσ) + 2√(det ρ det σ) for two single-qubit states."""
    return (np.trace(a @ b).real
            + 2 * np.sqrt(max(np.linalg.det(a).real, 0) * max(np.linalg.det(b).real, 0)))


@pytest.mark.parametrize("seed", range(6))
def test_fidelity_of_rank_deficient_states(seed):
    # Two rank-2 states of two qubits inside one random 2-dimensional subspace: the
    # fidelity is invariant under the isometry (Uhlmann), so the qubit formula applies.
    rng = np.random.default_rng(400 + seed)
    iso, _ = np.linalg.qr(rng.normal(size=(4, 2)) + 1j * rng.normal(size=(4, 2)))
    a, b = random_density(2, 2, 500 + seed), random_density(2, 2, 600 + seed)
    rho, sigma = iso @ a @ iso.conj().T, iso @ b @ iso.conj().T
    expected = qubit_fidelity(a, b)
    assert sm.state_fidelity(rho, sigma) == pytest.approx(expected, abs=1e-12)
    assert sm.state_fidelity(sigma, rho) == pytest.approx(expected, abs=1e-12)
    # a pure ρ against a mixed target: F = <ψ|σ|ψ> (Nielsen & Chuang, §9.2.2)
    psi = iso @ random_ket(2, 700 + seed)
    assert sm.state_fidelity(np.outer(psi, psi.conj()), sigma) == pytest.approx(
        np.vdot(psi, sigma @ psi).real, abs=1e-13)


@pytest.mark.parametrize("seed", range(4))
def test_fidelity_of_commuting_rank_deficient_states(seed):
    # Nielsen & Chuang §9.2.2: commuting states have F = (Σ_i √(p_i q_i))² (classical)
    rng = np.random.default_rng(800 + seed)
    u, _ = np.linalg.qr(rng.normal(size=(8, 8)) + 1j * rng.normal(size=(8, 8)))
    p = np.array([0.5, 0.3, 0.2, 0, 0, 0, 0, 0])
    q = np.array([0.1, 0.6, 0, 0.3, 0, 0, 0, 0])
    rho = (u * p) @ u.conj().T
    sigma = (u * q) @ u.conj().T
    assert sm.state_fidelity(rho, sigma) == pytest.approx(np.sum(np.sqrt(p * q)) ** 2, abs=1e-13)


def test_pure_target_given_as_ket_or_density_matrix():
    # F(ρ, |ψ><ψ|) = <ψ|ρ|ψ> (Nielsen & Chuang, §9.2.2)
    rho = random_density(8, 3, 9)
    psi = named_state("W", 3)
    expected = np.vdot(psi, rho @ psi).real
    assert sm.state_fidelity(rho, psi) == pytest.approx(expected, abs=1e-15)
    assert sm.state_fidelity(rho, np.outer(psi, psi.conj())) == pytest.approx(expected, abs=1e-14)
    assert sm.state_fidelity(rho, 3j * psi) == pytest.approx(expected, abs=1e-15)  # normalised


@pytest.mark.parametrize("seed", range(6))
def test_chsh_settings_reach_the_maximum_and_nothing_beats_it(seed):
    psi = random_ket(4, 900 + seed)
    rho = 0.85 * np.outer(psi, psi.conj()) + 0.15 * random_density(4, 4, 950 + seed)
    value, settings = sm.chsh_max(rho)
    vectors = [settings[k] for k in sm.CHSH_DETAIL_KEYS]
    for v in vectors:
        assert np.linalg.norm(v) == pytest.approx(1, abs=1e-14)
    # the CHSH expression of Clauser, Horne, Shimony & Holt (1969) at the returned settings
    assert chsh_value(rho, *vectors) == pytest.approx(value, abs=1e-12)
    # Horodecki 1995: no setting does better; checked on random unit settings
    rng = np.random.default_rng(seed)
    trials = rng.normal(size=(300, 4, 3))
    trials /= np.linalg.norm(trials, axis=2, keepdims=True)
    assert max(abs(chsh_value(rho, *t)) for t in trials) <= value + 1e-12
    # Tsirelson's bound (Cirel'son 1980)
    assert value <= 2 * np.sqrt(2) + 1e-12


def test_chsh_settings_of_phi_plus_are_a_textbook_set():
    # For phi+ the correlation matrix is diag(1, −1, 1) (common practice): optimal settings
    # lie in a plane with a ⊥ a′, b ⊥ b′ and b, b′ at 45° to a.
    rho = density(named_state("phi+", 2))
    np.testing.assert_allclose(sm.correlation_matrix(rho), np.diag([1.0, -1.0, 1.0]), atol=1e-15)
    value, s = sm.chsh_max(rho)
    assert value == pytest.approx(2 * np.sqrt(2), abs=1e-14)
    assert abs(np.dot(s["chsh_a"], s["chsh_a_prime"])) < 1e-14
    assert abs(np.dot(s["chsh_b"], s["chsh_b_prime"])) < 1e-14
    t = sm.correlation_matrix(rho)
    assert s["chsh_a"] @ t @ s["chsh_b"] == pytest.approx(SQ, abs=1e-14)


def test_chsh_gap_warning_fires_where_the_maximum_has_a_kink():
    # psi− with reduced visibility: T = −diag(v, v, 1), t₂ = t₃ = v (common practice)
    psi = named_state("psi-", 2)
    rho = 0.97 * np.outer(psi, psi.conj())
    rho = 0.97 * rho + 0.03 * np.diag(np.diag(rho)) + 0.03 * np.eye(4) / 4
    details = {}
    sm.compute_state_figures(rho, psi, details)
    t = details["correlation_singular_values"]
    assert t[1] - t[2] < 1e-12
    assert "biased upward" in sm.chsh_gap_warning(details, 0.01)
    # well separated singular values: no warning
    separated = dict(details, correlation_singular_values=np.array([0.95, 0.9, 0.1]))
    assert sm.chsh_gap_warning(separated, 0.01) is None
    assert sm.chsh_gap_warning({}, 0.01) is None


def test_compute_figures_of_a_state_through_the_package():
    # merit.compute_figures with kind="state" is compute_state_figures
    rho = werner(0.8)
    details = {}
    figs = merit.compute_figures(rho, named_state("psi-", 2), kind="state", details=details)
    assert figs == sm.compute_state_figures(rho, named_state("psi-", 2))
    assert set(sm.CHSH_DETAIL_KEYS) <= set(details)
    # the process concurrence uses the same function on the normalised output state
    assert merit.concurrence(3 * rho) == pytest.approx(sm.concurrence(rho), abs=1e-15)


def test_partial_transpose_checks_its_qubit():
    with pytest.raises(ValueError, match="between 1 and 2"):
        sm.partial_transpose(np.eye(4) / 4, 3)
    with pytest.raises(ValueError, match="two qubits"):
        sm.concurrence(np.eye(8) / 8)
