"""Textbook values and trade facts, each with its source beside it."""

from __future__ import annotations

import itertools

import gatescope as gs
import numpy as np
import pytest
from gatescope import channels as ch
from gatescope.synth import noise as synth_noise
from gatescope import merit as fig
from gatescope.conventions import GATES, half_wave, quarter_wave, rz
from gatescope.model import MeasurementModel

SQ = 1 / np.sqrt(2)
KET = {
    "H": np.array([1, 0], dtype=complex), "V": np.array([0, 1], dtype=complex),
    "D": np.array([SQ, SQ], dtype=complex), "A": np.array([SQ, -SQ], dtype=complex),
    "R": np.array([SQ, -1j * SQ]), "L": np.array([SQ, 1j * SQ]),
}
PAULI = {"I": np.eye(2, dtype=complex), "X": np.array([[0, 1], [1, 0]], dtype=complex),
         "Y": np.array([[0, -1j], [1j, 0]]), "Z": np.diag([1, -1]).astype(complex)}


def same_ray(a, b, tol=1e-12) -> bool:
    """True when the kets a and b differ only by a global phase."""
    return abs(abs(np.vdot(a, b)) - np.linalg.norm(a) * np.linalg.norm(b)) < tol


def random_density(d, seed):
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    rho = g @ g.conj().T
    return rho / np.trace(rho)


# --------------------------------------------------------------------------
# Chi matrices
# --------------------------------------------------------------------------

@pytest.mark.parametrize("p", [0.0, 0.1, 0.5, 1.0])
def test_chi_of_depolarizing_channel(p):
    # (1−p)ρ + p I/2 has χ = diag(1 − 3p/4, p/4, p/4, p/4) on (I, X, Y, Z):
    # Nielsen & Chuang, Quantum Computation and Quantum Information, §8.3
    # (the depolarizing channel written as (1−p)ρ + p/4 (ρ + XρX + YρY + ZρZ)).
    chi = ch.choi_to_chi(synth_noise.depolarizing(p, 2))
    expected = np.diag([1 - 3 * p / 4, p / 4, p / 4, p / 4])
    np.testing.assert_allclose(chi, expected, rtol=0, atol=1e-14)


def test_chi_of_cnot():
    # CNOT = ½(II + IX + ZI − ZX), from |0><0| = (I+Z)/2 and |1><1| = (I−Z)/2
    # (common practice), so χ = a a† with a = ½(1, 1, 1, −1) on (II, IX, ZI, ZX).
    labels = ["".join(p) for p in itertools.product("IXYZ", repeat=2)]
    a = np.zeros(16)
    for lab, coef in [("II", 0.5), ("IX", 0.5), ("ZI", 0.5), ("ZX", -0.5)]:
        a[labels.index(lab)] = coef
    # the expansion itself, so that a typo in `a` cannot hide
    expansion = sum(a[labels.index(lab)] * np.kron(PAULI[lab[0]], PAULI[lab[1]])
                    for lab in ("II", "IX", "ZI", "ZX"))
    np.testing.assert_allclose(expansion, GATES["CNOT"], atol=1e-15)
    chi = ch.choi_to_chi(ch.choi_from_unitary(GATES["CNOT"]))
    np.testing.assert_allclose(chi, np.outer(a, a), rtol=0, atol=1e-14)


def test_chi_has_d4_real_parameters_and_d4_minus_d2_after_trace_preservation():
    # A d²×d² Hermitian χ has d⁴ real parameters; trace preservation removes d²
    # of them, leaving d⁴ − d² (12 for one qubit): Nielsen & Chuang §8.4.2
    # (from memory for the section). Counted here as the dimension of the kernel
    # of the linear map J ↦ Tr_out J on Hermitian matrices.
    for n in (1, 2):
        d = 2 ** n
        basis = []
        for i in range(d * d):
            for j in range(i, d * d):
                for part in ((1.0,) if i == j else (1.0, 1j)):
                    m = np.zeros((d * d, d * d), dtype=complex)
                    m[i, j] = part
                    m[j, i] = np.conj(part)
                    basis.append(m)
        assert len(basis) == d ** 4
        images = np.array([ch.partial_trace_output(b).reshape(-1) for b in basis])
        real_images = np.concatenate([images.real, images.imag], axis=1)
        free = d ** 4 - np.linalg.matrix_rank(real_images)
        assert free == d ** 4 - d ** 2
        assert free == (12 if n == 1 else 240)


def test_one_qubit_identifiability_counts_twelve_parameters(make_experiment):
    # 16 real parameters of χ, 12 free after trace preservation (see above);
    # complete six-state data determine all 12.
    exp, _ = make_experiment("H", shots=500, seed=3)
    ident = MeasurementModel(exp).identifiability()
    assert ident.n_parameters == 12
    assert ident.rank == 12
    assert ident.complete


def test_four_state_sets_are_complete_too(make_experiment):
    # H, V, D, R per qubit are tomographically complete (common practice; the
    # two-qubit polarisation scheme of James, Kwiat, Munro & White, PRA 64,
    # 052312 (2001), uses them), with 4 × 4 = 16 settings for one qubit.
    exp, _ = make_experiment("H", shots=500, seed=3, prep=("H", "V", "D", "R"), meas=("H", "V", "D", "R"))
    assert exp.n_rows == 16
    ident = MeasurementModel(exp).identifiability()
    assert (ident.rank, ident.n_parameters) == (12, 12)


def test_six_state_scheme_has_36_settings_per_qubit(make_experiment):
    # Six input states × six analyser projectors = 36 settings for one qubit,
    # 36² = 1296 for two (common practice).
    exp1, _ = make_experiment("X", shots=100, seed=1)
    assert exp1.n_qubits == 1 and exp1.n_rows == 36
    assert exp1.prep_states.shape == (6, 2, 2) and exp1.meas_effects.shape == (6, 2, 2)
    exp2, _ = make_experiment("CZ", shots=100, seed=1)
    assert exp2.n_qubits == 2 and exp2.n_rows == 36 * 36


# --------------------------------------------------------------------------
# Fidelities
# --------------------------------------------------------------------------

def mutually_unbiased_states(n):
    """All states of d + 1 mutually unbiased bases (d = 2 or 4).

    One qubit: the eigenbases of X, Y, Z. Two qubits: the common eigenbases of
    the five commuting triples of Pauli strings {ZI, IZ, ZZ}, {XI, IX, XX},
    {YI, IY, YY}, {XY, YZ, ZX}, {YX, ZY, XZ} (common practice).
    """
    if n == 1:
        groups = [("X",), ("Y",), ("Z",)]
    else:
        groups = [("ZI", "IZ"), ("XI", "IX"), ("YI", "IY"), ("XY", "YZ"), ("YX", "ZY")]
    states = []
    for group in groups:
        ops = [np.kron(PAULI[g[0]], PAULI[g[1]]) if len(g) == 2 else PAULI[g] for g in group]
        generic = sum((k + 1) * o for k, o in enumerate(ops))       # distinct eigenvalues
        _, vecs = np.linalg.eigh(generic)
        states.extend(vecs.T)
    return states


@pytest.mark.parametrize("n", [1, 2])
def test_average_gate_fidelity_formula_against_a_two_design(n):
    # F_avg = (d·F_pro + 1)/(d + 1): Horodecki, Horodecki & Horodecki, PRA 60, 1888
    # (1999); Nielsen, Phys. Lett. A 303, 249 (2002). F_avg is the Haar average of
    # <ψ|U†Φ(ψ)U|ψ>; a full set of d + 1 mutually unbiased bases is a complex
    # projective 2-design (Klappenecker & Rötteler, Proc. IEEE ISIT 2005, from memory
    # for the venue), so the average over its d(d + 1) states is exact.
    d = 2 ** n
    states = mutually_unbiased_states(n)
    assert len(states) == d * (d + 1)
    # the 2-design property itself: the second moment equals the Haar one,
    # (I + SWAP)/(d(d + 1)) on the symmetric subspace (common practice)
    swap = np.zeros((d * d, d * d))
    for i, j in itertools.product(range(d), repeat=2):
        swap[i * d + j, j * d + i] = 1
    moment = sum(np.kron(np.outer(s, s.conj()), np.outer(s, s.conj())) for s in states) / len(states)
    np.testing.assert_allclose(moment, (np.eye(d * d) + swap) / (d * (d + 1)), atol=1e-14)

    target = GATES["H"] if n == 1 else GATES["CNOT"]
    channels = [synth_noise.random_channel(n, r, seed=40 + r) for r in (1, 2, 3)]
    channels.append(synth_noise.build_channel("H" if n == 1 else "CNOT", [("amplitude-damping", 0.15)], n))
    for J in channels:
        design_avg = np.mean([np.vdot(target @ s, ch.apply_channel(J, np.outer(s, s.conj())) @ (target @ s)).real
                              for s in states])
        f_pro = fig.process_fidelity(J, target)
        assert design_avg == pytest.approx((d * f_pro + 1) / (d + 1), abs=1e-13)
        assert fig.average_gate_fidelity(J, target) == pytest.approx(design_avg, abs=1e-13)


def test_process_fidelity_cnot_vs_cz():
    # F_pro(U, V) = |Tr U†V|²/d² for unitaries (Gilchrist, Langford & Nielsen,
    # PRA 71, 062310 (2005), from memory); Tr(CNOT† CZ) = 2, so F_pro = 4/16 = 0.25.
    value = fig.process_fidelity(ch.choi_from_unitary(GATES["CZ"]), GATES["CNOT"])
    assert value == pytest.approx(0.25, abs=1e-15)
    value = fig.process_fidelity(ch.choi_from_unitary(GATES["CNOT"]), GATES["CZ"])
    assert value == pytest.approx(0.25, abs=1e-15)


def test_process_fidelity_cnot_followed_by_target_rz():
    # |Tr(I ⊗ Rz(θ))|²/16 = cos²(θ/2) (same formula as above); θ = 0.1.
    J = ch.compose(ch.choi_from_unitary(GATES["CNOT"]),
                   ch.choi_from_unitary(np.kron(np.eye(2), rz(0.1))))
    assert fig.process_fidelity(J, GATES["CNOT"]) == pytest.approx(np.cos(0.05) ** 2, abs=1e-15)
    assert fig.average_gate_fidelity(J, GATES["CNOT"]) == pytest.approx(
        (4 * np.cos(0.05) ** 2 + 1) / 5, abs=1e-15)


# --------------------------------------------------------------------------
# Wave plates (Jones calculus of the README's Conventions) and dephasing
# --------------------------------------------------------------------------

def test_half_wave_plate_at_zero_is_pauli_z():
    # Common practice: a half-wave plate with its fast axis along H acts as Pauli
    # Z up to a global phase: H → H, V → −V, D ↔ A.
    w = half_wave(0.0)
    phase = w[0, 0]
    np.testing.assert_allclose(w / phase, PAULI["Z"], atol=1e-15)
    np.testing.assert_allclose(w @ KET["H"], phase * KET["H"], atol=1e-15)
    np.testing.assert_allclose(w @ KET["V"], -phase * KET["V"], atol=1e-15)
    np.testing.assert_allclose(w @ KET["D"], phase * KET["A"], atol=1e-15)
    np.testing.assert_allclose(w @ KET["A"], phase * KET["D"], atol=1e-15)


def test_half_wave_plate_at_22_5_turns_h_into_d():
    # Common practice: a half-wave plate at 22.5° rotates linear polarisation by 45°.
    out = half_wave(np.radians(22.5)) @ KET["H"]
    assert same_ray(out, KET["D"])
    assert not same_ray(out, KET["A"])


def test_quarter_wave_plate_at_45_turns_h_into_right_circular():
    # Common practice: a quarter-wave plate at 45° makes circular light from H;
    # with the default handedness R = (H − iV)/√2 (the README's Conventions) it is R.
    out = quarter_wave(np.radians(45.0)) @ KET["H"]
    assert same_ray(out, KET["R"])
    assert not same_ray(out, KET["L"])


def _read_plate_states(tmp_path, plates_by_name, right_circular=None):
    lines = ['qubits = 1', 'counts = "counts.csv"']
    if right_circular:
        lines += ["[conventions]", f'right_circular = "{right_circular}"']
    rows = ["prep,meas,counts"]
    for name, plates in plates_by_name.items():
        inner = ", ".join("{ kind = \"%s\", angle_deg = %r }" % p for p in plates)
        lines += [f"[states.{name}]", f"plates = [ {inner} ]"]
        rows.append(f"{name},{name},1")
    (tmp_path / "experiment.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (tmp_path / "counts.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    exp = gs.read_experiment(tmp_path / "experiment.toml")
    return {name: (exp.prep_states[exp.prep_index[k]], exp.meas_effects[exp.meas_index[k]])
            for k, name in enumerate(plates_by_name)}


def test_plate_settings_read_from_a_file_make_the_trade_states(tmp_path):
    # The same trade facts through the reader's `plates` states (common practice):
    # source H, then the listed plates.
    got = _read_plate_states(tmp_path, {
        "Hzero": [("half", 0.0)],
        "Dmade": [("half", 22.5)],
        "Rmade": [("quarter", 45.0)],
        "Amade": [("half", -22.5)],
    })
    proj = {k: np.outer(v, v.conj()) for k, v in KET.items()}
    np.testing.assert_allclose(got["Hzero"][0], proj["H"], atol=1e-15)
    np.testing.assert_allclose(got["Dmade"][0], proj["D"], atol=1e-15)
    np.testing.assert_allclose(got["Rmade"][0], proj["R"], atol=1e-15)
    np.testing.assert_allclose(got["Amade"][0], proj["A"], atol=1e-15)
    # Analysis with a half-wave plate at 22.5° before an H polariser measures D
    # (common practice: the D/A analyser).
    np.testing.assert_allclose(got["Dmade"][1], proj["D"], atol=1e-15)


def test_full_dephasing_removes_off_diagonal_terms():
    # Common practice: ρ ↦ (1−p)ρ + pZρZ at p = 1/2 is complete dephasing in the
    # H/V basis: off-diagonal terms vanish, populations stay.
    for n in (1, 2):
        d = 2 ** n
        rho = random_density(d, seed=n)
        out = ch.apply_channel(synth_noise.dephasing(0.5, n), rho)
        np.testing.assert_allclose(out, np.diag(np.diag(rho)), atol=1e-15)
        assert np.abs(rho - np.diag(np.diag(rho))).max() > 0.05     # there was something to remove
    # and partial dephasing scales the coherence by 1 − 2p
    rho = random_density(2, seed=7)
    out = ch.apply_channel(synth_noise.dephasing(0.2, 1), rho)
    assert out[0, 1] == pytest.approx(0.6 * rho[0, 1], abs=1e-15)
